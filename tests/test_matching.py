"""The matcher: probabilities, "none of these", ambiguity, joint assignment.

Predictions for the checks are made independently of tracefit.predict.traces: scipy's Rotation
(``Rotation.from_euler("ZXZ", bunge)`` is the crystal -> sample rotation, see
../shared/conventions.md) and the trace formula atan2(n_y, n_x) + 90 deg.
"""

import math

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import quad
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.identify import (
    ObservedFamily,
    axial_logpdf,
    candidate_set,
    identifications_to_json,
    identify_families,
    identify_grains,
    predicted_trace_sigma,
)
from tracefit.crystal import from_euler
from tracefit.crystal import catalogue
from tracefit.predict import parse_load

FCC = lattice_preset("fcc")


def scipy_trace(lattice, bunge, plane):
    """(trace angle, inclination) of a plane via scipy's rotation, independent of tracefit.predict.traces."""
    n_c = lattice.plane_normal(plane)
    n_s = Rotation.from_euler("ZXZ", bunge, degrees=True).apply(n_c)
    ang = (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0
    return ang, math.degrees(math.acos(min(1.0, abs(n_s[2]))))


def same_plane(a, b):
    a, b = np.array(a), np.array(b)
    return bool(np.all(a == b) or np.all(a == -b))


# ------------------------------------------------------------------ the density
@pytest.mark.parametrize("sigma", [0.3, 2.0, 20.0, 200.0])
def test_axial_density_integrates_to_one(sigma):
    # A density over the 180 deg of axial angles must integrate to 1 (any sigma).
    total, _ = quad(lambda r: math.exp(axial_logpdf(r, sigma)), -90.0, 90.0, points=[0.0], limit=200)
    assert total == pytest.approx(1.0, abs=1e-6)


def test_axial_density_is_gaussian_for_small_sigma():
    # Reference: scipy.stats.norm; a 0.5 deg axial spread is indistinguishable from a Gaussian.
    r = np.linspace(-1.5, 1.5, 7)  # to 3 sigma
    assert np.exp(axial_logpdf(r, 0.5)) == pytest.approx(stats.norm.pdf(r, scale=0.5), rel=1e-3)


def test_axial_density_tends_to_uniform_for_huge_sigma():
    assert np.exp(axial_logpdf(np.array([0.0, 45.0, 89.0]), 1e4)) == pytest.approx(1 / 180.0, rel=1e-3)


# ------------------------------------------------------------------ propagated orientation error
@pytest.mark.parametrize("bunge,plane", [((10, 20, 30), (1, 1, 1)), ((40, 70, 15), (1, -1, 1)), ((5, 80, 60), (1, 1, -1))])
def test_predicted_sigma_matches_monte_carlo(bunge, plane):
    # Monte Carlo with scipy rotations: small random turns (1 deg per sample axis) of the sample frame.
    rng = np.random.default_rng(7)
    R = Rotation.from_euler("ZXZ", bunge, degrees=True)
    n_s = R.apply(FCC.plane_normal(plane))
    incl = math.degrees(math.acos(abs(n_s[2])))
    dR = Rotation.from_rotvec(np.radians(rng.normal(0, 1.0, size=(20000, 3))))
    m = dR.apply(n_s)
    ang = np.degrees(np.arctan2(m[:, 1], m[:, 0])) + 90.0
    a0 = math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0
    d = (ang - a0 + 90.0) % 180.0 - 90.0
    expected = predicted_trace_sigma(incl, 1.0)
    assert np.std(d) == pytest.approx(float(expected), rel=0.06)


# ------------------------------------------------------------------ identification
def _observed_for(bunge, planes, lattice=FCC, noise=0.0, seed=0, sigma=0.3):
    rng = np.random.default_rng(seed)
    return [ObservedFamily(scipy_trace(lattice, bunge, p)[0] + rng.normal(0, noise), sigma) for p in planes]


def test_true_planes_ranked_first_for_a_general_orientation():
    bunge = (23.0, 41.0, 67.0)
    planes = [(1, 1, 1), (1, -1, 1)]
    res = identify_families(_observed_for(bunge, planes), FCC, from_euler(bunge), catalogue(FCC, ("slip",)))
    for r, p in zip(res, planes):
        assert not r.unexplained
        assert same_plane(r.best.plane, p)
        assert r.best.probability > 0.9
        # predicted angle equals the independent scipy prediction
        assert r.best.predicted_deg == pytest.approx(scipy_trace(FCC, bunge, p)[0], abs=1e-6)


def test_scratch_far_from_every_trace_is_unexplained():
    bunge = (23.0, 41.0, 67.0)
    preds = sorted(scipy_trace(FCC, bunge, p)[0] for p in [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)])
    # the middle of the widest gap between the four predicted {111} traces
    gaps = [(preds[(i + 1) % 4] - preds[i]) % 180.0 for i in range(4)]
    i = int(np.argmax(gaps))
    scratch = (preds[i] + gaps[i] / 2.0) % 180.0
    assert gaps[i] > 20.0
    res = identify_families([ObservedFamily(scratch, 0.3)], FCC, from_euler(bunge), catalogue(FCC))
    assert res[0].unexplained and res[0].p_none > 0.9
    assert any("scratch" in n for n in res[0].notes)


def test_same_trace_on_a_110_surface_is_reported_ambiguous():
    # On a (110) surface of a cubic crystal, (111) and (11-1) both meet the surface along [1-10]
    # and both make 35.26 deg with it (Cullity, Elements of X-ray Diffraction, interplanar angle
    # table: {110}^{111} = 35.26 and 90 deg). Their traces coincide, so no angle can tell them apart.
    g = np.array(Rotation.align_vectors([[0, 0, 1], [1, 0, 0]], [[1, 1, 0], [0, 0, 1]])[0].as_matrix()).T
    n_s = g.T @ FCC.plane_normal((1, 1, 1))
    ang = (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0
    res = identify_families([ObservedFamily(ang, 0.3)], FCC, g, catalogue(FCC, ("slip",)))[0]
    assert res.ambiguous and not res.unexplained
    planes = res.planes
    assert any(same_plane(p, (1, 1, 1)) for p in planes) and any(same_plane(p, (1, 1, -1)) for p in planes)
    for c in res.candidates:
        assert c.inclination_deg == pytest.approx(35.26, abs=0.01)
    # the hint says what would separate them (second surface / load)
    text = " ".join(res.separation)
    assert "second surface" in text and "load" in text


def test_schmid_factor_hint_and_ranking_with_a_load():
    # Same (110) surface with the load along sample x = crystal [001]: (111)[10-1] and (11-1)[101]
    # both have m = 0.408 (cos 54.74 * cos 45; Dieter, Mechanical Metallurgy, Schmid factor of <100> loading).
    g = np.array(Rotation.align_vectors([[0, 0, 1], [1, 0, 0]], [[1, 1, 0], [0, 0, 1]])[0].as_matrix()).T
    n_s = g.T @ FCC.plane_normal((1, 1, 1))
    ang = (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0
    res = identify_families([ObservedFamily(ang, 0.3)], FCC, g, catalogue(FCC, ("slip",)), load=parse_load("x"))[0]
    for c in res.candidates:
        assert c.best_system.schmid_factor == pytest.approx(1 / math.sqrt(6), abs=1e-9)
        ms = [s.schmid_factor for s in c.systems]
        assert ms == sorted(ms, reverse=True)


def test_joint_assignment_keeps_two_families_off_one_plane():
    bunge = (23.0, 41.0, 67.0)
    cat = catalogue(FCC, ("slip",))
    a = scipy_trace(FCC, bunge, (1, 1, 1))[0]
    # two families both closest to (111): jointly, only one may take it
    obs = [ObservedFamily(a + 0.1, 0.3), ObservedFamily(a - 0.4, 0.3)]
    joint = identify_families(obs, FCC, from_euler(bunge), cat)
    shared = identify_families(obs, FCC, from_euler(bunge), cat, allow_shared_planes=True)
    assert all(same_plane(r.best.plane, (1, 1, 1)) for r in shared)
    tops = [r.best.plane if not r.unexplained else None for r in joint]
    assert not (tops[0] is not None and tops[1] is not None and same_plane(tops[0], tops[1]))
    # the better-fitting family keeps (111)
    assert same_plane(joint[0].best.plane, (1, 1, 1))


def test_twins_only_in_their_shear_sense():
    # Mg-like hcp: {10-12} twins extend the c axis, so tension along c can form them and
    # compression along c cannot (common practice, no source: the basis of the {10-12} twinning
    # asymmetry in magnesium).
    hcp = lattice_preset("hcp", 1.624)
    g = from_euler((0.0, 90.0, 0.0))  # puts c in the surface plane
    c_sample = g.T @ hcp.direction_vector((0, 0, 0, 1))
    axis = ",".join(f"{x:.6f}" for x in c_sample)
    cat = catalogue(hcp, ("twin",), ["{10-12}"])
    plane = cat[0].plane
    n_s = g.T @ hcp.plane_normal(plane)
    ang = (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0
    ten = identify_families([ObservedFamily(ang, 0.3)], hcp, g, cat, load=parse_load(axis, hcp, "tension"))[0]
    com = identify_families([ObservedFamily(ang, 0.3)], hcp, g, cat, load=parse_load(axis, hcp, "compression"))[0]
    assert all(c.best_system is not None and c.best_system.schmid_factor > 0 for c in ten.candidates)
    assert all(c.best_system is None for c in com.candidates)


def test_calibration_on_random_orientations():
    # Statistical check of the honesty of the probabilities: with the noise the model assumes
    # (1 deg orientation per axis, 0.3 deg detection), the true plane must be in the reported set
    # nearly always, and top-1 when it is well separated from the other planes.
    rng = np.random.default_rng(11)
    cat = catalogue(FCC, ("slip",))
    planes = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]
    n_in, n_tot, n_top, n_sep = 0, 0, 0, 0
    for k in range(300):
        R = Rotation.random(random_state=int(rng.integers(1 << 30)))
        bunge = R.as_euler("ZXZ", degrees=True)
        p = planes[int(rng.integers(4))]
        ang, incl = scipy_trace(FCC, bunge, p)
        if incl < 15:
            continue
        # noisy orientation handed to the matcher
        Rn = Rotation.from_rotvec(np.radians(rng.normal(0, 1.0, 3))) * R
        g = Rn.as_matrix().T
        obs = ObservedFamily(ang + rng.normal(0, 0.3), 0.3)
        r = identify_families([obs], FCC, g, cat, frame_sigma_deg=0.0)[0]
        n_tot += 1
        n_in += any(same_plane(c.plane, p) for c in r.candidates)
        others = [scipy_trace(FCC, bunge, q) for q in planes if q != p]
        sig = math.hypot(0.3, 1.0 / math.sin(math.radians(incl)))
        if all(abs((ang - a + 90) % 180 - 90) > 5 * math.hypot(sig, 1.0 / math.sin(math.radians(max(i, 1))))
               for a, i in others):
            n_sep += 1
            n_top += r.best is not None and same_plane(r.best.plane, p)
    assert n_in / n_tot >= 0.98
    assert n_sep > 50 and n_top / n_sep >= 0.97


def test_to_dict_has_the_cli_keys():
    bunge = (23.0, 41.0, 67.0)
    res = identify_families(_observed_for(bunge, [(1, 1, 1)]), FCC, from_euler(bunge), catalogue(FCC), load=parse_load("x"))
    d = identifications_to_json(res)
    fam = d["families"][0]
    assert set(["angle_deg", "grain", "unexplained", "ambiguous", "candidates"]) <= set(fam)
    c = fam["candidates"][0]
    assert set(["plane", "family", "mode", "predicted_deg", "residual_deg", "probability", "best_system"]) <= set(c)
    assert set(c["best_system"]) >= {"direction", "schmid_factor"}
    probs = [c["probability"] for c in fam["candidates"]]
    assert probs == sorted(probs, reverse=True)
    assert sum(probs) + fam["p_none"] <= 1.0 + 1e-6


def test_many_grains_and_a_missing_orientation():
    cat = catalogue(FCC, ("slip",))
    e1, e2 = (10.0, 30.0, 50.0), (80.0, 60.0, 20.0)
    obs = [ObservedFamily(scipy_trace(FCC, e1, (1, 1, 1))[0], 0.3, grain=1),
           ObservedFamily(scipy_trace(FCC, e2, (1, -1, 1))[0], 0.3, grain=2),
           ObservedFamily(40.0, 0.3, grain=3)]
    res = identify_grains(obs, FCC, {1: from_euler(e1), 2: from_euler(e2)}, cat)
    assert same_plane(res[0].best.plane, (1, 1, 1)) and res[0].grain == 1
    assert same_plane(res[1].best.plane, (1, -1, 1)) and res[1].grain == 2
    assert res[2].unexplained and "no orientation" in res[2].notes[0]


def test_bad_inputs_raise_input_errors():
    with pytest.raises(TracefitInputError):
        ObservedFamily(float("nan"))
    with pytest.raises(TracefitInputError):
        identify_families([10.0], FCC, np.eye(3), catalogue(FCC), p_none=1.5)
    with pytest.raises(TracefitInputError):
        identify_families([10.0], FCC, np.eye(3)[None], catalogue(FCC))
    with pytest.raises(TracefitInputError):
        candidate_set(catalogue(FCC), modes=["twin"], families=["{110}"])


def _g_with(direction_c, axis_s, second_c, second_s):
    """g (sample -> crystal) putting crystal direction_c along sample axis_s (scipy align_vectors)."""
    R, _ = Rotation.align_vectors([axis_s, second_s], [direction_c, second_c])  # crystal -> sample
    return R.as_matrix().T


def test_worked_case_primary_system_for_a_123_tensile_axis():
    # FCC single crystal in tension along [-1 2 3]: the primary system is (111)[-101] with
    # m = 16 / (14 sqrt 6) = 0.467 (Dieter, Mechanical Metallurgy, Schmid's law worked example;
    # from memory). The crystal is set with [-123] along sample x and [210] along sample y.
    l_c = np.array([-1.0, 2.0, 3.0])
    perp = np.cross(l_c, [0.0, 0.0, 1.0])
    g = _g_with(l_c, [1.0, 0.0, 0.0], perp, [0.0, 1.0, 0.0])
    ang = scipy_trace(FCC, Rotation.from_matrix(g.T).as_euler("ZXZ", degrees=True), (1, 1, 1))[0]
    load = parse_load("[-123]", FCC)
    r = identify_families([ObservedFamily(ang, 0.3)], FCC, g, catalogue(FCC, ("slip",)), load=load)[0]
    c = [c for c in r.candidates if same_plane(c.plane, (1, 1, 1))][0]
    assert c.best_system.schmid_factor == pytest.approx(16 / (14 * math.sqrt(6)), abs=1e-9)
    assert same_plane(c.best_system.direction, (-1, 0, 1))
    # (111)[-101] is the largest Schmid factor of all twelve systems
    allm = [s.schmid_factor for cc in r.candidates for s in cc.systems]
    assert c.best_system.schmid_factor == pytest.approx(max(allm))


def test_traces_on_a_111_surface_form_60_degree_triangles():
    # On a {111} surface of an fcc crystal the three inclined {111} planes leave traces along
    # <110> at 60 deg to each other (slip-line triangles; common practice, no source), and the
    # (111) plane itself lies in the surface: its trace is undefined (huge sigma, near_surface).
    g = _g_with([1.0, 1.0, 1.0], [0.0, 0.0, 1.0], [1.0, -1.0, 0.0], [1.0, 0.0, 0.0])
    bunge = Rotation.from_matrix(g.T).as_euler("ZXZ", degrees=True)
    planes = [(-1, 1, 1), (1, -1, 1), (1, 1, -1)]
    angs = [scipy_trace(FCC, bunge, p)[0] for p in planes]
    diffs = sorted(abs((a - b + 90) % 180 - 90) for i, a in enumerate(angs) for b in angs[i + 1:])
    assert diffs == pytest.approx([60.0, 60.0, 60.0], abs=1e-9)
    res = identify_families([ObservedFamily(a, 0.3) for a in angs], FCC, g, catalogue(FCC, ("slip",)))
    for r, p in zip(res, planes):
        assert same_plane(r.best.plane, p) and r.best.probability > 0.9
    # a family at an angle between the triangle sides: the in-surface (111) cannot take it with
    # confidence, since its spread is enormous
    r = identify_families([ObservedFamily((angs[0] + 30) % 180, 0.3)], FCC, g, catalogue(FCC, ("slip",)))[0]
    assert all(not same_plane(c.plane, (1, 1, 1)) or (c.near_surface and c.predicted_sigma_deg > 30) for c in r.candidates)


def test_stage_tilt_is_undone_before_matching():
    # tan(apparent) = tan(true) cos(tilt) for a tilt about the image x axis (../shared/conventions.md).
    from tracefit.conventions import FrameSettings

    bunge = (23.0, 41.0, 67.0)
    true = scipy_trace(FCC, bunge, (1, -1, 1))[0]
    app = math.degrees(math.atan2(math.sin(math.radians(true)) * math.cos(math.radians(60)), math.cos(math.radians(true)))) % 180
    cat = catalogue(FCC, ("slip",))
    tilted = identify_families([ObservedFamily(app, 0.3)], FCC, from_euler(bunge), cat, frame=FrameSettings(tilt_deg=60.0))[0]
    assert same_plane(tilted.best.plane, (1, -1, 1)) and tilted.best.predicted_deg == pytest.approx(app, abs=1e-6)


def test_stress_tensor_ranks_by_resolved_shear():
    # Uniaxial stress s along sample x as a tensor: tau = s * m for every system (Schmid's law).
    bunge = (23.0, 41.0, 67.0)
    a = scipy_trace(FCC, bunge, (1, 1, 1))[0]
    cat = catalogue(FCC, ("slip",))
    s = np.zeros((3, 3))
    s[0, 0] = 200.0
    rt = identify_families([ObservedFamily(a, 0.3)], FCC, from_euler(bunge), cat, load=s)[0]
    rm = identify_families([ObservedFamily(a, 0.3)], FCC, from_euler(bunge), cat, load=parse_load("x"))[0]
    ct = [c for c in rt.candidates if same_plane(c.plane, (1, 1, 1))][0]
    cm = [c for c in rm.candidates if same_plane(c.plane, (1, 1, 1))][0]
    assert ct.best_system.resolved_shear == pytest.approx(200.0 * cm.best_system.schmid_factor, rel=1e-9)
    assert same_plane(ct.best_system.direction, cm.best_system.direction)


def test_a_wrong_orientation_is_named_when_every_family_of_a_grain_fails():
    # Families from one orientation, matched against a wrong one (phi2 off by 47 deg): nothing fits.
    bunge = (23.0, 41.0, 67.0)
    obs = _observed_for(bunge, [(1, 1, 1), (1, -1, 1)])
    cat = catalogue(FCC, ("slip",))
    res = identify_families(obs, FCC, from_euler((23.0, 41.0, 20.0)), cat, grain=5)
    assert all(r.unexplained for r in res)
    assert all(any("orientation" in n and "grain 5" in n for n in r.notes) for r in res)
    right = identify_families(obs, FCC, from_euler(bunge), cat, grain=5)
    assert not any("are unexplained" in n for r in right for n in r.notes)
