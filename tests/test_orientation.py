"""Orientation conventions (docs/conventions.md) checked against scipy's Rotation and orix.

Outside references:
* scipy.spatial.transform.Rotation: ``Rotation.from_euler("ZXZ", (phi1, Phi, phi2), degrees=True)``
  is the active crystal -> sample rotation R, so g = R^T (specification in ../shared/conventions.md).
* orix (test-only). Checked numerically here (``test_orix_maps_sample_to_crystal``): orix's
  ``Rotation.from_euler`` / ``Orientation.from_euler`` with Bunge angles in radians gives the
  quaternion of g itself, ``o.to_matrix() == g``, ``o * v`` maps sample -> crystal and ``~o * v``
  crystal -> sample. orix's quaternion equals tracefit's (Rowenhorst et al. 2015, P = +1), and its
  hexagonal Cartesian setting for a diffpy Lattice(a, a, c, 90, 90, 120) is x along a1, tracefit's
  default ``hex_setting="x_a1"``.
"""

import warnings

import numpy as np
import pytest
from scipy.spatial.transform import Rotation as SciRot

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.crystal.orientation import (
    crystal_to_sample,
    from_axis_angle,
    from_euler,
    from_matrix,
    from_quaternion,
    from_two_directions,
    looks_like_radians,
    parse_euler,
    parse_matrix,
    sample_to_crystal,
    to_axis_angle,
    to_euler,
    to_quaternion,
)

N_RANDOM = 1500


@pytest.fixture(scope="module")
def random_rotations():
    return SciRot.random(N_RANDOM, random_state=20261201)


@pytest.fixture(scope="module")
def random_euler(random_rotations):
    return random_rotations.as_euler("ZXZ", degrees=True)


def _same_quaternion(a, b):
    # q and -q are the same rotation.
    return np.minimum(np.abs(a - b).max(axis=-1), np.abs(a + b).max(axis=-1))


# ------------------------------------------------------------------ scipy
def test_bunge_matrix_against_scipy(random_rotations, random_euler):
    # Reference: scipy Rotation, "ZXZ" intrinsic = Bunge; v_sample = R v_crystal, so g = R^T.
    g = from_euler(random_euler)
    assert g.shape == (N_RANDOM, 3, 3)
    np.testing.assert_allclose(g, np.swapaxes(random_rotations.as_matrix(), 1, 2), atol=1e-12)


def test_single_orientation_shape():
    assert from_euler([10, 20, 30]).shape == (3, 3)
    assert to_euler(from_euler([10, 20, 30])).shape == (3,)


def test_quaternion_against_scipy(random_rotations, random_euler):
    # P = +1: tracefit's q is the Hamilton quaternion of g = R^T, i.e. scipy's quaternion of R.inv().
    q = to_quaternion(from_euler(random_euler))
    ref = random_rotations.inv().as_quat(scalar_first=True)
    assert np.all(q[:, 0] >= 0)
    assert _same_quaternion(q, ref).max() < 1e-12
    np.testing.assert_allclose(from_quaternion(ref), from_euler(random_euler), atol=1e-12)


def test_to_quaternion_all_branches():
    # Rotations near 180 deg exercise the non-q0 branches; scipy is the reference.
    rots = SciRot.from_rotvec(np.array([[np.pi, 0, 0], [0, np.pi, 0], [0, 0, np.pi], [2.0, 1.5, -1.0]]) * 0.9999)
    g = np.swapaxes(rots.as_matrix(), 1, 2)
    assert _same_quaternion(to_quaternion(g), rots.inv().as_quat(scalar_first=True)).max() < 1e-12


def test_to_euler_round_trip_against_scipy(random_rotations, random_euler):
    e = to_euler(from_euler(random_euler))
    # scipy's own ZXZ angles (phi1, phi2 in (-180, 180]) folded to [0, 360) are the reference.
    ref = random_rotations.as_euler("ZXZ", degrees=True)
    ref[:, [0, 2]] %= 360.0
    d = np.abs(e - ref)
    d[:, [0, 2]] = np.minimum(d[:, [0, 2]], 360.0 - d[:, [0, 2]])
    assert d.max() < 1e-8
    assert np.all((e[:, 0] >= 0) & (e[:, 0] < 360) & (e[:, 1] >= 0) & (e[:, 1] <= 180) & (e[:, 2] >= 0) & (e[:, 2] < 360))


@pytest.mark.parametrize("euler", [(30, 0, 0), (200, 180, 40), (0, 0, 0), (359.9, 1e-9, 0)])
def test_to_euler_degenerate_phi(euler):
    # Phi = 0 or 180: only phi1 +- phi2 is defined; the matrix must still come back.
    g = from_euler(euler)
    np.testing.assert_allclose(from_euler(to_euler(g)), g, atol=1e-9)


def test_axis_angle_against_scipy_and_convention(random_rotations):
    # Rowenhorst et al. (2015), P = +1: q = (cos w/2, n sin w/2) and g is the matrix of q, i.e.
    # scipy's Rotation.from_rotvec(w n) as a matrix acting on coordinates.
    rv = random_rotations.as_rotvec()
    ang = np.linalg.norm(rv, axis=1)
    axis = rv / ang[:, None]
    g = from_axis_angle(axis, np.degrees(ang))
    np.testing.assert_allclose(g, SciRot.from_rotvec(rv).as_matrix(), atol=1e-12)
    ax2, ang2 = to_axis_angle(g)
    np.testing.assert_allclose(ang2, np.degrees(ang), atol=1e-9)
    np.testing.assert_allclose(ax2, axis, atol=1e-9)
    # Bunge (30, 0, 0) is the pair ([0, 0, -1], 30 deg) under this convention.
    np.testing.assert_allclose(from_axis_angle([0, 0, -1], 30), from_euler([30, 0, 0]), atol=1e-12)


# ------------------------------------------------------------------ orix
@pytest.fixture
def orix():
    # test-only reference; only these tests are skipped when it is missing
    return pytest.importorskip("orix")


def _orix_phase(point_group, a, c, gamma):
    from diffpy.structure import Lattice as DLattice, Structure
    from orix.crystal_map import Phase

    return Phase(point_group=point_group, structure=Structure(lattice=DLattice(a, a, c, 90, 90, gamma)))


def test_orix_maps_sample_to_crystal(orix, random_euler):
    # Establishes what orix does (see module docstring), against scipy.
    from orix.quaternion import Orientation
    from orix.vector import Vector3d

    e = random_euler[:200]
    o = Orientation.from_euler(np.radians(e))
    g_scipy = np.swapaxes(SciRot.from_euler("ZXZ", e, degrees=True).as_matrix(), 1, 2)
    np.testing.assert_allclose(o.to_matrix(), g_scipy, atol=1e-12)
    v = np.array([0.3, -0.5, 0.81])
    np.testing.assert_allclose((o * Vector3d(v)).data, g_scipy @ v, atol=1e-12)
    np.testing.assert_allclose((~o * Vector3d(v)).data, np.swapaxes(g_scipy, 1, 2) @ v, atol=1e-12)
    # And tracefit agrees with orix on the quaternion itself (both Rowenhorst, P = +1).
    assert _same_quaternion(to_quaternion(from_euler(e)), o.data).max() < 1e-12


def test_orix_axis_angle_matches(orix):
    from orix.quaternion import Rotation

    rng = np.random.default_rng(7)
    axis = rng.normal(size=(300, 3))
    ang = rng.uniform(0, 180, 300)
    r = Rotation.from_axes_angles(axis, np.radians(ang))
    np.testing.assert_allclose(from_axis_angle(axis, ang), r.to_matrix(), atol=1e-12)


@pytest.mark.parametrize("kind", ["cubic", "hexagonal"])
def test_directions_and_normals_in_sample_frame_against_orix(orix, kind, random_euler):
    from orix.quaternion import Orientation
    from orix.vector import Miller

    if kind == "cubic":
        lat = lattice_preset("fcc")
        phase = _orix_phase("m-3m", 1.0, 1.0, 90)
        uvw = np.array([[1, 0, 0], [1, 1, 0], [1, 1, 1], [1, -2, 3], [0, 1, -1]])
        hkl = np.array([[1, 1, 1], [1, -1, 1], [1, 1, 0], [1, 2, 3], [0, 0, 1]])
        d_orix = Miller(uvw=uvw, phase=phase)
        n_orix = Miller(hkl=hkl, phase=phase)
        d_tf, n_tf = lat.direction_vector(uvw), lat.plane_normal(hkl)
    else:
        ca = 1.587
        lat = lattice_preset("hcp", ca)
        phase = _orix_phase("6/mmm", 1.0, ca, 120)
        uvtw = np.array([[2, -1, -1, 0], [1, 1, -2, 0], [0, 0, 0, 1], [-1, -1, 2, 3], [1, 0, -1, 0]])
        hkil = np.array([[0, 0, 0, 1], [1, 0, -1, 0], [1, 0, -1, 2], [1, 0, -1, 1], [1, 1, -2, 2]])
        d_orix = Miller(UVTW=uvtw, phase=phase)
        n_orix = Miller(hkil=hkil, phase=phase)
        d_tf, n_tf = lat.direction_vector(uvtw), lat.plane_normal(hkil)
        # Same Cartesian setting (x along a1) in both: the crystal-frame vectors agree directly.
        np.testing.assert_allclose(d_orix.unit.data, d_tf, atol=1e-12)
        np.testing.assert_allclose(n_orix.unit.data, n_tf, atol=1e-12)

    e = random_euler[:1000]
    o = Orientation.from_euler(np.radians(e), symmetry=phase.point_group)
    g = from_euler(e)
    # orix: crystal -> sample is ~o * v (outer product over orientations and vectors).
    ref_d = (~o).outer(d_orix.unit).data  # (N, M, 3)
    ref_n = (~o).outer(n_orix.unit).data
    np.testing.assert_allclose(crystal_to_sample(g, d_tf), ref_d, atol=1e-12)
    np.testing.assert_allclose(crystal_to_sample(g, n_tf), ref_n, atol=1e-12)
    # and back
    np.testing.assert_allclose(sample_to_crystal(g[0], ref_n[0]), n_tf, atol=1e-12)


# ------------------------------------------------------------------ input checks
@pytest.mark.parametrize(
    "euler, expect",
    [
        ((0.52, 0.79, 1.1), True),  # radians-sized, fractional
        ((3.1, 1.2, 6.0), True),
        ((0, 45, 0), False),  # Phi beyond pi: degrees
        ((1, 2, 3), False),  # whole numbers: plausible degrees
        ((0, 0, 0), False),
        ((10.5, 20.2, 30.0), False),
    ],
)
def test_radian_rule(euler, expect):
    assert looks_like_radians(euler) is expect
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        from_euler(euler)
    assert any("radians" in str(x.message) for x in w) is expect


def test_radian_rule_many_orientations():
    # A degree dataset with a few small triplets is not flagged; an all-radian one is.
    e = np.array([[0.5, 0.2, 0.1], [120.0, 40.0, 300.0]])
    assert not looks_like_radians(e)
    assert looks_like_radians(np.radians(e))


def test_quaternion_normalised_and_zero_rejected():
    np.testing.assert_allclose(from_quaternion([2, 0, 0, 0]), np.eye(3), atol=1e-15)
    with pytest.raises(TracefitInputError, match="zero quaternion"):
        from_quaternion([0, 0, 0, 0])


def test_from_matrix_checks():
    g = from_euler([10, 20, 30])
    np.testing.assert_allclose(from_matrix(np.round(g, 4)), g, atol=1e-4)  # 4 typed decimals pass
    bad = g.copy()
    bad[0, 0] += 0.05
    with pytest.raises(TracefitInputError, match=r"not orthonormal: max \|M M\^T - I\| = 0\.\d+"):
        from_matrix(bad)
    with pytest.raises(TracefitInputError, match="improper"):
        from_matrix(np.diag([1.0, 1.0, -1.0]))
    with pytest.raises(TracefitInputError):
        from_matrix(np.eye(2))


def test_two_directions_cubic_identity():
    lat = lattice_preset("fcc")
    np.testing.assert_allclose(from_two_directions(lat, (0, 0, 1), "z", (1, 0, 0), "x"), np.eye(3), atol=1e-12)


def test_two_directions_hexagonal_identity():
    # Default setting x along a1 = [2-1-10]: [0001] on Z and [2-1-10] on X is the reference orientation.
    lat = lattice_preset("hcp", 1.624)
    np.testing.assert_allclose(from_two_directions(lat, (0, 0, 0, 1), "z", (2, -1, -1, 0), "x"), np.eye(3), atol=1e-12)


@pytest.mark.parametrize("c2, s2, mismatch", [((1, 1, 0), (0, 1, 0), False), ((1, 2, 0), (1, 0, 0), True), ((1, 0, 1), (0, 1, 0), True)])
def test_two_directions_against_scipy_align_vectors(c2, s2, mismatch):
    # Reference: scipy Rotation.align_vectors with the first pair weighted as exact (primary).
    lat = lattice_preset("bcc")
    c1, s1 = (1, -1, 0), (0.0, 0.0, 1.0)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        g = from_two_directions(lat, c1, s1, c2, s2)
    assert any("apart" in str(x.message) for x in w) is mismatch
    cv = lat.direction_vector(np.array([c1, c2]))
    r, _ = SciRot.align_vectors(np.array([s1, s2], float), cv, weights=[np.inf, 1.0])
    np.testing.assert_allclose(g, r.as_matrix().T, atol=1e-9)


def test_two_directions_parallel_rejected():
    lat = lattice_preset("fcc")
    with pytest.raises(TracefitInputError, match="parallel"):
        from_two_directions(lat, (1, 0, 0), "x", (2, 0, 0), "y")
    with pytest.raises(TracefitInputError, match="parallel"):
        from_two_directions(lat, (1, 0, 0), "x", (0, 1, 0), "-x")


@pytest.mark.parametrize("text", ["", "10,20", "a,b,c", "10,20,30,40", "10,,20", "nan,1,2"])
def test_parse_euler_rejects(text):
    with pytest.raises(TracefitInputError, match="Euler"):
        parse_euler(text)


def test_parse_euler_and_matrix_accept():
    np.testing.assert_allclose(parse_euler("10, 20 30"), [10, 20, 30])
    np.testing.assert_allclose(parse_euler("-10,2.5e1,3"), [-10, 25, 3])
    np.testing.assert_allclose(parse_matrix("1,0,0,0,1,0,0,0,1"), np.eye(3))
