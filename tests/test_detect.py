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
    assert set(d) == {"image", "families", "verdict", "reason"}
    assert d["verdict"] == "found" and "1 band family" in d["reason"]
    assert d["image"] == {"path": "x.png", "width": 384, "height": 384, "excluded": []}
    assert set(d["families"][0]) == {"angle_deg", "angle_sigma_deg", "n_bands", "spacing_px", "spacing_um", "strength"}
    assert res.to_dict(with_lines=True)["families"][0]["significance"] > 10


def test_a_family_built_again_from_a_crossing_candidate_keeps_the_stronger_copy():
    # Lines crossing a family at a few degrees are refined onto it (stage 6) and give a copy with
    # a few of its bands; whichever candidate is tried first, the family's own candidate is still
    # tried and the stronger copy kept, and a copy of a family found in an earlier round is
    # dropped. (Design rule of the detector, no source.)
    from types import SimpleNamespace

    from tracefit.image.search import _fit_candidates

    def cand(angle):
        return (None, np.array([[angle, 0.0, 0.0, 100.0, 0.5]]))

    built = {52.5: SimpleNamespace(angle_deg=59.99, polarity="dark", strength=5.7),
             60.0: SimpleNamespace(angle_deg=60.00, polarity="dark", strength=150.0),
             61.0: SimpleNamespace(angle_deg=60.02, polarity="dark", strength=20.0),
             130.0: SimpleNamespace(angle_deg=130.0, polarity="dark", strength=1.0)}

    def try_candidate(rp, ln):
        return built[float(ln[0, 0])]

    for order in ([52.5, 60.0, 130.0], [60.0, 52.5, 130.0]):
        fams, tried = _fit_candidates(try_candidate, [cand(a) for a in order], max_families=8)
        assert sorted(f.strength for f in fams) == [1.0, 150.0]
    # a split cluster of the family is skipped once the family's own candidate has been tried
    fams, tried = _fit_candidates(try_candidate, [cand(60.0), cand(61.0)], max_families=8)
    assert tried == 1 and [f.strength for f in fams] == [150.0]
    earlier = [SimpleNamespace(angle_deg=59.5, polarity="dark", strength=1.0)]
    fams, _ = _fit_candidates(try_candidate, [cand(52.5), cand(130.0)], max_families=8, known=earlier)
    assert [f.angle_deg for f in fams] == [130.0]


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


def test_a_data_bar_does_not_change_the_depth_of_the_bands():
    # The bar's black text is the image's darkest percent; once it triggered the level shift meant
    # for strain maps (background near zero), which halved every band's relative depth. The levels
    # are judged on the analysed pixels, without the bar: the same bands, the same depth.
    fams = [BandFamilySpec(30.3, 48, 5, -0.3), BandFamilySpec(100.7, 64, 6, 0.3)]
    kw = dict(n_scratches=0, illumination=0.3, noise_sigma=0.03, blur_sigma=1.0, seed=2)  # a dark bar
    plain, _ = render_micrograph((768, 768), fams, databar=False, **kw)
    barred, truth = render_micrograph((768, 768), fams, databar=True, **kw)
    assert np.percentile(barred, 1) < 0.1 * np.ptp(np.percentile(barred, [1, 99]))  # the bar is the darkest percent
    depth = {}
    one_grain = np.ones(plain.shape, np.int32)
    for name, img in (("plain", plain), ("barred", barred)):
        # the image alone, and as the one grain of a label image (detect_grains finds the bar once, on the whole image)
        for entry, res in (("image", detect_bands(img)), ("grains", detect_grains(img, one_grain)[1])):
            assert not any("shifted" in n for n in res.notes)
            depth[name, entry] = {round(f.angle_deg): f.contrast for f in res.families}
    for entry in ("image", "grains"):
        assert set(depth["plain", entry]) == set(depth["barred", entry]) == {30, 101}
        for a in (30, 101):
            assert depth["barred", entry][a] == pytest.approx(depth["plain", entry][a], rel=0.15)
        assert depth["plain", entry][30] < -0.1 and depth["plain", entry][101] > 0.1  # drawn 30 % deep, blurred


def test_a_strain_map_with_its_background_near_zero_is_still_shifted():
    # relative depth (I - B) / B needs a background level B away from zero: a strain map's levels are
    # raised by their range, by every entry point, and said so
    from tracefit.image.prepare import _positive_levels

    rng = np.random.default_rng(3)
    strain = np.abs(rng.normal(0.01, 0.004, (200, 300))).astype(np.float32)  # background strain about 1 %
    strain[:, ::25] += 0.08  # bright bands, vertical
    notes = []
    out = _positive_levels(strain, None, notes)
    assert out.min() > np.ptp(np.percentile(strain, [1, 99])) * 0.9 and any("shifted" in n for n in notes)
    labels = np.ones(strain.shape, np.int32)
    labels[:, 150:] = 2
    results = [detect_bands(strain)] + list(detect_grains(strain, labels).values())
    for res in results:
        assert any("shifted" in n for n in res.notes)
        assert [round(f.angle_deg) for f in res.families] == [90]
        assert res.families[0].contrast < 1.0  # against the raised background; about 3 without the shift
    # judged once for the whole map: a band-free grain whose own levels sit far from zero is shifted with the rest
    quiet = strain.copy()
    quiet[:, 150:] = rng.normal(0.01, 0.0005, (200, 150))
    alone = []
    _positive_levels(quiet[:, 150:], None, alone)
    assert not alone  # alone it would not be shifted
    assert all(any("shifted" in n for n in r.notes) for r in detect_grains(quiet, labels).values())


def test_the_level_sample_leaves_out_exactly_the_bar_boxes():
    from tracefit.image.prepare import _sampled_mask

    rng = np.random.default_rng(11)
    for shape in [(1030, 2050), (1537, 1100), (2049, 513), (700, 700)]:
        for _ in range(20):
            r0, c0 = (int(rng.integers(0, n - 1)) for n in shape)
            r1, c1 = int(rng.integers(r0 + 1, shape[0] + 1)), int(rng.integers(c0 + 1, shape[1] + 1))
            mask = rng.random(shape) > 0.1
            for m in (None, mask):
                (sr, sc), got = _sampled_mask(shape, m, [{"bbox": [c0, r0, c1, r1]}])
                full = np.ones(shape, bool) if m is None else m.copy()
                full[r0:r1, c0:c1] = False
                np.testing.assert_array_equal(got, full[::sr, ::sc])
    assert _sampled_mask((600, 600), None, [])[1] is None


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
    bad[3, 3] = np.inf
    with pytest.raises(TracefitInputError, match="infinite"):
        detect_bands(bad)
    with pytest.raises(TracefitInputError, match="NaN everywhere"):
        detect_bands(np.full((64, 64), np.nan))


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


# --------------------------------------------------------------------------- arguments at the door
# Regression tests for the faults found by fuzzing (issue 16, item 1) and the option
# ranges of tracefit.image.options.DETECT_OPTIONS: each bad value gives one line that
# names the library parameter, never a raw NumPy / OpenCV error.

_SMALL = render_micrograph((96, 96), [BandFamilySpec(30.0, 16, 3, -0.3)], seed=1)[0]
_RGBA_STRIP = np.dstack([np.tile(np.arange(2000, dtype=np.uint8), (40, 1))] * 3 + [np.full((40, 2000), 255, np.uint8)])

BAD_OPTIONS = [
    (_SMALL, dict(working_size=0), "working_size"),  # was ZeroDivisionError
    (_RGBA_STRIP, dict(working_size=1), "working_size"),  # was cv2.error
    (_RGBA_STRIP, dict(working_size=16), "working_size=16 would reduce"),  # valid alone, too small for this image
    (_SMALL, dict(scales=()), "scales"),  # was "max() arg is an empty sequence"
    (_SMALL > 128, dict(min_bands=0), "min_bands"),  # bool image; was "zero-size array"
    (_SMALL, dict(min_bands=-5), "min_bands"),
    (_SMALL, dict(max_families=0), "max_families"),
    (_SMALL, dict(min_bands="three"), "min_bands"),
    (_SMALL, dict(min_bands=2.5), "min_bands"),
    (_SMALL, dict(min_bands=True), "min_bands"),
    (_SMALL, dict(working_size="big"), "working_size"),
    (_SMALL, dict(working_size=float("nan")), "working_size"),
    (_SMALL, dict(scales=2.0), "scales"),
    (_SMALL, dict(scales=[1.0, float("nan")]), "scales"),
    (_SMALL, dict(scales=[1.0, -1.0]), "scales"),
    (_SMALL, dict(min_depth=float("nan")), "min_depth"),
    (_SMALL, dict(min_depth=-0.1), "min_depth"),
    (_SMALL, dict(min_coverage="0.3"), "min_coverage"),
    (_SMALL, dict(min_coverage=float("inf")), "min_coverage"),
    (_SMALL, dict(pixel_size_um=float("nan")), "pixel_size_um"),
    (_SMALL, dict(pixel_size_um=0.0), "pixel_size_um"),
    (_SMALL, dict(find_bar="yes"), "find_bar"),
    (_SMALL, dict(grain=1), "grain=1 needs labels"),
]


@pytest.mark.parametrize("img,kw,name", BAD_OPTIONS, ids=[f"{k}" for _, k, _ in BAD_OPTIONS])
def test_bad_options_fail_at_the_door_with_one_line(img, kw, name):
    with pytest.raises(TracefitInputError, match=name) as info:
        detect_bands(img, **kw)
    assert "\n" not in str(info.value)


def test_working_size_message_names_a_size_that_works():
    with pytest.raises(TracefitInputError) as info:
        detect_bands(_RGBA_STRIP, working_size=16)
    need = int(str(info.value).rsplit("at least ", 1)[1].split()[0])
    res = detect_bands(_RGBA_STRIP, working_size=need)  # runs; the strip's copy keeps 16 rows
    assert res.width == 2000 and res.height == 40
    with pytest.raises(TracefitInputError):
        detect_bands(_RGBA_STRIP, working_size=need - 1)


def test_option_table_defaults_are_the_signature_defaults():
    import inspect

    from tracefit.image import DETECT_OPTIONS

    params = dict(inspect.signature(detect_bands).parameters)
    params.update(inspect.signature(detect_grains).parameters)
    for name, opt in DETECT_OPTIONS.items():
        assert params[name].default == opt.default, name
        opt.check(opt.default)  # every default passes its own rule


def test_detect_grains_checks_its_arguments():
    labels = np.zeros(_SMALL.shape, int)
    labels[:, 48:] = 1
    with pytest.raises(TracefitInputError, match="min_bands"):
        detect_grains(_SMALL, labels, min_bands=0)
    with pytest.raises(TracefitInputError, match="min_pixels"):
        detect_grains(_SMALL, labels, min_pixels=-1)
    with pytest.raises(TracefitInputError, match="grains must hold integer"):
        detect_grains(_SMALL, labels, grains=["a"])
    with pytest.raises(TracefitInputError, match="grain id 7 does not occur"):
        detect_grains(_SMALL, labels, grains=[0, 7])
    with pytest.raises(TypeError, match="unexpected keyword argument 'min_band'"):
        detect_grains(_SMALL, labels, min_band=2)
    # every keyword-only option of detect_bands but the path passes through detect_grains
    import inspect

    opts = {n: p.default for n, p in inspect.signature(detect_bands).parameters.items()
            if p.kind is inspect.Parameter.KEYWORD_ONLY and n != "path"}
    out = detect_grains(_SMALL, labels, min_pixels=10**6, **opts)
    assert set(out) == {0, 1} and all("too few" in r.notes[0] for r in out.values())


def test_grain_id_minus_one_is_cropped_to_its_own_pixels():
    # find_objects numbers labels from 1; grain -1 once took the box of the largest id
    labels = np.full((256, 256), -1, int)
    labels[:, 128:] = 1
    labels[200:, 150:] = 0
    img, _ = render_micrograph((256, 256), labels=labels, seed=6,
                               grain_families={-1: [BandFamilySpec(60.0, 16, 3, -0.35)]})
    out = detect_grains(img, labels, grains=[-1])
    assert [round(f.angle_deg) for f in out[-1].families] == [60]
    for ln in out[-1].families[0].lines:
        assert max(ln.col0, ln.col1) < 136


def test_overlay_with_an_unknown_suffix_is_an_input_error(tmp_path):
    # OpenCV raises its own error for a suffix it has no writer for (issue 16, item 1)
    from tracefit.image import write_detection_overlay

    with pytest.raises(TracefitInputError, match="could not write the overlay"):
        write_detection_overlay(tmp_path / "out.xyz", _SMALL, detect_bands(_SMALL))
