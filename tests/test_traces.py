"""Predicted traces, inclinations, Schmid factors and resolved shear.

* The worked vectors of ../shared/conventions.md live in tests/test_conventions.py.
* Schmid factors of fcc {111}<110> slip: the standard textbook values for tension along [001],
  [011] and [111] (e.g. Hosford, Mechanical Behavior of Materials, chapter on slip; Dieter,
  Mechanical Metallurgy, chapter on plastic deformation of single crystals; values from memory):
  max |m| = 1/sqrt(6) = 0.408 on 8 systems, 0.408 on 4 systems, 2/(3 sqrt 6) = 0.272 on 6 systems.
"""

import math
from types import SimpleNamespace

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st
from scipy.spatial.transform import Rotation as SciRot

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.conventions import FrameSettings
from tracefit.crystal import lattice_preset
from tracefit.crystal import crystal_to_sample, from_euler
from tracefit.crystal import catalogue
from tracefit.predict import (
    parse_load,
    plane_normals_in_image,
    predict_traces,
    predicted_trace_table,
    resolved_shear,
    schmid_factor,
    system_schmid_factors,
    trace_angles,
)

def test_trace_lies_in_plane_and_surface():
    # The trace direction (cos a, sin a, 0) is in the surface and in the plane: t . n = 0.
    lat = lattice_preset("hcp", 1.624)
    g = from_euler(SciRot.random(500, random_state=11).as_euler("ZXZ", degrees=True))
    hkil = np.array([[1, 0, -1, 2], [1, 1, -2, 2], [1, 0, -1, 1], [0, 1, -1, 0], [1, -2, 1, 3]])
    tab = predicted_trace_table(lat, g, hkil, indices=True)
    n_s = crystal_to_sample(g, lat.plane_normal(hkil))
    a = np.radians(tab.angle_deg)
    dots = np.cos(a) * n_s[..., 0] + np.sin(a) * n_s[..., 1]
    ok = tab.inclination_deg > 1.0  # the trace of a near-surface plane is ill-defined
    assert np.abs(dots[ok]).max() < 1e-9
    # dihedral angle between plane and surface = angle between their normals (written independently)
    np.testing.assert_allclose(tab.inclination_deg, np.degrees(np.arctan2(np.hypot(n_s[..., 0], n_s[..., 1]), np.abs(n_s[..., 2]))), atol=1e-9)
    assert tab.angle_deg.shape == (500, 5)


def test_basal_inclination_equals_Phi():
    # The c axis makes angle Phi with Z (Bunge): the basal plane is inclined by Phi (common practice, no source).
    lat = lattice_preset("hcp", 1.587)
    e = np.column_stack([np.linspace(0, 300, 7), np.linspace(0, 90, 7), np.linspace(10, 200, 7)])
    tab = predicted_trace_table(lat, from_euler(e), [(0, 0, 0, 1)], indices=True)
    np.testing.assert_allclose(tab.inclination_deg[:, 0], e[:, 1], atol=1e-9)


def test_trace_angles_plane_and_negative():
    n = np.array([[0.3, 0.4, 0.5], [-0.3, -0.4, -0.5]])
    a, i = trace_angles(n)
    assert a[0] == pytest.approx(a[1]) and i[0] == pytest.approx(i[1])
    assert a[0] == pytest.approx((math.degrees(math.atan2(0.4, 0.3)) + 90) % 180)


def test_plane_normals_in_image_shapes():
    g = from_euler(np.zeros((4, 3)))
    n = np.eye(3)
    assert plane_normals_in_image(g, n).shape == (4, 3, 3)
    assert plane_normals_in_image(g[0], n).shape == (3, 3)
    np.testing.assert_allclose(plane_normals_in_image(g[0], n, FrameSettings(rotation_deg=90)), [[0, 1, 0], [-1, 0, 0], [0, 0, 1]], atol=1e-15)


# ------------------------------------------------------------------ Schmid factors
@pytest.fixture(scope="module")
def fcc():
    lat = lattice_preset("fcc")
    return lat, catalogue(lat, modes=["slip"])


@pytest.mark.parametrize("axis, m_max, count", [("[001]", 1 / math.sqrt(6), 8), ("[011]", 1 / math.sqrt(6), 4), ("[111]", 2 / (3 * math.sqrt(6)), 6)])
def test_fcc_schmid_textbook(fcc, axis, m_max, count):
    # Hosford / Dieter (see module docstring): 0.408 (8), 0.408 (4), 0.272 (6).
    lat, slip = fcc
    m = system_schmid_factors(parse_load(axis, lat), None, slip)
    assert len(slip) == 12
    assert m.max() == pytest.approx(m_max, abs=1e-12)
    assert round(m_max, 3) == {"[001]": 0.408, "[011]": 0.408, "[111]": 0.272}[axis]
    assert int(np.sum(np.isclose(m, m.max(), atol=1e-9))) == count
    assert np.all(m >= 0)  # slip is reported as |m|


def test_fcc_schmid_through_sample_axis(fcc):
    # Same values when the load is the sample z axis and the crystal is turned so [011] || z.
    lat, slip = fcc
    g = from_euler([0, 45, 0])  # crystal [0 -1 1]/sqrt2 ... lies along sample Z for Phi = 45
    l_c = g @ [0, 0, 1]
    np.testing.assert_allclose(np.abs(l_c), [0, 1 / math.sqrt(2), 1 / math.sqrt(2)], atol=1e-12)
    m = system_schmid_factors(parse_load("z", lat), g, slip)
    assert m.max() == pytest.approx(0.40825, abs=1e-5)
    assert int(np.sum(np.isclose(m, m.max()))) == 4


def test_schmid_maximum_half_at_45_degrees():
    # m = cos(phi) cos(lambda) = 0.5 at phi = lambda = 45 deg (common practice, no source).
    n = np.array([0.0, 0.0, 1.0])
    d = np.array([1.0, 0.0, 0.0])
    l = np.array([1.0, 0.0, 1.0]) / math.sqrt(2)
    assert schmid_factor(l, n, d) == pytest.approx(0.5)
    assert schmid_factor(-l, n, d) == pytest.approx(0.5)  # tension along l or -l is the same load
    assert schmid_factor([1.0, 0.0, -1.0], n, d) == pytest.approx(-0.5)


@settings(max_examples=200, deadline=None)
@given(st.lists(st.floats(-1, 1, allow_nan=False), min_size=9, max_size=9))
def test_schmid_never_above_half(v):
    a = np.array(v[:3]); b = np.array(v[3:6]); l = np.array(v[6:])
    if min(np.linalg.norm(a), np.linalg.norm(b), np.linalg.norm(l)) < 1e-3:
        return
    n = a / np.linalg.norm(a)
    d = b - (b @ n) * n  # a slip direction lies in its plane
    if np.linalg.norm(d) < 1e-3:
        return
    assert abs(schmid_factor(l, n, d)) <= 0.5 + 1e-12


def test_schmid_vectorised_shapes():
    l = np.array([[0, 0, 1], [1, 0, 0]], float)
    n = np.eye(3)
    d = np.roll(np.eye(3), 1, axis=0)
    assert schmid_factor(l, n, d).shape == (2, 3)
    assert schmid_factor(l[0], n, d).shape == (3,)


def test_twin_sense_counts_only_one_way():
    # Twinning is polar: it forms only when (l.n)(l.d) > 0 in tension, reversed in compression.
    lat = lattice_preset("fcc")
    twin = SimpleNamespace(mode="twin", normal=np.array([0, 0, 1.0]), dir_unit=np.array([1.0, 0, 0]))
    slip = SimpleNamespace(mode="slip", normal=np.array([0, 0, 1.0]), dir_unit=np.array([1.0, 0, 0]))
    plus = (1, 0, 1)
    minus = (1, 0, -1)
    for axis, sense, m_twin in ((plus, "tension", 0.5), (plus, "compression", -0.5), (minus, "tension", -0.5), (minus, "compression", 0.5)):
        load = parse_load(",".join(map(str, axis)), lat, sense)
        m = system_schmid_factors(load, np.eye(3), [twin, slip])
        assert m[0] == pytest.approx(m_twin)
        assert m[1] == pytest.approx(0.5)


def test_fcc_twin_tension_compression_asymmetry():
    # fcc {111}<112> twinning under [001]: m = 0.471 in compression, only 0.236 in tension;
    # under [111] tension 0.314 (values from memory; widely quoted for the tension/compression
    # asymmetry of fcc twinning, e.g. Karaman et al., Acta Mater. 2000). Checked against Schmid's
    # law: [111] on (11-1)[112]: l.n = 1/3, l.d = 4/(3 sqrt2), m = 2 sqrt2 / 9.
    lat = lattice_preset("fcc")
    tw = catalogue(lat, modes=["twin"])
    m_t = system_schmid_factors(parse_load("[001]", lat, "tension"), None, tw)
    m_c = system_schmid_factors(parse_load("[001]", lat, "compression"), None, tw)
    m_111 = system_schmid_factors(parse_load("[111]", lat, "tension"), None, tw)
    assert m_c.max() == pytest.approx(2 * math.sqrt(2) / 6, abs=1e-9)  # 0.471
    assert m_t.max() == pytest.approx(math.sqrt(2) / 6, abs=1e-9)  # 0.236
    assert m_111.max() == pytest.approx(2 * math.sqrt(2) / 9, abs=1e-12)  # 0.314


def test_hcp_extension_twin_under_c_axis_tension():
    # {10-12} twins in Mg (c/a 1.624, from memory; < sqrt 3) extend the c axis: c-axis tension favours all six,
    # c-axis compression none (common practice, no source).
    lat = lattice_preset("hcp", 1.624)
    tw = catalogue(lat, modes=["twin"], families=["{10-12}"])
    assert len(tw) == 6
    assert np.all(system_schmid_factors(parse_load("[0001]", lat), None, tw) > 0.45)
    assert np.all(system_schmid_factors(parse_load("[0001]", lat, "compression"), None, tw) < 0)


def test_resolved_shear_matches_schmid_under_uniaxial_stress():
    # tau = n . sigma . d in the sample frame equals sigma * (l.n)(l.d) for sigma l l^T.
    lat = lattice_preset("bcc")
    sys_ = catalogue(lat, modes=["slip"])
    n = np.array([s.normal for s in sys_])
    d = np.array([s.dir_unit for s in sys_])
    g = from_euler([20, 35, 50])
    l_s = np.array([0.2, -0.5, 0.84])
    l_s /= np.linalg.norm(l_s)
    sigma = 150.0 * np.outer(l_s, l_s)
    tau = resolved_shear(sigma, g, n, d)
    np.testing.assert_allclose(tau, 150.0 * schmid_factor(g @ l_s, n, d), atol=1e-10)
    voigt = [sigma[0, 0], sigma[1, 1], sigma[2, 2], sigma[1, 2], sigma[0, 2], sigma[0, 1]]
    np.testing.assert_allclose(resolved_shear(voigt, g, n, d), tau, atol=1e-12)
    with pytest.raises(TracefitInputError, match="symmetric"):
        resolved_shear(np.array([[0, 1, 0], [0, 0, 0], [0, 0, 0.0]]), g, n, d)


# ------------------------------------------------------------------ grouping and results
def test_fcc_groups_into_four_traces():
    lat = lattice_preset("fcc")
    tr = predict_traces(lat, from_euler([10, 20, 30]), catalogue(lat))
    assert len(tr) == 4
    for t in tr:
        assert t.modes == ["slip", "twin"]
        assert len(t.systems) == 6 and t.family == "{111}"
        assert t.systems[0].schmid_factor is None
    assert [t.angle_deg for t in tr] == sorted(t.angle_deg for t in tr)
    # matches the vectorised table
    tab = predicted_trace_table(lat, from_euler([10, 20, 30]), [t.plane for t in tr], indices=True)
    np.testing.assert_allclose(tab.angle_deg, [t.angle_deg for t in tr], atol=1e-12)


def test_plane_and_negative_are_one_trace_slip_and_twin_merge():
    lat = lattice_preset("hcp", 1.624)
    n = lat.plane_normal((1, 0, -1, 2))
    mk = lambda mode, plane, nn, d: SimpleNamespace(mode=mode, family="{10-12}", name=f"{mode} probe", plane=plane, direction=d, normal=nn, dir_unit=np.array([1.0, 0, 0]))  # noqa: E731
    systems = [mk("twin", (1, 0, -1, 2), n, (-1, 0, 1, 1)), mk("slip", (-1, 0, 1, -2), -n, (1, -2, 1, 0))]
    (t,) = predict_traces(lat, from_euler([5, 50, 80]), systems)
    assert t.modes == ["slip", "twin"] and len(t.systems) == 2
    d = t.to_dict()
    assert d["plane"] == [1, 0, -1, 2] and d["modes"] == ["slip", "twin"]
    assert set(d) >= {"plane", "family", "modes", "angle_deg", "inclination_deg", "systems"}
    assert "schmid_factor" not in d["systems"][0]


def canonical(v):
    return tuple(int(x) for x in (v if next(x for x in v if x) > 0 else [-y for y in v]))


def test_predict_with_load_sorted_by_schmid_and_activation_stress():
    lat = lattice_preset("fcc")
    tr = predict_traces(lat, from_euler([0, 0, 0]), catalogue(lat, modes=["slip"]), load="[123]", crss={"{111}": 10.0})
    best = [t.best_schmid for t in tr]
    assert best == sorted(best, reverse=True)
    s = tr[0].systems[0]
    assert s.activation_stress == pytest.approx(10.0 / s.schmid_factor)
    # The [123] single-slip orientation: the primary system is (-111)[101] (common practice, no
    # source), written (1-1-1)[101] here (plane with its first index positive). Schmid's law by
    # hand: l.n = 4/sqrt(42), l.d = 4/sqrt(28), m = 16/sqrt(1176) = 0.4666.
    assert canonical(tr[0].plane) == (1, -1, -1) and s.direction == (1, 0, 1)
    assert s.schmid_factor == pytest.approx(16 / math.sqrt(1176), abs=1e-12)
    d = tr[0].to_dict()
    assert d["systems"][0]["schmid_factor"] == pytest.approx(s.schmid_factor)


def test_near_surface_flag():
    lat = lattice_preset("fcc")
    fake = SimpleNamespace(mode="slip", family="{001}", name="probe", plane=(0, 0, 1), direction=(1, 0, 0), normal=np.array([0, 0, 1.0]), dir_unit=np.array([1.0, 0, 0]))
    (t,) = predict_traces(lat, from_euler([0, 3, 0]), [fake])
    assert t.near_surface and t.inclination_deg == pytest.approx(3.0)
    (t,) = predict_traces(lat, from_euler([0, 3, 0]), [fake], near_surface_deg=2.0)
    assert not t.near_surface


@pytest.mark.parametrize("text", ["garbage", "", "[12", "<110>", "0,0,0", "x,y"])
def test_parse_load_rejects(text):
    with pytest.raises(TracefitInputError):
        parse_load(text, lattice_preset("fcc"))


def test_parse_load_accepts():
    lat = lattice_preset("hcp", 1.624)
    assert parse_load("-x").vector == (-1.0, 0.0, 0.0)
    assert parse_load("1,1,0").frame == "image"  # the picture's axes by default (issue 11)
    assert parse_load("1,1,0", frame="sample").frame == "sample"
    ld = parse_load("[11-20]", lat, "compression")
    assert ld.frame == "crystal" and ld.sense == "compression"
    np.testing.assert_allclose(ld.vector, lat.direction_vector((1, 1, -2, 0)))
    with pytest.raises(TracefitInputError):
        parse_load("[110]", lat)  # hexagonal needs four indices
    with pytest.raises(TracefitInputError):
        parse_load("z", lat, "shear")


def test_hex_setting_x_along_a1_reciprocal_is_a_phi2_shift():
    # x along a1* is the x-along-a1 basis turned by -30 deg about c (lattice.py), so the same physical
    # orientation has phi2 larger by 30 deg in the x-along-a1-reciprocal setting (derived from the definitions).
    lat = lattice_preset("hcp", 1.587)
    star = lat.with_setting("x-along-a1-reciprocal")
    e = SciRot.random(200, random_state=5).as_euler("ZXZ", degrees=True)
    e_star = e + [0.0, 0.0, 30.0]
    hkil = np.array([[1, 0, -1, 2], [0, 1, -1, 0], [1, 1, -2, 2], [0, 0, 0, 1]])
    a = predicted_trace_table(lat, from_euler(e), hkil, indices=True)
    b = predicted_trace_table(star, from_euler(e_star), hkil, indices=True)
    assert np.abs(axial_difference(a.angle_deg, b.angle_deg))[a.inclination_deg > 1].max() < 1e-9
    np.testing.assert_allclose(a.inclination_deg, b.inclination_deg, atol=1e-9)
    # and mixing the settings up does move traces
    c = predicted_trace_table(star, from_euler(e), hkil, indices=True)
    assert np.abs(axial_difference(a.angle_deg, c.angle_deg)).max() > 5.0


# ------------------------------------------------------------------ the Load type
# Outside checks: Schmid's law m = cos(phi) cos(lambda) by hand (common practice), the worked
# Schmid factors of ../shared/conventions.md (spec) and scipy Rotation for the sample frame.
from tracefit.crystal import Lattice, Orientation  # noqa: E402
from tracefit.predict import Load, LoadAxis, as_load, resolved_drive, tilt_slope  # noqa: E402


def test_load_axis_schmid_factor_by_hand():
    # fcc, tension along [001] on (111)[-101]: cos phi = 1/sqrt3, cos lambda = 1/sqrt2,
    # m = 1/sqrt6 = 0.408 (Schmid's law; common practice, no source).
    lat = Lattice.fcc()
    n, d = lat.plane_normal((1, 1, 1)), lat.direction_vector((-1, 0, 1))
    m = resolved_drive(Load.axis("[001]", lattice=lat), None, n, d)
    assert float(m) == pytest.approx(1 / math.sqrt(6), abs=1e-12)
    assert float(resolved_drive(Load.axis("[001]", "compression", lat), None, n, d)) == pytest.approx(-1 / math.sqrt(6), abs=1e-12)
    # a sample axis: with g = identity, sample z is crystal [001]
    assert float(resolved_drive(Load.axis("z"), Orientation.identity(), n, d)) == pytest.approx(1 / math.sqrt(6), abs=1e-12)


@pytest.mark.parametrize("axis, best", [("x", 0.464), ("y", 0.488)])
def test_load_axis_in_sample_frame_worked_example(axis, best):
    # Spec (../shared/conventions.md, "The load's frame"): fcc, Euler (35, 20, 60): the (11-1)
    # plane's best Schmid factor is 0.464 for a load along sample X, 0.488 along sample Y.
    # Outside check: the axis taken into the crystal with scipy (v_c = R^T v_s), then Schmid's law.
    lat = Lattice.fcc()
    o = Orientation.from_euler([35, 20, 60])
    systems = [s for s in catalogue(lat, modes="slip") if s.plane == (1, 1, -1)]
    m = np.abs(resolved_drive(Load.axis(axis), o, [s.normal for s in systems], [s.dir_unit for s in systems]))
    assert m.max() == pytest.approx(best, abs=6e-4)
    l_c = SciRot.from_euler("ZXZ", [35, 20, 60], degrees=True).inv().apply({"x": [1, 0, 0], "y": [0, 1, 0]}[axis])
    ref = [abs((l_c @ s.normal) * (l_c @ s.dir_unit)) for s in systems]
    np.testing.assert_allclose(m, ref, atol=1e-12)


def test_load_stress_resolves_like_schmid_times_stress():
    # Uniaxial stress sigma l l^T resolves to tau = sigma m (Schmid's law); Voigt order
    # (s11, s22, s33, s23, s13, s12).
    lat = Lattice.hcp(c_over_a=1.587)
    systems = catalogue(lat)
    n = np.array([s.normal for s in systems])
    d = np.array([s.dir_unit for s in systems])
    G = Orientation.from_euler(SciRot.random(20, random_state=8).as_euler("ZXZ", degrees=True))
    for sigma, sense in ((150.0, "tension"), (-150.0, "compression")):
        tau = resolved_drive(Load.stress([0, sigma, 0, 0, 0, 0]), G, n, d)
        m = resolved_drive(Load.axis("y", sense), G, n, d)
        assert tau.shape == m.shape == (20, len(systems))
        np.testing.assert_allclose(tau, 150.0 * m, atol=1e-9)
    ld = Load.stress([1, 2, 3, 50, 60, 70])
    np.testing.assert_allclose(ld.stress_tensor, [[1, 70, 60], [70, 2, 50], [60, 50, 3]])
    assert ld.is_stress and ld.to_dict()["stress_mpa"][1][2] == 50.0
    for bad in ([1, 2, 3], np.ones((3, 3)) + np.triu(np.ones((3, 3)))):
        with pytest.raises(TracefitInputError, match="stress"):
            Load.stress(bad)


def test_stress_load_refuses_axis_questions():
    ld = Load.stress(np.eye(3))
    for call in (lambda: ld.sign, lambda: ld.in_crystal(np.eye(3)), lambda: ld.in_sample()):
        with pytest.raises(TracefitInputError, match="resolved_drive"):
            call()
    with pytest.raises(TracefitInputError, match="axis load"):
        system_schmid_factors(ld, np.eye(3), catalogue(Lattice.fcc()))
    with pytest.raises(TracefitInputError, match="orientation"):
        resolved_drive(ld, None, [0, 0, 1], [1, 0, 0])
    with pytest.raises(TracefitInputError, match="load is None"):
        resolved_drive(None, np.eye(3), [0, 0, 1], [1, 0, 0])


def test_load_axis_keeps_the_former_load_axis_behaviour():
    lat = Lattice.hcp(c_over_a=1.624)
    assert LoadAxis is Load
    old_style = LoadAxis((0.0, 1.0, 0.0), "sample", "compression", "y")
    assert old_style == Load.axis("y", sense="compression", frame="sample") and old_style.sign == -1.0
    assert old_style.to_dict() == {"axis": "y", "frame": "sample", "sense": "compression", "vector": [0.0, 1.0, 0.0]}
    ld = Load.axis("[11-20]", lattice=lat)
    assert ld.to_dict()["index"] == [1, 1, -2, 0] and not ld.is_stress
    g = from_euler([20, 30, 40])
    np.testing.assert_allclose(ld.in_sample(Orientation.from_euler([20, 30, 40])), ld.in_sample(g), atol=1e-15)
    np.testing.assert_allclose(ld.in_sample(g), crystal_to_sample(g, np.array(ld.vector)), atol=1e-12)
    np.testing.assert_allclose(Load.axis([0, 3, 4]).vector, [0, 0.6, 0.8])
    with pytest.raises(TracefitInputError, match="sample axis"):
        Load.axis("x").in_crystal()
    for bad in ([0, 0, 0], [1, 2], "nonsense"):
        with pytest.raises(TracefitInputError):
            Load.axis(bad)
    with pytest.raises(TracefitInputError, match="sense"):
        Load.axis("x", sense="shear")


def test_as_load_on_every_input_form():
    lat = Lattice.fcc()
    assert as_load(None) is None
    ld = Load.axis("y")
    assert as_load(ld) is ld
    assert as_load(LoadAxis((1.0, 0.0, 0.0), "sample", "tension", "x")) == Load.axis("x", frame="sample")
    assert as_load("y") == Load.axis("y")
    assert as_load("-z", sense="compression") == Load.axis("-z", "compression")
    assert as_load("[110]", lat).frame == "crystal"
    assert as_load([0, 2, 0]).vector == (0.0, 1.0, 0.0)
    assert as_load(np.diag([0, 10.0, 0])) == Load.stress([0, 10, 0, 0, 0, 0])
    assert as_load((0, 10, 0, 0, 0, 0)).is_stress
    for bad in ([1, 2, 3, 4], np.zeros((2, 3)), object(), "[110]"):
        with pytest.raises(TracefitInputError):
            as_load(bad)  # "[110]" without a lattice is refused too


def test_predict_traces_takes_a_stress_load():
    lat = Lattice.fcc()
    systems = catalogue(lat)
    s = [0, 0, 80.0, 0, 0, 20.0]
    a = predict_traces(lat, Orientation.from_euler([10, 20, 30]), systems, load=Load.stress(s))
    b = predict_traces(lat, from_euler([10, 20, 30]), systems, stress=s)
    assert [t.to_dict() for t in a] == [t.to_dict() for t in b]
    assert all(r.resolved_shear is not None and r.schmid_factor is None for t in a for r in t.systems)
    with pytest.raises(TracefitInputError, match="once"):
        predict_traces(lat, from_euler([10, 20, 30]), systems, load=Load.stress(s), stress=s)


# ------------------------------------------------------------------ tilt slope
def test_slope_against_numerical_and_analytic_derivative():
    # d(apparent)/d(true) of tan(apparent) = tan(true) cos(alpha) (tilt about x): the analytic
    # derivative cos(alpha) / (cos^2 t + cos^2(alpha) sin^2 t) (calculus on the spec's law), and a
    # fine central difference of the law written out here with numpy.
    lat = Lattice.bcc()
    G = Orientation.from_euler(SciRot.random(40, random_state=2).as_euler("ZXZ", degrees=True))
    hkl = [(1, 1, 0), (1, -1, 0), (1, 1, 2), (1, 2, 3)]
    f = FrameSettings(rotation_deg=15.0, tilt_deg=55.0)
    tab = predicted_trace_table(lat, G, hkl, f, indices=True)
    t = np.radians(tab.true_angle_deg)
    ca = math.cos(math.radians(55.0))
    analytic = ca / (np.cos(t) ** 2 + ca**2 * np.sin(t) ** 2)
    np.testing.assert_allclose(tab.slope, analytic, rtol=2e-6)

    def app(deg):
        r = np.radians(deg)
        return np.degrees(np.arctan2(np.sin(r) * ca, np.cos(r)))

    h = 1e-4
    numeric = axial_difference(app(tab.true_angle_deg + h), app(tab.true_angle_deg - h)) / (2 * h)
    np.testing.assert_allclose(tab.slope, numeric, rtol=1e-5)
    # no tilt: slope 1; tilt about y mirrors the law
    assert np.all(predicted_trace_table(lat, G, hkl, FrameSettings(rotation_deg=15.0), indices=True).slope == 1.0)
    fy = FrameSettings(tilt_deg=40.0, tilt_axis="y")
    cy = math.cos(math.radians(40.0))
    np.testing.assert_allclose(tilt_slope([0.0, 90.0], fy), [1 / cy, cy], rtol=1e-6)


def test_the_old_hexagonal_setting_names_are_read_with_a_warning():
    # Issue 16 item 11: setting values in words; the old values are aliases for one release.
    from tracefit.crystal import Lattice

    with pytest.warns(FutureWarning, match="now called 'x-along-a1-reciprocal'"):
        old = Lattice.hcp(c_over_a=1.587, hex_setting="x_a1star")
    new = Lattice.hcp(c_over_a=1.587, hex_setting="x-along-a1-reciprocal")
    assert old.hex_setting == new.hex_setting == "x-along-a1-reciprocal"
    assert np.allclose(old.plane_normal((1, 0, -1, 2)), new.plane_normal((1, 0, -1, 2)))
