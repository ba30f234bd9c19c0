"""Predicted traces drawn on a picture (or a blank canvas), so a person sees which plane fits.

Every candidate plane's predicted trace is drawn as a line through the image centre, or
through each grain's centroid when a grain label image is given, labelled with its plane,
with a translucent wedge of +- k sigma around it. sigma is the spread of the predicted
trace angle that the orientation uncertainty causes, propagated exactly as the matcher
does (:func:`tracefit.matching.predicted_trace_sigma`): sigma_orient / sin(inclination),
times the stage-tilt foreshortening slope. A legend panel to the right of the picture lists
each trace's plane, modes and angle; the picture's own pixels keep their coordinates.

Colours are the detection overlay's palette (:data:`tracefit.image.FAMILY_COLOURS`):
trace ``i`` of a grain (in the order given) gets ``FAMILY_COLOURS[i % 8]``. Angles follow
:mod:`tracefit.conventions` (image frame, y up; pixel rows down).
"""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from pathlib import Path

import cv2
import numpy as np

from tracefit.conventions import FrameSettings, angle_to_pixel_direction, apparent_angle, axial_difference
from tracefit.errors import TracefitInputError
from tracefit.matching import predicted_trace_sigma
from tracefit.image import FAMILY_COLOURS
from tracefit.image import draw_detection as draw_detected
from tracefit.viz.labels import plane_label

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
    "draw_identified",
]

DEFAULT_K_SIGMA = 2.0  # wedge half-width in sigmas (about 95 % for a Gaussian)
WEDGE_ALPHA = 0.28  # wedge opacity over the picture
CANVAS_BACKGROUND = (32, 32, 32)  # RGB of a blank canvas: dark, so every palette colour shows
_PANEL_BG = (24, 24, 24)
_TEXT_COLOUR = (235, 235, 235)
_FONT = cv2.FONT_HERSHEY_SIMPLEX
_SHIFT = 4  # cv2 sub-pixel bits
_MAX_CANVAS = 20000


def _to_display_rgb8(image: np.ndarray) -> np.ndarray:
    """Grey display copy of a picture as RGB uint8, stretched between its 0.5 and 99.5 percentiles.

    The same stretch as the detection overlay's (``tracefit.image.draw``), written here because
    the image package keeps its version private.
    """
    a = np.asarray(image)
    if a.ndim == 3:
        a = a[..., :3].astype(np.float32) @ np.array([0.299, 0.587, 0.114], np.float32)
    a = a.astype(np.float32)
    lo, hi = np.percentile(a[:: max(1, a.shape[0] // 512), :: max(1, a.shape[1] // 512)], [0.5, 99.5])
    g = np.clip((a - lo) / max(hi - lo, 1e-6) * 255.0, 0, 255).astype(np.uint8)
    return np.repeat(g[..., None], 3, axis=2)


def trace_sigma_deg(traces: Sequence, orientation_sigma_deg: float, frame: FrameSettings | None = None) -> np.ndarray:
    """Spread (deg) of each predicted trace's angle from the orientation uncertainty.

    Parameters
    ----------
    traces : sequence of tracefit.predict.PredictedTrace
        Each with ``inclination_deg`` and ``true_angle_deg``.
    orientation_sigma_deg : float
        One-sigma orientation error about each sample axis, degrees.
    frame : tracefit.conventions.FrameSettings, optional
        With a stage tilt, the spread scales with d(apparent)/d(true).

    Returns
    -------
    ndarray, shape (len(traces),)
        One-sigma spread of each trace angle, degrees.

    Raises
    ------
    TracefitInputError
        If ``orientation_sigma_deg`` is negative or not finite.

    Examples
    --------
    An upright plane's trace moves by the orientation error itself:

    >>> from types import SimpleNamespace as T
    >>> np.round(trace_sigma_deg([T(inclination_deg=90.0, true_angle_deg=30.0)], 1.0), 3)
    array([1.])
    """
    if not (math.isfinite(orientation_sigma_deg) and orientation_sigma_deg >= 0):
        raise TracefitInputError(f"the orientation sigma must be >= 0 degrees, got {orientation_sigma_deg!r}")
    incl = np.array([t.inclination_deg for t in traces], float)
    true = np.array([t.true_angle_deg for t in traces], float)
    slope = np.ones_like(true)
    if frame is not None and float(frame.tilt_deg) != 0.0:
        h = 0.05
        slope = np.asarray(axial_difference(apparent_angle(true + h, frame), apparent_angle(true - h, frame)), float) / (2 * h)
    return np.asarray(predicted_trace_sigma(incl, orientation_sigma_deg, slope), float).reshape(-1)


def grain_centres(labels: np.ndarray, grains: Sequence[int] | None = None) -> dict[int, tuple[float, float, float]]:
    """Centroid (col, row) and equivalent radius (px) of each grain of a label image.

    When a grain's centroid falls outside it (a curved grain), its innermost pixel (largest
    distance to the boundary) is used instead, so the drawn traces start inside the grain.

    Parameters
    ----------
    labels : ndarray of int, shape (H, W)
        Grain label image.
    grains : sequence of int, optional
        Grain ids to measure (default every id present); absent ids are left out.

    Returns
    -------
    dict
        grain id -> (col, row, radius_px): pixel column and row of the centre, and the radius
        in pixels of the disc of the grain's area.

    Examples
    --------
    >>> lab = np.zeros((10, 20), int); lab[:, 10:] = 1
    >>> {g: tuple(round(x, 2) for x in v) for g, v in grain_centres(lab).items()}
    {0: (4.5, 4.5, 5.64), 1: (14.5, 4.5, 5.64)}
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
    """Read a canvas size written ``WIDTHxHEIGHT`` in pixels.

    Parameters
    ----------
    text : str
        E.g. ``"800x600"`` (``*`` and spaces accepted); each side 16 to 20000 px.

    Returns
    -------
    tuple of int
        (width, height) in pixels.

    Raises
    ------
    TracefitInputError
        If the text is not two whole numbers in range.

    Examples
    --------
    >>> parse_canvas_size("800x600"), parse_canvas_size(" 64 * 32 ")
    ((800, 600), (64, 32))
    """
    t = str(text).strip().lower().replace(" ", "")
    parts = t.replace("*", "x").split("x")
    try:
        w, h = (int(parts[0]), int(parts[1])) if len(parts) == 2 else (None, None)
    except ValueError:
        w, h = None, None
    if w is None or not (16 <= w <= _MAX_CANVAS and 16 <= h <= _MAX_CANVAS):
        raise TracefitInputError(f"cannot read the canvas size {text!r}; expected WIDTHxHEIGHT in pixels, e.g. 800x600 (16 to {_MAX_CANVAS})")
    return w, h


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
    cv2.putText(img, text, org, _FONT, scale, (0, 0, 0), th + 2, cv2.LINE_AA)
    cv2.putText(img, text, org, _FONT, scale, colour, th, cv2.LINE_AA)


def _base_picture(image, canvas_size) -> np.ndarray:
    """RGB uint8 copy of the picture, or a blank canvas of ``canvas_size`` (default 800 x 800)."""
    if image is not None:
        return _to_display_rgb8(image)
    w, h = canvas_size if canvas_size is not None else (800, 800)
    if not (16 <= int(w) <= _MAX_CANVAS and 16 <= int(h) <= _MAX_CANVAS):
        raise TracefitInputError(f"canvas size must be 16 to {_MAX_CANVAS} px each way, got {w}x{h}")
    base = np.empty((int(h), int(w), 3), np.uint8)
    base[:] = CANVAS_BACKGROUND
    return base


def _trace_groups(traces, labels, w: int, h: int) -> list:
    """(grain id or None, traces, (c0, r0, radius or None)) for each group drawn about one centre."""
    if isinstance(traces, Mapping):
        if labels is None:
            raise TracefitInputError("traces per grain need the grain label image to place them")
        lab = np.asarray(labels)
        if lab.shape[:2] != (h, w):
            raise TracefitInputError(f"the grain label image is {lab.shape[1]}x{lab.shape[0]} px but the picture is {w}x{h} px")
        centres = grain_centres(lab, list(traces))
        return [(gid, traces[gid], centres[gid]) for gid in traces if gid in centres]
    if labels is not None:
        raise TracefitInputError("with a grain label image give the traces per grain (dict grain -> traces)")
    return [(None, list(traces), ((w - 1) / 2.0, (h - 1) / 2.0, None))]


def _label_trace(base, t, name, end, centre, style) -> None:
    """Write a trace's plane beside its line near ``end``, pulled inside the picture."""
    h, w = base.shape[:2]
    c0, r0 = centre
    scale, th, lw, col = style
    (tw, tth), _ = cv2.getTextSize(name, _FONT, scale, th)
    f = 0.88
    lc, lr = c0 + f * (end[0] - c0), r0 + f * (end[1] - r0)
    # beside the line, not on it: step across it, then centre the text there
    dc, dr = angle_to_pixel_direction(t.angle_deg)
    off = 0.5 * math.hypot(tw, tth) + 2 * lw
    lc, lr = lc + off * dr, lr - off * dc
    org = (int(np.clip(lc - tw / 2, 2, w - tw - 2)), int(np.clip(lr + tth / 2, tth + 2, h - 3)))
    _text(base, name, org, scale, col, th)


# A grain's predicted traces are drawn as a dial: a ring about the grain's centre with a tick pair
# per trace between DIAL_INNER and 1 of the ring's radius, so the bands inside the grain stay
# visible and the traces read as directions, not as lines in the picture.
DIAL_INNER = 0.45
# With more traces than this about one centre, each is labelled by its number (keyed in the legend).
MAX_NAMED_TRACES = 8


def _draw_group(base, gid, trs, centre, sig, k_sigma, lw, scale, th) -> list:
    """Draw one group's wedges, traces and labels in place; return its legend entries (colour, text).

    One orientation for the whole picture: full lines through the centre. Per grain: a dial
    (ring and tick pairs) about the grain's centroid.
    """
    h, w = base.shape[:2]
    c0, r0, rad = centre
    dial = rad is not None
    half = math.hypot(w, h) if not dial else max(15.0, 0.8 * rad)
    for i, (t, s) in enumerate(zip(trs, sig)):  # wedges first, all lines on top
        col = np.array(FAMILY_COLOURS[i % len(FAMILY_COLOURS)], np.float32)
        hw = k_sigma * float(s)
        if 0.0 < hw < 90.0:
            m = _wedge_mask((h, w), c0, r0, t.angle_deg, hw, half)
            if dial:
                m &= (np.hypot(*np.meshgrid(np.arange(w) - c0, np.arange(h) - r0)) >= DIAL_INNER * half)
            base[m] = np.clip(base[m].astype(np.float32) * (1 - WEDGE_ALPHA) + col * WEDGE_ALPHA + 0.5, 0, 255).astype(np.uint8)
    if dial:
        cv2.circle(base, _pt(c0, r0), int(round(half * (1 << _SHIFT))), _TEXT_COLOUR, 1, cv2.LINE_AA, _SHIFT)
    numbered = dial or len(trs) > MAX_NAMED_TRACES
    entries = []
    for i, (t, s) in enumerate(zip(trs, sig)):
        col = FAMILY_COLOURS[i % len(FAMILY_COLOURS)]
        name = plane_label(t.plane)
        segments = _dial_ticks(c0, r0, t.angle_deg, half) if dial else [_clipped_segment(w, h, c0, r0, t.angle_deg, half)]
        for seg in segments:
            if seg is None:
                continue
            if t.near_surface:
                _dashed(base, seg[0], seg[1], col, lw, max(6.0, 8.0 * lw))
            else:
                cv2.line(base, _pt(*seg[0]), _pt(*seg[1]), col, lw, cv2.LINE_AA, _SHIFT)
        if segments and segments[0] is not None:
            end = segments[0][1] if (dial or i % 2 == 0) else segments[0][0]
            _label_trace(base, t, str(i + 1) if numbered else name, end, (c0, r0), (scale, th, lw, col))
        g = "" if gid is None else f"grain {gid}: "
        ns = ", near surface" if t.near_surface else ""
        key = f"{i + 1}  " if numbered else ""
        entries.append((col, f"{key}{g}{name} {'/'.join(t.modes)}  {t.angle_deg:.2f} +- {k_sigma * float(s):.2f} deg{ns}"))
    return entries


def _dial_ticks(c0, r0, angle_deg, radius) -> list:
    """The two ticks of a trace on a dial: from DIAL_INNER to 1 of ``radius``, on both sides of the centre."""
    dc, dr = angle_to_pixel_direction(angle_deg)
    a, b = DIAL_INNER * radius, radius
    return [((c0 + a * dc, r0 + a * dr), (c0 + b * dc, r0 + b * dr)),
            ((c0 - a * dc, r0 - a * dr), (c0 - b * dc, r0 - b * dr))]


def _with_legend(base, head, entries, scale, th, lw) -> np.ndarray:
    """The picture with a legend panel to its right: ``head`` lines, then a swatch per entry."""
    h, w = base.shape[:2]
    if not entries:
        entries = [((200, 200, 200), "no traces")]
    lh = int(26 * scale) + 8
    sw = int(36 * scale) + 6
    text_w = max(cv2.getTextSize(t, _FONT, scale, th)[0][0] for t in head + [e[1] for e in entries])
    pw = text_w + sw + 24
    ph = max(h, lh * (len(head) + len(entries)) + 16)
    out = np.empty((ph, w + pw, 3), np.uint8)
    out[:] = _PANEL_BG
    out[:h, :w] = base
    y = 8 + lh // 2
    for t in head:
        cv2.putText(out, t, (w + 10, y + int(8 * scale)), _FONT, scale, _TEXT_COLOUR, th, cv2.LINE_AA)
        y += lh
    for col, t in entries:
        cv2.line(out, (w + 10, y), (w + 10 + sw - 6, y), col, max(2, lw), cv2.LINE_AA)
        cv2.putText(out, t, (w + 10 + sw, y + int(8 * scale)), _FONT, scale, _TEXT_COLOUR, th, cv2.LINE_AA)
        y += lh
    return out


def draw_predicted(
    traces: Sequence | Mapping[int, Sequence],
    image: np.ndarray | None = None,
    canvas_size: tuple[int, int] | None = None,
    orientation_sigma_deg: float = 1.0,
    frame: FrameSettings | None = None,
    k_sigma: float = DEFAULT_K_SIGMA,
    labels: np.ndarray | None = None,
    line_width: int | None = None,
    legend: bool = True,
    title: str | None = None,
) -> np.ndarray:
    """Draw predicted traces with their uncertainty wedges on a picture or a blank canvas.

    Parameters
    ----------
    traces : sequence of PredictedTrace, or dict grain -> sequence of PredictedTrace
        From :func:`tracefit.predict.predict_traces`. A dict (one entry per grain) needs
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

    Raises
    ------
    TracefitInputError
        If ``k_sigma`` or ``orientation_sigma_deg`` is out of range, the canvas size is out
        of range, or ``traces`` and ``labels`` do not go together (a dict needs ``labels`` of
        the picture's size; a sequence takes none).

    Examples
    --------
    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> from tracefit.predict import predict_traces
    >>> fcc = lattice_preset("fcc")
    >>> trs = predict_traces(fcc, from_euler([0.0, 0.0, 0.0]), catalogue(fcc, ["slip"]))
    >>> rgb = draw_predicted(trs[:1], canvas_size=(201, 161), legend=False)  # (1-11) at 45 deg
    >>> rgb.shape, [tuple(int(v) for v in rgb[80 - 30, 100 + k]) for k in (30, -30)]  # on it, off it
    ((161, 201, 3), [(255, 64, 64), (32, 32, 32)])
    """
    if not (math.isfinite(k_sigma) and k_sigma > 0):
        raise TracefitInputError(f"the wedge width must be a positive number of sigmas, got {k_sigma!r}")
    base = _base_picture(image, canvas_size)
    h, w = base.shape[:2]
    groups = _trace_groups(traces, labels, w, h)
    lw = line_width or max(2, int(round(max(h, w) / 500)))
    scale = max(0.4, min(h, w) / 1100.0)
    th = max(1, int(round(scale * 1.4)))
    entries = []
    for gid, trs, centre in groups:
        trs = list(trs)
        if trs:
            sig = trace_sigma_deg(trs, orientation_sigma_deg, frame)
            entries += _draw_group(base, gid, trs, centre, sig, k_sigma, lw, scale, th)
    if not legend:
        return base
    head = [title or "predicted traces (deg ccw from image x)",
            f"wedge +-{k_sigma:g} sigma, orientation sigma {orientation_sigma_deg:g} deg"]
    return _with_legend(base, head, entries, scale, th, lw)


def write_overlay(path: str | os.PathLike, rgb: np.ndarray) -> Path:
    """Write an RGB uint8 drawing (e.g. from :func:`draw_predicted`) to PNG/TIFF/JPEG/BMP.

    Parameters
    ----------
    path : str or Path
        Output file ending in .png, .tif, .tiff, .jpg, .jpeg or .bmp; its folder must exist.
    rgb : ndarray of uint8, shape (H, W, 3)
        The drawing, RGB order.

    Returns
    -------
    Path
        The image file written (``path``).

    Raises
    ------
    TracefitInputError
        If the suffix is not an image type, the folder does not exist, or writing fails.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = write_overlay(Path(d) / "o.png", np.zeros((4, 5, 3), np.uint8))
    ...     cv2.imread(str(p)).shape
    (4, 5, 3)
    """
    p = Path(path)
    if p.suffix.lower() not in (".png", ".tif", ".tiff", ".jpg", ".jpeg", ".bmp"):
        raise TracefitInputError(f"{str(p)!r}: expected an image file name ending in .png, .tif, .jpg or .bmp")
    if not p.parent.exists():
        raise TracefitInputError(f"{str(p)!r}: the folder {str(p.parent)!r} does not exist")
    if not cv2.imwrite(str(p), cv2.cvtColor(np.asarray(rgb, np.uint8), cv2.COLOR_RGB2BGR)):
        raise TracefitInputError(f"could not write {str(p)!r}; expected a writable path")
    return p


_VERDICT_RGB = {"unexplained": (255, 0, 0), "ambiguous": (255, 200, 0), "identified": (0, 200, 0)}
_PREDICTED_RGB = (0, 128, 255)


def draw_identified(image: np.ndarray, identifications: Sequence, labels: np.ndarray | None = None) -> np.ndarray:
    """The micrograph with each family's observed direction and its identified plane's predicted trace.

    Each family is drawn as a dial about its grain's centre (the image centre without a grain
    map): solid ticks at the observed angle, coloured by verdict (green identified, amber
    ambiguous, red unexplained), and for an identified family dashed ticks at the best plane's
    predicted angle, labelled with the plane.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, 3)
        The micrograph (any grey range; shown stretched between its 1st and 99th percentiles).
    identifications : sequence of FamilyIdentification
        From :func:`tracefit.identify` or ``ImageResult.families``.
    labels : ndarray of int, shape (H, W), optional
        Grain label image, to place each grain's family at its centre.

    Returns
    -------
    ndarray of uint8, shape (H, W, 3)
        RGB drawing.

    Examples
    --------
    >>> from tracefit.matching import ObservedFamily
    >>> from tracefit.pipeline import identify
    >>> from tracefit.crystal import Orientation
    >>> res = identify([ObservedFamily(73.2, 0.3)], "fcc", orientation=Orientation.from_euler([10, 20, 30]),
    ...                modes=["slip"])
    >>> rgb = draw_identified(np.zeros((64, 96)), res.families)
    >>> rgb.shape, bool((rgb[..., 1] == 200).any())
    ((64, 96, 3), True)
    """
    from tracefit.conventions import angle_to_pixel_direction
    from tracefit.viz.labels import plane_label

    out = np.ascontiguousarray(_to_display_rgb8(np.asarray(image)))
    h, w = out.shape[:2]
    half = 0.2 * min(h, w)
    for r in identifications:
        c0, r0 = w / 2.0, h / 2.0
        if labels is not None and getattr(r, "grain", None) is not None:
            rr, cc = np.nonzero(labels == r.grain)
            if len(rr) == 0:
                continue
            c0, r0 = float(cc.mean()), float(rr.mean())
        verdict = "unexplained" if r.unexplained else ("ambiguous" if r.ambiguous else "identified")
        colour = _VERDICT_RGB[verdict]
        # a dial about the grain's centre, as for predicted traces: the bands inside stay visible
        cv2.circle(out, _pt(c0, r0), int(round(half * (1 << _SHIFT))), _TEXT_COLOUR, 1, cv2.LINE_AA, _SHIFT)
        ticks = _dial_ticks(c0, r0, r.angle_deg, half)
        for q0, q1 in ticks:
            cv2.line(out, _pt(*q0), _pt(*q1), colour, 2, cv2.LINE_AA, _SHIFT)
        best = r.best
        if best is not None and not r.unexplained:
            for q0, q1 in _dial_ticks(c0, r0, best.predicted_deg, half):
                _dashed(out, q0, q1, _PREDICTED_RGB, 1, max(3.0, half / 12))
            text = plane_label(best.plane)
        else:
            text = "?"
        end = ticks[0][1]
        _text(out, text, (int(round(end[0])), int(round(end[1]))), 0.4, colour, 1)
    return out
