"""Detect families of parallel straight bands (slip or twin traces) in a micrograph.

:func:`detect_bands` runs one image (or one grain), :func:`detect_grains` every grain of a
label image. The pipeline, one concern per stage and module:

1. **Input** (:mod:`~tracefit.image.prepare`): the image as checked float32 grey, the user
   mask and the grain combined; instrument data bars (:mod:`~tracefit.image.databar`)
   excluded.
2. **Working copy** (:mod:`~tracefit.image.prepare`): a copy reduced to at most
   ``working_size`` px on a side, its mask, and the analysed region (the mask eroded by
   the ridge filter's reach).
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
7. **Selection**: dark and bright "families" at one angle (bands and the gaps between
   them) resolved in favour of the one further from the median grey; strongest first.

Angles are image-frame, axial, degrees ccw from +x (:mod:`tracefit.conventions`); pixel
coordinates are (column, row), rows down. The options and their ranges are declared in
:mod:`tracefit.image.options`.

Where a change goes: how masks and small regions are handled -- ``_working_copy`` (the
erosion) and ``hough._chord_lengths`` (vote normalisation); float maps with holes --
``prepare._as_grey``; more families per region -- ``_fit_candidates`` and
``_distinct_families``; a significance per family -- a stage between
``families._build_family`` and ``_distinct_families``.
"""

from __future__ import annotations

import math
import numbers
from collections.abc import Iterable, Sequence

import numpy as np
from scipy import ndimage

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.image.depth import _depth_map, _hough_depth, _on_band_side
from tracefit.image.families import _build_family, _FamilyContext
from tracefit.image.hough import SECTOR_DEG, _chord_lengths, _cluster_angles, _hough_theta, _line_candidates, _vote_mean_angle
from tracefit.image.options import DETECT_OPTIONS, check_detect_options
from tracefit.image.prepare import (
    MIN_SIDE_PX,
    _clear_boxes,
    _exclude_databars,
    _prepare_input,
    _working_copy,
    _working_size_problem,
    _WorkingCopy,
)
from tracefit.image.results import BandFamily, BandLine, DetectionResult
from tracefit.image.ridges import RidgePixels, _pixel_noise, flatten_background, ridge_pixels

__all__ = ["BandLine", "BandFamily", "DetectionResult", "detect_bands", "detect_grains"]

MIN_REGION_PX = 400  # fewest analysed working-copy pixels
SAME_FAMILY_DEG = 2.0  # families closer than this are one
GRAIN_MARGIN_PX = 8  # context kept around a grain's bounding box
# keywords detect_grains passes on to detect_bands
_PASSED_TO_DETECT_BANDS = ("find_bar", "min_bands", "max_families", "working_size", "scales", "min_coverage", "min_depth", "notes")


# --------------------------------------------------------------------------- stages


def _band_pixels(wc: _WorkingCopy, scales, min_depth):
    """Stage 3: ridge pixels (dark, bright) on the band side of the local median grey, and the depth sampler."""
    flat = flatten_background(wc.image, wc.mask, wc.background_px)
    dark, bright = ridge_pixels(flat, wc.region, sector_deg=SECTOR_DEG, scales=scales)
    del flat
    depth_of, dmap = _depth_map(wc.image, wc.mask, wc.factor, spacing_hint=wc.background_px)
    # band pixels must lie below (dark) / above (bright) the local median grey: this drops
    # the gaps between bands, which are ridges of the opposite sign at the median level
    ridges = [_on_band_side(rp, dmap, 0.5 * min_depth) for rp in (dark, bright)]
    return ridges, depth_of


def _candidate_families(ridges: Sequence[RidgePixels], region, min_bands, min_coverage):
    """Stage 4: Hough lines per polarity clustered by angle; (ridge pixels, lines) per candidate, most votes first."""
    theta, alpha = _hough_theta()
    chord, _ = _chord_lengths(region, theta)
    v_min = max(20.0, 0.06 * min(region.shape))
    cands = []
    for rp in ridges:
        lines = _line_candidates(rp, theta, alpha, chord, v_min, min_coverage)
        if len(lines) == 0:
            continue
        for grp in _cluster_angles(lines[:, 0], lines[:, 3]):
            if len(grp) < min_bands:
                continue
            cands.append((rp, lines[grp]))
    # opposite-polarity echoes (the gaps between bands) are resolved after fitting,
    # where they fail the sharpness test
    cands.sort(key=lambda c: -c[1][:, 3].sum())
    return cands


def _screen_candidates(cands, depth_of, wc: _WorkingCopy, min_depth):
    """Stage 5: keep candidates whose strongest Hough lines are deeper than the local median grey, deepest first.

    A cheap test before the full-resolution fits (it rejects the gaps between bands), and
    the order puts a band family before the gaps beside it.
    """
    scored = [(_hough_depth(rp, ln, depth_of, wc.factor, wc.region), rp, ln) for rp, ln in cands]
    scored = [c for c in scored if c[0] >= 0.6 * min_depth]
    scored.sort(key=lambda c: -c[0])
    return [(rp, ln) for _, rp, ln in scored]


def _fit_candidates(ctx: _FamilyContext, cands, max_families) -> list[BandFamily]:
    """Stage 6: build a family from each candidate, at most ``3 * max_families`` attempts."""
    fams: list[BandFamily] = []
    attempts = 0
    for rp, ln in cands:
        if attempts >= 3 * max_families:
            break
        a_c = _vote_mean_angle(ln)
        if any(abs(axial_difference(a_c, fm.angle_deg)) < SAME_FAMILY_DEG for fm in fams):
            continue  # a split cluster of a family already fitted, or its gaps
        attempts += 1
        fam = _build_family(ctx, rp, ln)
        if fam is not None:
            fams.append(fam)
    return fams


def _distinct_families(fams: list[BandFamily]) -> list[BandFamily]:
    """Stage 7: one family per angle, strongest first.

    Dark and bright "families" at one angle are the bands and the gaps between them; the
    bands stand further from the median grey than the gaps do.
    """
    final: list[BandFamily] = []
    for fm in sorted(fams, key=lambda fm: -abs(fm.contrast)):
        if any(abs(axial_difference(fm.angle_deg, g.angle_deg)) < SAME_FAMILY_DEG for g in final):
            continue
        final.append(fm)
    final.sort(key=lambda fm: -fm.strength)
    return final


def _summary_note(families: list[BandFamily]) -> str:
    if not families:
        return "no band families found"
    return (f"{len(families)} band famil{'y' if len(families) == 1 else 'ies'} found: "
            + ", ".join(f"{fm.angle_deg:.2f} deg ({fm.n_bands} bands)" for fm in families))


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
        Grain label image; with ``grain`` only that grain's pixels are analysed (see
        :func:`detect_grains` to run every grain).
    grain : int, optional
        Grain id in ``labels`` (needs ``labels``).
    path : str, optional
        Source file name, carried into the result.
    find_bar : bool
        Look for an instrument data bar and exclude it.
    min_bands : int
        Fewest parallel bands that make a family (>= 1; isolated scratches make none at
        the default 3).
    max_families : int
        Most families reported (>= 1).
    working_size : int
        Longest side of the reduced copy used for ridge enhancement and Hough, pixels
        (>= 16, and large enough that the copy keeps 16 pixels on its short side).
    scales : sequence of float
        Hessian scales at working resolution, pixels (each > 0 and <= 64; about half the
        band widths looked for).
    min_coverage : float
        Least fraction of a Hough chord that must lie on ridge pixels (>= 0).
    min_depth : float
        Least relative depth of a band below (dark) or above (bright) the local median
        grey level (>= 0), e.g. 0.035 = 3.5 %.
    notes : list of str, optional
        Notes to start the result with (e.g. from :func:`tracefit.image.read_image`).

    Returns
    -------
    DetectionResult
        Families strongest first, angles in degrees (image frame), band lines in pixels of
        ``image``; an empty list (with a note) when there are no bands.

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
    >>> res.families[0].polarity
    'dark'
    """
    # Over 80 lines only through its docstring (numpydoc with a runnable example); the code is short.
    opts = check_detect_options(pixel_size_um=pixel_size_um, find_bar=find_bar, min_bands=min_bands,
                                max_families=max_families, working_size=working_size, scales=scales,
                                min_coverage=min_coverage, min_depth=min_depth)
    min_bands, max_families, working_size, scales = (opts[k] for k in ("min_bands", "max_families", "working_size", "scales"))
    if grain is not None and labels is None:
        raise TracefitInputError(f"grain={grain!r} needs labels (the grain label image)")
    img, m = _prepare_input(image, mask, labels, grain)
    problem = _working_size_problem(img.shape, working_size)
    if problem:
        raise TracefitInputError(problem)
    h, w = img.shape
    res = DetectionResult(path=path, width=w, height=h, notes=list(notes or []), pixel_size_um=pixel_size_um, grain=grain)

    bars = _exclude_databars(img, m, opts["find_bar"])  # stage 1
    res.excluded.extend(bars)
    res.notes.extend(b["note"] for b in bars)
    if m is not None:
        if not m.any():
            res.notes.append("no pixels left to analyse after masking; no bands reported")
            return res
        if mask is not None:
            res.excluded.append({"kind": "mask", "bbox": [0, 0, w, h], "note": f"user mask keeps {100 * m.mean():.1f} % of the pixels"})

    wc = _working_copy(img, m, bars, working_size, scales)  # stage 2
    if wc.note:
        res.notes.append(wc.note)
    if wc.region.sum() < MIN_REGION_PX:
        res.notes.append("analysed region too small for band detection; no bands reported")
        return res

    ridges, depth_of = _band_pixels(wc, scales, min_depth)  # stage 3
    cands = _candidate_families(ridges, wc.region, min_bands, min_coverage)  # stage 4
    ctx = _FamilyContext(
        image=img, valid=None if wc.mask is None else wc.mask.astype(np.uint8), factor=wc.factor,
        pixel_noise=_pixel_noise(img, m, bars), depth_of=depth_of, diag_w=math.hypot(*wc.image.shape),
        pixel_size_um=pixel_size_um, min_bands=min_bands, min_depth=min_depth,
    )
    fams = _fit_candidates(ctx, _screen_candidates(cands, depth_of, wc, min_depth), max_families)  # stages 5, 6
    res.families = _distinct_families(fams)[:max_families]  # stage 7
    res.notes.append(_summary_note(res.families))
    return res


def _grain_ids(lab, grains) -> list[int]:
    """The grain ids to analyse, checked against the label image."""
    if grains is None:
        return [int(g) for g in np.unique(lab)]
    if isinstance(grains, (str, bytes)) or not isinstance(grains, Iterable):
        raise TracefitInputError(f"grains must be a sequence of integer grain ids, got {grains!r}")
    ids = []
    for g in grains:
        if isinstance(g, (bool, np.bool_)) or not isinstance(g, numbers.Integral):
            raise TracefitInputError(f"grains must hold integer grain ids, got {g!r}")
        ids.append(int(g))
    present = set(int(x) for x in np.unique(lab))
    for g in ids:
        if g not in present:
            raise TracefitInputError(f"grain id {g} does not occur in the label image")
    return ids


def _grain_boxes(lab, ids):
    """Bounding slices (rows, cols) of each grain id."""
    objs = ndimage.find_objects(lab.astype(np.int64) + 1) if lab.min() >= -1 else None
    boxes = {}
    for gid in ids:
        # find_objects(lab + 1)[i] is the box of label i (ids from 0 up)
        if objs is not None and 0 <= gid < len(objs) and objs[gid] is not None:
            boxes[gid] = objs[gid]
        else:
            rr, cc = np.nonzero(lab == gid)
            boxes[gid] = (slice(rr.min(), rr.max() + 1), slice(cc.min(), cc.max() + 1))
    return boxes


def _detect_one_grain(img, lab, base, gid, box, res_g: DetectionResult, min_pixels, working_size, det_kw) -> DetectionResult:
    """Run :func:`detect_bands` on one grain's crop; lines shifted back to whole-image pixels."""
    h, w = img.shape
    r0, r1 = max(0, box[0].start - GRAIN_MARGIN_PX), min(h, box[0].stop + GRAIN_MARGIN_PX)
    c0, c1 = max(0, box[1].start - GRAIN_MARGIN_PX), min(w, box[1].stop + GRAIN_MARGIN_PX)
    gm = (lab[r0:r1, c0:c1] == gid) & base[r0:r1, c0:c1]
    if gm.sum() < min_pixels or min(gm.shape) < MIN_SIDE_PX:
        res_g.notes.append(f"grain {gid}: {int(gm.sum())} pixels, too few to analyse (< {min_pixels})")
        return res_g
    crop = img[r0:r1, c0:c1]
    if float(crop[gm].max() - crop[gm].min()) <= 0:
        res_g.notes.append(f"grain {gid}: constant grey level, no bands")
        return res_g
    problem = _working_size_problem(crop.shape, working_size)
    if problem:
        res_g.notes.append(f"grain {gid}: {problem}; not analysed")
        return res_g
    r = detect_bands(crop, mask=gm, pixel_size_um=res_g.pixel_size_um, find_bar=False, **det_kw)
    for fam in r.families:
        for ln in fam.lines:
            ln.col0 += c0
            ln.col1 += c0
            ln.row0 += r0
            ln.row1 += r0
    res_g.families = r.families
    res_g.notes.extend(f"grain {gid}: {t}" for t in r.notes)
    return res_g


def detect_grains(image: np.ndarray, labels: np.ndarray, mask: np.ndarray | None = None, pixel_size_um: float | None = None,
                  *, path: str | None = None, min_pixels: int = 2500, grains: Iterable[int] | None = None,
                  **kwargs) -> dict[int, DetectionResult]:
    """Run :func:`detect_bands` on every grain of a label image, each on its own pixels.

    Each grain is cropped to its bounding box (plus 8 px) and analysed with the other
    grains masked out; a data bar is looked for once, on the whole image.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        Grey (any units) or RGB(A) image.
    labels : ndarray of int, (H, W)
        Grain ids; every id is a grain (pass ``grains`` to choose some).
    mask : ndarray of bool, (H, W), optional
        Pixels to analyse, combined with each grain.
    pixel_size_um : float, optional
        Micrometres per pixel (> 0).
    path : str, optional
        Source file name, carried into the results.
    min_pixels : int
        Grains with fewer analysable pixels are skipped, with a note in their result (>= 0).
    grains : iterable of int, optional
        Grain ids to analyse (default: all ids of ``labels``).
    **kwargs
        Options of :func:`detect_bands`: ``find_bar, min_bands, max_families,
        working_size, scales, min_coverage, min_depth, notes``.

    Returns
    -------
    dict of int -> DetectionResult
        One result per grain id (``grain`` set); band lines in whole-image pixels.

    Raises
    ------
    TracefitInputError
        A bad option, image, mask or label image (as :func:`detect_bands`), or a grain id
        that is not an integer or does not occur in ``labels``.
    TypeError
        A keyword that :func:`detect_bands` does not take.

    Examples
    --------
    >>> import numpy as np
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> labels = np.zeros((256, 256), int)
    >>> labels[:, 128:] = 1
    >>> img, _ = render_micrograph((256, 256), labels=labels, seed=2,
    ...     grain_families={0: [BandFamilySpec(30.0, 16)], 1: [BandFamilySpec(120.0, 16)]})
    >>> out = detect_grains(img, labels)
    >>> {g: [round(f.angle_deg, 1) for f in r.families] for g, r in out.items()}
    {0: [30.0], 1: [120.0]}
    """
    unknown = sorted(set(kwargs) - set(_PASSED_TO_DETECT_BANDS))
    if unknown:
        raise TypeError(f"detect_grains() got an unexpected keyword argument {unknown[0]!r}")
    find_bar = kwargs.pop("find_bar", True)
    checked = check_detect_options(pixel_size_um=pixel_size_um, find_bar=find_bar, min_pixels=min_pixels,
                                   **{k: v for k, v in kwargs.items() if k != "notes"})
    working_size = checked.get("working_size", DETECT_OPTIONS["working_size"].default)
    img, m = _prepare_input(image, mask, labels, None)
    lab = np.asarray(labels)
    ids = _grain_ids(lab, grains)
    h, w = img.shape
    bars = _exclude_databars(img, None, find_bar)
    base = np.ones((h, w), bool) if m is None else m.copy()
    _clear_boxes(base, bars)
    out: dict[int, DetectionResult] = {}
    for gid, box in _grain_boxes(lab, ids).items():
        res_g = DetectionResult(path=path, width=w, height=h, excluded=list(bars), pixel_size_um=pixel_size_um, grain=gid)
        out[gid] = _detect_one_grain(img, lab, base, gid, box, res_g, min_pixels, working_size, kwargs)
    return out
