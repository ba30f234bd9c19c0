"""Joint assignment of the families of one grain: no two families on one plane.

Two band families of one grain cannot both be the trace of the same plane (they would be
parallel), so the probabilities of a grain's families are the exact marginals over all
assignments in which no two families take the same plane (slip and twin on one plane count
as one plane); "none of these" (and a surface artefact, folded into the same column) may be
taken by any number of families.

One orientation error per grain: a wrong orientation (or frame rotation) moves all of a grain's
predicted traces together, so the families of a grain are not independent given their
planes. Linearised, trace c moves by ``G_c . u`` for a rotation ``u ~ N(0, I)`` (``G_c`` the
trace's rotation gradient scaled by the square root of the rotation covariance,
:class:`SharedRotation`), and the weight of a joint assignment is the integral over that one
rotation: a Gaussian with covariance ``D + G Sigma G^T`` (``D`` the detection variances). Each
family's own weight (``logw``) already holds its one-family marginal, so the enumeration adds
the exact Gaussian correction ``log N_joint - sum_f log N_f`` per joint state (zero for one
family): families that one rotation explains together gain, families that need opposite
rotations lose. Planes whose trace spread exceeds :data:`MAX_COUPLED_SIGMA_DEG` (nearly in the
surface, where the linearisation fails) stay independent, and so does a family-plane pair whose
residual exceeds :data:`MAX_COUPLED_RESIDUAL` combined sigmas.

Everything runs in log space. With ``p_none = 0`` the "none" column is -inf; when the
exclusion rule then leaves no assignment (more families than planes, or families pinned to
one plane) the answer is the limit p_none -> 0+: the assignments with the fewest families
on "none" carry all the weight, so probabilities stay defined.
"""

from __future__ import annotations

import itertools

import numpy as np
from numpy.typing import ArrayLike

from dataclasses import dataclass

from tracefit.matching.likelihood import logsumexp

__all__ = ["joint_marginals", "plane_log_weights", "SharedRotation", "MAX_COUPLED_SIGMA_DEG", "MAX_COUPLED_RESIDUAL"]

#: Planes whose predicted-trace spread from the shared rotation exceeds this (deg) are left out of
#: the coupling: there the trace angle is far from linear in the rotation.
MAX_COUPLED_SIGMA_DEG = 10.0
#: A family-plane pair whose residual exceeds this many combined sigmas stays out of the coupling:
#: the rotation that would explain it is too large for the linearisation, and the axial density
#: of ``logw`` no longer follows the Gaussian there.
MAX_COUPLED_RESIDUAL = 4.0

# Planes more than e^-14 below a family's best hypothesis cannot change any marginal
# noticeably; at most this many planes per family enter the exact enumeration (speed).
_PRUNE_LOG = 14.0
_MAX_PLANES_PER_FAMILY = 12
MAX_STATES = 3_000_000


@dataclass
class SharedRotation:
    """The one orientation (and frame) error of a grain, linearised, for the joint assignment.

    Attributes
    ----------
    residual_deg : ndarray, shape (F, n_planes)
        Observed - predicted trace angle of every family and distinct plane, axial degrees.
    sigma_deg : ndarray, shape (F,)
        Each family's own (detection or measurement) sigma, degrees.
    gradient : ndarray, shape (n_planes, 3)
        Each plane's trace-angle change per unit of the standardised rotation ``u ~ N(0, I)``,
        degrees: the rotation gradient times the covariance's square root (and the tilt slope).

    Examples
    --------
    >>> sr = SharedRotation(np.zeros((2, 1)), np.array([0.3, 0.3]), np.array([[0.0, 0.0, 1.0]]))
    >>> sr.coupled().tolist()
    [True]
    """

    residual_deg: np.ndarray
    sigma_deg: np.ndarray
    gradient: np.ndarray

    def coupled(self) -> np.ndarray:
        """Planes taking part in the coupling, shape (n_planes,) of bool (module doc)."""
        return np.linalg.norm(self.gradient, axis=1) <= MAX_COUPLED_SIGMA_DEG

    def terms(self, keep: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        """Per family and choice (the ``keep`` planes, then "none"): scaled gradient, scaled
        residual and the one-family Gaussian term that ``logw`` already holds.

        Returns
        -------
        a : ndarray, shape (F, Q + 1, 3)
        z : ndarray, shape (F, Q + 1)
        single : ndarray, shape (F, Q + 1)
        """
        F = self.residual_deg.shape[0]
        grad = np.where(self.coupled()[:, None], self.gradient, 0.0)[keep]  # (Q, 3)
        s = np.maximum(np.asarray(self.sigma_deg, float), 1e-3)[:, None]
        r = self.residual_deg[:, keep]
        near = np.abs(r) <= MAX_COUPLED_RESIDUAL * np.sqrt(s**2 + np.sum(grad**2, axis=1)[None, :])
        a = np.zeros((F, len(keep) + 1, 3))
        z = np.zeros((F, len(keep) + 1))
        a[:, :-1] = np.where(near[:, :, None], grad[None] / s[:, :, None], 0.0)
        z[:, :-1] = np.where(near, r / s, 0.0)
        a2 = np.sum(a * a, axis=2)
        single = 0.5 * z * z * a2 / (1.0 + a2) - 0.5 * np.log1p(a2)
        return a, z, single


def _coupling_correction(grids: list, a: np.ndarray, z: np.ndarray, single: np.ndarray) -> np.ndarray | float:
    """log N_joint - sum_f log N_f for every joint state (information form, 3 x 3 per state).

    With the families' scaled gradients a_f and residuals z_f: A = I + sum a_f a_f^T,
    b = sum a_f z_f; the joint Gaussian's log density is the families' own terms plus
    b^T A^-1 b / 2 - log det A / 2 (Woodbury), and each family alone contributes its ``single``.

    Only the coupled choices of each family matter (the others have a = 0 and add nothing), so
    the algebra runs on the small grid of coupled choices plus one "uncoupled" class per family
    and is gathered back onto the full grid (speed).
    """
    coupled = np.any(a != 0.0, axis=2)  # (F, Q + 1)
    if int(np.sum(coupled.any(axis=1))) < 2:
        return 0.0  # at most one family can be coupled: the correction is zero everywhere
    index, sub_a, sub_z, sub_single = [], [], [], []
    for f in range(a.shape[0]):
        rows = np.flatnonzero(coupled[f])
        idx = np.zeros(a.shape[1], int)
        idx[rows] = np.arange(1, len(rows) + 1)
        index.append(idx)
        sub_a.append(np.concatenate([np.zeros((1, 3)), a[f, rows]]))
        sub_z.append(np.concatenate([[0.0], z[f, rows]]))
        sub_single.append(np.concatenate([[0.0], single[f, rows]]))
    small = np.meshgrid(*[np.arange(len(x)) for x in sub_z], indexing="ij")
    corr = _small_grid_correction(small, sub_a, sub_z, sub_single)
    return corr[tuple(index[f][g] for f, g in enumerate(grids))]


def _small_grid_correction(grids: list, a: list, z: list, single: list) -> np.ndarray:
    """The correction of :func:`_coupling_correction` on a grid; ``a[f]`` (n_f, 3), ``z[f]`` and
    ``single[f]`` (n_f,) per family."""
    # The six entries of the symmetric A and the three of b, per state; the 3 x 3 algebra is
    # written out (cofactors): several times faster than batched LAPACK on millions of states.
    pairs = ((0, 0), (1, 1), (2, 2), (0, 1), (0, 2), (1, 2))
    m = [np.full(grids[0].shape, 1.0 if k < 3 else 0.0) for k in range(6)]
    b = [np.zeros(grids[0].shape) for _ in range(3)]
    corr = np.zeros(grids[0].shape)
    for f, gf in enumerate(grids):
        af = a[f]
        for k, (i, j) in enumerate(pairs):
            m[k] += (af[:, i] * af[:, j])[gf]
        for k in range(3):
            b[k] += (af[:, k] * z[f])[gf]
        corr -= single[f][gf]
    xx, yy, zz, xy, xz, yz = m
    c00, c11, c22 = yy * zz - yz * yz, xx * zz - xz * xz, xx * yy - xy * xy
    c01, c02, c12 = xz * yz - xy * zz, xy * yz - xz * yy, xy * xz - xx * yz
    det = xx * c00 + xy * c01 + xz * c02  # >= 1: A = I + a positive semi-definite sum
    quad = (c00 * b[0] ** 2 + c11 * b[1] ** 2 + c22 * b[2] ** 2
            + 2.0 * (c01 * b[0] * b[1] + c02 * b[0] * b[2] + c12 * b[1] * b[2])) / det
    return corr + 0.5 * quad - 0.5 * np.log(det)


def plane_log_weights(logw: ArrayLike, plane_ids: ArrayLike) -> np.ndarray:
    """Log weights of the distinct planes: each plane's candidates summed, "none" kept last.

    Parameters
    ----------
    logw : array_like, shape (F, P + 1)
        Log weights of the candidates, "none" last
        (:func:`tracefit.matching.likelihood.family_log_weights`).
    plane_ids : array_like of int, shape (P,)
        Distinct-plane index of every candidate.

    Returns
    -------
    ndarray, shape (F, n_planes + 1)
        log sum over each plane's candidates of exp(logw); the last column is "none".

    Examples
    --------
    >>> print(np.round(np.exp(plane_log_weights(np.log([[0.2, 0.3, 0.5]]), [0, 0])), 3))
    [[0.5 0.5]]
    """
    logw = np.asarray(logw, float)
    ids = np.asarray(plane_ids, int)
    F, P = logw.shape[0], logw.shape[1] - 1
    npl = int(ids.max()) + 1 if P else 0
    pmax = np.full((F, npl), -np.inf)
    np.maximum.at(pmax, (slice(None), ids), logw[:, :P])
    shift = np.where(np.isfinite(pmax), pmax, 0.0)
    onehot = np.zeros((P, npl))
    onehot[np.arange(P), ids] = 1.0
    psum = np.exp(logw[:, :P] - shift[:, ids]) @ onehot
    with np.errstate(divide="ignore"):
        return np.concatenate([np.log(psum) + shift, logw[:, P:]], axis=1)


def joint_marginals(logw: ArrayLike, plane_ids: ArrayLike, allow_shared: bool = False,
                    max_states: int = MAX_STATES, shared_rotation: SharedRotation | None = None) -> np.ndarray:
    """Posterior marginals of each family's assignment under the no-shared-plane rule.

    Parameters
    ----------
    logw : array_like, shape (F, P + 1)
        Log weights from :func:`tracefit.matching.likelihood.family_log_weights` (last
        column "none"; -inf there when p_none = 0).
    plane_ids : array_like of int, shape (P,)
        Distinct-plane index of every candidate (slip and twin on one plane share it).
    allow_shared : bool
        Drop the rule (families independent).
    max_states : int
        Above this many joint states the exact enumeration gives way to a greedy
        approximation (best joint assignment fixed, each family's rivals' planes removed; no
        shared-rotation coupling there).
    shared_rotation : SharedRotation, optional
        The grain's one orientation error (module doc); None treats the families' errors as
        independent.

    Returns
    -------
    ndarray, shape (F, P + 1)
        Probabilities; each row sums to 1.

    Examples
    --------
    Two families that both fit plane 0 best: the joint rule sends the worse fit elsewhere.

    >>> lw = np.log([[0.90, 0.09, 0.01], [0.60, 0.39, 0.01]])
    >>> print(np.round(joint_marginals(lw, [0, 1]), 3))
    [[0.847 0.129 0.024]
     [0.141 0.835 0.024]]
    """
    logw = np.asarray(logw, float)
    ids = np.asarray(plane_ids, int)
    F, K = logw.shape
    indep = np.exp(logw - logsumexp(logw, axis=1, keepdims=True))
    if F < 2 or (allow_shared and shared_rotation is None):
        return indep
    P = K - 1
    npl = int(ids.max()) + 1 if P else 0
    plane_lw = plane_log_weights(logw, ids)
    keep = _planes_to_enumerate(plane_lw, F, npl)
    if (len(keep) + 1) ** F > max_states:
        return indep if allow_shared else _greedy_marginals(indep, plane_lw, ids)
    sub = np.concatenate([plane_lw[:, keep], plane_lw[:, npl:npl + 1]], axis=1)  # (F, Q+1)
    Q = len(keep)
    terms = None if shared_rotation is None else shared_rotation.terms(keep)
    marg = _enumerated_marginals(sub, F, Q, terms, exclusive=not allow_shared)
    marg_plane = np.zeros((F, npl + 1))
    marg_plane[:, keep] = marg[:, :Q]
    marg_plane[:, npl] = marg[:, Q]
    # Split each plane's marginal among its candidates as in the independent weights.
    out = np.zeros_like(indep)
    with np.errstate(invalid="ignore"):
        within = np.nan_to_num(np.exp(logw[:, :P] - plane_lw[:, ids]), nan=0.0)
    out[:, :P] = within * marg_plane[:, ids]
    out[:, P] = marg_plane[:, npl]
    return out / out.sum(axis=1, keepdims=True)


def _planes_to_enumerate(plane_lw: np.ndarray, F: int, npl: int) -> np.ndarray:
    """Planes that matter for any family: its best ones within e^-14 of its best hypothesis.

    A family without a "none" weight (p_none = 0) keeps at least min(F, n_planes) planes, so
    that an assignment of every family to its own plane survives the pruning whenever one
    exists.
    """
    row_max = plane_lw.max(axis=1, keepdims=True)
    rel = plane_lw[:, :npl] >= row_max - _PRUNE_LOG
    picks = []
    for f in range(F):
        k = min(_MAX_PLANES_PER_FAMILY, int(rel[f].sum()))
        if not np.isfinite(plane_lw[f, npl]):
            k = max(k, min(F, npl))
        picks.append(np.argsort(-plane_lw[f, :npl])[:k])
    return np.unique(np.concatenate(picks))


def _enumerated_marginals(sub: np.ndarray, F: int, Q: int, terms=None, exclusive: bool = True) -> np.ndarray:
    """Exact marginals over all (Q + 1)^F assignments; column Q is "none" (shareable).

    ``terms`` (:meth:`SharedRotation.terms`) adds the shared-rotation correction per state;
    ``exclusive`` applies the no-shared-plane rule.
    """
    grids = np.meshgrid(*[np.arange(Q + 1)] * F, indexing="ij")
    total = np.zeros(grids[0].shape)
    for f in range(F):
        total = total + sub[f][grids[f]]
    corr = 0.0 if terms is None else _coupling_correction(grids, *terms)
    total = total + corr
    valid = np.ones(total.shape, bool)
    for a, b in itertools.combinations(range(F) if exclusive else [], 2):
        valid &= ~((grids[a] == grids[b]) & (grids[a] < Q))
    total = np.where(valid, total, -np.inf)
    if not np.isfinite(total).any():
        total = _fewest_forced_none(sub, grids, valid, Q) + corr
    pj = np.exp(total - logsumexp(total))
    marg = np.zeros((F, Q + 1))
    for f in range(F):
        marg[f] = np.bincount(grids[f].ravel(), weights=pj.ravel(), minlength=Q + 1)
    return marg


def _fewest_forced_none(sub: np.ndarray, grids: list, valid: np.ndarray, Q: int) -> np.ndarray:
    """Log weights of the limit p_none -> 0+ when no assignment has a finite weight.

    Families whose "none" weight is zero (-inf) are put on "none" at weight 1 and counted;
    only the assignments with the fewest such families keep their weight (each further one
    costs a factor p_none -> 0).
    """
    forced = ~np.isfinite(sub[:, Q])
    s = sub.copy()
    s[forced, Q] = 0.0
    total = np.zeros(grids[0].shape)
    n_forced = np.zeros(grids[0].shape, int)
    for f in range(len(s)):
        total = total + s[f][grids[f]]
        if forced[f]:
            n_forced += grids[f] == Q
    ok = valid & np.isfinite(total)
    if not ok.any():
        return np.where(valid, total, -np.inf)
    return np.where(ok & (n_forced == n_forced[ok].min()), total, -np.inf)


def _greedy_marginals(indep: np.ndarray, plane_lw: np.ndarray, plane_ids: np.ndarray) -> np.ndarray:
    """Too many families for exact enumeration: fix the best joint assignment (Hungarian)
    and remove each family's rivals' assigned planes from its own distribution."""
    from scipy.optimize import linear_sum_assignment

    F = plane_lw.shape[0]
    npl = plane_lw.shape[1] - 1
    cost = np.full((F, npl + F), 1e9)
    cost[:, :npl] = -np.where(np.isfinite(plane_lw[:, :npl]), plane_lw[:, :npl], -1e9)
    none = plane_lw[:, npl]
    cost[np.arange(F), npl + np.arange(F)] = np.where(np.isfinite(none), -none, 1e9)
    rows, cols = linear_sum_assignment(cost)
    assigned = {int(r): int(c) for r, c in zip(rows, cols)}
    out = indep.copy()
    for f in range(F):
        for f2, c in assigned.items():
            if f2 != f and c < npl:
                out[f, np.flatnonzero(plane_ids == c)] = 0.0
    empty = out.sum(axis=1) <= 0.0
    out[empty, -1] = 1.0  # every plane of this family is taken and p_none = 0: the p_none -> 0+ limit
    return out / out.sum(axis=1, keepdims=True)
