"""Orientation conventions (docs/conventions.md) checked against scipy's Rotation and orix.

Outside references:
* scipy.spatial.transform.Rotation: ``Rotation.from_euler("ZXZ", (phi1, Phi, phi2), degrees=True)``
  is the active crystal -> sample rotation R, so g = R^T (specification in ../shared/conventions.md).
* orix (test-only). Checked numerically here (``test_orix_maps_sample_to_crystal``): orix's
  ``Rotation.from_euler`` / ``Orientation.from_euler`` with Bunge angles in radians gives the
  quaternion of g itself, ``o.to_matrix() == g``, ``o * v`` maps sample -> crystal and ``~o * v``
  crystal -> sample. orix's quaternion equals tracefit's (Rowenhorst et al. 2015, P = +1), and its
  hexagonal Cartesian setting for a diffpy Lattice(a, a, c, 90, 90, 120) is x along a1, tracefit's
  default ``hex_setting="x-along-a1"``.
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


# ------------------------------------------------------------------ the Orientation type
# Outside checks: scipy Rotation (R = g^T, composition R_b * R_a) and orix (Misorientation).
from tracefit.crystal import Lattice, Orientation, as_orientation_matrix  # noqa: E402


def test_orientation_round_trips_against_scipy(random_rotations, random_euler):
    o = Orientation.from_euler(random_euler)
    assert not o.single and len(o) == N_RANDOM
    g_ref = np.swapaxes(random_rotations.as_matrix(), 1, 2)
    np.testing.assert_allclose(o.as_matrix(), g_ref, atol=1e-12)
    # radians in, radians out
    o_rad = Orientation.from_euler(np.radians(random_euler), degrees=False)
    np.testing.assert_allclose(o_rad.as_matrix(), g_ref, atol=1e-12)
    # Euler -> Orientation -> Euler gives the same rotation (scipy reads the angles back)
    back = SciRot.from_euler("ZXZ", o.as_euler(), degrees=True).as_matrix()
    np.testing.assert_allclose(np.swapaxes(back, 1, 2), g_ref, atol=1e-9)
    np.testing.assert_allclose(o.as_euler(degrees=False), np.radians(o.as_euler()), atol=1e-15)
    # quaternion: scipy's (x, y, z, w) of R is the conjugate of ours (scalar first, of g)
    q_ref = random_rotations.as_quat()[:, [3, 0, 1, 2]] * [1, -1, -1, -1]
    assert _same_quaternion(o.as_quaternion(), q_ref).max() < 1e-12
    np.testing.assert_allclose(Orientation.from_quaternion(o.as_quaternion()).as_matrix(), g_ref, atol=1e-12)
    np.testing.assert_allclose(Orientation.from_matrix(g_ref).as_matrix(), g_ref, atol=1e-12)
    axis, ang = to_axis_angle(o.as_matrix())
    np.testing.assert_allclose(Orientation.from_axis_angle(axis, ang).as_matrix(), g_ref, atol=1e-9)
    np.testing.assert_allclose(Orientation.from_axis_angle(axis, np.radians(ang), degrees=False).as_matrix(), g_ref, atol=1e-9)


def test_orientation_single_and_indexing(random_euler):
    one = Orientation.from_euler(random_euler[0])
    assert one.single and one.as_matrix().shape == (3, 3) and one.as_euler().shape == (3,)
    with pytest.raises(TypeError):
        len(one)
    with pytest.raises(TypeError):
        one[0]
    many = Orientation.from_euler(random_euler[:10])
    np.testing.assert_allclose(many[3].as_matrix(), from_euler(random_euler[3]), atol=1e-12)
    assert many[3].single and len(many[2:5]) == 3 and len(many[[0, 9]]) == 2
    assert len(Orientation.identity(4)) == 4 and Orientation.identity().single


def test_composition_against_matrix_products_and_scipy(random_rotations, random_euler):
    # (a * b).as_matrix() == g_a @ g_b ("apply b, then a" to coordinates). In scipy's active
    # crystal -> sample terms R = g^T, so the same orientation is R_b * R_a.
    a = Orientation.from_euler(random_euler[:300])
    b = Orientation.from_euler(random_euler[300:600])
    ab = a * b
    np.testing.assert_allclose(ab.as_matrix(), a.as_matrix() @ b.as_matrix(), atol=1e-12)
    Ra, Rb = random_rotations[:300], random_rotations[300:600]
    np.testing.assert_allclose(ab.as_matrix(), np.swapaxes((Rb * Ra).as_matrix(), 1, 2), atol=1e-12)
    # broadcasting single * many and many * single
    s = a[0]
    np.testing.assert_allclose((s * b).as_matrix(), s.as_matrix() @ b.as_matrix(), atol=1e-12)
    np.testing.assert_allclose((b * s).as_matrix(), b.as_matrix() @ s.as_matrix(), atol=1e-12)
    # inverse: o * o.inv() is the identity; inv() is scipy's inverse of R seen as g
    np.testing.assert_allclose((a * a.inv()).as_matrix(), np.broadcast_to(np.eye(3), (300, 3, 3)), atol=1e-12)
    np.testing.assert_allclose(a.inv().as_matrix(), np.swapaxes(Ra.inv().as_matrix(), 1, 2), atol=1e-12)
    with pytest.raises(TracefitInputError, match="cannot compose"):
        a * b[:5]


@pytest.mark.parametrize("kind", ["cubic", "hexagonal"])
def test_misorientation_against_orix(orix, kind, random_euler):
    # Reference: orix Misorientation of o2 * ~o1 with both crystals' symmetry, reduced to the
    # fundamental zone; its angle is the disorientation angle.
    from orix.quaternion import Misorientation, Orientation as OrixOrientation
    from orix.quaternion.symmetry import D6, O

    lat, sym = (Lattice.fcc(), O) if kind == "cubic" else (Lattice.hcp(c_over_a=1.587), D6)
    e1, e2 = random_euler[:400], random_euler[400:800]
    o1, o2 = Orientation.from_euler(e1), Orientation.from_euler(e2)
    ours = o1.misorientation(o2, lat)
    r1 = OrixOrientation.from_euler(np.radians(e1), symmetry=sym)
    r2 = OrixOrientation.from_euler(np.radians(e2), symmetry=sym)
    m = Misorientation(r2 * ~r1, symmetry=(sym, sym)).reduce()
    np.testing.assert_allclose(ours, np.degrees(m.angle), atol=1e-6)
    # symmetric: swapping the two gives the same angle; radians on request
    np.testing.assert_allclose(o2.misorientation(o1, lat), ours, atol=1e-9)
    np.testing.assert_allclose(o1.misorientation(o2, lat, degrees=False), np.radians(ours), atol=1e-12)
    # a symmetry-equivalent description has zero misorientation
    S = lat.proper_rotations()[5]
    twin = Orientation.from_matrix(S @ o1.as_matrix())
    assert np.abs(o1.misorientation(twin, lat)).max() < 1e-6


def test_misorientation_cubic_hand_values():
    # Hand values (common practice, no source): 100 deg about z is 10 deg after a 4-fold turn;
    # the fcc twin, 60 deg about <111>, stays 60 deg; the largest cubic disorientation
    # (62.8 deg, Mackenzie 1958, from memory) lies about <1, 1, sqrt2 - 1>, so 62 deg about that
    # axis is already reduced, and no pair exceeds 62.8 deg.
    lat = Lattice.fcc()
    a = Orientation.identity()
    assert a.misorientation(Orientation.from_axis_angle([0, 0, 1], 100), lat) == pytest.approx(10.0, abs=1e-9)
    assert a.misorientation(Orientation.from_axis_angle([1, 1, 1], 60), lat) == pytest.approx(60.0, abs=1e-9)
    assert a.misorientation(Orientation.from_axis_angle([1, 1, np.sqrt(2) - 1], 62.0), lat) == pytest.approx(62.0, abs=1e-9)
    many = Orientation.from_euler(SciRot.random(2000, random_state=4).as_euler("ZXZ", degrees=True))
    assert a.misorientation(many, lat).max() < 62.81


def test_orientation_input_errors_name_the_parameter():
    with pytest.raises(TracefitInputError, match="euler must have 3 angles"):
        Orientation.from_euler([1, 2])
    with pytest.raises(TracefitInputError, match="euler"):
        Orientation.from_euler(np.zeros((2, 2, 3)))
    with pytest.raises(TracefitInputError, match="euler must be finite"):
        Orientation.from_euler([1, np.nan, 2])
    with pytest.raises(TracefitInputError, match="matrix"):
        Orientation.from_matrix(np.eye(2))
    with pytest.raises(TracefitInputError, match="q"):
        Orientation.from_quaternion([1, 0, 0])
    with pytest.raises(TracefitInputError, match="axis"):
        Orientation.from_axis_angle([0, 0, 0], 10)
    with pytest.raises(TracefitInputError, match="other must be an Orientation"):
        Orientation.identity().misorientation(np.eye(3), Lattice.fcc())
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        Orientation.from_euler([0.52, 0.79, 1.1])
        assert any("radians" in str(x.message) for x in w)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        Orientation.from_euler([0.52, 0.79, 1.1], degrees=False)
        assert not w


def test_as_orientation_matrix_accepts_both_forms():
    o = Orientation.from_euler([[10, 20, 30], [40, 50, 60]])
    np.testing.assert_allclose(as_orientation_matrix(o), from_euler([[10, 20, 30], [40, 50, 60]]), atol=1e-12)
    np.testing.assert_allclose(as_orientation_matrix(from_euler([10, 20, 30])), from_euler([10, 20, 30]))
    assert as_orientation_matrix(np.eye(3).tolist()).shape == (3, 3)
    for bad in (np.eye(4), np.zeros((2, 2, 3, 3)), "x", [1, 2, 3]):
        with pytest.raises(TracefitInputError, match="g must be"):
            as_orientation_matrix(bad)
    with pytest.raises(TracefitInputError, match="g_many"):
        as_orientation_matrix(np.eye(2), name="g_many")


def test_orientation_two_directions_repr_and_dict():
    lat = lattice_preset("hcp", 1.624)
    o = Orientation.from_two_directions(lat, (0, 0, 0, 1), "z", (2, -1, -1, 0), "x")
    np.testing.assert_allclose(o.as_matrix(), np.eye(3), atol=1e-12)
    d = Orientation.from_euler([10, 20, 30]).to_dict()
    assert d["euler_deg"] == pytest.approx([10, 20, 30])
    np.testing.assert_allclose(Orientation.from_quaternion(d["quaternion"]).as_euler(), [10, 20, 30], atol=1e-9)
    assert repr(Orientation.from_euler([10, 20, 30])) == "Orientation.from_euler([10, 20, 30])"
    assert "5 orientations" in repr(Orientation.identity(5))
    assert len(Orientation.from_euler([[1, 2, 3]] * 2).to_dict()["euler_deg"]) == 2
