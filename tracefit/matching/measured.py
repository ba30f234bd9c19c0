"""Hand-measured traces: angles typed on the command line, a CSV of measured lines, cracks.

A person auditing a photo often starts from a line measured by hand (an angle read with a
protractor tool, or two points read off an image viewer) or from a crack, not from an image
the detector can read. This module turns such measurements into the matcher's own input,
:class:`tracefit.matching.ObservedFamily` with ``source="measured"``, and adds the crack
question: which candidate planes is a crack trace consistent with?

Conventions (``docs/conventions.md``): angles are image-frame, degrees counterclockwise from
+x (right), axial in [0, 180). Endpoints are pixel coordinates as an image viewer shows them,
x = column to the right, y = row *downward*; :func:`tracefit.conventions.pixel_endpoints_angle` is
the one place they become an angle. :data:`MEASURED_CONVENTION` states this in results.

The CSV columns are documented in ``docs/measured-traces.md``.
"""

from __future__ import annotations

import csv
import math
import re
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Iterable, Mapping, Sequence

import numpy as np

from tracefit.conventions import FrameSettings, fold_axial, pixel_endpoints_angle
from tracefit.errors import TracefitInputError
from tracefit.matching.assign import identify_families, identify_grains
from tracefit.matching.candidates import CandidateSet, as_candidate_set, predict_candidates
from tracefit.matching.checks import check_sigma, orientation_matrix, orientation_table
from tracefit.matching.observed import as_observed
from tracefit.matching.likelihood import family_log_weights, predicted_trace_sigma
from tracefit.matching.observed import ObservedFamily
from tracefit.matching.results import FamilyIdentification

__all__ = [
    "MEASURED_CONVENTION",
    "DEFAULT_MEASURED_SIGMA_DEG",
    "DEFAULT_CLICK_PX",
    "DEFAULT_CRACK_K_SIGMA",
    "CSV_COLUMNS",
    "parse_angle_option",
    "read_measured_csv",
    "is_crack",
    "PlaneConsistency",
    "CrackIdentification",
    "plane_consistency",
    "identify_observed",
]

#: How measured endpoints and angles are read; reported in every result that uses them.
MEASURED_CONVENTION = "pixel rows down; angle ccw from +x, axial"
#: One-sigma uncertainty of a hand-measured angle when none is given, degrees (common practice, no source).
DEFAULT_MEASURED_SIGMA_DEG = 0.5
#: Reading error of a point clicked in an image viewer, pixels per coordinate (common practice, no source).
DEFAULT_CLICK_PX = 1.0
#: A crack is "consistent" with a plane when |residual| <= k sigma (k = 2: about 95 % for a Gaussian).
DEFAULT_CRACK_K_SIGMA = 2.0

#: Known CSV columns (lower case); ``notes`` is free text and ignored.
CSV_COLUMNS = ("grain", "angle_deg", "x0", "y0", "x1", "y1", "sigma_deg", "label", "notes")
_ALIASES = {"angle": "angle_deg", "sigma": "sigma_deg", "uncertainty_deg": "sigma_deg", "note": "notes"}
_ENDS = ("x0", "y0", "x1", "y1")

_NUM = r"[+-]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][+-]?\d+)?"
_ANGLE_RE = re.compile(rf"^\s*({_NUM})\s*(?:(?:\+-|\+/-|\u00b1|:)\s*({_NUM}))?\s*$")


# ----------------------------------------------------------------------------- reading
def _fold_note(where: str, angle: float) -> tuple[float, str | None]:
    a = fold_axial(angle)
    if 0.0 <= angle < 180.0:
        return a, None
    return a, f"{where}: angle {angle:g} deg folded to {a:g} deg (a line's angle repeats every 180 deg)"


def parse_angle_option(text: str, default_sigma_deg: float = DEFAULT_MEASURED_SIGMA_DEG, label: str | None = None,
                       notes: list | None = None, option: str = "--angle") -> ObservedFamily:
    """One measured trace angle from text: ``"37.5"``, ``"37.5+-0.5"``, ``"37.5+/-0.5"`` or ``"37.5:0.5"``.

    Parameters
    ----------
    text : str
        Angle in degrees (image frame, ccw from +x), optionally with a one-sigma uncertainty.
    default_sigma_deg : float
        Uncertainty used when none is given, degrees.
    label : str, optional
        Label of the family (``"crack"`` marks a crack).
    notes : list, optional
        Appended with a note when the angle lies outside [0, 180) and was folded.
    option : str
        Name the text came under, for messages (the command line passes its flag).

    Returns
    -------
    ObservedFamily
        ``source="measured"``, angle folded to [0, 180).

    Raises
    ------
    TracefitInputError
        When the text is not an angle with an optional sigma >= 0.

    Examples
    --------
    >>> f = parse_angle_option("217.5+-0.3")
    >>> round(f.angle_deg, 1), f.angle_sigma_deg, f.source
    (37.5, 0.3, 'measured')
    """
    m = _ANGLE_RE.match(str(text))
    if not m:
        raise TracefitInputError(
            f"cannot read {option} {text!r}; expected an angle in degrees with an optional uncertainty, "
            "e.g. 37.5, 37.5+-0.5 or 37.5:0.5"
        )
    angle = float(m.group(1))
    sigma = float(m.group(2)) if m.group(2) is not None else float(default_sigma_deg)
    if not math.isfinite(angle):
        raise TracefitInputError(f"{option} {text!r}: the angle must be a finite number of degrees")
    if not (math.isfinite(sigma) and sigma >= 0):
        raise TracefitInputError(f"{option} {text!r}: the uncertainty must be >= 0 degrees")
    a, note = _fold_note(f"{option} {text.strip()}", angle)
    if note and notes is not None:
        notes.append(note)
    return ObservedFamily(a, sigma, None, "measured", label)


def _field_number(row: dict, key: str, where: str) -> float | None:
    t = row.get(key, "")
    if t is None or not str(t).strip():
        return None
    try:
        v = float(str(t).strip())
    except ValueError:
        raise TracefitInputError(f"{where}, field {key!r}: {t.strip()!r} is not a number") from None
    if not math.isfinite(v):
        raise TracefitInputError(f"{where}, field {key!r}: {t.strip()!r} is not a finite number")
    return v


def _read_header(htext: str, where: str) -> tuple[list[str], bool, bool]:
    """Column names of the header row (aliases resolved), and whether angles / endpoints are given."""
    header = [_ALIASES.get(h, h) for h in (h.strip().lower() for h in next(csv.reader([htext])))]
    for h in header:
        if h not in CSV_COLUMNS:
            raise TracefitInputError(f"{where} (header): unknown column {h!r}; expected some of {', '.join(CSV_COLUMNS)}")
    if len(set(header)) != len(header):
        dup = next(h for h in header if header.count(h) > 1)
        raise TracefitInputError(f"{where} (header): column {dup!r} appears twice")
    ends_present = [k for k in _ENDS if k in header]
    if ends_present and len(ends_present) != 4:
        missing = [k for k in _ENDS if k not in header]
        raise TracefitInputError(f"{where} (header): endpoint columns need all of x0,y0,x1,y1; missing {', '.join(missing)}")
    has_angle = "angle_deg" in header
    if not has_angle and not ends_present:
        raise TracefitInputError(f"{where} (header): needs an angle_deg column or the endpoint columns x0,y0,x1,y1")
    return header, has_angle, bool(ends_present)


def _row_angle(row: dict, where: str, has_angle: bool, has_ends: bool, sigma: float | None,
               default_sigma_deg: float, click_px: float) -> tuple[float, float, str | None]:
    """(angle, sigma, fold note) of one row, from its angle or its two endpoints."""
    angle = _field_number(row, "angle_deg", where) if has_angle else None
    ends = [_field_number(row, k, where) for k in _ENDS] if has_ends else [None] * 4
    n_ends = sum(v is not None for v in ends)
    if angle is not None and n_ends:
        raise TracefitInputError(f"{where}: both angle_deg and endpoints are given; give one of them")
    if angle is None and n_ends == 0:
        need = " or ".join(x for x in (("field 'angle_deg'" if has_angle else ""), ("fields x0,y0,x1,y1" if has_ends else "")) if x)
        raise TracefitInputError(f"{where}: missing {need}; each row needs an angle or two endpoints")
    if angle is None and n_ends != 4:
        missing = [k for k, v in zip(_ENDS, ends) if v is None]
        raise TracefitInputError(f"{where}, field {missing[0]!r}: empty; both endpoints x0,y0,x1,y1 are needed")
    if angle is not None:
        a, note = _fold_note(where, angle)
        return a, float(default_sigma_deg) if sigma is None else sigma, note
    x0, y0, x1, y1 = ends
    try:
        # x = column (right), y = row (down): the viewer's reading is the pixel (col, row).
        a = float(pixel_endpoints_angle(x0, y0, x1, y1))
    except ValueError:
        raise TracefitInputError(
            f"{where}, fields x0,y0,x1,y1: the endpoints ({x0:g}, {y0:g}) and ({x1:g}, {y1:g}) coincide, "
            "so the line has no direction; give two distinct points"
        ) from None
    length = math.hypot(x1 - x0, y1 - y0)
    s = sigma if sigma is not None else max(float(default_sigma_deg), math.degrees(math.sqrt(2.0) * click_px / length))
    return a, s, None


def _parse_row(raw: str, header: list[str], where: str, has_angle: bool, has_ends: bool,
               default_sigma_deg: float, click_px: float, notes: list | None) -> ObservedFamily:
    vals = next(csv.reader([raw]))
    if len(vals) > len(header):
        raise TracefitInputError(f"{where}: {len(vals)} fields but the header names {len(header)} columns")
    row = dict(zip(header, vals + [""] * (len(header) - len(vals))))
    grain = None
    if "grain" in row and row["grain"].strip():
        gv = _field_number(row, "grain", where)
        if gv != int(gv):
            raise TracefitInputError(f"{where}, field 'grain': {row['grain'].strip()!r} is not an integer grain id")
        grain = int(gv)
    label = row.get("label", "").strip() or None
    sigma = _field_number(row, "sigma_deg", where)
    if sigma is not None and sigma < 0:
        raise TracefitInputError(f"{where}, field 'sigma_deg': {sigma:g} is negative; expected an uncertainty >= 0 degrees")
    a, s, note = _row_angle(row, where, has_angle, has_ends, sigma, default_sigma_deg, click_px)
    if note and notes is not None:
        notes.append(note)
    return ObservedFamily(a, s, grain, "measured", label)


def read_measured_csv(path: str | Path, default_sigma_deg: float = DEFAULT_MEASURED_SIGMA_DEG, notes: list | None = None,
                      click_px: float = DEFAULT_CLICK_PX) -> list[ObservedFamily]:
    """Read a CSV of hand-measured lines (columns in ``docs/measured-traces.md``).

    Each data row is one measured trace: ``angle_deg`` (image frame, degrees ccw from +x),
    or the endpoints ``x0,y0,x1,y1`` in pixels as an image viewer reads them (x = column to
    the right, y = row downward). Optional ``grain`` (integer id), ``sigma_deg``, ``label``
    (``crack`` marks a crack) and ``notes`` (ignored). Lines starting with ``#`` are comments.

    Parameters
    ----------
    path : str or Path
        The CSV file (UTF-8).
    default_sigma_deg : float
        Uncertainty of a row without ``sigma_deg``, degrees. For endpoints it is raised to the
        angle spread of ``click_px`` reading error at each end, ``sqrt(2) click_px / length``.
    notes : list, optional
        Appended with notes (angles outside [0, 180) folded).
    click_px : float
        Reading error of one clicked coordinate, pixels.

    Returns
    -------
    list of ObservedFamily
        In file order, ``source="measured"``.

    Raises
    ------
    TracefitInputError
        Naming the row (its line number in the file, comment and blank lines counted) and field.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> p = pathlib.Path(tempfile.mkdtemp()) / "lines.csv"
    >>> _ = p.write_text("grain,x0,y0,x1,y1,label\\n3,10,110,110,10,crack\\n")
    >>> f = read_measured_csv(p)[0]
    >>> round(f.angle_deg, 1), f.grain, f.label, round(f.angle_sigma_deg, 2)
    (45.0, 3, 'crack', 0.57)
    """
    p = Path(path)
    name = p.name
    if not p.is_file():
        raise TracefitInputError(f"measured-trace file {str(p)!r} not found (expected a CSV, see docs/measured-traces.md)")
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise TracefitInputError(f"measured-trace file {str(p)!r} is not a UTF-8 text CSV") from None
    lines = [(i, ln) for i, ln in enumerate(text.splitlines(), start=1) if ln.strip() and not ln.lstrip().startswith("#")]
    if not lines:
        raise TracefitInputError(f"measured-trace file {str(p)!r} is empty; expected a header such as grain,x0,y0,x1,y1,sigma_deg,label")
    hline, htext = lines[0]
    header, has_angle, has_ends = _read_header(htext, f"{name}, row {hline}")
    out = [_parse_row(raw, header, f"{name}, row {ln}", has_angle, has_ends, default_sigma_deg, click_px, notes)
           for ln, raw in lines[1:]]
    if not out:
        raise TracefitInputError(f"measured-trace file {str(p)!r} has a header but no measured lines")
    return out


def is_crack(family: Any) -> bool:
    """True when a family's label names a crack (the word ``crack``, any case).

    Parameters
    ----------
    family : ObservedFamily or FamilyIdentification
        Anything with a ``label`` attribute (str or None).

    Returns
    -------
    bool

    Examples
    --------
    >>> is_crack(ObservedFamily(30.0, label="Crack 2")), is_crack(ObservedFamily(30.0, label="cracked?"))
    (True, True)
    >>> is_crack(ObservedFamily(30.0, label="band")), is_crack(ObservedFamily(30.0))
    (False, False)
    """
    lab = getattr(family, "label", None)
    return bool(lab) and re.search(r"\bcrack", str(lab).lower()) is not None


# ----------------------------------------------------------------------------- cracks
@dataclass
class PlaneConsistency:
    """Whether an observed trace lies within k sigma of one candidate plane's predicted trace.

    Attributes
    ----------
    plane : tuple of int
        Plane indices.
    family : str
        Plane family (families joined by ``/`` when slip and twin planes coincide).
    modes : list of str
        Modes on this plane.
    predicted_deg, residual_deg, sigma_deg : float
        Predicted trace angle, observed - predicted and the total spread, degrees.
    inclination_deg : float
        Angle between plane and surface, degrees.
    near_surface : bool
        The plane lies nearly in the surface (ill-defined trace).
    consistent : bool
        |residual| <= k sigma.

    Examples
    --------
    >>> q = PlaneConsistency((1, 1, 1), "{111}", ["slip"], 110.1, 0.3, 1.7, 37.9, False, True)
    >>> q.to_dict()["residual_deg"], q.consistent
    (0.3, True)
    """

    plane: tuple
    family: str
    modes: list
    predicted_deg: float
    residual_deg: float
    sigma_deg: float
    inclination_deg: float
    near_surface: bool
    consistent: bool

    def to_dict(self) -> dict:
        return {
            "plane": list(self.plane),
            "family": self.family,
            "modes": list(self.modes),
            "predicted_deg": round(float(self.predicted_deg), 4),
            "residual_deg": round(float(self.residual_deg), 4),
            "sigma_deg": round(float(self.sigma_deg), 4),
            "inclination_deg": round(float(self.inclination_deg), 4),
            "near_surface": bool(self.near_surface),
        }


@dataclass
class CrackIdentification(FamilyIdentification):
    """A measured crack: the matcher's verdict plus a yes/no consistency statement per candidate plane.

    Attributes
    ----------
    consistent_planes, inconsistent_planes : list of PlaneConsistency
        Candidate planes within and beyond ``k_sigma`` of the crack's angle.
    k_sigma : float
        The consistency factor used.
    (others as :class:`tracefit.matching.FamilyIdentification`)

    Examples
    --------
    >>> c = CrackIdentification(30.0, 0.5, None, "measured", "crack", True, False, 0.9, [])
    >>> d = c.to_dict()
    >>> d["crack"], d["consistent_planes"], d["consistency_k_sigma"]
    (True, [], 2.0)
    """

    consistent_planes: list = field(default_factory=list)
    inconsistent_planes: list = field(default_factory=list)
    k_sigma: float = DEFAULT_CRACK_K_SIGMA

    def to_dict(self) -> dict:
        d = super().to_dict()
        d["crack"] = True
        d["consistency_k_sigma"] = float(self.k_sigma)
        d["consistent_planes"] = [c.to_dict() for c in self.consistent_planes]
        d["inconsistent_planes"] = [c.to_dict() for c in self.inconsistent_planes]
        return d


def plane_consistency(family: ObservedFamily, g: Any, cands: Any, frame: FrameSettings | None = None,
                      orientation_sigma_deg: float = 1.0, frame_sigma_deg: float = 0.5,
                      k_sigma: float = DEFAULT_CRACK_K_SIGMA, near_surface_deg: float | None = None) -> list[PlaneConsistency]:
    """Every distinct candidate plane, with whether the family's angle is within ``k_sigma`` of its trace.

    The spread is the matcher's (:func:`tracefit.matching.family_log_weights`): measurement
    sigma, the predicted trace's spread from the orientation uncertainty
    (:func:`tracefit.matching.predicted_trace_sigma`) and the frame uncertainty, in quadrature.

    Parameters
    ----------
    family : ObservedFamily
        The measured trace (a crack, say).
    g : ndarray (3, 3) or orientation with ``as_matrix()``
        Orientation, v_crystal = g v_sample.
    cands : CandidateSet or iterable of DeformationSystem
        Candidate planes.
    frame : FrameSettings, optional
        Orientation-data frame -> image.
    orientation_sigma_deg, frame_sigma_deg : float
        Orientation and frame-rotation sigmas, degrees (>= 0).
    k_sigma : float
        Consistency factor (> 0).
    near_surface_deg : float, optional
        Planes flatter than this are flagged (default ``tracefit.predict.NEAR_SURFACE_DEG``).

    Returns
    -------
    list of PlaneConsistency
        Consistent planes first, each group by |residual| / sigma.

    Raises
    ------
    TracefitInputError
        For a bad orientation, sigma or k_sigma.

    Examples
    --------
    A crack at 110 deg in fcc at Euler (0, 30, 0), where the (111) trace lies at 110.1 deg:

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> pc = plane_consistency(ObservedFamily(110.0, 0.5), from_euler((0, 30, 0)), catalogue(fcc, ["slip"]))
    >>> [(q.plane, q.consistent) for q in pc[:2]]
    [((1, 1, 1), True), ((1, -1, -1), False)]
    """
    from tracefit.predict import NEAR_SURFACE_DEG

    check_sigma(orientation_sigma_deg, "orientation_sigma_deg")
    check_sigma(frame_sigma_deg, "frame_sigma_deg")
    if not (math.isfinite(k_sigma) and k_sigma > 0):
        raise TracefitInputError(f"k_sigma must be a positive number of sigmas, got {k_sigma!r}")
    cands = as_candidate_set(cands)
    ns = NEAR_SURFACE_DEG if near_surface_deg is None else near_surface_deg
    ang, incl, slope = predict_candidates(cands, orientation_matrix(g, "g"), frame)
    ang, incl, slope = ang[0], incl[0], slope[0]
    psig = predicted_trace_sigma(incl, orientation_sigma_deg, slope)
    P = len(cands)
    _, resid, sig = family_log_weights([family.angle_deg], [family.angle_sigma_deg], ang, psig,
                                       np.zeros(P), 0.0, frame_sigma_deg, slope)
    out = []
    for pid in np.unique(cands.plane_ids):
        idx = np.flatnonzero(cands.plane_ids == pid)
        c = int(idx[0])  # slip and twin on one plane share the normal, so one trace
        modes = []
        for i in idx:
            if cands.modes[i] not in modes:
                modes.append(cands.modes[i])
        fams = "/".join(dict.fromkeys(cands.families[i] for i in idx))
        r, s = float(resid[0, c]), float(sig[0, c])
        out.append(PlaneConsistency(cands.planes[c], fams, modes, float(ang[c]), r, s, float(incl[c]),
                                    bool(incl[c] < ns), abs(r) <= k_sigma * s))
    out.sort(key=lambda q: (not q.consistent, abs(q.residual_deg) / max(q.sigma_deg, 1e-9)))
    return out


# ----------------------------------------------------------------------------- identification
def identify_observed(
    observed: Sequence[ObservedFamily],
    lattice: Any,
    systems: Any,
    g: Any = None,
    orientations: Mapping[Any, Any] | None = None,
    *,
    frame: FrameSettings | None = None,
    orientation_sigma_deg: float = 1.0,
    frame_sigma_deg: float = 0.5,
    grain_sigma_deg: Mapping[Any, float] | None = None,
    crack_k_sigma: float = DEFAULT_CRACK_K_SIGMA,
    modes: Iterable[str] | None = None,
    families: Iterable[str] | None = None,
    **matcher_options: Any,
) -> list[FamilyIdentification]:
    """Identify detected and measured families, and state each crack's consistent planes.

    Families are matched with :func:`tracefit.matching.identify_families` (one orientation
    ``g``) or :func:`tracefit.matching.identify_grains` (``orientations``). The matcher's
    rule that two families of one grain cannot share a plane is applied within one source
    only (detected with detected, measured with measured): a hand-measured line may be one
    the detector also found. Each crack (label containing ``crack``) is matched on its own,
    since a crack may run along a plane that also carries slip bands, and gets a
    :class:`CrackIdentification` with its consistent and inconsistent planes.

    Parameters
    ----------
    observed : sequence of ObservedFamily
    lattice : tracefit.crystal.lattice.Lattice
    systems : iterable of DeformationSystem or CandidateSet
    g : ndarray (3, 3), optional
        One orientation (v_crystal = g v_sample).
    orientations : dict grain -> ndarray (3, 3), optional
        Per-grain orientations instead of ``g``.
    frame, orientation_sigma_deg, frame_sigma_deg, grain_sigma_deg :
        As :func:`tracefit.matching.identify_grains`.
    crack_k_sigma : float
        A crack is consistent with a plane when |residual| <= k sigma (default 2).
    modes, families : optional filters of the candidate systems.
    **matcher_options
        ``load``, ``p_none``, ``schmid_weight``, ``allow_shared_planes``, ``report_threshold``,
        ``ambiguity_ratio`` (see :func:`tracefit.matching.identify_families`).

    Returns
    -------
    list of FamilyIdentification
        In input order; CrackIdentification for cracks.

    Raises
    ------
    TracefitInputError
        When both or neither of ``g`` and ``orientations`` are given, ``g`` is given with
        families of several grains, or another argument is bad.

    Examples
    --------
    A band and a crack along the same (111) trace (fcc, Euler (0, 30, 0)):

    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> obs = [ObservedFamily(110.2, 0.3, source="measured"), ObservedFamily(110.4, 0.5, source="measured", label="crack")]
    >>> band, crack = identify_observed(obs, fcc, catalogue(fcc, ["slip"]), g=from_euler((0, 30, 0)))
    >>> band.best.plane, crack.best.plane, [q.plane for q in crack.consistent_planes]
    ((1, 1, 1), (1, 1, 1), [(1, 1, 1)])
    """
    # Over 80 lines only through its numpydoc docstring (parameters, example); the code is 45 lines.
    if (g is None) == (orientations is None):
        raise TracefitInputError("give one orientation g or a per-grain orientation table, not both and not neither")
    if not (math.isfinite(crack_k_sigma) and crack_k_sigma > 0):
        raise TracefitInputError(f"the crack consistency factor k must be a positive number of sigmas, got {crack_k_sigma!r}")
    if g is not None:
        g = orientation_matrix(g, "g")
    else:
        orientations = orientation_table(orientations)
    obs = as_observed(observed)  # plain angles become families; anything else is refused here
    if not obs:
        return []
    cands = as_candidate_set(systems, modes, families)
    common = dict(frame=frame, orientation_sigma_deg=orientation_sigma_deg, frame_sigma_deg=frame_sigma_deg, **matcher_options)
    if g is not None:
        grains = {o.grain for o in obs if o.grain is not None}
        if len(grains) > 1:
            raise TracefitInputError(
                f"the measured traces name grains {', '.join(str(x) for x in sorted(grains))} but only one orientation was given; "
                "give a per-grain orientation table (orientations) or leave the grain column empty"
            )
    groups: dict = {}
    for i, o in enumerate(obs):
        # guided families are detected ones (found along a predicted trace): assigned together
        key = ("crack", i) if is_crack(o) else ("bands", "detected" if o.source == "guided" else o.source)
        groups.setdefault(key, []).append(i)
    out: list = [None] * len(obs)
    for key, idx in groups.items():
        fams = [obs[i] for i in idx]
        if g is not None:
            res = identify_families(fams, lattice, g, cands, **common)
        else:
            res = identify_grains(fams, lattice, orientations, cands, grain_sigma_deg=grain_sigma_deg, **common)
        for i, r in zip(idx, res):
            out[i] = r
        if key[0] == "crack":
            i = idx[0]
            o = obs[i]
            gg = g if g is not None else orientations.get(o.grain)
            if gg is None:
                continue  # no orientation for this grain: the matcher's note says so
            osig = orientation_sigma_deg
            if g is None and grain_sigma_deg and o.grain in grain_sigma_deg:
                osig = grain_sigma_deg[o.grain]
            pc = plane_consistency(o, gg, cands, frame, osig, frame_sigma_deg, crack_k_sigma)
            out[i] = _as_crack(out[i], pc, crack_k_sigma)
    return out


def _as_crack(r: FamilyIdentification, pc: list[PlaneConsistency], k: float) -> CrackIdentification:
    cons = [q for q in pc if q.consistent]
    inc = [q for q in pc if not q.consistent]
    notes = list(r.notes)
    if not cons:
        notes.append(f"the crack is not consistent with any candidate plane within {k:g} sigma: "
                     "not crystallographic cracking along these slip or twin planes (or a wrong orientation or frame)")
    elif any(q.near_surface for q in cons):
        notes.append("some consistent planes lie nearly in the surface; their traces are ill-defined and fit almost any crack")
    return CrackIdentification(r.angle_deg, r.angle_sigma_deg, r.grain, r.source, r.label, r.unexplained, r.ambiguous,
                               r.p_none, r.candidates, r.separation, notes, cons, inc, k)
