"""Registering an orientation map onto a micrograph, and the whole chain from a map file.

A synthetic map of known grains is written by orix (.ang), registered under a known affine
transform from control points, and its grain ids warped into the micrograph's pixels.
Outside checks: scikit-image (``skimage.transform.warp`` with nearest-neighbour sampling and
the true transform gives the reference label image), orix (its writer and reader, and its
misorientation under symmetry for the grain means).
"""

from __future__ import annotations

import numpy as np
import pytest

from tracefit.crystal import to_quaternion
from tracefit.errors import TracefitInputError
from tracefit.viz import grain_boundaries, write_registration_figure
from tracefit.maps import (fit_registration, grain_map_from_orientation_map, grain_quaternions,
                           read_control_points, scaled_registration, synthetic_crystal_map, voronoi_labels,
                           warp_labels)

orix_io = pytest.importorskip("orix.io")
skt = pytest.importorskip("skimage.transform")

MAP = (60, 80)       # rows, cols of the map grid
IMAGE = (300, 420)   # rows, cols of the micrograph
TRUE = np.array([[4.6, 0.5, 25.0], [-0.4, 4.4, 22.0], [0.0, 0.0, 1.0]])  # map (col, row) -> image (col, row)
MAP_POINTS = np.array([[5.0, 4.0], [70.0, 6.0], [8.0, 52.0], [74.0, 50.0], [40.0, 30.0], [20.0, 40.0]])


def _apply(m, xy):
    h = np.column_stack([xy, np.ones(len(xy))]) @ m.T
    return h[:, :2] / h[:, 2:]


def _control_points(jitter_px=0.2, seed=0):
    img = _apply(TRUE, MAP_POINTS) + np.random.default_rng(seed).uniform(-jitter_px, jitter_px, (len(MAP_POINTS), 2))
    return np.column_stack([img, MAP_POINTS])


def _write_points_csv(path, cp):
    lines = ["image_x,image_y,map_x,map_y"] + [",".join(f"{v:.3f}" for v in row) for row in cp]
    path.write_text("\n".join(lines) + "\n")
    return path


def _truth_map(tmp_path, n=6, seed=3):
    lab = voronoi_labels(MAP, n, seed=seed)
    euler = np.random.default_rng(seed).uniform([0, 0, 0], [360, 180, 360], size=(n, 3))
    q = grain_quaternions(lab, euler, noise_deg=0.4, seed=seed)
    path = tmp_path / "scan.ang"
    orix_io.save(str(path), synthetic_crystal_map(q, step=0.5))
    return path, lab, euler


def _skimage_reference(map_labels):
    """Reference: scikit-image's nearest-neighbour warp of the map labels with the true transform."""
    tform = skt.AffineTransform(matrix=TRUE)
    out = skt.warp(map_labels.astype(float), tform.inverse, output_shape=IMAGE, order=0, cval=-1,
                   preserve_range=True)
    return np.rint(out).astype(np.int64)


def test_affine_from_control_points_recovers_the_transform():
    reg = fit_registration(_control_points(), IMAGE, MAP)
    assert reg.kind == "affine" and len(reg.residuals_px) == len(MAP_POINTS)
    assert reg.residuals_px.max() < 0.5 and not reg.warnings
    # the fitted transform puts the whole map within half a pixel of the true place
    corners = np.array([[-0.5, -0.5], [79.5, -0.5], [-0.5, 59.5], [79.5, 59.5]])
    assert np.max(np.linalg.norm(reg.map_to_image(corners) - _apply(TRUE, corners), axis=1)) < 0.5


def test_projective_on_request_recovers_a_perspective():
    persp = TRUE.copy()
    persp[2, :2] = [3e-4, -2e-4]
    img = _apply(persp, MAP_POINTS)
    reg = fit_registration(np.column_stack([img, MAP_POINTS]), IMAGE, MAP, kind="projective")
    assert reg.residuals_px.max() < 1e-6
    assert np.allclose(reg.matrix / reg.matrix[2, 2], persp, atol=1e-6)


def test_warped_labels_equal_scikit_image_warp():
    lab = voronoi_labels(MAP, 6, seed=3)
    ours = warp_labels(lab, fit_registration(_control_points(jitter_px=0.0), IMAGE, MAP), IMAGE)
    ref = _skimage_reference(lab)
    # pixels whose map position falls within rounding of a point edge may go either way
    assert np.mean(ours == ref) > 0.995


def test_whole_chain_from_an_ang_file(tmp_path):
    path, lab, euler = _truth_map(tmp_path)
    cp_csv = _write_points_csv(tmp_path / "points.csv", _control_points())
    gm = grain_map_from_orientation_map(path, IMAGE, control_points=cp_csv, min_grain_px=50)
    assert gm.labels.shape == IMAGE and gm.labels.dtype == np.int64
    assert gm.residuals_px.max() < 0.5 and not gm.warnings
    ref = _skimage_reference(lab)
    inside = ref >= 0
    # found ids -> true ids, one to one, on nearly every covered pixel
    pairs, counts = np.unique(np.column_stack([gm.labels[inside], ref[inside]]), axis=0, return_counts=True)
    main = pairs[counts > 0.01 * inside.sum()]
    assert len(main) == len(gm.table) == 6 and len(set(main[:, 1])) == 6
    agree = sum(c for (f, t), c in zip(pairs, counts) if (f, t) in {tuple(p) for p in main})
    assert agree / inside.sum() > 0.99
    from orix.quaternion import Orientation as OrixOrientation
    from orix.quaternion.symmetry import get_point_group

    cubic = get_point_group(225)
    for f, t in main:
        go = gm.table[int(f)]
        ang = OrixOrientation(to_quaternion(go.g), cubic).angle_with(
            OrixOrientation.from_euler(np.radians(euler[t]), cubic))
        assert np.degrees(ang[0]) < 0.1  # outside check: orix misorientation, cubic symmetry
        assert go.sigma_deg == pytest.approx(0.4, abs=0.06)
        # centroid in micrograph pixels (x column, y row) against the reference warp's
        rr, cc = np.nonzero(ref == t)
        assert np.hypot(gm.centroids_px[int(f)][0] - cc.mean(), gm.centroids_px[int(f)][1] - rr.mean()) < 1.0
        assert go.extra["grain_x_px"] == gm.centroids_px[int(f)][0]


def test_without_control_points_the_map_is_stretched_with_a_warning(tmp_path):
    path, lab, _ = _truth_map(tmp_path)
    gm = grain_map_from_orientation_map(path, (120, 160), min_grain_px=20)
    assert gm.registration.kind == "scaled" and len(gm.residuals_px) == 0
    assert any("no control points" in w for w in gm.warnings)
    # each map point covers exactly 2 x 2 pixels: ids follow the map's own grid
    seg = gm.segmentation.labels
    assert np.array_equal(gm.labels[::2, ::2], np.where(np.isin(seg, list(gm.table)), seg, -1))


def test_a_far_off_pair_is_named_in_a_warning():
    cp = _control_points()
    cp[2, :2] += (12.0, -9.0)
    reg = fit_registration(cp, IMAGE, MAP)
    assert reg.residuals_px.argmax() == 2 and reg.residuals_px[2] > 2.0
    assert any(w.startswith("control point 3 ") for w in reg.warnings)


def test_grain_too_small_in_the_image_is_skipped_with_a_note():
    from tracefit.crystal import Lattice
    from tracefit.maps import OrientationMap

    lab = np.zeros(MAP, int)
    lab[20:24, 30:34] = 1  # 16 map points -> about 16 * 4.4 * 4.6 = 320 pixels
    omap = OrientationMap(grain_quaternions(lab, [[0, 0, 0], [40, 30, 20]]), np.ones(MAP, bool), Lattice.fcc(),
                          (1.0, 1.0), "ni", 1)
    gm = grain_map_from_orientation_map(omap, IMAGE, _control_points(), min_grain_px=500)
    assert sorted(gm.table) == [1] and not np.any(gm.labels == 2)
    assert any("grain 2 covers" in n and "skipped" in n for n in gm.notes)
    kept = grain_map_from_orientation_map(omap, IMAGE, _control_points(), min_grain_px=100)
    assert sorted(kept.table) == [1, 2]


def test_check_figure_is_written(tmp_path):
    path, _, _ = _truth_map(tmp_path)
    gm = grain_map_from_orientation_map(path, IMAGE, control_points=_control_points(), min_grain_px=50)
    picture = np.random.default_rng(0).random(IMAGE)
    out = write_registration_figure(tmp_path / "check.png", picture, gm)
    import matplotlib.image as mpimg

    png = mpimg.imread(str(out))
    assert png.ndim == 3 and png.shape[1] > png.shape[0]  # a wide picture stays wide
    assert grain_boundaries(gm.labels).sum() > 0
    with pytest.raises(TracefitInputError, match="image is"):
        write_registration_figure(tmp_path / "bad.png", np.zeros((10, 10)), gm)


# --------------------------------------------------------------------------- bad input
@pytest.mark.parametrize("cp, kind, match", [
    (_control_points()[:2], "affine", "needs at least 3 control points, got 2"),
    (_control_points()[:3], "projective", "needs at least 4 control points, got 3"),
    (np.column_stack([[10, 100, 200], [10, 100, 200], [1, 10, 20], [1, 12, 30]]), "affine", "collinear in the micrograph"),
    (np.column_stack([[10, 100, 20], [10, 30, 200], [1, 10, 20], [1, 10, 20]]), "affine", "collinear in the orientation map"),
    (np.vstack([_control_points()[:3], [[500.0, 20.0, 10.0, 10.0]]]), "affine", "control point 4: image_x, image_y = .* outside the micrograph"),
    (np.vstack([_control_points()[:3], [[50.0, 20.0, 10.0, 70.0]]]), "affine", "control point 4: map_x, map_y = .* outside the orientation map"),
])
def test_bad_control_points(cp, kind, match):
    with pytest.raises(TracefitInputError, match=match):
        fit_registration(cp, IMAGE, MAP, kind=kind)


def test_bad_registration_name_and_csv(tmp_path):
    with pytest.raises(TracefitInputError, match="registration must be one of affine, projective"):
        fit_registration(_control_points(), IMAGE, MAP, kind="elastic")
    (tmp_path / "p.csv").write_text("x,y,map_x,map_y\n1,2,3,4\n")
    with pytest.raises(TracefitInputError, match="lacks column.*image_x"):
        read_control_points(tmp_path / "p.csv")
    (tmp_path / "q.csv").write_text("image_x,image_y,map_x,map_y\n1,two,3,4\n")
    with pytest.raises(TracefitInputError, match="line 2"):
        read_control_points(tmp_path / "q.csv")


def test_map_that_registers_onto_none_of_the_image(tmp_path):
    # Only the map's left quarter is indexed; the control points put the micrograph over its
    # right half: no grain lands on the picture.
    lab = np.zeros(MAP, int)
    q = grain_quaternions(lab, [[10, 20, 30]])
    valid = np.zeros(MAP, bool)
    valid[:, :20] = True
    path = tmp_path / "left.ang"
    orix_io.save(str(path), synthetic_crystal_map(q, valid=valid))
    cp = np.array([[0, 0, 40, 0], [419, 0, 79, 0], [0, 299, 40, 59], [419, 299, 79, 59]], float)
    with pytest.raises(TracefitInputError, match="lands on the micrograph"):
        grain_map_from_orientation_map(path, IMAGE, control_points=cp)


def test_scaled_registration_covers_pixel_edges():
    reg = scaled_registration((90, 120), (30, 40))
    assert np.allclose(reg.map_to_image([[-0.5, -0.5], [39.5, 29.5], [0, 0]]), [[-0.5, -0.5], [119.5, 89.5], [1, 1]])
