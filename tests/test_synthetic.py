"""Synthetic micrograph generator: determinism, truth and convention checks."""

import numpy as np
import pytest
from skimage.draw import line as sk_line

from tracefit.conventions import axial_difference, pixel_endpoints_angle
from tracefit.errors import TracefitInputError
from tracefit.image import BandFamilySpec, render_micrograph, standard_suite, voronoi_labels


def test_same_seed_same_image_other_seed_other_image():
    kw = dict(families=[BandFamilySpec(30.0, 20, 3, -0.3)], noise_sigma=0.02, n_scratches=1, seed=4)
    a, _ = render_micrograph((128, 160), **kw)
    b, _ = render_micrograph((128, 160), **kw)
    c, _ = render_micrograph((128, 160), **{**kw, "seed": 5})
    assert a.shape == (128, 160) and a.dtype == np.uint8
    assert np.array_equal(a, b)
    assert not np.array_equal(a, c)


def test_truth_lines_have_the_family_angle_and_lie_on_dark_pixels():
    img, truth = render_micrograph((200, 300), [BandFamilySpec(62.0, 25, 3, -0.4, spacing_jitter=0.0)], noise_sigma=0.0, seed=1)
    fam = truth.families[0]
    assert fam.n_bands >= 8
    for c0, r0, c1, r1 in fam.lines:
        # every band line has the family angle (convention: tracefit.conventions, rows down)
        assert abs(axial_difference(pixel_endpoints_angle(c0, r0, c1, r1), 62.0)) < 1e-6
    # independent renderer of the same line: skimage.draw.line rasterises the truth line;
    # the image must be darker there than on average (the band is drawn where the truth says)
    c0, r0, c1, r1 = fam.lines[len(fam.lines) // 2]
    rr, cc = sk_line(int(round(r0)), int(round(c0)), int(round(r1)), int(round(c1)))
    ok = (rr >= 0) & (rr < 200) & (cc >= 0) & (cc < 300)
    assert img[rr[ok], cc[ok]].mean() < img.mean() - 0.2 * 255 * 0.55


def test_bright_and_dark_contrast_sign():
    img_d, _ = render_micrograph((64, 64), [BandFamilySpec(0.0, 16, 3, -0.3, offset_px=8, spacing_jitter=0)], noise_sigma=0, seed=0)
    img_b, _ = render_micrograph((64, 64), [BandFamilySpec(0.0, 16, 3, +0.3, offset_px=8, spacing_jitter=0)], noise_sigma=0, seed=0)
    base = round(0.55 * 255)
    assert img_d.min() < base - 30 and img_d.max() <= base + 1
    assert img_b.max() > base + 30 and img_b.min() >= base - 1


def test_databar_16bit_rgb_and_jpeg_options():
    img, truth = render_micrograph((256, 256), [BandFamilySpec(45)], databar=True, bit_depth=16, rgb=True, seed=3)
    assert img.dtype == np.uint16 and img.shape == (256, 256, 3)
    c0, r0, c1, r1 = truth.databar_bbox
    assert (c0, c1, r1) == (0, 256, 256) and 200 < r0 < 250
    # the bar is a dark strip
    assert img[r0 + 2 :, :, 1].mean() < 0.3 * img[: r0 - 2, :, 1].mean()
    j, _ = render_micrograph((128, 128), [BandFamilySpec(45)], jpeg_quality=50, seed=3)
    p, _ = render_micrograph((128, 128), [BandFamilySpec(45)], seed=3)
    assert j.dtype == np.uint8 and not np.array_equal(j, p)


def test_grain_families_are_drawn_on_their_grain_only():
    labels = voronoi_labels((200, 200), 4, seed=2)
    assert set(np.unique(labels)) == {0, 1, 2, 3}
    img, truth = render_micrograph((200, 200), labels=labels, grain_families={1: [BandFamilySpec(20.0, 15, 3, -0.4)]},
                                   noise_sigma=0.0, boundary_depth=0.0, grain_contrast=0.0, seed=2)
    assert [f.grain for f in truth.families] == [1]
    assert np.array_equal(truth.labels, labels)
    others = img[labels != 1]
    assert others.min() == others.max()  # no bands, no noise outside grain 1
    assert img[labels == 1].min() < others.min() - 30


def test_standard_suite_is_deterministic_and_varied():
    a = list(standard_suite(6, seed=9, shape=(128, 128)))
    b = list(standard_suite(6, seed=9, shape=(128, 128)))
    assert all(np.array_equal(x.image, y.image) for x, y in zip(a, b))
    n_fam = [len(c.truth.families) for c in a]
    assert all(1 <= k <= 3 for k in n_fam)
    for c in a:
        angs = c.truth.family_angles
        for i in range(len(angs)):
            for j in range(i):
                assert abs(axial_difference(angs[i], angs[j])) >= 15


def test_bad_arguments():
    # one-line input errors naming the parameter (TracefitInputError is a ValueError)
    with pytest.raises(TracefitInputError, match="shape must be at least 8 x 8"):
        render_micrograph((4, 4))
    with pytest.raises(TracefitInputError, match="bit_depth must be 8 or 16"):
        render_micrograph((64, 64), bit_depth=12)
    with pytest.raises(TracefitInputError, match="jpeg_quality"):
        render_micrograph((64, 64), jpeg_quality=101)
    with pytest.raises(TracefitInputError, match="labels has shape"):
        render_micrograph((64, 64), labels=np.zeros((32, 32), int))
    with pytest.raises(TracefitInputError, match="grain_families needs labels"):
        render_micrograph((64, 64), grain_families={0: [BandFamilySpec(10.0)]})
    with pytest.raises(TracefitInputError, match="n_grains"):
        voronoi_labels((64, 64), 0)
