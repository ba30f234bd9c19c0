"""Band-family detection against known truth and outside references."""

import math

import cv2
import numpy as np
import pytest
from skimage.draw import line as sk_line
from skimage.transform import hough_line, hough_line_peaks

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.image import detect_bands, detect_grains
from tracefit.image import BandFamilySpec, render_micrograph, voronoi_labels


def _match(result, true_angles, tol=2.0):
    """Errors of the true families (nan if missed) and the number of spurious families."""
    errs, used = [], set()
    for a in true_angles:
        d = [abs(axial_difference(f.angle_deg, a)) for f in result.families]
        j = int(np.argmin(d)) if d else -1
        if j >= 0 and d[j] <= tol and j not in used:
            used.add(j)
            errs.append(d[j])
        else:
            errs.append(float("nan"))
    return np.array(errs), len(result.families) - len(used)


CASES = [
    # shape, families, render keywords
    ((384, 384), [BandFamilySpec(17.3, 22, 3, -0.3)], dict(noise_sigma=0.01)),
    ((512, 512), [BandFamilySpec(71.9, 30, 4, 0.3), BandFamilySpec(133.4, 20, 3, -0.3)], dict(noise_sigma=0.04, blur_sigma=1.2)),
    ((512, 640), [BandFamilySpec(2.2, 26, 3, -0.2), BandFamilySpec(95.5, 35, 5, -0.35), BandFamilySpec(151.1, 18, 2.5, 0.25)],
     dict(noise_sigma=0.03, illumination=0.4, jpeg_quality=75)),
    ((768, 768), [BandFamilySpec(44.6, 40, 4, -0.25), BandFamilySpec(118.8, 28, 3, 0.3)], dict(noise_sigma=0.02, blur_sigma=0.8)),
]


@pytest.mark.parametrize("shape,fams,kw", CASES)
def test_known_truth_noise_blur_contrast_size(shape, fams, kw):
    img, truth = render_micrograph(shape, fams, seed=11, **kw)
    res = detect_bands(img)
    errs, spurious = _match(res, truth.family_angles)
    assert not np.isnan(errs).any(), (truth.family_angles, [f.angle_deg for f in res.families])
    assert errs.max() <= 0.1  # the median target, met by each family here
    assert spurious == 0
    for fam, true in zip(sorted(res.families, key=lambda f: f.angle_deg), sorted(truth.families, key=lambda f: f.angle_deg)):
        assert fam.n_bands >= 3
        # mean spacing within 25 % of the drawn one (jitter 15 %, some bands may be missed)
        assert abs(fam.spacing_px - true.spacing_px) / true.spacing_px < 0.25
        assert fam.angle_sigma_deg > 0
        assert fam.polarity == ("dark" if true.contrast < 0 else "bright")
        for ln in fam.lines:
            assert abs(axial_difference(ln.angle_deg, fam.angle_deg)) < max(0.5, 4 * ln.angle_sigma_deg)
    # strongest first
    assert [f.strength for f in res.families] == sorted((f.strength for f in res.families), reverse=True)


def test_spacing_in_micrometres_and_json_shape():
    img, truth = render_micrograph((384, 384), [BandFamilySpec(60.0, 24, 3, -0.3, spacing_jitter=0.0)], seed=2)
    res = detect_bands(img, pixel_size_um=0.25, path="x.png")
    fam = res.families[0]
    assert fam.spacing_px == pytest.approx(24.0, rel=0.05)
    assert fam.spacing_um == pytest.approx(fam.spacing_px * 0.25)
    d = res.to_dict()
    assert set(d) == {"image", "families"}
    assert d["image"] == {"path": "x.png", "width": 384, "height": 384, "excluded": []}
    assert set(d["families"][0]) == {"angle_deg", "angle_sigma_deg", "n_bands", "spacing_px", "spacing_um", "strength"}


def test_data_bar_found_and_excluded_scratches_not_families():
    img, truth = render_micrograph((512, 512), [BandFamilySpec(37.0, 25, 3, -0.3)], databar=True, n_scratches=3,
                                   noise_sigma=0.02, seed=21)
    res = detect_bands(img)
    bars = [e for e in res.excluded if e["kind"] == "databar"]
    assert len(bars) == 1
    c0, r0, c1, r1 = bars[0]["bbox"]
    assert abs(r0 - truth.databar_bbox[1]) <= 4 and r1 == 512
    assert any("data bar" in n for n in res.notes)
    errs, spurious = _match(res, truth.family_angles)
    assert errs[0] <= 0.1 and spurious == 0
    # no band line reaches into the bar
    for ln in res.families[0].lines:
        assert max(ln.row0, ln.row1) < r0 + 2


def test_no_bands_gives_empty_list_even_with_scratches():
    img, truth = render_micrograph((512, 512), [], n_scratches=3, noise_sigma=0.03, illumination=0.3, databar=True, seed=5)
    assert len(truth.scratches) == 3
    res = detect_bands(img)
    assert res.families == []
    assert any("no band families" in n for n in res.notes)


def test_16bit_and_rgb_inputs_give_the_same_families():
    fams = [BandFamilySpec(123.4, 26, 3, -0.3), BandFamilySpec(12.1, 30, 4, 0.3)]
    i16, truth = render_micrograph((384, 384), fams, bit_depth=16, seed=8)
    rgb, _ = render_micrograph((384, 384), fams, rgb=True, seed=8)
    for img in (i16, rgb):
        res = detect_bands(img)
        errs, spurious = _match(res, truth.family_angles)
        assert not np.isnan(errs).any() and errs.max() <= 0.1 and spurious == 0


def test_mask_limits_the_analysed_pixels():
    img, truth = render_micrograph((384, 384), [BandFamilySpec(80.0, 24, 3, -0.3)], seed=3)
    mask = np.zeros(img.shape, bool)
    mask[:, :192] = True
    res = detect_bands(img, mask=mask)
    assert abs(axial_difference(res.families[0].angle_deg, 80.0)) <= 0.1
    for ln in res.families[0].lines:
        assert max(ln.col0, ln.col1) < 200
    with pytest.raises(TracefitInputError, match="same size"):
        detect_bands(img, mask=np.ones((10, 10), bool))


def test_each_grain_is_analysed_on_its_own_pixels():
    labels = voronoi_labels((512, 512), 3, seed=4)
    gf = {0: [BandFamilySpec(25.0, 20, 3, -0.35)], 1: [BandFamilySpec(105.0, 22, 3, -0.35), BandFamilySpec(160.0, 26, 3, 0.3)], 2: []}
    img, truth = render_micrograph((512, 512), labels=labels, grain_families=gf, noise_sigma=0.015, seed=4)
    out = detect_grains(img, labels)
    assert set(out) == {0, 1, 2}
    for gid, specs in gf.items():
        res = out[gid]
        assert res.grain == gid
        errs, spurious = _match(res, [s.angle_deg for s in specs])
        assert spurious == 0
        assert np.all(errs <= 0.15)
        for fam in res.families:  # lines in whole-image coordinates, inside the grain
            for ln in fam.lines:
                c, r = int((ln.col0 + ln.col1) / 2), int((ln.row0 + ln.row1) / 2)
                assert labels[r, c] == gid
    single = detect_bands(img, labels=labels, grain=0)
    assert abs(axial_difference(single.families[0].angle_deg, 25.0)) <= 0.15


def test_constant_and_malformed_images_are_rejected():
    with pytest.raises(TracefitInputError, match="constant"):
        detect_bands(np.full((64, 64), 7, np.uint8))
    with pytest.raises(TracefitInputError):
        detect_bands(np.zeros((8, 8)))
    with pytest.raises(TracefitInputError):
        detect_bands(np.zeros((4, 64, 64)))
    bad = np.random.default_rng(0).random((64, 64)).astype(np.float32)
    bad[3, 3] = np.nan
    with pytest.raises(TracefitInputError, match="NaN"):
        detect_bands(bad)


def _draw_parallel_lines(shape, p0, p1, offsets, thickness=(-1, 0, 1)):
    """Dark lines on a grey background, drawn with skimage.draw.line (an independent renderer)."""
    img = np.full(shape, 170.0, np.float32)
    for off in offsets:
        for t in thickness:
            rr, cc = sk_line(p0[0] + off + t, p0[1], p1[0] + off + t, p1[1])
            ok = (rr >= 0) & (rr < shape[0]) & (cc >= 0) & (cc < shape[1])
            img[rr[ok], cc[ok]] = 90.0
    img += np.random.default_rng(1).normal(0, 3, shape).astype(np.float32)
    return img


def test_angle_convention_on_lines_drawn_by_skimage_draw():
    # skimage.draw.line as an independent line renderer: rows (r) grow downward, so a line
    # from (r=400, c=40) to (r=130, c=470) rises to the right on screen; its image-frame
    # angle is atan2(400 - 130, 470 - 40), computed here without tracefit.conventions.
    r0, c0, r1, c1 = 400, 40, 130, 470
    expect = math.degrees(math.atan2(r0 - r1, c1 - c0))  # 32.12 deg
    img = _draw_parallel_lines((512, 512), (r0, c0), (r1, c1), offsets=range(-150, 151, 30))
    res = detect_bands(img)
    assert len(res.families) == 1
    assert abs(res.families[0].angle_deg - expect) < 0.05
    # the mirror image (line falling to the right) must come out at 180 - angle
    res_m = detect_bands(img[:, ::-1].copy())
    assert abs(res_m.families[0].angle_deg - (180.0 - expect)) < 0.05


def test_agrees_with_skimage_hough_line_and_opencv_on_a_clean_single_line():
    # References: scikit-image hough_line / hough_line_peaks and OpenCV HoughLines, each at
    # 0.5 deg bins; our refined angle must fall within one bin of both.
    shape = (400, 400)
    r0, c0, r1, c1 = 330, 20, 60, 380
    img = _draw_parallel_lines(shape, (r0, c0), (r1, c1), offsets=[0], thickness=(-1, 0, 1))
    edge = np.zeros(shape, np.uint8)
    rr, cc = sk_line(r0, c0, r1, c1)
    edge[rr, cc] = 255
    theta = np.deg2rad(np.arange(-90.0, 90.0, 0.5))
    acc, angs, dists = hough_line(edge > 0, theta=theta)
    _, peak_t, _ = hough_line_peaks(acc, angs, dists, num_peaks=1)
    t_sk = peak_t[0]
    # skimage: rho = x cos t + y sin t (x = col, y = row); line direction (-sin t, cos t) in
    # (col, row); image-frame angle = atan2(-d_row, d_col)
    a_sk = math.degrees(math.atan2(-math.cos(t_sk), -math.sin(t_sk))) % 180.0
    lines = cv2.HoughLines(edge, 1, np.pi / 360, 100)
    t_cv = float(lines[0][0][1])  # same normal-angle convention as skimage, in [0, pi)
    a_cv = math.degrees(math.atan2(-math.cos(t_cv), -math.sin(t_cv))) % 180.0
    res = detect_bands(img, min_bands=1)
    assert len(res.families) == 1
    a = res.families[0].angle_deg
    assert abs(axial_difference(a, a_sk)) <= 0.5
    assert abs(axial_difference(a, a_cv)) <= 0.5
    # and the refined angle is closer to the drawn line than the bin width
    expect = math.degrees(math.atan2(r0 - r1, c1 - c0))
    assert abs(a - expect) < 0.1
