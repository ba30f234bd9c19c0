"""Figures from the Python API: stereographic projection, great circles, rose diagram, overlay."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy.spatial.transform import Rotation

from tracefit.viz import plots

unit3 = st.tuples(*[st.floats(-1, 1, allow_nan=False)] * 3).filter(lambda v: np.linalg.norm(v) > 0.1)


def test_wulff_projection_matches_orix_on_the_upper_hemisphere():
    # Outside reference: orix's StereographicProjection (pole=-1 projects the upper hemisphere).
    from orix.projections import StereographicProjection
    from orix.vector import Vector3d

    rng = np.random.default_rng(5)
    v = rng.normal(size=(200, 3))
    v[:, 2] = np.abs(v[:, 2]) + 1e-3
    v /= np.linalg.norm(v, axis=1, keepdims=True)
    x, y = StereographicProjection(pole=-1).vector2xy(Vector3d(v))
    assert np.allclose(plots.wulff_project(v), np.column_stack([x, y]), atol=1e-12)


@given(unit3)
def test_equal_angle_radius_is_tan_half_the_angle_from_the_pole(v):
    # Equal-angle (Wulff) net: a direction rho from the projection axis plots at R tan(rho / 2)
    # (standard definition of the stereographic projection, e.g. Cullity & Stock, Elements of
    # X-Ray Diffraction, ch. 2; from memory). Axes have no sense: v and -v plot at one point,
    # except on the primitive circle itself, where they are the two ends of a diameter.
    v = np.asarray(v, float)
    u = v / np.linalg.norm(v)
    rho = np.arctan2(np.hypot(u[0], u[1]), abs(u[2]))  # stable near the pole
    xy = plots.wulff_project(v)
    assert np.hypot(*xy) == pytest.approx(np.tan(rho / 2), abs=1e-9)
    other = plots.wulff_project(-v)
    if abs(u[2]) > 1e-9:
        assert np.allclose(xy, other, atol=1e-12)
    else:
        assert np.allclose(xy, other, atol=1e-9) or np.allclose(xy, -other, atol=1e-9)


@settings(max_examples=60)
@given(unit3)
def test_great_circle_lies_in_the_plane_on_the_upper_hemisphere(n):
    pts = plots.great_circle(n, 91)
    n = np.asarray(n, float) / np.linalg.norm(n)
    assert np.allclose(pts @ n, 0, atol=1e-9)
    assert np.allclose(np.linalg.norm(pts, axis=1), 1, atol=1e-12)
    assert np.all(pts[:, 2] >= -1e-12)


@pytest.mark.parametrize(
    "euler, hkl, trace_deg",
    [
        # worked vectors of the project's conventions (shared/conventions.md, checked there against orix)
        ((0, 0, 0), (1, 1, 1), 135.0),
        ((0, 0, 0), (1, -1, 1), 45.0),
        ((30, 0, 0), (1, 1, 1), 165.0),
        ((0, 45, 0), (1, -1, 1), 35.264),
    ],
)
def test_great_circle_meets_the_rim_at_the_trace_angle(euler, hkl, trace_deg):
    # The plane normal in the sample frame from scipy (v_sample = R v_crystal with
    # R = Rotation.from_euler("ZXZ", Bunge angles)), independent of tracefit.crystal.orientation.
    n = Rotation.from_euler("ZXZ", euler, degrees=True).apply(np.asarray(hkl, float) / np.linalg.norm(hkl))
    ends = plots.great_circle(n, 181)[[0, -1]]
    assert np.allclose(ends[:, 2], 0, atol=1e-12)  # both ends on the primitive circle
    ang = np.degrees(np.arctan2(ends[:, 1], ends[:, 0])) % 180
    assert ang == pytest.approx([trace_deg % 180] * 2, abs=1e-3)


def test_stereogram_uses_the_image_frame_when_the_data_frame_is_rotated():
    # With the orientation data turned by rho = 30 deg against the image, predicted traces move by
    # +30 deg (conventions); the stereogram's normals (normal_image) must move with them, so each
    # great circle still meets the rim at its predicted image angle.
    from tracefit.conventions import FrameSettings
    from tracefit.crystal import lattice_preset
    from tracefit.crystal import from_euler
    from tracefit.survey.runner import _predicted_dicts
    from tracefit.crystal import catalogue

    lat = lattice_preset("fcc")
    preds = _predicted_dicts(lat, from_euler(np.array([0.0, 0.0, 0.0])), catalogue(lat, ["slip"]),
                             FrameSettings(rotation_deg=30.0), None)
    by_plane = {}
    for p in preds:
        end = plots.great_circle(p["normal_image"], 3)[0]
        rim = np.degrees(np.arctan2(end[1], end[0])) % 180
        assert rim == pytest.approx(p["angle_deg"] % 180, abs=1e-6)
        by_plane[tuple(abs(x) for x in p["plane"])] = p["angle_deg"]
    assert by_plane[(1, 1, 1)] == pytest.approx(165.0, abs=1e-6)  # 135 + 30 (worked vector)


def test_stereogram_draws_every_candidate_and_marks_matched_poles():
    planes = [{"plane": p, "normal_sample": p} for p in ((1, 1, 1), (1, -1, 1), (-1, 1, 1), (1, 1, -1))]
    fig = plots.stereogram(planes, matched=[(1, 1, 1)], observed_deg=[135.0])
    ax = fig.axes[0]
    texts = [t.get_text() for t in ax.texts]
    assert "(111)" in texts and "(1-11)" in texts
    assert "Wulff" in ax.get_title() and "upper hemisphere" in ax.get_title()
    filled = [ln for ln in ax.lines if ln.get_marker() == "o" and ln.get_markersize() >= 7]
    assert len(filled) == 1 and np.allclose(filled[0].get_xydata()[0], plots.wulff_project([1, 1, 1]))


def test_rose_diagram_is_an_axial_histogram_mirrored():
    angles = [10.0, 12.0, 191.0, 135.0, 136.0, -44.0]  # 191 = 11 and -44 = 136 as axial angles
    fig = plots.rose_diagram(angles, bin_deg=10.0)
    ax = fig.axes[0]
    bars = ax.patches
    assert len(bars) == 36  # 18 sectors, each drawn at theta and theta + 180
    h = np.array([b.get_height() for b in bars])
    expect, _ = np.histogram(np.mod(angles, 180.0), bins=18, range=(0, 180))
    assert np.array_equal(h[:18], expect) and np.array_equal(h[18:], expect)
    assert expect[1] == 3 and expect[13] == 3
    with pytest.raises(ValueError):
        plots.rose_diagram(angles, bin_deg=7.0)


def test_overlay_draws_each_band_and_labels_each_family():
    img = np.zeros((60, 80))
    fams = [
        {"angle_deg": 45.0, "lines": [[0, 59, 59, 0], [10, 59, 69, 0]]},
        {"angle_deg": 135.0, "lines": [[0, 0, 50, 50]]},
    ]
    fig = plots.overlay_figure(img, fams, labels=["(1-11) slip", "(111) slip"])
    ax = fig.axes[0]
    assert len(ax.lines) == 3
    assert [t.get_text() for t in ax.texts] == ["F1: (1-11) slip", "F2: (111) slip"]
    assert ax.lines[0].get_color() != ax.lines[2].get_color()


def test_figures_save_as_png(tmp_path):
    fig = plots.rose_diagram([30.0, 40.0])
    p = plots.save_figure(fig, tmp_path / "rose.png")
    assert p.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"


def test_stereogram_for_an_orientation_draws_one_circle_per_distinct_plane():
    from tracefit.crystal import lattice_preset
    from tracefit.crystal import from_euler
    from tracefit.crystal import catalogue

    lat = lattice_preset("fcc")
    fig = plots.stereogram_for(lat, from_euler([0.0, 0.0, 0.0]), catalogue(lat, ["slip", "twin"]), matched=[(1, 1, 1)])
    ax = fig.axes[0]
    arcs = [ln for ln in ax.lines if len(ln.get_xydata()) > 100]
    assert len(arcs) == 4 + 1  # four {111} planes (slip and twin share them) + the primitive circle


def test_overlay_of_a_large_image_keeps_full_resolution_coordinates():
    img = np.zeros((3000, 4000), np.float32)
    lab = np.zeros((3000, 4000), int)
    lab[:, 2000:] = 1
    fig = plots.overlay_figure(img, [{"angle_deg": 0.0, "lines": [[100, 2900, 3900, 2900]]}], labels=["x"],
                               grain_labels=lab)
    ax = fig.axes[0]
    shown = ax.images[0]
    assert shown.get_array().shape[1] <= 1600  # drawn through a strided copy
    assert tuple(shown.get_extent()) == (-0.5, 3999.5, 2999.5, -0.5)
    assert np.allclose(ax.lines[0].get_xydata(), [[100, 2900], [3900, 2900]])
    assert sorted(t.get_text() for t in ax.texts) == ["F1: x", "G0", "G1"]


def test_matplotlib_loads_only_when_a_figure_is_made():
    # matplotlib is heavy: `import tracefit.viz` (and the projection helpers) must not load it;
    # the first figure does. A fresh interpreter shows what loads.
    import subprocess
    import sys

    code = (
        "import sys\n"
        "import tracefit.viz, tracefit.viz.overlay\n"
        "tracefit.viz.wulff_project([0, 0, 1])\n"
        "a = 'matplotlib' in sys.modules\n"
        "tracefit.viz.rose_diagram([30.0])\n"
        "print(a, 'matplotlib' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["False", "True"]


def test_a_strain_map_overlay_states_its_grey_scale():
    # Issue 12 item 6: float maps are data; the figure says which values black and white stand for.
    strain = np.linspace(-0.02, 0.05, 64 * 80).reshape(64, 80)
    strain[10:20, 10:20] = np.nan  # correlation holes stay holes
    fig = plots.overlay_figure(strain, [])
    texts = [t.get_text() for ax in fig.axes for t in ax.texts]
    assert any(t == "grey: -0.02 (black) to 0.05 (white)" for t in texts), texts
