"""Medians of 1-D arrays without ``np.median``'s per-call overhead (private to the package).

``np.median`` copies its input, partitions it once more to look for NaN and goes through
several layers of wrappers; the detector takes about a thousand medians per image, most of
a few dozen values, and a few of several hundred thousand. These helpers give the same
value, bit for bit: the order statistics at ``n // 2 - 1`` and ``n // 2`` do not depend on
how the array is partitioned, and the mean of the two middle values is formed as numpy
forms it (their sum, then halved, in the array's own float type).
"""

from __future__ import annotations

import numpy as np


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


def _median_inplace(buf: np.ndarray):
    """As :func:`_median`, but partitions ``buf`` (a contiguous 1-D array) in place."""
    n = buf.size
    if n == 0:
        return np.median(buf)  # NaN with numpy's warning, as before
    k = n // 2
    if n % 2:
        buf.partition((k, n - 1))
        mid = buf[k : k + 1]
    else:
        buf.partition((k - 1, k, n - 1))
        mid = buf[k - 1 : k + 1]
    if buf.dtype.kind == "f" and np.isnan(buf[n - 1]):
        return buf[n - 1]
    # numpy's own mean of the middle one or two values: the same sum and division
    return np.mean(mid)


def _mad_inplace(buf: np.ndarray):
    """Median absolute deviation from the median of ``buf`` (contiguous 1-D, overwritten).

    Equal to ``np.median(np.abs(v - np.median(v)))`` of the original values.
    """
    med = _median_inplace(buf)
    np.subtract(buf, med, out=buf)
    np.abs(buf, out=buf)
    return _median_inplace(buf)
