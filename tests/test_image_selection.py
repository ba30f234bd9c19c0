"""The detector's faster statistics give the reference libraries' values, bit for bit.

References: numpy's ``np.median`` (medians, median absolute deviations), scipy's
``scipy.stats.binom.logsf`` (binomial tails of the significance test), and the plain
numpy formulations the speed-ups replaced (the padded non-maximum suppression, the
flattened every-n-th second difference). Common practice, no source: a speed-up that
changes no result is checked against what it replaced.
"""

from __future__ import annotations

import math
import warnings

import numpy as np
import pytest

from tracefit.image.ridges import _diagonal_second_difference, _every_nth_difference, _thin_across
from tracefit.image.selection import _mad_inplace, _median
from tracefit.image.significance import binomial_log10_tail


def _arrays(rng):
    """Small and large (bracketed) arrays of both float types, with ties, zeros and a NaN."""
    for n in (1, 2, 3, 10, 101, 5_000, 60_001, 250_000):
        for dtype in (np.float32, np.float64):
            yield rng.standard_normal(n).astype(dtype)
            yield rng.integers(-3, 4, n).astype(dtype)  # many ties
            z = rng.standard_normal(n).astype(dtype)
            z[: n // 2] = 0.0
            yield z
            c = np.abs(rng.standard_cauchy(n)).astype(dtype)  # heavy tail
            yield c
    w = rng.standard_normal(80_000)
    w[123] = np.nan
    yield w


def _same(a, b) -> bool:
    if np.isnan(a) or np.isnan(b):
        return bool(np.isnan(a) and np.isnan(b))
    return a == b and np.asarray(a).dtype == np.asarray(b).dtype


def test_median_and_mad_equal_numpy():
    rng = np.random.default_rng(20261202)
    n_checked = 0
    for v in _arrays(rng):
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            ref_med = np.median(v)
            ref_mad = np.median(np.abs(v - np.median(v)))
            got_med = _median(v)
            got_mad = _mad_inplace(v.copy())
        assert _same(ref_med, got_med), (v.dtype, v.size, ref_med, got_med)
        assert _same(ref_mad, got_mad), (v.dtype, v.size, ref_mad, got_mad)
        n_checked += 1
    assert n_checked > 60


@pytest.mark.parametrize("shape", [(520, 2600), (392, 2600), (900, 1300), (200, 300)])
@pytest.mark.parametrize("lag", [1, 3, 6])
def test_every_nth_difference_holds_the_flattened_sample(shape, lag):
    a = np.random.default_rng(lag).standard_normal(shape).astype(np.float32)
    d = _diagonal_second_difference(a, lag)
    ref = d.ravel()[:: max(1, d.size // 400000)]
    got = _every_nth_difference(a, lag)
    assert got.size == ref.size
    assert np.array_equal(np.sort(got), np.sort(ref))


def test_thin_across_equals_the_padded_comparison():
    rng = np.random.default_rng(7)
    for oc, orow in [(1, 0), (0, 1), (1, 1), (1, -1), (-1, 1), (0, -1)]:
        resp = rng.gamma(1.5, 1.0, (40, 57)).astype(np.float32)
        mask = rng.random((40, 57)) > 0.1
        ref = resp.copy()
        ref[~mask] = 0
        pad = np.pad(ref, 1)
        h, w = ref.shape
        fwd = pad[1 + orow : 1 + orow + h, 1 + oc : 1 + oc + w]
        bwd = pad[1 - orow : 1 - orow + h, 1 - oc : 1 - oc + w]
        rows, cols = np.nonzero((ref > 1.0) & (ref >= fwd) & (ref > bwd))
        cc, rr = _thin_across(resp.copy(), mask, oc, orow)
        assert sorted(zip(rr.tolist(), cc.tolist())) == sorted(zip(rows.tolist(), cols.tolist()))


def test_binomial_tail_equals_scipy():
    from scipy.stats import binom

    rng = np.random.default_rng(3)
    for _ in range(2000):
        n = int(rng.integers(0, 3000))
        k = int(rng.integers(-2, n + 3))
        p = float(rng.choice([rng.uniform(1e-4, 0.999), 0.0, 1.0]))
        if k <= 0:
            ref = 0.0
        elif k > n:
            ref = -math.inf
        else:
            ref = float(binom.logsf(k - 1, n, p) / math.log(10.0))
        assert binomial_log10_tail(n, k, p) == ref, (n, k, p)
