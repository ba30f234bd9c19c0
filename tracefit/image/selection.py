"""Medians of 1-D arrays without ``np.median``'s per-call overhead (private to the package).

``np.median`` copies its input, partitions it once more to look for NaN and goes through
several layers of wrappers; the detector takes about a thousand medians per image, most of
a few dozen values, and a few of several hundred thousand. These helpers give the same
value, bit for bit: the order statistics at ``n // 2 - 1`` and ``n // 2`` do not depend on
how the array is partitioned, and the mean of the two middle values is formed as numpy
forms it (their sum, then halved, in the array's own float type).

For large arrays without NaN the middle order statistics are found by bracketing first (the idea of Floyd and Rivest, "Expected time bounds for selection",
Comm. ACM 18 (1975) 165-172): a sorted sample gives two values that enclose the middle,
one pass counts the values below and inside the bracket, and only the values inside are
partitioned. When the counts show that the bracket missed, the whole array is partitioned;
either way the values are the exact order statistics.
"""

from __future__ import annotations

import math

import numpy as np

_BRACKET_MIN = 50_000  # smallest array worth bracketing
_BRACKET_SAMPLE = 2048  # about this many values in the sample


def _median(v: np.ndarray):
    """The median of a 1-D array, equal to ``np.median(v)`` (NaN when ``v`` holds a NaN or is empty).

    Parameters
    ----------
    v : ndarray, (n,)
        Float (or integer) values; left unchanged.

    Returns
    -------
    numpy scalar
        Of ``v``'s float type (float64 for integers), as ``np.median`` returns it.
    """
    return _median_inplace(np.array(v, copy=True, order="C").ravel())


def _order_statistics(a: np.ndarray, ks: list):
    """The values of ranks ``ks`` (ascending) of ``a`` (contiguous, 1-D), or None when the
    bracket missed or ``a`` holds a NaN. ``a`` is left in its order."""
    n = a.size
    if a.dtype.kind == "f" and np.isnan(a).any():
        return None
    step = max(1, n // _BRACKET_SAMPLE)
    sample = np.sort(a[::step])
    m = sample.size
    margin = 4.0 * math.sqrt(m) + 8.0  # four sigmas of a sample quantile's rank, and some
    i_lo, i_hi = int(ks[0] / n * m - margin), int(math.ceil(ks[-1] / n * m + margin))
    if i_lo <= 0 or i_hi >= m - 1:
        return None
    below = a < sample[i_lo]
    upto = a <= sample[i_hi]
    n_below, n_upto = int(np.count_nonzero(below)), int(np.count_nonzero(upto))
    if not (n_below <= ks[0] and ks[-1] < n_upto):
        return None
    inside = a[upto & ~below]
    rel = [k - n_below for k in ks]
    inside.partition(rel)
    return inside[rel]


def _median_inplace(buf: np.ndarray):
    """As :func:`_median`, but may partition ``buf`` (a contiguous 1-D array) in place."""
    n = buf.size
    if n == 0:
        return np.median(buf)  # NaN with numpy's warning, as before
    k = n // 2
    if n >= _BRACKET_MIN:
        mid = _order_statistics(buf, [k] if n % 2 else [k - 1, k])
        if mid is not None:
            return np.mean(mid)
    if n % 2:
        buf.partition((k, n - 1))
        mid = buf[k : k + 1]
    else:
        buf.partition((k - 1, k, n - 1))
        mid = buf[k - 1 : k + 1]
    if buf.dtype.kind == "f" and np.isnan(buf[n - 1]):
        return buf[n - 1]
    if buf.dtype == np.float64 or buf.dtype == np.float32:
        # what np.mean does with one or two values of these types: their sum, halved, in the type
        return mid[0] if n % 2 else (mid[0] + mid[1]) / 2
    return np.mean(mid)  # (float16 sums in float32, integers in float64)


def _mad_inplace(buf: np.ndarray):
    """Median absolute deviation from the median of ``buf`` (contiguous 1-D, overwritten).

    Equal to ``np.median(np.abs(v - np.median(v)))`` of the original values.
    """
    med = _median_inplace(buf)
    np.subtract(buf, med, out=buf)
    np.abs(buf, out=buf)
    return _median_inplace(buf)
