"""Band families found by projecting the ridge pixels across every direction (private to the package).

Stage 6b of :func:`tracefit.image.detect_bands`. The Hough candidates and full-resolution
band fits of stages 4-6 need each band to hold enough pixels for a line fit of its own.
Slip bands in the small grains of a strain map are short, wavy and unevenly bright, and
a grain holds two or three crossing families: most of their bands fail the per-band fit
and the family falls apart. Here all bands of a direction are judged together. The
aligned ridge pixels are projected across each tested direction (a Radon transform of
the ridge map, Radon 1917; the usual tool for slip-band directions in strain maps, common
practice, no source); along the family's direction they pile up on a few lines.

1. **Direction**: for every direction (``COARSE_STEP_DEG``) the ridge pixels of the
   sectors near it are binned across it (1 px); lines covered over at least
   ``MIN_COVER`` of their chord through the region count as bands, and the direction
   whose bands hold most pixels wins.
2. **Angle**: the bands' pixels (within ``BAND_HALF_PX`` of each line) give the family
   angle by a common-slope fit, the principal direction of the pooled within-band scatter
   (parallel lines share their slope), refined twice; its standard uncertainty follows
   from the residuals and the pixels' spread along the bands.
3. **Bands**: each band's seen part (2nd to 98th percentile of its pixels along the line)
   and its depth from the local median grey at its pixels (the depth test of stage 6).

The family is returned with ``strict`` as in stage 6 (at least ``min_bands`` bands at a
regular spacing) and judged by the caller's significance test like any other.

Stage 6c (:func:`_guided_families`) builds families the same way, but only at given trace
angles (a grain's predicted traces, when the chain knows its orientation): few directions
are tested, so a weaker family passes (``_guided_share`` of the usual thresholds).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from typing import NamedTuple

import numpy as np

from tracefit.conventions import axial_difference, fold_axial, pixel_direction_angle
from tracefit.errors import TracefitInputError
from tracefit.image.families import _family_spacing
from tracefit.image.geometry import _direction_and_normal, _to_full
from tracefit.image.hough import _pixels_near_angle
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.ridges import RidgePixels
from tracefit.image.selection import _median_inplace

COARSE_STEP_DEG = 1.0  # directions tried
MIN_COVER = 0.35  # share of a line's chord through the region its ridge pixels cover (3 px wide bin)
MIN_BAND_PX = 4  # fewest ridge pixels of a band, per unit of internal enlargement (8 at 2x)
BAND_HALF_PX = 1.5  # ridge pixels this close to a band's line belong to it (times the internal enlargement)
WINDOW_DEG = 15.0  # ridge sectors within this of a direction feed its projection (wavy bands change sector)
MIN_CHORD_PX = 6  # lines with a shorter chord through the region are not tried (same unit)
MAX_MOVE_DEG = 1.0  # the common-slope fit may move the direction its bands were found at this far
MIN_SEPARATION_DEG = 12.0  # a family found here lies at least this far from any other: residual pixels of a
# found family's bands line up across it at 6-11 deg (benchmarks/synthetic_grains.py); closer families are
# left to stages 4-6
AXIS_GUARD_DEG = 1.0  # ... and this far from the image axes
PEAKS_TRIED = 3  # directions tried per polarity and search
GUIDED_TOL_DEG = 3.0  # a guided family's fitted angle lies this close to its predicted trace (orientation and registration error)
GUIDED_SEPARATION_DEG = 8.0  # ... and this far from every family already found
MAX_REGION_PX = 60_000  # larger regions (working px: a whole micrograph) hold enough pixels for stages 4-6
# Stage 6c, families sought along predicted traces only: shares of the thresholds asked of a regular family and of
# a relaxed one (2 bands or irregular spacing), for up to 4 traces (fcc's {111}), raised by GUIDED_PER_DOUBLING for
# every doubling beyond (more traces test more directions). Chosen on benchmarks/strainmap.py's maps (the true
# traces 1 deg off, random decoys): band-free grains scored at most 6.6 (regular) and 3.0 (relaxed) with 4 traces
# a grain, 8.4 and 4.9 with 12, against 8 and 10 asked with 4, 11.8 and 14.7 with 12; and on 108 small crops of
# scikit-image's sample images, where 12 random traces gave 28 families at 0.1 per doubling and 17 at 0.3
# (13 with 4 traces; the open search gives 58 there)
GUIDED_SHARE = 0.5
GUIDED_RELAXED_SHARE = 0.25
GUIDED_PER_DOUBLING = 0.3
TAIL_SKEW = 0.1  # bands are sought in the polarity of the region's grey-level tail, where its quantile skew passes this


class _BandAt(NamedTuple):
    """A band's position, as :func:`tracefit.image.families._family_spacing` reads it."""

    point: np.ndarray  # a point on the band, full-resolution (col, row)


def _least(count: float, half: float) -> float:
    """A least count given per unit of internal enlargement, in working pixels (``half`` is
    ``BAND_HALF_PX`` times the enlargement)."""
    return count * half / BAND_HALF_PX


class _Region:
    """The analysed pixels and, per direction, the chord through them of every 1-px line across it.

    The chords depend on the region and the direction only: every search of the region
    (each polarity, each further family) reads them for the same directions, so they are
    kept once computed.
    """

    def __init__(self, region: np.ndarray):
        rr, cc = np.nonzero(region)
        self.x, self.y = cc.astype(np.float64), rr.astype(np.float64)
        self._lines: dict = {}

    def __len__(self) -> int:
        return len(self.x)

    def lines_across(self, angle_deg: float):
        """(normal, first offset s0, number of 1-px bins, chord length per bin) across ``angle_deg``."""
        if angle_deg not in self._lines:
            _, n_vec = _direction_and_normal(angle_deg)
            sr = self.x * n_vec[0] + self.y * n_vec[1]
            s0 = float(sr.min()) - 2.0
            nbins = int(sr.max() - s0) + 3
            bins = np.clip(np.floor(sr - s0).astype(np.intp), 0, nbins - 1)
            self._lines[angle_deg] = (n_vec, s0, nbins, np.bincount(bins, minlength=nbins).astype(np.float64))
        return self._lines[angle_deg]


def _band_lines(x, y, reg: _Region, angle_deg, half=BAND_HALF_PX):
    """Offsets (across ``angle_deg``) of the lines that hold bands, and the pixels they hold.

    Returns
    -------
    offsets : ndarray, (k,)
        Line offsets (working px along the normal), strongest first after non-maximum
        suppression within ``2 * half`` bins (a wide band's ridge pixels wander across it).
    held : float
        Ridge pixels on those lines.
    """
    n_vec, s0, nbins, chord = reg.lines_across(angle_deg)
    s = x * n_vec[0] + y * n_vec[1]
    counts = np.bincount(np.clip(np.floor(s - s0).astype(np.intp), 0, nbins - 1), minlength=nbins).astype(np.float64)
    w3 = counts + np.roll(counts, 1) + np.roll(counts, -1)  # a band a little off the bin edge
    ok = (w3 >= _least(MIN_BAND_PX, half)) & (chord >= _least(MIN_CHORD_PX, half)) & (w3 >= MIN_COVER * chord)
    order = np.argsort(-w3 * ok, kind="stable")  # ties in a fixed order on every machine
    taken = np.zeros(nbins, bool)
    offsets, held = [], 0.0
    for i in order:
        if not ok[i]:
            break
        r = int(math.ceil(2 * half))
        if taken[max(0, i - r): i + r + 1].any():
            continue
        taken[i] = True
        offsets.append(s0 + i + 0.5)
        held += w3[i]
    return np.array(offsets), held


def _best_directions(x, y, sectors_of, reg: _Region, exclude: Sequence[float], k: int, half: float) -> list[float]:
    """The ``k`` directions whose band lines hold most ridge pixels (local maxima over the tried directions)."""
    angles = np.arange(0.0, 180.0, COARSE_STEP_DEG)
    held = np.zeros(len(angles))
    for i, a in enumerate(angles):
        idx = sectors_of(a)
        if len(idx) >= _least(MIN_BAND_PX, half):
            held[i] = _band_lines(x[idx], y[idx], reg, a, half)[1]
    peaks = [i for i in range(len(angles))
             if held[i] > 0 and held[i] >= held[i - 1] and held[i] >= held[(i + 1) % len(angles)]]
    peaks.sort(key=lambda i: -held[i])
    out: list[float] = []
    for i in peaks:
        a = float(angles[i])
        if any(abs(axial_difference(a, b)) < MIN_SEPARATION_DEG for b in [*exclude, *out]):
            continue
        out.append(a)
        if len(out) == k:
            break
    return out


def _labels_near(x, y, angle_deg, offsets, half) -> np.ndarray:
    """For each pixel, the band line (offset across ``angle_deg``) within ``half`` of it, -1 for none."""
    _, n_vec = _direction_and_normal(angle_deg)
    dist = np.abs((x * n_vec[0] + y * n_vec[1])[:, None] - np.asarray(offsets)[None, :])
    near = np.argmin(dist, axis=1)
    return np.where(dist[np.arange(len(x)), near] <= half, near, -1)


def _common_slope(x, y, angle_deg, offsets, half):
    """Common-slope fit of the bands' pixels: (angle_deg, sigma_deg, labels, offsets) or None.

    ``labels[i]`` is the band of pixel ``i`` (-1: none). The angle is the principal
    direction of the pooled within-band scatter; its uncertainty the residual rms over
    the root of the pixels' summed squared spread along their bands, doubled in variance
    because neighbouring ridge pixels are correlated.
    """
    for _ in range(3):
        labels = _labels_near(x, y, angle_deg, offsets, half)
        keep = labels >= 0
        if keep.sum() < 2 * _least(MIN_BAND_PX, half):
            return None
        xs, ys, lb = x[keep], y[keep], labels[keep]
        cnt = np.maximum(np.bincount(lb, minlength=len(offsets)), 1).astype(np.float64)
        mx = np.bincount(lb, xs, len(offsets)) / cnt
        my = np.bincount(lb, ys, len(offsets)) / cnt
        dx, dy = xs - mx[lb], ys - my[lb]
        cov = np.array([[np.sum(dx * dx), np.sum(dx * dy)], [np.sum(dx * dy), np.sum(dy * dy)]])
        v = np.linalg.eigh(cov)[1][:, 1]
        angle_deg = float(pixel_direction_angle(v[0], v[1]))
        d, n_vec = _direction_and_normal(angle_deg)
        offsets = np.where(np.bincount(lb, minlength=len(offsets)) > 0, mx * n_vec[0] + my * n_vec[1], offsets)
    along = dx * d[0] + dy * d[1]
    across = dx * n_vec[0] + dy * n_vec[1]
    s_res = math.sqrt(float(np.mean(across**2)))
    stt = float(np.sum(along**2))
    sigma = math.degrees(s_res * math.sqrt(2.0) / math.sqrt(max(stt, 1e-9))) + 0.02
    # wavy bands' residuals are correlated along them: the scatter of the bands' own slopes
    # (about the common one) bounds the uncertainty from below
    slopes = []
    for b in range(len(offsets)):
        sel = lb == b
        if sel.sum() >= _least(MIN_BAND_PX, half):
            ta, ua = along[sel], across[sel]
            stt_b = float(np.sum((ta - ta.mean()) ** 2))
            if stt_b > 0:
                slopes.append(float(np.sum((ta - ta.mean()) * ua)) / stt_b)
    if len(slopes) >= 2:
        # measured, so not to be inflated again for the enlargement as the residual-based figure is
        # (tracefit.image.detect._rescaled_outcome multiplies by its root)
        bound = math.degrees(math.atan(float(np.std(slopes, ddof=1)) / math.sqrt(len(slopes))))
        sigma = max(sigma, bound / math.sqrt(half / BAND_HALF_PX))
    return angle_deg, sigma, labels, offsets


def _family_of(ctx, rp: RidgePixels, idx, reg: _Region, angle0: float, half: float, level: float):
    """The family of ridge pixels ``idx`` near direction ``angle0``, or None; (family, strict, used pixel indices).

    ``level`` is the region's median grey: a band's contrast-to-noise ratio is its relative
    depth times ``level`` over the pixel noise, as the band fits of stage 6 give it.
    """
    x, y = rp.col[idx].astype(np.float64), rp.row[idx].astype(np.float64)
    angle = angle0
    for _ in range(3):
        # the bands are found again at the fitted angle until it holds still: lines found across
        # a direction the fit then leaves (several lines in one wide streak) are not bands
        offsets, _ = _band_lines(x, y, reg, angle, half)
        if len(offsets) < 2:
            return None
        fit = _common_slope(x, y, angle, offsets, half)
        if fit is None:
            return None
        moved = abs(axial_difference(fit[0], angle))
        angle = fit[0]
        if moved <= MAX_MOVE_DEG:
            break
    else:
        return None
    return _family_from_fit(ctx, rp.polarity, x, y, idx, fit, half, level)


def _family_from_fit(ctx, polarity: int, x, y, idx, fit, half: float, level: float):
    """The family of a common-slope ``fit`` of pixels (``x``, ``y``; their indices ``idx``), or None.

    Each band's seen part and its depth at its own pixels (the depth test of stage 6);
    (family, strict, indices of the bands' pixels) when at least two bands hold.
    """
    angle, sigma, labels, offsets = fit
    d, n_vec = _direction_and_normal(angle)
    f = ctx.factor
    bands = []
    for b in range(len(offsets)):
        sel = labels == b
        if sel.sum() < _least(MIN_BAND_PX, half):
            continue
        t = x[sel] * d[0] + y[sel] * d[1]
        t0, t1 = np.percentile(t, [2.0, 98.0])
        pa_w, pb_w = offsets[b] * n_vec + t0 * d, offsets[b] * n_vec + t1 * d
        pa, pb = _to_full(pa_w, f), _to_full(pb_w, f)
        # depth at the band's own ridge pixels: a wavy band leaves its straight line here and there
        depth = float(_median_inplace(polarity * ctx.depth_of(_to_full(np.stack([x[sel], y[sel]], axis=1), f))))
        if depth < ctx.min_depth or t1 - t0 < _least(MIN_BAND_PX, half):
            continue
        snr = depth * level / max(ctx.pixel_noise, 1e-12)
        bands.append((offsets[b], pa, pb, depth, snr, np.flatnonzero(sel)))
    if len(bands) < 2:
        return None  # a family of two (fewer than ``min_bands``) is not strict: the caller asks more of it
    bands.sort(key=lambda z: z[0])

    pts = [_BandAt(_to_full(z[0] * n_vec, f)) for z in bands]
    spacing_fit = _family_spacing(pts, n_vec)
    strict = len(bands) >= ctx.min_bands and spacing_fit is not None
    spacing, spacing_sd = spacing_fit or _family_spacing(pts, n_vec, max_spacing_cv=math.inf, check_gaps=False)
    diag_full = ctx.diag_w * f
    lines = [BandLine(float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1]), float(fold_axial(angle)),
                      sigma * math.sqrt(len(bands)), snr) for _, pa, pb, _, snr, _ in bands]
    fam = BandFamily(
        angle_deg=float(fold_axial(angle)),
        angle_sigma_deg=sigma,
        n_bands=len(bands),
        spacing_px=spacing,
        spacing_sigma_px=spacing_sd,
        spacing_um=None if ctx.pixel_size_um is None or not math.isfinite(spacing) else spacing * ctx.pixel_size_um,
        strength=float(sum(math.hypot(*(pb - pa)) / diag_full * snr for _, pa, pb, _, snr, _ in bands)),
        polarity="dark" if polarity < 0 else "bright",
        contrast=float(polarity * np.median([z[3] for z in bands])),
        lines=lines,
    )
    used = idx[np.concatenate([z[5] for z in bands])]
    return fam, strict, used


def _projection_families(ctx, ridges: Sequence[RidgePixels], region: np.ndarray, known: Sequence[BandFamily],
                         accept: Callable, max_new: int, up: int = 1) -> tuple[list[BandFamily], int]:
    """Stage 6b: families found by projection that stages 4-6 did not find.

    Parameters
    ----------
    ctx : tracefit.image.families._FamilyContext
    ridges : sequence of RidgePixels
        Ridge pixels per polarity, without those of the families already found.
    region : ndarray of bool, (h, w)
        Analysed working-copy pixels.
    known : sequence of BandFamily
        Families already found (their directions are not tried again).
    accept : callable
        ``accept(family, strict)`` -> True when kept (the caller's significance test).
    max_new : int
        Most families to add.
    up : int
        Internal enlargement of the image the ridge pixels come from (bands as many times wider).

    Returns
    -------
    (families, tried)
    """
    setup = _search_setup(ctx, region, up) if max_new > 0 else None
    if setup is None:
        return [], 0
    reg, half, level = setup
    found: list[BandFamily] = []
    tried = 0
    for rp in ridges:
        alive = np.ones(len(rp), bool)
        x, y = rp.col.astype(np.float64), rp.row.astype(np.float64)
        near: dict = {}  # direction -> indices of the ridge pixels of the sectors near it

        def sectors_of(a, alive=alive, near=near, rp=rp):
            if a not in near:
                near[a] = _pixels_near_angle(rp, a, WINDOW_DEG)
            return near[a][alive[near[a]]]

        for _ in range(max_new):

            exclude = [fm.angle_deg for fm in [*known, *found]]
            kept = None
            for a0 in _best_directions(x, y, sectors_of, reg, exclude, PEAKS_TRIED, half):
                idx = sectors_of(a0)
                built = _family_of(ctx, rp, idx, reg, a0, half, level)
                if built is None:
                    continue
                tried += 1
                fam, strict, used = built
                if any(abs(axial_difference(fam.angle_deg, b)) < MIN_SEPARATION_DEG for b in exclude):
                    continue  # the same bands seen at another angle (wavy or curved bands), not a family of their own
                if min(abs(axial_difference(fam.angle_deg, b)) for b in (0.0, 90.0)) < AXIS_GUARD_DEG:
                    continue  # scan lines and tile seams follow the image axes
                if accept(fam, strict):
                    kept = (fam, used)
                    break
            if kept is None:
                break
            found.append(kept[0])
            alive[kept[1]] = False
            if len(found) >= max_new:
                return found, tried
    return found, tried


def _tail_polarity(img, region) -> int:
    """+1 when the region's grey levels have a long bright tail, -1 a long dark one, 0 neither.

    Bands are the rare extreme values of a region: bright slip bands of a strain map give its
    values a bright tail, dark grooves of an optical micrograph a dark one. The quantile skew
    ``(q90 + q10 - 2 q50) / (q90 - q10)`` (Kelly's percentile skewness, named from memory) tells which.
    """
    q10, q50, q90 = np.nanpercentile(img[region], (10, 50, 90))
    if not q90 > q10:
        return 0
    skew = (q90 + q10 - 2 * q50) / (q90 - q10)
    return 0 if abs(skew) < TAIL_SKEW else (1 if skew > 0 else -1)


def _search_setup(ctx, region: np.ndarray, up: int):
    """(chords of the region, a band's half width, the region's median grey) for a search; None when
    the region is too large for one."""
    reg = _Region(region)
    if len(reg) > MAX_REGION_PX:
        return None
    grey = ctx.image[region] if ctx.image.shape == region.shape else ctx.image
    return reg, BAND_HALF_PX * max(1, up), float(np.nanmedian(grey))


def _too_close(angle: float, others: Sequence[float]) -> bool:
    """A guided direction too near a family already found or an image axis (scan lines, tile seams)."""
    return (any(abs(axial_difference(angle, b)) < GUIDED_SEPARATION_DEG for b in others)
            or min(abs(axial_difference(angle, b)) for b in (0.0, 90.0)) < AXIS_GUARD_DEG)


def _guided_share(strict: bool, n_traces: int) -> float:
    """Share of the usual significance threshold asked of a family found along one of ``n_traces`` predicted traces."""
    share = GUIDED_SHARE if strict else GUIDED_RELAXED_SHARE
    return share * (1.0 + GUIDED_PER_DOUBLING * math.log2(max(n_traces, 4) / 4))


def _checked_traces(traces, grain=None) -> tuple:
    """Predicted trace angles as a tuple of axial angles in [0, 180), degrees (checked)."""
    if traces is None:
        return ()
    where = "" if grain is None else f" of grain {grain}"
    bad = f"predicted_traces{where} must be a sequence of angles in degrees, got {traces!r}"
    if isinstance(traces, (str, bytes, Mapping)) or not isinstance(traces, Iterable):
        raise TracefitInputError(bad)
    try:
        vals = np.asarray(list(traces), dtype=np.float64)
    except (TypeError, ValueError):
        raise TracefitInputError(bad) from None
    if vals.ndim != 1:
        raise TracefitInputError(bad)
    if not np.all(np.isfinite(vals)):
        raise TracefitInputError(f"predicted_traces{where} must hold finite angles in degrees")
    return tuple(float(a) for a in np.mod(vals, 180.0))


def _guided_families(ctx, ridges: Sequence[RidgePixels], region: np.ndarray, known: Sequence[BandFamily],
                     traces: Sequence[float], accept: Callable, max_new: int, up: int = 1) -> tuple[list[BandFamily], int]:
    """Stage 6c: families looked for at predicted trace angles only (a guided search).

    Each predicted trace not yet near a found family starts the family build of stage 6b at
    its angle; a family whose fitted angle stays within ``GUIDED_TOL_DEG`` of the trace is
    judged by ``accept(family, strict)``. Few directions are tested, so a weaker family
    passes than the open search over every direction may accept; each family found here
    carries ``sought_at`` (the trace it was looked for at).
    """
    setup = _search_setup(ctx, region, up) if max_new > 0 and traces else None
    if setup is None:
        return [], 0
    reg, half, level = setup
    found: list[BandFamily] = []
    tried = 0
    for rp in ridges:
        alive = np.ones(len(rp), bool)
        for t in traces:
            exclude = [fm.angle_deg for fm in [*known, *found]]
            if _too_close(t, exclude):
                continue
            near = _pixels_near_angle(rp, t, WINDOW_DEG)
            idx = near[alive[near]]
            if len(idx) < 2 * _least(MIN_BAND_PX, half):
                continue
            built = _family_of(ctx, rp, idx, reg, float(t), half, level)
            if built is None:
                continue
            tried += 1
            fam, strict, used = built
            if abs(axial_difference(fam.angle_deg, t)) > GUIDED_TOL_DEG or _too_close(fam.angle_deg, exclude):
                continue
            fam.sought_at = float(t)  # already folded to [0, 180) by _checked_traces
            fam.sought_within_deg = GUIDED_TOL_DEG
            fam.sought_on = "ridge pixels"
            if accept(fam, strict):
                found.append(fam)
                alive[used] = False
                if len(found) >= max_new:
                    return found, tried
    return found, tried
