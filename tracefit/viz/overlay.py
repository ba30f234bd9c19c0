"""Predicted traces drawn on a picture (or a blank canvas), so a person sees which plane fits.

Every candidate plane's predicted trace is drawn as a line through the image centre, or
through each grain's centroid when a grain label image is given, labelled with its plane,
with a translucent wedge of +- k sigma around it. sigma is the spread of the predicted
trace angle that the orientation uncertainty causes, propagated exactly as the matcher
does (:func:`tracefit.identify.matching.predicted_trace_sigma`): sigma_orient / sin(inclination),
times the stage-tilt foreshortening slope. A legend panel to the right of the picture lists
each trace's plane, modes and angle; the picture's own pixels keep their coordinates.

Colours are the detection overlay's palette (:data:`tracefit.image.draw.FAMILY_COLOURS`):
trace ``i`` of a grain (in the order given) gets ``FAMILY_COLOURS[i % 8]``. Angles follow
:mod:`tracefit.conventions` (image frame, y up; pixel rows down).
"""

from __future__ import annotations

import math
from pathlib import Path

import cv2
import numpy as np

from tracefit.conventions import angle_to_pixel_direction
from tracefit.errors import TracefitInputError
from tracefit.image.draw import FAMILY_COLOURS, _to_rgb8
from tracefit.image import draw_detection as draw_detected
from tracefit.identify import predicted_trace_sigma

__all__ = [
    "DEFAULT_K_SIGMA",
    "WEDGE_ALPHA",
    "CANVAS_BACKGROUND",
    "trace_sigma_deg",
    "grain_centres",
    "parse_canvas_size",
    "draw_predicted",
    "draw_detected",
    "write_overlay",
]

DEFAULT_K_SIGMA = 2.0  # wedge half-width in sigmas (about 95 % for a Gaussian)
WEDGE_ALPHA = 0.28  # wedge opacity over the picture
CANVAS_BACKGROUND = (32, 32, 32)  # RGB of a blank canvas: dark, so every palette colour shows
_PANEL_BG = (24, 24, 24)
_SHIFT = 4  # cv2 sub-pixel bits
_MAX_CANVAS = 20000


def trace_sigma_deg(traces, orientation_sigma_deg: float, frame=None) -> np.ndarray:
    """Spread (deg) of each predicted trace's angle from the orientation uncertainty.

    Parameters
    ----------
    traces : sequence of tracefit.predict.traces.PredictedTrace
    orientation_sigma_deg : float
        One-sigma orientation error about each sample axis, degrees.
    frame : tracefit.conventions.FrameSettings, optional
        With a stage tilt, the spread scales with d(apparent)/d(true).

    Returns
    -------
    ndarray (len(traces),), degrees.
    """
    if not (math.isfinite(orientation_sigma_deg) and orientation_sigma_deg >= 0):
        raise TracefitInputError(f"the orientation sigma must be >= 0 degrees, got {orientation_sigma_deg!r}")
    incl = np.array([t.inclination_deg for t in traces], float)
    true = np.array([t.true_angle_deg for t in traces], float)
    slope = np.ones_like(true)
    if frame is not None and float(frame.tilt_deg) != 0.0:
        from tracefit.conventions import axial_difference
        from tracefit.conventions import apparent_angle

        h = 0.05
        slope = np.asarray(axial_difference(apparent_angle(true + h, frame), apparent_angle(true - h, frame)), float) / (2 * h)
    return np.asarray(predicted_trace_sigma(incl, orientation_sigma_deg, slope), float).reshape(-1)


def grain_centres(labels, grains=None) -> dict:
    """Centroid (col, row) and equivalent radius (px) of each grain of a label image.

    When a grain's centroid falls outside it (a curved grain), its innermost pixel (largest
    distance to the boundary) is used instead, so the drawn traces start inside the grain.

    Returns
    -------
    dict grain id -> (col, row, radius_px)
    """
    lab = np.asarray(labels)
    ids = sorted(int(x) for x in np.unique(lab)) if grains is None else [int(x) for x in grains]
    out = {}
    for gid in ids:
        m = lab == gid
        n = int(m.sum())
        if n == 0:
            continue
        rr, cc = np.nonzero(m)
        c0, r0 = float(cc.mean()), float(rr.mean())
        if not m[int(round(r0)), int(round(c0))]:
            dist = cv2.distanceTransform(np.pad(m, 1).astype(np.uint8), cv2.DIST_L2, 3)[1:-1, 1:-1]
            r_i, c_i = np.unravel_index(int(np.argmax(dist)), dist.shape)
            c0, r0 = float(c_i), float(r_i)
        out[gid] = (c0, r0, math.sqrt(n / math.pi))
    return out


def parse_canvas_size(text: str) -> tuple[int, int]:
    """``"800x600"`` -> (width, height) in pixels."""
    t = str(text).strip().lower().replace(" ", "")
    parts = t.replace("*", "x").split("x")
    try:
        w, h = (int(parts[0]), int(parts[1])) if len(parts) == 2 else (None, None)
    except ValueError:
        w, h = None, None
    if w is None or not (16 <= w <= _MAX_CANVAS and 16 <= h <= _MAX_CANVAS):
        raise TracefitInputError(f"cannot read the canvas size {text!r}; expected WIDTHxHEIGHT in pixels, e.g. 800x600 (16 to {_MAX_CANVAS})")
    return w, h


def _plane_text(plane) -> str:
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in plane), "plane")


def _pt(c, r):
    return int(round(c * (1 << _SHIFT))), int(round(r * (1 << _SHIFT)))


def _wedge_mask(shape, c0, r0, angle, half_width, radius) -> np.ndarray:
    """Mask of the double wedge angle +- half_width (deg) around (c0, r0), out to ``radius`` px."""
    mask = np.zeros(shape, np.uint8)
    n = max(4, int(math.ceil(2 * half_width)))
    polys = []
    for base in (angle, angle + 180.0):
        ts = np.linspace(base - half_width, base + half_width, n + 1)
        dc, dr = angle_to_pixel_direction(ts)
        pts = [_pt(c0, r0)] + [_pt(c0 + radius * a, r0 + radius * b) for a, b in zip(dc, dr)]
        polys.append(np.array(pts, np.int32))
    cv2.fillPoly(mask, polys, 1, cv2.LINE_8, _SHIFT)
    return mask.astype(bool)


def _clipped_segment(w, h, c0, r0, angle, half_length):
    dc, dr = angle_to_pixel_direction(angle)
    # clip to the picture (pixel centres span -0.5 .. w - 0.5)
    t0, t1 = -half_length, half_length
    for d, x0, lo, hi in ((dc, c0, -0.5, w - 0.5), (dr, r0, -0.5, h - 0.5)):
        if abs(d) < 1e-12:
            if not (lo <= x0 <= hi):
                return None
            continue
        a, b = (lo - x0) / d, (hi - x0) / d
        t0, t1 = max(t0, min(a, b)), min(t1, max(a, b))
    if t1 <= t0:
        return None
    return (c0 + t0 * dc, r0 + t0 * dr), (c0 + t1 * dc, r0 + t1 * dr)


def _dashed(img, q0, q1, colour, lw, dash_px):
    L = math.hypot(q1[0] - q0[0], q1[1] - q0[1])
    n = max(1, int(L // dash_px))
    for k in range(0, n, 2):
        a, b = k / n, min(1.0, (k + 1) / n)
        s0 = (q0[0] + a * (q1[0] - q0[0]), q0[1] + a * (q1[1] - q0[1]))
        s1 = (q0[0] + b * (q1[0] - q0[0]), q0[1] + b * (q1[1] - q0[1]))
        cv2.line(img, _pt(*s0), _pt(*s1), colour, lw, cv2.LINE_AA, _SHIFT)


def _text(img, text, org, scale, colour, th):
    # dark outline first so the label reads on bright and dark backgrounds alike
    cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, scale, (0, 0, 0), th + 2, cv2.LINE_AA)
    cv2.putText(img, text, org, cv2.FONT_HERSHEY_SIMPLEX, scale, colour, th, cv2.LINE_AA)


def draw_predicted(
    traces,
    image=None,
    canvas_size: tuple[int, int] | None = None,
    orientation_sigma_deg: float = 1.0,
    frame=None,
    k_sigma: float = DEFAULT_K_SIGMA,
    labels=None,
    line_width: int | None = None,
    legend: bool = True,
    title: str | None = None,
) -> np.ndarray:
    """Draw predicted traces with their uncertainty wedges on a picture or a blank canvas.

    Parameters
    ----------
    traces : sequence of PredictedTrace, or dict grain -> sequence of PredictedTrace
        From :func:`tracefit.predict.traces.predict_traces`. A dict (one entry per grain) needs
        ``labels``; a sequence is drawn through the picture's centre.
    image : ndarray (H, W) or (H, W, 3|4), optional
        The picture (any units; contrast-stretched for display).
    canvas_size : (width, height), optional
        Blank canvas size in pixels when there is no image (default 800 x 800).
    orientation_sigma_deg : float
        One-sigma orientation error about each sample axis, degrees (default 1).
    frame : FrameSettings, optional
        Used for the tilt slope of the spread (the traces already carry the frame).
    k_sigma : float
        Wedge half-width in sigmas (default 2).
    labels : ndarray of int (H, W), optional
        Grain label image: each grain's traces are drawn through its centroid.
    line_width : int, optional
        Line width, px (default scales with the picture).
    legend : bool
        Add the legend panel to the right of the picture.
    title : str, optional
        First line of the legend.

    Returns
    -------
    ndarray of uint8, (H, W + panel, 3), RGB. Pixel (col, row) of the picture stays at
    ``[row, col]``; the legend panel (if any) lies to the right, from column W.
    """
    if not (math.isfinite(k_sigma) and k_sigma > 0):
        raise TracefitInputError(f"the wedge width must be a positive number of sigmas, got {k_sigma!r}")
    if image is not None:
        base = _to_rgb8(image)
    else:
        w, h = canvas_size if canvas_size is not None else (800, 800)
        if not (16 <= int(w) <= _MAX_CANVAS and 16 <= int(h) <= _MAX_CANVAS):
            raise TracefitInputError(f"canvas size must be 16 to {_MAX_CANVAS} px each way, got {w}x{h}")
        base = np.empty((int(h), int(w), 3), np.uint8)
        base[:] = CANVAS_BACKGROUND
    h, w = base.shape[:2]
    if isinstance(traces, dict):
        if labels is None:
            raise TracefitInputError("traces per grain need the grain label image to place them")
        lab = np.asarray(labels)
        if lab.shape[:2] != (h, w):
            raise TracefitInputError(f"the grain label image is {lab.shape[1]}x{lab.shape[0]} px but the picture is {w}x{h} px")
        centres = grain_centres(lab, list(traces))
        groups = [(gid, traces[gid], centres[gid]) for gid in traces if gid in centres]
    else:
        if labels is not None:
            raise TracefitInputError("with a grain label image give the traces per grain (dict grain -> traces)")
        groups = [(None, list(traces), ((w - 1) / 2.0, (h - 1) / 2.0, None))]
    lw = line_width or max(2, int(round(max(h, w) / 500)))
    scale = max(0.4, min(h, w) / 1100.0)
    th = max(1, int(round(scale * 1.4)))
    entries = []
    for gid, trs, (c0, r0, rad) in groups:
        trs = list(trs)
        if not trs:
            continue
        sig = trace_sigma_deg(trs, orientation_sigma_deg, frame)
        half = math.hypot(w, h) if rad is None else max(15.0, rad)
        # wedges first, all lines on top: a line's pixels keep its exact colour
        for i, (t, s) in enumerate(zip(trs, sig)):
            col = np.array(FAMILY_COLOURS[i % len(FAMILY_COLOURS)], np.float32)
            hw = k_sigma * float(s)
            if 0.0 < hw < 90.0:
                m = _wedge_mask((h, w), c0, r0, t.angle_deg, hw, half)
                base[m] = np.clip(base[m].astype(np.float32) * (1 - WEDGE_ALPHA) + col * WEDGE_ALPHA + 0.5, 0, 255).astype(np.uint8)
        for i, (t, s) in enumerate(zip(trs, sig)):
            col = FAMILY_COLOURS[i % len(FAMILY_COLOURS)]
            seg = _clipped_segment(w, h, c0, r0, t.angle_deg, half)
            if seg is None:
                continue
            q0, q1 = seg
            if t.near_surface:
                _dashed(base, q0, q1, col, lw, max(6.0, 8.0 * lw))
            else:
                cv2.line(base, _pt(*q0), _pt(*q1), col, lw, cv2.LINE_AA, _SHIFT)
            name = _plane_text(t.plane)
            # label near one end (alternating), pulled inside the picture
            end = q1 if i % 2 == 0 else q0
            (tw, tth), _ = cv2.getTextSize(name, cv2.FONT_HERSHEY_SIMPLEX, scale, th)
            f = 0.88
            lc, lr = c0 + f * (end[0] - c0), r0 + f * (end[1] - r0)
            # beside the line, not on it: step across it, then centre the text there
            dc, dr = angle_to_pixel_direction(t.angle_deg)
            off = 0.5 * math.hypot(tw, tth) + 2 * lw
            lc, lr = lc + off * dr, lr - off * dc
            org = (int(np.clip(lc - tw / 2, 2, w - tw - 2)), int(np.clip(lr + tth / 2, tth + 2, h - 3)))
            _text(base, name, org, scale, col, th)
            g = "" if gid is None else f"grain {gid}: "
            ns = ", near surface" if t.near_surface else ""
            entries.append((col, f"{g}{name} {'/'.join(t.modes)}  {t.angle_deg:.2f} +- {k_sigma * float(s):.2f} deg{ns}"))
    if not legend:
        return base
    head = [title or "predicted traces (deg ccw from image x)",
            f"wedge +-{k_sigma:g} sigma, orientation sigma {orientation_sigma_deg:g} deg"]
    if not entries:
        entries = [((200, 200, 200), "no traces")]
    lh = int(26 * scale) + 8
    sw = int(36 * scale) + 6
    text_w = max(cv2.getTextSize(t, cv2.FONT_HERSHEY_SIMPLEX, scale, th)[0][0] for t in head + [e[1] for e in entries])
    pw = text_w + sw + 24
    ph = max(h, lh * (len(head) + len(entries)) + 16)
    out = np.empty((ph, w + pw, 3), np.uint8)
    out[:] = _PANEL_BG
    out[:h, :w] = base
    y = 8 + lh // 2
    for t in head:
        cv2.putText(out, t, (w + 10, y + int(8 * scale)), cv2.FONT_HERSHEY_SIMPLEX, scale, (235, 235, 235), th, cv2.LINE_AA)
        y += lh
    for col, t in entries:
        cv2.line(out, (w + 10, y), (w + 10 + sw - 6, y), col, max(2, lw), cv2.LINE_AA)
        cv2.putText(out, t, (w + 10 + sw, y + int(8 * scale)), cv2.FONT_HERSHEY_SIMPLEX, scale, (235, 235, 235), th, cv2.LINE_AA)
        y += lh
    return out


def write_overlay(path, rgb: np.ndarray) -> Path:
    """Write an RGB uint8 drawing (e.g. from :func:`draw_predicted`) to PNG/TIFF/JPEG/BMP."""
    p = Path(path)
    if p.suffix.lower() not in (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp"):
        raise TracefitInputError(f"{str(p)!r}: expected an image file name ending in .png, .tif, .jpg or .bmp")
    if not p.parent.exists():
        raise TracefitInputError(f"{str(p)!r}: the folder {str(p.parent)!r} does not exist")
    if not cv2.imwrite(str(p), cv2.cvtColor(np.asarray(rgb, np.uint8), cv2.COLOR_RGB2BGR)):
        raise TracefitInputError(f"could not write {str(p)!r}; expected a writable path")
    return p
