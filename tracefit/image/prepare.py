"""Stages 1 and 2 of the band detector: checked input and the reduced working copy.

- :func:`_prepare_input` -- the image as 2-D float32 grey, checked (size, finite,
  contrast), with the user mask and the grain of a label image combined into one mask;
- :func:`_exclude_databars` -- instrument data bars found and taken out of the mask;
- :func:`_positive_levels` -- levels near zero (strain maps) shifted, judged without the bars;
- :func:`_working_copy` -- a copy reduced by an integer factor (at most ``MAX_REDUCTION``)
  to at most ``working_size`` px on a side (area averaging), its mask, and the region
  analysed for ridges (the mask eroded by the widest filter's reach).

Private to the package; the public entry points are in :mod:`tracefit.image.detect`.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass

import cv2
import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.image.databar import find_databar
from tracefit.image.io import to_gray

MIN_SIDE_PX = 16  # smallest image (and working copy) side that is analysed
# Largest reduction of the working copy: a band 3 px wide stays a working pixel wide. Without it a
# 64-MP image with the 16-MP benchmark's bands (4-6 px wide) was reduced 6x and lost the family of
# 4-px bands; the coarser looks (detect.COARSER_LOOKS) still see wide bands reduced further.
MAX_REDUCTION = 3


def _size_text(shape) -> str:
    return f"{shape[1]} x {shape[0]}"


def _same_size(name, arr, img) -> None:
    if arr.shape != img.shape:
        raise TracefitInputError(
            f"{name} is {arr.shape[-1]} x {arr.shape[0]} pixels but the image is {_size_text(img.shape)}; expected the same size"
        )


def _as_grey(image):
    """The image as a checked 2-D float32 grey array (RGB(A) to luminance) and its NaN holes.

    NaN pixels (e.g. where a strain map's correlation failed) are filled with the median
    of the others and returned as a mask, so that no filter spreads them; infinite values
    are an error.

    Returns
    -------
    img : ndarray of float32, (H, W)
    holes : ndarray of bool, (H, W), or None
        True at the NaN pixels (None when there are none).
    """
    img = np.asarray(image)
    if img.ndim == 3 and img.shape[2] in (3, 4):
        img = to_gray(img)
    if img.ndim != 2:
        raise TracefitInputError(f"image has shape {img.shape}; expected a 2-D grey image (or RGB(A))")
    if min(img.shape) < MIN_SIDE_PX:
        raise TracefitInputError(f"image is {_size_text(img.shape)} pixels; expected at least 16 x 16")
    if img.dtype.kind == "f" and img.dtype.itemsize > 4:
        # float64 levels beyond float32's range (or below its resolution) are rescaled first:
        # only their ratios matter to the detector
        fin = img[np.isfinite(img)]
        top = float(np.abs(fin).max()) if fin.size else 0.0
        if top > 0 and not 1e-30 < top < 1e30:
            img = img / top
    img = img.astype(np.float32, copy=False)
    holes = None
    step = max(1, (1 << 22) // max(1, img.shape[1]))  # row blocks: no full-size temporaries
    if not all(np.isfinite(img[r : r + step]).all() for r in range(0, img.shape[0], step)):
        if np.isinf(img).any():
            raise TracefitInputError("image contains infinite values; expected finite grey levels (NaN marks missing pixels)")
        holes = np.isnan(img)
        if holes.all():
            raise TracefitInputError("image is NaN everywhere; expected some finite grey levels")
        img = img.copy()
        img[holes] = np.median(img[~holes])
    lo, hi = float(img.min()), float(img.max())
    if hi - lo <= 0:
        raise TracefitInputError(f"image is constant (every pixel = {lo:g}); expected a micrograph with contrast")
    return img, holes


def _sampled_mask(shape, m, bars):
    """Steps ``(row, col)`` of a grid of at most about 512 x 512 points and the analysed points on it.

    The mask ``m[::row, ::col]`` with the end-exclusive ``bars`` boxes (full-image pixels)
    cleared, or None when there is neither a mask nor a bar.
    """
    step_r, step_c = max(1, shape[0] // 512), max(1, shape[1] // 512)
    if m is None and not bars:
        return (step_r, step_c), None
    n_r, n_c = -(-shape[0] // step_r), -(-shape[1] // step_c)
    ms = np.ones((n_r, n_c), bool) if m is None else m[::step_r, ::step_c].copy()
    for b in bars:
        c0, r0, c1, r1 = b["bbox"]
        # grid point k lies at pixel k * step: the first at or after r0, the first at or after r1
        ms[-(-r0 // step_r) : -(-r1 // step_r), -(-c0 // step_c) : -(-c1 // step_c)] = False
    return (step_r, step_c), ms


def _positive_levels(img, m, notes, bars=()):
    """Shift grey levels that reach zero or below up by their range (strain maps), in place of ``img``.

    The detector measures contrast relative to the local background level; a map whose
    background sits near zero (strain, height, difference images) has no such level.
    Adding the 1-99 % range keeps every contrast ratio finite; micrographs whose darkest
    percent stays above a tenth of their range are left as they are. The levels are judged
    on the analysed pixels: the mask ``m`` without the data ``bars`` (boxes, see
    :func:`_clear_boxes`), whose black text would otherwise pass for the image's darkest percent.
    """
    (step_r, step_c), ms = _sampled_mask(img.shape, m, bars)
    sample = img[::step_r, ::step_c]
    if ms is not None:
        sample = sample[ms] if ms.any() else sample
    p1, p99 = (float(v) for v in np.percentile(sample, [1, 99]))
    span = p99 - p1
    if span <= 0 or p1 >= 0.1 * span:
        return img
    shift = span - p1
    notes.append(f"grey levels shifted by {shift:+.4g} so that the darkest values stay positive (the depth test is a ratio "
                 f"to the local grey level)")
    return img + np.float32(shift)


def _check_label_ids(lab: np.ndarray) -> None:
    """Labels must be whole-number grain ids (bool, integer, or float holding whole numbers)."""
    if lab.dtype.kind not in "biuf":
        raise TracefitInputError(f"labels must hold integer grain ids; got an array of {lab.dtype}")
    if lab.dtype.kind == "f" and not (np.isfinite(lab).all() and (lab == np.round(lab)).all()):
        raise TracefitInputError("labels must hold whole-number grain ids; got NaN, infinite or fractional values")


def _prepare_input(image, mask, labels, grain, notes=None):
    """Checked grey image and the combined analysis mask.

    Parameters
    ----------
    image : array_like, (H, W) or (H, W, 3|4)
    mask : array_like of bool, (H, W), or None
    labels : array_like of int, (H, W), or None
    grain : int or None
        With ``labels``: only this grain's pixels are analysed.
    notes : list of str, optional
        What was done to the input (NaN masked) is appended here.

    Returns
    -------
    img : ndarray of float32, (H, W)
    m : ndarray of bool, (H, W), or None
        Pixels to analyse (None: all); NaN pixels are excluded.
    finite : ndarray of bool, (H, W), or None
        False at the image's NaN points (None when it has none).

    Raises
    ------
    TracefitInputError
        Bad image, mask or labels of another size, labels that are not whole-number grain
        ids, or a grain id that does not occur.
    """
    notes = [] if notes is None else notes
    img, holes = _as_grey(image)
    m = None
    if mask is not None:
        m = np.asarray(mask)
        _same_size("mask", m, img)
        m = m.astype(bool)
    if labels is not None:
        lab = np.asarray(labels)
        _same_size("label image", lab, img)
        _check_label_ids(lab)
        if grain is not None:
            if lab.dtype.kind in "biu" and isinstance(grain, numbers.Integral) and not isinstance(grain, (bool, np.bool_)):
                lo, hi = (0, 1) if lab.dtype.kind == "b" else (np.iinfo(lab.dtype).min, np.iinfo(lab.dtype).max)
                if not lo <= int(grain) <= hi:  # ``lab == grain`` would overflow
                    raise TracefitInputError(f"grain id {grain} does not occur in the label image")
            g = lab == grain
            if not g.any():
                raise TracefitInputError(f"grain id {grain} does not occur in the label image")
            m = g if m is None else (m & g)
    if holes is not None:
        notes.append(f"{int(holes.sum())} NaN pixels ({100 * holes.mean():.1f} %) masked")
        m = ~holes if m is None else (m & ~holes)
    return img, m, (None if holes is None else ~holes)


def _clear_boxes(mask, boxes) -> None:
    """Set the end-exclusive boxes ``{"bbox": [c0, r0, c1, r1]}`` of ``mask`` to False, in place."""
    for b in boxes:
        c0, r0, c1, r1 = b["bbox"]
        mask[r0:r1, c0:c1] = False


def _exclude_databars(img, m, find_bar: bool):
    """Instrument data bars of ``img`` (none unless ``find_bar``), cleared from the mask ``m`` in place."""
    bars = find_databar(img) if find_bar else []
    if m is not None:
        _clear_boxes(m, bars)
    return bars


def _reduction_factor(shape, working_size: int) -> int:
    """Integer factor that brings the longest side of ``shape`` to at most ``working_size``, at most ``MAX_REDUCTION``."""
    h, w = shape[:2]
    return max(1, min(MAX_REDUCTION, int(math.ceil(max(h, w) / working_size))))


def _working_size_problem(shape, working_size: int) -> str | None:
    """Why ``working_size`` cannot serve an image of ``shape`` (None when it can)."""
    h, w = shape[:2]
    f = _reduction_factor(shape, working_size)
    if min(h // f, w // f) >= MIN_SIDE_PX:
        return None
    need = int(math.ceil(max(h, w) / max(1, min(h, w) // MIN_SIDE_PX)))
    return (f"working_size={working_size} would reduce the {w} x {h} image to {w // f} x {h // f} pixels; "
            f"expected a working_size of at least {need} for this image")


@dataclass
class _WorkingCopy:
    """The reduced copy where bands are located (see :func:`_working_copy`)."""

    image: np.ndarray  # float32 (h, w), area-averaged copy of the image
    mask: np.ndarray | None  # bool (h, w): analysed pixels (None: all)
    region: np.ndarray  # bool (h, w): ``mask`` eroded by the widest ridge filter's reach
    factor: int  # reduction factor f: full = (working + 0.5) * f - 0.5
    background_px: float  # background (flattening) scale, working pixels
    note: str | None  # what the reduction did, for the user


def _working_copy(img, m, bars, working_size: int, scales) -> _WorkingCopy:
    """Reduce the image (and its mask) to at most ``working_size`` px on a side, by at most ``MAX_REDUCTION``.

    Parameters
    ----------
    img : ndarray of float32, (H, W)
    m : ndarray of bool or None
        Analysed pixels at full resolution (data bars already cleared).
    bars : list of dict
        Data bars (marked on the working mask when there is no full-resolution mask).
    working_size : int
        Longest side of the copy, px.
    scales : sequence of float
        Ridge-filter scales, working px; the region is eroded by ``2.5 * max(scales) + 1``.

    Returns
    -------
    _WorkingCopy
    """
    h, w = img.shape
    f = _reduction_factor(img.shape, working_size)
    note = None
    if f > 1:
        wk = cv2.resize(img, (w // f, h // f), interpolation=cv2.INTER_AREA)
        mw = None if m is None else cv2.resize(m.view(np.uint8) * np.uint8(255), (w // f, h // f), interpolation=cv2.INTER_AREA) >= 250
        note = f"bands located on a {w // f} x {h // f} copy (1/{f}), fitted at full resolution"
    else:
        wk, mw = img, (None if m is None else m.copy())
    if bars and m is None:
        # a bar alone: mark it on the working mask only (no full-size mask needed)
        mw = np.ones(wk.shape, bool)
        for b in bars:
            c0, r0, c1, r1 = b["bbox"]
            mw[max(0, r0 // f - 1) : -(-r1 // f), max(0, c0 // f - 1) : -(-c1 // f)] = False
    hw_, ww_ = wk.shape
    erode_r = int(math.ceil(2.5 * max(scales))) + 1
    if mw is not None:
        ker = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * erode_r + 1, 2 * erode_r + 1))
        region = cv2.erode(mw.astype(np.uint8), ker, borderType=cv2.BORDER_CONSTANT, borderValue=1) > 0
    else:
        region = np.ones((hw_, ww_), bool)
    return _WorkingCopy(wk, mw, region, f, max(24.0, min(hw_, ww_) / 12.0), note)
