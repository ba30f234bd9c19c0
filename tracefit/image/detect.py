"""Detect families of parallel straight bands (slip or twin traces) in a micrograph.

:func:`detect_bands` runs one image (or one grain), :func:`detect_grains` every grain of a
label image. The pipeline, one concern per stage and module:

1. **Input** (:mod:`~tracefit.image.prepare`): the image as checked float32 grey, the user
   mask and the grain combined; instrument data bars (:mod:`~tracefit.image.databar`)
   excluded.
2. **Working copy** (:mod:`~tracefit.image.prepare`): a copy reduced to at most
   ``working_size`` px on a side (at most 3x), its mask, and the analysed region (the mask
   eroded by the ridge filter's reach).
3. **Band pixels** (:mod:`~tracefit.image.ridges`, :mod:`~tracefit.image.depth`): the
   background is flattened and oriented ridges enhanced with a multi-scale Hessian, dark
   and bright bands apart; ridge pixels on the wrong side of the local median grey (the
   gaps between bands) are dropped.
4. **Line candidates** (:mod:`~tracefit.image.hough`): Hough lines per orientation sector
   on the ridge pixels, votes normalised by the chord length through the region; their
   angles clustered into candidate families of at least ``min_bands`` lines.
5. **Screen**: candidates whose strongest lines are not deeper than the local median grey
   are dropped; the deepest are fitted first.
6. **Families** (:mod:`~tracefit.image.families`, :mod:`~tracefit.image.bandfit`): the
   angle is refined with a Radon profile, every band fitted at full resolution on a strip
   sampled along it, and the family kept when enough bands pass the sharpness, depth,
   angle and spacing tests.
6b. **Projection** (:mod:`~tracefit.image.projection`), in small regions only (those
   analysed enlarged, such as the grains of a strain map): families whose bands are too
   short or wavy to be fitted one by one, found by projecting the remaining ridge pixels
   across every direction and tested on whole lines (``PROJECTION_SHARE`` of the usual
   significance, bands of the polarity of the region's grey-level tail only). With
   predicted traces (6c, 6d) families are also sought at those angles only
   (:mod:`~tracefit.image.traceprofile`: line sums of the band response).
7. **Selection**: dark and bright "families" at one angle (bands and the gaps between
   them) resolved in favour of the one further from the median grey; strongest first.
8. **Coarser looks**: when fewer than two families are found on a large image, copies
   reduced 2x and 4x (area average) are searched too, so that bands wider than the
   ridge filters (an enlarged picture, wide lamellae) are found as on a smaller file.

Real micrographs: the depth threshold follows the region's own noise (between 0.3 and
1 times ``min_depth``), and a family of two bands or of irregular spacing is kept when
its significance is at least ``RELAXED_SIGNIFICANCE``, its spacing at most
``RELAXED_MAX_SPACING`` of the region's diagonal and it does not lie along an image axis.

Angles are image-frame, axial, degrees ccw from +x (:mod:`tracefit.conventions`); pixel
coordinates are (column, row), rows down. The options and their ranges are declared in
:mod:`tracefit.image.options`.

Where a change goes: how masks and small regions are handled -- ``_working_copy`` (the
erosion) and ``hough._chord_lengths`` (vote normalisation); float maps with holes --
``prepare._as_grey``; more families per region -- ``search._fit_candidates`` and
``search._distinct_families`` (the search rounds, stages 4-7, with what they share between
rounds); a significance per family -- ``accept`` in ``_detect_at_scale``.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.image.depth import _depth_map, _on_band_side
from tracefit.image.families import _build_family, _FamilyContext
from tracefit.image.geometry import _clip_line_to_box
from tracefit.image.hough import SECTOR_DEG
from tracefit.image.options import check_detect_options
from tracefit.image.pergrain import _run_grains
from tracefit.image.prepare import (
    _clear_boxes,
    _exclude_databars,
    _positive_levels,
    _prepare_input,
    _reduction_factor,
    _working_copy,
    _working_size_problem,
    _WorkingCopy,
)
from tracefit.image.results import BandFamily, BandLine, DetectionResult
from tracefit.image.projection import (
    _checked_traces,
    _guided_families,
    _guided_share,
    _projection_families,
    _tail_polarity,
)
from tracefit.image.ridges import _pixel_noise, flatten_background, ridge_pixels
from tracefit.image.traceprofile import PROFILE_SHARE, _profile_families
from tracefit.image.sampling import NATIVE, Oversampling, _resolved
from tracefit.image.search import _distinct_families, _repeats, _search_rounds, _SearchContext, _without_bands
from tracefit.image.significance import family_log10_nfa

__all__ = ["BandLine", "BandFamily", "DetectionResult", "detect_bands"]

MIN_REGION_PX = 400  # fewest analysed working-copy pixels
MIN_ANALYSED_PX = 64  # fewest analysed pixels of the image itself (before any enlargement)
SMALL_SIDE_PX = 96  # regions narrower than this are analysed enlarged ...
MAX_UP = 4  # ... by an integer factor up to this
NFA_STEP_PX = 2.0  # sample spacing of the significance test, working (or original) px
RELAXED_SIGNIFICANCE = 40.0  # least significance of a family of 2 bands or irregular spacing
DEPTH_NOISE_K = 4.0  # an adaptive depth threshold stands this many pixel-noise sigmas deep ...
AXIS_GUARD_DEG = 0.5  # ... and not along an image axis
RELAXED_MAX_SPACING = 0.3  # ... and bands closer than this share of the region's diagonal
COARSER_LOOKS = (2, 4)  # reductions tried when the first look finds fewer than two families ...
COARSE_MIN_SIDE_PX = 384  # ... while the reduced copy keeps this many pixels on its short side (512-px images: none)
MIN_DEPTH_SHARE = 0.3  # ... and at least this share of ``min_depth``
# stage 6b runs in regions analysed enlarged and in those of fewer analysed pixels than this (about 110 x 110;
# benchmarks/synthetic_grains.py: recall 0.964 -> 0.978, no spurious family; 16,000 gave 0.981 but 7 unmatched
# families on the real regions of benchmarks/realdata.py instead of 3)
PROJECTION_MAX_AREA_PX = 12_000
PROJECTION_SHARE = 0.75  # share of the significance thresholds asked of families found by projection (small regions)


def _effective_min_depth(img, m, pixel_noise: float, min_depth: float) -> float:
    """The depth threshold of one region: ``min_depth``, lowered where the region's noise is low.

    A band of an optical micrograph with little noise can be 1 % deep and plain to see;
    the relative noise (pixel noise over the median grey level of the region) sets how
    deep a band must be, between ``MIN_DEPTH_SHARE * min_depth`` and ``min_depth``.
    """
    level = float(np.median(img[m] if m is not None and m.any() else img[:: max(1, img.shape[0] // 256), :: max(1, img.shape[1] // 256)]))
    if level <= 0:
        return min_depth
    return float(np.clip(DEPTH_NOISE_K * pixel_noise / level, MIN_DEPTH_SHARE * min_depth, min_depth))


# --------------------------------------------------------------------------- stages


def _band_pixels(wc: _WorkingCopy, scales, min_depth, working_noise=None, full=None):
    """Stage 3: ridge pixels (dark, bright) on the band side of the local median grey, and the depth sampler.

    ``working_noise`` is the pixel noise of the working copy when the caller knows it already.
    """
    flat = flatten_background(wc.image, wc.mask, wc.background_px)
    dark, bright = ridge_pixels(flat, wc.region, sector_deg=SECTOR_DEG, scales=scales)
    del flat
    depth_of, dmap = _depth_map(wc.image, wc.mask, wc.factor, wc.background_px, working_noise, full)
    # band pixels must lie below (dark) / above (bright) the local median grey: this drops
    # the gaps between bands (ridges of the opposite sign); reduced f times, a thin band keeps 1/f of its depth
    ridges = [_on_band_side(rp, dmap, 0.5 * min_depth / wc.factor) for rp in (dark, bright)]
    return ridges, depth_of


def _summary_note(families: list[BandFamily]) -> str:
    if not families:
        return "no band families found"
    return (f"{len(families)} band famil{'y' if len(families) == 1 else 'ies'} found: "
            + ", ".join(f"{fm.angle_deg:.2f} deg ({fm.n_bands} bands"
                        + (f", sought along the predicted trace at {fm.sought_at:.2f} deg)" if fm.sought_at is not None else ")")
                        for fm in families))


@dataclass
class _Settings:
    """Checked options of one :func:`detect_bands` call."""

    min_bands: int
    max_families: int
    working_size: int
    scales: tuple
    min_coverage: float
    min_depth: float
    min_significance: float
    pixel_size_um: float | None
    oversampling: int = 0
    predicted_traces: tuple = ()


@dataclass
class _Outcome:
    """What one region gave: families (pixels of the image it was run on), verdict, reason, notes."""

    families: list
    verdict: str
    reason: str
    notes: list


def _detect_at_scale(img, m, bars, st: _Settings, up: int = 1, down: int = 1) -> _Outcome:
    """Stages 2-7 on one image and mask; ``up`` is the internal enlargement already applied (for the NFA).

    ``down`` is the reduction of a coarser look (the region is that many times larger).
    """
    notes: list[str] = []
    wc = _working_copy(img, m, bars, st.working_size, st.scales)  # stage 2
    if wc.note:
        notes.append(wc.note)
    if wc.region.sum() < MIN_REGION_PX:
        return _Outcome([], "too_small", f"analysed region too small for band detection ({int(wc.region.sum())} "
                        f"working pixels after the filter margin, fewer than {MIN_REGION_PX})", notes)
    pixel_noise = _pixel_noise(img, m, bars)
    min_depth = _effective_min_depth(img, m, pixel_noise, st.min_depth)
    # the working copy is the image itself (same pixels, same mask) unless reduced or given a
    # data-bar mask of its own: then its noise is the one just measured
    same = wc.factor == 1 and (m is not None or not bars)
    ridges, depth_of = _band_pixels(wc, st.scales, min_depth, pixel_noise if same else None, img)  # stage 3
    v_min = max(20.0, 0.06 * min(wc.region.shape))
    if sum(len(rp) for rp in ridges) < v_min:
        return _Outcome([], "low_contrast", "too little contrast: no band-like ridges stand above the noise "
                        f"(and {100 * min_depth:.1f} % from the local grey level)", notes)
    ctx = _FamilyContext(
        image=img, valid=None if wc.mask is None else wc.mask.astype(np.uint8), factor=wc.factor,
        pixel_noise=pixel_noise, depth_of=depth_of, diag_w=math.hypot(*wc.image.shape),
        pixel_size_um=st.pixel_size_um, min_bands=st.min_bands, min_depth=min_depth, relaxed=True,
    )
    by_pol = {rp.polarity: rp for rp in ridges}
    step = max(NFA_STEP_PX, NFA_STEP_PX * up / wc.factor)

    rr, cc = np.nonzero(wc.region.any(axis=1))[0], np.nonzero(wc.region.any(axis=0))[0]
    region_diag = math.hypot(rr[-1] - rr[0] + 1, cc[-1] - cc[0] + 1) * wc.factor

    def accept(fam, strict, whole_lines=False, share=PROJECTION_SHARE):
        """True: kept; False: below the significance threshold; None: refused before that test."""
        if not strict and not fam.spacing_px <= RELAXED_MAX_SPACING * region_diag:
            # two far-apart straight lines are edges of a tile or a square, not a band family
            return None
        if not strict and min(abs(axial_difference(fam.angle_deg, a)) for a in (0.0, 90.0)) < AXIS_GUARD_DEG:
            # tile seams of stitched mosaics and scan lines follow the image axes
            return None
        need = st.min_significance if strict else max(st.min_significance, RELAXED_SIGNIFICANCE)
        need *= share if whole_lines else 1.0
        rp_all = by_pol[-1 if fam.polarity == "dark" else 1]
        ends = [((ln.col0, ln.row0), (ln.col1, ln.row1)) for ln in fam.lines]
        fam.log10_nfa, _ = family_log10_nfa(rp_all, wc.region, ends, fam.angle_deg, wc.factor, step,
                                            min(st.min_bands, fam.n_bands), whole_lines=whole_lines)
        return bool(-fam.log10_nfa >= need)

    sc = _SearchContext(wc, ridges, depth_of, min_depth, st.min_bands, st.min_coverage, st.max_families)
    found, tried, n_rejected = _search_rounds(sc, lambda rp, ln: _build_family(ctx, rp, ln), accept)  # stages 4-7
    small = up > 1 or int(wc.region.sum()) * (wc.factor * down) ** 2 < PROJECTION_MAX_AREA_PX
    if small and len(found) < st.max_families:
        found, n_more = _small_region_families(ctx, ridges, wc, found, accept, st, up)
        tried += n_more
    found = found[: st.max_families]
    if found:
        return _Outcome(found, "found", _summary_note(found), notes)
    if tried == 0:
        return _Outcome([], "not_significant", "no band families: no set of parallel lines reached "
                        f"{min(st.min_bands, 2)} lines with {100 * st.min_coverage:.0f} % coverage", notes)
    why = f"{n_rejected} below the significance threshold" if n_rejected else "none held up as a family"
    return _Outcome([], "not_significant", f"no band families: {tried} candidate direction"
                    f"{'s' if tried != 1 else ''} tested, {why}", notes)


def _small_region_families(ctx, ridges, wc, found, accept, st: _Settings, up: int) -> tuple[list, int]:
    """Stages 6b-6d in small regions (grains of a strain map, grains of ~100 x 100 px of a micrograph).

    6b: families whose bands are too short to fit one by one, by projection. Larger regions give
    their bands enough pixels for stages 4-6; there the projection's extra families were mostly
    texture, scan lines and curved bands seen twice (benchmarks/realdata.md). Only bands of the
    polarity of the region's tail are sought, and none in a region without one: in strain maps
    the dark "families" were the low-strain gaps between bands, and band-free grains have the
    least skewed grey levels. 6c: families looked for along the grain's predicted traces only;
    few directions are tested, so a weaker family passes at the same rate of false families on
    band-free grains. 6d: the traces still without a family, tested on line sums of the band
    response (:mod:`tracefit.image.traceprofile`). Returns (families, candidates tried).
    """
    tail = _tail_polarity(wc.image, wc.region)

    def rest():
        return [_without_bands(rp, found, wc.factor) for rp in ridges if rp.polarity == tail]

    more, tried = _projection_families(ctx, rest(), wc.region, found, lambda fm, strict: accept(fm, strict, True),
                                       st.max_families - len(found), up)
    found = _distinct_families(found + more)
    if st.predicted_traces and len(found) < st.max_families:
        n = len(st.predicted_traces)
        more, n_more = _guided_families(ctx, rest(), wc.region, found, st.predicted_traces,
                                        lambda fm, strict: accept(fm, strict, True, _guided_share(strict, n)),
                                        st.max_families - len(found), up)
        found = _distinct_families(found + more)
        more, n_6d = _profile_families(ctx, wc, tail, found, st.predicted_traces, PROFILE_SHARE * st.min_significance,
                                       st.max_families - len(found), up, RELAXED_MAX_SPACING)  # 6d: line sums
        tried += n_more + n_6d
        found = _distinct_families(found + more)
    return found, tried


def _small_region_factor(shape, m, k: int = 1) -> tuple[int, tuple[slice, slice]]:
    """Internal enlargement for a small image or region, and the box (with a margin) to enlarge.

    The detector's filters and tests are sized for regions of about ``SMALL_SIDE_PX`` px
    or more; a smaller one is enlarged by an integer factor (at most ``MAX_UP``) with
    cubic interpolation. No noise is invented: the noise estimates and the significance
    test follow the enlargement. An image already enlarged ``k`` times (see
    :mod:`tracefit.image.sampling`) is sized by its content: the factor returned is the
    enlargement of the content, of which ``k`` is done already.
    """
    h, w = shape
    if m is None:
        box = (slice(0, h), slice(0, w))
    else:
        rr = np.flatnonzero(m.any(axis=1))
        cc = np.flatnonzero(m.any(axis=0))
        margin = 4 * k
        box = (slice(max(0, rr[0] - margin), min(h, rr[-1] + margin + 1)),
               slice(max(0, cc[0] - margin), min(w, cc[-1] + margin + 1)))
    side = min(box[0].stop - box[0].start, box[1].stop - box[1].start) / k
    up = int(min(MAX_UP, math.ceil(SMALL_SIDE_PX / max(side, 1)))) if side < SMALL_SIDE_PX else 1
    return up, box


def _on_block_grid(box, n: int, phase: int, k: int) -> slice:
    """``box`` narrowed to whole ``k``-pixel blocks starting at ``phase`` (mod ``k``) within ``n`` pixels."""
    start = box.start + (phase - box.start) % k
    stop = start + (min(box.stop, n) - start) // k * k
    return slice(start, stop)


def _rescaled_outcome(img, m, bars, st: _Settings, up: int, box, down: int = 1, ov: Oversampling = NATIVE) -> _Outcome:
    """Run :func:`_detect_at_scale` on ``img[box]`` enlarged ``up`` times (cubic) or reduced ``down`` times (area).

    An image already enlarged ``ov.factor`` times is resized by ``up / ov.factor`` (``up``
    may be 1: a larger region is reduced to its content's sampling), from its content's
    own points where it holds blocks of equal pixels: the content is analysed ``up`` times
    enlarged either way. Lines, spacings and angle uncertainties are mapped
    back to ``img`` pixels.
    """
    k = ov.factor
    if k > 1:
        box = tuple(_on_block_grid(b, n, p if ov.kind == "blocks" else 0, k) for b, n, p in zip(box, img.shape, ov.phase))
    r0, c0 = box[0].start, box[1].start
    crop = img[box]
    if m is None:
        m = np.ones(img.shape, bool)
        _clear_boxes(m, bars)
    if down > 1:
        size = (crop.shape[1] // down, crop.shape[0] // down)
        crop = np.ascontiguousarray(crop[: size[1] * down, : size[0] * down])
        small = cv2.resize(crop, size, interpolation=cv2.INTER_AREA)
        small_m = cv2.resize(m[box][: size[1] * down, : size[0] * down].view(np.uint8) * np.uint8(255), size,
                             interpolation=cv2.INTER_AREA) >= 250
        st_s = _Settings(**{**st.__dict__, "pixel_size_um": None if st.pixel_size_um is None else st.pixel_size_um * down})
        out = _detect_at_scale(small, small_m, [], st_s, down=down)
        scale = float(down)
    else:
        crop_m = m[box]
        if ov.kind == "blocks":  # one point per block: the content itself
            crop, crop_m, k_left = np.ascontiguousarray(crop[::k, ::k]), np.ascontiguousarray(crop_m[::k, ::k]), 1
        else:
            k_left = k
        size = (crop.shape[1] * up // k_left, crop.shape[0] * up // k_left)
        big = cv2.resize(crop, size, interpolation=cv2.INTER_CUBIC)
        big_m = cv2.resize(crop_m.view(np.uint8), size, interpolation=cv2.INTER_NEAREST) > 0
        scale = k / up
        pixel_size = None if st.pixel_size_um is None else st.pixel_size_um * scale
        if up == 1:  # a larger region at its content's sampling: analysed as the original image would be
            st_c = _Settings(**{**st.__dict__, "pixel_size_um": pixel_size})
            out = _with_coarser_looks(_detect_at_scale(big, big_m, [], st_c), big, big_m, [], st_c)
        else:
            st_up = _Settings(**{**st.__dict__, "working_size": max(st.working_size, max(size)), "pixel_size_um": pixel_size})
            out = _detect_at_scale(big, big_m, [], st_up, up)
    for fam in out.families:
        fam.spacing_px *= scale
        fam.spacing_sigma_px *= scale
        # enlarged samples along a band are correlated over ``up`` px: as many fewer independent ones
        fam.angle_sigma_deg *= math.sqrt(up)
        for ln in fam.lines:
            ln.col0, ln.col1 = ((ln.col0 + 0.5) * scale - 0.5 + c0, (ln.col1 + 0.5) * scale - 0.5 + c0)
            ln.row0, ln.row1 = ((ln.row0 + 0.5) * scale - 0.5 + r0, (ln.row1 + 0.5) * scale - 0.5 + r0)
            ln.angle_sigma_deg *= math.sqrt(up)
    if down > 1:
        out.notes.insert(0, f"also analysed reduced {down}x (area average), for bands wider than the ridge filters")
    elif k > 1:
        out.notes.insert(0, f"{'small ' if up > 1 else ''}region ({crop.shape[1] * k // k_left} x "
                            f"{crop.shape[0] * k // k_left} px, its content {k}x coarser) analysed at {up}x its content")
    else:
        out.notes.insert(0, f"small region ({crop.shape[1]} x {crop.shape[0]} px) analysed enlarged {up}x (cubic)")
    return out


def _clip_to_image(families, w: int, h: int) -> None:
    """Band lines cut to the image's pixel centres ``[0, w - 1] x [0, h - 1]``, in place.

    Lines fitted on a resized copy, or from a band's ridge pixels projected on its common
    line, can end a few pixels past the border once mapped back (by the resize factor).
    """
    for fam in families:
        for ln in fam.lines:
            p, d = (ln.col0, ln.row0), (ln.col1 - ln.col0, ln.row1 - ln.row0)
            seg = _clip_line_to_box(p, d, (0.0, 0.0, w - 1.0, h - 1.0))
            if seg is None or seg[1] < 0.0 or seg[0] > 1.0:  # no part inside: its ends pulled in
                ln.col0, ln.col1 = (float(min(max(c, 0.0), w - 1.0)) for c in (ln.col0, ln.col1))
                ln.row0, ln.row1 = (float(min(max(r, 0.0), h - 1.0)) for r in (ln.row0, ln.row1))
                continue
            t0, t1 = max(seg[0], 0.0), min(seg[1], 1.0)
            ln.col0, ln.row0, ln.col1, ln.row1 = (float(p[0] + t0 * d[0]), float(p[1] + t0 * d[1]),
                                                  float(p[0] + t1 * d[0]), float(p[1] + t1 * d[1]))


def _with_coarser_looks(out: _Outcome, img, m, bars, st: _Settings) -> _Outcome:
    """Add the families of copies reduced 2x and 4x (anti-aliased) when the first look found fewer than two.

    Bands several pixels wide (an enlarged picture, wide twin lamellae) outgrow the ridge
    filters and the sharpness tests of the full-resolution fits; on a copy reduced to
    their width they are thin again. Families that repeat one already found (within
    ``SAME_FAMILY_DEG``, or on the same bands) are not added.
    """
    if len(out.families) >= min(2, st.max_families):
        return out
    h, w = img.shape
    for down in COARSER_LOOKS:
        if min(h, w) // down < COARSE_MIN_SIDE_PX:
            break
        box = (slice(0, h), slice(0, w))
        more = _rescaled_outcome(img, m, bars, st, 1, box, down=down)
        new = [fm for fm in more.families if not _repeats(fm, out.families)]
        if new:
            fams = sorted(out.families + new, key=lambda fm: -fm.strength)[: st.max_families]
            out = _Outcome(fams, "found", _summary_note(fams), out.notes + more.notes[:1])
        if len(out.families) >= 2:
            break
    return out


# --------------------------------------------------------------------------- entry points


def detect_bands(
    image: np.ndarray,
    mask: np.ndarray | None = None,
    pixel_size_um: float | None = None,
    labels: np.ndarray | None = None,
    grain: int | None = None,
    *,
    path: str | None = None,
    find_bar: bool = True,
    min_bands: int = 3,
    max_families: int = 8,
    working_size: int = 1536,
    scales: Sequence[float] = (1.0, 1.7, 2.8),
    min_coverage: float = 0.3,
    min_depth: float = 0.035,
    min_significance: float = 16.0,
    oversampling: int = 0,
    predicted_traces: Sequence[float] | None = None,
    notes: list[str] | None = None,
) -> DetectionResult:
    """Detect families of parallel straight bands.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        Grey image (any units, any real dtype, bool included) or RGB(A), at least
        16 x 16 pixels, finite, not constant.
    mask : ndarray of bool, (H, W), optional
        Pixels to analyse (True).
    pixel_size_um : float, optional
        Pixel size, micrometres per pixel (> 0); gives spacings in micrometres.
    labels : ndarray of int, (H, W), optional
        Grain label image; with ``grain`` only that grain's pixels are analysed, exactly as
        :func:`detect_grains` analyses it (which runs every grain).
    grain : int, optional
        Grain id in ``labels`` (needs ``labels``).
    path : str, optional
        Source file name, carried into the result.
    find_bar : bool
        Look for an instrument data bar and exclude it.
    min_bands : int
        Fewest parallel bands that make a family (>= 1; isolated scratches make none at
        the default 3). Two bands also make one when their family is highly significant
        (``RELAXED_SIGNIFICANCE``), as short real bands often are.
    max_families : int
        Most families reported (>= 1).
    working_size : int
        Longest side of the reduced copy used for ridge enhancement and Hough, pixels
        (>= 16, and large enough that the copy keeps 16 pixels on its short side); reduced
        at most 3x (``prepare.MAX_REDUCTION``): bands 3 px wide stay resolved at any size.
    scales : sequence of float
        Hessian scales at working resolution, pixels (each > 0 and <= 64; about half the
        band widths looked for).
    min_coverage : float
        Least fraction of a Hough chord that must lie on ridge pixels (0 < c <= 1).
    min_depth : float
        Least relative depth of a band below (dark) or above (bright) the local median
        grey level (>= 0), e.g. 0.035 = 3.5 %; lowered to as little as 0.3 times this
        where the region's noise is low enough (4 pixel-noise sigmas).
    min_significance : float
        Least significance ``-log10(NFA)`` of a family (see
        :mod:`tracefit.image.significance`). 0 is the a contrario threshold (families
        that aligned texture pixels, taken as independent, would give less than once per
        picture); texture pixels come in runs, so the default 16 is calibrated on
        negatives (scikit-image's gravel gives a family of 15.6); true families in
        grains of a few hundred pixels score from about 13, large ones in the hundreds.
    oversampling : int
        How many times finer the pixels are than the content, for an image enlarged after
        it was measured (0-4); 1 takes the pixels as they are, 2-4 states the enlargement.
        The image is then analysed as the original would be, so an enlarged map gives the
        same families, with lines, spacings and uncertainties in this image's pixels (and
        ``MIN_ANALYSED_PX`` counted in the original's points). 0 (the default) recognises
        an enlargement in blocks of equal pixels (nearest-neighbour; see
        :func:`tracefit.image.estimate_oversampling`) and only notes a smooth image that
        may have been enlarged by interpolation, which cannot be told from smooth
        content: state the factor for those.
    predicted_traces : sequence of float, optional
        Candidate planes' trace angles (degrees, image frame): small regions are also searched along
        each (stages 6c and 6d, not within 1 deg of an axis), at a lower threshold; ``BandFamily.sought_at``.
    notes : list of str, optional
        Notes to start the result with (e.g. from :func:`tracefit.image.read_image`).

    Returns
    -------
    DetectionResult
        Families strongest first, angles in degrees (image frame), band lines in pixels of
        ``image``, each with its ``log10_nfa``; an empty list when there are no bands, with
        ``verdict`` and ``reason`` saying why.

    Raises
    ------
    TracefitInputError
        A bad option (named in the message, see :data:`tracefit.image.options.DETECT_OPTIONS`),
        not a 2-D image, a constant or non-finite image, a mask or labels of another size,
        ``grain`` without ``labels`` or not in them.

    Examples
    --------
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> img, truth = render_micrograph((256, 256), [BandFamilySpec(30.0, spacing_px=20)], seed=1)
    >>> res = detect_bands(img)
    >>> [round(f.angle_deg, 1) for f in res.families]
    [30.0]
    >>> res.families[0].polarity, res.families[0].significance > 10, res.verdict
    ('dark', True, 'found')

    A float map with missing (NaN) points and bright bands, as a strain map:

    >>> img2, _ = render_micrograph((160, 160), [BandFamilySpec(120.0, 14, contrast=0.4)], seed=3)
    >>> strain = (img2 - img2.min()) * 0.05
    >>> strain[40:60, 40:60] = np.nan
    >>> [round(f.angle_deg) for f in detect_bands(strain).families]
    [120]
    >>> detect_bands(np.random.default_rng(0).normal(size=(128, 128))).verdict
    'not_significant'
    """
    # Over 80 lines only through its docstring (numpydoc with runnable examples); the code is short.
    opts = check_detect_options(pixel_size_um=pixel_size_um, find_bar=find_bar, min_bands=min_bands,
                                max_families=max_families, working_size=working_size, scales=scales,
                                min_coverage=min_coverage, min_depth=min_depth, min_significance=min_significance,
                                oversampling=oversampling)
    st = _Settings(**{k: opts[k] for k in ("min_bands", "max_families", "working_size", "scales", "min_coverage",
                                            "min_depth", "min_significance", "pixel_size_um", "oversampling")},
                   predicted_traces=_checked_traces(predicted_traces))
    if grain is not None and labels is None:
        raise TracefitInputError(f"grain={grain!r} needs labels (the grain label image)")
    if grain is not None:
        # one chain: a grain is analysed as detect_grains analyses it (its crop, context and checks)
        kw = {k: opts[k] for k in ("min_bands", "max_families", "working_size", "scales", "min_coverage", "min_depth",
                                   "min_significance", "oversampling")}
        traces = None if predicted_traces is None else {grain: predicted_traces}
        return _run_grains(detect_bands, image, labels, mask, pixel_size_um, path, 1, [grain],
                           {**kw, "find_bar": find_bar, "notes": notes, "predicted_traces": traces})[grain]
    pre_notes: list[str] = []
    img, m, finite = _prepare_input(image, mask, labels, grain, notes=pre_notes)
    problem = _working_size_problem(img.shape, st.working_size)
    if problem:
        raise TracefitInputError(problem)
    h, w = img.shape
    res = DetectionResult(path=path, width=w, height=h, notes=list(notes or []) + pre_notes,
                          pixel_size_um=pixel_size_um, grain=grain)

    bars = _exclude_databars(img, m, opts["find_bar"])  # stage 1
    res.excluded.extend(bars)
    res.notes.extend(b["note"] for b in bars)
    img = _positive_levels(img, m, res.notes, bars)
    if m is not None:
        if not m.any():
            res.verdict, res.reason = "no_pixels", "no pixels left to analyse after masking; no bands reported"
            res.notes.append(res.reason)
            return res
        if mask is not None:
            res.excluded.append({"kind": "mask", "bbox": [0, 0, w, h], "note": f"user mask keeps {100 * m.mean():.1f} % of the pixels"})
    # the enlargement is judged on the whole image (a grain or masked region alone holds too few points),
    # its NaN points left out (filled, their edges look like detail), as detect_grains judges it
    ov, note = _resolved(img, finite, st.oversampling)
    if note:
        res.notes.append(note)
    n_px = int(m.sum()) if m is not None else h * w
    least = MIN_ANALYSED_PX * ov.factor**2  # counted in the content's points
    if n_px < least:
        res.verdict = "too_small"
        res.reason = f"too small: {n_px} pixels to analyse, fewer than {least}; no bands reported"
        res.notes.append(res.reason)
        return res
    up, box = _small_region_factor(img.shape, m, ov.factor)
    if ov.factor > 1:
        if up == 1:  # a larger region of an enlarged image: the whole image, as the original's would be
            box = (slice(0, h), slice(0, w))
        out = _rescaled_outcome(img, m, bars, st, up, box, ov=ov)
    elif up > 1 and _reduction_factor(img.shape, st.working_size) == 1:
        out = _rescaled_outcome(img, m, bars, st, up, box)
    else:
        out = _with_coarser_looks(_detect_at_scale(img, m, bars, st), img, m, bars, st)
    _clip_to_image(out.families, w, h)
    res.families, res.verdict, res.reason = out.families, out.verdict, out.reason
    res.notes.extend(out.notes)
    res.notes.append(out.reason)
    return res
