"""Map-level surface artefacts (tracefit.matching.artefacts) through the matcher (identify_grains).

Basis of the checks:
* continuity cue: a polishing scratch is a straight surface line and keeps one image angle across
  grain boundaries, a slip or twin trace turns with the crystal orientation (common practice,
  no source);
* traces of a plane shared by two grains coincide (a twin plane of an fcc annealing twin is
  common to both sides: Sigma-3 = 180 deg about the <111> twin plane normal, from memory), so a
  real system may predict one angle in two grains and must not be called an artefact;
* reference geometry comes from scipy's Rotation, not from tracefit.predict.traces: the trace of a plane
  with sample-frame normal n is at atan2(n_y, n_x) + 90 deg (the intersection of the plane with
  the surface z = 0);
* the Bayes factor is checked against scipy.integrate.quad of the same integral.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate
from scipy.spatial.transform import Rotation

from tracefit.matching import find_artefact_directions
from tracefit.crystal import lattice_preset
from tracefit.matching import (
    ObservedFamily,
    grain_log_weights,
    axial_logpdf,
    candidate_set,
    identifications_to_json,
    identify_families,
    identify_grains,
    logsumexp,
    predict_candidates,
)
from tracefit.crystal import catalogue

FCC = lattice_preset("fcc")
CAT = catalogue(FCC)
N111 = np.array([[1, 1, 1], [-1, 1, 1], [1, -1, 1], [1, 1, -1]], float) / math.sqrt(3.0)


def _trace(R, n_c):
    n = R.apply(n_c)
    return float((math.degrees(math.atan2(n[1], n[0])) + 90.0) % 180.0), float(math.degrees(math.acos(min(abs(n[2]), 1.0))))


def _axial(a):
    return (a + 90.0) % 180.0 - 90.0


def _noisy(R, rng, sig=1.0):
    return (Rotation.from_rotvec(np.radians(rng.normal(0, sig, 3))) * R).as_matrix().T


def _real_families(R, grain, rng, n=2):
    """The n steepest {111} planes' traces, 0.3 deg detection noise."""
    tr = sorted((_trace(R, nc) for nc in N111), key=lambda t: -t[1])[:n]
    return [ObservedFamily(a + rng.normal(0, 0.3), 0.3, grain=grain) for a, _ in tr]


def test_common_scratch_angle_across_grains_is_flagged():
    # continuity cue (common practice, no source): one straight scratch crosses 5 of 6 grains
    rng = np.random.default_rng(11)
    Rs = {k: Rotation.random(random_state=100 + k) for k in range(6)}
    # put the scratch 0.4 deg from the predicted trace of a plane of grain 0 that carries no bands
    # (its third steepest), where the angle alone cannot call it
    third = sorted(range(4), key=lambda i: -_trace(Rs[0], N111[i])[1])[2]
    theta = (_trace(Rs[0], N111[third])[0] + 0.4) % 180.0
    obs, scratch = [], []
    for k, R in Rs.items():
        obs += _real_families(R, k, rng)
        if k < 5:
            scratch.append(len(obs))
            obs.append(ObservedFamily((theta + rng.normal(0, 0.3)) % 180.0, 0.3, grain=k))
    ori = {k: _noisy(R, rng) for k, R in Rs.items()}
    res = identify_grains(obs, FCC, ori, CAT)
    off = identify_grains(obs, FCC, ori, CAT, artefacts=False)
    for i in scratch:
        assert res[i].unexplained, (i, res[i].p_artefact, res[i].p_none)
        assert res[i].p_artefact > 0.5
        assert res[i].unexplained_reason.startswith("surface artefact (continues across grains at")
        assert abs(_axial(res[i].artefact_angle_deg - theta)) < 0.5
    real = [i for i in range(len(obs)) if i not in scratch]
    assert not any(res[i].unexplained for i in real)
    # the scratch in grain 0 sits on a predicted trace: per-grain matching alone keeps it
    assert not off[scratch[0]].unexplained
    d = identifications_to_json(res)["families"][scratch[0]]
    assert d["p_artefact"] > 0.5 and d["unexplained"] is True
    for key in ("angle_deg", "grain", "unexplained", "ambiguous", "candidates"):
        assert key in d


def _twin_pair_map(rng):
    """Grains 0 and 1 twin-related across the (111) plane (180 deg about its normal), both slipping on it."""
    RA = Rotation.random(random_state=7)
    n_s = RA.apply(N111[0])
    RB = Rotation.from_rotvec(math.pi * n_s) * RA
    assert abs(_axial(_trace(RA, N111[0])[0] - _trace(RB, N111[0])[0])) < 1e-9  # the shared plane's trace
    Rs = {0: RA, 1: RB}
    Rs.update({k: Rotation.random(random_state=50 + k) for k in range(2, 6)})
    a111 = _trace(RA, N111[0])[0]
    obs = [ObservedFamily(a111 + rng.normal(0, 0.3), 0.3, grain=0), ObservedFamily(a111 + rng.normal(0, 0.3), 0.3, grain=1)]
    for k in range(2, 6):
        obs += _real_families(Rs[k], k, rng)
    return obs, {k: _noisy(R, rng) for k, R in Rs.items()}


@pytest.mark.parametrize("min_witnesses", [3, 2])
def test_real_plane_shared_by_two_grains_is_not_killed(min_witnesses):
    # a twin plane common to both sides (from memory: fcc Sigma-3) predicts one trace in both grains
    rng = np.random.default_rng(3)
    obs, ori = _twin_pair_map(rng)
    res = identify_grains(obs, FCC, ori, CAT, artefact_options={"min_witnesses": min_witnesses})
    for r in res[:2]:
        assert not r.unexplained
        assert r.p_artefact < 0.05
        assert r.best is not None
    # and the plane named is the shared one: its trace in each grain's own orientation is the observed angle
    for k in (0, 1):
        assert abs(_axial(res[k].best.predicted_deg - obs[k].angle_deg)) < 3.0


NSUB = 10


def test_subgrains_with_one_continuing_trace_are_one_witness():
    # ten subgrains 0.3 deg apart (low-angle boundaries) carry the same slip trace: not an artefact
    rng = np.random.default_rng(5)
    parent = Rotation.random(random_state=21)
    Rs = {k: Rotation.from_rotvec(np.radians(rng.normal(0, 0.3, 3))) * parent for k in range(NSUB)}
    Rs.update({k: Rotation.random(random_state=60 + k) for k in range(NSUB, NSUB + 3)})
    a0 = sorted((_trace(parent, nc) for nc in N111), key=lambda t: -t[1])[0][0]
    obs = [ObservedFamily(_trace(Rs[k], N111[np.argmax([_trace(parent, nc)[1] for nc in N111])])[0] + rng.normal(0, 0.3),
                          0.3, grain=k) for k in range(NSUB)]
    for k in range(NSUB, NSUB + 3):
        obs += _real_families(Rs[k], k, rng)
    ori = {k: _noisy(R, rng, 0.5) for k, R in Rs.items()}
    gs = {k: 0.5 for k in ori}
    res = identify_grains(obs, FCC, ori, CAT, grain_sigma_deg=gs)
    assert all(abs(_axial(o.angle_deg - a0)) < 2.0 for o in obs[:NSUB])
    assert not any(r.unexplained for r in res[:NSUB])
    assert all(r.p_artefact < 0.05 for r in res[:NSUB])
    # the guard is what saves them: counted as independent witnesses, they would look like a scratch
    cs = candidate_set(CAT)
    l0 = []
    for o in obs:
        ang, incl, slope = predict_candidates(cs, ori[o.grain])
        l0.append(logsumexp(grain_log_weights([o], cs, ori[o.grain], ang[0], incl[0], slope[0], None, 0.5, 0.5, 0.05, 0.0)[0]))
    a = np.array([o.angle_deg for o in obs])
    unguarded = find_artefact_directions(a, np.full(len(a), 0.3), [o.grain for o in obs], np.array(l0), context=None)
    assert unguarded and unguarded[0].p_exists > 0.5


def test_nothing_to_go_on_leaves_results_unchanged():
    rng = np.random.default_rng(8)
    R = Rotation.random(random_state=3)
    g = _noisy(R, rng)
    obs = _real_families(R, 1, rng, n=3) + [ObservedFamily(95.0, 0.3, grain=1)]
    one = identify_families(obs, FCC, g, CAT)
    many = identify_grains(obs, FCC, {1: g}, CAT)  # a single grain: no map to compare across
    for a, b in zip(one, many):
        assert a.p_none == pytest.approx(b.p_none, abs=1e-12)
        assert [c.probability for c in a.candidates] == pytest.approx([c.probability for c in b.candidates], abs=1e-12)
        assert b.p_artefact == 0.0
    # a map without any common angle: the artefact model finds nothing and changes nothing
    Rs = {k: Rotation.random(random_state=200 + k) for k in range(6)}
    obs = [f for k, Rk in Rs.items() for f in _real_families(Rk, k, rng)]
    ori = {k: _noisy(Rk, rng) for k, Rk in Rs.items()}
    on = identify_grains(obs, FCC, ori, CAT)
    off = identify_grains(obs, FCC, ori, CAT, artefacts=False)
    for a, b in zip(on, off):
        assert a.p_none == pytest.approx(b.p_none, abs=1e-12) and a.p_artefact == 0.0
        assert [c.probability for c in a.candidates] == pytest.approx([c.probability for c in b.candidates], abs=1e-12)


def test_bayes_factor_matches_direct_integration():
    # B = int dtheta/180 int dpi prod_f (1 - pi + pi R_f(theta)), with a uniform prior on pi
    rng = np.random.default_rng(2)
    a = np.concatenate([40.0 + rng.normal(0, 0.3, 4), rng.uniform(0, 180, 8)])
    s = np.full(len(a), 0.3)
    log_l0 = np.full(len(a), math.log(1.0 / 180.0))  # flat crystallographic density
    grains = list(range(len(a)))
    (d,) = find_artefact_directions(a, s, grains, log_l0, max_directions=1)
    s_eff = math.hypot(0.3, 0.2)

    def integrand(pi, th):
        R = np.exp(axial_logpdf(_axial(a - th), s_eff) - log_l0)
        return float(np.prod(1.0 - pi + pi * R)) / 180.0

    lo, hi = 40.0 - 3.0, 40.0 + 3.0  # the module integrates the peak's +-3 deg window
    B, _ = integrate.dblquad(integrand, lo, hi, 0.0, 1.0, epsabs=1e-12, epsrel=1e-6)
    assert d.log10_bayes_factor == pytest.approx(math.log10(B), abs=0.05)
    assert d.n_witnesses == 4 and abs(_axial(d.angle_deg - 40.0)) < 0.3


def test_cli_reports_the_artefact_on_a_measured_map(run_cli, tmp_path):
    # the same continuity cue through tracefit identify --measured (grain column) --orientations --json
    import json

    from tracefit.maps import write_orientation_table

    rng = np.random.default_rng(4)
    Rs = {k: Rotation.random(random_state=300 + k) for k in range(1, 7)}
    theta = 123.4
    rows = ["grain,angle_deg,sigma_deg"]
    for k, R in Rs.items():
        rows += [f"{k},{o.angle_deg:.3f},0.3" for o in _real_families(R, k, rng)]
        rows.append(f"{k},{theta + rng.normal(0, 0.3):.3f},0.3")
    (tmp_path / "lines.csv").write_text("\n".join(rows) + "\n")
    write_orientation_table(tmp_path / "grains.csv", {k: _noisy(R, rng) for k, R in Rs.items()})
    args = ["identify", "--lattice", "fcc", "--orientations", str(tmp_path / "grains.csv"), "--measured", str(tmp_path / "lines.csv"),
            "--no-frame-check"]
    code, out, err = run_cli(*args, "--json")
    assert code == 0, err
    d = json.loads(out)
    art = [f for f in d["families"] if abs(_axial(f["angle_deg"] - theta)) < 1.5]
    assert len(art) == 6 and all(f["unexplained"] and f["p_artefact"] > 0.5 for f in art)
    assert all("surface artefact" in f["unexplained_reason"] for f in art)
    assert len(d["artefacts"]) == 1 and abs(d["artefacts"][0]["angle_deg"] - theta) < 0.5
    code, out, err = run_cli(*args, "--no-artefacts", "--json")
    assert code == 0 and json.loads(out)["artefacts"] is None
    code, out, err = run_cli(*args)
    assert code == 0 and "surface artefact (continues across grains at 123." in out


def test_line_continuation_across_a_grain_boundary():
    # detection cue (common practice, no source): a scratch runs on straight through the boundary;
    # a band stops there, or (slip transfer) goes on in the neighbour at another angle
    import cv2

    from tracefit.image import line_continuation
    from tracefit.image import BandLine

    rng = np.random.default_rng(0)
    img = 0.5 + rng.normal(0, 0.01, (200, 200))
    labels = np.ones((200, 200), np.int64)
    labels[:, 100:] = 2
    cv2.line(img, (0, 40), (199, 155), 0.2, 2)  # scratch across both grains
    cv2.line(img, (10, 190), (99, 100), 0.2, 2)  # band of grain 1 ending at the boundary
    cv2.line(img, (99, 100), (199, 80), 0.2, 2)  # a band in grain 2 at another angle from the same point
    cv2.line(img, (10, 10), (60, 10), 0.2, 2)  # a band ending inside grain 1
    r_at = 40 + (155 - 40) * 98 / 199
    scratch = BandLine(0.0, 40.0, 98.0, r_at, 0.0)
    band = BandLine(10.0, 190.0, 98.0, 101.0, 0.0)
    short = BandLine(10.0, 10.0, 60.0, 10.0, 0.0)
    assert line_continuation(img, labels, 1, [scratch]) == 1.0  # the image-edge end is not tested
    assert line_continuation(img, labels, 1, [band]) == 0.0
    assert line_continuation(img, labels, 1, [short]) is None
    assert line_continuation(img, labels, 1, [scratch, band]) == 0.5


def test_unknown_artefact_option_is_named():
    from tracefit.errors import TracefitInputError

    obs = [ObservedFamily(30.0, 0.3, grain=1)]
    with pytest.raises(TracefitInputError, match="artefact_options.*p_mpa"):
        identify_grains(obs, FCC, {1: np.eye(3)}, CAT, artefact_options={"p_mpa": 0.5})


def _slip_line_map(seed, n_cross, n_grains):
    """n_cross grains turned about the surface normal so that their steepest {111} trace lies on one
    image angle theta (a slip line carried across the boundaries), each with a family there."""
    rng = np.random.default_rng(seed)
    theta = rng.uniform(0, 180)
    Rs, obs, line = {}, [], []
    for k in range(n_grains):
        R = Rotation.random(random_state=1000 * seed + k)
        if k < n_cross:
            i = max(range(4), key=lambda i: _trace(R, N111[i])[1])
            R = Rotation.from_rotvec([0.0, 0.0, math.radians(theta - _trace(R, N111[i])[0])]) * R
            line.append(len(obs))
            obs.append(ObservedFamily((theta + rng.normal(0, 0.3)) % 180.0, 0.3, grain=k))
        else:
            obs += _real_families(R, k, rng)
        Rs[k] = R
    return obs, {k: _noisy(R, rng) for k, R in Rs.items()}, line


@pytest.mark.parametrize("seed", [1, 4, 9])
def test_a_line_that_fits_a_plane_in_every_grain_it_crosses_is_slip_not_a_scratch(seed):
    # slip transfer: the same straight line crosses 7 grains and lies on a {111} trace in each
    # (geometry from scipy's Rotation and the trace formula; continuity cue: common practice, no source)
    obs, ori, line = _slip_line_map(seed, n_cross=7, n_grains=8)
    res = identify_grains(obs, FCC, ori, CAT)
    for i in line:
        assert not res[i].unexplained, (i, res[i].p_artefact, res[i].unexplained_reason)
        assert res[i].p_artefact < 0.05
        assert res[i].best is not None and abs(_axial(res[i].best.predicted_deg - obs[i].angle_deg)) < 4.0
