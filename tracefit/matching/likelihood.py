"""The probability primitives of identification, each written once.

Per observed family f and candidate c (one plane variant of one mode):

* residual r = axial difference observed - predicted (image frame, degrees);
* spread sigma_fc^2 = sigma_det^2 + (J sigma_orient / sin i)^2 + (J sigma_frame)^2, where
  ``sigma_det`` is the family's detection (or measurement) sigma, ``i`` the plane's
  inclination to the surface and J = d(apparent)/d(true) the stage-tilt foreshortening
  slope (1 without tilt). ``sigma_orient / sin i`` is the exact first-order spread of a
  trace angle when the orientation carries independent small rotations of sigma_orient
  about each of the three sample axes: a turn about the surface normal moves the trace
  1:1, turns about the in-plane axes move it by n_z n_{x,y} / (n_x^2 + n_y^2), and the
  three add to 1 / sin^2 i (:func:`predicted_trace_sigma`);
* likelihood: an axial von Mises density on the doubled angle with kappa = 1 / (4 sigma^2)
  (:func:`axial_logpdf`; equal to a Gaussian of sigma for small sigma, and tending to
  uniform for large sigma, so near-surface planes stop claiming every family);
* "none of these": a uniform density 1/180 per degree with prior weight ``p_none``
  (:func:`none_log_density`; default 0.05: in our experience a few percent of detected
  families are scratches, polishing marks, grain-boundary edges or belong to a wrong
  orientation; common practice, no source); a family looked for only near a predicted trace
  is weighed per trace searched instead (:func:`window_log_mass`);
* prior (:func:`candidate_prior`): the remaining 1 - p_none is shared by the system families
  (``"{110}<111> slip"``, ``"basal <a>"``, ...), equally unless the user weighs them, and each
  family's share is spread equally over its planes
  (:func:`tracefit.matching.candidates.system_family_prior`); without family shares, equally
  by distinct plane. An optional Schmid prior (``schmid_weight = k``, default 0 = off)
  multiplies each candidate's weight by max(m, 0.02)^k, m its best Schmid factor. Off by
  default because in a polycrystal the active system is often not the one with the highest
  Schmid factor; k = 1 is a mild choice.

:func:`family_log_weights` combines them into the (F, P + 1) table of log (prior x
likelihood) that the joint assignment (:mod:`tracefit.matching.joint`) turns into
probabilities; :func:`mixture_log_evidence` sums it per family for the searches over frames
and orientations.
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from scipy.special import i0e

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError

__all__ = [
    "DEFAULT_P_NONE",
    "UNIFORM_LOGPDF",
    "MIN_SCHMID_PRIOR",
    "logsumexp",
    "von_mises_kappa",
    "axial_logpdf",
    "predicted_trace_sigma",
    "candidate_prior",
    "candidate_log_prior",
    "none_log_density",
    "family_log_weights",
    "window_log_mass",
    "mixture_log_evidence",
]

#: Prior probability that an observed family belongs to no candidate (common practice, no source).
DEFAULT_P_NONE = 0.05
#: Log density of "none of these": uniform over the 180 degrees of an axial angle, per degree.
UNIFORM_LOGPDF = -math.log(180.0)
#: Floor of the Schmid factor in the optional Schmid prior, so that no candidate is ruled out.
MIN_SCHMID_PRIOR = 0.02
# Planes within 0.2 deg of the surface get the spread of a 0.2 deg plane (finite, huge).
_MIN_SIN = math.sin(math.radians(0.2))
# Spreads below 1e-3 deg are floored: a zero sigma would make the density a delta function.
_MIN_SIGMA_DEG = 1e-3


def logsumexp(a: ArrayLike, axis: int | None = None, keepdims: bool = False) -> float | np.ndarray:
    """log(sum(exp(a))) along an axis, without overflow.

    Plain numpy: scipy's version is several times slower on the small arrays of the matcher.

    Parameters
    ----------
    a : array_like
        Log values; -inf entries contribute nothing.
    axis : int, optional
        Axis to sum over (all entries when None).
    keepdims : bool
        Keep the summed axis with length 1.

    Returns
    -------
    float or ndarray
        A float when the result is a scalar, else an array of ``a``'s shape without ``axis``.
        An all -inf slice gives -inf (numpy warns of the log of zero).

    Examples
    --------
    >>> import numpy as np
    >>> round(logsumexp([np.log(0.25), np.log(0.75)]), 12)
    0.0
    >>> print(np.round(logsumexp([[0.0, 0.0], [1.0, -np.inf]], axis=1), 4))
    [0.6931 1.    ]
    """
    a = np.asarray(a, float)
    m = np.max(a, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    out = np.log(np.sum(np.exp(a - m), axis=axis, keepdims=True)) + m  # (no errstate: it costs more than the sum here)
    if not keepdims:
        out = np.squeeze(out, axis=axis) if axis is not None else out.reshape(())
    return out if out.ndim else float(out)


def von_mises_kappa(sigma_deg: ArrayLike) -> np.ndarray:
    """Concentration of the axial von Mises density that has a one-sigma spread ``sigma_deg``.

    kappa = 1 / (4 sigma^2), sigma in radians (floored at 1e-3 deg): the density lives on the
    doubled angle, whose spread is 2 sigma.

    Parameters
    ----------
    sigma_deg : array_like
        One-sigma spread of the axial angle, degrees.

    Returns
    -------
    ndarray
        kappa, same shape as ``sigma_deg`` (dimensionless).

    Examples
    --------
    >>> round(float(von_mises_kappa(1.0)), 1)
    820.7
    """
    s = np.radians(np.maximum(np.asarray(sigma_deg, float), _MIN_SIGMA_DEG))
    return 1.0 / (4.0 * s * s)


def axial_logpdf(residual_deg: ArrayLike, sigma_deg: ArrayLike) -> np.ndarray:
    """Log density (per degree) of an axial residual: von Mises on the doubled angle.

    kappa = 1 / (4 sigma^2) with sigma in radians (:func:`von_mises_kappa`), so that for
    small sigma the density is the Gaussian exp(-r^2 / 2 sigma^2) / (sqrt(2 pi) sigma); for
    large sigma it tends to the uniform 1/180 per degree.

    Parameters
    ----------
    residual_deg : array_like
        Observed - predicted axial angle, degrees (any range; the density has period 180).
    sigma_deg : array_like
        One-sigma spread, degrees (broadcast against ``residual_deg``).

    Returns
    -------
    ndarray
        Log density per degree, the broadcast shape of the inputs.

    Examples
    --------
    >>> import math
    >>> round(float(axial_logpdf(0.0, 0.5)), 4) == round(-math.log(math.sqrt(2 * math.pi) * 0.5), 4)
    True
    >>> abs(round(float(axial_logpdf(45.0, 1e4)) + math.log(180.0), 6))
    0.0
    """
    r = np.radians(np.asarray(residual_deg, float))
    kappa = von_mises_kappa(sigma_deg)
    # density per radian of the axial angle (period pi): exp(k cos 2r) / (pi I0(k))
    logp = kappa * (np.cos(2.0 * r) - 1.0) - np.log(np.pi * i0e(kappa))
    return logp + math.log(math.pi / 180.0)


def predicted_trace_sigma(inclination_deg: ArrayLike, orientation_sigma_deg: float, slope: ArrayLike = 1.0) -> np.ndarray:
    """Spread (deg) of a predicted trace angle from orientation uncertainty.

    Parameters
    ----------
    inclination_deg : array_like
        Plane inclination to the surface, degrees (90 = upright).
    orientation_sigma_deg : float
        One-sigma small rotation about each sample axis, degrees.
    slope : array_like
        d(apparent angle)/d(true angle) of the stage tilt (1 without tilt).

    Returns
    -------
    ndarray
        sigma_orient * |slope| / sin(inclination), degrees, the broadcast shape of the inputs
        (first order; large values mean the trace is ill-defined).

    Examples
    --------
    >>> print(np.round(predicted_trace_sigma([90.0, 30.0], 1.0), 3))
    [1. 2.]
    """
    s = np.maximum(np.sin(np.radians(np.asarray(inclination_deg, float))), _MIN_SIN)
    return float(orientation_sigma_deg) * np.abs(np.asarray(slope, float)) / s


def candidate_prior(plane_ids: ArrayLike, p_none: float, drive: ArrayLike | None = None,
                    schmid_weight: float = 0.0, share: ArrayLike | None = None) -> np.ndarray:
    """Prior probability of every candidate; the candidates share 1 - ``p_none``.

    In proportion to ``share`` (the matcher passes the system-family shares of
    :func:`tracefit.matching.candidates.system_family_prior`); without it equal per distinct
    plane, split equally among the modes on that plane. With ``schmid_weight = k > 0`` and a
    ``drive`` each weight is multiplied by max(drive, 0.02)^k and the total renormalised to
    1 - p_none.

    Parameters
    ----------
    plane_ids : array_like of int, shape (P,)
        Distinct-plane index of every candidate (slip and twin on one plane share it).
    p_none : float
        Prior of "none of these", in [0, 1).
    drive : array_like, shape (P,), optional
        Best Schmid factor (or Schmid-like scaled resolved shear) of each candidate, >= 0.
    schmid_weight : float
        Exponent k of the Schmid prior (0 = off).
    share : array_like, shape (P,), optional
        Relative prior weight of every candidate (>= 0, not all 0).

    Returns
    -------
    ndarray, shape (P,)
        Prior probabilities, summing to 1 - p_none.

    Examples
    --------
    >>> print(candidate_prior([0, 0, 1], 0.1))
    [0.225 0.225 0.45 ]
    >>> print(candidate_prior([0, 0, 1], 0.1, share=[1, 1, 2]))
    [0.225 0.225 0.45 ]
    """
    ids = np.asarray(plane_ids, int)
    if share is not None:
        w = np.asarray(share, float)
        prior = (1.0 - p_none) * w / w.sum()
    else:
        npl = int(ids.max()) + 1
        counts = np.bincount(ids, minlength=npl)
        prior = (1.0 - p_none) / npl / counts[ids]
    if schmid_weight and drive is not None:
        w = np.maximum(np.asarray(drive, float), MIN_SCHMID_PRIOR) ** float(schmid_weight)
        prior = prior * w
        prior = prior / prior.sum() * (1.0 - p_none)  # the candidates keep their total 1 - p_none
    return prior


def candidate_log_prior(plane_ids: ArrayLike, p_none: float, drive: ArrayLike | None = None,
                        schmid_weight: float = 0.0, share: ArrayLike | None = None) -> np.ndarray:
    """Log of :func:`candidate_prior` (floored at 1e-300, so always finite).

    Parameters
    ----------
    plane_ids, p_none, drive, schmid_weight, share
        As :func:`candidate_prior`.

    Returns
    -------
    ndarray, shape (P,)
        Natural log of each candidate's prior probability.

    Examples
    --------
    >>> print(np.round(np.exp(candidate_log_prior([0, 1, 2, 3], 0.0)), 3))
    [0.25 0.25 0.25 0.25]
    """
    return np.log(np.maximum(candidate_prior(plane_ids, p_none, drive, schmid_weight, share), 1e-300))


def none_log_density(p_none: float, support: float = 180.0) -> float:
    """Log of the "none of these" weight: prior ``p_none`` times a uniform density over ``support``.

    Parameters
    ----------
    p_none : float
        Prior probability of "none of these", in [0, 1).
    support : float
        Measure of the space the uniform density covers: 180 (degrees of an axial angle) for
        trace angles, 2 pi (steradians of a half sphere) for plane normals.

    Returns
    -------
    float
        log(p_none) - log(support); -inf for p_none = 0.

    Examples
    --------
    >>> round(none_log_density(0.05), 4)
    -8.1887
    >>> none_log_density(0.0)
    -inf
    """
    if p_none <= 0.0:
        return -math.inf
    return math.log(p_none) - math.log(support)


def family_log_weights(obs_ang: ArrayLike, obs_sig: ArrayLike, pred_ang: ArrayLike, pred_sig: ArrayLike,
                       log_prior: ArrayLike, p_none: float, frame_sigma: float = 0.0,
                       slope: ArrayLike = 1.0, windows: ArrayLike | None = None,
                       plane_ids: ArrayLike | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Log (prior x likelihood) of every family (F) and candidate (P), plus "none" last.

    Parameters
    ----------
    obs_ang, obs_sig : array_like, shape (F,)
        Observed axial angles and their one-sigma spreads, degrees.
    pred_ang, pred_sig : array_like, shape (P,)
        Predicted trace angles and their spreads from orientation uncertainty, degrees.
    log_prior : array_like, shape (P,)
        Log prior of every candidate (:func:`candidate_log_prior`).
    p_none : float
        Prior of "none of these", in [0, 1).
    frame_sigma : float
        One-sigma uncertainty of the frame rotation, degrees.
    slope : array_like, shape (P,) or scalar
        Stage-tilt slope d(apparent)/d(true) of every candidate (1 without tilt).
    windows : array_like, shape (F, 2), optional
        Per family the window of angles it was looked for in, (centre, width) in degrees;
        width 180 (the default for every family) is an open search. For a family sought near a
        predicted trace (:attr:`ObservedFamily.search_width_deg`) the "none" weight is
        multiplied by 180 M / width (:func:`window_log_mass`, at least 1).
    plane_ids : array_like of int, shape (P,), optional
        Distinct-plane index of every candidate (for ``windows``; default: each its own plane).

    Returns
    -------
    logw : ndarray, shape (F, P + 1)
        Log weights, per degree; the last column is "none" (-inf when p_none = 0).
    resid : ndarray, shape (F, P)
        Observed - predicted, axial degrees in (-90, 90].
    sig : ndarray, shape (F, P)
        Total sigma used, degrees.

    Examples
    --------
    >>> logw, resid, sig = family_log_weights([10.0], [0.5], [10.5, 100.0], [0.0, 0.0], np.log([0.5, 0.5]), 0.0)
    >>> print(np.round(resid, 3), np.round(sig, 3), logw[0, -1])
    [[-0.5 90. ]] [[0.5 0.5]] -inf
    """
    obs_ang = np.asarray(obs_ang, float)[:, None]
    obs_sig = np.asarray(obs_sig, float)[:, None]
    resid = axial_difference(obs_ang, np.asarray(pred_ang, float)[None, :])
    resid = np.asarray(resid, float).reshape(obs_ang.shape[0], -1)
    fs = frame_sigma * np.abs(np.asarray(slope, float))
    sig = np.sqrt(obs_sig**2 + np.asarray(pred_sig, float)[None, :] ** 2 + np.asarray(fs)[None, ...] ** 2)
    ll = axial_logpdf(resid, sig) + np.asarray(log_prior, float)[None, :]
    none = np.full((ll.shape[0], 1), none_log_density(p_none))
    if windows is not None:
        win = _checked_windows(windows, ll.shape[0])
        ids = np.arange(ll.shape[1]) if plane_ids is None else np.asarray(plane_ids, int)
        for f in np.flatnonzero(win[:, 1] < 180.0):
            none[f, 0] = none_log_density(p_none, win[f, 1]) + window_log_mass(win[f, 0], win[f, 1], pred_ang, sig[f], ids)
    return np.concatenate([ll, none], axis=1), resid, sig


def _checked_windows(windows: ArrayLike, n_families: int) -> np.ndarray:
    """``windows`` as an (F, 2) float array of (centre, width), or TracefitInputError naming the fault."""
    try:
        win = np.asarray(windows, float)
    except (TypeError, ValueError):
        raise TracefitInputError(f"windows must be (centre, width) pairs in degrees, got {windows!r}") from None
    if win.shape != (n_families, 2):
        raise TracefitInputError(f"windows must hold one (centre, width) pair per family, shape ({n_families}, 2); "
                                 f"got shape {win.shape}")
    if not np.all((win[:, 1] > 0.0) & (win[:, 1] <= 180.0)):
        raise TracefitInputError("window widths must be in (0, 180] degrees")
    if not np.all(np.isfinite(win[win[:, 1] < 180.0, 0])):
        raise TracefitInputError("a window narrower than 180 deg needs a finite centre")
    return win


def window_log_mass(centre_deg: float, width_deg: float, pred_ang: ArrayLike, sigma: ArrayLike,
                    plane_ids: ArrayLike | None = None) -> float:
    """Log of M, the chance that an average candidate plane's trace is measured inside a window.

    A family the detector looked for only in an angle window (a guided search at one
    predicted trace) is weighed per trace searched, not per degree: false families come with
    each trace the search visits, true ones in proportion to their plane's prior, so
    ``p_none`` is read as the chance that such a family is none of the candidates when it
    turned up at the trace of a plane of average prior. Inside the window the angle's density
    is 1 / width under "none" and f_c / P_c under candidate c (P_c the share of c's density
    inside the window). Put together, the odds of "none" against the candidates are those of
    an open search times 180 M / width, M the mean of P_c over the distinct planes. M is kept
    at least width / 180 (what a uniform angle puts in the window): the window never makes
    the candidates look better than the same angle would in an open search (a window no
    candidate predicts, a catalogue of so many planes that any angle lies near a trace).

    Parameters
    ----------
    centre_deg, width_deg : float
        The window, degrees (axial).
    pred_ang, sigma : array_like, shape (P,)
        Predicted trace angles and the family's total sigma against each, degrees.
    plane_ids : array_like of int, shape (P,), optional
        Distinct-plane index of every candidate (rows of one plane count once); default each
        its own plane.

    Returns
    -------
    float
        log M.

    Examples
    --------
    Four planes, the window centred on one of them (sigma 0.5 deg, far from the others): M is
    about a quarter, so "none" weighs 180 x 0.25 / 6 = 7.5 times what it does in an open search.

    >>> round(math.exp(window_log_mass(30.0, 6.0, [30.0, 80.0, 120.0, 160.0], [0.5] * 4)), 3)
    0.25
    """
    from scipy.stats import vonmises  # only families sought in a window need it

    pred = np.asarray(pred_ang, float).reshape(-1)
    ids = np.arange(len(pred)) if plane_ids is None else np.asarray(plane_ids, int).reshape(-1)
    kappa = von_mises_kappa(np.asarray(sigma, float))
    d = np.radians(np.asarray(axial_difference(centre_deg, pred), float))
    half = math.radians(width_deg) / 2.0
    # the axial density is a von Mises on the doubled angle (axial_logpdf); its cdf counts whole periods
    inside = np.clip(vonmises.cdf(2.0 * (d + half), kappa) - vonmises.cdf(2.0 * (d - half), kappa), 0.0, 1.0)
    _, first, counts = np.unique(ids, return_inverse=True, return_counts=True)
    per_plane = np.bincount(first, inside / counts[first]) if len(pred) else np.zeros(0)
    mass = float(np.mean(per_plane)) if len(per_plane) else 0.0
    return math.log(max(mass, width_deg / 180.0)) if math.isfinite(mass) else math.log(width_deg / 180.0)


def mixture_log_evidence(log_w: ArrayLike, log_none: float, axis: int = -1) -> float | np.ndarray:
    """Log evidence of families that each are one of the candidates or "none": the robust sum.

    log(p_none / 180 + sum_c prior_c f(r_c; s_c)), families independent (no exclusion rule):
    families that nothing explains contribute a constant and cannot drag a fit.

    Parameters
    ----------
    log_w : array_like
        Log (prior x likelihood) of the candidates, candidates along ``axis``.
    log_none : float
        Log weight of "none of these" (:func:`none_log_density`).
    axis : int
        Candidate axis.

    Returns
    -------
    ndarray or float
        Log evidence per family, ``log_w``'s shape without ``axis``.

    Examples
    --------
    >>> round(float(mixture_log_evidence(np.log([[0.2, 0.3]]), np.log(0.5))[0]), 12)
    0.0
    """
    return np.logaddexp(logsumexp(log_w, axis=axis), log_none)
