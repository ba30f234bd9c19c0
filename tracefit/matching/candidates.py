"""Candidate planes: catalogue systems grouped by (plane, mode), and their predicted traces.

A candidate is one plane variant of one mode (``(1 1 1)`` slip, ``(1 1 1)`` twin, ...),
with all the catalogue systems on it. :func:`predict_candidates` gives each candidate's
image-frame trace angle, its inclination to the surface and the stage-tilt slope for one
or many orientations at once; it is the only place of this package that predicts traces.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from dataclasses import dataclass, field
from typing import Any, Iterable

import numpy as np

from tracefit.conventions import FrameSettings
from tracefit.errors import TracefitInputError
from tracefit.predict import predicted_trace_table

__all__ = ["plane_key", "CandidateSet", "candidate_set", "as_candidate_set", "predict_candidates",
           "system_family_prior"]


def plane_key(plane: Iterable) -> tuple:
    """Sign-free key of a plane: (h k l) and (-h -k -l) are the same plane.

    Parameters
    ----------
    plane : sequence of int
        Miller (or Miller-Bravais) indices.

    Returns
    -------
    tuple of int
        The indices with the first non-zero one positive.

    Examples
    --------
    >>> plane_key((-1, 1, -1))
    (1, -1, 1)
    """
    p = tuple(int(round(x)) for x in plane)
    for x in p:
        if x != 0:
            return p if x > 0 else tuple(-y for y in p)
    return p


@dataclass
class CandidateSet:
    """Candidate (plane, mode) groups of a catalogue, ready for fast per-grain prediction.

    Build it with :func:`candidate_set`; all attributes have one entry per candidate (P).

    Attributes
    ----------
    planes : list of tuple, length P
        Plane indices as given by the first system of each group.
    families : list of str, length P
        Plane family names (``"{111}"``, ...).
    modes : list of str, length P
        ``"slip"`` or ``"twin"``.
    normals : ndarray, shape (P, 3)
        Unit plane normals, Cartesian crystal frame.
    plane_ids : ndarray of int, shape (P,)
        Index of the distinct (sign-free) plane; slip and twin on one plane share it.
    systems : list of list, length P
        The catalogue systems of each group.

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")))
    >>> len(cs), int(cs.plane_ids.max()) + 1, cs.planes[0], sorted(set(cs.modes))
    (8, 4, (1, 1, 1), ['slip', 'twin'])
    """

    planes: list
    families: list
    modes: list
    normals: np.ndarray
    plane_ids: np.ndarray
    systems: list
    _flat: object = field(default=None, repr=False, compare=False)
    # per-set results that do not depend on the grain (prior shares, systems without a load)
    _memo: dict = field(default_factory=dict, repr=False, compare=False)

    def __len__(self) -> int:
        return len(self.planes)


def candidate_set(systems: Iterable, modes: Iterable[str] | None = None, families: Iterable[str] | None = None) -> CandidateSet:
    """Group catalogue systems by (plane, mode).

    Parameters
    ----------
    systems : iterable of DeformationSystem
        Each with ``mode``, ``family``, ``plane``, ``normal`` (unit, crystal frame) and
        ``dir_unit`` / ``direction`` (e.g. :func:`tracefit.crystal.catalogue`).
    modes : iterable of str, optional
        Keep only these modes (``["slip"]``, ``["twin"]``).
    families : iterable of str, optional
        Keep only these plane families (``["{111}"]``; spaces ignored).

    Returns
    -------
    CandidateSet

    Raises
    ------
    TracefitInputError
        When ``systems`` is empty or no system is left after the filters.

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")), modes=["slip"])
    >>> len(cs), sorted(set(cs.modes)), len(cs.systems[0])
    (4, ['slip'], 3)
    """
    systems = list(systems)
    if not systems:
        raise TracefitInputError("systems is empty: give the candidate systems, e.g. tracefit.crystal.catalogue(lattice)")
    modes = None if modes is None else {m.strip().lower() for m in modes}
    fam_filter = None if families is None else {f.replace(" ", "") for f in families}
    groups: dict = {}
    for s in systems:
        mode = str(s.mode).lower()
        if modes is not None and mode not in modes:
            continue
        if fam_filter is not None and str(s.family).replace(" ", "") not in fam_filter:
            continue
        groups.setdefault((plane_key(s.plane), mode), []).append(s)  # dicts keep first-seen order
    if not groups:
        raise TracefitInputError(
            "no candidate systems left after filtering by modes and families; "
            "check modes (slip, twin) and the family names of this lattice"
        )
    plane_index: dict = {}
    planes, fams, mds, normals, pids = [], [], [], [], []
    for (pk, mode), ss in groups.items():
        s0 = ss[0]
        plane_index.setdefault(pk, len(plane_index))
        planes.append(tuple(int(round(x)) for x in s0.plane))
        fams.append(str(s0.family))
        mds.append(mode)
        n = np.asarray(s0.normal, float)
        normals.append(n / np.linalg.norm(n))
        pids.append(plane_index[pk])
    return CandidateSet(planes, fams, mds, np.array(normals), np.array(pids), list(groups.values()))


def as_candidate_set(systems: Any, modes: Iterable[str] | None = None, families: Iterable[str] | None = None) -> CandidateSet:
    """``systems`` itself when it is a :class:`CandidateSet`, else :func:`candidate_set` of it.

    Parameters
    ----------
    systems : CandidateSet or iterable of DeformationSystem
        A ready candidate set is passed through untouched.
    modes, families : optional
        Filters, as :func:`candidate_set` (ignored for a CandidateSet).

    Returns
    -------
    CandidateSet
        The given set, or a new one grouped from the systems.

    Raises
    ------
    TracefitInputError
        As :func:`candidate_set` (no systems, or none left after the filters).

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> cs = as_candidate_set(catalogue(lattice_preset("fcc")), ["slip"])
    >>> as_candidate_set(cs) is cs
    True

    The same list of systems (the same objects) with the same filters gives the same set, built once:

    >>> systems = catalogue(lattice_preset("fcc"))
    >>> as_candidate_set(systems, ["slip"]) is as_candidate_set(list(systems), ["slip"])
    True
    """
    if isinstance(systems, CandidateSet):
        return systems
    systems = list(systems)
    # filters read once (they may be iterators), kept as given otherwise
    modes = modes if modes is None or isinstance(modes, str) else tuple(modes)
    families = families if families is None or isinstance(families, str) else tuple(families)
    key = (tuple(map(id, systems)), modes, families)
    with _SETS_LOCK:
        hit = _SETS.get(key)
        if hit is not None:
            _SETS.move_to_end(key)
            return hit[1]
    cands = candidate_set(systems, modes, families)
    with _SETS_LOCK:
        # the entry holds the systems themselves, so that their ids stay theirs while it lives
        _SETS[key] = (systems, cands)
        while len(_SETS) > _SETS_SIZE:
            _SETS.popitem(last=False)
    return cands


# Candidate sets of the last few system lists given to as_candidate_set, keyed by the identity of
# the systems (DeformationSystem is frozen) and the filters: a survey or a loop over grains passes
# one catalogue again and again, and grouping it took as long as identifying a family.
_SETS: OrderedDict = OrderedDict()
_SETS_SIZE = 16
_SETS_LOCK = threading.Lock()


def predict_candidates(cands: CandidateSet, g: np.ndarray,
                       frame: FrameSettings | None = None) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Predicted image-frame trace angles, inclinations and tilt slopes of every candidate.

    Parameters
    ----------
    cands : CandidateSet
        P candidates.
    g : ndarray, shape (3, 3) or (N, 3, 3)
        Orientation(s), v_crystal = g v_sample.
    frame : FrameSettings, optional
        Orientation-data frame -> image (rotation, flips, stage tilt); identity by default.

    Returns
    -------
    angle_deg : ndarray, shape (N, P)
        Apparent trace angle (after frame and tilt), axial degrees in [0, 180); N = 1 for one g.
    inclination_deg : ndarray, shape (N, P)
        Angle between plane and surface, degrees (90 = upright).
    slope : ndarray, shape (N, P)
        d(apparent)/d(true) of the stage tilt (1 without tilt).

    Raises
    ------
    TracefitInputError
        When ``g`` is not (3, 3) or (N, 3, 3).

    Examples
    --------
    The (111) trace of an fcc crystal at Euler (0, 30, 0):

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")), ["slip"])
    >>> ang, incl, slope = predict_candidates(cs, from_euler((0, 30, 0)))
    >>> cs.planes[0], round(float(ang[0, 0]), 2), round(float(incl[0, 0]), 1), float(slope[0, 0])
    ((1, 1, 1), 110.1, 37.9, 1.0)
    """
    g = np.asarray(g, float)
    tab = predicted_trace_table(None, g[None] if g.ndim == 2 else g, cands.normals, frame or FrameSettings())
    return tab.angle_deg, tab.inclination_deg, tab.slope


def _norm_key(text: Any) -> str:
    return str(text).replace(" ", "").lower()


def _family_weight(name: str, plane_family: str, mode: str, weights: dict) -> float:
    """The user's weight of one system family: by system name (with or without its trailing
    mode word), plane family or mode; 1 when none is given."""
    n = _norm_key(name)
    for key in (n, n.removesuffix(mode), _norm_key(plane_family), mode):
        if key in weights:
            return weights[key]
    return 1.0


def _check_weights(prior: Any) -> dict:
    if prior is None:
        return {}
    if not hasattr(prior, "items"):
        raise TracefitInputError(f"prior must be a mapping of system family to weight, e.g. {{'{{110}}<111>': 2}}, got {type(prior).__name__}")
    out = {}
    for k, v in prior.items():
        try:
            w = float(v)
        except (TypeError, ValueError):
            raise TracefitInputError(f"prior: the weight of {k!r} must be a number, got {v!r}") from None
        if not (w >= 0.0 and w < float("inf")):
            raise TracefitInputError(f"prior: the weight of {k!r} must be a finite number >= 0, got {v!r}")
        out[_norm_key(k)] = w
    return out


def system_family_prior(cands: CandidateSet, prior: Any = None) -> np.ndarray:
    """Prior share of every candidate: equal per system family, spread over the family's planes.

    Each system family (catalogue ``name``: ``"{110}<111> slip"``, ``"basal <a>"``, ...) gets the
    same weight unless ``prior`` says otherwise; a family's weight is shared equally by the
    distinct planes it has systems on, and a candidate (one plane, one mode) sums the shares of
    the families on it. So a family with many planes ({123} in bcc: 24) does not take more
    prior mass than one with few ({110}: 6).

    Parameters
    ----------
    cands : CandidateSet
        P candidates.
    prior : dict, optional
        Relative weights (>= 0) keyed by system family name (``"{110}<111> slip"`` or
        ``"{110}<111>"``; spaces and case ignored), by plane family (``"{112}"``: all its
        system families) or by mode (``"twin"``). Unnamed families weigh 1.

    Returns
    -------
    ndarray, shape (P,)
        Shares summing to 1.

    Raises
    ------
    TracefitInputError
        Weights that are not finite numbers >= 0, a key that names no family of ``cands``, or
        all weights 0.

    Examples
    --------
    bcc with {110}, {112} and {123} slip: each family a third, so a {123} plane (24 of them)
    weighs a quarter of a {110} plane (6):

    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> cs = candidate_set(catalogue(lattice_preset("bcc"), ["slip"]))
    >>> w = system_family_prior(cs)
    >>> fam = np.array(cs.families)
    >>> [round(float(w[fam == f].sum()), 3) for f in ("{110}", "{112}", "{123}")]
    [0.333, 0.333, 0.333]
    >>> w2 = system_family_prior(cs, {"{110}<111>": 2})
    >>> round(float(w2[fam == "{110}"].sum()), 3)
    0.5
    """
    weights = _check_weights(prior)
    memo_key = ("prior", tuple(sorted(weights.items())))
    if memo_key in cands._memo:
        return cands._memo[memo_key].copy()
    fams: dict = {}  # system family name -> (weight, set of plane ids)
    member: list = []  # per candidate, the family names on it
    for c, ss in enumerate(cands.systems):
        names = []
        for sy in ss:
            name = str(getattr(sy, "name", None) or f"{cands.families[c]} {cands.modes[c]}")
            if name not in fams:
                fams[name] = [_family_weight(name, cands.families[c], cands.modes[c], weights), set()]
            fams[name][1].add(int(cands.plane_ids[c]))
            names.append(name)
        member.append(dict.fromkeys(names))
    known = set()
    for c, ss in enumerate(cands.systems):
        for sy in ss:
            n = _norm_key(getattr(sy, "name", "") or "")
            known |= {n, n.removesuffix(cands.modes[c]), _norm_key(cands.families[c]), cands.modes[c]}
    unknown = sorted(set(weights) - known)
    if unknown:
        raise TracefitInputError(f"prior: {unknown[0]!r} names no system family of these candidates "
                                 f"(they are: {', '.join(fams)})")
    total = sum(w for w, _ in fams.values())
    if total <= 0:
        raise TracefitInputError("prior: every system family has weight 0; give at least one a positive weight")
    share = np.array([sum(fams[n][0] / len(fams[n][1]) for n in names) for names in member]) / total
    cands._memo[memo_key] = share.copy()
    return share
