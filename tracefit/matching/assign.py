"""Identification of observed band families: one grain (:func:`identify_families`) or a grain
map (:func:`identify_grains`).

Per grain: predicted traces (:mod:`tracefit.matching.candidates`) -> log (prior x likelihood)
of every family and candidate (:mod:`tracefit.matching.likelihood`) -> joint assignment, no two
families on one plane (:mod:`tracefit.matching.joint`) -> verdicts
(:mod:`tracefit.matching.verdicts`). On a grain map a map-level surface-artefact hypothesis
(:mod:`tracefit.matching.artefacts`) may add a third kind of answer: a family on a straight
surface line that keeps one image angle across grains. Like "none" it may be taken by any
number of families; each family reports its probability as ``p_artefact``.
"""

from __future__ import annotations

import math
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from tracefit.conventions import FrameSettings
from tracefit.errors import TracefitInputError
from tracefit.matching.artefacts import (
    DEFAULT_LINE_SIGMA_DEG,
    DEFAULT_MIN_WITNESSES,
    CrystalContext,
    artefact_family_weights,
    find_artefact_directions,
)
from tracefit.matching.candidates import CandidateSet, as_candidate_set, predict_candidates, system_family_prior
from tracefit.matching.checks import check_matcher_options, orientation_matrix, orientation_table
from tracefit.matching.joint import SharedRotation, joint_marginals
from tracefit.matching.likelihood import (
    DEFAULT_P_NONE,
    candidate_log_prior,
    family_log_weights,
    logsumexp,
    predicted_trace_sigma,
)
from tracefit.matching.loading import prior_drive, rank_systems, resolve_load
from tracefit.matching.observed import ObservedFamily, as_observed
from tracefit.matching.results import FamilyIdentification
from tracefit.matching.verdicts import GrainPosterior, family_verdict, flag_all_unexplained

__all__ = [
    "identify_families",
    "identify_grains",
    "grain_log_weights",
    "shared_rotation",
    "DEFAULT_REPORT_THRESHOLD",
    "DEFAULT_AMBIGUITY_RATIO",
]

DEFAULT_REPORT_THRESHOLD = 0.01  # candidates below this posterior are not listed
DEFAULT_AMBIGUITY_RATIO = 0.1  # a second plane with >= 10 % of the best's probability -> ambiguous
_ARTEFACT_OPTIONS = ("p_map", "line_sigma_deg", "min_witnesses", "max_directions")


def grain_log_weights(obs: Sequence[ObservedFamily], cands: CandidateSet, g: np.ndarray, ang: np.ndarray,
                      incl: np.ndarray, slope: np.ndarray, load: Any, osig: float, fsig: float, p_none: float,
                      schmid_weight: float, frame: FrameSettings | None = None, share: np.ndarray | None = None,
                      crss: Mapping[str, float] | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, list]:
    """Log (prior x likelihood) of every family of one grain, before the joint assignment.

    Parameters
    ----------
    obs : sequence of ObservedFamily
        The F families of the grain.
    cands : CandidateSet
        P candidates.
    g : ndarray, shape (3, 3)
        The grain's orientation.
    ang, incl, slope : ndarray, shape (P,)
        Predicted trace angles, inclinations (deg) and tilt slopes (:func:`predict_candidates`).
    load : None, LoadAxis or stress array
        As :func:`tracefit.matching.loading.resolve_load` returns.
    osig, fsig : float
        Orientation and frame sigmas, degrees.
    p_none, schmid_weight : float
        Prior of "none of these" and exponent of the Schmid prior.
    frame : FrameSettings, optional
        Places an image-frame load in the orientation data's frame.
    share : ndarray, shape (P,), optional
        Prior shares of the candidates (:func:`tracefit.matching.candidates.system_family_prior`);
        default equal per distinct plane.
    crss : dict, optional
        CRSS per system family (MPa), for the CRSS check under a stress.

    Returns
    -------
    logw : ndarray, shape (F, P + 1)
    resid, sig : ndarray, shape (F, P)
        Residuals and total sigmas, degrees.
    psig : ndarray, shape (P,)
        Predicted-trace sigmas, degrees.
    systems_ranked : list (P) of list of SystemChoice

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> from tracefit.matching.candidates import candidate_set
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")), ["slip"])
    >>> ang, incl, slope = predict_candidates(cs, np.eye(3))
    >>> logw, *_ = grain_log_weights([ObservedFamily(75.0)], cs, np.eye(3), ang[0], incl[0], slope[0],
    ...                              None, 1.0, 0.5, 0.05, 0.0)
    >>> logw.shape
    (1, 5)
    """
    psig = predicted_trace_sigma(incl, osig, slope)
    systems_ranked, drive = rank_systems(load, cands, g, frame, crss)
    use_schmid = bool(schmid_weight) and load is not None
    log_prior = candidate_log_prior(cands.plane_ids, p_none, prior_drive(load, drive) if use_schmid else None,
                                    schmid_weight if use_schmid else 0.0, share)
    oa = np.array([o.angle_deg for o in obs])
    os_ = np.array([o.angle_sigma_deg for o in obs])
    windows = [(o.sought_at_deg if o.sought_at_deg is not None else 0.0, o.search_width_deg) for o in obs]
    logw, resid, sig = family_log_weights(oa, os_, ang, psig, log_prior, p_none, fsig, slope, windows, cands.plane_ids)
    return logw, resid, sig, psig, systems_ranked


def _fold_in_artefact(logw: np.ndarray, art, P: int):
    """Fold the surface-artefact hypothesis into the "none" column for the joint assignment.

    ``art`` is ``(mass, log_w (F,), angle (F,))``: crystallographic and "none" priors are scaled
    by 1 - mass, and the artefact (like "none", open to any number of families) joins the last
    column; its share of that column's weight is returned to split it off again afterwards.
    """
    F = logw.shape[0]
    if art is None or art[0] <= 0:
        return logw, np.zeros(F), [None] * F
    mass, law, aang = art
    logw = logw + math.log1p(-mass)
    last = np.logaddexp(logw[:, P], law)
    with np.errstate(invalid="ignore"):
        share = np.where(np.isfinite(last), np.exp(law - last), 0.0)
    logw = logw.copy()
    logw[:, P] = last
    return logw, share, list(aang)


def shared_rotation(obs: Sequence[ObservedFamily], cands: CandidateSet, g: np.ndarray, resid: np.ndarray,
                    slope: np.ndarray, osig: float, fsig: float, frame: FrameSettings | None = None) -> SharedRotation:
    """The grain's one orientation and frame error, linearised, for the joint assignment.

    The orientation error is a small rotation with ``osig`` (deg, one sigma) about each sample
    axis, the same for all of the grain's planes; the frame error adds ``fsig`` about the image
    normal. Since the orientation sigma is the same about every axis, it is the same about the
    image axes, and the covariance in image axes is ``diag(osig^2, osig^2, osig^2 + fsig^2)``.

    Parameters
    ----------
    obs : sequence of ObservedFamily
        The F families (their ``angle_sigma_deg`` is the independent part).
    cands : CandidateSet
        P candidates.
    g : ndarray, shape (3, 3)
        The grain's orientation.
    resid : ndarray, shape (F, P)
        Residuals, degrees (from :func:`grain_log_weights`).
    slope : ndarray, shape (P,)
        Stage-tilt slopes.
    osig, fsig : float
        Orientation and frame sigmas, degrees.
    frame : FrameSettings, optional

    Returns
    -------
    SharedRotation

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> from tracefit.matching.candidates import candidate_set
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")), ["slip"])
    >>> sr = shared_rotation([ObservedFamily(75.0, 0.3)], cs, np.eye(3), np.zeros((1, 4)), np.ones(4), 1.0, 0.0)
    >>> np.round(np.linalg.norm(sr.gradient, axis=1), 4).tolist()  # 1 / sin(54.74 deg) for {111} on (001)
    [1.2247, 1.2247, 1.2247, 1.2247]
    """
    from tracefit.predict import plane_normals_in_image, trace_rotation_gradient

    ids = np.asarray(cands.plane_ids, int)
    rep = np.array([int(np.flatnonzero(ids == q)[0]) for q in range(int(ids.max()) + 1)])
    grad = trace_rotation_gradient(plane_normals_in_image(g, cands.normals[rep], frame))
    scale = np.array([osig, osig, math.hypot(osig, fsig)])
    return SharedRotation(residual_deg=np.asarray(resid, float)[:, rep],
                          sigma_deg=np.array([o.angle_sigma_deg for o in obs], float),
                          gradient=grad * scale[None, :] * np.asarray(slope, float)[rep, None])


def _assign_grain(obs, cands, g, ang, incl, slope, load, pre, art, allow_shared, threshold, ratio, coupling=None):
    """Verdicts for the families of one grain from its log weights ``pre`` (:func:`grain_log_weights`);
    ``coupling`` is the grain's :class:`SharedRotation` (None: families independent)."""
    P = len(cands)
    logw, resid, sig, psig, systems_ranked = pre
    logw, art_share, art_angle = _fold_in_artefact(logw, art, P)
    post = joint_marginals(logw, cands.plane_ids, allow_shared, shared_rotation=coupling)
    p_art = post[:, P] * art_share
    post = post.copy()
    post[:, P] = post[:, P] - p_art
    gp = GrainPosterior(cands, post, p_art, art_angle, logw, resid, sig, ang, incl, psig, systems_ranked, load)
    results = [family_verdict(o, f, gp, g, threshold, ratio) for f, o in enumerate(obs)]
    flag_all_unexplained(results, obs[0].grain)
    return results


def identify_families(
    observed: Sequence[ObservedFamily | float],
    lattice: Any,
    g: Any,
    systems: Any,
    frame: FrameSettings | None = None,
    load: Any = None,
    orientation_sigma_deg: float = 1.0,
    frame_sigma_deg: float = 0.5,
    p_none: float = DEFAULT_P_NONE,
    schmid_weight: float = 0.0,
    allow_shared_planes: bool = False,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
    report_threshold: float = DEFAULT_REPORT_THRESHOLD,
    ambiguity_ratio: float = DEFAULT_AMBIGUITY_RATIO,
    grain: Any = None,
    prior: Mapping[str, float] | None = None,
    crss: Mapping[str, float] | None = None,
    shared_orientation: bool = True,
) -> list[FamilyIdentification]:
    """Identify the plane (and system) behind each observed band family of one grain.

    Parameters
    ----------
    observed : sequence of ObservedFamily (or floats: angles in degrees, sigma 0.5)
        Families seen in this grain (one orientation).
    lattice : tracefit.crystal.Lattice
        The crystal lattice (reads crystal-direction loads such as ``"[110]"``).
    g : ndarray, shape (3, 3), or orientation with ``as_matrix()``
        Orientation, v_crystal = g v_sample.
    systems : iterable of DeformationSystem or CandidateSet
        Candidate systems (e.g. ``tracefit.crystal.catalogue(lattice)``); not empty.
    frame : tracefit.conventions.FrameSettings, optional
        Orientation-data frame -> image (rotation, flips, stage tilt).
    load : str, Load or stress array, optional
        Text such as ``"y"`` or ``"[110]"`` (read with ``tracefit.predict.parse_load``), a
        :class:`tracefit.predict.Load`, or a stress tensor in MPa, (3, 3) or Voigt (6,). Axes
        and stresses not given as a Load are along the picture's axes (``frame="image"``) and
        are placed in the orientation data's frame with ``frame``; a ``Load(..., frame="sample")``
        is used as given. Ranks the systems within a plane (Schmid factor or resolved shear)
        and, with ``schmid_weight``, enters the prior.
    orientation_sigma_deg : float
        One-sigma orientation error about each sample axis, degrees (default 1), >= 0; one
        error per grain, shared by all its families (``shared_orientation``).
    frame_sigma_deg : float
        One-sigma uncertainty of the frame rotation, degrees (default 0.5), >= 0.
    p_none : float
        Prior probability that a family belongs to no candidate, in [0, 1) (default 0.05).
    schmid_weight : float
        Exponent k of the optional Schmid prior max(m, 0.02)^k (default 0 = off).
    allow_shared_planes : bool
        Allow two families of one grain to take the same plane.
    modes, families : iterable of str, optional
        Filters of the candidate systems (``["slip"]``, ``["{111}"]``).
    report_threshold : float
        Candidates with a posterior below this are not listed (default 0.01).
    ambiguity_ratio : float
        A second distinct plane with at least this fraction of the best plane's probability
        makes the family ambiguous (default 0.1).
    grain : optional
        Grain key given to families that have none.
    prior : dict, optional
        Relative prior weights of system families (``{"{110}<111>": 2}``; see
        :func:`tracefit.matching.candidates.system_family_prior`); by default every system family
        weighs the same, spread over its planes.
    crss : dict, optional
        CRSS (MPa) per system family, plane family or mode; under a stress every system reports
        its CRSS and whether its resolved shear reaches it.
    shared_orientation : bool
        Integrate the joint assignment over one orientation (and frame) error per grain
        (default); False treats every family's error as independent (the former model).

    Returns
    -------
    list of FamilyIdentification
        One per observed family, in input order.

    Raises
    ------
    TracefitInputError
        For a bad argument, named by its parameter (``g``, ``load``, ``p_none``, ...).

    Examples
    --------
    An fcc crystal at Euler (0, 30, 0) puts the (111) trace at 110.1 deg; a family seen at
    110.2 +- 0.2 deg is (111) slip:

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> r = identify_families([ObservedFamily(110.2, 0.2)], fcc, from_euler((0, 30, 0)), catalogue(fcc, ["slip"]))[0]
    >>> r.best.plane, round(r.best.probability, 3), r.unexplained
    ((1, 1, 1), 0.995, False)
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 16 lines.
    obs = as_observed(observed, grain)
    check_matcher_options(p_none=p_none, orientation_sigma_deg=orientation_sigma_deg, frame_sigma_deg=frame_sigma_deg,
                          schmid_weight=schmid_weight, report_threshold=report_threshold, ambiguity_ratio=ambiguity_ratio)
    g = orientation_matrix(g, "g")
    cands = as_candidate_set(systems, modes, families)
    load = resolve_load(load, lattice)
    share = system_family_prior(cands, prior)
    if not obs:
        return []
    ang, incl, slope = predict_candidates(cands, g, frame)
    pre = grain_log_weights(obs, cands, g, ang[0], incl[0], slope[0], load, orientation_sigma_deg, frame_sigma_deg,
                            p_none, schmid_weight, frame, share, crss)
    coupling = (shared_rotation(obs, cands, g, pre[1], slope[0], orientation_sigma_deg, frame_sigma_deg, frame)
                if shared_orientation and len(obs) > 1 else None)
    return _assign_grain(obs, cands, g, ang[0], incl[0], slope[0], load, pre, None, allow_shared_planes,
                         report_threshold, ambiguity_ratio, coupling)


def identify_grains(
    observed: Sequence[ObservedFamily],
    lattice: Any,
    orientations: Mapping[Any, Any],
    systems: Any,
    frame: FrameSettings | None = None,
    load: Any = None,
    orientation_sigma_deg: float = 1.0,
    frame_sigma_deg: float = 0.5,
    p_none: float = DEFAULT_P_NONE,
    schmid_weight: float = 0.0,
    allow_shared_planes: bool = False,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
    report_threshold: float = DEFAULT_REPORT_THRESHOLD,
    ambiguity_ratio: float = DEFAULT_AMBIGUITY_RATIO,
    grain_sigma_deg: Mapping[Any, float] | None = None,
    artefacts: bool = True,
    artefact_options: Mapping[str, Any] | None = None,
    prior: Mapping[str, float] | None = None,
    crss: Mapping[str, float] | None = None,
    shared_orientation: bool = True,
) -> list[FamilyIdentification]:
    """Identify the families of many grains at once (a grain map).

    Parameters
    ----------
    observed : sequence of ObservedFamily
        Each with ``grain`` set to a key of ``orientations``.
    lattice : tracefit.crystal.Lattice
        The crystal lattice.
    orientations : dict grain -> ndarray (3, 3) or orientation with ``as_matrix()``
        Orientation of each grain (v_crystal = g v_sample).
    systems : iterable of DeformationSystem or CandidateSet
        Candidate systems; not empty.
    grain_sigma_deg : dict grain -> float, optional
        Per-grain orientation uncertainty (degrees, >= 0) overriding ``orientation_sigma_deg``.
    artefacts : bool
        Test the map-level surface-artefact hypothesis (:mod:`tracefit.matching.artefacts`): a family
        that keeps one image angle in several grains whose crystallography predicts different
        traces there is reported unexplained with ``p_artefact`` (default on; it needs at
        least three grains with families).
    artefact_options : dict, optional
        Keyword options of :func:`tracefit.matching.artefacts.find_artefact_directions` (``p_map``,
        ``line_sigma_deg``, ``min_witnesses``, ``max_directions``).
    frame, load, orientation_sigma_deg, frame_sigma_deg, p_none, schmid_weight, allow_shared_planes, modes, families, report_threshold, ambiguity_ratio, prior, crss, shared_orientation
        As :func:`identify_families` (one orientation error per grain).

    Returns
    -------
    list of FamilyIdentification
        In input order; families of grains without an orientation are reported unexplained
        with a note.

    Raises
    ------
    TracefitInputError
        For a bad argument, named by its parameter.

    Examples
    --------
    Two grains of fcc; grain 2 has no orientation in the table:

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> obs = [ObservedFamily(110.2, 0.2, grain=1), ObservedFamily(40.0, 0.2, grain=2)]
    >>> r = identify_grains(obs, fcc, {1: from_euler((0, 30, 0))}, catalogue(fcc, ["slip"]))
    >>> r[0].best.plane, r[1].unexplained, r[1].unexplained_reason
    ((1, 1, 1), True, 'grain has no orientation')
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 37 lines.
    obs = as_observed(observed, None)
    check_matcher_options(p_none=p_none, orientation_sigma_deg=orientation_sigma_deg, frame_sigma_deg=frame_sigma_deg,
                          schmid_weight=schmid_weight, report_threshold=report_threshold, ambiguity_ratio=ambiguity_ratio,
                          grain_sigma_deg=grain_sigma_deg)
    orientations = orientation_table(orientations)
    cands = as_candidate_set(systems, modes, families)
    load = resolve_load(load, lattice)
    share = system_family_prior(cands, prior)
    unknown = sorted(set(artefact_options or {}) - set(_ARTEFACT_OPTIONS))
    if unknown:
        raise TracefitInputError(f"artefact_options: unknown option {unknown[0]!r}; expected some of {', '.join(_ARTEFACT_OPTIONS)}")
    by_grain: dict = {}
    for i, o in enumerate(obs):
        by_grain.setdefault(o.grain, []).append(i)
    keys = [k for k in by_grain if k in orientations]
    out: list = [None] * len(obs)
    if keys:
        G = np.stack([orientations[k] for k in keys])
        ang, incl, slope = predict_candidates(cands, G, frame)
        osigs = {k: (orientation_sigma_deg if not grain_sigma_deg else grain_sigma_deg.get(k, orientation_sigma_deg))
                 for k in keys}
        pre = {k: grain_log_weights([obs[i] for i in by_grain[k]], cands, G[j], ang[j], incl[j], slope[j], load,
                                    osigs[k], frame_sigma_deg, p_none, schmid_weight, frame, share, crss)
               for j, k in enumerate(keys)}
        art = _map_artefacts(obs, by_grain, keys, pre, cands, G, ang, slope, osigs, frame_sigma_deg,
                             artefact_options) if artefacts else {}
        for j, k in enumerate(keys):
            idx = by_grain[k]
            go = [obs[i] for i in idx]
            coupling = (shared_rotation(go, cands, G[j], pre[k][1], slope[j], osigs[k], frame_sigma_deg, frame)
                        if shared_orientation and len(idx) > 1 else None)
            res = _assign_grain(go, cands, G[j], ang[j], incl[j], slope[j], load, pre[k],
                                art.get(k), allow_shared_planes, report_threshold, ambiguity_ratio, coupling)
            for i, r in zip(idx, res):
                out[i] = r
    for k, idx in by_grain.items():
        if k not in orientations:
            for i in idx:
                out[i] = _no_orientation(obs[i], k)
    return out


def _no_orientation(o: ObservedFamily, grain: Any) -> FamilyIdentification:
    r = FamilyIdentification(o.angle_deg, o.angle_sigma_deg, o.grain, o.source, o.label, True, False,
                             1.0, [], [], [f"grain {grain!r} has no orientation in the table"])
    r.unexplained_reason = "grain has no orientation"
    return r


def _map_artefacts(obs, by_grain, keys, pre, cands, G, ang, slope, osigs, fsig, options):
    """Run the map-level artefact scan; per grain ``(mass, log_w, angle)`` for :func:`_assign_grain`."""
    opts = dict(options or {})
    if len(keys) < int(opts.get("min_witnesses", DEFAULT_MIN_WITNESSES)):
        return {}
    idx = [i for k in keys for i in by_grain[k]]
    lg = np.concatenate([logsumexp(pre[k][0], axis=1).reshape(-1) for k in keys])
    a = np.array([obs[i].angle_deg for i in idx])
    s = np.array([obs[i].angle_sigma_deg for i in idx])
    gr = [obs[i].grain for i in idx]
    ctx = CrystalContext(
        pred_deg={k: ang[j] for j, k in enumerate(keys)},
        pred_sigma_deg={k: np.sqrt(pre[k][3] ** 2 + (fsig * np.abs(slope[j])) ** 2) for j, k in enumerate(keys)},
        normals_sample={k: cands.normals @ G[j] for j, k in enumerate(keys)},  # rows: g^T n (sample frame)
        orientation_sigma_deg=dict(osigs),
        families=[str(f).replace(" ", "") for f in cands.families],
    )
    dirs = find_artefact_directions(a, s, gr, lg, ctx, **opts)
    if not dirs:
        return {}
    lsig = float(opts.get("line_sigma_deg", DEFAULT_LINE_SIGMA_DEG))
    mass, law, which = artefact_family_weights(dirs, a, s, lsig)
    out, pos = {}, 0
    for k in keys:
        n = len(by_grain[k])
        sl = slice(pos, pos + n)
        out[k] = (mass, law[sl], [dirs[w].angle_deg for w in which[sl]])
        pos += n
    return out
