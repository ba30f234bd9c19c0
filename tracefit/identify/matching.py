"""Observed band families -> candidate slip/twin planes, with probabilities and "none of these".

The model, per observed family f and candidate c (one plane variant of one mode):

* residual r = axial difference observed - predicted (image frame, degrees);
* spread sigma_fc^2 = sigma_det^2 + (J sigma_orient / sin i)^2 + (J sigma_frame)^2, where
  ``sigma_det`` is the family's detection (or measurement) sigma, ``i`` the plane's
  inclination to the surface and J = d(apparent)/d(true) the stage-tilt foreshortening
  slope (1 without tilt). ``sigma_orient / sin i`` is the exact first-order spread of a
  trace angle when the orientation carries independent small rotations of sigma_orient
  about each of the three sample axes: a turn about the surface normal moves the trace
  1:1, turns about the in-plane axes move it by n_z n_{x,y} / (n_x^2 + n_y^2), and the
  three add to 1 / sin^2 i. Planes nearly parallel to the surface get a huge spread
  and are flagged ``near_surface``;
* likelihood: an axial von Mises density on the doubled angle with kappa = 1 / (4 sigma^2)
  (equal to a Gaussian of sigma for small sigma, and tending to uniform for large sigma,
  so near-surface planes stop claiming every family);
* "none of these": a uniform density 1/180 per degree with prior weight ``p_none``
  (default 0.05: in our experience a few percent of detected families are scratches,
  polishing marks, grain-boundary edges or belong to a wrong orientation; common practice,
  no source). The remaining 1 - p_none is shared equally by the distinct planes, and a
  plane that is both a slip and a twin plane shares its weight between the two modes.
* optional Schmid prior (``schmid_weight = k``, default 0 = off): with a known load the
  plane's weight is multiplied by max(m, 0.02)^k, m the best Schmid factor (twins counted
  only in their positive shear sense). Off by default because in a polycrystal the active
  system is often not the one with the highest Schmid factor; k = 1 is a mild choice.

Several families of one grain are assigned jointly: the probabilities are the exact
marginals over all assignments in which no two families take the same plane (unless
``allow_shared_planes``); "none" may be taken by any number of families.

On grain maps (:func:`identify_grains`) a map-level surface-artefact hypothesis
(:mod:`tracefit.identify.artefacts`) may add a third kind of answer: a family on a straight surface
line that keeps one image angle across grains. Like "none" it may be taken by any number of
families; each family reports its probability as ``p_artefact``.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass, field
from typing import Any, Iterable, Sequence

import numpy as np
from scipy.special import i0e

from tracefit.conventions import axial_difference, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.predict import NEAR_SURFACE_DEG

__all__ = [
    "ObservedFamily",
    "SystemChoice",
    "Candidate",
    "FamilyIdentification",
    "identify_families",
    "identify_grains",
    "observed_from_detection",
    "predicted_trace_sigma",
    "axial_logpdf",
    "CandidateSet",
    "candidate_set",
    "DEFAULT_P_NONE",
    "DEFAULT_REPORT_THRESHOLD",
    "DEFAULT_AMBIGUITY_RATIO",
    "identifications_to_json",
]

DEFAULT_P_NONE = 0.05
DEFAULT_REPORT_THRESHOLD = 0.01  # candidates below this posterior are not listed
DEFAULT_AMBIGUITY_RATIO = 0.1  # a second plane with >= 10 % of the best's probability -> ambiguous
UNIFORM_LOGPDF = -math.log(180.0)
_MIN_SIN = math.sin(math.radians(0.2))


# ----------------------------------------------------------------------------- inputs
@dataclass
class ObservedFamily:
    """One observed family of parallel bands (detected in an image or measured by hand).

    Parameters
    ----------
    angle_deg : float
        Image-frame axial angle, degrees in [0, 180).
    angle_sigma_deg : float
        One-sigma uncertainty of the angle, degrees.
    grain : int, str or None
        Grain the family belongs to (None for a single-orientation image).
    source : str
        ``"detected"`` or ``"measured"``.
    label : str or None
        Free label for reports.
    n_bands, strength : optional
        Detection details, carried through to reports.
    boundary_continuation : float, optional
        Share of the family's lines that run on straight into a neighbouring grain with the
        same contrast (:func:`tracefit.maps.tables.line_continuation`); reported, not used in the
        probabilities.
    """

    angle_deg: float
    angle_sigma_deg: float = 0.5
    grain: Any = None
    source: str = "detected"
    label: str | None = None
    n_bands: int | None = None
    strength: float | None = None
    boundary_continuation: float | None = None

    def __post_init__(self):
        a = float(self.angle_deg)
        s = float(self.angle_sigma_deg)
        if not math.isfinite(a):
            raise TracefitInputError(f"a family angle must be a finite number of degrees, got {self.angle_deg!r}")
        if not (math.isfinite(s) and s >= 0):
            raise TracefitInputError(f"a family angle sigma must be >= 0 degrees, got {self.angle_sigma_deg!r}")
        self.angle_deg = fold_axial(a)
        self.angle_sigma_deg = s


def observed_from_detection(result, grain=None, min_sigma_deg: float = 0.1) -> list[ObservedFamily]:
    """Observed families from a :class:`tracefit.image.detect.DetectionResult` (or a list of BandFamily)."""
    fams = getattr(result, "families", result)
    out = []
    for k, f in enumerate(fams):
        out.append(
            ObservedFamily(
                angle_deg=float(f.angle_deg),
                angle_sigma_deg=max(float(getattr(f, "angle_sigma_deg", 0.5) or 0.0), min_sigma_deg),
                grain=grain,
                source="detected",
                label=f"F{k + 1}" if grain is None else f"G{grain}-F{k + 1}",
                n_bands=getattr(f, "n_bands", None),
                strength=getattr(f, "strength", None),
            )
        )
    return out


# ----------------------------------------------------------------------------- results
@dataclass
class SystemChoice:
    """One system on a candidate plane, with its Schmid factor (or resolved shear) under the load."""

    direction: tuple
    schmid_factor: float | None
    resolved_shear: float | None = None
    name: str | None = None
    active_sense: bool = True  # twins: False when the load shears them the wrong way

    def to_dict(self) -> dict:
        d = {"direction": list(self.direction), "schmid_factor": _r(self.schmid_factor)}
        if self.resolved_shear is not None:
            d["resolved_shear"] = _r(self.resolved_shear)
        if self.name:
            d["name"] = self.name
        return d


@dataclass
class Candidate:
    """One candidate plane (one mode) for an observed family."""

    plane: tuple
    family: str
    mode: str
    predicted_deg: float
    residual_deg: float
    probability: float
    sigma_deg: float
    predicted_sigma_deg: float
    inclination_deg: float
    best_system: SystemChoice | None = None
    systems: list[SystemChoice] = field(default_factory=list)
    near_surface: bool = False
    log_likelihood: float = float("nan")

    def to_dict(self) -> dict:
        return {
            "plane": list(self.plane),
            "family": self.family,
            "mode": self.mode,
            "predicted_deg": _r(self.predicted_deg),
            "residual_deg": _r(self.residual_deg),
            "probability": _r(self.probability, 6),
            "best_system": None if self.best_system is None else self.best_system.to_dict(),
            "sigma_deg": _r(self.sigma_deg),
            "predicted_sigma_deg": _r(self.predicted_sigma_deg),
            "inclination_deg": _r(self.inclination_deg),
            "near_surface": bool(self.near_surface),
            "systems": [s.to_dict() for s in self.systems],
        }


@dataclass
class FamilyIdentification:
    """The verdict for one observed family: ranked candidates, "none of these", ambiguity."""

    angle_deg: float
    angle_sigma_deg: float
    grain: Any
    source: str
    label: str | None
    unexplained: bool
    ambiguous: bool
    p_none: float
    candidates: list[Candidate]
    separation: list[str] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    # Map-level surface-artefact hypothesis (tracefit.identify.artefacts); set after construction so that
    # subclasses keep their positional arguments.
    p_artefact: float = field(default=0.0, init=False)
    unexplained_reason: str | None = field(default=None, init=False)
    artefact_angle_deg: float | None = field(default=None, init=False)
    boundary_continuation: float | None = field(default=None, init=False)

    @property
    def best(self) -> Candidate | None:
        """Most probable candidate (None when there is none above the report threshold)."""
        return self.candidates[0] if self.candidates else None

    @property
    def planes(self) -> list[tuple]:
        """Distinct planes in the candidate set, most probable first."""
        seen, out = set(), []
        for c in self.candidates:
            k = _plane_key(c.plane)
            if k not in seen:
                seen.add(k)
                out.append(c.plane)
        return out

    def to_dict(self) -> dict:
        g = self.grain
        if isinstance(g, np.integer):
            g = int(g)
        return {
            "angle_deg": _r(self.angle_deg),
            "grain": g,
            "unexplained": bool(self.unexplained),
            "ambiguous": bool(self.ambiguous),
            "candidates": [c.to_dict() for c in self.candidates],
            "angle_sigma_deg": _r(self.angle_sigma_deg),
            "source": self.source,
            "label": self.label,
            "p_none": _r(self.p_none, 6),
            "separation": list(self.separation),
            "notes": list(self.notes),
            "p_artefact": _r(self.p_artefact, 6),
            "unexplained_reason": (self.unexplained_reason or "no candidate fits") if self.unexplained else None,
            "artefact_angle_deg": _r(self.artefact_angle_deg, 3),
            "boundary_continuation": _r(self.boundary_continuation, 3),
        }


def identifications_to_json(results: Sequence[FamilyIdentification], **extra) -> dict:
    """The ``--json`` object of ``tracefit identify``: ``{"families": [...], **extra}``."""
    d = {"families": [r.to_dict() for r in results]}
    d.update(extra)
    return d


def _r(x, nd: int = 4):
    if x is None:
        return None
    x = float(x)
    return round(x, nd) if math.isfinite(x) else None


# ----------------------------------------------------------------------------- the numbers
def logsumexp(a, axis=None, keepdims=False):
    """log(sum(exp(a))) along an axis; plain numpy (scipy's version is slow for small arrays)."""
    a = np.asarray(a, float)
    m = np.max(a, axis=axis, keepdims=True)
    m = np.where(np.isfinite(m), m, 0.0)
    out = np.log(np.sum(np.exp(a - m), axis=axis, keepdims=True)) + m
    if not keepdims:
        out = np.squeeze(out, axis=axis) if axis is not None else out.reshape(())
    return out if out.ndim else float(out)


def predicted_trace_sigma(inclination_deg, orientation_sigma_deg: float, slope=1.0):
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
        sigma_orient * |slope| / sin(inclination), degrees (first order; large values mean
        the trace is ill-defined).
    """
    s = np.maximum(np.sin(np.radians(np.asarray(inclination_deg, float))), _MIN_SIN)
    return float(orientation_sigma_deg) * np.abs(np.asarray(slope, float)) / s


def axial_logpdf(residual_deg, sigma_deg):
    """Log density (per degree) of an axial residual: von Mises on the doubled angle.

    kappa = 1 / (4 sigma^2) with sigma in radians, so that for small sigma the density is
    the Gaussian exp(-r^2 / 2 sigma^2) / (sqrt(2 pi) sigma); for large sigma it tends to the
    uniform 1/180 per degree.
    """
    r = np.radians(np.asarray(residual_deg, float))
    s = np.radians(np.maximum(np.asarray(sigma_deg, float), 1e-3))
    kappa = 1.0 / (4.0 * s * s)
    # density per radian of the axial angle (period pi): exp(k cos 2r) / (pi I0(k))
    logp = kappa * (np.cos(2.0 * r) - 1.0) - np.log(np.pi * i0e(kappa))
    return logp + math.log(math.pi / 180.0)


# ----------------------------------------------------------------------------- candidates
def _plane_key(plane) -> tuple:
    """Sign-free key: (h k l) and (-h -k -l) are the same plane."""
    p = tuple(int(round(x)) for x in plane)
    for x in p:
        if x != 0:
            return p if x > 0 else tuple(-y for y in p)
    return p


@dataclass
class CandidateSet:
    """Candidate (plane, mode) groups of a catalogue, ready for fast per-grain prediction.

    Attributes
    ----------
    planes : list of tuple
        Plane indices as given by the first system of each group.
    families : list of str
    modes : list of str
    normals : ndarray (P, 3)
        Unit plane normals, Cartesian crystal frame.
    plane_ids : ndarray (P,)
        Index of the distinct (sign-free) plane; slip and twin on one plane share it.
    systems : list of list
        The catalogue systems of each group.
    """

    planes: list
    families: list
    modes: list
    normals: np.ndarray
    plane_ids: np.ndarray
    systems: list
    _flat: object = field(default=None, repr=False, compare=False)

    def __len__(self):
        return len(self.planes)


def candidate_set(systems: Iterable, modes: Iterable[str] | None = None, families: Iterable[str] | None = None) -> CandidateSet:
    """Group catalogue systems by (plane, mode).

    Parameters
    ----------
    systems : iterable of DeformationSystem
        Each with ``mode``, ``family``, ``plane``, ``normal`` (unit, crystal frame) and
        ``dir_unit`` / ``direction``.
    modes, families : optional filters (e.g. ``["slip"]``, ``["{111}"]``).
    """
    modes = None if modes is None else {m.strip().lower() for m in modes}
    fam_filter = None if families is None else {f.replace(" ", "") for f in families}
    groups: dict = {}
    order = []
    for s in systems:
        mode = str(s.mode).lower()
        if modes is not None and mode not in modes:
            continue
        if fam_filter is not None and str(s.family).replace(" ", "") not in fam_filter:
            continue
        key = (_plane_key(s.plane), mode)
        if key not in groups:
            groups[key] = []
            order.append(key)
        groups[key].append(s)
    if not order:
        raise TracefitInputError(
            "no candidate systems left after filtering by mode/family; "
            "check --modes (slip, twin) and the family names of this lattice"
        )
    plane_index: dict = {}
    planes, fams, mds, normals, pids, syss = [], [], [], [], [], []
    for key in order:
        ss = groups[key]
        s0 = ss[0]
        pk = key[0]
        if pk not in plane_index:
            plane_index[pk] = len(plane_index)
        planes.append(tuple(int(round(x)) for x in s0.plane))
        fams.append(str(s0.family))
        mds.append(key[1])
        n = np.asarray(s0.normal, float)
        normals.append(n / np.linalg.norm(n))
        pids.append(plane_index[pk])
        syss.append(ss)
    return CandidateSet(planes, fams, mds, np.array(normals), np.array(pids), syss)


# ----------------------------------------------------------------------------- prediction
def predict_candidates(cands: CandidateSet, g, frame=None):
    """Predicted image-frame trace angles, inclinations and tilt slopes of every candidate.

    Parameters
    ----------
    cands : CandidateSet
    g : ndarray (3, 3) or (N, 3, 3)
        Orientation(s), v_crystal = g v_sample.
    frame : FrameSettings, optional

    Returns
    -------
    angle_deg, inclination_deg, slope : ndarray (N, P)
        Apparent trace angle (after frame and tilt), inclination, and d(apparent)/d(true).
    """
    from tracefit.conventions import FrameSettings, apparent_angle
    from tracefit.predict import plane_normals_in_image, trace_angles

    g = np.asarray(g, float)
    G = g[None] if g.ndim == 2 else g
    fr = frame or FrameSettings()
    n_img = plane_normals_in_image(G, cands.normals, fr)  # (N, P, 3)
    true_ang, incl = trace_angles(n_img)
    true_ang = np.asarray(true_ang, float).reshape(n_img.shape[:2])
    incl = np.asarray(incl, float).reshape(n_img.shape[:2])
    if float(fr.tilt_deg) != 0.0:
        app = np.asarray(apparent_angle(true_ang, fr), float)
        h = 0.05
        d = axial_difference(apparent_angle(true_ang + h, fr), apparent_angle(true_ang - h, fr)) / (2 * h)
        slope = np.asarray(d, float)
    else:
        app = true_ang
        slope = np.ones_like(true_ang)
    return app, incl, slope


# ----------------------------------------------------------------------------- load
def _is_stress(load) -> bool:
    return load is not None and not hasattr(load, "in_crystal")


def _flat_systems(cands: CandidateSet):
    """All systems of the candidate groups in one list, with their group index (cached)."""
    if getattr(cands, "_flat", None) is None:
        flat, grp = [], []
        for k, ss in enumerate(cands.systems):
            flat.extend(ss)
            grp.extend([k] * len(ss))
        normals = np.array([s.normal for s in flat], float)
        dirs = np.array([s.dir_unit for s in flat], float)
        cands._flat = (flat, np.array(grp), normals, dirs)
    return cands._flat


def _load_values(load, cands: CandidateSet, g):
    """Per candidate group: its systems ranked under the load, and the best drive (m or tau, >= 0).

    ``load`` is a :class:`tracefit.predict.traces.LoadAxis` (uniaxial; Schmid factors) or a stress
    tensor in sample coordinates, (3, 3) or Voigt (6,) (resolved shear). Slip counts either
    way (|m|); a twin only in its twinning sense (m > 0 in the load's sense).
    """
    from tracefit.predict import resolved_shear, schmid_factor

    flat, grp, normals, dirs = _flat_systems(cands)
    twin_g = np.array([m == "twin" for m in cands.modes])
    twin = twin_g[grp]
    dir_idx = [tuple(int(round(x)) for x in s.direction) for s in flat]
    names = [getattr(s, "name", None) for s in flat]
    if load is None:
        vals = None
    elif _is_stress(load):
        tau = np.atleast_1d(resolved_shear(load, g, normals, dirs))
        vals = np.where(twin, tau, np.abs(tau))
    else:
        m = np.atleast_1d(schmid_factor(load.in_crystal(g), normals, dirs))
        vals = np.where(twin, load.sign * m, np.abs(m))
    stress = _is_stress(load)
    out_sys, best_drive = [], []
    for k in range(len(cands)):
        idx = np.flatnonzero(grp == k)
        if vals is None:
            out_sys.append([SystemChoice(dir_idx[i], None, None, names[i], True) for i in idx])
            best_drive.append(None)
            continue
        v = vals[idx]
        order = idx[np.argsort(-v, kind="stable")]
        choices = []
        for i in order:
            x = float(vals[i])
            active = bool(x > 0) if twin_g[k] else True
            choices.append(SystemChoice(dir_idx[i], None if stress else x, x if stress else None, names[i], active))
        top = choices[0]
        out_sys.append(choices)
        best_drive.append(max(float(vals[order[0]]), 0.0) if top.active_sense else 0.0)
    return out_sys, best_drive


# ----------------------------------------------------------------------------- core
def family_log_weights(obs_ang, obs_sig, pred_ang, pred_sig, log_prior, p_none, frame_sigma=0.0, slope=1.0):
    """Log (prior x likelihood) of every family (F) and candidate (P), plus "none" last.

    Returns
    -------
    logw : ndarray (F, P + 1)
    resid : ndarray (F, P), observed - predicted, axial degrees
    sig : ndarray (F, P), total sigma used
    """
    obs_ang = np.asarray(obs_ang, float)[:, None]
    obs_sig = np.asarray(obs_sig, float)[:, None]
    resid = axial_difference(obs_ang, np.asarray(pred_ang, float)[None, :])
    resid = np.asarray(resid, float).reshape(obs_ang.shape[0], -1)
    fs = frame_sigma * np.abs(np.asarray(slope, float))
    sig = np.sqrt(obs_sig**2 + np.asarray(pred_sig, float)[None, :] ** 2 + np.asarray(fs)[None, ...] ** 2)
    ll = axial_logpdf(resid, sig) + np.asarray(log_prior, float)[None, :]
    none = np.full((ll.shape[0], 1), math.log(p_none) + UNIFORM_LOGPDF) if p_none > 0 else np.full((ll.shape[0], 1), -np.inf)
    return np.concatenate([ll, none], axis=1), resid, sig


def joint_marginals(logw: np.ndarray, plane_ids: np.ndarray, allow_shared: bool = False, max_states: int = 3_000_000):
    """Posterior marginals of each family's assignment under the no-shared-plane rule.

    Parameters
    ----------
    logw : ndarray (F, P + 1)
        Log weights from :func:`family_log_weights` (last column "none").
    plane_ids : ndarray (P,)
        Distinct-plane index of every candidate (slip and twin on one plane share it).

    Returns
    -------
    ndarray (F, P + 1) of probabilities (rows sum to 1).
    """
    F, K = logw.shape
    indep = np.exp(logw - logsumexp(logw, axis=1, keepdims=True))
    if allow_shared or F < 2:
        return indep
    P = K - 1
    npl = int(plane_ids.max()) + 1 if P else 0
    # Collapse candidates to planes for the exclusion, keep within-plane split afterwards.
    onehot = np.zeros((P, npl))
    onehot[np.arange(P), plane_ids] = 1.0
    mrow = logw.max(axis=1, keepdims=True)
    e = np.exp(logw[:, :P] - mrow)
    psum = e @ onehot  # (F, npl)
    with np.errstate(divide="ignore"):
        plane_lw = np.concatenate([np.log(psum) + mrow, logw[:, P:]], axis=1)
    # Prune to the planes that matter for any family (speed), keep "none".
    # (planes more than e^-14 below a family's best hypothesis cannot change any marginal noticeably)
    row_max = plane_lw.max(axis=1, keepdims=True)
    rel = plane_lw[:, :npl] >= row_max - 14.0
    keep = np.unique(np.concatenate([np.argsort(-plane_lw[f, :npl])[: min(12, int(rel[f].sum()))] for f in range(F)]))
    states = (len(keep) + 1) ** F
    if states > max_states:
        return _greedy_marginals(indep, plane_lw, plane_ids, logw)
    sub = np.concatenate([plane_lw[:, keep], plane_lw[:, npl:npl + 1]], axis=1)  # (F, Q+1)
    Q = len(keep)
    grids = np.meshgrid(*[np.arange(Q + 1)] * F, indexing="ij")
    total = np.zeros(grids[0].shape)
    for f in range(F):
        total = total + sub[f][grids[f]]
    valid = np.ones(total.shape, bool)
    for a, b in itertools.combinations(range(F), 2):
        valid &= ~((grids[a] == grids[b]) & (grids[a] < Q))
    total = np.where(valid, total, -np.inf)
    Z = logsumexp(total)
    pj = np.exp(total - Z)
    marg_plane = np.zeros((F, npl + 1))
    for f in range(F):
        m = np.bincount(grids[f].ravel(), weights=pj.ravel(), minlength=Q + 1)
        marg_plane[f, keep] = m[:Q]
        marg_plane[f, npl] = m[Q]
    # Split each plane's marginal among its candidates as in the independent weights.
    out = np.zeros_like(indep)
    with np.errstate(invalid="ignore", divide="ignore"):
        within = np.where(psum[:, plane_ids] > 0, e / psum[:, plane_ids], 0.0)
    out[:, :P] = within * marg_plane[:, plane_ids]
    out[:, P] = marg_plane[:, npl]
    return out / out.sum(axis=1, keepdims=True)


def _greedy_marginals(indep, plane_lw, plane_ids, logw):
    # Too many families for exact enumeration: fix the best joint assignment (Hungarian)
    # and remove each family's rivals' assigned planes from its own distribution.
    from scipy.optimize import linear_sum_assignment

    F = plane_lw.shape[0]
    npl = plane_lw.shape[1] - 1
    cost = np.full((F, npl + F), 1e9)
    cost[:, :npl] = -np.where(np.isfinite(plane_lw[:, :npl]), plane_lw[:, :npl], -1e9)
    for f in range(F):
        cost[f, npl + f] = -plane_lw[f, npl]
    rows, cols = linear_sum_assignment(cost)
    assigned = {int(r): int(c) for r, c in zip(rows, cols)}
    out = indep.copy()
    for f in range(F):
        for f2, c in assigned.items():
            if f2 != f and c < npl:
                out[f, np.flatnonzero(plane_ids == c)] = 0.0
    return out / out.sum(axis=1, keepdims=True)


# ----------------------------------------------------------------------------- public
def identify_families(
    observed: Sequence[ObservedFamily],
    lattice,
    g,
    systems,
    frame=None,
    load=None,
    orientation_sigma_deg: float = 1.0,
    frame_sigma_deg: float = 0.5,
    p_none: float = DEFAULT_P_NONE,
    schmid_weight: float = 0.0,
    allow_shared_planes: bool = False,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
    report_threshold: float = DEFAULT_REPORT_THRESHOLD,
    ambiguity_ratio: float = DEFAULT_AMBIGUITY_RATIO,
    grain=None,
) -> list[FamilyIdentification]:
    """Identify the plane (and system) behind each observed band family of one grain.

    Parameters
    ----------
    observed : sequence of ObservedFamily (or floats: angles in degrees, sigma 0.5)
        Families seen in this grain (one orientation).
    lattice : tracefit.crystal.lattice.Lattice
    g : ndarray (3, 3)
        Orientation, v_crystal = g v_sample.
    systems : iterable of DeformationSystem or CandidateSet
        Candidate systems (e.g. ``tracefit.crystal.systems.catalogue(lattice)``).
    frame : tracefit.conventions.FrameSettings, optional
        Orientation-data frame -> image (rotation, flips, stage tilt).
    load : optional
        Load from ``tracefit.predict.traces.parse_load`` (uniaxial axis or stress tensor); used to
        rank systems within a plane and, with ``schmid_weight``, as a prior.
    orientation_sigma_deg : float
        One-sigma orientation error about each sample axis, degrees (default 1).
    frame_sigma_deg : float
        One-sigma uncertainty of the frame rotation, degrees (default 0.5).
    p_none : float
        Prior probability that a family belongs to no candidate (default 0.05).
    schmid_weight : float
        Exponent k of the optional Schmid prior max(m, 0.02)^k (default 0 = off).
    allow_shared_planes : bool
        Allow two families of one grain to take the same plane.
    modes, families : optional filters of the candidate systems.
    report_threshold : float
        Candidates with a posterior below this are not listed (default 0.01).
    ambiguity_ratio : float
        A second distinct plane with at least this fraction of the best plane's probability
        makes the family ambiguous (default 0.1).

    Returns
    -------
    list of FamilyIdentification, one per observed family, in input order.
    """
    obs = _as_observed(observed, grain)
    if not (0.0 <= p_none < 1.0):
        raise TracefitInputError(f"the 'none of these' prior must be in [0, 1), got {p_none!r}")
    if not (math.isfinite(orientation_sigma_deg) and orientation_sigma_deg >= 0):
        raise TracefitInputError(f"orientation sigma must be >= 0 degrees, got {orientation_sigma_deg!r}")
    cands = systems if isinstance(systems, CandidateSet) else candidate_set(systems, modes, families)
    g = np.asarray(g, float)
    if g.shape != (3, 3):
        raise TracefitInputError(f"one grain needs one 3x3 orientation matrix, got shape {g.shape}")
    if not obs:
        return []
    ang, incl, slope = predict_candidates(cands, g, frame)
    return _identify_one(obs, cands, g, ang[0], incl[0], slope[0], load, orientation_sigma_deg, frame_sigma_deg,
                         p_none, schmid_weight, allow_shared_planes, report_threshold, ambiguity_ratio)


def identify_grains(
    observed: Sequence[ObservedFamily],
    lattice,
    orientations: dict,
    systems,
    frame=None,
    load=None,
    orientation_sigma_deg: float = 1.0,
    frame_sigma_deg: float = 0.5,
    p_none: float = DEFAULT_P_NONE,
    schmid_weight: float = 0.0,
    allow_shared_planes: bool = False,
    modes=None,
    families=None,
    report_threshold: float = DEFAULT_REPORT_THRESHOLD,
    ambiguity_ratio: float = DEFAULT_AMBIGUITY_RATIO,
    grain_sigma_deg: dict | None = None,
    artefacts: bool = True,
    artefact_options: dict | None = None,
) -> list[FamilyIdentification]:
    """Identify families of many grains at once.

    Parameters
    ----------
    observed : sequence of ObservedFamily
        Each with ``grain`` set to a key of ``orientations``.
    orientations : dict grain -> ndarray (3, 3)
        Orientation of each grain (v_crystal = g v_sample).
    grain_sigma_deg : dict grain -> float, optional
        Per-grain orientation uncertainty overriding ``orientation_sigma_deg``.
    artefacts : bool
        Test the map-level surface-artefact hypothesis (:mod:`tracefit.identify.artefacts`): a family
        that keeps one image angle in several grains whose crystallography predicts different
        traces there is reported unexplained with ``p_artefact`` (default on; it needs at
        least three grains with families).
    artefact_options : dict, optional
        Keyword options of :func:`tracefit.identify.artefacts.find_artefact_directions` (``p_map``,
        ``line_sigma_deg``, ``min_witnesses``, ``max_directions``).
    (others as :func:`identify_families`)

    Returns
    -------
    list of FamilyIdentification in input order; families of grains without an orientation
    are reported unexplained with a note.
    """
    obs = _as_observed(observed, None)
    cands = systems if isinstance(systems, CandidateSet) else candidate_set(systems, modes, families)
    by_grain: dict = {}
    for i, o in enumerate(obs):
        by_grain.setdefault(o.grain, []).append(i)
    keys = [k for k in by_grain if k in orientations]
    out: list = [None] * len(obs)
    if keys:
        G = np.stack([np.asarray(orientations[k], float) for k in keys])
        ang, incl, slope = predict_candidates(cands, G, frame)
        osigs = {k: (orientation_sigma_deg if not grain_sigma_deg else grain_sigma_deg.get(k, orientation_sigma_deg))
                 for k in keys}
        pre = {k: _grain_weights([obs[i] for i in by_grain[k]], cands, G[j], ang[j], incl[j], slope[j], load,
                                 osigs[k], frame_sigma_deg, p_none, schmid_weight)
               for j, k in enumerate(keys)}
        art = _map_artefacts(obs, by_grain, keys, pre, cands, G, ang, slope, osigs, frame_sigma_deg,
                             artefact_options) if artefacts else {}
        for j, k in enumerate(keys):
            idx = by_grain[k]
            res = _identify_one([obs[i] for i in idx], cands, G[j], ang[j], incl[j], slope[j], load,
                                osigs[k], frame_sigma_deg, p_none, schmid_weight,
                                allow_shared_planes, report_threshold, ambiguity_ratio, pre=pre[k], art=art.get(k))
            for i, r in zip(idx, res):
                out[i] = r
    for k, idx in by_grain.items():
        if k in orientations:
            continue
        for i in idx:
            o = obs[i]
            out[i] = FamilyIdentification(o.angle_deg, o.angle_sigma_deg, o.grain, o.source, o.label, True, False,
                                          1.0, [], [], [f"grain {k!r} has no orientation in the table"])
            out[i].unexplained_reason = "grain has no orientation"
    return out


def _map_artefacts(obs, by_grain, keys, pre, cands, G, ang, slope, osigs, fsig, options):
    """Run the map-level artefact scan; per grain ``(mass, log_w, angle)`` for :func:`_identify_one`."""
    from tracefit.identify.artefacts import CrystalContext, artefact_family_weights, find_artefact_directions

    opts = dict(options or {})
    if len(keys) < int(opts.get("min_witnesses", 3)):
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
    lsig = float(opts.get("line_sigma_deg", 0.2))
    mass, law, which = artefact_family_weights(dirs, a, s, lsig)
    out, pos = {}, 0
    for k in keys:
        n = len(by_grain[k])
        sl = slice(pos, pos + n)
        out[k] = (mass, law[sl], [dirs[w].angle_deg for w in which[sl]])
        pos += n
    return out


def _as_observed(observed, grain) -> list[ObservedFamily]:
    out = []
    for o in observed:
        if isinstance(o, ObservedFamily):
            if grain is not None and o.grain is None:
                o = ObservedFamily(o.angle_deg, o.angle_sigma_deg, grain, o.source, o.label, o.n_bands, o.strength,
                                   o.boundary_continuation)
            out.append(o)
        elif isinstance(o, (int, float, np.floating, np.integer)):
            out.append(ObservedFamily(float(o), 0.5, grain, "measured"))
        else:
            raise TracefitInputError(f"an observed family must be an angle or an ObservedFamily, got {type(o).__name__}")
    return out


def _grain_weights(obs, cands, g, ang, incl, slope, load, osig, fsig, p_none, schmid_weight):
    """Log (prior x likelihood) of every family of one grain, before the joint assignment."""
    psig = predicted_trace_sigma(incl, osig, slope)
    systems_ranked, drive = _load_values(load, cands, g)
    # Prior: equal per distinct plane, split among the modes on that plane.
    npl = int(cands.plane_ids.max()) + 1
    counts = np.bincount(cands.plane_ids, minlength=npl)
    prior = (1.0 - p_none) / npl / counts[cands.plane_ids]
    if schmid_weight and load is not None:
        dv = np.array([d if d is not None else 0.0 for d in drive], float)
        if _is_stress(load) and dv.max() > 0:
            dv = 0.5 * dv / dv.max()  # resolved shear -> Schmid-like scale, best = 0.5
        w = np.maximum(dv, 0.02) ** float(schmid_weight)
        # renormalise so the total candidate mass stays 1 - p_none
        prior = prior * w
        prior = prior / prior.sum() * (1.0 - p_none)
    log_prior = np.log(np.maximum(prior, 1e-300))
    oa = np.array([o.angle_deg for o in obs])
    os_ = np.array([o.angle_sigma_deg for o in obs])
    logw, resid, sig = family_log_weights(oa, os_, ang, psig, log_prior, p_none, fsig, slope)
    return logw, resid, sig, psig, systems_ranked


def _identify_one(obs, cands, g, ang, incl, slope, load, osig, fsig, p_none, schmid_weight, allow_shared,
                  threshold, ratio, pre=None, art=None):
    """Verdicts for the families of one grain.

    ``pre``: the output of :func:`_grain_weights` (computed here when None). ``art``: optional
    surface-artefact hypothesis from :mod:`tracefit.identify.artefacts`, ``(mass, log_w (F,), angle (F,))``:
    crystallographic and "none" priors are scaled by 1 - mass, and the artefact (like "none",
    open to any number of families) is folded into the last column for the joint assignment,
    then split off again by its share of that column's weight.
    """
    P = len(cands)
    logw, resid, sig, psig, systems_ranked = pre if pre is not None else _grain_weights(
        obs, cands, g, ang, incl, slope, load, osig, fsig, p_none, schmid_weight)
    F = len(obs)
    art_share = np.zeros(F)
    art_angle = [None] * F
    if art is not None and art[0] > 0:
        mass, law, aang = art
        logw = logw + math.log1p(-mass)
        last = np.logaddexp(logw[:, P], law)
        with np.errstate(invalid="ignore"):
            art_share = np.where(np.isfinite(last), np.exp(law - last), 0.0)
        logw = logw.copy()
        logw[:, P] = last
        art_angle = list(aang)
    post = joint_marginals(logw, cands.plane_ids, allow_shared)
    p_art = post[:, P] * art_share
    post = post.copy()
    post[:, P] = post[:, P] - p_art
    results = []
    for f, o in enumerate(obs):
        pn = float(post[f, P])
        pa = float(p_art[f])
        order = np.argsort(-post[f, :P])
        cl = []
        for c in order:
            if post[f, c] < threshold and not (len(cl) == 0 and post[f, c] > 0 and pn + pa < 0.5):
                break
            best = None
            if systems_ranked[c]:
                top = systems_ranked[c][0]
                if load is None or top.active_sense:
                    best = top if load is not None else None
            cl.append(
                Candidate(
                    plane=cands.planes[c],
                    family=cands.families[c],
                    mode=cands.modes[c],
                    predicted_deg=float(ang[c]),
                    residual_deg=float(resid[f, c]),
                    probability=float(post[f, c]),
                    sigma_deg=float(sig[f, c]),
                    predicted_sigma_deg=float(psig[c]),
                    inclination_deg=float(incl[c]),
                    best_system=best,
                    systems=systems_ranked[c],
                    near_surface=bool(incl[c] < NEAR_SURFACE_DEG),
                    log_likelihood=float(logw[f, c]),
                )
            )
        unexplained = pn + pa >= 0.5
        reason = None
        if unexplained:
            if pa > pn and art_angle[f] is not None:
                reason = f"surface artefact (continues across grains at {float(art_angle[f]):.1f} deg)"
            else:
                reason = "no candidate fits"
        # distinct planes in the set, with their summed probability
        plane_p: dict = {}
        for c in cl:
            plane_p[_plane_key(c.plane)] = plane_p.get(_plane_key(c.plane), 0.0) + c.probability
        ps = sorted(plane_p.values(), reverse=True)
        ambiguous = (not unexplained) and len(ps) > 1 and ps[1] >= ratio * ps[0]
        notes = []
        if reason is not None and reason.startswith("surface artefact"):
            notes.append(
                f"p_artefact = {pa:.2f}: this family keeps one image angle ({float(art_angle[f]):.1f} deg) in several grains "
                "whose crystallography predicts different traces there; a polishing scratch or other surface mark "
                "runs straight through grain boundaries, slip and twin traces do not"
            )
        elif unexplained:
            notes.append(
                f"no candidate explains this family (p_none = {pn:.2f}): a scratch or polishing mark, "
                "a wrong orientation, a wrong frame alignment, or a system outside the selected modes"
            )
        for c in cl:
            if c.near_surface:
                notes.append(f"plane {_fmt_plane(c.plane)} lies within {NEAR_SURFACE_DEG:g} deg of the surface: its trace is ill-defined")
                break
        sep = _separation_hints(cl, load, g, cands) if (ambiguous or _mixed_modes(cl)) and not unexplained else []
        r = FamilyIdentification(o.angle_deg, o.angle_sigma_deg, o.grain, o.source, o.label,
                                 bool(unexplained), bool(ambiguous), pn, cl, sep, notes)
        r.p_artefact = pa
        r.unexplained_reason = reason
        bc = getattr(o, "boundary_continuation", None)
        r.boundary_continuation = bc
        if bc is not None and bc >= 0.5:
            r.notes.append(
                f"{100 * bc:.0f} % of its line ends run on straight into the neighbouring grain with the same contrast: "
                "typical of a surface scratch (a slip or twin band stops at the boundary or turns); not used in the probabilities"
            )
        r.artefact_angle_deg = None if art_angle[f] is None or pa < threshold else float(art_angle[f])
        results.append(r)
    if len(results) >= 2 and all(r.unexplained and r.p_artefact < r.p_none for r in results):
        # Several families and none fits: the orientation (or the frame) is the likelier culprit.
        where = "this grain" if obs[0].grain is None else f"grain {obs[0].grain}"
        for r in results:
            r.notes.append(
                f"all {len(results)} families of {where} are unexplained: its orientation, the frame alignment or the "
                "phase is probably wrong; tracefit find-orientation can propose orientations from these angles"
            )
    return results


def _mixed_modes(cl) -> bool:
    if len(cl) < 2:
        return False
    k0 = _plane_key(cl[0].plane)
    return any(_plane_key(c.plane) == k0 and c.mode != cl[0].mode for c in cl[1:])


def _fmt_plane(p) -> str:
    return "(" + " ".join(str(int(x)) for x in p) + ")"


def _separation_hints(cl, load, g, cands) -> list[str]:
    """Plain-language criteria that would separate the candidates in the set."""
    hints = []
    top = cl[:6]
    planes = {}
    for c in top:
        planes.setdefault(_plane_key(c.plane), c)
    pl = list(planes.values())
    if len(pl) > 1:
        names = ", ".join(f"{_fmt_plane(c.plane)} {c.mode}" for c in pl)
        hints.append(f"several planes predict this trace within the uncertainty: {names}")
        incs = [c.inclination_deg for c in pl]
        if max(incs) - min(incs) >= 10.0:
            hints.append(
                "plane inclination differs ("
                + ", ".join(f"{_fmt_plane(c.plane)}: {c.inclination_deg:.0f} deg" for c in pl)
                + "): band width or step height on the surface, or a section, separates them"
            )
        if load is not None:
            ms = [(c, c.best_system.schmid_factor if c.best_system else 0.0) for c in pl]
            vals = [m for _, m in ms]
            if max(vals) - min(vals) >= 0.1:
                hints.append(
                    "Schmid factor under the load differs ("
                    + ", ".join(f"{_fmt_plane(c.plane)}: {m:.2f}" for c, m in ms)
                    + "): the higher one is the likelier to have been active"
                )
        else:
            hints.append("the Schmid factor under the known load would help: give the load")
        hints.append("a trace on a second surface of known geometry fixes the plane normal (two-face analysis)")
    if any(c.mode == "twin" for c in top) and any(c.mode == "slip" for c in top):
        if load is not None:
            tw = [c for c in top if c.mode == "twin"]
            pos = [c for c in tw if c.best_system is not None]
            if pos and len(pos) < len(tw):
                hints.append("twin polarity: only some twin candidates are sheared in their twinning sense by this load")
            elif not pos:
                hints.append("twin polarity: the load shears every twin candidate against its twinning sense, favouring slip")
        hints.append(
            "slip or twin on the same trace: twins are lens-shaped bands with a lattice misorientation "
            "(check the band interior by diffraction or etching); slip lines are not"
        )
    return hints
