"""Results as plain records and table rows: one place that turns result objects into data.

``--json``, ``results.csv``, :meth:`tracefit.pipeline.ImageResult.to_frame` and the survey's
per-image records all come from here, so a family is written the same way everywhere.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Sequence

import numpy as np

if TYPE_CHECKING:  # names for the hints only (results sits below matching, image and predict)
    from tracefit.conventions import FrameSettings
    from tracefit.crystal import DeformationSystem, Lattice
    from tracefit.image import BandFamily
    from tracefit.matching import FamilyIdentification, ObservedFamily

__all__ = [
    "load_text",
    "GrainStatus", "FamilyDetection", "Identification", "ImageResult", "lattice_summary",
    "CSV_COLUMNS", "jsonable", "family_record", "family_rows", "direction_label", "plane_text",
]

CSV_COLUMNS = [
    "image", "status", "grain", "grain_x_px", "grain_y_px", "grain_euler_deg", "family", "source", "angle_deg", "angle_sigma_deg", "n_bands", "spacing_um",
    "strength", "verdict", "plane", "plane_family", "mode", "predicted_deg", "residual_deg",
    "probability", "schmid_factor", "direction", "second_plane", "second_probability", "p_none", "error",
    "modes", "load", "resolved_shear_mpa", "crss_mpa", "exceeds_crss",
]


def load_text(load) -> str:
    """A load in words, with its frame: ``"y tension (image frame)"``, ``"stress s22 = 100 MPa (image frame)"``.

    Examples
    --------
    >>> from tracefit.predict import Load
    >>> load_text(Load.axis("y")), load_text(Load.stress([0, 100, 0, 0, 0, 0]))
    ('y tension (image frame)', 'stress s22 = 100 MPa (image frame)')
    >>> load_text(None)
    'none given'
    """
    if load is None:
        return "none given"
    d = load.to_dict() if hasattr(load, "to_dict") else {}
    frame = d.get("frame", "sample")
    if d.get("voigt_mpa") is not None:
        names = ("s11", "s22", "s33", "s23", "s13", "s12")
        parts = [f"{n} = {v:g}" for n, v in zip(names, d["voigt_mpa"]) if v]
        return f"stress {', '.join(parts) or '0'} MPa ({frame} frame)"
    return f"{d.get('axis', '?')} {d.get('sense', 'tension')} ({frame} frame)"


def jsonable(x: Any) -> Any:
    """Plain JSON-ready values: numpy scalars and arrays to Python, non-finite floats to None, paths to str.

    Parameters
    ----------
    x : Any
        A value, or dicts, lists and tuples of values (nested to any depth).

    Returns
    -------
    Any
        The same structure with dict keys as str, tuples and arrays as lists, numpy scalars
        as Python ones, NaN and infinities as None and paths as str; other values unchanged.

    Examples
    --------
    >>> import numpy as np
    >>> jsonable({"a": np.float64(1.5), "b": [np.nan, np.int64(2)]})
    {'a': 1.5, 'b': [None, 2]}
    """
    if isinstance(x, dict):
        return {str(k): jsonable(v) for k, v in x.items()}
    if isinstance(x, (list, tuple)):
        return [jsonable(v) for v in x]
    if isinstance(x, np.ndarray):
        return jsonable(x.tolist())
    if isinstance(x, np.integer):
        return int(x)
    if isinstance(x, (np.floating, float)):
        v = float(x)
        return v if np.isfinite(v) else None
    if isinstance(x, np.bool_):
        return bool(x)
    if isinstance(x, Path):
        return str(x)
    return x


def _line_endpoints(line) -> list[float]:
    return [round(float(getattr(line, k)), 2) for k in ("col0", "row0", "col1", "row1")]


def family_record(observed: ObservedFamily, band: BandFamily | None, identification: FamilyIdentification,
                  index: int, pixel_size_um: float | None = None, grain: GrainStatus | None = None,
                  load=None) -> dict:
    """One family as a plain dict: what was observed, the detector's details, and its identification.

    Parameters
    ----------
    observed : ObservedFamily
        The family as observed (angle in degrees, its uncertainty, grain).
    band : BandFamily or None
        The detector's family (None for a hand-measured one).
    identification : FamilyIdentification
        Its identification (candidates and probabilities).
    index : int
        1-based position of the family in its image.
    pixel_size_um : float, optional
        Micrometres per pixel, to give the spacing in um where the detector did not.
    grain : GrainStatus, optional
        The family's grain: its centroid (``grain_x_px``, ``grain_y_px``) and orientation
        (``grain_euler_deg``) go into the record.
    load : Load, optional
        The load the Schmid factors refer to; the record states it with its frame (``load``).

    Returns
    -------
    dict
        ``grain``, ``grain_x_px``, ``grain_y_px``, ``grain_euler_deg``, ``angle_deg``, ``angle_sigma_deg``, ``n_bands``, ``spacing_px``, ``spacing_um``,
        ``strength``, ``lines`` (pixel endpoints ``[col0, row0, col1, row1]``), ``source``, ``index``
        and ``identification`` (``FamilyIdentification.to_dict()``), JSON-ready.

    Examples
    --------
    A trace measured at 73.2 +- 0.3 deg on an fcc crystal at Bunge (10, 20, 30) deg:

    >>> import tracefit as tf
    >>> obs = tf.ObservedFamily(73.2, 0.3)
    >>> ident = tf.identify([obs], "fcc", orientation=tf.Orientation.from_euler([10, 20, 30]), modes=["slip"])
    >>> rec = family_record(obs, None, ident.families[0], index=1)
    >>> rec["angle_deg"], rec["index"], rec["identification"]["candidates"][0]["plane"]
    (73.2, 1, [1, -1, 1])
    """
    sp_px = getattr(band, "spacing_px", None)
    sp_um = getattr(band, "spacing_um", None)
    if sp_um is None and sp_px is not None and pixel_size_um:
        sp_um = float(sp_px) * float(pixel_size_um)
    rec = {
        "grain": observed.grain,
        "grain_x_px": None if grain is None or grain.x_px is None else round(float(grain.x_px), 1),
        "grain_y_px": None if grain is None or grain.y_px is None else round(float(grain.y_px), 1),
        "grain_euler_deg": None if grain is None or grain.euler_deg is None else [round(float(x), 3) for x in grain.euler_deg],
        "angle_deg": float(band.angle_deg) if band is not None else float(observed.angle_deg),
        # the uncertainty the identification used (the detector's, floored), the same in every output
        "angle_sigma_deg": observed.angle_sigma_deg,
        "n_bands": getattr(band, "n_bands", None) if band is not None else observed.n_bands,
        "spacing_px": sp_px,
        "spacing_um": sp_um,
        "strength": getattr(band, "strength", None) if band is not None else observed.strength,
        "lines": [_line_endpoints(ln) for ln in (getattr(band, "lines", None) or [])],
        "source": observed.source,
        "load": None if load is None else load_text(load),
        "index": index,
        "identification": identification.to_dict(),
    }
    return jsonable(rec)


def plane_text(p: Sequence[int]) -> str:
    """A plane's indices in the project's one notation (:func:`tracefit.crystal.format_index`).

    Parameters
    ----------
    p : sequence of int, length 3 or 4
        Miller (hkl) or Miller-Bravais (hkil) indices.

    Returns
    -------
    str
        The indices in round brackets, a minus sign before negative ones.

    Examples
    --------
    >>> plane_text((1, -1, 1)), plane_text([1, 0, -1, 2])
    ('(1-11)', '(10-12)')
    """
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in p), kind="plane")


def _restated(label: str) -> str:
    from tracefit.crystal.indices import restate_label

    return restate_label(label)


def direction_label(d: Sequence[int]) -> str:
    """A direction's indices in the project's one notation, e.g. ``[-101]``.

    Parameters
    ----------
    d : sequence of int, length 3 or 4
        Direction indices [uvw] or [uvtw].

    Returns
    -------
    str
        The indices in square brackets, a minus sign before negative ones.

    Examples
    --------
    >>> direction_label((-1, 0, 1))
    '[-101]'
    """
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in d), kind="direction")


def family_rows(image_name: str, families: list[dict]) -> list[dict]:
    """Table rows (the columns of :data:`CSV_COLUMNS`) for one image's family records.

    An image without any band family gives one row with verdict ``"no bands found"``.

    Parameters
    ----------
    image_name : str
        The image's name in the table.
    families : list of dict
        Its family records (:func:`family_record`).

    Returns
    -------
    list of dict
        One row per family, keyed by the names of :data:`CSV_COLUMNS` (angles in degrees,
        spacing in um); the verdict is ``"identified"``, ``"ambiguous"`` or ``"unexplained"``.

    Examples
    --------
    >>> family_rows("coupon-A", [])
    [{'image': 'coupon-A', 'status': 'ok', 'verdict': 'no bands found', 'error': ''}]
    """
    if not families:  # keep the image in the table: no family was found in it
        return [{"image": image_name, "status": "ok", "verdict": "no bands found", "error": ""}]
    rows = []
    for fam in families:
        ident = fam.get("identification") or {}
        cands = ident.get("candidates") or []
        best = cands[0] if cands else {}
        second = next((c for c in cands[1:] if c.get("plane") != best.get("plane")), {})
        bs = best.get("best_system") or {}
        verdict = "unexplained" if ident.get("unexplained") or not cands else (
            "ambiguous" if ident.get("ambiguous") else "identified")
        rows.append({
            "image": image_name,
            "status": "ok",
            "grain": "" if fam.get("grain") is None else fam["grain"],
            "grain_x_px": fam.get("grain_x_px"),
            "grain_y_px": fam.get("grain_y_px"),
            "grain_euler_deg": " ".join(f"{x:g}" for x in fam["grain_euler_deg"]) if fam.get("grain_euler_deg") else "",
            "family": f"F{fam.get('index', len(rows) + 1)}",
            "source": fam.get("source") or "",
            "angle_deg": fam.get("angle_deg"),
            "angle_sigma_deg": fam.get("angle_sigma_deg"),
            "n_bands": fam.get("n_bands"),
            "spacing_um": fam.get("spacing_um"),
            "strength": fam.get("strength"),
            "verdict": verdict,
            "plane": plane_text(best["plane"]) if best else "",
            "plane_family": _restated(best.get("family", "")),
            "mode": best.get("mode", ""),
            "predicted_deg": best.get("predicted_deg"),
            "residual_deg": best.get("residual_deg"),
            "probability": best.get("probability"),
            "schmid_factor": bs.get("schmid_factor"),
            "direction": "" if not bs.get("direction") else direction_label(bs["direction"]),
            "second_plane": plane_text(second["plane"]) if second else "",
            "second_probability": second.get("probability") if second else "",
            "p_none": ident.get("p_none"),
            "error": "",
            "modes": " / ".join(f"{m['mode']} {m['share']:.2f}" for m in best.get("modes") or []),
            "load": fam.get("load") or "",
            "resolved_shear_mpa": bs.get("resolved_shear"),
            "crss_mpa": bs.get("crss"),
            "exceeds_crss": "" if bs.get("exceeds_crss") is None else ("yes" if bs["exceeds_crss"] else "no"),
        })
    return rows


# --------------------------------------------------------------------------- result objects
@dataclass
class GrainStatus:
    """What happened to one grain (or to the whole image when there is no grain map).

    Attributes
    ----------
    grain : int or None
    n_pixels : int
        Pixels analysed (inside the mask, outside any data bar).
    n_families : int
        Band families found.
    status : str
        ``"analysed"``, ``"too small"``, ``"no orientation"`` or ``"no families"``.
    reason : str
        Why a grain has no families, in words ("" when it has some).
    euler_deg : list of float or None
        Its orientation as Bunge angles (degrees), where known.
    sigma_deg : float or None
        Its own orientation uncertainty from the orientation table, where given.
    x_px, y_px : float or None
        The grain's centroid in micrograph pixels: column to the right from the left edge, row
        down from the top edge (None without a grain map).

    Examples
    --------
    Made by :func:`tracefit.detect_families`; a grain too small to analyse:

    >>> st = GrainStatus(4, 900, 0, "too small", "fewer than 2500 analysable pixels")
    >>> st.to_dict()["status"], st.n_pixels
    ('too small', 900)
    """

    grain: int | None
    n_pixels: int
    n_families: int = 0
    status: str = "analysed"
    reason: str = ""
    euler_deg: list | None = None
    sigma_deg: float | None = None
    x_px: float | None = None
    y_px: float | None = None

    def to_dict(self) -> dict:
        """The status as a plain dict (the ``grain_status`` entries of ``--json``)."""
        return {"grain": self.grain, "n_pixels": self.n_pixels, "n_families": self.n_families, "status": self.status,
                "reason": self.reason, "euler_deg": self.euler_deg, "sigma_deg": self.sigma_deg,
                "x_px": self.x_px, "y_px": self.y_px}


@dataclass
class FamilyDetection:
    """Band families found in one image, grain by grain.

    Attributes
    ----------
    observed : list of ObservedFamily
        One per family, in grain order then strength order; ``grain`` set on grain maps.
    bands : list of BandFamily
        The detector's families, aligned with ``observed`` (lines, spacing, strength).
    grains : list of GrainStatus
        What happened to each grain (one entry for the whole image without a grain map).
    notes : list of str
        What the detector did on the way (data bar excluded, grains skipped, ...).

    Examples
    --------
    Returned by :func:`tracefit.detect_families`; an empty detection built by hand:

    >>> det = FamilyDetection([], [], [GrainStatus(None, 36864, 0, "no families")])
    >>> len(det.observed), det.grains[0].status
    (0, 'no families')
    """

    observed: list
    bands: list
    grains: list
    notes: list = field(default_factory=list)


@dataclass
class Identification:
    """Identifications of observed families, with the map-level checks.

    Attributes
    ----------
    families : list of FamilyIdentification
        Same order as the observed families given.
    frame_check : dict or None
        The frame-rotation fit on grain maps (:func:`tracefit.matching.fit_frame`), when run.
    artefacts : list of dict or None
        Surface-artefact directions found on grain maps (angle, grains, families), when tested.
    warnings : list of str
        Warnings of the identification (e.g. of the frame check).

    Examples
    --------
    Returned by :func:`tracefit.identify`:

    >>> import tracefit as tf
    >>> res = tf.identify([tf.ObservedFamily(73.2, 0.3)], "fcc", orientation=tf.Orientation.from_euler([10, 20, 30]),
    ...                   modes=["slip"])
    >>> len(res.families), res.families[0].best.plane, res.frame_check
    (1, (1, -1, 1), None)
    """

    families: list
    frame_check: dict | None = None
    artefacts: list | None = None
    warnings: list = field(default_factory=list)


@dataclass
class ImageResult:
    """Everything the chain found in one micrograph; tables, figures and the report read this.

    Attributes
    ----------
    path : str or None
        The image file.
    image : ndarray (H, W) or None
        The micrograph as analysed (float grey); None for hand-measured traces alone.
    labels : ndarray (H, W) or None
        Grain label image (grains without an orientation set to -1).
    lattice : Lattice
        The crystal.
    frame : FrameSettings
        How the orientation data's frame sits on the image.
    load : LoadAxis, ndarray (3, 3) or None
        The load, where given.
    systems : list of DeformationSystem
        The candidates.
    orientations : dict
        Grain id (None for a single orientation) -> orientation matrix g (3, 3).
    detection : FamilyDetection or None
    observed : list of ObservedFamily
        Detected families, then hand-measured ones.
    identification : Identification
    settings : dict
        Every identification/analysis setting as used, plus the detection settings given.
    notes, warnings : list of str
        What was done on the way, and what the user should know.

    Examples
    --------
    Returned by :func:`tracefit.analyse_image`; here for a hand-measured trace alone (no image):

    >>> import tracefit as tf
    >>> res = tf.analyse_image(None, "fcc", orientation=tf.Orientation.from_euler([10, 20, 30]), modes=["slip"],
    ...                        measured=[tf.ObservedFamily(73.2, 0.3)])
    >>> res.families[0].best.plane, res.to_dict()["lattice"]["name"]
    ((1, -1, 1), 'fcc')
    """

    path: str | None
    image: np.ndarray | None
    labels: np.ndarray | None
    lattice: Lattice
    frame: FrameSettings
    load: Any
    systems: list[DeformationSystem]
    orientations: dict
    detection: FamilyDetection | None
    observed: list
    identification: Identification
    settings: dict
    notes: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    grain_map: Any = None  # tracefit.maps.GrainMap when the grains came from an orientation map

    @property
    def families(self) -> list:
        """The identifications, one per observed family (FamilyIdentification)."""
        return self.identification.families

    @property
    def grains(self) -> list:
        """What happened to each grain (:class:`GrainStatus`)."""
        return [] if self.detection is None else self.detection.grains

    def family_records(self) -> list[dict]:
        """One plain dict per family: detection details plus its identification (JSON-ready)."""
        bands = [] if self.detection is None else self.detection.bands
        status = {g.grain: g for g in self.grains}
        out = []
        for i, (o, r) in enumerate(zip(self.observed, self.families)):
            out.append(family_record(o, bands[i] if i < len(bands) else None, r, index=i + 1,
                                     pixel_size_um=self.settings.get("pixel_size_um"), grain=status.get(o.grain),
                                     load=self.load))
        return out

    def to_dict(self) -> dict:
        """The JSON object of ``tracefit identify --json``."""
        d = {"families": [r.to_dict() for r in self.families]}
        d.update({
            "lattice": lattice_summary(self.lattice),
            "frame": self.frame.to_dict(),
            "load": self.load.to_dict() if hasattr(self.load, "to_dict") else (
                None if self.load is None else np.asarray(self.load, float).tolist()),
            "notes": list(self.notes),
            "settings": {k: self.settings[k] for k in ("orientation_sigma_deg", "frame_sigma_deg", "p_none",
                                                         "schmid_weight", "allow_shared_planes")},
            "grain_status": [g.to_dict() for g in self.grains],
        })
        if self.labels is not None or len(self.orientations) > 1 or None not in self.orientations:
            d["grains"] = {"n_table": len(self.orientations),
                           "n_with_families": len({o.grain for o in self.observed})}
            d["artefacts"] = self.identification.artefacts
            d["frame_check"] = self.identification.frame_check
        return jsonable(d)

    def to_frame(self):
        """A pandas DataFrame with one row per family (the columns of ``results.csv``)."""
        import pandas as pd

        rows = family_rows(Path(self.path).stem if self.path else "", self.family_records())
        return pd.DataFrame(rows, columns=[c for c in CSV_COLUMNS if c not in ("status", "error")])


def lattice_summary(lat: Lattice) -> dict:
    """A lattice's parameters as plain values (for ``--json`` and reports).

    Parameters
    ----------
    lat : Lattice
        The crystal lattice.

    Returns
    -------
    dict
        ``name``, cell lengths ``a``, ``b``, ``c`` (relative units, as the lattice holds them),
        angles ``alpha``, ``beta``, ``gamma`` (degrees), ``laue`` (Laue group), and for a
        hexagonal lattice ``c_over_a`` and ``hex_setting``.

    Examples
    --------
    >>> from tracefit.crystal import lattice_preset
    >>> s = lattice_summary(lattice_preset("hcp", 1.587))
    >>> s["name"], s["c"], s["gamma"], s["laue"], s["c_over_a"]
    ('hcp', 1.587, 120.0, '6/mmm', 1.587)
    """
    d = {"name": lat.name, "a": lat.a, "b": lat.b, "c": lat.c, "alpha": lat.alpha, "beta": lat.beta,
         "gamma": lat.gamma, "laue": lat.laue}
    if lat.is_hexagonal:
        d["c_over_a"] = lat.c_over_a
        d["hex_setting"] = lat.hex_setting
    return d
