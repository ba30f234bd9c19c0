"""Predicted traces tested on the line profile of the band response (private to the package).

Stage 6d of :func:`tracefit.image.detect_bands`, in small regions with predicted traces (the
grains of a strain map analysed by ``tracefit identify``). Stages 6b and 6c judge a family
by its *ridge pixels*: a band must cover a share of its chord with pixels that passed the
ridge filter's threshold. Faint, short slip bands in a noisy map pass that threshold here and
there only, and the family falls apart although the bands are plain when the response is
summed along them. Here the continuous band response is summed along every line at each
trace, without a pixel threshold:

1. **Response**: the region's grey levels less a running median (``BACKGROUND_POINTS``),
   in units of their robust spread and clipped (outlier points of a strain map), with the
   band polarity bright; its second derivative across the direction tested at
   ``BAND_SIGMA_POINTS`` (a thin bright ridge gives a positive response; Hessian ridge
   response, common practice, no source).
2. **Line sums**: the response summed over every line of 1 point across the direction
   (a Radon transform restricted to the region, Radon 1917), each sum over the root of its
   pixel count, less the median and in units of the robust spread of all such sums of the
   region over every ``NULL_STEP_DEG`` (so the figure follows the region's own noise and its
   correlation).
   Points within ``ERODE_POINTS`` of the region's edge are not summed, and lines whose points
   lie on average closer than ``EDGE_POINTS`` to it (lines that graze the edge) are left out:
   grain boundaries carry strain (and grooves, and the EBSD-to-image registration error), and
   a straight boundary is one line of the grain's own shape. The guard was 5 points while this
   stage was a statistic alone; once the family build and its threshold were added it cost
   bands near the edges of small grains and no longer kept band-free grains clean by itself
   (``benchmarks/strainmap.md``). At 3 points it leaves out lines that graze the edge at a
   slant; a line along a straight edge just inside the erosion (3 points in) is tried.
3. **Score**: the sum of the ``TOP_LINES`` highest separate local maxima of the line sums.
   Within ``GUIDED_TOL_DEG`` of the trace the best direction must be an inner maximum and the
   highest score within ``DOMINANCE_DEG`` of it (a stronger family a few degrees away
   would otherwise be seen again at the trace).
4. **Family**: the peaks of at least ``MIN_BAND_Z`` become bands; the angle is measured by
   turning a line about each band's centre (:func:`_refined_angle`) and must stay within
   ``GUIDED_TOL_DEG`` of the trace; the bands pass the depth test of stage 6. A family of two
   bands or of irregular spacing (not ``strict``) is asked ``NON_STRICT_FACTOR`` times more and
   its spacing must stay under the share of the region's diagonal the caller gives.

Significance: ``-log10`` of a number of false alarms bounded for independent standard-normal
line sums, the directions tried times the ways of choosing the peaks, times the normal tail of
the score (Bonferroni's bound, on the pattern of Desolneux, Moisan & Morel, IJCV 40, 2000).
It is a different count from the ridge-pixel count of the other stages, though it fills the
same ``significance`` field. The line sums are not independent, so the threshold
(``PROFILE_SHARE`` of ``min_significance``) was chosen on band-free grains, not from the bound
(``benchmarks/strainmap.md``).
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import numpy as np

from tracefit.conventions import axial_difference
from tracefit.image.geometry import _direction_and_normal, _to_working
from tracefit.image.projection import GUIDED_TOL_DEG, _family_from_fit, _labels_near, _too_close
from tracefit.image.ridges import _robust_spread, _steered
from tracefit.image.results import BandFamily

BACKGROUND_POINTS = 4.0  # background removed: a running median this many points either side
BAND_SIGMA_POINTS = 1.0  # scale of the second derivative across a band (bands of strain maps are 1-3 points wide)
CLIP_SIGMAS = (-3.0, 5.0)  # the normalised residual is clipped to this range (outlier points)
ERODE_POINTS = 2.0  # the region's edge points are not summed (derivative filters reach across it)
EDGE_POINTS = 3.0  # lines whose points lie on average closer than this to the region's edge are not tried
MIN_LINE_POINTS = 6.0  # shortest line (points) whose sum counts
STEP_DEG = 0.5  # directions tried near a trace
NULL_STEP_DEG = 3.0  # directions whose line sums set the region's unit
DOMINANCE_DEG = 8.0  # the trace's best direction is the highest score within this of it
TOP_LINES = 3  # peaks summed into the score
PEAK_SEPARATION_POINTS = 5.0  # local maxima closer than this are one band (twice HALF_POINTS)
MIN_BAND_Z = 2.0  # a peak of at least this many units is a band of the family
MIN_SUMS = 20  # fewest line sums that set the region's unit
BAND_KEEP_SIGMAS = 1.0  # a band's points respond by at least this many robust sigmas (its seen part, depth)
NON_STRICT_FACTOR = 1.25  # a family of two bands or irregular spacing is asked this much more (6c: 10 against 8)
HALF_POINTS = 2.5  # a band's points lie this close to its line (points)
REFINE_SPAN_DEG = 4.0  # the family angle is sought this far either side of the best line-sum direction ...
REFINE_STEP_DEG = 0.1  # ... in steps of this
END_ERROR_POINTS = 0.5  # a band's line is placed to about this at either end (points; a faint band 1-3 points wide)
# Threshold: a share of min_significance (16 by default: 8, as stage 6c asks of a regular family). Chosen on
# benchmarks/strainmap.py's band-free grains (seeds 1-4, four random traces a grain; their highest 6d
# significance 6.0); checked on seeds 5-8 (4.2; benchmarks/strainmap.md)
PROFILE_SHARE = 0.5


def _region_points(valid: np.ndarray, unit: float):
    """Rows, columns and distance to the region's edge (points) of the summed pixels."""
    from scipy import ndimage

    dist = ndimage.distance_transform_edt(np.pad(valid, 1))[1:-1, 1:-1] / unit
    inner = dist > ERODE_POINTS
    rows, cols = np.nonzero(inner)
    return rows, cols, dist[rows, cols]


def _response(image: np.ndarray, valid: np.ndarray, polarity: int, unit: float):
    """Second-derivative components (rr, rc, cc) of the normalised, clipped residual; bands of ``polarity`` bright.

    The background is a running median (``BACKGROUND_POINTS`` either side), which thin bands do
    not move: a smooth background would rise under a strong band and leave dips beside it,
    whose edges the second derivative reads as more bands.
    """
    from scipy import ndimage

    level = float(np.median(image[valid]))
    x = np.where(valid, image, level).astype(np.float64)
    # the median at the content's own sampling (an enlarged copy holds no more detail), then back
    step = max(1, int(round(unit)))
    coarse = ndimage.median_filter(x[step // 2:: step, step // 2:: step], size=2 * int(round(BACKGROUND_POINTS)) + 1,
                                   mode="nearest")
    background = ndimage.zoom(coarse, (x.shape[0] / coarse.shape[0], x.shape[1] / coarse.shape[1]), order=1,
                              mode="nearest", grid_mode=True)[: x.shape[0], : x.shape[1]]
    r = np.where(valid, polarity * (x - background), 0.0)
    inside = r[valid]
    med = float(np.median(inside))
    spread = _robust_spread(inside) + 1e-12
    r = np.where(valid, np.clip((r - med) / spread, *CLIP_SIGMAS), 0.0)
    s = BAND_SIGMA_POINTS * unit
    return (ndimage.gaussian_filter(r, s, order=(2, 0)), ndimage.gaussian_filter(r, s, order=(1, 1)),
            ndimage.gaussian_filter(r, s, order=(0, 2)))


class _LineSums:
    """Line sums of the band response across any direction, in the region's own unit."""

    def __init__(self, hess, rows, cols, edge, unit: float):
        self.hrr, self.hrc, self.hcc = (h[rows, cols] for h in hess)
        self.x, self.y, self.edge, self.unit = cols.astype(np.float64), rows.astype(np.float64), edge, unit
        self.centre, self.scale = 0.0, 1.0
        null = [z[ok] for z, ok, _ in (self.at(a) for a in np.arange(0.0, 180.0, NULL_STEP_DEG))]
        allz = np.concatenate(null) if null else np.zeros(0)
        self.usable = allz.size >= MIN_SUMS and _robust_spread(allz) > 0
        if self.usable:
            self.centre, self.scale = float(np.median(allz)), _robust_spread(allz)

    def response(self, angle_deg: float) -> np.ndarray:
        """Band response of every summed pixel across ``angle_deg`` (positive on a bright ridge)."""
        _, n = _direction_and_normal(angle_deg)  # (col, row)
        return -_steered(self.hcc, self.hrr, self.hrc, n[0], n[1])[0]

    def at(self, angle_deg: float):
        """(z per line, line usable, first offset) across ``angle_deg``; offsets in working px, 1 point per line."""
        _, n = _direction_and_normal(angle_deg)
        s = self.x * n[0] + self.y * n[1]
        s0 = float(s.min())
        idx = np.floor((s - s0) / self.unit).astype(np.intp)
        cnt = np.bincount(idx).astype(np.float64)
        z = (np.bincount(idx, self.response(angle_deg)) / np.sqrt(np.maximum(cnt, 1.0)) - self.centre) / self.scale
        edge = np.bincount(idx, self.edge) / np.maximum(cnt, 1.0)
        ok = (cnt >= MIN_LINE_POINTS * self.unit**2) & (edge >= EDGE_POINTS)
        return z, ok, s0

    def peaks(self, angle_deg: float):
        """(z, offset) of the separate peaks of the usable lines, highest first; and the number of usable lines.

        A peak is a local maximum of the line sums; of peaks closer than ``PEAK_SEPARATION_POINTS``
        only the highest counts (the flanks of one band are not a second band).
        """
        z, ok, s0 = self.at(angle_deg)
        zz = np.where(ok, z, -np.inf)
        padded = np.concatenate(([-np.inf], zz, [-np.inf]))
        local = np.flatnonzero((zz > -np.inf) & (zz >= padded[:-2]) & (zz >= padded[2:]))
        out: list[tuple[float, int]] = []
        for i in local[np.argsort(-zz[local], kind="stable")]:
            if all(abs(int(i) - j) >= PEAK_SEPARATION_POINTS for _, j in out):
                out.append((float(zz[i]), int(i)))
        return [(v, s0 + (i + 0.5) * self.unit) for v, i in out], int(ok.sum())


def _score(peaks) -> float:
    return float(sum(v for v, _ in peaks[:TOP_LINES])) if len(peaks) >= TOP_LINES else -math.inf


def _log10_nfa(score: float, n_lines: int, n_tests: int) -> float:
    """Bonferroni bound of the expected number of false alarms of ``score`` (see the module docstring)."""
    from scipy.special import gammaln
    from scipy.stats import norm

    if n_lines < TOP_LINES:
        return math.inf  # no way to choose the peaks: nothing to report
    ways = (gammaln(n_lines + 1) - gammaln(TOP_LINES + 1) - gammaln(n_lines - TOP_LINES + 1)) / math.log(10)
    return float(math.log10(max(n_tests, 1)) + ways + norm.logsf(score / math.sqrt(TOP_LINES)) / math.log(10))


def _best_near(sums: _LineSums, trace: float):
    """(score, angle, peaks, usable lines) at the trace's best direction, or None (edge maximum, or not dominant)."""
    win = int(round(GUIDED_TOL_DEG / STEP_DEG))
    dom = int(round(DOMINANCE_DEG / STEP_DEG))
    cache: dict = {}

    def at(k):
        if k not in cache:
            a = float(np.mod(trace + k * STEP_DEG, 180.0))
            peaks, n = sums.peaks(a)
            cache[k] = (_score(peaks), a, peaks, n)
        return cache[k]

    scores = [at(k)[0] for k in range(-win, win + 1)]
    j = int(np.argmax(scores))
    if j in (0, len(scores) - 1) or not math.isfinite(scores[j]):
        return None  # the maximum lies at the window's edge: the bands (if any) are not at this trace
    k = j - win
    if any(at(k + d)[0] > scores[j] for d in range(-dom, dom + 1) if d):
        return None
    return at(k)


def _profile_families(ctx, wc, polarity: int, known: Sequence[BandFamily], traces: Sequence[float], need: float,
                      max_new: int, up: int, max_spacing_share: float) -> tuple[list[BandFamily], int]:
    """Stage 6d: families at the predicted traces that stages 6b and 6c left, from line sums of the band response.

    Parameters
    ----------
    ctx : tracefit.image.families._FamilyContext
    wc : tracefit.image.prepare._WorkingCopy
        The working copy and its analysed pixels.
    polarity : int
        +1 bright bands, -1 dark (the region's grey-level tail); 0: nothing is tried.
    known : sequence of BandFamily
        Families already found (traces near them are not tried).
    traces : sequence of float
        Predicted trace angles, degrees.
    need : float
        Least significance ``-log10(NFA)`` of a regular family here.
    max_new : int
        Most families to add.
    up : int
        Enlargement of the working copy over the content's own sampling.
    max_spacing_share : float
        Largest spacing of a family that is not ``strict``, as a share of the region's diagonal
        (two far-apart lines are edges of a tile or a square).

    Returns
    -------
    (families, tried)
    """
    todo = [float(t) for t in traces if not _too_close(float(t), [fm.angle_deg for fm in known])]
    if polarity == 0 or max_new <= 0 or not todo:
        return [], 0
    unit = max(1.0, up / wc.factor)  # working px per point of the content
    valid = (wc.mask if wc.mask is not None else np.ones(wc.image.shape, bool)) & np.isfinite(wc.image)
    rows, cols, edge = _region_points(valid, unit)
    if rows.size < MIN_LINE_POINTS * unit**2 * TOP_LINES:
        return [], 0
    sums = _LineSums(_response(wc.image, valid, polarity, unit), rows, cols, edge, unit)
    if not sums.usable:
        return [], 0
    n_tests = len(todo) * (2 * int(round(GUIDED_TOL_DEG / STEP_DEG)) + 1)
    best = [(b, t) for t in todo if (b := _best_near(sums, t)) is not None]
    best.sort(key=lambda bt: -bt[0][0])
    found: list[BandFamily] = []
    tried = 0
    level = float(np.nanmedian(wc.image[valid]))
    diag = math.hypot(float(np.ptp(rows)) + 1.0, float(np.ptp(cols)) + 1.0) * wc.factor
    for (score, angle, peaks, n_lines), trace in best:
        if _too_close(angle, [fm.angle_deg for fm in [*known, *found]]):
            continue
        tried += 1
        log10_nfa = _log10_nfa(score, n_lines, n_tests)
        built = _build(ctx, sums, angle, peaks, trace, level, polarity) if -log10_nfa >= need else None
        if built is None:
            continue
        fam, strict = built
        if not _passes(strict, -log10_nfa, need, fam.spacing_px, max_spacing_share * diag):
            continue
        if _too_close(fam.angle_deg, [f.angle_deg for f in [*known, *found]]):
            continue
        fam.log10_nfa = log10_nfa
        found.append(fam)
        if len(found) >= max_new:
            break
    return found, tried


def _passes(strict: bool, significance: float, need: float, spacing: float, max_spacing: float) -> bool:
    """A family's significance against ``need``; one of two bands or irregular spacing (not ``strict``) is asked
    ``NON_STRICT_FACTOR`` times more and a spacing of at most ``max_spacing`` (two far-apart lines are the edges
    of a tile or a square)."""
    if strict:
        return significance >= need
    return significance >= NON_STRICT_FACTOR * need and spacing <= max_spacing


def _band_centres(sums: _LineSums, angle: float, offsets) -> np.ndarray:
    """(col, row) centre of each band: the response-weighted centroid of its points near its line at ``angle``.

    Centres closer than ``HALF_POINTS`` across the bands are one band (the stronger kept).
    """
    _, n = _direction_and_normal(angle)
    resp = np.maximum(sums.response(angle), 0.0)
    s = sums.x * n[0] + sums.y * n[1]
    out: list[tuple[float, float, float]] = []
    for off in offsets:
        w = resp * (np.abs(s - off) <= HALF_POINTS * sums.unit)
        tot = float(w.sum())
        if tot <= 0:
            continue
        c = (float(np.sum(w * sums.x)) / tot, float(np.sum(w * sums.y)) / tot, tot)
        if all(abs((c[0] - o[0]) * n[0] + (c[1] - o[1]) * n[1]) >= HALF_POINTS * sums.unit for o in out):
            out.append(c)
    return np.array([c[:2] for c in out]).reshape(-1, 2)


def _peak_of(values: np.ndarray, k: int, step: float) -> float:
    """Offset (in units of ``step``) of the parabola's vertex through ``values[k - 1: k + 2]`` from ``k``."""
    if not 0 < k < len(values) - 1:
        return 0.0
    y0, y1, y2 = values[k - 1: k + 2]
    curv = y0 - 2 * y1 + y2
    return float(0.5 * (y0 - y2) / curv * step) if curv < 0 else 0.0


def _refined_angle(sums: _LineSums, angle: float, centres: np.ndarray):
    """Family angle and its standard uncertainty from lines turned about each band's centre (None: no inner maximum).

    Each band's summed response along a line through its own centre is maximised over the
    direction, so the band is not cut at the starting direction (the common-slope fit of
    stage 6b, tried here first, pulled the angle towards the trace it started at). The
    uncertainty is the bands' scatter over the root of their number (a Student factor for
    few bands; two or three bands can agree by chance), combined with what placing each
    band's line to ``END_ERROR_POINTS`` at either end allows (and the grid's step); in the
    content's own points (the caller scales it for an enlargement).
    """
    from scipy.stats import t as student_t

    grid = angle + np.arange(-REFINE_SPAN_DEG, REFINE_SPAN_DEG + 1e-9, REFINE_STEP_DEG)
    width = HALF_POINTS * sums.unit
    # each band's length (points) along the starting direction, for the placing error: the points
    # within half a point of its centre line (a wider strip would lengthen bands that meet the
    # region's edge at a slant)
    d, n = _direction_and_normal(float(grid[len(grid) // 2]))
    length = np.zeros(len(centres))
    for b, (cx, cy) in enumerate(centres):
        near = np.abs((sums.x - cx) * n[0] + (sums.y - cy) * n[1]) <= 0.5 * sums.unit
        if near.any():
            length[b] = float(np.ptp((sums.x[near] - cx) * d[0] + (sums.y[near] - cy) * d[1])) / sums.unit
    per_band = np.zeros((len(grid), len(centres)))
    for i, a in enumerate(grid):
        _, n = _direction_and_normal(float(a))
        resp = sums.response(float(a))
        for b, (cx, cy) in enumerate(centres):
            across = (sums.x - cx) * n[0] + (sums.y - cy) * n[1]
            near = np.abs(across) <= width
            per_band[i, b] = float(np.sum(resp[near] * np.exp(-0.5 * (across[near] / (0.5 * width)) ** 2)))
    total = per_band.sum(axis=1)
    k = int(np.argmax(total))
    if k in (0, len(grid) - 1):
        return None
    best = float(grid[k]) + _peak_of(total, k, REFINE_STEP_DEG)
    each = np.array([grid[j] + _peak_of(per_band[:, b], j, REFINE_STEP_DEG)
                     for b, j in enumerate(np.argmax(per_band, axis=0))])
    n_b = len(each)
    scatter = float(np.std(each, ddof=1)) / math.sqrt(n_b) * float(student_t.ppf(0.8413, n_b - 1))
    # each band's line is placed to about END_ERROR_POINTS at either end: its angle to about
    # atan(sqrt(2) x that / its length); the bands together to the inverse-variance sum of those
    per_band_placing = np.degrees(np.arctan(math.sqrt(2.0) * END_ERROR_POINTS / np.maximum(length, 1.0)))
    placing = math.hypot(REFINE_STEP_DEG / math.sqrt(12.0), float(np.sum(per_band_placing ** -2.0)) ** -0.5)
    # in quadrature, not the larger of the two: where the bands' scatter is noise alone this
    # counts the placing twice, but the scatter of two or three bands is itself uncertain and the
    # search leans towards the trace; the larger alone covered fewer of the benchmark's angles
    # (benchmarks/strainmap.md). Measured in the content's points: not to be inflated again for
    # the enlargement (tracefit.image.detect._rescaled_outcome multiplies the angle uncertainty
    # by its root; unit is the enlargement itself: a region analysed enlarged is never reduced)
    return float(np.mod(best, 180.0)), math.hypot(scatter, placing) / math.sqrt(sums.unit)


def _build(ctx, sums: _LineSums, angle: float, peaks, trace: float, level: float, polarity: int):
    """(family, strict) of the peaks of at least ``MIN_BAND_Z`` at ``angle``, its angle measured; None: not two bands."""
    offsets = [s for v, s in peaks if v >= MIN_BAND_Z]
    centres = _band_centres(sums, angle, offsets) if len(offsets) >= 2 else np.zeros((0, 2))
    built = None
    for _ in range(2):  # once more when the depth test drops bands: the angle is then measured on the others
        if len(centres) < 2:
            return None
        refined = _refined_angle(sums, angle, centres)
        if refined is None or abs(axial_difference(refined[0], trace)) > GUIDED_TOL_DEG:
            return None
        built = _family_at(ctx, sums, refined, centres, level, polarity)
        if built is None or built[0].n_bands == len(centres):
            break
        kept = np.array([[0.5 * (ln.col0 + ln.col1), 0.5 * (ln.row0 + ln.row1)] for ln in built[0].lines])
        _, n = _direction_and_normal(refined[0])
        kept = _to_working(kept, ctx.factor)
        centres = np.array([c for c in centres if np.min(np.abs((kept - c) @ n)) < HALF_POINTS * sums.unit])
    if built is None:
        return None
    fam, strict = built
    fam.sought_at = float(trace)
    fam.sought_within_deg = GUIDED_TOL_DEG
    fam.sought_on = "line sums"
    return fam, strict


def _family_at(ctx, sums: _LineSums, refined, centres: np.ndarray, level: float, polarity: int):
    """(family, strict) with bands through ``centres`` at the measured angle, or None (fewer than two pass)."""
    new_angle, sigma = refined
    _, n = _direction_and_normal(new_angle)
    resp = sums.response(new_angle)
    # the points that respond: a band's seen part and depth come from them, not from the noise beside it
    keep = resp > BAND_KEEP_SIGMAS * _robust_spread(resp)
    x, y = sums.x[keep], sums.y[keep]
    half = HALF_POINTS * sums.unit
    offsets = centres @ n
    labels = _labels_near(x, y, new_angle, offsets, half)
    built = _family_from_fit(ctx, polarity, x, y, np.flatnonzero(keep), (new_angle, sigma, labels, offsets), half, level)
    return None if built is None else built[:2]
