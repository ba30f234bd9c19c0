"""The matcher: probabilities, "none of these", ambiguity, joint assignment.

Predictions for the checks are made independently of tracefit.predict.traces: scipy's Rotation
(``Rotation.from_euler("ZXZ", bunge)`` is the crystal -> sample rotation, see
../shared/conventions.md) and the trace formula atan2(n_y, n_x) + 90 deg.
"""

import itertools
import re
import math

import numpy as np
import pytest
from scipy import stats
from scipy.integrate import quad
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.matching import (
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
    # and both make 35.26 deg with it: cos = (1 + 1 + 0) / (sqrt2 sqrt3), the cubic interplanar-angle
    # formula (tabulated in Cullity, Elements of X-ray Diffraction: {110}^{111} = 35.26 and 90 deg;
    # table location from memory). Their traces coincide, so no angle can tell them apart.
    g = np.array(Rotation.align_vectors([[0, 0, 1], [1, 0, 0]], [[1, 1, 0], [0, 0, 1]])[0].as_matrix()).T
    n_s = g.T @ FCC.plane_normal((1, 1, 1))
    ang = (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0
    res = identify_families([ObservedFamily(ang, 0.3)], FCC, g, catalogue(FCC, ("slip",)))[0]
    assert res.ambiguous and not res.unexplained
    planes = res.planes
    assert any(same_plane(p, (1, 1, 1)) for p in planes) and any(same_plane(p, (1, 1, -1)) for p in planes)
    for c in res.candidates:
        assert c.inclination_deg == pytest.approx(math.degrees(math.acos(2 / math.sqrt(6))), abs=1e-9)
    # the hint says what would separate them (second surface / load)
    text = " ".join(res.separation)
    assert "second surface" in text and "load" in text


def test_schmid_factor_hint_and_ranking_with_a_load():
    # Same (110) surface with the load along sample x = crystal [001]: (111)[10-1] and (11-1)[101]
    # both have m = 1/sqrt6 = 0.408 (Schmid's law, cos 54.74 * cos 45; the <100> value of Dieter,
    # Mechanical Metallurgy, from memory).
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
    # m = 16 / (14 sqrt 6) = 0.467 by Schmid's law: l.n = 4/sqrt42, l.d = 4/sqrt28 (the [-123]
    # mirror of the [123] case, whose primary system is (-111)[101]; a worked example of Dieter,
    # Mechanical Metallurgy, from memory). The crystal is set with [-123] along sample x and [210]
    # along sample y.
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


# ------------------------------------------------------------------ p_none = 0 (issue 16, item 2)
def _brute_force_marginals(logw, plane_ids):
    """Reference: every assignment with no plane taken twice, enumerated directly and summed with
    scipy.special.logsumexp (no pruning, no shortcut); "none" is the last column."""
    from scipy.special import logsumexp as sp_lse

    F, K = logw.shape
    states, weights = [], []
    for a in itertools.product(range(K), repeat=F):
        taken = [plane_ids[c] for c in a if c < K - 1]
        if len(taken) != len(set(taken)):
            continue
        states.append(a)
        weights.append(sum(logw[f, c] for f, c in enumerate(a)))
    w = np.exp(np.array(weights) - sp_lse(weights))
    out = np.zeros((F, K))
    for a, p in zip(states, w):
        for f, c in enumerate(a):
            out[f, c] += p
    return out


def _grain_logw(angles, bunge, p_none, cat):
    from tracefit.matching import candidate_set, grain_log_weights, predict_candidates

    cs = candidate_set(cat)
    g = from_euler(bunge)
    ang, incl, slope = predict_candidates(cs, g)
    obs = [ObservedFamily(a, 0.2) for a in angles]
    return grain_log_weights(obs, cs, g, ang[0], incl[0], slope[0], None, 1.0, 0.5, p_none, 0.0)[0], cs.plane_ids


def test_p_none_zero_gives_valid_probabilities_when_two_families_want_one_plane():
    # Regression (issue 16, item 2): p_none = 0 with two families near the (111) trace gave NaN.
    bunge = (0.0, 30.0, 0.0)
    a = scipy_trace(FCC, bunge, (1, 1, 1))[0]
    cat = catalogue(FCC, ("slip",))
    res = identify_families([ObservedFamily(a, 0.2), ObservedFamily(a + 0.3, 0.2)], FCC, from_euler(bunge), cat, p_none=0.0)
    for r in res:
        assert r.p_none == 0.0 and not r.unexplained
        assert r.best is not None and all(math.isfinite(c.probability) for c in r.candidates)
        assert sum(c.probability for c in r.candidates) == pytest.approx(1.0, abs=0.02)  # listed ones hold nearly all
    assert not same_plane(res[0].best.plane, res[1].best.plane)
    assert any(same_plane(r.best.plane, (1, 1, 1)) for r in res)
    # the joint marginals equal a direct enumeration of all assignments
    from tracefit.matching import joint_marginals

    logw, pids = _grain_logw([a, a + 0.3], bunge, 0.0, cat)
    assert not np.isfinite(logw[:, -1]).any()
    assert joint_marginals(logw, pids) == pytest.approx(_brute_force_marginals(logw, pids), abs=1e-9)


def test_p_none_zero_is_the_limit_of_a_vanishing_p_none():
    # Five families but only four {111} planes: one family must stay unexplained. p_none = 0 is the
    # limit p_none -> 0+, so it must agree with a tiny p_none (1e-300: the 'none' weight is still far
    # below every plane a family can take, and far above an impossible assignment).
    bunge = (0.0, 30.0, 0.0)
    cat = catalogue(FCC, ("slip",))
    traces = [scipy_trace(FCC, bunge, p)[0] for p in [(1, 1, 1), (1, 1, -1), (1, -1, 1), (1, -1, -1)]]
    obs = [ObservedFamily(a, 0.2) for a in traces + [traces[0] + 0.2]]
    zero = identify_families(obs, FCC, from_euler(bunge), cat, p_none=0.0)
    tiny = identify_families(obs, FCC, from_euler(bunge), cat, p_none=1e-300)
    for z, t in zip(zero, tiny):
        assert z.p_none == pytest.approx(t.p_none, abs=1e-9)
        assert [c.probability for c in z.candidates] == pytest.approx([c.probability for c in t.candidates], abs=1e-9)
    # exactly one family is 'none' in every surviving assignment
    assert sum(r.p_none for r in zero) == pytest.approx(1.0, abs=1e-9)
    for r in zero:
        assert r.unexplained == (r.p_none >= 0.5)
        assert r.unexplained or (r.best is not None and r.best.probability > 0.4)


def test_p_none_zero_in_the_frame_fit_and_the_orientation_search():
    # log(0) used to stop these two: the 'none' weight is now -inf, not an error.
    from tracefit.matching import fit_frame, search_orientations

    cat = catalogue(FCC, ("slip",))
    grains = {1: (10.0, 30.0, 0.0), 2: (70.0, 40.0, 20.0), 3: (130.0, 25.0, 50.0)}
    obs = [ObservedFamily(scipy_trace(FCC, b, p)[0], 0.3, grain=k) for k, b in grains.items() for p in [(1, 1, 1), (1, -1, 1)]]
    fit = fit_frame(obs, FCC, {k: from_euler(b) for k, b in grains.items()}, cat, p_none=0.0, n_bootstrap=0)
    assert abs(fit.rotation_deg) < 0.5 and math.isfinite(fit.rotation_sigma_deg)
    res = search_orientations([o.angle_deg for o in obs[:2]], FCC, cat, p_none=0.0, n_samples=2000, n_seeds=5)
    assert res.candidates and all(math.isfinite(c.log_evidence) for c in res.candidates)


# ------------------------------------------------------------------ arguments at the door
def test_load_given_as_text_is_read_with_parse_load():
    bunge = (23.0, 41.0, 67.0)
    obs = [ObservedFamily(scipy_trace(FCC, bunge, (1, 1, 1))[0], 0.3)]
    cat = catalogue(FCC, ("slip",))
    as_text = identify_families(obs, FCC, from_euler(bunge), cat, load="y")[0]
    parsed = identify_families(obs, FCC, from_euler(bunge), cat, load=parse_load("y", FCC))[0]
    assert as_text.best.best_system.schmid_factor == parsed.best.best_system.schmid_factor
    assert as_text.best.best_system.schmid_factor is not None


@pytest.mark.parametrize("kwargs,word", [
    ({"load": "sideways"}, "load"),
    ({"load": np.ones(4)}, "load"),
    ({"load": np.array([[1.0, 2.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]])}, "load"),
    ({"orientation_sigma_deg": -1.0}, "orientation_sigma_deg"),
    ({"frame_sigma_deg": float("nan")}, "frame_sigma_deg"),
    ({"p_none": 1.0}, "p_none"),
    ({"p_none": -0.1}, "p_none"),
    ({"schmid_weight": -2.0}, "schmid_weight"),
    ({"report_threshold": 2.0}, "report_threshold"),
])
def test_bad_arguments_name_the_parameter(kwargs, word):
    with pytest.raises(TracefitInputError, match=word):
        identify_families([10.0], FCC, np.eye(3), catalogue(FCC), **kwargs)


@pytest.mark.parametrize("g,word", [(np.eye(4), "g must be one 3x3"), (2.0 * np.eye(3), "not a rotation"),
                                    (np.diag([1.0, 1.0, -1.0]), "not a rotation"), ("0,0,0", "g")])
def test_bad_orientation_is_rejected(g, word):
    with pytest.raises(TracefitInputError, match=word):
        identify_families([10.0], FCC, g, catalogue(FCC))


def test_empty_systems_are_rejected():
    with pytest.raises(TracefitInputError, match="systems is empty"):
        identify_families([10.0], FCC, np.eye(3), [])


class _Orientation:
    """Stands in for an orientation type: only as_matrix(), returning g or a batch of one g."""

    def __init__(self, g, batch=False):
        self._g = np.asarray(g)[None] if batch else np.asarray(g)

    def as_matrix(self):
        return self._g


@pytest.mark.parametrize("batch", [False, True])
def test_orientation_objects_with_as_matrix_are_accepted(batch):
    bunge = (23.0, 41.0, 67.0)
    obs = _observed_for(bunge, [(1, 1, 1), (1, -1, 1)])
    cat = catalogue(FCC, ("slip",))
    ref = identify_families(obs, FCC, from_euler(bunge), cat)
    got = identify_families(obs, FCC, _Orientation(from_euler(bunge), batch), cat)
    assert [r.best.probability for r in got] == [r.best.probability for r in ref]
    grains = [ObservedFamily(o.angle_deg, o.angle_sigma_deg, grain=7) for o in obs]
    by_grain = identify_grains(grains, FCC, {7: _Orientation(from_euler(bunge), batch)}, cat)
    assert [r.best.probability for r in by_grain] == [r.best.probability for r in ref]


def test_every_name_exported_before_the_split_still_imports():
    import tracefit.matching as pkg

    before = (
        "ObservedFamily SystemChoice Candidate FamilyIdentification identify_families identify_grains "
        "observed_from_detection predicted_trace_sigma axial_logpdf CandidateSet candidate_set DEFAULT_P_NONE "
        "DEFAULT_REPORT_THRESHOLD DEFAULT_AMBIGUITY_RATIO identifications_to_json ArtefactDirection CrystalContext "
        "find_artefact_directions artefact_family_weights DEFAULT_P_MAP DEFAULT_LINE_SIGMA_DEG DEFAULT_MIN_WITNESSES "
        "DEFAULT_MAX_DIRECTIONS FrameFit fit_frame OrientationCandidate OrientationSearchResult search_orientations "
        "misorientation_deg FaceGeometry TwoFacePlane PlaneMatch plane_from_two_traces index_two_face interplanar_pairs "
        "trace_on_face MEASURED_CONVENTION DEFAULT_MEASURED_SIGMA_DEG DEFAULT_CLICK_PX DEFAULT_CRACK_K_SIGMA CSV_COLUMNS "
        "parse_angle_option read_measured_csv is_crack PlaneConsistency CrackIdentification plane_consistency "
        "identify_observed"
    ).split()
    assert [n for n in before if n not in pkg.__all__ or not hasattr(pkg, n)] == []
    assert len(set(pkg.__all__)) == len(pkg.__all__)


def test_a_family_sought_near_a_trace_is_weighed_as_known_to_lie_in_its_window():
    # A family the detector could only find within 3 deg of a predicted trace (search width 6 deg) is weighed
    # by Bayes' rule with that window as the condition: "none" is uniform over the window (1/6 per degree);
    # under a plane c the density is f_c / P_c and c's prior given the window prior_c P_c / M, so the weight is
    # prior_c f_c / M, M = sum prior_c P_c (P_c: the mass of c's density in the window). Checked against a
    # direct evaluation: f_c with scipy.stats.vonmises (the axial density is a von Mises on the doubled angle,
    # kappa = 1 / (4 sigma^2); docs/identify.md) and P_c by scipy's numerical quadrature of that density, with
    # no orientation or frame error and four {111} planes sharing 0.95 equally.
    bunge = (10.0, 20.0, 30.0)
    cat = catalogue(FCC, ("slip",))
    planes = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]
    traces = [scipy_trace(FCC, bunge, p)[0] for p in planes]
    angle, sigma = (traces[0] + 1.2) % 180.0, 0.6
    sought = (traces[0] - 0.5) % 180.0  # the trace as the chain predicted it (another frame estimate)
    kappa = 1.0 / (4.0 * math.radians(sigma) ** 2)

    def dens(a, t):  # per degree
        return stats.vonmises.pdf(2.0 * math.radians(a - t), kappa) * 2.0 * math.pi / 180.0

    def hand_p_none(width):
        weights = [0.95 / 4.0 * dens(angle, t) for t in traces]
        none = 0.05 / width
        if width < 180.0:
            mass = sum(0.25 * quad(dens, sought - width / 2, sought + width / 2, args=(t,), points=[t])[0]
                       for t in traces)
            weights = [w / mass for w in weights]
        return none / (none + sum(weights))

    got = {}
    for width in (180.0, 6.0):
        fam = ObservedFamily(angle, sigma, source="guided" if width < 180 else "detected", search_width_deg=width,
                             sought_at_deg=sought)
        res = identify_families([fam], FCC, from_euler(bunge), cat, orientation_sigma_deg=0.0, frame_sigma_deg=0.0)
        got[width] = res[0].p_none
        assert got[width] == pytest.approx(hand_p_none(width), rel=1e-5)
    # searched only where one of four planes predicts it: "none" keeps about its prior share instead of falling
    # by the density ratio a free angle would earn
    assert 3 * got[180.0] < got[6.0] < 0.1


def test_a_guided_family_on_a_plane_of_low_prior_keeps_more_doubt():
    # Per trace searched, true families turn up in proportion to their plane's prior (a Schmid prior, a user
    # weight), false ones at the same rate everywhere: "none" weighs p_none M / width (M the mean over planes of
    # the mass inside the window, by scipy's quadrature of the von Mises density) and a plane prior_c f_c, so
    # the odds of "none" scale with 1 / prior of the plane whose trace was sought
    from tracefit.matching.likelihood import family_log_weights

    pred, sigma, angle, window = [30.0, 80.0, 120.0, 160.0], 0.8, 31.0, (30.5, 6.0)
    kappa = 1.0 / (4.0 * math.radians(sigma) ** 2)

    def dens(a, t):
        return stats.vonmises.pdf(2.0 * math.radians(a - t), kappa) * 2.0 * math.pi / 180.0

    mass = np.mean([quad(dens, window[0] - 3.0, window[0] + 3.0, args=(t,), points=[t])[0] for t in pred])
    odds = {}
    for shares in ([0.5, 0.2, 0.2, 0.1], [0.1, 0.2, 0.2, 0.5]):
        prior = 0.95 * np.array(shares)
        logw, _, _ = family_log_weights([angle], [sigma], pred, [0.0] * 4, np.log(prior), 0.05, windows=[window])
        w = np.exp(logw[0])
        hand = np.append(prior * [dens(angle, t) for t in pred], 0.05 * mass / 6.0)
        assert w / w.sum() == pytest.approx(hand / hand.sum(), rel=1e-6)
        odds[shares[0]] = w[-1] / w[:-1].sum()
    assert odds[0.1] / odds[0.5] == pytest.approx(5.0, rel=1e-3)


def test_a_window_no_candidate_predicts_counts_no_more_than_an_open_search():
    # A guided family weighed against another orientation or frame, its window 8 deg from the nearest trace
    # (candidates land there far less often than a uniform angle would): the window must not make the
    # candidates look better than the angle alone does in an open search (the floor width / 180 of the mass)
    bunge = (10.0, 20.0, 30.0)
    cat = catalogue(FCC, ("slip",))
    nearest = scipy_trace(FCC, bunge, (1, -1, 1))[0]  # 73.3 deg; the next trace below lies at 177.3 - 180
    off = (nearest - 8.0) % 180.0
    kw = dict(orientation_sigma_deg=0.0, frame_sigma_deg=0.0)
    open_ = identify_families([ObservedFamily(off, 2.0)], FCC, from_euler(bunge), cat, **kw)[0]
    windowed = identify_families([ObservedFamily(off, 2.0, search_width_deg=6.0, sought_at_deg=off)], FCC,
                                 from_euler(bunge), cat, **kw)[0]
    assert 0.5 < open_.p_none < 0.999  # the plane 4 sigma away still holds some weight
    assert windowed.p_none == pytest.approx(open_.p_none, rel=1e-9)


def test_guided_detections_carry_their_search_window_into_identification():
    from tracefit.image.results import BandFamily
    from tracefit.matching import observed_from_detection

    open_fam = BandFamily(30.0, 0.2, 4, 10.0, 1.0, None, 2.0)
    guided = BandFamily(61.0, 0.4, 3, 12.0, 2.0, None, 1.0, sought_at=60.0, sought_within_deg=3.0)
    obs = observed_from_detection([open_fam, guided])
    assert [(o.source, o.search_width_deg, o.sought_at_deg) for o in obs] == [("detected", 180.0, None),
                                                                              ("guided", 6.0, 60.0)]
    assert guided.to_dict(with_lines=True)["sought_within_deg"] == 3.0
    for bad in (0.0, -6.0, 200.0, float("nan")):
        with pytest.raises(TracefitInputError, match="search width"):
            ObservedFamily(10.0, 0.5, search_width_deg=bad, sought_at_deg=10.0)
    with pytest.raises(TracefitInputError, match="sought_at_deg"):
        ObservedFamily(10.0, 0.5, search_width_deg=6.0)
    with pytest.raises(TracefitInputError, match="sought_at_deg"):
        ObservedFamily(10.0, 0.5, search_width_deg=6.0, sought_at_deg=float("inf"))


def test_a_family_found_on_line_sums_says_so_in_its_notes():
    # the detector's two guided searches judge a family on different counts (ridge pixels, line sums
    # of the band response); the notes of the identification say which, so a reader of the JSON or the
    # report knows what its significance counts
    from tracefit.image.results import BandFamily
    from tracefit.matching import observed_from_detection

    bunge = (10.0, 20.0, 30.0)
    cat = catalogue(FCC, ("slip",))
    trace = scipy_trace(FCC, bunge, (1, -1, 1))[0]
    fams = [BandFamily(trace, 0.4, 3, 12.0, 2.0, None, 1.0, sought_at=trace, sought_within_deg=3.0, sought_on=kind)
            for kind in ("ridge pixels", "line sums")]
    assert [f.to_dict(with_lines=True)["sought_on"] for f in fams] == ["ridge pixels", "line sums"]
    obs = observed_from_detection(fams)
    assert [o.sought_on for o in obs] == ["ridge pixels", "line sums"]
    res = identify_families(obs, FCC, from_euler(bunge), cat, orientation_sigma_deg=0.0, frame_sigma_deg=0.0)
    said = [any("line sums" in n for n in r.notes) for r in res]
    assert said == [False, True]
    assert all(any("guided search" in n for n in r.notes) for r in res)
    with pytest.raises(TracefitInputError, match="sought_on"):
        ObservedFamily(10.0, 0.5, search_width_deg=6.0, sought_at_deg=10.0, sought_on=3)


def test_the_window_mass_wraps_at_0_and_180_deg():
    # a window at 176-182 deg holds a trace at 1.5 deg (axial angles: 181.5 = 1.5); reference: scipy's
    # quadrature of the von Mises density on the doubled angle, which is periodic
    from tracefit.matching import window_log_mass

    kappa = 1.0 / (4.0 * math.radians(1.0) ** 2)
    ref = quad(lambda a: stats.vonmises.pdf(2.0 * math.radians(a - 1.5), kappa) * 2.0 * math.pi / 180.0,
               176.0, 182.0, points=[181.5])[0]
    assert ref > 0.6  # 0.69: from -5.5 to +0.5 sigma
    assert math.exp(window_log_mass(179.0, 6.0, [1.5], [1.0])) == pytest.approx(ref, rel=1e-6)
    assert math.exp(window_log_mass(179.0, 6.0, [91.5], [1.0])) == pytest.approx(6.0 / 180.0)  # the floor


@pytest.mark.parametrize("windows, word", [
    ([(30.0, 6.0), (40.0, 6.0)], "one (centre, width) pair per family"),
    ([(30.0, 0.0)], "widths"),
    ([(30.0, 200.0)], "widths"),
    ([(30.0, float("nan"))], "widths"),
    ([(float("nan"), 6.0)], "finite centre"),
    ([("a", 6.0)], "(centre, width) pairs"),
])
def test_bad_windows_are_refused_at_the_door(windows, word):
    from tracefit.matching.likelihood import family_log_weights

    with pytest.raises(TracefitInputError, match=re.escape(word)):
        family_log_weights([30.0], [0.5], [30.0, 80.0], [0.0, 0.0], np.log([0.475, 0.475]), 0.05, windows=windows)
