"""Crystal orientations consistent with observed band families, when no orientation is known.

Each family says: some candidate plane's normal, seen from the sample, is perpendicular to the
trace direction t (n_sample . t = 0). That is one equation per family on the three degrees of
freedom of an orientation. So, honestly:

* two families leave a one-parameter family of orientations (a curve in orientation space);
  the search returns samples along it and says so (``free_parameters = 1``);
* three or more families, or two families plus a known direction (e.g. a single crystal's
  growth axis along the load), usually fix the orientation up to a discrete set;
* traces never tell an orientation from the same one turned 180 deg about the surface normal
  (every axial trace angle is unchanged), so solutions come in such pairs unless a known
  direction separates them; both are reported as one solution with ``partner_euler_deg``.

Method: a coarse search over orientation space (random uniform rotations, or, with a known
direction, a fine scan of the turn about it), scored by the robust evidence of the matcher
(sum over families of log(p_none / 180 + sum_c prior_c f(r_c; s))) with an inflated spread
that is shrunk in stages to the detection sigma during local refinement (Nelder-Mead on a
rotation vector). Solutions are merged up to the lattice's proper rotations and the 180 deg
turn about the surface normal.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
from scipy.spatial.transform import Rotation

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.identify.matching import (
    DEFAULT_P_NONE,
    CandidateSet,
    ObservedFamily,
    axial_logpdf,
    logsumexp,
    candidate_set,
    predict_candidates,
)

__all__ = ["OrientationCandidate", "OrientationSearchResult", "search_orientations", "misorientation_deg"]


@dataclass
class OrientationCandidate:
    """One orientation consistent with the observed families."""

    g: np.ndarray
    euler_deg: tuple
    partner_euler_deg: tuple
    log_evidence: float
    rms_residual_deg: float
    max_residual_deg: float
    assignment: list
    n_explained: int
    constraint_deviation_deg: float | None = None
    uncertainty_deg: float = float("nan")
    weak_axis: tuple | None = None

    def to_dict(self) -> dict:
        u = self.uncertainty_deg
        return {
            "uncertainty_deg": None if not math.isfinite(u) else round(float(u), 3),
            "weak_axis": None if self.weak_axis is None else [round(float(x), 4) for x in self.weak_axis],
            "euler_deg": [round(float(x), 3) for x in self.euler_deg],
            "partner_euler_deg": [round(float(x), 3) for x in self.partner_euler_deg],
            "log_evidence": round(float(self.log_evidence), 3),
            "rms_residual_deg": round(float(self.rms_residual_deg), 4),
            "max_residual_deg": round(float(self.max_residual_deg), 4),
            "n_explained": int(self.n_explained),
            "assignment": self.assignment,
            "constraint_deviation_deg": None if self.constraint_deviation_deg is None else round(float(self.constraint_deviation_deg), 3),
        }


@dataclass
class OrientationSearchResult:
    """Result of :func:`search_orientations`: distinct solutions, best first."""

    candidates: list
    free_parameters: int
    n_families: int
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        return {
            "n_families": self.n_families,
            "free_parameters": self.free_parameters,
            "candidates": [c.to_dict() for c in self.candidates],
            "notes": list(self.notes),
        }


def misorientation_deg(g1, g2, rotations=None) -> float:
    """Smallest rotation angle (deg) between two orientations, up to the crystal rotations given."""
    g1 = np.asarray(g1, float)
    g2 = np.asarray(g2, float)
    S = np.eye(3)[None] if rotations is None else np.asarray(rotations, float)
    # candidate equivalents S g1; misorientation dg = S g1 g2^T
    d = np.einsum("nij,jk,lk->nil", S, g1, g2)
    tr = np.clip((np.trace(d, axis1=1, axis2=2) - 1.0) / 2.0, -1.0, 1.0)
    return float(np.degrees(np.arccos(tr.max())))


class _Scorer:
    def __init__(self, cands, oa, os_, frame, p_none):
        self.cands = cands
        self.oa = oa
        self.os = os_
        self.frame = frame
        npl = int(cands.plane_ids.max()) + 1
        counts = np.bincount(cands.plane_ids, minlength=npl)
        self.log_prior = np.log((1.0 - p_none) / npl / counts[cands.plane_ids])
        self.lnone = math.log(p_none) - math.log(180.0)

    def score(self, G, extra_sigma, best_only=False):
        """(N,) robust log evidence of N orientations (each family independently).

        ``best_only`` scores each family by its best hypothesis instead of the sum over all:
        then every exact solution scores the same, whereas the sum also rewards places where
        two candidate traces happen to meet (which would pull the refinement off the truth).
        """
        ang, incl, slope = predict_candidates(self.cands, G, self.frame)  # (N, P)
        r = axial_difference(self.oa[None, :, None], ang[:, None, :])  # (N, F, P)
        sig = np.sqrt(self.os[None, :, None] ** 2 + extra_sigma**2)
        ll = axial_logpdf(r, sig) + self.log_prior[None, None, :]
        none = np.full(ll.shape[:2] + (1,), self.lnone)
        full = np.concatenate([ll, none], axis=2)
        if best_only:
            return full.max(axis=2).sum(axis=1)
        return logsumexp(full, axis=2).sum(axis=1)


def _constraint_family(lattice, direction, axis, n_steps):
    d = np.asarray(lattice.direction_vector(direction), float)
    a = np.asarray(axis, float)
    a = a / np.linalg.norm(a)
    out = []
    for sign in (1.0, -1.0):
        # R0 (crystal -> sample) maps sign*d onto a; then turn about a.
        R0, _ = Rotation.align_vectors([a], [sign * d])
        for w in np.linspace(0.0, 360.0, n_steps, endpoint=False):
            R = Rotation.from_rotvec(a * math.radians(w)) * R0
            out.append(R.as_matrix().T)  # g = R^T
    return np.array(out), d


_AXES = np.vstack([np.eye(3), -np.eye(3)])


def _refine_batch(scorer, G, sigmas, penalty=None):
    """Pattern search on all seeds at once: try +-step turns about the 3 sample axes, halve on failure.

    ``penalty`` maps (N, 3, 3) orientations to (N,) penalties (added to -log evidence).
    """
    G = np.array(G, float)
    n = len(G)

    def cost(GG, s):
        c = -scorer.score(GG, s, best_only=True)
        if penalty is not None:
            c = c + penalty(GG)
        return c

    for s in sigmas:
        step = np.full(n, math.radians(max(2.0 * s, 0.5)))
        cur = cost(G, s)
        for _ in range(200):
            active = step > math.radians(0.002)
            if not active.any():
                break
            idx = np.flatnonzero(active)
            # neighbours: g R(delta)^T for the 6 axis directions
            rot = Rotation.from_rotvec((_AXES[None, :, :] * step[idx, None, None]).reshape(-1, 3)).as_matrix()
            trial = np.einsum("kij,klj->kil", np.repeat(G[idx], 6, axis=0), rot)
            tc = cost(trial, s).reshape(len(idx), 6)
            j = np.argmin(tc, axis=1)
            better = tc[np.arange(len(idx)), j] < cur[idx] - 1e-9
            win = idx[better]
            G[win] = trial.reshape(len(idx), 6, 3, 3)[better, j[better]]
            cur[win] = tc[better, j[better]]
            step[idx[~better]] *= 0.5
    return G


def _uncertainty(g, obs, ids, cands, frame, constraint=None):
    """First-order orientation uncertainty (deg) of a solution, from the assigned planes' traces.

    J[f, k] = d(trace angle of family f's plane) / d(turn about sample axis k); covariance
    (J^T W J)^-1 with W = 1 / sigma_f^2, plus the known direction's two perpendicular residuals
    (weight 1 / tol^2) when given. Returns the largest one-sigma angle and its axis (sample
    frame); inf when the data leave a free turn.
    """
    rows, w = [], []
    idx = {(cands.planes[i], cands.modes[i]): i for i in range(len(cands))}
    for o, r in zip(obs, ids):
        if r.best is None or r.unexplained:
            continue
        rows.append(idx[(r.best.plane, r.best.mode)])
        w.append(1.0 / max(o.angle_sigma_deg, 0.05) ** 2)
    h = 0.05
    H = np.zeros((3, 3))
    if rows:
        J = np.zeros((len(rows), 3))
        for k in range(3):
            rv = np.zeros(3)
            rv[k] = math.radians(h)
            ap, _, _ = predict_candidates(cands, g @ Rotation.from_rotvec(rv).as_matrix().T, frame)
            am, _, _ = predict_candidates(cands, g @ Rotation.from_rotvec(-rv).as_matrix().T, frame)
            J[:, k] = axial_difference(ap[0, rows], am[0, rows]) / (2 * h)
        H += J.T @ (J * np.array(w)[:, None])
    if constraint is not None:
        dvec, ahat, tol = constraint
        ds = g.T @ (dvec / np.linalg.norm(dvec))  # known direction in sample coordinates
        u1 = np.cross(ahat, [1.0, 0.0, 0.0] if abs(ahat[0]) < 0.9 else [0.0, 1.0, 0.0])
        u1 /= np.linalg.norm(u1)
        u2 = np.cross(ahat, u1)
        # a turn w about sample axis e_k moves ds by w (e_k x ds)
        Jc = np.array([[u @ np.cross(np.eye(3)[k], ds) for k in range(3)] for u in (u1, u2)])
        H += Jc.T @ Jc / tol**2
    vals, vecs = np.linalg.eigh(H)
    if vals[0] <= 1e-9 * max(vals[-1], 1e-12):
        return float("inf"), tuple(vecs[:, 0])
    return float(1.0 / math.sqrt(vals[0])), tuple(vecs[:, 0])


def search_orientations(
    observed: Sequence[ObservedFamily],
    lattice,
    systems,
    frame=None,
    known_direction=None,
    known_axis=None,
    direction_tol_deg: float = 3.0,
    p_none: float = DEFAULT_P_NONE,
    n_samples: int = 40000,
    n_seeds: int = 40,
    max_solutions: int = 8,
    seed: int = 0,
    modes=None,
    families=None,
) -> OrientationSearchResult:
    """Find crystal orientations whose predicted traces explain the observed families.

    Parameters
    ----------
    observed : sequence of ObservedFamily (or angles, deg)
        At least two families seen in one grain.
    lattice : Lattice
    systems : iterable of DeformationSystem or CandidateSet
    frame : FrameSettings, optional
    known_direction : sequence of 3 (or 4) ints, optional
        Crystal direction known to lie along ``known_axis`` (e.g. a growth axis).
    known_axis : sequence of 3 floats, optional
        Sample-frame axis of the known direction (default the load axis x when a direction is given).
    direction_tol_deg : float
        How far (deg, one sigma) the known direction may deviate from the axis.
    n_samples : int
        Coarse random orientations (unconstrained search).
    n_seeds : int
        Best coarse orientations refined locally.
    max_solutions : int
        At most this many distinct solutions are reported.

    Returns
    -------
    OrientationSearchResult
    """
    from tracefit.identify.matching import _as_observed, identify_families
    from tracefit.crystal import to_euler
    from tracefit.crystal import proper_rotations

    obs = _as_observed(observed, None)
    if len(obs) < 2:
        raise TracefitInputError(f"an orientation search needs at least two band families, got {len(obs)}")
    cands = systems if isinstance(systems, CandidateSet) else candidate_set(systems, modes, families)
    oa = np.array([o.angle_deg for o in obs])
    os_ = np.array([max(o.angle_sigma_deg, 0.1) for o in obs])
    sc = _Scorer(cands, oa, os_, frame, p_none)
    S = proper_rotations(lattice)
    rz180 = np.diag([-1.0, -1.0, 1.0])
    penalty = None
    if known_direction is not None:
        axis = np.array([1.0, 0.0, 0.0]) if known_axis is None else np.asarray(known_axis, float)
        G, dvec = _constraint_family(lattice, known_direction, axis, 1440)
        ahat = axis / np.linalg.norm(axis)

        def devs(GG):
            v = np.einsum("nij,i->nj", GG, dvec)  # known crystal direction in sample coordinates (g^T d)
            return np.degrees(np.arccos(np.clip(np.abs(v @ ahat) / np.linalg.norm(v, axis=1), 0.0, 1.0)))

        def dev(g):
            return float(devs(np.asarray(g)[None])[0])

        def penalty(GG):
            return 0.5 * (devs(GG) / direction_tol_deg) ** 2
    else:
        G = Rotation.random(n_samples, random_state=seed).as_matrix().transpose(0, 2, 1)
        dev = None
    coarse_sigma = 4.0 if known_direction is None else 1.5
    scores = np.concatenate([sc.score(G[i:i + 4000], coarse_sigma) for i in range(0, len(G), 4000)])
    order = np.argsort(-scores)
    seeds = []
    cos_lim = math.cos(math.radians(8.0))
    for i in order[: 40 * n_seeds]:
        if len(seeds) >= n_seeds:
            break
        if seeds:
            # misorientation to all seeds, up to symmetry: trace of S g_i g_j^T
            d = np.einsum("sab,bc,jdc->sjad", S, G[i], G[seeds])
            tr = (np.trace(d, axis1=2, axis2=3) - 1.0) / 2.0
            if tr.max() > cos_lim:
                continue
        seeds.append(int(i))
    stages = [2.0, 0.8, 0.0]
    Gr = _refine_batch(sc, G[seeds], stages, penalty)
    vals = sc.score(Gr, 0.0, best_only=True) - (penalty(Gr) if penalty else 0.0)
    refined = [(float(v), g) for v, g in zip(vals, Gr)]
    refined.sort(key=lambda t: -t[0])
    # merge up to symmetry and the 180-degree turn about the surface normal
    distinct = []
    for val, g in refined:
        partner = g @ rz180
        if any(min(misorientation_deg(g, h, S), misorientation_deg(partner, h, S)) < 2.0 for _, h in distinct):
            continue
        distinct.append((val, g))
    best = distinct[0][0]
    good = [(v, g) for v, g in distinct if v >= best - 6.0]
    keep = good[:max_solutions]
    out = []
    for val, g in keep:
        ids = identify_families(obs, lattice, g, cands, frame=frame, orientation_sigma_deg=0.0, p_none=p_none)
        assign, res = [], []
        n_ex = 0
        for o, r in zip(obs, ids):
            c = r.best
            if c is not None and not r.unexplained:
                n_ex += 1
                res.append(c.residual_deg)
            assign.append({
                "angle_deg": round(o.angle_deg, 3),
                "plane": None if c is None or r.unexplained else list(c.plane),
                "mode": None if c is None or r.unexplained else c.mode,
                "residual_deg": None if c is None or r.unexplained else round(c.residual_deg, 4),
            })
        res = np.abs(np.array(res)) if res else np.array([np.nan])
        unc, axis_w = _uncertainty(g, obs, ids, cands, frame, None if known_direction is None else (dvec, ahat, direction_tol_deg))
        e = tuple(float(x) for x in to_euler(g))
        ep = tuple(float(x) for x in to_euler(g @ rz180))
        out.append(OrientationCandidate(g, e, ep, val, float(np.sqrt(np.nanmean(res**2))), float(np.nanmax(res)), assign, n_ex,
                                        None if dev is None else dev(g), unc, axis_w))
    n_constraints = len(obs) + (2 if known_direction is not None else 0)
    free = max(0, 3 - n_constraints)
    notes = []
    if free:
        notes.append(
            f"{len(obs)} families fix only {n_constraints} of the 3 orientation parameters: the solutions form a "
            f"{free}-parameter family and the listed orientations are samples along it; add a family, a known "
            "direction, or a second surface"
        )
    if known_direction is None or any(dev(c.g @ rz180) < 3.0 * direction_tol_deg for c in out):
        notes.append("each solution is indistinguishable from the same orientation turned 180 deg about the surface normal (partner_euler_deg)")
    loose = [c for c in out if not math.isfinite(c.uncertainty_deg) or c.uncertainty_deg > 5.0]
    if loose and not free:
        notes.append(
            f"{len(loose)} of the solutions are poorly fixed (orientation uncertainty > 5 deg, see uncertainty_deg and "
            "weak_axis): steep planes' traces hardly change when the crystal tilts about an in-surface axis"
        )
    if len(keep) > 1 and not free:
        shown = f" (the best {len(keep)} are listed; raise max_solutions to see all)" if len(good) > len(keep) else ""
        notes.append(f"{len(good)} distinct orientations (at least) explain the families about equally well (log evidence within 6){shown}; "
                     "more families, a known direction or a second surface would separate them")
    return OrientationSearchResult(out, free, len(obs), notes)
