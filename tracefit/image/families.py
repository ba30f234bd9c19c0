"""Build one band family from a candidate: band positions, full-resolution fits and tests.

Stage 6 of :func:`tracefit.image.detect_bands` (private to the package). A candidate is a
cluster of parallel Hough lines of one polarity. :func:`_build_family` turns it into a
:class:`~tracefit.image.results.BandFamily`, or rejects it, in steps:

1. refined angle and profile across the bands (:func:`tracefit.image.hough._family_profile`);
2. band positions: the Hough lines centred on the profile's peaks, merged when closer
   than 2.5 px (:func:`_band_positions`);
3. full-resolution fits of the bands, strongest first, one fit per band
   (:func:`_fit_family_bands`);
4. depth test: a band stands at least ``min_depth`` from the local median grey
   (:func:`_depth_test`);
5. family angle: the weighted mean of the bands' angles after a 4-sigma outlier cut, with a
   standard uncertainty from their fit errors and scatter (:func:`_family_angle`);
6. spacing test: bands of a family keep a spacing (:func:`_family_spacing`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

import numpy as np

from tracefit.conventions import axial_difference, fold_axial
from tracefit.image.bandfit import _BandFit, _fit_band
from tracefit.image.geometry import _direction_and_normal, _hough_line, _to_full
from tracefit.image.hough import PROFILE_BIN_PX, _family_profile, _FamilyProfile
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.ridges import RidgePixels
from tracefit.image.selection import _median_inplace

MERGE_PX = 2.5  # Hough lines closer than this (working px) are one band
MAX_RMS_PX = 1.0  # a band's centres scatter less than this about its line
MAX_SPACING_CV = 0.75  # coefficient of variation of a family's band spacings
MAX_ANGLE_SIGMA_DEG = 1.0  # a family whose angle is less certain is no family
FAN_MAX_DEG = 5.0  # bands whose angle turns steadily by more than this across the family are not parallel


@dataclass
class _FamilyContext:
    """What every family fit of one image needs."""

    image: np.ndarray  # full-resolution grey, float32 (H, W)
    valid: np.ndarray | None  # analysed region at working resolution, uint8, or None
    factor: int  # working-copy reduction factor
    pixel_noise: float  # per-pixel noise of ``image``, image units
    depth_of: Callable  # full-resolution points -> relative depth (tracefit.image.depth)
    diag_w: float  # diagonal of the working copy, px
    pixel_size_um: float | None
    min_bands: int
    min_depth: float
    relaxed: bool = False  # also build families of 2 bands or irregular spacing (see _build_family)


def _family_sigma(prof, ss, s0, spacing, bin_px=PROFILE_BIN_PX):
    """Band width scale (px, ~FWHM / 2.4) from the mean projection peak of the bands."""
    half = int(max(4, min(40, 0.45 * spacing / bin_px)))
    stack = []
    for s in ss:
        i = int((s - s0) / bin_px)
        if half <= i < len(prof) - half:
            stack.append(prof[i - half : i + half + 1])
    if not stack:
        return 1.5
    pk = np.mean(stack, axis=0)
    pk = pk - min(pk[0], pk[-1])
    top = pk[half]
    if top <= 0:
        return 1.5
    above = np.nonzero(pk >= 0.5 * top)[0]
    fwhm = (above.max() - above.min() + 1) * bin_px
    return float(np.clip(fwhm / 2.355, 0.8, 8.0))


def _band_positions(lines, fp: _FamilyProfile):
    """Offsets across the family (working px) of its bands, with their Hough votes.

    Each Hough line is moved to the profile's peak within 2 px and lines closer than
    ``MERGE_PX`` are merged (the stronger one's position kept).

    Returns
    -------
    list of [offset_px, votes]
        Sorted by offset.
    """
    prof, s0, n = fp.profile, fp.s0, fp.normal
    pos = []
    for _, th, rho, votes, _ in lines:
        nt, dt = _hough_line(th)
        p = rho * nt
        p = p + ((fp.centre - p) @ dt) * dt
        s = float(p @ n)
        i = int((s - s0) / PROFILE_BIN_PX)
        lo, hi = max(0, i - 4), min(len(prof), i + 5)
        if hi > lo:
            s = s0 + PROFILE_BIN_PX * (lo + int(np.argmax(prof[lo:hi])) + 0.5)
        pos.append((s, votes))
    pos.sort()
    uniq: list[list[float]] = []
    for s, v in pos:
        if uniq and s - uniq[-1][0] < MERGE_PX:
            if v > uniq[-1][1]:
                uniq[-1] = [s, v]
            continue
        uniq.append([s, v])
    return uniq


def _fit_family_bands(ctx: _FamilyContext, polarity, fp: _FamilyProfile, uniq, max_rms=MAX_RMS_PX):
    """Fit every band of a candidate at full resolution; one sharp fit per band.

    Returns
    -------
    list of _BandFit or None
        Ordered across the family; None when the strongest lines are not sharp bands.
    """
    f, d, n = ctx.factor, fp.direction, fp.normal
    ss = np.array([u_[0] for u_ in uniq])
    gaps = np.diff(ss)
    spacing_w = float(np.median(gaps)) if len(gaps) else 50.0
    sig_full = _family_sigma(fp.profile, ss, fp.s0, spacing_w) * f
    half = int(max(4, min(math.ceil(3.5 * sig_full + 2), math.floor(0.45 * spacing_w * f))))
    cen = fp.centre @ d
    fits: list[_BandFit] = []
    order = np.argsort([-u_[1] for u_ in uniq])
    for tried, s in enumerate(ss[order], start=1):
        if tried == 8 and sum(ft.rms <= max_rms for ft in fits) < 3:
            return None  # the strongest lines are not sharp bands: not a family
        pf = _to_full(s * n + cen * d, f)
        fit = _fit_band(ctx.image, ctx.valid, pf, d, half, polarity, ctx.pixel_noise, f=f)
        if fit is not None and fit.shift > 0.3:
            # a second pass, centred on the first fit, when the first one moved the line
            fit2 = _fit_band(ctx.image, ctx.valid, fit.point, fit.direction, half, polarity, ctx.pixel_noise, f=f)
            fit = fit2 or fit
        if fit is not None:
            fits.append(fit)
    # a broad plateau (the gap between bands of another polarity) gives a wandering
    # centre; a band gives a sharp one
    fits = [ft for ft in fits if ft.rms <= min(max_rms, 0.3 * (half - 2))]
    # Hough lines that converged onto the same band: keep the best fit
    fits.sort(key=lambda z: float(z.point @ n))
    min_sep = max(2.0, 1.2 * sig_full, 0.3 * spacing_w * f)
    dedup: list[_BandFit] = []
    for ft in fits:
        if dedup and abs(float((ft.point - dedup[-1].point) @ n)) < min_sep:
            if ft.n * ft.snr > dedup[-1].n * dedup[-1].snr:
                dedup[-1] = ft
            continue
        dedup.append(ft)
    return dedup


EXACT_DEPTH_POINTS = 128  # most points along a band whose depth is read at full resolution


def _depth_test(ctx: _FamilyContext, polarity, fits):
    """Set each fit's median relative depth along its seen part; keep those at least ``min_depth`` deep.

    Read at full resolution on the fitted centre line (``exact``): a reduced copy averages a
    band narrower than the reduction down to a fraction of its depth.
    """
    for ft in fits:
        pa, pb = ft.ends
        n = max(8, int(ft.seen / (2.0 * ctx.factor)))
        # read at full resolution (f > 1) each point costs 49 pixels: a median of at most this many is plenty
        tt = np.linspace(0.0, 1.0, n if ctx.factor == 1 else min(n, EXACT_DEPTH_POINTS))[:, None]
        pts = pa[None, :] * (1 - tt) + pb[None, :] * tt
        ft.depth = float(_median_inplace(polarity * ctx.depth_of(pts, exact=True)))
    return [ft for ft in fits if ft.depth >= ctx.min_depth]


def _family_angle(fits, fallback_deg, min_bands):
    """Weighted mean angle of the bands after a 4-sigma outlier cut.

    Returns
    -------
    (fits, angle_deg, angle_sigma_deg) or None
        The bands kept, the family angle and its standard uncertainty (inflated by the
        reduced chi-square when the bands scatter more than their errors say); None
        when fewer than ``min_bands`` bands agree or the angle is uncertain by more
        than ``MAX_ANGLE_SIGMA_DEG``.
    """
    ang = np.array([ft.angle for ft in fits])
    sig = np.array([ft.sigma for ft in fits])
    ref = float(np.median(ang)) if np.ptp(ang) < 90 else fallback_deg
    dev = np.asarray(axial_difference(ang, ref))
    spread = 1.4826 * float(np.median(np.abs(dev)))
    ok = np.abs(dev) <= np.maximum(4.0 * np.hypot(sig, spread), 0.05)
    if ok.sum() < min_bands:
        return None
    fits = [ft for ft, o in zip(fits, ok) if o]
    dev, sig = dev[ok], sig[ok]
    wgt = 1.0 / sig**2
    mean_dev = float(np.sum(wgt * dev) / np.sum(wgt))
    angle = float(fold_axial(ref + mean_dev))
    chi2 = float(np.sum(wgt * (dev - mean_dev) ** 2)) / max(len(fits) - 1, 1)
    angle_sigma = math.sqrt(1.0 / float(np.sum(wgt))) * math.sqrt(max(1.0, chi2))
    if angle_sigma > MAX_ANGLE_SIGMA_DEG:
        return None
    return fits, angle, angle_sigma


def _fans_out(fits, normal) -> bool:
    """True when the bands' angles turn steadily across the family, by more than ``FAN_MAX_DEG``.

    The traces of one plane on a flat section seen head-on are parallel (common practice, no
    source); lines whose angle changes steadily with their offset converge on a point, as
    ruled lines on a page seen at an angle do. Judged with at least four bands (with three a
    steady turn comes by chance one time in three): ordered across the family their angles
    must rise (or fall) from each band to the next, by more than ``FAN_MAX_DEG`` in all.
    Scatter about a common angle (curved or wavy bands) is not a steady turn.
    """
    if len(fits) < 4:
        return False
    order = np.argsort([ft.point @ normal for ft in fits])
    ang = np.array([fits[i].angle for i in order])
    steps = np.asarray(axial_difference(ang[1:], ang[:-1]))
    return bool((np.all(steps > 0) or np.all(steps < 0)) and abs(float(np.sum(steps))) > FAN_MAX_DEG)


def _family_spacing(fits, normal, max_spacing_cv=MAX_SPACING_CV, check_gaps=True):
    """Mean spacing and its standard deviation (full-resolution px), or None when irregular.

    Bands of a family keep a spacing; missed bands only make gaps of several spacings.
    ``check_gaps=False`` and an infinite ``max_spacing_cv`` only measure.
    """
    offs = np.sort(np.array([ft.point @ normal for ft in fits]))
    gaps = np.diff(offs)
    if check_gaps and len(gaps) >= 2 and np.mean(gaps < 0.45 * np.median(gaps)) > 0.25:
        return None
    spacing = float(np.mean(gaps)) if len(gaps) else float("nan")
    spacing_sd = float(np.std(gaps, ddof=1)) if len(gaps) > 1 else float("nan")
    if len(gaps) > 1 and spacing_sd > max_spacing_cv * spacing:
        # irregular, unless only a few holes (missed bands) widen the spread
        med_gap = float(np.median(gaps))
        robust_cv = 1.4826 * float(np.median(np.abs(gaps - med_gap))) / max(med_gap, 1e-9)
        if robust_cv > 0.4 or len(gaps) < 8:
            return None  # no consistent spacing: chance alignments, not a band family
    return spacing, spacing_sd


def _build_family(ctx: _FamilyContext, rp: RidgePixels, lines):
    """Refine one candidate family; None when it does not hold up as ``min_bands`` bands.

    With ``ctx.relaxed`` a family of two bands (when ``min_bands`` asks for more) or of
    irregular spacing is built too and returned as not ``strict``: real slip bands are
    short, staggered and unevenly spaced, and the caller then asks a higher significance
    of it.

    Parameters
    ----------
    ctx : _FamilyContext
        The image and settings.
    rp : RidgePixels
        Ridge pixels of the candidate's polarity (working resolution).
    lines : ndarray, (n, 5)
        The candidate's Hough lines (alpha, theta, rho, votes, coverage).

    Returns
    -------
    (BandFamily, strict) or None
        ``strict`` is False when the family passed only the relaxed tests.
    """
    fp = _family_profile(rp, lines)
    if fp is None:
        return None
    least = min(ctx.min_bands, 2) if ctx.relaxed else ctx.min_bands
    uniq = _band_positions(lines, fp)
    if len(uniq) < least:
        return None
    fits = _fit_family_bands(ctx, rp.polarity, fp, uniq)
    if fits is None:
        return None
    fits = _depth_test(ctx, rp.polarity, fits)
    if len(fits) < least:
        return None
    angle_fit = _family_angle(fits, fp.angle_deg, least)
    if angle_fit is None:
        return None
    fits, angle, angle_sigma = angle_fit
    strict = len(fits) >= ctx.min_bands
    _, n_f = _direction_and_normal(angle)
    if _fans_out(fits, n_f):
        return None
    spacing_fit = _family_spacing(fits, n_f)
    if spacing_fit is None:
        if not ctx.relaxed:
            return None
        strict = False
        spacing_fit = _family_spacing(fits, n_f, max_spacing_cv=math.inf, check_gaps=False)
    spacing, spacing_sd = spacing_fit
    diag_full = ctx.diag_w * ctx.factor
    strength = float(sum(ft.seen / diag_full * ft.snr for ft in fits))
    band_lines = []
    for ft in sorted(fits, key=lambda z: z.point @ n_f):
        pa, pb = ft.ends
        band_lines.append(BandLine(float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1]), ft.angle, ft.sigma, ft.snr))
    return BandFamily(
        angle_deg=angle,
        angle_sigma_deg=angle_sigma,
        n_bands=len(fits),
        spacing_px=spacing,
        spacing_sigma_px=spacing_sd,
        spacing_um=None if ctx.pixel_size_um is None or not math.isfinite(spacing) else spacing * ctx.pixel_size_um,
        strength=strength,
        polarity="dark" if rp.polarity < 0 else "bright",
        contrast=float(rp.polarity * np.median([ft.depth for ft in fits])),
        lines=band_lines,
    ), strict
