"""Data-to-image frame (rotation, flips) and stage-tilt foreshortening (docs/conventions.md).

Worked values are specification from ../shared/conventions.md; the foreshortening law
tan(apparent) = tan(true) cos(alpha) is the orthographic projection of a line in a plane tilted
by alpha about the horizontal axis (common practice, no source).
"""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy.spatial.transform import Rotation as SciRot

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.conventions import FrameSettings, apparent_angle, data_to_image_matrix, true_angle
from tracefit.crystal import lattice_preset
from tracefit.crystal import from_euler
from tracefit.predict import predicted_trace_table

angles = st.floats(min_value=0.0, max_value=179.999, allow_nan=False)
tilts = st.floats(min_value=-85.0, max_value=85.0, allow_nan=False)


def test_tilt_against_projection():
    # Independent route: tilt the surface about the image axis with scipy and project onto the
    # viewing plane (drop z), then read the angle.
    t = np.linspace(0, 179, 180)
    d = np.stack([np.cos(np.radians(t)), np.sin(np.radians(t)), 0 * t], axis=1)
    for axis, vec in (("x", [1, 0, 0]), ("y", [0, 1, 0])):
        r = SciRot.from_rotvec(np.radians(50.0) * np.array(vec, float))
        p = r.apply(d)
        ref = np.degrees(np.arctan2(p[:, 1], p[:, 0])) % 180
        got = apparent_angle(t, FrameSettings(tilt_deg=50.0, tilt_axis=axis))
        assert np.abs(axial_difference(got, ref)).max() < 1e-9


def test_tilt_fixed_lines():
    # Lines along and across the tilt axis keep their angle.
    f = FrameSettings(tilt_deg=70.0)
    np.testing.assert_allclose(apparent_angle([0.0, 90.0], f), [0.0, 90.0], atol=1e-12)
    fy = FrameSettings(tilt_deg=70.0, tilt_axis="y")
    np.testing.assert_allclose(apparent_angle([0.0, 90.0], fy), [0.0, 90.0], atol=1e-12)
    # About y the law is tan(apparent) = tan(true) / cos(alpha).
    assert apparent_angle(30.0, fy) == pytest.approx(np.degrees(np.arctan(np.tan(np.radians(30)) / np.cos(np.radians(70)))))


@settings(max_examples=200, deadline=None)
@given(a=angles, tilt=tilts, axis=st.sampled_from(["x", "y"]))
def test_tilt_round_trip(a, tilt, axis):
    f = FrameSettings(tilt_deg=tilt, tilt_axis=axis)
    assert abs(axial_difference(apparent_angle(true_angle(a, f), f), a)) < 1e-8
    assert abs(axial_difference(true_angle(apparent_angle(a, f), f), a)) < 1e-8


def test_tilt_vectorised_and_axial():
    f = FrameSettings(tilt_deg=40.0)
    out = apparent_angle(np.array([[10.0, 100.0], [-20.0, 370.0]]), f)
    assert out.shape == (2, 2)
    assert np.all((out >= 0) & (out < 180))


@pytest.fixture(scope="module")
def table_inputs():
    lat = lattice_preset("bcc")
    g = from_euler(SciRot.random(300, random_state=3).as_euler("ZXZ", degrees=True))
    normals = lat.plane_normal(np.array([[1, 1, 0], [1, -1, 0], [1, 2, 3], [0, 0, 1]]))
    return lat, g, normals


def test_frame_rotation_shifts_by_plus_rho(table_inputs):
    # Spec: v_image = Rz(rho) v_data, so every trace angle shifts by +rho.
    lat, g, n = table_inputs
    base = predicted_trace_table(lat, g, n).angle_deg
    for rho in (17.0, -40.0, 200.0):
        rot = predicted_trace_table(lat, g, n, FrameSettings(rotation_deg=rho)).angle_deg
        assert np.abs(axial_difference(rot, base + rho)).max() < 1e-9


@pytest.mark.parametrize("fx, fy, sign", [(True, False, -1), (False, True, -1), (True, True, 1)])
def test_flips_mirror_traces(table_inputs, fx, fy, sign):
    # One reversed in-plane axis mirrors the image: angles -> -angle; both reversed = 180 deg turn.
    lat, g, n = table_inputs
    base = predicted_trace_table(lat, g, n)
    fl = predicted_trace_table(lat, g, n, FrameSettings(flip_x=fx, flip_y=fy))
    assert np.abs(axial_difference(fl.angle_deg, sign * base.angle_deg)).max() < 1e-9
    np.testing.assert_allclose(fl.inclination_deg, base.inclination_deg, atol=1e-9)
    # Flips act first, rotation after: angle = sign * angle + rho.
    both = predicted_trace_table(lat, g, n, FrameSettings(rotation_deg=25.0, flip_x=fx, flip_y=fy))
    assert np.abs(axial_difference(both.angle_deg, sign * base.angle_deg + 25.0)).max() < 1e-9


def test_flip_matrices_are_proper_rotations():
    for fx in (False, True):
        for fy in (False, True):
            m = data_to_image_matrix(FrameSettings(rotation_deg=33.0, flip_x=fx, flip_y=fy))
            np.testing.assert_allclose(m @ m.T, np.eye(3), atol=1e-12)
            assert np.linalg.det(m) == pytest.approx(1.0)
    # flip_y: the data's +y is the image's -y (and z reversed with it); flip_x likewise for x.
    np.testing.assert_allclose(data_to_image_matrix(FrameSettings(flip_y=True)) @ [0, 1, 0], [0, -1, 0], atol=1e-15)
    np.testing.assert_allclose(data_to_image_matrix(FrameSettings(flip_y=True)) @ [1, 0, 0], [1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(data_to_image_matrix(FrameSettings(flip_x=True)) @ [1, 0, 0], [-1, 0, 0], atol=1e-15)
    np.testing.assert_allclose(data_to_image_matrix(FrameSettings(flip_x=True)) @ [0, 0, 1], [0, 0, -1], atol=1e-15)
    np.testing.assert_allclose(data_to_image_matrix(FrameSettings(rotation_deg=90)) @ [1, 0, 0], [0, 1, 0], atol=1e-15)


def test_tilt_applies_after_frame_rotation(table_inputs):
    lat, g, n = table_inputs
    f = FrameSettings(rotation_deg=30.0, tilt_deg=50.0)
    t = predicted_trace_table(lat, g, n, f)
    ref = apparent_angle(predicted_trace_table(lat, g, n, FrameSettings(rotation_deg=30.0)).angle_deg, f)
    assert np.abs(axial_difference(t.angle_deg, ref)).max() < 1e-9
    assert np.abs(axial_difference(t.true_angle_deg, ref)).max() > 1.0  # tilt did change something


@pytest.mark.parametrize("kw", [{"tilt_deg": 90.0}, {"tilt_deg": -95.0}, {"tilt_axis": "z"}, {"rotation_deg": float("nan")}, {"rotation_deg": "ten"}, {"flip_x": "yes"}])
def test_frame_settings_reject(kw):
    with pytest.raises(TracefitInputError):
        FrameSettings(**kw)
