"""Families of short, wavy, unevenly spaced bands in small grains (stage 6b, tracefit.image.projection).

The maps are drawn here with numpy only (an independent renderer, not tracefit's synthetic
module): slip bands of a high-resolution DIC max-shear strain map are thin bright lines
that often stop inside the grain, wander by a fraction of a point, vary in strength along
their length and keep no regular spacing (common practice, no source). The angle
convention checked against is the image frame of tracefit.conventions: x right, y up,
counterclockwise, so a band along pixel direction (dc, dr) has angle atan2(-dr, dc).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.ndimage import gaussian_filter

import tracefit.image.detect as detect_module
from tracefit.conventions import axial_difference
from tracefit.image import detect_bands
from tracefit.image.significance import _background_density, family_log10_nfa
from tracefit.image.ridges import RidgePixels

SHAPE = (110, 120)


def grain_labels(shape=SHAPE):
    """Label 1: an irregular grain of about 2400 points in the middle; 0 around it."""
    rr, cc = np.mgrid[0 : shape[0], 0 : shape[1]].astype(float)
    r = np.hypot((rr - 55) / 26.0, (cc - 60) / 31.0)
    ang = np.arctan2(rr - 55, cc - 60)
    return (r < 1.0 + 0.08 * np.sin(3 * ang)).astype(np.int32)


def short_band_map(angle_deg, seed, with_bands=True, shape=SHAPE, crossing=None, level0=0.05):
    """Float max-shear-like map: correlated positive noise plus bands that stop, wander and fade.

    ``crossing``: (angle_deg, level) of a second family drawn across the first.
    """
    rng = np.random.default_rng(seed)
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(float)
    field = 0.012 + np.abs(gaussian_filter(rng.normal(0, 0.006, shape), 1.2)) * 3.0
    families = [(angle_deg, level0)] + ([crossing] if crossing else [])
    for angle_deg, level0 in families if with_bands else []:
        t = math.radians(angle_deg)
        d = np.array([math.cos(t), -math.sin(t)])  # (col, row) along the band
        n = np.array([-d[1], d[0]])
        across = (cc - 60) * n[0] + (rr - 55) * n[1]
        along = (cc - 60) * d[0] + (rr - 55) * d[1]
        pos = -26.0
        while pos < 26.0:
            pos += rng.uniform(5.0, 12.0)  # uneven spacing
            start = rng.uniform(-30.0, -5.0)
            stop = start + rng.uniform(18.0, 45.0)  # most bands stop inside the grain
            wave = 0.4 * np.sin(along / rng.uniform(15, 25) + rng.uniform(0, 6.3))
            fade = np.exp(gaussian_filter(rng.normal(0, 1.0, shape), 4.0) * 0.4)
            on = (along > start) & (along < stop)
            level = level0 * rng.lognormal(0.0, 0.5)
            field += on * level * fade * np.exp(-0.5 * ((across - pos - wave) / 0.7) ** 2)
    return gaussian_filter(field, 0.5).astype(np.float32)


ANGLES = [(s, a) for s, a in zip(range(8), (23.0, 67.0, 112.0, 151.0, 38.0, 84.5, 129.0, 171.0))]


def _found(res, angle, tol=2.0):
    return any(abs(axial_difference(f.angle_deg, angle)) <= tol for f in res.families)


CROSSING = (50.0, 0.03)  # the second family: this many degrees from the first, and its level


def _two_families(seed, angle):
    second = (angle + CROSSING[0]) % 180.0
    return short_band_map(angle, seed, crossing=(second, CROSSING[1])), (angle, second)


def test_two_crossing_families_of_short_wavy_bands_in_a_small_grain_are_both_found():
    labels = grain_labels()
    found, extra = 0, 0
    for seed, angle in ANGLES:
        img, drawn = _two_families(seed, angle)
        res = detect_bands(img, labels=labels, grain=1)
        found += sum(_found(res, a) for a in drawn)
        extra += sum(not any(abs(axial_difference(f.angle_deg, a)) <= 2.0 for a in drawn) for f in res.families)
    assert found >= 14, found  # of 16; this test's own margins (no source)
    assert extra <= 2, extra


def test_the_projection_stage_is_what_finds_them(monkeypatch):
    labels = grain_labels()

    def count():
        return sum(sum(_found(detect_bands(img, labels=labels, grain=1), a) for a in drawn)
                   for img, drawn in (_two_families(s, a) for s, a in ANGLES))

    with_stage = count()
    monkeypatch.setattr(detect_module, "_projection_families", lambda *args, **kw: ([], 0))
    assert with_stage >= count() + 4


def test_the_same_maps_without_bands_give_no_family():
    labels = grain_labels()
    for seed, _ in ANGLES:
        res = detect_bands(short_band_map(0.0, seed, with_bands=False), labels=labels, grain=1)
        assert res.families == [], (seed, [(f.angle_deg, f.n_bands, f.log10_nfa) for f in res.families])
        assert res.verdict != "found"


def _ridge_lines(cols_rows, shape=(100, 100), sector=6):
    cols = np.concatenate([c for c, _ in cols_rows]).astype(np.int16)
    rows = np.concatenate([r for _, r in cols_rows]).astype(np.int16)
    return RidgePixels(cols, rows, np.ones(len(cols), np.float32), -1, shape, np.full(len(cols), sector, np.int16))


def test_background_density_leaves_the_family_own_bands_out():
    # six dense vertical lines (every 4 px) and nothing else: the whole-region density of aligned
    # hits is large; away from the lines no hit is left, and Laplace's rule of succession
    # (k + 1) / (n + 2) (from memory) gives about one in the pixels counted, not zero
    lines = [(np.full(100, c), np.arange(100)) for c in (30, 34, 38, 42, 46, 50)]
    rp = _ridge_lines(lines)
    from tracefit.image.significance import CORRIDOR_PX, _aligned_hits

    hits = _aligned_hits(rp, 90.0)
    region = np.ones((100, 100), bool)
    ends = [((float(c), 0.0), (float(c), 99.0)) for c in (30, 34, 38, 42, 46, 50)]
    whole = hits.sum() / region.sum()
    away = _background_density(hits, region, ends, 90.0, 1)
    assert whole == pytest.approx(0.18, abs=0.01)  # 6 lines x 3 px (the 1-px hit tolerance) / 100 px
    narrowest, widest = 50 - 30 + 2 * CORRIDOR_PX + 1, 50 - 30 + 2 * CORRIDOR_PX + 3  # columns left out
    assert 1.0 / (100 * (100 - narrowest) + 2) <= away <= 1.0 / (100 * (100 - widest) + 2)


def test_a_band_is_judged_on_the_least_likely_segment_of_its_whole_line():
    # a contrario counting of line segments (Desolneux, Moisan & Morel, IJCV 40, 2000; von Gioi et
    # al., LSD, TPAMI 32, 2010): with the density p fixed, a band whose fitted ("seen") part is its
    # top fifth but whose line is covered from end to end is judged on the whole line
    from tracefit.image.significance import _aligned_hits, _best_segment_tail, _log10_tails

    rp = _ridge_lines([(np.full(100, 50), np.arange(100))])
    hits = _aligned_hits(rp, 90.0)
    region = np.ones((100, 100), bool)
    p = 0.1
    seen = ((50.0, 0.0), (50.0, 19.0))
    tail, n, k = _best_segment_tail(hits, region, seen, 1, 2.0, p, np.array([0.0, -1.0]))
    assert n == k == 50  # every sample of the 100-px line, one per 2 px, hits
    assert tail == pytest.approx(float(_log10_tails(np.array([50]), np.array([50]), p)[0]))
    seen_only = float(_log10_tails(np.array([10]), np.array([10]), p)[0])
    assert tail < seen_only - 30  # 50 hits against 10, at p = 0.1: 40 decades


def test_tail_polarity_follows_the_rare_extreme_grey_levels():
    # Kelly's percentile skewness (10th, 50th, 90th percentiles; named from memory): bright lines on a
    # dark field skew right, dark grooves on a bright field skew left, plain noise not at all
    from tracefit.image.projection import _tail_polarity

    rng = np.random.default_rng(0)
    region = np.ones((80, 80), bool)
    noise = rng.normal(0.0, 1.0, (80, 80))
    bright = noise.copy()
    bright[::5, :] += 8.0  # one row in five is a bright band
    assert _tail_polarity(bright, region) == 1
    assert _tail_polarity(-bright, region) == -1
    assert _tail_polarity(noise, region) == 0
