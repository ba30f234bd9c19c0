"""Results as plain records and table rows: one place that turns result objects into data.

``--json``, ``results.csv``, :meth:`tracefit.pipeline.ImageResult.to_frame` and the survey's
per-image records all come from here, so a family is written the same way everywhere.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

__all__ = ["CSV_COLUMNS", "jsonable", "family_record", "family_rows", "direction_label", "plane_text"]

CSV_COLUMNS = [
    "image", "status", "grain", "family", "angle_deg", "angle_sigma_deg", "n_bands", "spacing_um",
    "strength", "verdict", "plane", "plane_family", "mode", "predicted_deg", "residual_deg",
    "probability", "schmid_factor", "direction", "second_plane", "second_probability", "p_none", "error",
]


def jsonable(x):
    """Plain JSON-ready values: numpy scalars and arrays to Python, non-finite floats to None, paths to str.

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


def family_record(observed, band, identification, index: int, pixel_size_um: float | None = None) -> dict:
    """One family as a plain dict: what was observed, the detector's details, and its identification.

    Parameters
    ----------
    observed : ObservedFamily
    band : BandFamily or None
        The detector's family (None for a hand-measured one).
    identification : FamilyIdentification
    index : int
        1-based position of the family in its image.
    pixel_size_um : float, optional

    Returns
    -------
    dict
        ``grain``, ``angle_deg``, ``angle_sigma_deg``, ``n_bands``, ``spacing_px``, ``spacing_um``,
        ``strength``, ``lines`` (pixel endpoints ``[col0, row0, col1, row1]``), ``source``, ``index``
        and ``identification`` (``FamilyIdentification.to_dict()``).
    """
    sp_px = getattr(band, "spacing_px", None)
    sp_um = getattr(band, "spacing_um", None)
    if sp_um is None and sp_px is not None and pixel_size_um:
        sp_um = float(sp_px) * float(pixel_size_um)
    rec = {
        "grain": observed.grain,
        "angle_deg": float(band.angle_deg) if band is not None else float(observed.angle_deg),
        "angle_sigma_deg": getattr(band, "angle_sigma_deg", None) if band is not None else observed.angle_sigma_deg,
        "n_bands": getattr(band, "n_bands", None) if band is not None else observed.n_bands,
        "spacing_px": sp_px,
        "spacing_um": sp_um,
        "strength": getattr(band, "strength", None) if band is not None else observed.strength,
        "lines": [_line_endpoints(ln) for ln in (getattr(band, "lines", None) or [])],
        "source": observed.source,
        "index": index,
        "identification": identification.to_dict(),
    }
    return jsonable(rec)


def plane_text(p) -> str:
    """A plane's indices in the project's one notation (:func:`tracefit.crystal.format_index`)."""
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in p), kind="plane")


def direction_label(d) -> str:
    """A direction's indices in the project's one notation, e.g. ``[-101]``."""
    from tracefit.crystal import format_index

    return format_index(tuple(int(x) for x in d), kind="direction")


def family_rows(image_name: str, families: list[dict]) -> list[dict]:
    """Table rows (the columns of :data:`CSV_COLUMNS`) for one image's family records.

    An image without any band family gives one row with verdict ``"no bands found"``.
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
            "family": f"F{fam.get('index', len(rows) + 1)}",
            "angle_deg": fam.get("angle_deg"),
            "angle_sigma_deg": fam.get("angle_sigma_deg"),
            "n_bands": fam.get("n_bands"),
            "spacing_um": fam.get("spacing_um"),
            "strength": fam.get("strength"),
            "verdict": verdict,
            "plane": plane_text(best["plane"]) if best else "",
            "plane_family": best.get("family", ""),
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
        })
    return rows
