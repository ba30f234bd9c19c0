"""One orientation error per grain in the joint assignment (issue 11, item 3).

References outside tracefit: scipy.stats.multivariate_normal (the linearised model's joint
density, covariance D + G Sigma G^T) and a Monte Carlo integral over exact rotations drawn with
scipy.spatial.transform.Rotation (the model the linearisation approximates).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation
from scipy.stats import multivariate_normal, norm

from tracefit.crystal import catalogue, from_euler, lattice_preset
from tracefit.matching import ObservedFamily, SharedRotation, identify_families
from tracefit.matching.joint import _coupling_correction

FCC = lattice_preset("fcc")
SLIP = catalogue(FCC, ["slip"])
BUNGE = (10.0, 80.0, 45.0)  # (1-11) at 65.15 deg and (1-1-1) at 134.85 deg, both inclined 84.2 deg
A_DEG, B_DEG = 65.15, 134.85


def _explained(results):
    return [1.0 - r.p_none for r in results]


def test_two_families_consistent_under_one_rotation_gain():
    # Both traces 3 deg counterclockwise of their prediction: one turn of the orientation about the
    # surface normal explains both, so together they are likelier real than each alone.
    g = from_euler(BUNGE)
    obs = [ObservedFamily(A_DEG + 3.0, 0.2), ObservedFamily(B_DEG + 3.0, 0.2)]
    alone = [identify_families([o], FCC, g, SLIP)[0] for o in obs]
    indep = identify_families(obs, FCC, g, SLIP, shared_orientation=False)
    shared = identify_families(obs, FCC, g, SLIP)
    assert all(0.5 < p < 0.95 for p in _explained(alone))  # each marginal alone
    np.testing.assert_allclose(_explained(indep), _explained(alone), atol=1e-6)
    assert all(s > i + 0.04 for s, i in zip(_explained(shared), _explained(indep)))
    assert [r.best.plane for r in shared] == [(1, -1, 1), (1, -1, -1)]


def test_two_families_needing_opposite_rotations_lose():
    g = from_euler(BUNGE)
    obs = [ObservedFamily(A_DEG + 3.0, 0.2), ObservedFamily(B_DEG - 3.0, 0.2)]
    indep = identify_families(obs, FCC, g, SLIP, shared_orientation=False)
    shared = identify_families(obs, FCC, g, SLIP)
    assert all(s < i - 0.04 for s, i in zip(_explained(shared), _explained(indep)))


def test_one_family_is_unchanged_by_the_coupling():
    g = from_euler(BUNGE)
    obs = [ObservedFamily(A_DEG + 2.0, 0.3)]
    a = identify_families(obs, FCC, g, SLIP)[0]
    b = identify_families(obs, FCC, g, SLIP, shared_orientation=False)[0]
    assert a.p_none == pytest.approx(b.p_none, abs=1e-12)


def test_correction_equals_the_multivariate_normal():
    # The correction added per joint state is log N(r; 0, D + G G^T) - sum_f log N(r_f; 0, s_f^2 + |G_f|^2).
    rng = np.random.default_rng(3)
    grads = rng.normal(0, 1.5, (4, 3))
    sr = SharedRotation(residual_deg=rng.normal(0, 1.0, (3, 4)), sigma_deg=np.array([0.3, 0.5, 0.2]), gradient=grads)
    keep = np.arange(4)
    a, z, single = sr.terms(keep)
    for state in [(0, 1, 2), (3, 0, 4), (2, 4, 4), (1, 3, 0)]:
        grids = [np.array([q]) for q in state]
        got = float(_coupling_correction(grids, a, z, single)[0])
        fam = [f for f, q in enumerate(state) if q < 4]
        r = np.array([sr.residual_deg[f, state[f]] for f in fam])
        G = np.array([grads[state[f]] for f in fam])
        D = np.diag(sr.sigma_deg[fam] ** 2)
        joint = multivariate_normal(np.zeros(len(fam)), D + G @ G.T).logpdf(r) if fam else 0.0
        singles = sum(norm(0, np.sqrt(sr.sigma_deg[f] ** 2 + grads[state[f]] @ grads[state[f]])).logpdf(
            sr.residual_deg[f, state[f]]) for f in fam)
        assert got == pytest.approx(joint - singles, abs=1e-9)


def _monte_carlo_marginals(g, obs_deg, sig_det, osig, fsig, p_none, n=200_000, seed=1):
    """P(family f is explained) by integrating over exact rotations of the whole grain (scipy)."""
    rng = np.random.default_rng(seed)
    normals = np.array([[1, 1, 1], [1, -1, 1], [1, 1, -1], [1, -1, -1]], float) / np.sqrt(3.0)
    n_s = normals @ g  # rows g^T n: sample frame
    rot = Rotation.from_rotvec(np.radians(rng.normal(0, osig, (n, 3))))
    frame = Rotation.from_rotvec(np.radians(np.c_[np.zeros((n, 2)), rng.normal(0, fsig, n)]))
    prior = (1.0 - p_none) / 4.0
    w = []
    for obs in obs_deg:
        like = []
        for q in range(4):
            v = (frame * rot).apply(n_s[q])
            pred = (np.degrees(np.arctan2(v[:, 1], v[:, 0])) + 90.0) % 180.0
            r = (obs - pred + 90.0) % 180.0 - 90.0
            like.append(prior * norm.pdf(r, 0, sig_det))
        w.append(np.array(like))  # (4, n)
    none = p_none / 180.0
    w1, w2 = w
    # joint over (q1, q2) with q1 != q2 (no two families on one plane), "none" shareable
    tot = (w1.sum(0) + none) * (w2.sum(0) + none) - np.sum(w1 * w2, axis=0)
    e1 = w1.sum(0) * (w2.sum(0) + none) - np.sum(w1 * w2, axis=0)
    e2 = w2.sum(0) * (w1.sum(0) + none) - np.sum(w1 * w2, axis=0)
    return e1.mean() / tot.mean(), e2.mean() / tot.mean()


@pytest.mark.parametrize("sign", [1.0, -1.0])
def test_linearised_model_follows_exact_rotations(sign):
    g = from_euler(BUNGE)
    obs = [A_DEG + 2.5, B_DEG + sign * 2.5]
    got = identify_families([ObservedFamily(a, 0.3) for a in obs], FCC, g, SLIP, orientation_sigma_deg=1.0,
                            frame_sigma_deg=0.5)
    mc = _monte_carlo_marginals(g, obs, 0.3, 1.0, 0.5, 0.05)
    np.testing.assert_allclose(_explained(got), mc, atol=0.01)  # the independent model is off by 0.03 and 0.47 here


def test_trace_rotation_gradient_matches_finite_rotations():
    # d(trace angle)/d(rotation about x, y, z) against scipy rotations of 1e-4 deg (central difference).
    from tracefit.predict import trace_angles, trace_rotation_gradient

    rng = np.random.default_rng(7)
    n = rng.normal(size=(20, 3))
    n = n[np.abs(n[:, 2]) / np.linalg.norm(n, axis=1) < 0.95]
    grad = trace_rotation_gradient(n)
    h = 1e-4
    for k in range(3):
        v = np.zeros(3)
        v[k] = np.radians(h)
        plus = trace_angles(Rotation.from_rotvec(v).apply(n))[0]
        minus = trace_angles(Rotation.from_rotvec(-v).apply(n))[0]
        fd = ((plus - minus + 90.0) % 180.0 - 90.0) / (2 * h)
        np.testing.assert_allclose(grad[:, k], fd, atol=1e-5)
    # |grad| = 1 / sin(inclination) (the spread the independent model uses)
    incl = trace_angles(n)[1]
    np.testing.assert_allclose(np.linalg.norm(grad, axis=1), 1 / np.sin(np.radians(incl)), rtol=1e-9)
