"""How much finer an image's pixels are than its content: a map someone enlarged.

A strain map or micrograph enlarged before it reaches tracefit (a user's workaround for
small grains, or an export at another size) holds no more than the original did, but its
grains and bands are several times larger in pixels, and a detector sized in pixels
answers differently. :func:`estimate_oversampling` finds the enlargement factor from the
pixels alone. The detector (option ``oversampling``) analyses an image enlarged in blocks
at its content's own sampling, which gives the same families as the original; a smooth
image is only noted, since smooth content and an interpolated enlargement look alike (the
factor can be stated).

Two signatures are looked for, in both image directions:

- **blocks** (nearest-neighbour enlargement): every pixel equals its neighbour except at
  every ``k``-th column and row; the original is recovered exactly by keeping one pixel
  per block.
- **smooth** (bilinear, bicubic, Lanczos ... enlargement): the interpolation kernel passes
  little power above the original Nyquist frequency ``0.5 / k`` cycles per pixel. The
  Welch power spectrum along rows and columns is compared above (``1.25-1.75 x``) and
  below (``0.3-0.8 x``) that frequency; measured data (noise, texture, sharp bands) keep a
  good share of their power up there. A native image whose content is smooth (a strain
  map computed over overlapping windows, a finely sampled light micrograph) passes this
  test too, and its fine detail, though weak, still carries bands: that is why the
  detector does not act on this signature unless told to.

Thresholds (measured here, no source): enlargements by 2 with cubic, bilinear and
Lanczos kernels give power ratios of 0.0001-0.008 (white noise the most) on strain maps
and on scikit-image's grass, camera and page; native images give 0.015 (brick) to 0.99
(a Zircaloy backscatter image), strain maps of ``benchmarks/strainmap.py`` 0.04-0.06. The
3x and 4x tests are stricter: a 2x enlargement of smooth content passes them at
0.003-0.05. Bilinear 3x and 4x enlargements leak more and are taken as 2x and 3x.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np

__all__ = ["Oversampling", "estimate_oversampling"]

MAX_FACTOR = 4  # largest enlargement looked for
SEGMENT_PX = 64  # Welch segment length along rows and columns
MAX_LINES = 128  # rows (and columns) sampled for the blocks and the spectrum (large images: plenty of segments)
SMOOTH_RATIO = 0.012  # power above / below the original Nyquist frequency for a 2x enlargement ...
SMOOTH_RATIO_MORE = 0.004  # ... and for 3x, 4x once 2x holds: a 2x map of smooth content passes 3x at 0.005-0.05
BLOCK_SHARE = 0.95  # share of equal neighbours inside blocks of a nearest-neighbour enlargement ...
BLOCK_EDGE_SHARE = 0.8  # ... while fewer than this are equal across block edges (not a flat image)
MIN_SEGMENTS = 16  # fewer finite segments than this: no spectral verdict


class Oversampling(NamedTuple):
    """An image's enlargement relative to its content.

    Attributes
    ----------
    factor : int
        1 (pixels as fine as the content) to ``MAX_FACTOR``.
    kind : str
        ``"blocks"`` (nearest-neighbour), ``"smooth"`` (an interpolating kernel) or ``"none"``.
    phase : tuple of int
        (row, column) of the first whole block (blocks); (0, 0) otherwise.

    Examples
    --------
    >>> ov = Oversampling(2, "blocks", (0, 1))
    >>> ov.factor, ov.note().startswith("pixels taken as 2 times finer")
    (2, True)
    """

    factor: int
    kind: str
    phase: tuple[int, int]

    def note(self, stated: bool = False) -> str:
        """One line for a result's notes (``stated``: the factor was given as ``oversampling``)."""
        how = f"oversampling={self.factor} given" if stated else "recognised"
        kind = ", in blocks of equal pixels" if self.kind == "blocks" else ""
        return (f"pixels taken as {self.factor} times finer than the content (an image enlarged {self.factor}x{kind}; "
                f"{how}): analysed as the content's own points would be")


NATIVE = Oversampling(1, "none", (0, 0))


def _block_test(img: np.ndarray, k: int) -> int | None:
    """Phase of ``k``-pixel blocks along axis 1 (blocks start at columns ``p, p + k, ...``), or None."""
    rows = img[:: max(1, img.shape[0] // MAX_LINES)]
    a, b = rows[:, :-1], rows[:, 1:]
    fin = np.isfinite(a) & np.isfinite(b)
    n = fin.sum(axis=0)
    share = ((a == b) & fin).sum(axis=0) / np.maximum(n, 1)  # per column pair (c, c + 1)
    used = n > 0
    cols = np.arange(share.size)
    for p in range(k):
        edge = (cols - p) % k == k - 1  # pairs across a block edge
        inside, across = ~edge & used, edge & used
        if inside.any() and across.any() and share[inside].mean() >= BLOCK_SHARE \
                and share[across].mean() < BLOCK_EDGE_SHARE:
            return p
    return None


def _welch_power(img: np.ndarray) -> tuple[np.ndarray, np.ndarray, int]:
    """Mean power spectrum of ``SEGMENT_PX`` runs of finite values along rows and columns."""
    n = SEGMENT_PX
    win = np.hanning(n)
    acc = np.zeros(n // 2 + 1)
    count = 0
    for a in (img, img.T):
        step = max(1, a.shape[0] // MAX_LINES)
        rows = a[::step]
        fin = np.isfinite(rows)
        for row, ok in zip(rows, fin):
            edges = np.flatnonzero(np.diff(np.concatenate(([0], ok.view(np.int8), [0]))))
            for s, e in zip(edges[::2], edges[1::2]):
                if e - s < n:
                    continue
                starts = np.arange(s, e - n + 1, n // 2)
                seg = row[starts[:, None] + np.arange(n)].astype(np.float64)
                seg -= seg.mean(axis=1, keepdims=True)
                acc += (np.abs(np.fft.rfft(seg * win, axis=1)) ** 2).sum(axis=0)
                count += len(starts)
    return np.fft.rfftfreq(n), acc / max(count, 1), count


def _smooth_factor(img: np.ndarray) -> int:
    """Largest ``k`` whose band above ``0.5 / k`` cycles/px holds little power (1 when none)."""
    f, p, count = _welch_power(img)
    if count < MIN_SEGMENTS:
        return 1
    best = 1
    for k in range(2, MAX_FACTOR + 1):
        fn = 0.5 / k
        below = p[(f >= 0.3 * fn) & (f <= 0.8 * fn)].mean()
        above = p[(f >= 1.25 * fn) & (f <= min(0.5, 1.75 * fn))].mean()
        if not (below > 0 and above / below < (SMOOTH_RATIO if k == 2 else SMOOTH_RATIO_MORE)):
            break
        best = k
    return best


def _blocks(img: np.ndarray, k: int) -> tuple[int, int] | None:
    """(row, column) phase of ``k``-pixel blocks in both directions, or None."""
    pc = _block_test(img, k)
    pr = _block_test(img.T, k) if pc is not None else None
    return None if pr is None else (pr, pc)


def _resolved(img: np.ndarray, valid: np.ndarray | None, given: int) -> tuple[Oversampling, str | None]:
    """The enlargement the detector works with (option ``oversampling``), and a note for the result.

    0 (the default) acts only on an enlargement in blocks, which is certain. A smooth image
    is only noted: a map enlarged by interpolation cannot be told from a map whose content
    is smooth (a strain map computed over overlapping windows, an optical image sampled
    finely), and analysing such a map at half its sampling lost most of its families
    (``python benchmarks/strainmap.py --quick --brief --smooth 0.8``, with and without
    ``--opt oversampling=2``; ``benchmarks/strainmap.md``). A stated factor is used, in
    blocks where the image holds them.
    """
    if given == 1:
        return NATIVE, None
    if given == 0:
        est = estimate_oversampling(img, valid)
        if est.kind == "smooth":
            return NATIVE, (f"the image is smooth at the pixel level, as one enlarged {est.factor}x by interpolation "
                            f"would be; analysed as given (if it was enlarged, oversampling={est.factor} gives the "
                            f"original's answer)")
        return est, (est.note() if est.factor > 1 else None)
    phase = _blocks(np.asarray(img, np.float32) if valid is None else np.where(valid, img, np.float32(np.nan)), given)
    ov = Oversampling(given, "blocks", phase) if phase is not None else Oversampling(given, "smooth", (0, 0))
    return ov, ov.note(stated=True)


def estimate_oversampling(image: np.ndarray, valid: np.ndarray | None = None) -> Oversampling:
    """Estimate how many times an image was enlarged after it was measured.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        Grey image or float map (RGB(A) is taken as its luminance); NaN points are left out.
    valid : ndarray of bool, (H, W), optional
        Points to use (others are left out as NaN are).

    Returns
    -------
    Oversampling
        ``factor`` 1 when the pixels are as fine as the content, or when nothing can be
        said: blocks need both sides of 16 px or more and lossless pixels (a
        nearest-neighbour enlargement saved as JPEG holds no exact blocks); the smooth
        test needs both sides of 128 px or more.

    Examples
    --------
    >>> import cv2
    >>> rng = np.random.default_rng(0)
    >>> small = rng.normal(size=(120, 160)).astype(np.float32)
    >>> estimate_oversampling(small).factor
    1
    >>> big = cv2.resize(small, (320, 240), interpolation=cv2.INTER_CUBIC)
    >>> estimate_oversampling(big)[:2]
    (2, 'smooth')
    >>> blocks = np.kron(small, np.ones((2, 2), np.float32))[1:, 1:]
    >>> estimate_oversampling(blocks)
    Oversampling(factor=2, kind='blocks', phase=(1, 1))
    """
    img = np.asarray(image)
    if img.ndim == 3 and img.shape[2] in (3, 4):
        from tracefit.image.io import to_gray

        img = to_gray(img)
    img = np.asarray(img, dtype=np.float32)
    if img.ndim != 2 or min(img.shape) < 16:
        return NATIVE
    if valid is not None:
        img = np.where(valid, img, np.float32(np.nan))
    for k in range(MAX_FACTOR, 1, -1):
        phase = _blocks(img, k)
        if phase is not None:
            return Oversampling(k, "blocks", phase)
    if min(img.shape) < 2 * SEGMENT_PX:
        return NATIVE
    k = _smooth_factor(img)
    return Oversampling(k, "smooth", (0, 0)) if k > 1 else NATIVE
