"""The load on a grain: which system on each candidate plane it drives, and how hard.

A load is a :class:`tracefit.predict.LoadAxis` (uniaxial; Schmid factors) or a stress tensor
in sample coordinates, (3, 3) or Voigt (6,) (resolved shear). Slip counts in either sense
(|m|); a twin only in its twinning sense (m > 0 in the load's sense).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.matching.candidates import CandidateSet
from tracefit.matching.results import SystemChoice
from tracefit.predict import as_load, crss_of, resolved_drive

__all__ = ["resolve_load", "is_stress", "rank_systems", "prior_drive"]


def is_stress(load: Any) -> bool:
    """True when ``load`` is a stress tensor (not None and not a uniaxial load axis).

    Parameters
    ----------
    load : LoadAxis, array_like or None

    Returns
    -------
    bool

    Examples
    --------
    >>> from tracefit.predict import parse_load
    >>> is_stress(parse_load("x")), is_stress(np.eye(3)), is_stress(None)
    (False, True, False)
    """
    if load is None:
        return False
    if hasattr(load, "is_stress"):
        return bool(load.is_stress)
    return not hasattr(load, "in_crystal")


def resolve_load(load: Any, lattice: Any = None) -> Any:
    """A load ready for the matcher, from any of the forms the library accepts.

    Parameters
    ----------
    load : None, str, LoadAxis or array_like
        None (no load); text for :func:`tracefit.predict.parse_load` (``"x"``, ``"-y"``,
        ``"1,0,0"``, ``"[110]"``; tension); a :class:`tracefit.predict.LoadAxis` (anything with
        ``in_crystal``); or a stress tensor in sample coordinates, shape (3, 3) or Voigt (6,).
    lattice : Lattice, optional
        Needed to read a crystal-direction load such as ``"[110]"``.

    Returns
    -------
    None or tracefit.predict.Load
        The load axis or the stress (:func:`tracefit.predict.as_load`).

    Raises
    ------
    TracefitInputError
        Naming ``load`` when it cannot be read.

    Examples
    --------
    >>> resolve_load("y").label, resolve_load(None)
    ('y', None)
    >>> resolve_load([1, 0, 0, 0, 0, 0]).is_stress
    True
    """
    try:
        return as_load(load, lattice)
    except TracefitInputError as e:
        raise TracefitInputError(f"load: {e}") from None


@dataclass(frozen=True)
class _FlatSystems:
    """All systems of a candidate set in one list, with what ranking needs (built once per set)."""

    normals: np.ndarray  # (S, 3) unit plane normals, crystal frame
    dirs: np.ndarray  # (S, 3) unit shear directions, crystal frame
    twin: np.ndarray  # (S,) bool, the system's candidate is a twin
    dir_idx: list  # (S) direction indices as int tuples
    names: list  # (S) catalogue names or None
    members: list  # (P) indices of each candidate's systems
    systems: list  # (S) the systems themselves (CRSS look-up)


def _flat_systems(cands: CandidateSet) -> _FlatSystems:
    """The flattened systems of ``cands`` (cached on it: ranking runs once per grain)."""
    if getattr(cands, "_flat", None) is None:
        flat, grp = [], []
        for k, ss in enumerate(cands.systems):
            flat.extend(ss)
            grp.extend([k] * len(ss))
        grp = np.array(grp)
        twin_g = np.array([m == "twin" for m in cands.modes])
        cands._flat = _FlatSystems(
            normals=np.array([s.normal for s in flat], float),
            dirs=np.array([s.dir_unit for s in flat], float),
            twin=twin_g[grp],
            dir_idx=[tuple(int(round(x)) for x in s.direction) for s in flat],
            names=[getattr(s, "name", None) for s in flat],
            members=[np.flatnonzero(grp == k) for k in range(len(cands))],
            systems=flat,
        )
    return cands._flat


def _drive_values(load: Any, g: np.ndarray, normals: np.ndarray, dirs: np.ndarray, twin: np.ndarray, frame=None):
    """Signed drive of every system: Schmid factor or resolved shear, |.| for slip."""
    v = np.atleast_1d(resolved_drive(load, g, normals, dirs, frame))
    return np.where(twin, v, np.abs(v))


def _choice(fs: _FlatSystems, i: int, x: float | None, stress: bool, active: bool, crss: dict | None) -> SystemChoice:
    c = crss_of(crss, fs.systems[i]) if crss else None
    tau = x if stress else None
    return SystemChoice(fs.dir_idx[i], None if stress else x, tau, fs.names[i], active, c,
                        None if (c is None or tau is None) else bool(tau >= c))


def _unloaded_systems(fs: _FlatSystems, cands: CandidateSet, crss: dict | None):
    """:func:`rank_systems` without a load: catalogue order, no drive; the same for every grain, so
    built once per candidate set and CRSS table (the choices are immutable; the lists are new)."""
    try:
        key = ("unloaded", None if crss is None else tuple(sorted(crss.items())))
        hash(key)
    except (TypeError, AttributeError):
        key = None
    ranked = cands._memo.get(key) if key is not None else None
    if ranked is None:
        ranked = [[_choice(fs, i, None, False, True, crss) for i in idx] for idx in fs.members]
        if key is not None:
            cands._memo[key] = ranked
    return [list(r) for r in ranked], [None] * len(ranked)


def rank_systems(load: Any, cands: CandidateSet, g: np.ndarray, frame: Any = None,
                 crss: dict | None = None) -> tuple[list[list[SystemChoice]], list[float | None]]:
    """Per candidate: its systems ranked under the load, and the best drive (m or tau, >= 0).

    Parameters
    ----------
    load : None, LoadAxis or stress array
        As returned by :func:`resolve_load`.
    cands : CandidateSet
        P candidates.
    g : ndarray, shape (3, 3)
        Orientation, v_crystal = g v_sample.
    frame : tracefit.conventions.FrameSettings, optional
        The data -> image frame: places an image-frame load (the default frame of a load) in
        the orientation data's frame.
    crss : dict, optional
        CRSS per system family, plane family or mode (MPa), as
        :func:`tracefit.predict.predict_traces`: under a stress each system carries its CRSS and
        whether its resolved shear reaches it.

    Returns
    -------
    systems : list (P) of list of SystemChoice
        Most driven first (catalogue order without a load).
    drive : list (P) of float or None
        Best drive of each candidate, >= 0 (0 for a twin the load shears the wrong way);
        None without a load.

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> from tracefit.matching.candidates import candidate_set
    >>> from tracefit.predict import parse_load
    >>> cs = candidate_set(catalogue(lattice_preset("fcc")), ["slip"])
    >>> systems, drive = rank_systems(parse_load("z"), cs, np.eye(3))
    >>> round(drive[0], 3), systems[0][0].direction
    (0.408, (1, 0, -1))
    """
    fs = _flat_systems(cands)
    if load is None:
        return _unloaded_systems(fs, cands, crss)
    vals = _drive_values(load, g, fs.normals, fs.dirs, fs.twin, frame)
    stress = is_stress(load)
    out_sys, best_drive = [], []
    for k, idx in enumerate(fs.members):
        order = idx[np.argsort(-vals[idx], kind="stable")]
        twin = cands.modes[k] == "twin"
        choices = []
        for i in order:
            x = float(vals[i])
            active = bool(x > 0) if twin else True
            choices.append(_choice(fs, i, x, stress, active, crss))
        out_sys.append(choices)
        best_drive.append(max(float(vals[order[0]]), 0.0) if choices[0].active_sense else 0.0)
    return out_sys, best_drive


def prior_drive(load: Any, drive: list) -> np.ndarray:
    """Drives on the Schmid-factor scale, for the Schmid prior.

    Parameters
    ----------
    load : LoadAxis or stress array
    drive : list of float or None
        From :func:`rank_systems`.

    Returns
    -------
    ndarray, shape (P,)
        Schmid factors as they are; resolved shears scaled so that the largest is 0.5 (the
        largest possible Schmid factor).

    Examples
    --------
    >>> print(prior_drive(np.eye(3), [2.0, 1.0, None]))
    [0.5  0.25 0.  ]
    """
    dv = np.array([d if d is not None else 0.0 for d in drive], float)
    if is_stress(load) and dv.max() > 0:
        dv = 0.5 * dv / dv.max()  # resolved shear -> Schmid-like scale, best = 0.5
    return dv
