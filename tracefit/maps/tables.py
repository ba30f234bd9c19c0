"""Per-grain orientation tables (our own plain CSV) and grain label images.

Table format (documented in ``docs/orientation-table.md``): a header row, then one row per
grain. Required columns ``grain`` (integer id, as in the label image) and either Bunge Euler
angles ``phi1,Phi,phi2`` (degrees) or a unit quaternion ``q0,q1,q2,q3`` (scalar first,
v_crystal = q v_sample q*). Optional: ``phase`` (a lattice preset name such as ``fcc``),
``c_over_a``, ``sigma_deg`` (that grain's orientation uncertainty, degrees). Lines starting
with ``#`` are comments. Column names are case-sensitive only for ``Phi`` versus ``phi1``.
"""

from __future__ import annotations

import csv
import math
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["GrainOrientation", "read_orientation_table", "write_orientation_table", "read_label_image"]


@dataclass
class GrainOrientation:
    """One grain's orientation: a row of an orientation table, or a grain of an orientation map.

    Parameters
    ----------
    grain : int
        Grain id, as in the label image.
    g : ndarray, shape (3, 3)
        Orientation matrix, sample -> crystal (Bunge, passive).
    euler_deg : tuple of 3 float, optional
        Bunge (phi1, Phi, phi2) in degrees, when known.
    phase : str, optional
        Phase label (a lattice preset name in a table; the map's phase name for a map's grain).
    c_over_a : float, optional
        Axial ratio of the phase.
    sigma_deg : float, optional
        Orientation uncertainty of this grain, degrees (a map grain's orientation spread).
    extra : dict
        Other columns (table) or per-grain facts (map: ``map_points``, ``image_px``,
        ``grain_x_px``, ``grain_y_px``).

    Examples
    --------
    >>> GrainOrientation(3, np.eye(3), (0.0, 0.0, 0.0), sigma_deg=0.4).sigma_deg
    0.4
    """

    grain: int
    g: np.ndarray
    euler_deg: tuple | None = None
    phase: str | None = None
    c_over_a: float | None = None
    sigma_deg: float | None = None
    extra: dict = field(default_factory=dict)


def _num(text, col, line):
    try:
        v = float(text)
    except (TypeError, ValueError):
        raise TracefitInputError(f"orientation table line {line}: column {col!r} must be a number, got {text!r}") from None
    if not math.isfinite(v):
        raise TracefitInputError(f"orientation table line {line}: column {col!r} must be finite, got {text!r}")
    return v


# Long because each column's check is spelled out with its own message, in file order.
def read_orientation_table(path: str | Path) -> dict[int, GrainOrientation]:
    """Read a grain orientation CSV.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict grain id -> GrainOrientation (``g`` maps sample to crystal).

    Raises
    ------
    TracefitInputError
        A missing or unreadable file, missing columns, a bad value, a repeated grain.

    Examples
    --------
    >>> read_orientation_table("no_such_table.csv")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: orientation table 'no_such_table.csv' not found (expected a CSV with columns grain,phi1,Phi,phi2)
    """
    from tracefit.crystal import from_euler, from_quaternion

    p = Path(path)
    if not p.is_file():
        raise TracefitInputError(f"orientation table {str(p)!r} not found (expected a CSV with columns grain,phi1,Phi,phi2)")
    try:
        text = p.read_text(encoding="utf-8-sig")
    except UnicodeDecodeError:
        raise TracefitInputError(f"orientation table {str(p)!r} is not a UTF-8 text CSV") from None
    rows = [ln for ln in text.splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not rows:
        raise TracefitInputError(f"orientation table {str(p)!r} is empty")
    reader = csv.reader(rows)
    header = [h.strip() for h in next(reader)]
    cols = {h: i for i, h in enumerate(header)}
    if "grain" not in cols:
        raise TracefitInputError(
            f"orientation table {str(p)!r} has no 'grain' column; expected a header like grain,phi1,Phi,phi2"
        )
    has_euler = all(k in cols for k in ("phi1", "Phi", "phi2"))
    has_q = all(k in cols for k in ("q0", "q1", "q2", "q3"))
    if not (has_euler or has_q):
        raise TracefitInputError(
            f"orientation table {str(p)!r} needs Bunge Euler columns phi1,Phi,phi2 (degrees) or quaternion columns q0,q1,q2,q3; "
            f"found {', '.join(header)}"
        )
    out: dict[int, GrainOrientation] = {}
    eulers = []
    for ln, row in enumerate(reader, start=2):
        if len(row) < len(header):
            raise TracefitInputError(f"orientation table line {ln}: expected {len(header)} columns, got {len(row)}")
        gid_f = _num(row[cols["grain"]], "grain", ln)
        if gid_f != int(gid_f):
            raise TracefitInputError(f"orientation table line {ln}: grain id must be an integer, got {row[cols['grain']]!r}")
        gid = int(gid_f)
        if gid in out:
            raise TracefitInputError(f"orientation table line {ln}: grain {gid} appears twice")
        if has_euler:
            e = tuple(_num(row[cols[k]], k, ln) for k in ("phi1", "Phi", "phi2"))
            g = from_euler(np.array(e), warn_radians=False)
            eulers.append(e)
        else:
            q = np.array([_num(row[cols[k]], k, ln) for k in ("q0", "q1", "q2", "q3")])
            if abs(np.linalg.norm(q) - 1.0) > 1e-3:
                raise TracefitInputError(f"orientation table line {ln}: quaternion must have unit length, got |q| = {np.linalg.norm(q):.4f}")
            g = from_quaternion(q / np.linalg.norm(q))
            e = None
        phase = row[cols["phase"]].strip() or None if "phase" in cols else None
        coa = _num(row[cols["c_over_a"]], "c_over_a", ln) if "c_over_a" in cols and row[cols["c_over_a"]].strip() else None
        sig = None
        if "sigma_deg" in cols and row[cols["sigma_deg"]].strip():
            sig = _num(row[cols["sigma_deg"]], "sigma_deg", ln)
            if sig < 0:
                raise TracefitInputError(f"orientation table line {ln}: sigma_deg must be >= 0, got {sig}")
        known = {"grain", "phi1", "Phi", "phi2", "q0", "q1", "q2", "q3", "phase", "c_over_a", "sigma_deg"}
        extra = {h: row[i] for h, i in cols.items() if h not in known}
        out[gid] = GrainOrientation(gid, g, e, phase, coa, sig, extra)
    if not out:
        raise TracefitInputError(f"orientation table {str(p)!r} has a header but no grains")
    if eulers:
        from tracefit.crystal import looks_like_radians

        if looks_like_radians(np.array(eulers)):
            import warnings

            warnings.warn(f"the Euler angles in {str(p)!r} look like radians; tracefit reads degrees", stacklevel=2)
    return out


def write_orientation_table(path: str | Path, grains: dict, phase: str | None = None, sigma_deg: dict | None = None) -> None:
    """Write ``{grain: g or (phi1, Phi, phi2)}`` as an orientation CSV (Bunge Euler, degrees).

    Parameters
    ----------
    path : str or Path
        Output CSV.
    grains : dict
        Grain id -> orientation matrix g (3, 3) or Bunge Euler angles (3,) in degrees.
    phase : str, optional
        Written in a ``phase`` column for every grain.
    sigma_deg : dict, optional
        Grain id -> orientation uncertainty in degrees, written in a ``sigma_deg`` column.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = os.path.join(d, "t.csv")
    ...     write_orientation_table(p, {3: (10, 20, 30)}, sigma_deg={3: 0.5})
    ...     t = read_orientation_table(p)
    >>> t[3].euler_deg, t[3].sigma_deg
    ((10.0, 20.0, 30.0), 0.5)
    """
    from tracefit.crystal import to_euler

    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["grain", "phi1", "Phi", "phi2"] + (["phase"] if phase else []) + (["sigma_deg"] if sigma_deg else []))
        for gid in sorted(grains):
            v = np.asarray(grains[gid], float)
            e = to_euler(v) if v.shape == (3, 3) else v
            w.writerow([int(gid)] + [f"{x:.6f}" for x in np.ravel(e)] + ([phase] if phase else [])
                       + ([f"{float(sigma_deg[gid]):.4f}"] if sigma_deg else []))


def read_label_image(path: str | Path) -> np.ndarray:
    """Integer grain label image from a PNG/TIFF/.npy (each pixel value is a grain id; 16-bit kept).

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    ndarray of int64, shape (H, W)

    Raises
    ------
    TracefitInputError
        A missing or unreadable file, a colour image, or values that are not integers.

    Examples
    --------
    >>> import tempfile, os
    >>> with tempfile.TemporaryDirectory() as d:
    ...     np.save(os.path.join(d, "lab.npy"), np.array([[1, 2], [-1, 2]], np.int32))
    ...     read_label_image(os.path.join(d, "lab.npy")).tolist()
    [[1, 2], [-1, 2]]
    """
    import tifffile  # noqa: F401  (tif support through read via cv2/tifffile)

    p = Path(path)
    if not p.is_file():
        raise TracefitInputError(f"grain label image {str(p)!r} not found")
    if p.suffix.lower() in (".tif", ".tiff"):
        import tifffile as tf

        lab = tf.imread(str(p))
    elif p.suffix.lower() == ".npy":
        lab = np.load(str(p))
    else:
        import cv2

        lab = cv2.imread(str(p), cv2.IMREAD_UNCHANGED)
        if lab is None:
            raise TracefitInputError(f"grain label image {str(p)!r} could not be read (expected PNG/TIFF of integer ids)")
    lab = np.asarray(lab)
    if lab.ndim == 3:
        if np.all(lab[..., :1] == lab[..., :3]):
            lab = lab[..., 0]
        else:
            raise TracefitInputError(f"grain label image {str(p)!r} is colour; expected one channel of integer grain ids")
    if lab.ndim != 2 or not np.issubdtype(lab.dtype, np.integer):
        raise TracefitInputError(f"grain label image {str(p)!r} must be a 2-D image of integer grain ids")
    return lab.astype(np.int64)
