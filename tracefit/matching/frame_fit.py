"""Fit the frame between the image and the orientation data from many grains' band families.

A wrong in-plane rotation (or a mirrored axis) between an EBSD-like orientation map and the
micrograph moves every predicted trace and is a common source of wrong answers. With the
families of several grains, the rotation rho (v_image = Rz(rho) v_data) is the value that
makes the predicted traces explain the observed ones best.

Model: for a trial frame, each family's evidence is the robust mixture used by the matcher,
p_none / 180 + sum_c prior_c f(r_c; sigma_c) (see :mod:`tracefit.matching.likelihood`), so families
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
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from tracefit.conventions import FrameSettings, axial_difference, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.matching.candidates import as_candidate_set, predict_candidates
from tracefit.matching.checks import check_fraction, check_sigma, orientation_table
from tracefit.matching.likelihood import (
    DEFAULT_P_NONE,
    axial_logpdf,
    candidate_log_prior,
    mixture_log_evidence,
    none_log_density,
    predicted_trace_sigma,
    von_mises_kappa,
)
from tracefit.matching.observed import ObservedFamily

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

    Examples
    --------
    See :func:`fit_frame` for a fit; the JSON form gives the correction to apply:

    >>> from tracefit.conventions import FrameSettings
    >>> f = FrameFit(20.04, 0.3, False, FrameSettings(rotation_deg=20.04), 0.0, True, 12.0, 0.4, 1.0, 0.2, 6, 3)
    >>> f.to_dict()["correction_deg"], f.to_dict()["misaligned"]
    (20.04, True)
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
        """JSON form (angles to 4 decimals, with the correction rotation - given)."""
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
        self.log_prior = candidate_log_prior(cands.plane_ids, p_none)
        self.lnone = none_log_density(p_none)
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
            # tracefit.matching.likelihood.axial_logpdf), so each trial rho costs a rotation of (cos, sin).
            r0 = np.radians(2.0 * axial_difference(self.oa[:, :, None], ang0[:, None, :]))
            self.c0, self.s0 = np.cos(r0), np.sin(r0)
            self.kappa = von_mises_kappa(self.sig)
            self.lognorm = axial_logpdf(0.0, self.sig) + self.log_prior[None, None, :]

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
        lse = mixture_log_evidence(ll, self.lnone, axis=2)
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


def _grain_groups(observed, orientations):
    """Families per grain with a known orientation: keys, G (n, 3, 3), [(angles, sigmas)], family count."""
    by: dict = {}
    for o in observed:
        if not isinstance(o, ObservedFamily):
            raise TracefitInputError(f"observed must hold ObservedFamily objects with grain keys, got {type(o).__name__}")
        if o.grain in orientations:
            by.setdefault(o.grain, []).append(o)
    keys = list(by)
    n_fam = sum(len(v) for v in by.values())
    if len(keys) < 2 or n_fam < 3:
        raise TracefitInputError(
            f"fitting the frame needs band families in at least 2 grains with known orientations (3+ families); "
            f"got {n_fam} families in {len(keys)} grains"
        )
    G = np.stack([orientations[k] for k in keys])
    obs = [(np.array([o.angle_deg for o in by[k]]), np.array([o.angle_sigma_deg for o in by[k]])) for k in keys]
    return keys, G, obs, n_fam


def _refine_peak(ev: _Evaluator, grid: np.ndarray, scan: np.ndarray, step: float, n_bootstrap: int, seed: int):
    """Best rho on a fine grid around the scan's maximum, and its sigma (curvature or bootstrap over grains)."""
    i0 = int(np.argmax(scan))
    half = max(1.0, 1.5 * float(step))
    fine = grid[i0] + np.arange(-half, half + 1e-9, 0.025)
    per = np.array([ev.per_grain(r) for r in fine])  # (K, n_grains)
    tot = per.sum(axis=1)
    rho = float(fine[int(np.argmax(tot))])
    # curvature sigma from a quadratic fit around the peak (+-0.5 deg)
    win = np.abs(fine - rho) <= 0.5
    sig_curv = float("nan")
    if win.sum() >= 5:
        c = np.polyfit(fine[win] - rho, tot[win], 2)
        if c[0] < 0:
            sig_curv = math.sqrt(-1.0 / (2.0 * c[0]))
            rho = rho + float(np.clip(-c[1] / (2 * c[0]), -0.1, 0.1))
    sig_boot = float("nan")
    n = per.shape[1]
    if n_bootstrap and n >= 3:
        rng = np.random.default_rng(seed)
        w = rng.multinomial(n, np.full(n, 1.0 / n), size=n_bootstrap)  # (B, n)
        sig_boot = float(np.std(fine[np.argmax(w @ per.T, axis=1)]))
    sigmas = [s for s in (sig_curv, sig_boot) if math.isfinite(s)]
    sigma = max(sigmas) if sigmas else float("nan")
    sigma = max(sigma, 0.02) if math.isfinite(sigma) else sigma
    return float(axial_difference(rho, 0.0)), sigma


def _frame_warnings(mirrored: bool, mirror_ev: float, rho: float, sigma: float, given_rho: float,
                    eg: np.ndarray, ef: np.ndarray, second_deg: float, second_delta: float):
    """(misaligned, warnings) of a fitted frame against the given one."""
    warn = []
    misaligned = False
    if mirrored and mirror_ev > 5.0:
        misaligned = True
        warn.append(
            f"the data look mirrored relative to the image (log-likelihood gain {mirror_ev:.1f}): "
            "set the x flip (or the y flip with 180 deg more rotation)"
        )
    corr = float(axial_difference(rho, given_rho))
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
    return misaligned, warn


def fit_frame(
    observed: Sequence[ObservedFamily],
    lattice: Any,
    orientations: Mapping[Any, Any],
    systems: Any,
    frame: FrameSettings | None = None,
    orientation_sigma_deg: float = 1.0,
    p_none: float = DEFAULT_P_NONE,
    fit_mirror: bool = True,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
    n_bootstrap: int = 200,
    coarse_step_deg: float = _STEP,
    seed: int = 0,
) -> FrameFit:
    """Fit the in-plane rotation (and a mirror) between orientation data and image.

    Parameters
    ----------
    observed : sequence of ObservedFamily
        Families with ``grain`` keys into ``orientations``; at least 3 families in 2 grains.
    lattice : tracefit.crystal.Lattice
        The crystal lattice (not used by the fit; kept for a uniform call).
    orientations : dict grain -> ndarray (3, 3) or orientation with ``as_matrix()``
        Orientation of each grain, v_crystal = g v_sample.
    systems : iterable of DeformationSystem or CandidateSet
        Candidate systems.
    frame : FrameSettings, optional
        The frame assumed so far (its rotation is the "given" value; tilt is kept).
    orientation_sigma_deg : float
        Orientation uncertainty per sample axis, degrees (>= 0).
    p_none : float
        Prior of "none of these" in the robust evidence, in [0, 1).
    fit_mirror : bool
        Also try the mirrored frame (flip_x).
    modes, families : iterable of str, optional
        Filters of the candidate systems.
    n_bootstrap : int
        Bootstrap resamples over grains for the uncertainty (0 = curvature only).
    coarse_step_deg : float
        Step of the first scan over rho, degrees (the best point is then refined on a 0.025 deg grid).
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    FrameFit

    Raises
    ------
    TracefitInputError
        For a bad argument, or fewer than 3 families in 2 grains with known orientations.

    Examples
    --------
    Three fcc grains whose data frame is turned by 20 deg against the image:

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> from tracefit.matching.candidates import candidate_set
    >>> fcc = lattice_preset("fcc")
    >>> cs = candidate_set(catalogue(fcc), ["slip"])
    >>> gs = {k: from_euler(e) for k, e in enumerate([(10, 30, 0), (70, 40, 20), (130, 25, 50)])}
    >>> obs = [ObservedFamily(float(a) + 20.0, 0.3, grain=k)
    ...        for k, g in gs.items() for a in predict_candidates(cs, g)[0][0, :2]]
    >>> fit = fit_frame(obs, fcc, gs, cs, n_bootstrap=0)
    >>> round(fit.rotation_deg), fit.flip_x, fit.misaligned
    (20, False, True)
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 36 lines.
    frame = frame or FrameSettings()
    check_sigma(orientation_sigma_deg, "orientation_sigma_deg")
    check_fraction(p_none, "p_none")
    if not (math.isfinite(coarse_step_deg) and 0.0 < coarse_step_deg <= 10.0):
        raise TracefitInputError(f"coarse_step_deg must be in (0, 10] degrees, got {coarse_step_deg!r}")
    if int(n_bootstrap) < 0:
        raise TracefitInputError(f"n_bootstrap must be >= 0, got {n_bootstrap!r}")
    orientations = orientation_table(orientations)
    cands = as_candidate_set(systems, modes, families)
    keys, G, obs, n_fam = _grain_groups(observed, orientations)
    tilt = float(frame.tilt_deg) != 0.0
    given_flip = bool(frame.flip_x) != bool(frame.flip_y)  # flip_y == flip_x + 180 deg turn
    given_rho = float(frame.rotation_deg) + (180.0 if frame.flip_y else 0.0)
    states = [False, True] if fit_mirror else [given_flip]
    grid = np.arange(-90.0, 90.0, float(coarse_step_deg))
    evals = {st: _Evaluator(obs, G, cands, frame, st, orientation_sigma_deg, p_none, tilt) for st in states}
    scans = {st: np.array([ev.per_grain(r).sum() for r in grid]) for st, ev in evals.items()}
    best_state = max(states, key=lambda s: scans[s].max())
    other = [s for s in states if s != best_state]
    mirror_ev = float(scans[best_state].max() - scans[other[0]].max()) if other else float("nan")
    ev, scan = evals[best_state], scans[best_state]
    rho, sigma = _refine_peak(ev, grid, scan, coarse_step_deg, n_bootstrap, seed)
    # second separate peak: best scan value more than 5 deg away from the best
    far = np.abs(axial_difference(grid, rho)) > 5.0
    j2 = int(np.argmax(np.where(far, scan, -np.inf)))
    second_deg, second_delta = float(grid[j2]), float(scan.max() - scan[j2])
    fitted = replace(frame, rotation_deg=rho, flip_x=best_state, flip_y=False)
    # explained fractions in the given and in the fitted frame
    ev_given = evals.get(given_flip) or _Evaluator(obs, G, cands, frame, given_flip, orientation_sigma_deg, p_none, tilt)
    eg, _ = ev_given.details(given_rho)
    ef, rf = ev.details(rho)
    rms = float(np.sqrt(np.mean(rf**2))) if rf.size else float("nan")
    misaligned, warn = _frame_warnings(best_state != given_flip and bool(other), mirror_ev, rho, sigma, given_rho,
                                       eg, ef, second_deg, second_delta)
    return FrameFit(rho, sigma, bool(best_state), fitted, given_rho, misaligned, mirror_ev if other else float("nan"),
                    float(eg.mean()), float(ef.mean()), rms, n_fam, len(keys), warn, grid, scan, second_deg, second_delta)
