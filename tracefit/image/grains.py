"""Band families grain by grain: :func:`detect_grains` runs :func:`detect_bands` on each grain's pixels."""

from __future__ import annotations

import numbers
from collections.abc import Iterable

import numpy as np
from scipy import ndimage

from tracefit.errors import TracefitInputError
from tracefit.image.detect import detect_bands
from tracefit.image.options import DETECT_OPTIONS, check_detect_options
from tracefit.image.prepare import MIN_SIDE_PX, _clear_boxes, _exclude_databars, _prepare_input, _working_size_problem
from tracefit.image.results import DetectionResult
from tracefit.image.sampling import _resolved

__all__ = ["detect_grains"]

GRAIN_MARGIN_PX = 8  # context kept around a grain's bounding box
# keywords detect_grains passes on to detect_bands
_PASSED_TO_DETECT_BANDS = ("find_bar", "min_bands", "max_families", "working_size", "scales", "min_coverage", "min_depth",
                          "min_significance", "oversampling", "notes")


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
    # find_objects lists every label up to the largest: only for ids of about the image's size
    small_ids = lab.min() >= -1 and int(lab.max()) <= 4 * lab.size
    objs = ndimage.find_objects(lab.astype(np.int64) + 1) if small_ids else None
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
    margin = GRAIN_MARGIN_PX * det_kw.get("oversampling", 1)  # the same context in an enlarged image
    r0, r1 = max(0, box[0].start - margin), min(h, box[0].stop + margin)
    c0, c1 = max(0, box[1].start - margin), min(w, box[1].stop + margin)
    gm = (lab[r0:r1, c0:c1] == gid) & base[r0:r1, c0:c1]
    if gm.sum() < min_pixels or min(gm.shape) < MIN_SIDE_PX:
        res_g.verdict, res_g.reason = "too_small", f"too small: {int(gm.sum())} pixels, fewer than {min_pixels}"
        res_g.notes.append(f"grain {gid}: {int(gm.sum())} pixels, too few to analyse (< {min_pixels})")
        return res_g
    crop = img[r0:r1, c0:c1]
    if float(crop[gm].max() - crop[gm].min()) <= 0:
        res_g.verdict, res_g.reason = "low_contrast", "too little contrast: constant grey level"
        res_g.notes.append(f"grain {gid}: constant grey level, no bands")
        return res_g
    problem = _working_size_problem(crop.shape, working_size)
    if problem:
        res_g.verdict, res_g.reason = "too_small", problem
        res_g.notes.append(f"grain {gid}: {problem}; not analysed")
        return res_g
    r = detect_bands(crop, mask=gm, pixel_size_um=res_g.pixel_size_um, find_bar=False, **det_kw)
    for fam in r.families:
        for ln in fam.lines:
            ln.col0 += c0
            ln.col1 += c0
            ln.row0 += r0
            ln.row1 += r0
    res_g.families, res_g.verdict, res_g.reason = r.families, r.verdict, r.reason
    res_g.notes.extend(f"grain {gid}: {t}" for t in r.notes)
    return res_g


def detect_grains(image: np.ndarray, labels: np.ndarray, mask: np.ndarray | None = None, pixel_size_um: float | None = None,
                  *, path: str | None = None, min_pixels: int = 300, grains: Iterable[int] | None = None,
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
        working_size, scales, min_coverage, min_depth, min_significance,
        oversampling, notes``. An ``oversampling`` of 0 (the default) is estimated once,
        on the whole image.

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
    if lab.dtype.kind == "f" and not (np.isfinite(lab).all() and (lab == np.round(lab)).all()):
        raise TracefitInputError("labels must hold whole-number grain ids; got NaN, infinite or fractional values")
    if lab.dtype.kind not in "biuf":
        raise TracefitInputError(f"labels must hold integer grain ids; got an array of {lab.dtype}")
    ids = _grain_ids(lab, grains)
    h, w = img.shape
    bars = _exclude_databars(img, None, find_bar)
    base = np.ones((h, w), bool) if m is None else m.copy()
    _clear_boxes(base, bars)
    # judged once on the whole image (a grain alone holds too few points), then stated to each grain
    ov, sampling_note = _resolved(img, m, kwargs.get("oversampling", 0))
    kwargs = {**kwargs, "oversampling": ov.factor}
    out: dict[int, DetectionResult] = {}
    for gid, box in _grain_boxes(lab, ids).items():
        res_g = DetectionResult(path=path, width=w, height=h, excluded=list(bars), pixel_size_um=pixel_size_um, grain=gid,
                                notes=[sampling_note] if sampling_note and ov.factor == 1 else [])
        out[gid] = _detect_one_grain(img, lab, base, gid, box, res_g, min_pixels, working_size, kwargs)
    return out
