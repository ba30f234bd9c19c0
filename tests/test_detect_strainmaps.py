"""Strain-map-like float fields, small grains, NaN holes, enlargement and 16-bit data bars (issue 13).

The fields are drawn here with numpy only (an independent renderer, not tracefit's
synthetic module): bright thin bands of Gaussian cross-section (the shape of localised
slip in HR-DIC max-shear strain maps, common practice, no source) on a smooth
background with white noise. The angle convention checked against is the image frame of
tracefit.conventions: x right, y up, counterclockwise, so a band along pixel direction
(dc, dr) has angle atan2(-dr, dc).
"""

from __future__ import annotations

import math

import cv2
import numpy as np
import pytest

from tracefit.conventions import axial_difference
from tracefit.image import detect_bands, detect_grains, voronoi_labels


def band_field(shape, families, width_px=1.0, amplitude=0.04, noise=0.004, seed=0, mask=None):
    """Float strain-like map: background ~0.01, bright Gaussian bands (angle_deg, spacing_px) per family."""
    rng = np.random.default_rng(seed)
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    field = 0.01 + 0.003 * np.sin(cc / 37.0) * np.cos(rr / 53.0)
    for ang, spacing in families:
        t = math.radians(ang)
        # distance across bands: along the normal of the direction (cos t, -sin t) in (col, row)
        s = cc * math.sin(t) + rr * math.cos(t) + rng.uniform(0, spacing)
        d = (s + spacing / 2) % spacing - spacing / 2
        band = amplitude * np.exp(-0.5 * (d / width_px) ** 2)
        field += band if mask is None else band * mask
    field += rng.normal(0.0, noise, shape)
    return field.astype(np.float32)


def _matches(families, angles, tol):
    got = [f.angle_deg for f in families]
    return all(any(abs(axial_difference(g, a)) <= tol for g in got) for a in angles)


def test_bright_bands_in_a_float_strain_map_with_nan_holes():
    img = band_field((200, 300), [(35.0, 9.0)], seed=1)
    img[50:80, 100:140] = np.nan
    img[150:160, 10:290] = np.nan
    res = detect_bands(img)
    assert res.verdict == "found"
    assert res.families[0].polarity == "bright"
    assert abs(axial_difference(res.families[0].angle_deg, 35.0)) <= 0.5
    assert any("NaN" in n for n in res.notes)
    for ln in res.families[0].lines:  # no band ends inside a hole (2 px inset)
        for c, r in ((ln.col0, ln.row0), (ln.col1, ln.row1)):
            assert not (52 <= r < 78 and 102 <= c < 138)


def test_two_crossing_families_in_a_small_map_give_two():
    img = band_field((160, 160), [(20.0, 10.0), (110.0, 12.0)], seed=2)
    res = detect_bands(img)
    assert len(res.families) == 2
    assert _matches(res.families, [20.0, 110.0], 0.7)


def test_small_grains_of_a_strain_map_each_give_their_family():
    labels = voronoi_labels((200, 300), 12, seed=3)
    rng = np.random.default_rng(4)
    truth = {}
    img = np.zeros((200, 300), np.float32)
    for g in range(12):
        ang = float(rng.uniform(0, 180))
        truth[g] = ang
        m = labels == g
        img[m] = band_field((200, 300), [(ang, float(rng.uniform(7, 11)))], seed=10 + g)[m]
    out = detect_grains(img, labels, min_pixels=300)
    sizes = {g: int((labels == g).sum()) for g in truth}
    found = [g for g, r in out.items() if _matches(r.families, [truth[g]], 2.0)]
    # grains of a few hundred to a few thousand pixels
    assert min(sizes.values()) < 3000
    assert len(found) >= 10, (found, sizes)
    for g, r in out.items():
        assert r.verdict in ("found", "not_significant", "too_small", "low_contrast")
        assert r.verdict != "found" or r.families


@pytest.mark.parametrize("kind", [cv2.INTER_NEAREST, cv2.INTER_CUBIC])
def test_enlarged_map_gives_the_same_family(kind):
    img = band_field((120, 140), [(62.0, 8.0)], seed=5)
    base = detect_bands(img)
    assert base.families and abs(axial_difference(base.families[0].angle_deg, 62.0)) <= 1.0
    for k in (2, 3):
        big = cv2.resize(img, (140 * k, 120 * k), interpolation=kind)
        res = detect_bands(big)
        assert len(res.families) == len(base.families)
        a, b = res.families[0], base.families[0]
        tol = 3 * math.hypot(a.angle_sigma_deg, b.angle_sigma_deg) + 0.1
        assert abs(axial_difference(a.angle_deg, b.angle_deg)) <= tol


def test_pure_noise_and_smooth_fields_give_no_family_and_say_why():
    noise = np.random.default_rng(6).normal(0.0, 1.0, (200, 200)).astype(np.float32)
    r = detect_bands(noise)
    assert r.families == [] and r.verdict in ("not_significant", "low_contrast") and r.reason
    rr, cc = np.mgrid[0:200, 0:200]
    smooth = (np.sin(rr / 30.0) + np.cos(cc / 41.0)).astype(np.float32)
    r2 = detect_bands(smooth)
    assert r2.families == [] and r2.reason
    tiny = detect_bands(noise, mask=np.pad(np.ones((5, 5), bool), ((0, 195), (0, 195))))
    assert tiny.verdict == "too_small" and "too small" in tiny.reason


def test_sixteen_bit_image_with_a_drawn_data_bar_of_another_level():
    # a 16-bit backscatter-like image: grains of noisy levels, a flat bar of one exact
    # level (lower than the body by less than the body's spread) with bright text strokes
    rng = np.random.default_rng(7)
    img = (30000 + 9000 * rng.standard_normal((300, 400))).clip(0, 65535)
    img[240:, :] = 11822
    img[255:262, 20:120] = 48000  # "text"
    img[270:274, 300:380] = 48000  # "scale bar"
    res = detect_bands(img.astype(np.uint16))
    bars = [e for e in res.excluded if e["kind"] == "databar"]
    assert len(bars) == 1 and abs(bars[0]["bbox"][1] - 240) <= 3
    assert res.families == []
