"""Fit the frame between the image and the orientation data from many grains' band families.

A wrong in-plane rotation (or a mirrored axis) between an EBSD-like orientation map and the
micrograph moves every predicted trace and is a common source of wrong answers. With the
families of several grains, the rotation rho (v_image = Rz(rho) v_data) is the value that
makes the predicted traces explain the observed ones best.

Model: for a trial frame, each family's evidence is the robust mixture used by the matcher,
p_none / 180 + sum_c prior_c f(r_c; sigma_c) (see :mod:`tracefit.identify.matching`), so families
nothing explains (scratches, wrong grains) cannot drag the fit. The summed log evidence is
scanned over rho in [-90, 90) deg (trace angles are axial, so rho and rho + 180 are
indistinguishable from traces) for both mirror states, then refined. The uncertainty is the
larger of the curvature estimate and a bootstrap over grains.

Mirror: ``flip_y`` equals ``flip_x`` followed by a 180 deg turn, so from traces only one
mirror state can be told apart: we report it as ``flip_x``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Sequence

import numpy as np

from tracefit.conventions import axial_difference, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.identify.matching import (
    DEFAULT_P_NONE,
    CandidateSet,
    ObservedFamily,
    axial_logpdf,
    logsumexp,
    candidate_set,
    predict_candidates,
    predicted_trace_sigma,
)

__all__ = ["FrameFit", "fit_frame"]

_STEP = 0.5  # coarse scan step, degrees


@dataclass
class FrameFit:
    """Result of :func:`fit_frame`.

    Attributes
    ----------
    rotation_deg : float
        Best rho (deg, in [-90, 90)): the value to pass as ``--frame-rotation`` (with ``flip_x``).
    rotation_sigma_deg : float
        One-sigma uncertainty of rho, degrees.
    flip_x : bool
        Whether the best frame mirrors the data's x axis (reported relative to no flip).
    frame : FrameSettings
        The fitted frame (tilt kept from the input frame).
    given_rotation_deg : float
        The rotation of the input frame.
    misaligned : bool
        The fitted frame differs significantly from the given one.
    mirror_evidence : float
        Log-likelihood gain of the best mirror state over the other one (>= 0).
    explained_given, explained_fitted : float
        Fraction of families whose best hypothesis is a plane (not "none"), in the given and
        in the fitted frame.
    rms_residual_deg : float
        RMS residual of the explained families to their nearest candidate, fitted frame.
    n_families, n_grains : int
    warnings : list of str
    scan_deg, scan_loglik : ndarray
        Coarse scan (best mirror state), for plots.
    second_peak_deg, second_peak_delta : float
        Best rho of the next separate maximum and its log-likelihood deficit.
    """

    rotation_deg: float
    rotation_sigma_deg: float
    flip_x: bool
    frame: object
    given_rotation_deg: float
    misaligned: bool
    mirror_evidence: float
    explained_given: float
    explained_fitted: float
    rms_residual_deg: float
    n_families: int
    n_grains: int
    warnings: list = field(default_factory=list)
    scan_deg: np.ndarray = field(default=None, repr=False)
    scan_loglik: np.ndarray = field(default=None, repr=False)
    second_peak_deg: float = float("nan")
    second_peak_delta: float = float("nan")

    def to_dict(self) -> dict:
        r = lambda x, n=4: None if x is None or not math.isfinite(float(x)) else round(float(x), n)  # noqa: E731
        return {
            "rotation_deg": r(self.rotation_deg),
            "rotation_sigma_deg": r(self.rotation_sigma_deg),
            "flip_x": bool(self.flip_x),
            "given_rotation_deg": r(self.given_rotation_deg),
            "correction_deg": r(axial_difference(self.rotation_deg, self.given_rotation_deg)),
            "misaligned": bool(self.misaligned),
            "mirror_evidence": r(self.mirror_evidence, 2),
            "explained_given": r(self.explained_given),
            "explained_fitted": r(self.explained_fitted),
            "rms_residual_deg": r(self.rms_residual_deg),
            "n_families": int(self.n_families),
            "n_grains": int(self.n_grains),
            "second_peak_deg": r(self.second_peak_deg),
            "second_peak_delta_loglik": r(self.second_peak_delta, 2),
            "warnings": list(self.warnings),
        }


class _Evaluator:
    """Per-grain robust log evidence as a function of rho, for one mirror state (vectorised)."""

    def __init__(self, obs_by_grain, G, cands, base_frame, flip, osig, p_none, tilt):
        self.G = G
        self.cands = cands
        self.osig = osig
        self.tilt = tilt
        self.base = replace(base_frame, flip_x=flip, flip_y=False, rotation_deg=0.0)
        npl = int(cands.plane_ids.max()) + 1
        counts = np.bincount(cands.plane_ids, minlength=npl)
        self.log_prior = np.log((1.0 - p_none) / npl / counts[cands.plane_ids])
        self.lnone = math.log(p_none) - math.log(180.0)
        fmax = max(len(oa) for oa, _ in obs_by_grain)
        n = len(obs_by_grain)
        self.oa = np.zeros((n, fmax))
        self.os = np.ones((n, fmax))
        self.mask = np.zeros((n, fmax), bool)
        for j, (oa, os_) in enumerate(obs_by_grain):
            self.oa[j, : len(oa)] = oa
            self.os[j, : len(oa)] = os_
            self.mask[j, : len(oa)] = True
        if not tilt:
            ang0, incl, slope = predict_candidates(cands, G, self.base)
            self.ang0 = ang0
            self.psig = predicted_trace_sigma(incl, osig, slope)
            self.sig = np.sqrt(self.os[:, :, None] ** 2 + self.psig[:, None, :] ** 2)
            # Without tilt a frame turn rho only shifts every predicted angle: precompute the
            # doubled residual at rho = 0 and the density's normaliser (same formula as
            # tracefit.identify.matching.axial_logpdf), so each trial rho costs a rotation of (cos, sin).
            r0 = np.radians(2.0 * axial_difference(self.oa[:, :, None], ang0[:, None, :]))
            self.c0, self.s0 = np.cos(r0), np.sin(r0)
            srad = np.radians(np.maximum(self.sig, 1e-3))
            self.kappa = 1.0 / (4.0 * srad * srad)
            self.lognorm = axial_logpdf(0.0, self.sig) - 0.0 + self.log_prior[None, None, :]

    def _ll(self, rho):
        if not self.tilt:
            ang, sig = fold_axial(self.ang0 + rho), self.sig
        else:
            fr = replace(self.base, rotation_deg=float(rho))
            ang, incl, slope = predict_candidates(self.cands, self.G, fr)
            psig = predicted_trace_sigma(incl, self.osig, slope)
            sig = np.sqrt(self.os[:, :, None] ** 2 + psig[:, None, :] ** 2)
        r = axial_difference(self.oa[:, :, None], ang[:, None, :])  # (n, F, P)
        return r, axial_logpdf(r, sig) + self.log_prior[None, None, :]

    def _ll_fast(self, rho):
        # cos(2 (r0 - rho)) = cos 2r0 cos 2rho + sin 2r0 sin 2rho
        t = math.radians(2.0 * rho)
        c2 = self.c0 * math.cos(t) + self.s0 * math.sin(t)
        return self.kappa * (c2 - 1.0) + self.lognorm

    def per_grain(self, rho):
        """(n_grains,) summed robust log evidence of each grain's families."""
        ll = self._ll_fast(rho) if not self.tilt else self._ll(rho)[1]
        lse = np.logaddexp(logsumexp(ll, axis=2), self.lnone)
        return np.where(self.mask, lse, 0.0).sum(axis=1)

    def details(self, rho):
        """Per family: explained (best plane beats "none") and the residual to that plane."""
        r, ll = self._ll(rho)
        best = np.argmax(ll, axis=2)
        llb = np.take_along_axis(ll, best[..., None], axis=2)[..., 0]
        rb = np.take_along_axis(r, best[..., None], axis=2)[..., 0]
        expl = (llb > self.lnone)[self.mask]
        res = rb[self.mask][expl]
        return expl, res


def fit_frame(
    observed: Sequence[ObservedFamily],
    lattice,
    orientations: dict,
    systems,
    frame=None,
    orientation_sigma_deg: float = 1.0,
    p_none: float = DEFAULT_P_NONE,
    fit_mirror: bool = True,
    modes=None,
    families=None,
    n_bootstrap: int = 200,
    coarse_step_deg: float = _STEP,
    seed: int = 0,
) -> FrameFit:
    """Fit the in-plane rotation (and a mirror) between orientation data and image.

    Parameters
    ----------
    observed : sequence of ObservedFamily
        Families with ``grain`` keys into ``orientations``; at least 3 families in 2 grains.
    lattice : Lattice
    orientations : dict grain -> (3, 3) orientation matrix (v_crystal = g v_sample)
    systems : iterable of DeformationSystem or CandidateSet
    frame : FrameSettings, optional
        The frame assumed so far (its rotation is the "given" value; tilt is kept).
    orientation_sigma_deg : float
        Orientation uncertainty per sample axis, degrees.
    p_none : float
        Prior of "none of these" in the robust evidence.
    fit_mirror : bool
        Also try the mirrored frame (flip_x).
    n_bootstrap : int
        Bootstrap resamples over grains for the uncertainty (0 = curvature only).
    coarse_step_deg : float
        Step of the first scan over rho (the best point is then refined on a 0.025 deg grid).

    Returns
    -------
    FrameFit
    """
    from tracefit.conventions import FrameSettings

    frame = frame or FrameSettings()
    cands = systems if isinstance(systems, CandidateSet) else candidate_set(systems, modes, families)
    by: dict = {}
    for o in observed:
        if o.grain in orientations:
            by.setdefault(o.grain, []).append(o)
    keys = list(by)
    n_fam = sum(len(v) for v in by.values())
    if len(keys) < 2 or n_fam < 3:
        raise TracefitInputError(
            f"fitting the frame needs band families in at least 2 grains with known orientations (3+ families); "
            f"got {n_fam} families in {len(keys)} grains"
        )
    G = np.stack([np.asarray(orientations[k], float) for k in keys])
    obs = [(np.array([o.angle_deg for o in by[k]]), np.array([o.angle_sigma_deg for o in by[k]])) for k in keys]
    tilt = float(frame.tilt_deg) != 0.0
    given_flip = bool(frame.flip_x) != bool(frame.flip_y)  # flip_y == flip_x + 180 deg turn
    given_rho = float(frame.rotation_deg) + (180.0 if frame.flip_y else 0.0)
    states = [False, True] if fit_mirror else [given_flip]
    grid = np.arange(-90.0, 90.0, float(coarse_step_deg))
    scans = {}
    evals = {}
    for st in states:
        ev = _Evaluator(obs, G, cands, frame, st, orientation_sigma_deg, p_none, tilt)
        evals[st] = ev
        scans[st] = np.array([ev.per_grain(r).sum() for r in grid])
    best_state = max(states, key=lambda s: scans[s].max())
    other = [s for s in states if s != best_state]
    mirror_ev = float(scans[best_state].max() - scans[other[0]].max()) if other else float("nan")
    ev = evals[best_state]
    scan = scans[best_state]
    i0 = int(np.argmax(scan))
    # Fine local grid (periodic), per grain, for refinement and bootstrap.
    half = max(1.0, 1.5 * float(coarse_step_deg))
    fine = grid[i0] + np.arange(-half, half + 1e-9, 0.025)
    per = np.array([ev.per_grain(r) for r in fine])  # (K, n_grains)
    tot = per.sum(axis=1)
    k0 = int(np.argmax(tot))
    rho = float(fine[k0])
    # curvature sigma from a quadratic fit around the peak (+-0.5 deg)
    win = np.abs(fine - rho) <= 0.5
    sig_curv = float("nan")
    if win.sum() >= 5:
        c = np.polyfit(fine[win] - rho, tot[win], 2)
        if c[0] < 0:
            sig_curv = math.sqrt(-1.0 / (2.0 * c[0]))
            rho = rho + float(np.clip(-c[1] / (2 * c[0]), -0.1, 0.1))
    sig_boot = float("nan")
    if n_bootstrap and len(keys) >= 3:
        rng = np.random.default_rng(seed)
        w = rng.multinomial(len(keys), np.full(len(keys), 1.0 / len(keys)), size=n_bootstrap)  # (B, n)
        picks = fine[np.argmax(w @ per.T, axis=1)]
        sig_boot = float(np.std(picks))
    sigmas = [s for s in (sig_curv, sig_boot) if math.isfinite(s)]
    sigma = max(sigmas) if sigmas else float("nan")
    sigma = max(sigma, 0.02) if math.isfinite(sigma) else sigma
    rho = float(axial_difference(rho, 0.0))
    # second separate peak: best scan value more than 5 deg away from the best
    far = np.abs(axial_difference(grid, rho)) > 5.0
    j2 = int(np.argmax(np.where(far, scan, -np.inf)))
    second_deg, second_delta = float(grid[j2]), float(scan.max() - scan[j2])

    fitted = replace(frame, rotation_deg=rho, flip_x=best_state, flip_y=False)
    # explained fractions
    ev_given = evals.get(given_flip) or _Evaluator(obs, G, cands, frame, given_flip, orientation_sigma_deg, p_none, tilt)
    eg, _ = ev_given.details(given_rho)
    ef, rf = ev.details(rho)
    rms = float(np.sqrt(np.mean(rf**2))) if rf.size else float("nan")
    corr = float(axial_difference(rho, given_rho))
    warn = []
    misaligned = False
    if best_state != given_flip and other and mirror_ev > 5.0:
        misaligned = True
        warn.append(
            f"the data look mirrored relative to the image (log-likelihood gain {mirror_ev:.1f}): "
            "set the x flip (or the y flip with 180 deg more rotation)"
        )
    tol = max(3.0 * (sigma if math.isfinite(sigma) else 0.5), 1.0)
    if abs(corr) > tol:
        misaligned = True
        warn.append(
            f"the frame rotation looks off by {corr:+.1f} +- {sigma:.1f} deg: traces fit best at rho = {rho:.1f} deg "
            f"(given {given_rho:.1f}); explained families {100 * eg.mean():.0f} % -> {100 * ef.mean():.0f} %"
        )
    if second_delta < 3.0:
        warn.append(
            f"the fit is not unique: rho = {second_deg:.1f} deg is almost as good (log-likelihood deficit {second_delta:.1f}); "
            "add grains or families"
        )
    if ef.mean() < 0.6:
        warn.append(
            f"only {100 * ef.mean():.0f} % of families are explained even in the best frame: check the lattice, "
            "the orientations (grain ids) and the selected modes"
        )
    return FrameFit(rho, sigma, bool(best_state), fitted, given_rho, misaligned, mirror_ev if other else float("nan"),
                    float(eg.mean()), float(ef.mean()), rms, n_fam, len(keys), warn, grid, scan, second_deg, second_delta)
