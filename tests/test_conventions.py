"""The conventions of tracefit.conventions and the Bunge orientation, checked twice.

* Against the worked vectors of ../shared/conventions.md (specification: the table of trace
  angles and inclinations for fcc, bcc and hcp, the frame rotation and the stage tilt).
* Against outside references, independently of tracefit's own geometry: scipy's
  ``Rotation`` (Bunge ZXZ as the active crystal -> sample rotation, frame rotation about z,
  stage tilt as a rotation about the image axis) and orix (hexagonal plane normals from
  Miller-Bravais indices, ``orix.vector.Miller``).
"""

import numpy as np
import pytest
from hypothesis import given, strategies as st
from scipy.spatial.transform import Rotation as SciRot

from tracefit.conventions import (
    FrameSettings,
    angle_to_pixel_direction,
    apparent_angle,
    axial_difference,
    axial_mean,
    fold_axial,
    miller_bravais_to_miller,
    miller_to_miller_bravais,
    pixel_direction_angle,
    pixel_endpoints_angle,
    true_angle,
)
from tracefit.crystal import Lattice, Orientation, lattice_preset
from tracefit.predict import predict_traces, predicted_trace_table


def test_lower_left_to_upper_right_is_45_degrees():
    # Convention spec: a line from the lower-left to the upper-right corner of a square image is 45 deg.
    # In a 100x100 image the lower-left pixel is (col 0, row 99), the upper-right (col 99, row 0).
    assert pixel_endpoints_angle(0, 99, 99, 0) == pytest.approx(45.0)


def test_hand_calculated_endpoint_angles():
    # Hand calculation: (10,50)->(60,50) is horizontal; (20,80)->(20,10) vertical;
    # (0,0)->(30,30) runs down-right on screen: atan2(-30, 30) = -45 -> 135 deg.
    assert pixel_endpoints_angle(10, 50, 60, 50) == pytest.approx(0.0)
    assert pixel_endpoints_angle(20, 80, 20, 10) == pytest.approx(90.0)
    assert pixel_endpoints_angle(0, 0, 30, 30) == pytest.approx(135.0)
    # atan(1/2) = 26.565 deg, up and to the right.
    assert pixel_endpoints_angle(0, 10, 20, 0) == pytest.approx(np.degrees(np.arctan(0.5)))


def test_coincident_endpoints_rejected():
    with pytest.raises(ValueError, match="coincide"):
        pixel_endpoints_angle(3, 4, 3, 4)


@given(st.floats(-1e4, 1e4, allow_nan=False))
def test_fold_axial_range_and_equivalence(a):
    f = fold_axial(a)
    assert 0.0 <= f < 180.0
    assert abs(axial_difference(f, a)) < 1e-6


@given(st.floats(0, 179.999), st.floats(-89.9, 89.9))
def test_axial_difference_inverts_shift(a, d):
    assert axial_difference(fold_axial(a + d), a) == pytest.approx(d, abs=1e-7)


@given(st.floats(0, 179.999))
def test_pixel_direction_round_trip(a):
    dc, dr = angle_to_pixel_direction(a)
    assert abs(axial_difference(pixel_direction_angle(dc, dr), a)) < 1e-9


def test_axial_mean_wraps_across_zero():
    assert abs(axial_difference(axial_mean([178.0, 2.0]), 0.0)) < 1e-9
    assert axial_mean([10.0, 20.0], weights=[1, 3]) == pytest.approx(17.5, abs=0.05)


# ------------------------------------------------------------------ worked vectors
# (lattice, c/a, Euler, plane, trace deg, inclination deg) -- ../shared/conventions.md (spec)
WORKED = [
    ("fcc", None, (0, 0, 0), (1, 1, 1), 135.000, 54.736),
    ("fcc", None, (0, 0, 0), (1, -1, 1), 45.000, 54.736),
    ("fcc", None, (30, 0, 0), (1, 1, 1), 165.000, 54.736),
    ("fcc", None, (0, 45, 0), (1, 1, 1), 90.000, 35.264),
    ("fcc", None, (0, 45, 0), (1, -1, 1), 35.264, 90.000),
    ("fcc", None, (90, 90, 0), (1, 1, 1), 135.000, 54.736),
    ("bcc", None, (10, 20, 30), (1, 1, 0), 174.085, 70.709),
    ("bcc", None, (10, 20, 30), (1, 2, 3), 17.128, 16.772),
    ("hcp", 1.633, (0, 90, 0), (0, 0, 0, 1), 0.000, 90.000),
    ("hcp", 1.633, (0, 90, 0), (1, 0, -1, 0), 90.000, 60.000),
    ("hcp", 1.587, (0, 90, 0), (1, 0, -1, 2), 38.432, 70.258),
    ("hcp", 1.587, (40, 60, 10), (1, 0, -1, 2), 90.844, 41.865),
    ("hcp", 1.587, (40, 60, 10), (0, 1, -1, 0), 59.425, 31.475),
]


def _reference_normal(lat_name, ca, plane):
    """Crystal-frame unit normal from outside tracefit: hkl itself (cubic) or orix's Miller (hexagonal)."""
    if lat_name != "hcp":
        n = np.asarray(plane, float)
        return n / np.linalg.norm(n)
    pytest.importorskip("orix")
    from diffpy.structure import Lattice as DLattice, Structure
    from orix.crystal_map import Phase
    from orix.vector import Miller

    phase = Phase(point_group="6/mmm", structure=Structure(lattice=DLattice(1.0, 1.0, ca, 90, 90, 120)))
    return Miller(hkil=np.asarray(plane, float), phase=phase).unit.data[0]


def _reference_trace(n_sample):
    """Trace angle atan2(n_y, n_x) + 90 (mod 180) and inclination arccos|n_z|, written out here."""
    n = n_sample / np.linalg.norm(n_sample)
    return (np.degrees(np.arctan2(n[1], n[0])) + 90.0) % 180.0, np.degrees(np.arccos(abs(n[2])))


@pytest.mark.parametrize("lat, ca, euler, plane, trace, incl", WORKED)
def test_worked_vectors_spec_and_outside(lat, ca, euler, plane, trace, incl):
    # Spec: ../shared/conventions.md "Worked vectors". Outside check: scipy Rotation
    # ("ZXZ", Bunge) turns the crystal normal (orix for hexagonal indices) into the sample frame.
    lattice = lattice_preset(lat, ca)
    t = predicted_trace_table(lattice, Orientation.from_euler(euler), [plane], indices=True)
    assert abs(axial_difference(float(t.angle_deg[0]), trace)) < 6e-4
    assert float(t.inclination_deg[0]) == pytest.approx(incl, abs=6e-4)
    ref_angle, ref_incl = _reference_trace(SciRot.from_euler("ZXZ", euler, degrees=True).apply(_reference_normal(lat, ca, plane)))
    assert abs(axial_difference(float(t.angle_deg[0]), ref_angle)) < 1e-9
    assert float(t.inclination_deg[0]) == pytest.approx(ref_incl, abs=1e-9)
    # and the table itself agrees with the outside route
    assert abs(axial_difference(ref_angle, trace)) < 6e-4 and ref_incl == pytest.approx(incl, abs=6e-4)


@pytest.mark.parametrize("lat, ca, euler, plane, trace, incl", [w for w in WORKED if w[0] == "hcp"])
def test_worked_vectors_through_predict_traces(lat, ca, euler, plane, trace, incl):
    # Same spec, through the grouped per-orientation path.
    from types import SimpleNamespace

    lattice = lattice_preset(lat, ca)
    n_target = lattice.plane_normal(plane)
    fake = SimpleNamespace(mode="slip", family="{x}", name="probe", plane=plane, direction=(0, 0, 0, 1), normal=n_target, dir_unit=n_target)
    (tr,) = predict_traces(lattice, Orientation.from_euler(euler), [fake])
    assert abs(axial_difference(tr.angle_deg, trace)) < 6e-4
    assert tr.inclination_deg == pytest.approx(incl, abs=6e-4)


def test_frame_rotation_worked_example():
    # Spec (../shared/conventions.md, "The load's frame"): fcc, Euler (35, 20, 60), frame
    # rotation 90 deg: the (11-1) trace moves from 47.69 to 137.69 deg. Outside check: scipy turns
    # the sample-frame normal by Rz(rho) (v_image = Rz(rho) v_data, active).
    lat = Lattice.fcc()
    o = Orientation.from_euler([35, 20, 60])
    n_sample = SciRot.from_euler("ZXZ", [35, 20, 60], degrees=True).apply(np.array([1.0, 1.0, -1.0]) / np.sqrt(3))
    for rho, spec in ((0.0, 47.69), (90.0, 137.69)):
        t = predicted_trace_table(lat, o, [(1, 1, -1)], FrameSettings(rotation_deg=rho), indices=True)
        assert abs(axial_difference(float(t.angle_deg[0]), spec)) < 6e-3
        ref, _ = _reference_trace(SciRot.from_euler("z", rho, degrees=True).apply(n_sample))
        assert abs(axial_difference(float(t.angle_deg[0]), ref)) < 1e-9


def test_tilt_worked_value_spec_and_projection():
    # Spec (../shared/conventions.md): 45 deg true at 60 deg tilt about x appears at 26.565 deg.
    assert apparent_angle(45.0, FrameSettings(tilt_deg=60.0)) == pytest.approx(26.565, abs=5e-4)
    assert true_angle(26.565051177, FrameSettings(tilt_deg=60.0)) == pytest.approx(45.0, abs=1e-6)
    # Outside check: tilt the surface line about the image x axis with scipy and project it onto
    # the viewing plane (drop z).
    p = SciRot.from_rotvec([np.radians(60.0), 0.0, 0.0]).apply([np.cos(np.radians(45)), np.sin(np.radians(45)), 0.0])
    assert apparent_angle(45.0, FrameSettings(tilt_deg=60.0)) == pytest.approx(np.degrees(np.arctan2(p[1], p[0])), abs=1e-9)


# ------------------------------------------------------------------ hexagonal indices
def test_index_conversion_keeps_integers_and_floats():
    # Hand values (common practice, no source): (10-12) -> (102); [2-1-10] -> [300] (= 3 a1);
    # [100] -> 1/3 [2-1-10].
    p = miller_bravais_to_miller(np.array([[1, 0, -1, 2]]), "plane")
    assert p.dtype.kind == "i" and p.tolist() == [[1, 0, 2]]
    d = miller_bravais_to_miller((2, -1, -1, 0), "direction")
    assert d.dtype.kind == "i" and d.tolist() == [3, 0, 0]
    assert miller_bravais_to_miller((2.0, -1.0, -1.0, 0.0), "direction").dtype.kind == "f"
    np.testing.assert_allclose(miller_to_miller_bravais((1, 0, 0), "direction"), [2 / 3, -1 / 3, -1 / 3, 0])
    four = miller_to_miller_bravais(np.array([[3, 0, 0], [-3, -3, 3]]), "direction", integer=True)
    assert four.dtype.kind == "i" and four.tolist() == [[2, -1, -1, 0], [-1, -1, 2, 3]]
    assert miller_to_miller_bravais((1, 0, 2), "plane").tolist() == [1, 0, -1, 2]


def test_index_conversion_rejects():
    from tracefit.errors import TracefitInputError

    with pytest.raises(TracefitInputError, match="h \\+ k \\+ i"):
        miller_bravais_to_miller((1, 1, 1, 2), "plane")
    with pytest.raises(TracefitInputError, match="whole four-index"):
        miller_to_miller_bravais((1, 0, 0), "direction", integer=True)
    with pytest.raises(TracefitInputError, match="kind"):
        miller_to_miller_bravais((1, 0, 0), "line")
