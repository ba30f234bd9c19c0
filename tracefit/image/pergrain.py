"""Band families grain by grain, as :func:`tracefit.image.detect_grains` and
:func:`tracefit.image.detect_bands` (with ``labels`` and ``grain``) both run them (private).

Each grain is cropped to its bounding box plus a margin and analysed with the other grains
masked out, by the ``detect`` function handed in (``detect_bands``: this module imports
neither entry point, so each can call it).
"""

from __future__ import annotations

import numbers
from collections.abc import Iterable, Mapping

import numpy as np
from scipy import ndimage

from tracefit.errors import TracefitInputError
from tracefit.image.options import DETECT_OPTIONS, check_detect_options
from tracefit.image.prepare import (MIN_SIDE_PX, _clear_boxes, _exclude_databars, _positive_levels, _prepare_input,
                                    _working_size_problem)
from tracefit.image.projection import _checked_traces
from tracefit.image.results import DetectionResult
from tracefit.image.sampling import _resolved

__all__: list[str] = []

GRAIN_MARGIN_PX = 8  # context kept around a grain's bounding box
# keywords detect_grains passes on to detect_bands
_PASSED_TO_DETECT_BANDS = ("find_bar", "min_bands", "max_families", "working_size", "scales", "min_coverage", "min_depth",
                          "min_significance", "oversampling", "notes", "predicted_traces")


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


def _traces_by_grain(traces) -> dict:
    """``predicted_traces`` of detect_grains: grain id -> angles (degrees), each checked; empty for None."""
    if traces is None:
        return {}
    if not isinstance(traces, Mapping):
        raise TracefitInputError("predicted_traces of detect_grains must be a dict: grain id -> trace angles in degrees")
    out = {}
    for g, v in traces.items():
        whole = isinstance(g, numbers.Integral) or (isinstance(g, numbers.Real) and float(g).is_integer())
        if isinstance(g, (bool, np.bool_)) or not whole:
            raise TracefitInputError(f"predicted_traces keys must be integer grain ids, got {g!r}")
        out[int(g)] = _checked_traces(v, int(g))
    return out


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


def _detect_one_grain(detect, img, lab, base, gid, box, res_g: DetectionResult, min_pixels, working_size,
                      det_kw) -> DetectionResult:
    """Run ``detect`` (:func:`detect_bands`) on one grain's crop; lines shifted back to whole-image pixels."""
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
    r = detect(crop, mask=gm, pixel_size_um=res_g.pixel_size_um, find_bar=False, **det_kw)
    for fam in r.families:
        for ln in fam.lines:
            ln.col0 += c0
            ln.col1 += c0
            ln.row0 += r0
            ln.row1 += r0
    res_g.families, res_g.verdict, res_g.reason = r.families, r.verdict, r.reason
    # the image's sampling note is the grain's already (detect_bands repeats it for the factor it was given)
    res_g.notes.extend(f"grain {gid}: {t}" for t in r.notes if not t.startswith("pixels taken as"))
    return res_g


def _run_grains(detect, image, labels, mask, pixel_size_um, path, min_pixels, grains, kwargs) -> dict[int, DetectionResult]:
    """:func:`tracefit.image.detect_grains` with ``detect`` = :func:`tracefit.image.detect_bands` (see there)."""
    unknown = sorted(set(kwargs) - set(_PASSED_TO_DETECT_BANDS))
    if unknown:
        raise TypeError(f"detect_grains() got an unexpected keyword argument {unknown[0]!r}")
    find_bar = kwargs.pop("find_bar", True)
    traces = _traces_by_grain(kwargs.pop("predicted_traces", None))
    checked = check_detect_options(pixel_size_um=pixel_size_um, find_bar=find_bar, min_pixels=min_pixels,
                                   **{k: v for k, v in kwargs.items() if k != "notes"})
    working_size = checked.get("working_size", DETECT_OPTIONS["working_size"].default)
    img, m, finite = _prepare_input(image, mask, labels, None)
    lab = np.asarray(labels)
    ids = _grain_ids(lab, grains)
    h, w = img.shape
    bars = _exclude_databars(img, None, find_bar)
    level_notes: list[str] = []
    img = _positive_levels(img, m, level_notes, bars)  # judged on the whole image without its bars
    base = np.ones((h, w), bool) if m is None else m.copy()
    _clear_boxes(base, bars)
    # judged once on the whole image (a grain alone holds too few points), then stated to each grain;
    # grain sizes are counted in the content's points
    ov, sampling_note = _resolved(img, finite, kwargs.get("oversampling", 0))
    kwargs = {**kwargs, "oversampling": ov.factor}
    out: dict[int, DetectionResult] = {}
    for gid, box in _grain_boxes(lab, ids).items():
        res_g = DetectionResult(path=path, width=w, height=h, excluded=list(bars), pixel_size_um=pixel_size_um, grain=gid,
                                notes=level_notes + ([sampling_note] if sampling_note else []))
        kw_g = {**kwargs, "predicted_traces": traces.get(gid)} if traces else kwargs
        out[gid] = _detect_one_grain(detect, img, lab, base, gid, box, res_g, min_pixels * ov.factor**2, working_size, kw_g)
    return out
