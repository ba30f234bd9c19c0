"""Result objects of identification: a verdict per family, its ranked candidates and their systems.

They stay objects until the edge; ``to_dict()`` gives the ``--json`` form (numbers rounded,
non-finite ones as None).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np

from tracefit.crystal.indices import restate_label
from tracefit.matching.candidates import plane_key

__all__ = ["SystemChoice", "ModeShare", "Candidate", "FamilyIdentification", "identifications_to_json", "format_plane"]


def _r(x, nd: int = 4):
    """Rounded float for JSON; None for None, nan and inf."""
    if x is None:
        return None
    x = float(x)
    return round(x, nd) if math.isfinite(x) else None


def format_plane(plane: Sequence) -> str:
    """Plane indices as text in the project's one notation (:func:`tracefit.crystal.format_index`).

    Parameters
    ----------
    plane : sequence of int
        Three Miller or four Miller-Bravais indices, as stored on a candidate.

    Returns
    -------
    str
        E.g. ``(11-1)``; space separated when an index has two digits.

    Examples
    --------
    >>> format_plane((1, 1, -1)), format_plane((1, 0, -1, 2))
    ('(11-1)', '(10-12)')
    """
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in plane), "plane")


@dataclass(frozen=True)
class SystemChoice:
    """One system on a candidate plane, with its Schmid factor (or resolved shear) under the load.

    Immutable: without a load the same choices serve every grain of a candidate set.

    Attributes
    ----------
    direction : tuple of int
        Shear direction indices.
    schmid_factor : float or None
        Schmid factor under a uniaxial load (signed for twins: > 0 in the twinning sense);
        None without a load or under a stress tensor.
    resolved_shear : float or None
        Resolved shear stress under a stress tensor (the tensor's unit).
    name : str or None
        Catalogue name of the system.
    active_sense : bool
        Twins: False when the load shears them against their twinning sense.
    crss : float or None
        The CRSS the user gave for this system (unit of the stress, MPa).
    exceeds_crss : bool or None
        Under a stress with a CRSS: ``resolved_shear >= crss``; None otherwise.

    Examples
    --------
    >>> SystemChoice((0, 1, -1), 0.40824).to_dict()
    {'direction': [0, 1, -1], 'schmid_factor': 0.4082}
    >>> SystemChoice((0, 1, -1), None, 42.0, crss=40.0, exceeds_crss=True).to_dict()["exceeds_crss"]
    True
    """

    direction: tuple
    schmid_factor: float | None
    resolved_shear: float | None = None
    name: str | None = None
    active_sense: bool = True
    crss: float | None = None
    exceeds_crss: bool | None = None

    def to_dict(self) -> dict:
        """JSON form: direction, Schmid factor (4 decimals); resolved shear (MPa), CRSS and the
        CRSS check, and the name, when known."""
        d = {"direction": list(self.direction), "schmid_factor": _r(self.schmid_factor)}
        if self.resolved_shear is not None:
            d["resolved_shear"] = _r(self.resolved_shear)
        if self.crss is not None:
            d["crss"] = _r(self.crss)
            d["exceeds_crss"] = None if self.exceeds_crss is None else bool(self.exceeds_crss)
        if self.name:
            d["name"] = self.name
        return d


@dataclass
class ModeShare:
    """One mode (slip or twin) on a candidate plane: its share of the plane's probability.

    The likelihood of a trace is the same for every mode on one plane, so the share is the
    split of the prior on that plane: the system-family prior, times the Schmid prior when it
    is on (which also holds the twin polarity: a twin sheared against its sense gets the floor).

    Attributes
    ----------
    mode : {"slip", "twin"}
    family : str
        Plane family of the mode's systems.
    share : float
        Fraction of the plane's probability, in [0, 1]; the shares of a plane sum to 1.
    probability : float
        ``share`` times the plane's probability.
    best_system : SystemChoice or None
        The most loaded system of this mode (None without a load, or a twin sheared the wrong way).
    systems : list of SystemChoice
        The mode's systems on the plane, most loaded first.

    Examples
    --------
    >>> ModeShare("twin", "{111}", 0.5, 0.48).to_dict()["share"]
    0.5
    """

    mode: str
    family: str
    share: float
    probability: float
    best_system: SystemChoice | None = None
    systems: list[SystemChoice] = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON form (share and probability to 6 decimals)."""
        return {
            "mode": self.mode,
            "family": restate_label(self.family),
            "share": _r(self.share, 6),
            "probability": _r(self.probability, 6),
            "best_system": None if self.best_system is None else self.best_system.to_dict(),
            "systems": [s.to_dict() for s in self.systems],
        }


@dataclass
class Candidate:
    """One candidate plane for an observed family, with the split between the modes on it.

    The headline is the plane: ``probability`` is summed over the modes (and systems) on the
    plane; ``mode``, ``best_system`` and ``systems`` are those of its most probable mode, and
    ``modes`` gives the split (:class:`ModeShare`).

    Attributes
    ----------
    plane : tuple of int
        Plane indices.
    family, mode : str
        Plane family (``"{111}"``) and ``"slip"`` or ``"twin"``.
    predicted_deg : float
        Predicted image-frame trace angle, degrees.
    residual_deg : float
        Observed - predicted, axial degrees.
    probability : float
        Posterior probability that the family is the trace of this plane (all modes).
    sigma_deg : float
        Total spread used in the likelihood, degrees.
    predicted_sigma_deg : float
        Spread of the predicted trace from the orientation (and tilt), degrees.
    inclination_deg : float
        Angle between plane and surface, degrees.
    best_system : SystemChoice or None
        The most loaded system on the plane (None without a load, or a twin sheared the wrong way).
    systems : list of SystemChoice
        All systems on the plane, most loaded first.
    near_surface : bool
        The plane lies within ``tracefit.predict.NEAR_SURFACE_DEG`` of the surface (ill-defined trace).
    log_likelihood : float
        Log (prior x likelihood) of the family under this plane (all modes), per degree.
    modes : list of ModeShare
        The modes on the plane, most probable first (empty when built by hand).

    Examples
    --------
    >>> c = Candidate((1, 1, 1), "{111}", "slip", 110.1, 0.1, 0.97, 1.3, 1.2, 37.9)
    >>> c.to_dict()["probability"], c.to_dict()["near_surface"]
    (0.97, False)
    """

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
    modes: list[ModeShare] = field(default_factory=list)

    def to_dict(self) -> dict:
        """JSON form (probability to 6 decimals, angles to 4); ``modes`` holds the split."""
        return {
            "plane": list(self.plane),
            "family": restate_label(self.family),
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
            "modes": [m.to_dict() for m in self.modes],
        }


@dataclass
class FamilyIdentification:
    """The verdict for one observed family: ranked candidates, "none of these", ambiguity.

    Attributes
    ----------
    angle_deg, angle_sigma_deg : float
        The observed family's angle and sigma, degrees.
    grain, source, label :
        As the :class:`tracefit.matching.ObservedFamily`.
    unexplained : bool
        "None of these" (or a surface artefact) has probability >= 0.5.
    ambiguous : bool
        A second distinct plane has at least ``ambiguity_ratio`` of the best plane's probability.
    p_none : float
        Posterior probability of "none of these".
    candidates : list of Candidate
        Candidates above the report threshold, most probable first.
    separation : list of str
        Plain-language criteria that would separate the listed candidates.
    notes : list of str
        Plain-language remarks (unexplained, near-surface planes, ...).
    p_artefact : float
        Posterior probability of a map-level surface artefact (:mod:`tracefit.matching.artefacts`).
    unexplained_reason : str or None
        Why the family is unexplained.
    artefact_angle_deg : float or None
        Angle of the surface-artefact direction the family sits on.
    nearest : list of dict
        The three planes whose predicted traces lie nearest the observed angle, whatever their
        probability: ``plane``, ``family``, ``mode``, ``predicted_deg``, ``residual_deg``,
        ``n_sigma`` (the residual in units of its total sigma).
    margin : float or None
        The best plane's probability over the runner-up plane's (None with fewer than two).
    boundary_continuation : float or None
        Carried from the observed family.

    Examples
    --------
    >>> r = FamilyIdentification(30.0, 0.5, None, "measured", None, True, False, 0.9, [])
    >>> r.best is None, r.to_dict()["unexplained_reason"]
    (True, 'no candidate fits')
    """

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
    # Map-level surface-artefact hypothesis (tracefit.matching.artefacts); set after construction so that
    # subclasses keep their positional arguments.
    p_artefact: float = field(default=0.0, init=False)
    unexplained_reason: str | None = field(default=None, init=False)
    artefact_angle_deg: float | None = field(default=None, init=False)
    boundary_continuation: float | None = field(default=None, init=False)
    # the nearest predicted traces whatever their probability (a typo in the orientation and a
    # scratch look alike until one sees how far the nearest plane is), and the best plane's margin
    nearest: list = field(default_factory=list, init=False)
    margin: float | None = field(default=None, init=False)

    @property
    def best(self) -> Candidate | None:
        """Most probable candidate (None when there is none above the report threshold)."""
        return self.candidates[0] if self.candidates else None

    @property
    def planes(self) -> list[tuple]:
        """Distinct planes in the candidate set, most probable first."""
        seen, out = set(), []
        for c in self.candidates:
            k = plane_key(c.plane)
            if k not in seen:
                seen.add(k)
                out.append(c.plane)
        return out

    def to_dict(self) -> dict:
        """JSON form of the verdict (the ``families`` entries of ``tracefit identify --json``)."""
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
            "nearest": [dict(n) for n in self.nearest],
            "margin": _r(self.margin, 4),
        }


def identifications_to_json(results: Sequence[FamilyIdentification], **extra: Any) -> dict:
    """The ``--json`` object of ``tracefit identify``: ``{"families": [...], **extra}``.

    Parameters
    ----------
    results : sequence of FamilyIdentification
    **extra
        Further top-level entries (they override ``families`` if so named).

    Returns
    -------
    dict

    Examples
    --------
    >>> r = FamilyIdentification(30.0, 0.5, None, "measured", None, True, False, 0.9, [])
    >>> d = identifications_to_json([r], lattice="fcc")
    >>> sorted(d), d["families"][0]["p_none"]
    (['families', 'lattice'], 0.9)
    """
    d = {"families": [r.to_dict() for r in results]}
    d.update(extra)
    return d
