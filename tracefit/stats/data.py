"""A survey's output folder as the statistics need it: grains, their candidate systems and drives,
and the band families seen in them with their identification probabilities.

The drive of every candidate system is recomputed from each grain's recorded orientation, the
image's lattice, systems, frame and load with the library's own functions
(:func:`tracefit.crystal.catalogue`, :func:`tracefit.predict.resolved_drive`), so there is one
Schmid convention in the whole project: ``|m|`` for slip, the signed drive for twins
(:func:`tracefit.predict.reported_drive`).
"""

from __future__ import annotations

import json
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["Observation", "GrainCase", "SurveyData", "read_survey", "grain_cases", "family_labels", "system_drives"]

_USABLE = ("analysed", "no families")  # grain states in which a grain was looked at


@dataclass
class Observation:
    """One band family seen in a grain (or one family tracked across the frames of a series).

    Attributes
    ----------
    image : str
        The image (for a tracked family: the frame that gave its identification).
    family : str
        The family's name in ``results.csv`` (``F1``, ``F2``, ...; a track: ``T1``, ...).
    weight : float
        How much it counts, 0..1: ``1 - p_none`` of its identification (0 when unexplained).
    system_weights : ndarray (S,)
        For each candidate system of the grain, the identification probability of the plane the
        system lies on (normalised over the listed candidates): the soft label.
    best_system : int or None
        Index of the system the family is credited to in the tables: the most driven system on
        its most probable plane.
    probability : float
        The most probable plane's probability.
    identified : bool
        The family's verdict is "identified" (not ambiguous, not unexplained).
    plane : list of int or None
        The most probable plane.
    angle_deg, angle_sigma_deg : float
        Its trace angle and uncertainty (image frame, degrees).
    onset : dict or None
        For a tracked family of a series: ``frame``, ``strain``, ``previous_strain``,
        ``stress_mpa``, ``previous_stress_mpa``.

    Examples
    --------
    >>> import numpy as np
    >>> ob = Observation("x1", "F1", 1.0, np.array([1.0, 0.0]), 0, 1.0, True, [1, 1, 1], 30.0, 0.3)
    >>> ob.weight, ob.best_system
    (1.0, 0)
    """

    image: str
    family: str
    weight: float
    system_weights: np.ndarray
    best_system: int | None
    probability: float
    identified: bool
    plane: list | None
    angle_deg: float
    angle_sigma_deg: float
    onset: dict | None = None


@dataclass
class GrainCase:
    """One grain: its candidate systems, their drives under the load, and the families seen in it.

    Attributes
    ----------
    image : str
        The image (or the series' name).
    grain : int or None
        Grain id (None for a single-orientation image).
    lattice : str
        The lattice key, e.g. ``"hcp c/a=1.587"``: statistics pool grains of one lattice only.
    systems : list of DeformationSystem
        The candidate systems, as the identification used them.
    drive : ndarray (S,)
        Reported drive per system: the Schmid factor (axis loads, ``|m|`` for slip, signed for
        twins) or the resolved shear stress in MPa (stress loads).
    unit : str
        ``"Schmid factor"`` or ``"MPa"``.
    euler_deg : list of float
        Its Bunge angles, degrees.
    observations : list of Observation
    series : str or None
        The series the grain belongs to.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, catalogue
    >>> systems = catalogue(Lattice.fcc(), modes="slip")
    >>> case = GrainCase("x1", None, "fcc", systems, np.zeros(12), "Schmid factor", [0, 0, 0])
    >>> len(case.systems), case.observations
    (12, [])
    """

    image: str
    grain: int | None
    lattice: str
    systems: list
    drive: np.ndarray
    unit: str
    euler_deg: list
    observations: list = field(default_factory=list)
    series: str | None = None


@dataclass
class SurveyData:
    """What :func:`read_survey` found in an output folder.

    Attributes
    ----------
    path : Path
        The folder.
    title : str
        The job's title.
    records : list of dict
        The per-image records, in job order.

    Examples
    --------
    >>> SurveyData(Path("out"), "Coupons", []).n_images
    0
    """

    path: Path
    title: str
    records: list

    @property
    def n_images(self) -> int:
        """Images in the survey."""
        return len(self.records)


def read_survey(out_dir: str | Path) -> SurveyData:
    """Read a survey's output folder: ``results.json``, or the per-image records when it is missing.

    Parameters
    ----------
    out_dir : str or Path
        The folder ``tracefit survey JOB --out OUT`` wrote.

    Returns
    -------
    SurveyData

    Raises
    ------
    TracefitInputError
        No such folder, or no survey in it.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     read_survey(d)
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: no survey in ... (expected results.json or images/*.json written by 'tracefit survey')
    """
    p = Path(out_dir)
    if not p.is_dir():
        raise TracefitInputError(f"survey folder {str(p)!r} not found")
    res = p / "results.json"
    if res.is_file():
        try:
            d = json.loads(res.read_text(encoding="utf-8"))
        except (OSError, ValueError) as exc:
            raise TracefitInputError(f"cannot read {str(res)!r}: {exc}") from None
        if isinstance(d, dict) and isinstance(d.get("images"), list):
            return SurveyData(p, (d.get("job") or {}).get("title") or p.name, d["images"])
    recs = []
    for f in sorted((p / "images").glob("*.json")) if (p / "images").is_dir() else []:
        try:
            r = json.loads(f.read_text(encoding="utf-8"))
        except (OSError, ValueError):
            continue
        if isinstance(r, dict) and "name" in r and "status" in r:
            recs.append(r)
    if not recs:
        raise TracefitInputError(f"no survey in {str(p)!r} (expected results.json or images/*.json written by "
                                 "'tracefit survey')")
    return SurveyData(p, p.name, recs)


def _lattice_and_systems(settings: dict):
    from tracefit.crystal import catalogue, lattice_preset

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # "ideal c/a assumed" was said at survey time
        lat = lattice_preset(settings["lattice"], settings.get("c_over_a"))
        systems = catalogue(lat, modes=list(settings.get("modes") or ("slip", "twin")),
                            families=list(settings["families"]) if settings.get("families") else None)
    key = lat.name + (f" c/a={lat.c_over_a:.4g}" if lat.is_hexagonal else "")
    return lat, systems, key


def _load(settings: dict, lat, name: str):
    from tracefit.predict import load_from_fields

    ld = load_from_fields(settings.get("load"), settings.get("load_sense") or "tension",
                          settings.get("load_frame") or "image", settings.get("load_stress"), lat)
    if ld is None:
        raise TracefitInputError(f"image {name!r} has no load: the statistics need the load of every grain "
                                 "(set load = ... for it in the job and run the survey again)")
    return ld


def system_drives(settings: dict, euler_deg, systems=None, lattice=None) -> tuple[np.ndarray, str]:
    """Reported drive of every candidate system of a grain under its image's load.

    Parameters
    ----------
    settings : dict
        The image's settings as the survey recorded them (``lattice``, ``load``, ``frame``, ...).
    euler_deg : array_like, shape (3,) or (N, 3)
        Bunge angles of the grain(s), degrees.
    systems, lattice : optional
        The candidate systems and lattice, when already known.

    Returns
    -------
    drive : ndarray (S,) or (N, S)
        Schmid factors (``|m|`` for slip, signed for twins) or resolved shear stresses (MPa).
    unit : str
        ``"Schmid factor"`` or ``"MPa"``.

    Raises
    ------
    TracefitInputError
        The image has no load.

    Examples
    --------
    fcc under tension along the crystal's [001] (identity orientation, image = sample frame):

    >>> m, unit = system_drives({"lattice": "fcc", "modes": ["slip"], "load": "z"}, [0, 0, 0])
    >>> round(float(m.max()), 4), int((m > 0.4).sum()), unit
    (0.4082, 8, 'Schmid factor')
    """
    from tracefit.conventions import FrameSettings
    from tracefit.crystal import from_euler
    from tracefit.predict import reported_drive, resolved_drive

    if systems is None or lattice is None:
        lattice, systems, _ = _lattice_and_systems(settings)
    ld = _load(settings, lattice, settings.get("name", "?"))
    frame = FrameSettings(**(settings.get("frame") or {}))
    e = np.asarray(euler_deg, float)
    g = from_euler(e.reshape(-1, 3)) if e.ndim > 1 else from_euler(e)
    g = np.asarray(getattr(g, "matrix", g), float)
    drive = resolved_drive(ld, g, [s.normal for s in systems], [s.dir_unit for s in systems], frame)
    return reported_drive(drive, [s.mode for s in systems]), ("MPa" if ld.is_stress else "Schmid factor")


def family_labels(systems) -> dict[str, str]:
    """The label each system family is reported under: its plane family (as in ``results.csv``'s
    ``plane_family``) where that is unique among the families, else plane and direction family.

    Parameters
    ----------
    systems : sequence of DeformationSystem

    Returns
    -------
    dict
        System family name (``DeformationSystem.name``) -> label.

    Examples
    --------
    >>> from tracefit.crystal import catalogue, lattice_preset
    >>> labs = family_labels(catalogue(lattice_preset("hcp", 1.587), modes="slip"))
    >>> labs["basal <a>"], labs["pyramidal <a>"], labs["pyramidal <c+a> 1st order"]
    ('{0001}', '{10-11}<11-20>', '{10-11}<11-23>')
    """
    by_name = {}
    for s in systems:
        by_name.setdefault(s.name, s)
    planes: dict[str, set] = {}
    for s in by_name.values():
        planes.setdefault(s.family, set()).add(s.name)
    out = {}
    for name, s in by_name.items():
        if len(planes[s.family]) == 1:
            out[name] = s.family
        else:
            lab = s.family + s.direction_family
            same = [o for o in by_name.values() if o.family + o.direction_family == lab]
            out[name] = lab if len(same) == 1 else f"{lab} {s.mode}"
    return out


def _observation(image, fam, systems, normals, drive) -> Observation:
    """A family record as an observation over the grain's systems (soft label from its candidates)."""
    ident = fam.get("identification") or {}
    cands = [c for c in ident.get("candidates") or [] if c.get("plane") is not None]
    p_none = float(ident.get("p_none") or 0.0)
    weight = 0.0 if ident.get("unexplained") or not cands else max(0.0, 1.0 - p_none)
    sw = np.zeros(len(systems))
    best = None
    total = sum(float(c.get("probability") or 0.0) for c in cands)
    lat_normal = fam.get("_normal_of")
    for rank, c in enumerate(cands):
        n = lat_normal(c["plane"])
        on = np.abs(normals @ n) > 1 - 1e-6
        if not on.any():
            continue
        sw[on] = max(float(sw[on].max()), float(c.get("probability") or 0.0) / (total or 1.0))
        if rank == 0:
            idx = np.flatnonzero(on)
            best = int(idx[np.argmax(drive[idx])])
    if not sw.any():
        weight = 0.0
    top = cands[0] if cands else {}
    return Observation(image=image, family=f"F{fam.get('index', 0)}", weight=weight, system_weights=sw,
                       best_system=best if weight > 0 else None, probability=float(top.get("probability") or 0.0),
                       identified=bool(cands) and not ident.get("unexplained") and not ident.get("ambiguous"),
                       plane=top.get("plane"), angle_deg=float(fam.get("angle_deg") or 0.0),
                       angle_sigma_deg=float(fam.get("angle_sigma_deg") or 0.5))


def grain_cases(record: dict) -> list[GrainCase]:
    """The grains of one image record, each with its candidate systems, drives and observed families.

    Grains that were looked at count (status ``"analysed"`` or ``"no families"``); grains too
    small or without an orientation do not.

    Parameters
    ----------
    record : dict
        One image's record (``OUT/images/NAME.json``).

    Returns
    -------
    list of GrainCase
        Empty for a failed image.

    Raises
    ------
    TracefitInputError
        The image has no load.

    Examples
    --------
    >>> rec = {"name": "x1", "status": "ok", "settings": {"lattice": "fcc", "modes": ["slip"], "load": "z"},
    ...        "grains": [{"grain": None, "euler_deg": [0, 0, 0], "status": "analysed"}], "families": []}
    >>> cases = grain_cases(rec)
    >>> len(cases), len(cases[0].systems), round(float(cases[0].drive.max()), 3)
    (1, 12, 0.408)
    """
    if record.get("status") != "ok":
        return []
    settings = dict(record.get("settings") or {}, name=record.get("name"))
    lat, systems, key = _lattice_and_systems(settings)
    grains = [g for g in record.get("grains") or [] if g.get("status") in _USABLE and g.get("euler_deg") is not None]
    if not grains:
        return []
    drives, unit = system_drives(settings, [g["euler_deg"] for g in grains], systems, lat)
    drives = np.atleast_2d(drives)
    normals = np.array([s.normal for s in systems])

    def normal_of(plane):
        return np.asarray(lat.plane_normal(np.asarray(plane, float)), float)

    out = []
    series = (settings.get("series") or {}).get("name")
    for g, d in zip(grains, drives):
        case = GrainCase(record["name"], g.get("grain"), key, systems, d, unit, list(g["euler_deg"]), series=series)
        for fam in record.get("families") or []:
            if fam.get("grain") == g.get("grain"):
                case.observations.append(_observation(record["name"], dict(fam, _normal_of=normal_of), systems,
                                                      normals, d))
        out.append(case)
    return out
