"""Whether a detected band line runs on, straight, into the neighbouring grain.

A surface scratch crosses grain boundaries without a kink; a slip or twin band stops at the
boundary (or continues in the neighbour at another angle). This samples the micrograph along
each line's extension; the identification reports the share (it does not enter the
probabilities).
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import TYPE_CHECKING

import numpy as np

from tracefit.errors import TracefitInputError

if TYPE_CHECKING:
    from tracefit.image.results import BandLine

__all__ = ["line_continuation"]


def line_continuation(image: np.ndarray, labels: np.ndarray, grain: int, lines: Iterable[BandLine],
                      reach_px: float = 15.0, gap_px: float = 2.0, offset_px: float = 4.0, min_px: int = 8) -> float | None:
    """Share of a family's band lines that run on, straight and with the same contrast, into a neighbouring grain.

    A surface scratch crosses grain boundaries without a kink; a slip or twin band stops at the
    boundary (or continues in the neighbour at another angle). For each end of each detected
    line, the straight extension beyond the end is sampled over ``reach_px`` pixels (starting
    ``gap_px`` past the end) where it lies in another grain of the label image, and its band
    contrast (mean of the two side lines ``offset_px`` away minus the centre line) is compared
    with the same measure over the last ``reach_px`` pixels inside the grain. An end counts as
    continuing when the outside contrast has the inside's sign and at least half its size.

    Parameters
    ----------
    image : ndarray (H, W) or (H, W, C)
        The micrograph (grey levels; colour is averaged).
    labels : ndarray (H, W) of int
        Grain label image.
    grain : int
        The grain the lines were detected in.
    lines : iterable of BandLine
        Detected lines in whole-image pixel coordinates (col, row).
    reach_px, gap_px, offset_px : float
        Sampling lengths, pixels.
    min_px : int
        Fewest outside samples (in another grain, inside the image) for an end to be tested.

    Returns
    -------
    float or None
        Share of the tested line ends that continue, 0..1 (None when no end meets a
        neighbouring grain, e.g. lines ending at the image edge or inside the grain).

    Raises
    ------
    TracefitInputError
        ``image`` not 2-D (or 3-D colour), or ``labels`` of another size.

    Examples
    --------
    A dark line drawn across two grains, seen only in grain 0, runs on into grain 1:

    >>> import numpy as np
    >>> from tracefit.image import BandLine
    >>> img = np.full((64, 128), 200.0)
    >>> img[31:34, :] = 80.0
    >>> labels = np.zeros((64, 128), int)
    >>> labels[:, 64:] = 1
    >>> line_continuation(img, labels, 0, [BandLine(20.0, 32.0, 62.0, 32.0, 0.0)])
    1.0
    """
    # Over 80 lines only through its docstring (numpydoc with a runnable example); the code is short.
    from scipy.ndimage import map_coordinates

    img = np.asarray(image, float)
    if img.ndim == 3:
        img = img[..., :3].mean(axis=2)
    lab = np.asarray(labels)
    if img.ndim != 2:
        raise TracefitInputError(f"image has shape {np.shape(image)}; expected a 2-D grey or 3-D colour image")
    if lab.shape != img.shape:
        raise TracefitInputError(f"labels has shape {lab.shape}; expected the image's {img.shape}")
    H, W = img.shape
    tested = cont = 0

    def contrast(pts, nrm):
        def samp(q):
            return map_coordinates(img, [q[:, 1], q[:, 0]], order=1, mode="nearest")

        centre = samp(pts)
        side = 0.5 * (samp(pts + offset_px * nrm) + samp(pts - offset_px * nrm))
        return float(np.mean(side - centre))

    for ln in lines:
        p0 = np.array([ln.col0, ln.row0], float)
        p1 = np.array([ln.col1, ln.row1], float)
        L = float(np.hypot(*(p1 - p0)))
        if L < 2.0 * reach_px:
            continue
        u = (p1 - p0) / L
        nrm = np.array([-u[1], u[0]])
        t = gap_px + np.arange(0.0, reach_px, 1.0)
        for end, sgn in ((p1, 1.0), (p0, -1.0)):
            out = end[None, :] + sgn * t[:, None] * u[None, :]
            cc, rr = np.round(out[:, 0]).astype(int), np.round(out[:, 1]).astype(int)
            inside = (cc >= 0) & (cc < W) & (rr >= 0) & (rr < H)
            other = np.zeros(len(t), bool)
            other[inside] = lab[rr[inside], cc[inside]] != grain
            if int(other.sum()) < min_px:
                continue
            c_in = contrast(end[None, :] - sgn * t[:, None] * u[None, :], nrm)
            if abs(c_in) <= 1e-12:
                continue
            c_out = contrast(out[other], nrm)
            tested += 1
            cont += bool(c_out * np.sign(c_in) >= 0.5 * abs(c_in))
    return None if tested == 0 else cont / tested
