"""Detection overlay: the image with detected band lines, one colour per family, and a legend.

Drawn with OpenCV on an 8-bit RGB copy; the legend lists each family's angle (image
frame, degrees) with its uncertainty and number of bands.
"""

from __future__ import annotations

import os
from collections.abc import Iterable
from typing import TYPE_CHECKING, Any

import cv2
import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.image.io import _LUMA

if TYPE_CHECKING:
    from tracefit.image.results import DetectionResult

__all__ = ["FAMILY_COLOURS", "draw_detection", "write_detection_overlay"]

#: Our own palette (RGB, 0-255), chosen for contrast against grey micrographs; family k
#: is drawn in ``FAMILY_COLOURS[k % len(FAMILY_COLOURS)]``.
FAMILY_COLOURS = [
    (255, 64, 64), (40, 170, 255), (255, 200, 0), (60, 220, 90),
    (220, 80, 255), (255, 128, 0), (0, 230, 210), (255, 105, 180),
]


def _to_rgb8(image: np.ndarray) -> np.ndarray:
    """Grey 8-bit RGB copy for display: luminance, stretched between the 0.5 and 99.5 percentiles.

    NaN (missing points of a float map, see :func:`tracefit.image.read_image`) shows black.
    """
    a = np.asarray(image)
    if a.ndim == 3:
        a = a[..., :3].astype(np.float32) @ _LUMA
    a = a.astype(np.float32)
    sample = a[:: max(1, a.shape[0] // 512), :: max(1, a.shape[1] // 512)]
    sample = sample[np.isfinite(sample)]
    lo, hi = np.percentile(sample, [0.5, 99.5]) if sample.size else (0.0, 1.0)
    g = np.nan_to_num(np.clip((a - lo) / max(hi - lo, 1e-6) * 255.0, 0, 255), nan=0.0).astype(np.uint8)
    return np.repeat(g[..., None], 3, axis=2)


def draw_detection(image: np.ndarray, result: DetectionResult | Iterable[DetectionResult], line_width: int | None = None,
                   legend: bool = True) -> np.ndarray:
    """Draw the detected band lines of ``result`` on ``image``.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        The analysed image (any units; contrast-stretched for display).
    result : DetectionResult or iterable of DetectionResult
        Detection(s) to draw (several: e.g. one per grain from ``detect_grains``).
    line_width : int, optional
        Line width, px (default scales with the image size).
    legend : bool
        Draw the legend box of family angles (top-left).

    Returns
    -------
    ndarray of uint8, (H, W, 3)
        RGB picture: the image in grey, each family's band lines in its colour
        (:data:`FAMILY_COLOURS`), data bars framed in yellow.

    Examples
    --------
    >>> from tracefit.image import BandFamilySpec, detect_bands, render_micrograph
    >>> img, _ = render_micrograph((128, 128), [BandFamilySpec(30.0, 16)], seed=1)
    >>> rgb = draw_detection(img, detect_bands(img))
    >>> rgb.shape, rgb.dtype.name
    ((128, 128, 3), 'uint8')
    """
    rgb = _to_rgb8(image)
    h, w = rgb.shape[:2]
    lw = line_width or max(1, int(round(max(h, w) / 700)))
    results = [result] if hasattr(result, "families") else list(result)
    entries = []
    k = 0
    for res in results:
        for fam in res.families:
            col = FAMILY_COLOURS[k % len(FAMILY_COLOURS)]
            for ln in fam.lines:
                p0 = (int(round(ln.col0 * 16)), int(round(ln.row0 * 16)))
                p1 = (int(round(ln.col1 * 16)), int(round(ln.row1 * 16)))
                cv2.line(rgb, p0, p1, col, lw, cv2.LINE_AA, shift=4)
            g = "" if getattr(res, "grain", None) is None else f"grain {res.grain}: "
            entries.append((col, f"{g}{fam.angle_deg:.2f} +/- {fam.angle_sigma_deg:.2f} deg, {fam.n_bands} bands"))
            k += 1
    for ex in (results[0].excluded if results else []):
        if ex.get("kind") == "databar":
            c0, r0, c1, r1 = ex["bbox"]
            cv2.rectangle(rgb, (c0, r0), (c1 - 1, r1 - 1), (255, 255, 0), lw)
    if legend:
        scale = max(0.4, min(h, w) / 1400.0)
        th = max(1, int(round(scale * 1.5)))
        if not entries:
            entries = [((200, 200, 200), "no band families found")]
        lh = int(28 * scale) + 6
        width = max(cv2.getTextSize(t, cv2.FONT_HERSHEY_SIMPLEX, scale, th)[0][0] for _, t in entries) + int(50 * scale) + 10
        hbox = lh * len(entries) + 8
        x0, y0 = 8, 8
        sub = rgb[y0 : y0 + hbox, x0 : x0 + width]
        sub[:] = (sub.astype(np.float32) * 0.35).astype(np.uint8)
        for i, (col, text) in enumerate(entries):
            y = y0 + 4 + lh * i + lh // 2
            cv2.line(rgb, (x0 + 6, y), (x0 + int(40 * scale) + 6, y), col, max(2, th + 1), cv2.LINE_AA)
            cv2.putText(rgb, text, (x0 + int(46 * scale) + 8, y + int(8 * scale)), cv2.FONT_HERSHEY_SIMPLEX, scale, (255, 255, 255), th, cv2.LINE_AA)
    return rgb


def write_detection_overlay(path: str | os.PathLike, image: np.ndarray, result: DetectionResult | Iterable[DetectionResult],
                            **kwargs: Any) -> None:
    """Write :func:`draw_detection` to an image file (PNG recommended).

    Parameters
    ----------
    path : str or Path
        Output file; the suffix (.png, .jpg, .tif, .bmp) chooses the format.
    image : ndarray, (H, W) or (H, W, 3|4)
        The analysed image.
    result : DetectionResult or iterable of DetectionResult
        Detection(s) to draw.
    **kwargs
        ``line_width`` and ``legend`` of :func:`draw_detection`.

    Raises
    ------
    TracefitInputError
        The file could not be written (unknown suffix, missing folder, no permission).

    Examples
    --------
    >>> import os, tempfile
    >>> from tracefit.image import BandFamilySpec, detect_bands, render_micrograph
    >>> img, _ = render_micrograph((128, 128), [BandFamilySpec(30.0, 16)], seed=1)
    >>> path = os.path.join(tempfile.mkdtemp(), "overlay.png")
    >>> write_detection_overlay(path, img, detect_bands(img))
    >>> os.path.getsize(path) > 0
    True
    """
    rgb = draw_detection(image, result, **kwargs)
    try:
        ok = cv2.imwrite(str(path), cv2.cvtColor(rgb, cv2.COLOR_RGB2BGR))
    except cv2.error:  # OpenCV raises for a suffix it has no writer for
        ok = False
    if not ok:
        raise TracefitInputError(f"{path}: could not write the overlay; expected a writable path ending in .png, .jpg, .tif or .bmp")
