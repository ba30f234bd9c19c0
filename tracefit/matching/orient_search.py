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
from typing import Any, Iterable, Sequence

import numpy as np
from scipy.spatial.transform import Rotation

from tracefit.conventions import FrameSettings, axial_difference
from tracefit.crystal import proper_rotations
from tracefit.errors import TracefitInputError, real_array
from tracefit.matching.assign import identify_families
from tracefit.matching.candidates import as_candidate_set, candidate_set, predict_candidates
from tracefit.matching.checks import check_fraction, orientation_matrix
from tracefit.matching.likelihood import (
    DEFAULT_P_NONE,
    axial_logpdf,
    candidate_log_prior,
    mixture_log_evidence,
    none_log_density,
)
from tracefit.matching.observed import ObservedFamily, as_observed

__all__ = ["OrientationCandidate", "OrientationSearchResult", "search_orientations", "misorientation_deg"]


@dataclass
class OrientationCandidate:
    """One orientation consistent with the observed families.

    Attributes
    ----------
    g : ndarray, shape (3, 3)
        Orientation, v_crystal = g v_sample.
    euler_deg, partner_euler_deg : tuple of 3 float
        Bunge Euler angles of ``g`` and of the same orientation turned 180 deg about the
        surface normal (traces cannot tell them apart), degrees.
    log_evidence : float
        Summed log evidence of the families (best hypothesis each, known-direction penalty included).
    rms_residual_deg, max_residual_deg : float
        Residuals of the explained families to their assigned planes, degrees.
    assignment : list of dict
        Per family: ``angle_deg``, ``plane``, ``mode``, ``residual_deg`` (None where unexplained).
    n_explained : int
        Families explained by a plane.
    constraint_deviation_deg : float or None
        Angle between the known direction and its axis, degrees (with a known direction).
    uncertainty_deg : float
        Largest one-sigma orientation error from the assigned traces, degrees (inf: a free turn).
    weak_axis : tuple of 3 float or None
        Sample-frame axis of that largest error.

    Examples
    --------
    >>> c = OrientationCandidate(np.eye(3), (0.0, 0.0, 0.0), (180.0, 0.0, 0.0), -3.2, 0.1, 0.2, [], 2)
    >>> c.to_dict()["partner_euler_deg"], c.to_dict()["uncertainty_deg"]
    ([180.0, 0.0, 0.0], None)
    """

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
        """JSON form (angles to 3 decimals; non-finite uncertainty as None)."""
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
    """Result of :func:`search_orientations`: distinct solutions, best first.

    Attributes
    ----------
    candidates : list of OrientationCandidate
        Distinct solutions (up to symmetry and the 180 deg turn about the surface normal), best first.
    free_parameters : int
        Orientation parameters the data leave free (0 when the families fix it).
    n_families : int
        Families searched with.
    notes : list of str
        Plain-language remarks (free parameters, look-alike solutions, poorly fixed ones).

    Examples
    --------
    >>> OrientationSearchResult([], 1, 2, ["two families fix only 2 of 3 parameters"]).to_dict()["free_parameters"]
    1
    """

    candidates: list
    free_parameters: int
    n_families: int
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON form with every candidate's own ``to_dict()``."""
        return {
            "n_families": self.n_families,
            "free_parameters": self.free_parameters,
            "candidates": [c.to_dict() for c in self.candidates],
            "notes": list(self.notes),
        }


def misorientation_deg(g1: Any, g2: Any, rotations: np.ndarray | None = None) -> float:
    """Smallest rotation angle (deg) between two orientations, up to the crystal rotations given.

    Parameters
    ----------
    g1, g2 : ndarray, shape (3, 3), or orientations with ``as_matrix()``
        Orientations, v_crystal = g v_sample.
    rotations : ndarray, shape (K, 3, 3), optional
        Proper rotations of the crystal's point group (e.g.
        :func:`tracefit.crystal.proper_rotations`); identity only by default.

    Returns
    -------
    float
        Misorientation angle, degrees in [0, 180].

    Raises
    ------
    TracefitInputError
        When an orientation is not a rotation matrix.

    Examples
    --------
    >>> from tracefit.crystal import from_euler, lattice_preset, proper_rotations
    >>> a, b = from_euler((0, 0, 0)), from_euler((95, 0, 0))
    >>> round(misorientation_deg(a, b), 3), round(misorientation_deg(a, b, proper_rotations(lattice_preset("fcc"))), 3)
    (95.0, 5.0)
    """
    return _misorientation(orientation_matrix(g1, "g1"), orientation_matrix(g2, "g2"), rotations)


def _misorientation(g1: np.ndarray, g2: np.ndarray, rotations=None) -> float:
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
        self.log_prior = candidate_log_prior(cands.plane_ids, p_none)
        self.lnone = none_log_density(p_none)

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
        if best_only:
            return np.maximum(ll.max(axis=2), self.lnone).sum(axis=1)
        return mixture_log_evidence(ll, self.lnone, axis=2).sum(axis=1)


def _known_axis(known_axis) -> np.ndarray:
    """The sample axis of a known direction: 3 finite numbers, not all zero (default x)."""
    if known_axis is None:
        return np.array([1.0, 0.0, 0.0])
    axis = real_array(known_axis, "known_axis")
    if axis.shape != (3,) or not np.linalg.norm(axis) > 0:
        raise TracefitInputError(f"known_axis must be 3 numbers, not all zero, got {known_axis!r}")
    return axis


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
# Traces cannot tell an orientation from the same one turned 180 deg about the surface normal:
# g -> g Rz(180). Written exactly (tracefit.conventions.rotation_z(180) carries 1e-16 residues).
_RZ180 = np.diag([-1.0, -1.0, 1.0])


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


@dataclass
class _KnownDirection:
    """A crystal direction known to lie along a sample axis: its penalty and deviation."""

    dvec: np.ndarray
    ahat: np.ndarray
    tol_deg: float

    def deviations(self, GG: np.ndarray) -> np.ndarray:
        """(N,) angle (deg) between the known direction (g^T d, sample frame) and the axis."""
        v = np.einsum("nij,i->nj", GG, self.dvec)
        return np.degrees(np.arccos(np.clip(np.abs(v @ self.ahat) / np.linalg.norm(v, axis=1), 0.0, 1.0)))

    def deviation(self, g: np.ndarray) -> float:
        return float(self.deviations(np.asarray(g)[None])[0])

    def penalty(self, GG: np.ndarray) -> np.ndarray:
        return 0.5 * (self.deviations(GG) / self.tol_deg) ** 2


def _coarse_seeds(sc: _Scorer, G: np.ndarray, coarse_sigma: float, n_seeds: int, S: np.ndarray) -> list[int]:
    """Indices of the best coarse orientations, at least 8 deg apart up to symmetry."""
    scores = np.concatenate([sc.score(G[i:i + 4000], coarse_sigma) for i in range(0, len(G), 4000)])
    order = np.argsort(-scores)
    seeds: list[int] = []
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
    return seeds


def _distinct_solutions(refined: list, S: np.ndarray) -> list:
    """Refined (value, g) pairs, best first, merged up to symmetry and the 180 deg turn about z."""
    distinct = []
    for val, g in sorted(refined, key=lambda t: -t[0]):
        partner = g @ _RZ180
        if any(min(_misorientation(g, h, S), _misorientation(partner, h, S)) < 2.0 for _, h in distinct):
            continue
        distinct.append((val, g))
    return distinct


def _describe_solution(val, g, obs, lattice, cands, frame, p_none, known) -> OrientationCandidate:
    """One solution with its plane assignment, residuals and uncertainty."""
    from tracefit.crystal import to_euler

    ids = identify_families(obs, lattice, g, cands, frame=frame, orientation_sigma_deg=0.0, p_none=p_none)
    assign, res = [], []
    for o, r in zip(obs, ids):
        c = None if r.unexplained else r.best
        if c is not None:
            res.append(c.residual_deg)
        assign.append({
            "angle_deg": round(o.angle_deg, 3),
            "plane": None if c is None else list(c.plane),
            "mode": None if c is None else c.mode,
            "residual_deg": None if c is None else round(c.residual_deg, 4),
        })
    n_ex = len(res)
    res = np.abs(np.array(res)) if res else np.array([np.nan])
    unc, axis_w = _uncertainty(g, obs, ids, cands, frame, None if known is None else (known.dvec, known.ahat, known.tol_deg))
    e = tuple(float(x) for x in to_euler(g))
    ep = tuple(float(x) for x in to_euler(g @ _RZ180))
    return OrientationCandidate(g, e, ep, val, float(np.sqrt(np.nanmean(res**2))), float(np.nanmax(res)), assign,
                                n_ex,
                                None if known is None else known.deviation(g), unc, axis_w)


def _search_notes(obs, out, known, n_good: int) -> tuple[int, list[str]]:
    """Free parameters left by the data, and the plain-language notes of a search."""
    n_constraints = len(obs) + (2 if known is not None else 0)
    free = max(0, 3 - n_constraints)
    notes = []
    if free:
        notes.append(
            f"{len(obs)} families fix only {n_constraints} of the 3 orientation parameters: the solutions form a "
            f"{free}-parameter family and the listed orientations are samples along it; add a family, a known "
            "direction, or a second surface"
        )
    if known is None or any(known.deviation(c.g @ _RZ180) < 3.0 * known.tol_deg for c in out):
        notes.append("each solution is indistinguishable from the same orientation turned 180 deg about the surface normal (partner_euler_deg)")
    loose = [c for c in out if not math.isfinite(c.uncertainty_deg) or c.uncertainty_deg > 5.0]
    if loose and not free:
        notes.append(
            f"{len(loose)} of the solutions are poorly fixed (orientation uncertainty > 5 deg, see uncertainty_deg and "
            "weak_axis): steep planes' traces hardly change when the crystal tilts about an in-surface axis"
        )
    if len(out) > 1 and not free:
        shown = f" (the best {len(out)} are listed; raise max_solutions to see all)" if n_good > len(out) else ""
        notes.append(f"{n_good} distinct orientations (at least) explain the families about equally well (log evidence within 6){shown}; "
                     "more families, a known direction or a second surface would separate them")
    return free, notes


def _check_search_args(n_samples, n_seeds, max_solutions, direction_tol_deg, p_none):
    for name, v in (("n_samples", n_samples), ("n_seeds", n_seeds), ("max_solutions", max_solutions)):
        if not (isinstance(v, (int, np.integer)) and not isinstance(v, bool) and v >= 1):
            raise TracefitInputError(f"{name} must be a whole number >= 1, got {v!r}")
    if not (math.isfinite(direction_tol_deg) and direction_tol_deg > 0):
        raise TracefitInputError(f"direction_tol_deg must be a positive number of degrees, got {direction_tol_deg!r}")
    check_fraction(p_none, "p_none")


def search_orientations(
    observed: Sequence[ObservedFamily | float],
    lattice: Any,
    systems: Any,
    frame: FrameSettings | None = None,
    known_direction: Sequence[int] | None = None,
    known_axis: Sequence[float] | None = None,
    direction_tol_deg: float = 3.0,
    p_none: float = DEFAULT_P_NONE,
    n_samples: int = 40000,
    n_seeds: int = 40,
    max_solutions: int = 8,
    seed: int = 0,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
) -> OrientationSearchResult:
    """Find crystal orientations whose predicted traces explain the observed families.

    Parameters
    ----------
    observed : sequence of ObservedFamily (or angles, deg)
        At least two families seen in one grain.
    lattice : tracefit.crystal.Lattice
        The crystal lattice (symmetry for merging solutions, known directions).
    systems : iterable of DeformationSystem or CandidateSet
        Candidate systems.
    frame : FrameSettings, optional
        Orientation-data frame -> image.
    known_direction : sequence of 3 (or 4) ints, optional
        Crystal direction known to lie along ``known_axis`` (e.g. a growth axis).
    known_axis : sequence of 3 floats, optional
        Sample-frame axis of the known direction (default the load axis x when a direction is given).
    direction_tol_deg : float
        How far (deg, one sigma) the known direction may deviate from the axis.
    p_none : float
        Prior of "none of these", in [0, 1).
    n_samples : int
        Coarse random orientations (unconstrained search).
    n_seeds : int
        Best coarse orientations refined locally.
    max_solutions : int
        At most this many distinct solutions are reported.
    seed : int
        Seed of the random coarse orientations.
    modes, families : iterable of str, optional
        Filters of the candidate systems.

    Returns
    -------
    OrientationSearchResult

    Raises
    ------
    TracefitInputError
        For fewer than two families or a bad argument.

    Examples
    --------
    Three {111} traces of an fcc crystal at Euler (90, 90, 20), whose [001] lies along the
    sample x axis (a growth axis, say), fix the orientation up to the 180 deg turn about the
    surface normal that traces cannot see:

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> obs = [ObservedFamily(a, 0.2) for a in (120.9, 59.1, 142.0)]
    >>> res = search_orientations(obs, fcc, catalogue(fcc, ["slip"]), known_direction=(0, 0, 1), n_seeds=10)
    >>> best = res.candidates[0]
    >>> partner = best.g @ np.diag([-1.0, -1.0, 1.0])
    >>> res.free_parameters, best.n_explained, misorientation_deg(partner, from_euler((90, 90, 20)), proper_rotations(fcc)) < 0.5
    (0, 3, True)
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 25 lines.
    obs = as_observed(observed, None)
    if len(obs) < 2:
        raise TracefitInputError(f"an orientation search needs at least two band families, got {len(obs)}")
    _check_search_args(n_samples, n_seeds, max_solutions, direction_tol_deg, p_none)
    cands = as_candidate_set(systems, modes, families)
    oa = np.array([o.angle_deg for o in obs])
    os_ = np.array([max(o.angle_sigma_deg, 0.1) for o in obs])
    sc = _Scorer(cands, oa, os_, frame, p_none)
    S = proper_rotations(lattice)
    known = None
    if known_direction is not None:
        axis = _known_axis(known_axis)
        G, dvec = _constraint_family(lattice, known_direction, axis, 1440)
        known = _KnownDirection(dvec, axis / np.linalg.norm(axis), float(direction_tol_deg))
    else:
        G = Rotation.random(n_samples, random_state=seed).as_matrix().transpose(0, 2, 1)
    penalty = None if known is None else known.penalty
    seeds = _coarse_seeds(sc, G, 4.0 if known is None else 1.5, n_seeds, S)
    Gr = _refine_batch(sc, G[seeds], [2.0, 0.8, 0.0], penalty)
    vals = sc.score(Gr, 0.0, best_only=True) - (penalty(Gr) if penalty else 0.0)
    distinct = _distinct_solutions([(float(v), g) for v, g in zip(vals, Gr)], S)
    good = [(v, g) for v, g in distinct if v >= distinct[0][0] - 6.0]
    out = [_describe_solution(val, g, obs, lattice, cands, frame, p_none, known) for val, g in good[:max_solutions]]
    free, notes = _search_notes(obs, out, known, len(good))
    return OrientationSearchResult(out, free, len(obs), notes)
