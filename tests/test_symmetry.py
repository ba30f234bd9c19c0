"""Laue-class rotations and family variants (tracefit.crystal.symmetry) against outside references."""

import math

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from tracefit.errors import TracefitInputError
from tracefit.crystal import Lattice, lattice_preset
from tracefit.crystal import (
    direction_variants,
    index_rotations,
    plane_variants,
    proper_rotations,
    same_family,
)

CUBIC = lattice_preset("fcc")


def _same_rotation_sets(a, b):
    a = np.asarray(a).reshape(-1, 9)
    b = np.asarray(b).reshape(-1, 9)
    if len(a) != len(b):
        return False
    d = np.abs(a[:, None, :] - b[None, :, :]).max(axis=2)
    return bool(np.all(d.min(axis=1) < 1e-9) and np.all(d.min(axis=0) < 1e-9))


HEX = dict(a=1.0, b=1.0, c=1.587, alpha=90, beta=90, gamma=120)


@pytest.mark.parametrize(
    "lattice, orix_group",
    [
        # orix's point groups as the reference library (rules: orix as test-only reference).
        (Lattice(1, 1, 1, laue="m-3m"), "O"),
        (Lattice(1, 1, 1, laue="m-3"), "T"),
        (Lattice(**HEX, laue="6/mmm"), "D6"),
        (Lattice(**HEX, laue="6/mmm", hex_setting="x-along-a1-reciprocal"), "D6"),
        (Lattice(**HEX, laue="6/m"), "C6"),
        # 32 with 2-folds along a1, a2, a3: along x when x || a1 (orix D3x) ...
        (Lattice(**HEX, laue="-3m"), "D3x"),
        # ... and along y when x || a1* (a1 is then at -30 deg, a2 along y): orix D3y.
        (Lattice(**HEX, laue="-3m", hex_setting="x-along-a1-reciprocal"), "D3y"),
        (Lattice(**HEX, laue="-3"), "C3"),
        (Lattice(1, 1, 0.5456, laue="4/mmm"), "D4"),
        (Lattice(1, 1, 0.5456, laue="4/m"), "C4"),
        (Lattice(1, 1.3, 0.7), "D2"),
        (Lattice(1, 1.3, 0.7, 90, 103.0, 90), "C2y"),  # b unique: 2-fold along b = y
        (Lattice(1, 1.3, 0.7, 81, 103.0, 95), "C1"),
    ],
)
def test_proper_rotations_match_orix(lattice, orix_group):
    orix_symmetry = pytest.importorskip("orix.quaternion.symmetry")  # test-only reference library
    ours = proper_rotations(lattice)
    ref = getattr(orix_symmetry, orix_group).to_matrix()
    assert _same_rotation_sets(ours, ref)
    np.testing.assert_allclose(ours[0], np.eye(3))
    np.testing.assert_allclose(np.linalg.det(ours), 1.0)


def test_cell_without_the_claimed_symmetry_is_refused():
    with pytest.raises(TracefitInputError, match="does not have the symmetry"):
        proper_rotations(Lattice(1, 1, 1.2, laue="m-3m"))
    with pytest.raises(TracefitInputError, match="hexagonal axes"):
        proper_rotations(Lattice(1, 1, 1, 80, 80, 80, laue="-3m"))  # rhombohedral axes


@given(
    st.sampled_from(["m-3m", "m-3", "6/mmm", "6/m", "-3m", "-3", "4/mmm", "4/m", "mmm", "2/m", "-1"]),
    st.sampled_from([1.0, 1.3]), st.sampled_from([1.0, 0.7]),
    st.sampled_from([90.0, 120.0, 104.0]), st.sampled_from([90.0, 75.0]),
)
@settings(max_examples=60, deadline=None)
def test_any_cell_and_class_gives_a_group_or_the_input_error(laue, b, c, gamma, beta):
    try:
        lat = Lattice(1.0, b, c, 90.0, beta, gamma, laue=laue)
        R = proper_rotations(lat)
    except TracefitInputError:
        return
    # a group of proper rotations that maps the lattice onto itself
    np.testing.assert_allclose(np.linalg.det(R), 1.0)
    M = np.einsum("ij,njk,kl->nil", np.linalg.inv(lat.direct_matrix), R, lat.direct_matrix)
    np.testing.assert_allclose(M, np.round(M), atol=1e-6)


@pytest.mark.parametrize("laue", ["m-3m", "6/mmm", "-3m", "4/mmm", "mmm", "2/m"])
def test_index_rotations_are_integral_and_agree_with_cartesian(laue):
    lat = {
        "m-3m": CUBIC,
        "6/mmm": Lattice(**HEX),
        "-3m": Lattice(**HEX, laue="-3m", hex_setting="x-along-a1-reciprocal"),
        "4/mmm": Lattice(1, 1, 0.5456),
        "mmm": Lattice(1, 1.3, 0.7),
        "2/m": Lattice(1, 1.3, 0.7, 90, 103.0, 90),
    }[laue]
    R = proper_rotations(lat)
    for kind, basis in (("plane", lat.reciprocal_matrix), ("direction", lat.direct_matrix)):
        M = index_rotations(lat, kind)
        assert M.dtype.kind == "i"
        # R (basis @ v) == basis @ (M v) for the basis vectors themselves.
        np.testing.assert_allclose(R @ basis, basis @ M, atol=1e-9)


# Cullity & Stock, Elements of X-Ray Diffraction, 3rd ed., appendix table of interplanar angles
# in cubic crystals (degrees, to 0.1; rows written down from memory of the table, a subset).
CULLITY_CUBIC = {
    ((1, 0, 0), (1, 0, 0)): [0.0, 90.0],
    ((1, 0, 0), (1, 1, 0)): [45.0, 90.0],
    ((1, 0, 0), (1, 1, 1)): [54.7],
    ((1, 0, 0), (2, 1, 0)): [26.6, 63.4, 90.0],
    ((1, 0, 0), (2, 1, 1)): [35.3, 65.9],
    ((1, 0, 0), (2, 2, 1)): [48.2, 70.5],
    ((1, 1, 0), (1, 1, 0)): [0.0, 60.0, 90.0],
    ((1, 1, 0), (1, 1, 1)): [35.3, 90.0],
    ((1, 1, 0), (2, 1, 0)): [18.4, 50.8, 71.6],
    ((1, 1, 0), (2, 1, 1)): [30.0, 54.7, 73.2, 90.0],
    ((1, 1, 0), (2, 2, 1)): [19.5, 45.0, 76.4, 90.0],
    ((1, 1, 1), (1, 1, 1)): [0.0, 70.5],
    ((1, 1, 1), (2, 1, 0)): [39.2, 75.0],
    ((1, 1, 1), (2, 1, 1)): [19.5, 61.9, 90.0],
    ((1, 1, 1), (2, 2, 1)): [15.8, 54.7, 78.9],
    ((2, 1, 0), (2, 1, 0)): [0.0, 36.9, 53.1, 66.4, 78.5, 90.0],
    ((2, 1, 1), (2, 1, 1)): [0.0, 33.6, 48.2, 60.0, 70.5, 80.4],
    ((2, 2, 1), (2, 2, 1)): [0.0, 27.3, 38.9, 63.6, 83.6, 90.0],
}


def _angle_set(lat, a, b):
    n = lat.plane_normal(a)
    m = lat.plane_normal(np.array(plane_variants(lat, b)))
    return sorted({round(float(np.degrees(np.arccos(min(1.0, abs(float(n @ x)))))), 1) for x in m})


@pytest.mark.parametrize("pair", sorted(CULLITY_CUBIC))
def test_cubic_interplanar_angles_match_cullity(pair):
    # Also the reverse order must give the same set (the table is symmetric).
    assert _angle_set(CUBIC, *pair) == CULLITY_CUBIC[pair]
    assert _angle_set(CUBIC, pair[1], pair[0]) == CULLITY_CUBIC[pair]


def _hex_cos_cullity(p, q, c_over_a):
    # Interplanar angle in the hexagonal system, Cullity & Stock 3rd ed., appendix of
    # plane-spacing and interplanar-angle equations (form from memory):
    # cos phi = [h1h2 + k1k2 + (h1k2 + h2k1)/2 + (3a^2/4c^2) l1l2] / sqrt(Q1 Q2),
    # Q = h^2 + k^2 + hk + (3a^2/4c^2) l^2.
    (h1, k1, l1), (h2, k2, l2) = p, q
    f = 3.0 / (4.0 * c_over_a**2)
    num = h1 * h2 + k1 * k2 + 0.5 * (h1 * k2 + h2 * k1) + f * l1 * l2
    q1 = h1 * h1 + k1 * k1 + h1 * k1 + f * l1 * l1
    q2 = h2 * h2 + k2 * k2 + h2 * k2 + f * l2 * l2
    return num / math.sqrt(q1 * q2)


hkl = st.tuples(st.integers(-4, 4), st.integers(-4, 4), st.integers(-4, 4)).filter(any)


@given(hkl, hkl, st.floats(1.45, 1.95), st.sampled_from(["x-along-a1", "x-along-a1-reciprocal"]))
@settings(max_examples=80, deadline=None)
def test_hexagonal_angles_match_the_handbook_formula_in_both_settings(p, q, coa, setting):
    lat = Lattice(1, 1, coa, 90, 90, 120, hex_setting=setting)
    four = lambda v: (v[0], v[1], -(v[0] + v[1]), v[2])  # noqa: E731
    cos = float(lat.plane_normal(four(p)) @ lat.plane_normal(four(q)))
    assert cos == pytest.approx(_hex_cos_cullity(p, q, coa), abs=1e-9)


@pytest.mark.parametrize(
    "metal, c_over_a",
    # c/a values from memory (room temperature): Mg 1.624, Ti 1.587, Zn 1.856, Zr 1.593.
    [("Mg", 1.624), ("Ti", 1.587), ("Zn", 1.856), ("Zr", 1.593)],
)
def test_basal_to_10m12_angle_closed_form(metal, c_over_a):
    # Closed form: the (10-1l) normal is a* + l c* with |a*| = 2/(sqrt3 a), |c*| = 1/c, so the
    # angle to (0001) obeys tan(theta) = (2/sqrt3)(c/a)/l; for l = 2, tan(theta) = (c/a)/sqrt3.
    # (Derived from the hexagonal reciprocal metric; it is the hexagonal interplanar-angle formula
    # of Cullity & Stock's appendix for (0001)^(10-1l), and the same angle sets the {10-12} twin
    # geometry in Yoo 1981, Metall. Trans. A 12, 409 -- citations from memory.)
    expected = math.degrees(math.atan((2 / math.sqrt(3)) * c_over_a / 2))
    for setting in ("x-along-a1", "x-along-a1-reciprocal"):
        lat = lattice_preset("hcp", c_over_a, hex_setting=setting)
        n0 = lat.plane_normal((0, 0, 0, 1))
        for v in plane_variants(lat, (1, 0, -1, 2)):
            ang = math.degrees(math.acos(abs(float(n0 @ lat.plane_normal(v)))))
            assert ang == pytest.approx(expected, abs=1e-9)


def test_mg_tension_twin_reorientation_is_86_degrees():
    # Parent and {10-12} twin c axes are 86.3 deg apart in Mg (widely quoted EBSD value, e.g.
    # Barnett 2007, Mater. Sci. Eng. A 464, 1 -- from memory): mirror of c in K1.
    lat = lattice_preset("hcp", 1.624)
    n = lat.plane_normal((1, 0, -1, 2))
    c = np.array([0, 0, 1.0])
    ct = c - 2 * (c @ n) * n
    assert math.degrees(math.acos(abs(float(c @ ct)))) == pytest.approx(86.3, abs=0.05)
    # and exactly twice the (0001)^(10-12) interplanar angle of the hexagonal formula
    # cos phi = l / sqrt(4/3 (c/a)^2 (h^2 + hk + k^2) + l^2) (common practice, no source)
    phi = math.degrees(math.acos(2.0 / math.sqrt(4.0 / 3.0 * 1.624 ** 2 + 4.0)))
    assert math.degrees(math.acos(abs(float(c @ ct)))) == pytest.approx(2 * phi, abs=1e-9)


@pytest.mark.parametrize(
    "lat, hkl, count",
    [
        # Multiplicity / 2 (a plane and its negative are one trace): cubic {100} 3, {110} 6, {111} 4,
        # {210} 12, {211} 12, {123} 24; hexagonal {0001} 1, {10-10} 3, {10-11} 6, {10-12} 6,
        # {11-20} 3, {11-22} 6, {11-21} 6, {12-31} 12 (common practice, no source; the powder
        # multiplicities are twice these).
        (CUBIC, (1, 0, 0), 3),
        (CUBIC, (1, 1, 0), 6),
        (CUBIC, (1, 1, 1), 4),
        (CUBIC, (2, 1, 0), 12),
        (CUBIC, (2, 1, 1), 12),
        (CUBIC, (1, 2, 3), 24),
        (lattice_preset("hcp", 1.6), (0, 0, 0, 1), 1),
        (lattice_preset("hcp", 1.6), (1, 0, -1, 0), 3),
        (lattice_preset("hcp", 1.6), (1, 0, -1, 1), 6),
        (lattice_preset("hcp", 1.6), (1, 0, -1, 2), 6),
        (lattice_preset("hcp", 1.6), (1, 1, -2, 0), 3),
        (lattice_preset("hcp", 1.6), (1, 1, -2, 2), 6),
        (lattice_preset("hcp", 1.6), (1, 1, -2, 1), 6),
        (lattice_preset("hcp", 1.6), (1, 2, -3, 1), 12),
        (Lattice(1, 1, 0.5456), (1, 0, 1), 4),  # tetragonal {101}: 8 / 2
        (Lattice(1, 1, 0.5456), (1, 0, 0), 2),
    ],
)
def test_variant_counts(lat, hkl, count):
    v = plane_variants(lat, hkl)
    assert len(v) == count
    assert all(len(x) == len(hkl) for x in v)
    # every variant is written with its first non-zero index positive and listed once
    assert len(set(v)) == len(v)
    assert all(next(x for x in p if x) > 0 for p in v)


def test_stable_documented_order():
    assert plane_variants(CUBIC, (1, 1, 1)) == [(1, 1, 1), (1, 1, -1), (1, -1, 1), (1, -1, -1)]
    assert plane_variants(CUBIC, "(-1 1 1)") == plane_variants(CUBIC, (1, 1, 1))


def test_signed_and_unsigned_direction_variants():
    hcp = lattice_preset("hcp", 1.6)
    assert len(direction_variants(hcp, (1, 1, -2, 0), signed=False)) == 3
    assert len(direction_variants(hcp, (1, 1, -2, 0))) == 6
    assert len(direction_variants(hcp, (1, 1, -2, 3))) == 12
    assert len(direction_variants(CUBIC, (1, 1, 0), signed=False)) == 6
    assert len(direction_variants(CUBIC, (1, 1, 2))) == 24
    assert (-1, -1, 2) in direction_variants(CUBIC, (1, 1, 2))


def test_trigonal_splits_the_hexagonal_family():
    # In 32 the rhombohedral-type planes (10-11) and (01-11) are not equivalent (common practice,
    # no source): {10-11} of 6/mmm splits into two families of 3.
    tri = Lattice(1, 1, 2.5, 90, 90, 120, laue="-3m")
    assert len(plane_variants(tri, (1, 0, -1, 1))) == 3
    assert not same_family(tri, (1, 0, -1, 1), (0, 1, -1, 1))
    assert same_family(lattice_preset("hcp", 1.6), (1, 0, -1, 1), (0, 1, -1, 1))


LATTICES = [
    CUBIC,
    Lattice(1, 1, 1, laue="m-3"),
    lattice_preset("hcp", 1.587),
    lattice_preset("hcp", 1.587, hex_setting="x-along-a1-reciprocal"),
    Lattice(1, 1, 2.5, 90, 90, 120, laue="-3m"),
    Lattice(1, 1, 0.5456),
    Lattice(1, 1.3, 0.7, 90, 103.0, 90),
]


@given(st.sampled_from(range(len(LATTICES))), st.tuples(*[st.integers(-3, 3)] * 3).filter(any))
@settings(max_examples=80, deadline=None)
def test_variants_are_closed_under_the_group(li, v):
    lat = LATTICES[li]
    idx = (v[0], v[1], -(v[0] + v[1]), v[2]) if lat.is_hexagonal else v
    members = plane_variants(lat, idx)
    normals = lat.plane_normal(np.array(members))
    for R in proper_rotations(lat):
        moved = normals @ R.T
        # each rotated normal is +- one of the members' normals
        dots = np.abs(moved @ normals.T)
        assert np.allclose(dots.max(axis=1), 1.0, atol=1e-9)
    # and the input itself is one of them (up to sign)
    n0 = lat.plane_normal(idx)
    assert np.isclose(np.abs(normals @ n0).max(), 1.0)
    dirs = direction_variants(lat, idx)
    dvec = lat.direction_vector(np.array(dirs))
    for R in proper_rotations(lat):
        assert np.allclose((dvec @ R.T @ dvec.T).max(axis=1), 1.0, atol=1e-9)


# ------------------------------------------------------------------ named cells
@pytest.mark.parametrize(
    "lattice, orix_group",
    [
        # the named constructors give cells with the symmetry of their Laue class (orix as reference)
        (Lattice.fcc(), "O"),
        (Lattice.bcc(a=2.87), "O"),
        (Lattice.hcp(c_over_a=1.587), "D6"),
        (Lattice.hcp(c_over_a=1.624, a=3.21, hex_setting="x-along-a1-reciprocal"), "D6"),
        (Lattice.tetragonal(c_over_a=0.5456), "D4"),
    ],
)
def test_named_constructors_have_their_symmetry(lattice, orix_group):
    orix_symmetry = pytest.importorskip("orix.quaternion.symmetry")
    assert _same_rotation_sets(lattice.proper_rotations(), getattr(orix_symmetry, orix_group).to_matrix())
    assert lattice.proper_rotations() is proper_rotations(lattice)  # one implementation, cached


def test_named_constructors_match_the_presets():
    import warnings

    assert Lattice.fcc() == lattice_preset("fcc") and Lattice.bcc() == lattice_preset("bcc")
    assert Lattice.hcp(c_over_a=1.587) == lattice_preset("hcp", 1.587)
    assert Lattice.hcp(c_over_a=1.587, hex_setting="x-along-a1-reciprocal") == lattice_preset("hcp", 1.587, "x-along-a1-reciprocal")
    assert Lattice.tetragonal(c_over_a=0.546) == lattice_preset("tetragonal", 0.546)
    hcp = Lattice.hcp(c_over_a=1.587, a=3.0)
    assert (hcp.a, hcp.c) == (3.0, pytest.approx(3.0 * 1.587)) and hcp.c_over_a == pytest.approx(1.587)
    with warnings.catch_warnings(record=True) as w:
        warnings.simplefilter("always")
        ideal = Lattice.hcp()
    assert any("ideal" in str(x.message) for x in w) and ideal.c_over_a == pytest.approx(math.sqrt(8 / 3))
    with pytest.raises(TracefitInputError, match="c_over_a"):
        Lattice.tetragonal(None)
    with pytest.raises(TracefitInputError, match="c_over_a"):
        Lattice.hcp(c_over_a=-1.0)
    with pytest.raises(TracefitInputError, match="c_over_a"):
        lattice_preset("fcc", 1.2)
    with pytest.raises(TracefitInputError, match="lattice parameter a"):
        Lattice.fcc(a=0.0)
