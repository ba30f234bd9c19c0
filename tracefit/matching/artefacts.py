"""Map-level surface artefacts: families that keep one image angle across grains of different orientation.

Polishing scratches (and other surface marks) are straight lines on the surface: they run on
through grain boundaries at one image angle, whereas a slip or twin trace changes direction
from grain to grain with the crystal orientation (common practice, no source). This module
turns that cue into a hypothesis of the probability model.

Model
-----
M0 (no artefact direction): family f of grain k has the density L0_f (per degree) of the
grain's own crystallographic model: candidates and "none of these", priors included
(:mod:`tracefit.matching.likelihood`).

M1 (one surface-artefact direction at image angle theta): every family is, independently, an
artefact with probability pi and otherwise follows M0:

    p(a_f | theta, pi) = (1 - pi) L0_f + pi vM(a_f - theta; sqrt(s_f^2 + s_line^2)),

s_f the family's angle sigma and s_line (default 0.2 deg) the straightness of a surface line
across the map. No orientation or frame sigma enters: an artefact lives in the image frame.
theta is uniform on [0, 180), pi uniform on [0, 1] (an exchangeable prior on which families
belong). The Bayes factor

    B = p(D | M1) / p(D | M0) = int dtheta / 180 int dpi  prod_f (1 - pi + pi R_f(theta)),
    R_f(theta) = vM(a_f - theta) / L0_f,

is computed on a grid (theta step 0.05 deg, 100 values of pi), so the look-elsewhere effect
(any theta could have been the artefact's) and the Occam factor of pi are both paid. The
posterior probability that the direction exists is B o / (1 + B o), o the prior odds
(``p_map`` = 0.5: polished sections often carry a scratch direction; common practice, no
source).

Guards against killing real systems
-----------------------------------
* Witnesses: the families that support theta (responsibility >= 0.5) are grouped when the
  crystallography itself links them: two grains that both have a candidate plane predicting
  theta, of one family, with nearly parallel normals in the sample frame (within
  2 sqrt(s_A^2 + s_B^2), s the orientation sigmas; planes with a predicted-trace spread over
  3 deg, i.e. shallow ones, cannot link) show the same physical plane continuing across their boundary
  (a twin plane, a low-angle boundary, one grain split in two labels). Each group counts as
  one witness: only its least supporting member enters B, the others are neutral (R = 1).
* At least ``min_witnesses`` (default 3) independent witnesses: two grains at one angle are a
  coincidence that crystallography predicts often enough (any family pair matches within a
  degree with probability ~ 1/90).
* Slip transfer: a direction whose every witness lies on a steep candidate plane's predicted
  trace in its own grain (within 3 sigma, trace and angle spread combined) is slip carried across
  the boundaries, not a scratch, and is dropped however many grains it crosses, provided such a
  fit is telling: a line at a random angle would fit in all those grains with probability under
  1 % (the product over the witnesses of the share of angles their grain's steep planes cover).
  In a dense catalogue (bcc with {123}) almost any angle fits, and the continuity evidence decides.
* Directions with posterior < 0.5 are dropped (their families keep the M0 answer), so a
  borderline direction slightly under-states p_artefact; accepted directions enter each
  family's prior as q pi (q the posterior of the direction), exact when q is near 0 or 1.

Several directions are found greedily (default at most 3): after one is accepted, L0 of every
family becomes the M1 mixture and the scan runs again. What this cannot do: a scratch seen in
only one or two grains, or a scratch that happens to lie on the traces the crystallography
predicts in all grains it crosses, stays an ordinary family (angle alone cannot separate it).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
from numpy.typing import ArrayLike

from tracefit.conventions import axial_difference, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.matching.likelihood import axial_logpdf, logsumexp

__all__ = [
    "ArtefactDirection",
    "CrystalContext",
    "find_artefact_directions",
    "artefact_family_weights",
    "DEFAULT_P_MAP",
    "DEFAULT_LINE_SIGMA_DEG",
    "DEFAULT_MIN_WITNESSES",
    "DEFAULT_MAX_DIRECTIONS",
]

DEFAULT_P_MAP = 0.5
DEFAULT_LINE_SIGMA_DEG = 0.2
DEFAULT_MIN_WITNESSES = 3
DEFAULT_MAX_DIRECTIONS = 3
_STEP_DEG = 0.05
_WINDOW_DEG = 3.0
_MAX_PEAKS = 12  # peaks examined per map (rejected ones are masked and the next is tried)
_LINK_K = 2.0  # normals of one plane agree within _LINK_K hypot(s_A, s_B) degrees
_MAX_LINK_SIGMA_DEG = 3.0  # ~ inclination >= 20 deg at 1 deg orientation sigma
_FIT_K = 3.0  # a line "fits" a plane within 3 sigma (trace and angle spread combined): slip transfer
_TRANSFER_CHANCE = 0.01  # ... and a random line would fit in all its grains with lower probability

# Uniform prior on pi, integrated on a grid dense at small fractions (trapezoid weights).
_PI = np.unique(np.concatenate([np.geomspace(1e-4, 0.3, 80), np.linspace(0.3, 0.999, 21)]))
_LOG_DPI = np.log(np.gradient(_PI))


@dataclass
class ArtefactDirection:
    """One surface-artefact direction shared across a map.

    Attributes
    ----------
    angle_deg, angle_sigma_deg : float
        Image-frame axial angle of the artefact and its posterior sigma, degrees.
    p_exists : float
        Posterior probability that this common direction is a surface artefact.
    log10_bayes_factor : float
        log10 of p(D | artefact) / p(D | none), witness groups merged.
    fraction : float
        Posterior mean of pi, the share of the map's families on this artefact.
    members : list of int
        Indices (into the families given) with responsibility >= 0.5.
    grains : list
        Their grains.
    n_witnesses : int
        Independent witnesses (member groups not linked by a common crystal plane).

    Examples
    --------
    >>> d = ArtefactDirection(30.01234, 0.04, 0.999, 6.2, 0.35, [0, 2, 5], [1, 2, 4], 3)
    >>> d.to_dict()["angle_deg"], d.to_dict()["n_witnesses"]
    (30.012, 3)
    """

    angle_deg: float
    angle_sigma_deg: float
    p_exists: float
    log10_bayes_factor: float
    fraction: float
    members: list = field(default_factory=list)
    grains: list = field(default_factory=list)
    n_witnesses: int = 0

    def to_dict(self) -> dict:
        """JSON form (angles to 3 decimals)."""
        return {
            "angle_deg": round(float(self.angle_deg), 3),
            "angle_sigma_deg": round(float(self.angle_sigma_deg), 3),
            "p_exists": round(float(self.p_exists), 6),
            "log10_bayes_factor": round(float(self.log10_bayes_factor), 3),
            "fraction": round(float(self.fraction), 4),
            "grains": [int(g) if isinstance(g, (np.integer,)) else g for g in self.grains],
            "n_witnesses": int(self.n_witnesses),
        }


@dataclass
class CrystalContext:
    """Per-grain predicted traces, for the witness test (same plane continuing across a boundary).

    Attributes
    ----------
    pred_deg : dict grain -> ndarray (P,)
        Predicted image-frame trace angles of the candidates, degrees.
    pred_sigma_deg : dict grain -> ndarray (P,)
        Their spread from orientation and frame uncertainty, degrees.
    normals_sample : dict grain -> ndarray (P, 3)
        Candidate plane normals in the sample frame (unit).
    orientation_sigma_deg : dict grain -> float
        Orientation sigma of each grain, degrees.
    families : sequence (P,), optional
        Family name of every candidate (``{110}``, ...): a continuing plane is one plane of
        one family on both sides of the boundary.

    Examples
    --------
    Two grains whose (111) planes are parallel (same normal in the sample frame) both predict
    a trace at 135 deg: a line there links them, a line at 45 deg does not.

    >>> n = np.array([[1.0, 1.0, 1.0]]) / np.sqrt(3.0)
    >>> ctx = CrystalContext({1: np.array([135.0]), 2: np.array([135.2])}, {1: np.array([1.0]), 2: np.array([1.0])},
    ...                      {1: n, 2: n}, {1: 1.0, 2: 1.0})
    >>> ctx.linked(1, 2, 135.1), ctx.linked(1, 2, 45.0)
    (True, False)
    """

    pred_deg: dict
    pred_sigma_deg: dict
    normals_sample: dict
    orientation_sigma_deg: dict
    families: Sequence | None = None

    def planes_at(self, grain: Any, theta: float, k: float = 2.5, extra_sigma_deg: float = 0.0) -> np.ndarray:
        """Indices of the grain's candidates whose predicted trace lies within k sigma of theta.

        sigma is the predicted trace's spread, combined with ``extra_sigma_deg`` (e.g. the
        observed angle's own uncertainty) in quadrature; shallow planes never count.
        """
        if grain not in self.pred_deg:
            return np.zeros(0, int)
        d = np.abs(axial_difference(self.pred_deg[grain], theta))
        sig = np.maximum(self.pred_sigma_deg[grain], 1e-6)
        d = d * sig / np.hypot(sig, extra_sigma_deg)  # d <= k hypot(sig, extra) <=> this <= k sig
        # shallow planes (broad predicted traces, normals near the surface normal) would link
        # any two grains; they cannot draw a sharp common line anyway
        return np.flatnonzero((d <= k * sig) & (sig <= _MAX_LINK_SIGMA_DEG))

    def linked(self, ga: Any, gb: Any, theta: float) -> bool:
        """True when grains ga and gb both predict theta on planes with nearly parallel normals."""
        if ga == gb:
            return True
        ia, ib = self.planes_at(ga, theta), self.planes_at(gb, theta)
        if len(ia) == 0 or len(ib) == 0:
            return False
        na, nb = self.normals_sample[ga][ia], self.normals_sample[gb][ib]
        cos = np.abs(na @ nb.T)
        if self.families is not None:
            fam = np.asarray(self.families, object)
            cos = np.where(fam[ia][:, None] == fam[ib][None, :], cos, 0.0)
        sa = self.orientation_sigma_deg.get(ga, 1.0)
        sb = self.orientation_sigma_deg.get(gb, 1.0)
        # normals of one plane seen through two noisy orientations differ by ~ sqrt(2) hypot(sa, sb)
        # in magnitude (two components); 2 hypot keeps ~ 86 % of true links (Rayleigh)
        tol = max(_LINK_K * math.hypot(sa, sb), 1.0)
        return bool(cos.max() >= math.cos(math.radians(tol)))


def _log1p_rho_r(lr):
    """log(1 + rho R) for every pi of the grid, R = exp(lr) the artefact / baseline density ratio (..., M)."""
    rho = _PI / (1.0 - _PI)
    return np.log1p(rho * np.exp(np.minimum(lr, 700.0))[..., None])


def _scan(angles, s_eff, log_l0, grid):
    """I(theta, pi) - F log(1 - pi) on the grid: sum over families near theta of log1p(rho R)."""
    n = len(grid)
    F = len(angles)
    acc = np.zeros((n, len(_PI)))
    K = int(min(math.ceil(6.0 * float(np.max(s_eff)) / _STEP_DEG), n // 2 - 1))
    offs = np.arange(-K, K + 1)
    B = max(1, 2_000_000 // (len(offs) * len(_PI)))  # families per block (memory)
    for lo in range(0, F, B):
        a = angles[lo:lo + B]
        i0 = np.round(a / _STEP_DEG).astype(int)
        idx = (i0[:, None] + offs[None, :]) % n
        lr = axial_logpdf(a[:, None] - grid[idx], s_eff[lo:lo + B, None]) - log_l0[lo:lo + B, None]
        c = _log1p_rho_r(lr)
        flat = idx.ravel()
        cc = c.reshape(-1, len(_PI))
        for m in range(len(_PI)):
            acc[:, m] += np.bincount(flat, weights=cc[:, m], minlength=n)
    return acc


def _members_at(acc_row, a, s_eff, l0, th):
    """Families with responsibility >= 0.5 for the direction th (pi at its posterior mean there).

    Returns the member indices and every family's log density ratio artefact / baseline.
    """
    F = len(a)
    lp = acc_row + F * np.log1p(-_PI) + _LOG_DPI
    wpi = np.exp(lp - logsumexp(lp))
    pi_hat = float(wpi @ _PI)
    lr_hat = axial_logpdf(a - th, s_eff) - l0
    rr = 1.0 / (1.0 + np.exp(np.minimum(-(lr_hat + math.log(pi_hat / (1.0 - pi_hat))), 700.0)))
    return [int(i) for i in np.flatnonzero(rr >= 0.5)], lr_hat


def _witness_groups(members, grains, context, th) -> list[list[int]]:
    """Members grouped when one grain or a common crystal plane links them (union-find)."""
    parent = list(range(len(members)))

    def find(x):
        while parent[x] != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    for i in range(len(members)):
        for j in range(i + 1, len(members)):
            gi, gj = grains[members[i]], grains[members[j]]
            if gi == gj or (context is not None and context.linked(gi, gj, th)):
                parent[find(i)] = find(j)
    groups: dict = {}
    for i, f in enumerate(members):
        groups.setdefault(find(i), []).append(f)
    return list(groups.values())


def _covered_share(context, grain, extra_sigma_deg: float) -> float:
    """Share of image angles (0.25 deg grid) within 3 sigma of a steep plane's trace in the grain."""
    pred = np.asarray(context.pred_deg[grain], float)
    sig = np.maximum(np.asarray(context.pred_sigma_deg[grain], float), 1e-6)
    steep = sig <= _MAX_LINK_SIGMA_DEG
    if not steep.any():
        return 0.0
    grid = np.arange(0.0, 180.0, 0.25)
    d = np.abs(axial_difference(grid[:, None], pred[None, steep]))
    return float(np.mean((d <= _FIT_K * np.hypot(sig[steep], extra_sigma_deg)[None, :]).any(axis=1)))


def _all_fit_a_plane(groups, a, s_eff, grains, context) -> bool:
    """True when the line is slip carried across the boundaries (slip transfer), not a scratch.

    That is: every witness lies on the predicted trace of a steep plane of its own grain
    (within 3 sigma, trace and angle spread combined), and a straight line at a random angle
    would fit a plane in all those grains by chance with probability below 1 %. The chance per
    grain is the share of the half circle its steep planes' traces cover; where a dense
    catalogue (bcc with {123}) covers most angles, a fit says nothing and the continuity
    evidence decides.
    """
    if context is None:
        return False
    chance = 1.0
    for grp in groups:
        best = None
        for f in grp:
            g = grains[f]
            if len(context.planes_at(g, float(a[f]), k=_FIT_K, extra_sigma_deg=float(s_eff[f]))) == 0:
                continue
            share = _covered_share(context, g, float(s_eff[f]))
            best = share if best is None else min(best, share)
        if best is None:
            return False  # a witness that no plane explains: the line may be a scratch
        chance *= best
    return chance < _TRANSFER_CHANCE


def _window_evidence(a, s_eff, l0, lr_hat, groups, th, tw):
    """log of the integrand of B on the window around th, (W, M); one witness per group.

    All but the least supporting member of each group are neutral (R = 1).
    """
    F = len(a)
    neutral = set()
    for grp in groups:
        if len(grp) > 1:
            keep = min(grp, key=lambda f: lr_hat[f])
            neutral.update(f for f in grp if f != keep)
    near = [f for f in range(F) if f not in neutral and abs(float(axial_difference(a[f], th))) < _WINDOW_DEG + 6 * s_eff[f]]
    if near:
        nr = np.array(near)
        lrw = axial_logpdf(a[nr][:, None] - tw[None, :], s_eff[nr][:, None]) - l0[nr][:, None]  # (Fn, W)
        cw = _log1p_rho_r(lrw).sum(axis=0)  # (W, M)
    else:
        cw = np.zeros((len(tw), len(_PI)))
    return cw + F * np.log1p(-_PI)[None, :] + _LOG_DPI[None, :]


def _direction_summary(Iw, tw, th):
    """Posterior mean angle and sigma of the direction on the window, and the mean of pi."""
    pt = np.exp(logsumexp(Iw, axis=1) - logsumexp(Iw))
    d = axial_difference(tw, th)
    mu = th + float(pt @ d)
    sd = math.sqrt(max(float(pt @ (d - (mu - th)) ** 2), 0.0) + _STEP_DEG**2 / 12.0)
    ppi = np.exp(logsumexp(Iw, axis=0) - logsumexp(Iw))
    return float(fold_axial(mu)), sd, float(ppi @ _PI)


def find_artefact_directions(
    angles_deg: ArrayLike,
    sigmas_deg: ArrayLike,
    grains: Sequence[Any],
    log_l0: ArrayLike,
    context: CrystalContext | None = None,
    *,
    p_map: float = DEFAULT_P_MAP,
    line_sigma_deg: float = DEFAULT_LINE_SIGMA_DEG,
    min_witnesses: int = DEFAULT_MIN_WITNESSES,
    max_directions: int = DEFAULT_MAX_DIRECTIONS,
) -> list[ArtefactDirection]:
    """Surface-artefact directions shared across a grain map (see the module docstring).

    Parameters
    ----------
    angles_deg, sigmas_deg : array_like, shape (F,)
        Observed family angles (image frame, axial) and their sigmas, degrees.
    grains : sequence, length F
        Grain of each family.
    log_l0 : array_like, shape (F,)
        Log density (per degree) of each family's angle under its grain's crystallographic
        model (candidates and "none", priors included).
    context : CrystalContext, optional
        Predicted traces per grain for the witness test; without it every grain is its own
        witness.
    p_map : float
        Prior probability that the map carries a surface-artefact direction, in (0, 1) (default 0.5).
    line_sigma_deg : float
        Straightness of an artefact across the map, degrees (default 0.2).
    min_witnesses : int
        Independent witnesses needed to accept a direction (default 3).
    max_directions : int
        At most this many directions (default 3).

    Returns
    -------
    list of ArtefactDirection
        Accepted ones only, in the order found.

    Raises
    ------
    TracefitInputError
        For ``p_map`` outside (0, 1) or a negative ``line_sigma_deg``.

    Examples
    --------
    Four grains share a line at 30 deg that their crystallography explains poorly
    (baseline density 1/180 per degree), a fifth has a family elsewhere:

    >>> a = [30.1, 29.9, 30.0, 30.2, 100.0]
    >>> dirs = find_artefact_directions(a, [0.2] * 5, [1, 2, 3, 4, 5], np.full(5, -np.log(180.0)))
    >>> [(round(d.angle_deg), d.n_witnesses, d.p_exists > 0.99) for d in dirs]
    [(30, 4, True)]
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 47 lines.
    if not (0.0 < p_map < 1.0):
        raise TracefitInputError(f"p_map (the map artefact prior) must be in (0, 1), got {p_map!r}")
    if not (math.isfinite(line_sigma_deg) and line_sigma_deg >= 0):
        raise TracefitInputError(f"line_sigma_deg must be a finite number >= 0, got {line_sigma_deg!r}")
    a = np.asarray(fold_axial(np.asarray(angles_deg, float)), float).reshape(-1)
    s = np.asarray(sigmas_deg, float)
    l0 = np.asarray(log_l0, float).copy()
    grains = list(grains)
    F = len(a)
    if F < min_witnesses or len(set(grains)) < min_witnesses or max_directions <= 0:
        return []
    s_eff = np.sqrt(s**2 + float(line_sigma_deg) ** 2)
    grid = np.arange(0.0, 180.0, _STEP_DEG)
    n = len(grid)
    half = round(_WINDOW_DEG / _STEP_DEG)
    out: list[ArtefactDirection] = []
    masked = np.zeros(n, bool)
    acc = _scan(a, s_eff, l0, grid)
    for _ in range(_MAX_PEAKS):
        if len(out) >= max_directions:
            break
        T = logsumexp(acc + F * np.log1p(-_PI)[None, :] + _LOG_DPI[None, :], axis=1)
        T = np.where(masked, -np.inf, T)
        i_hat = int(np.argmax(T))
        if not np.isfinite(T[i_hat]):
            break
        th = grid[i_hat]
        win = (i_hat + np.arange(-half, half + 1)) % n
        masked[win] = True
        members, lr_hat = _members_at(acc[i_hat], a, s_eff, l0, th)
        groups = _witness_groups(members, grains, context, th)
        if len(groups) < min_witnesses or _all_fit_a_plane(groups, a, s_eff, grains, context):
            continue
        Iw = _window_evidence(a, s_eff, l0, lr_hat, groups, th, grid[win])
        log_b = logsumexp(Iw) + math.log(_STEP_DEG / 180.0)
        q = 1.0 / (1.0 + math.exp(-min(max(log_b + math.log(p_map / (1.0 - p_map)), -700.0), 700.0)))
        if q < 0.5:
            continue
        mu, sd, frac = _direction_summary(Iw, grid[win], th)
        out.append(ArtefactDirection(mu, sd, q, log_b / math.log(10.0), frac, members, [grains[f] for f in members],
                                     len(groups)))
        # later scans see this direction as part of the baseline model
        w = q * frac
        la = axial_logpdf(axial_difference(a, mu), np.sqrt(s_eff**2 + sd**2))
        l0 = np.logaddexp(l0 + math.log1p(-w), la + math.log(w))
        acc = _scan(a, s_eff, l0, grid)
    return out



def artefact_family_weights(directions: Sequence[ArtefactDirection], angles_deg: ArrayLike, sigmas_deg: ArrayLike,
                            line_sigma_deg: float = DEFAULT_LINE_SIGMA_DEG) -> tuple[float, np.ndarray, np.ndarray]:
    """Per-family artefact prior mass and log (prior x density) for the matcher.

    Parameters
    ----------
    directions : sequence of ArtefactDirection
        Accepted directions (:func:`find_artefact_directions`).
    angles_deg, sigmas_deg : array_like, shape (F,)
        Observed family angles and sigmas, degrees.
    line_sigma_deg : float
        Straightness of an artefact across the map, degrees.

    Returns
    -------
    mass : float
        Total prior of "artefact" per family, sum over directions of p_exists x fraction
        (at most 0.999); the crystallographic and "none" priors are scaled by 1 - mass.
    log_w : ndarray, shape (F,)
        log sum_j q_j pi_j vM(a_f - theta_j; sqrt(s_f^2 + s_line^2 + s_theta_j^2)), per degree.
    which : ndarray of int, shape (F,)
        Index of the direction that contributes most to each family (-1 without directions).

    Examples
    --------
    >>> d = ArtefactDirection(30.0, 0.05, 1.0, 3.0, 0.4)
    >>> mass, log_w, which = artefact_family_weights([d], [30.0, 120.0], [0.2, 0.2])
    >>> round(mass, 3), bool(log_w[0] > log_w[1]), which.tolist()
    (0.4, True, [0, 0])
    """
    a = np.asarray(angles_deg, float)
    s = np.asarray(sigmas_deg, float)
    F = len(a)
    if not directions:
        return 0.0, np.full(F, -np.inf), np.full(F, -1, int)
    parts = []
    for dct in directions:
        w = dct.p_exists * dct.fraction
        sig = np.sqrt(s**2 + line_sigma_deg**2 + dct.angle_sigma_deg**2)
        parts.append(math.log(max(w, 1e-300)) + axial_logpdf(axial_difference(a, dct.angle_deg), sig))
    P = np.array(parts)  # (J, F)
    mass = float(min(sum(d.p_exists * d.fraction for d in directions), 0.999))
    return mass, logsumexp(P, axis=0) if P.shape[0] > 1 else P[0], np.argmax(P, axis=0)
