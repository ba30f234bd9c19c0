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

__all__ = ["GrainOrientation", "read_orientation_table", "write_orientation_table", "read_label_image", "observe_image",
           "line_continuation"]


@dataclass
class GrainOrientation:
    """One row of an orientation table."""

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


def read_orientation_table(path) -> dict[int, GrainOrientation]:
    """Read a grain orientation CSV.

    Parameters
    ----------
    path : str or Path

    Returns
    -------
    dict grain id -> GrainOrientation (``g`` maps sample to crystal).
    """
    from tracefit.orientation import from_euler, from_quaternion

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
        from tracefit.orientation import looks_like_radians

        if looks_like_radians(np.array(eulers)):
            import warnings

            warnings.warn(f"the Euler angles in {str(p)!r} look like radians; tracefit reads degrees", stacklevel=2)
    return out


def write_orientation_table(path, grains: dict, phase: str | None = None) -> None:
    """Write ``{grain: g or (phi1, Phi, phi2)}`` as an orientation CSV (Bunge Euler, degrees)."""
    from tracefit.orientation import to_euler

    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh)
        w.writerow(["grain", "phi1", "Phi", "phi2"] + (["phase"] if phase else []))
        for gid in sorted(grains):
            v = np.asarray(grains[gid], float)
            e = to_euler(v) if v.shape == (3, 3) else v
            w.writerow([int(gid)] + [f"{x:.6f}" for x in np.ravel(e)] + ([phase] if phase else []))


def read_label_image(path) -> np.ndarray:
    """Integer grain label image from a PNG/TIFF (each pixel value is a grain id; 16-bit kept)."""
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


def observe_image(image_path, grains_path=None, orientations=None, pixel_size_um: float | None = None,
                  min_grain_px: int = 2500):
    """Detect band families in a micrograph, per grain when a label image is given.

    Parameters
    ----------
    image_path : str or Path
        Micrograph.
    grains_path : str or Path, optional
        Grain label image of the same size (integer ids).
    orientations : dict, optional
        Grain id -> orientation (or GrainOrientation); only these grains are analysed.
    pixel_size_um : float, optional
    min_grain_px : int
        Grains with fewer pixels are skipped.

    Returns
    -------
    observed : list of tracefit.matching.ObservedFamily
        With ``grain`` set (None without a label image).
    image : ndarray
    labels : ndarray or None
    notes : list of str
    """
    from tracefit.image import detect_bands, detect_grains, read_image
    from tracefit.matching import observed_from_detection

    img, notes = read_image(image_path)
    if grains_path is None:
        res = detect_bands(img, pixel_size_um=pixel_size_um)
        return observed_from_detection(res), img, None, list(notes) + list(getattr(res, "notes", []))
    labels = read_label_image(grains_path)
    if labels.shape != img.shape[:2]:
        raise TracefitInputError(
            f"the grain label image is {labels.shape[1]}x{labels.shape[0]} px but the micrograph is "
            f"{img.shape[1]}x{img.shape[0]} px; they must match pixel for pixel"
        )
    present = set(int(x) for x in np.unique(labels))
    ids = None
    if orientations is not None:
        ids = [k for k in sorted(int(k) for k in orientations) if k in present]
        if not ids:
            raise TracefitInputError("no grain id of the orientation table occurs in the grain label image")
    res = detect_grains(img, labels, pixel_size_um=pixel_size_um, min_pixels=min_grain_px, grains=ids)
    obs = []
    for gid in sorted(res):
        fams = observed_from_detection(res[gid], grain=int(gid))
        for o, f in zip(fams, res[gid].families):
            o.boundary_continuation = line_continuation(img, labels, int(gid), getattr(f, "lines", []))
        obs.extend(fams)
    notes = list(notes)
    if orientations is not None:
        missing = sorted(present - set(int(k) for k in orientations))
        if missing:
            notes.append(f"{len(missing)} grain id(s) of the label image have no orientation and were skipped")
    return obs, img, labels, notes


def line_continuation(image, labels, grain, lines, reach_px: float = 15.0, gap_px: float = 2.0,
                      offset_px: float = 4.0, min_px: int = 8) -> float | None:
    """Share of a family's band lines that run on, straight and with the same contrast, into a neighbouring grain.

    A surface scratch crosses grain boundaries without a kink; a slip or twin band stops at the
    boundary (or continues in the neighbour at another angle). For each end of each detected
    line, the straight extension beyond the end is sampled over ``reach_px`` pixels (starting
    ``gap_px`` past the end) where it lies in another grain of the label image, and its band
    contrast (mean of the two side lines ``offset_px`` away minus the centre line) is compared
    with the same measure over the last ``reach_px`` pixels inside the grain. An end counts as
    continuing when the outside contrast has the inside's sign and at least half its size.

    Parameters
    ----------
    image : ndarray (H, W) or (H, W, C)
        The micrograph (grey levels; colour is averaged).
    labels : ndarray (H, W) of int
        Grain label image.
    grain : int
        The grain the lines were detected in.
    lines : sequence of tracefit.image.detect.BandLine
        Detected lines in whole-image pixel coordinates (col, row).
    reach_px, gap_px, offset_px : float
        Sampling lengths, pixels.
    min_px : int
        Fewest outside samples (in another grain, inside the image) for an end to be tested.

    Returns
    -------
    float or None
        Share of the tested line ends that continue (None when no end meets a neighbouring
        grain, e.g. lines ending at the image edge or inside the grain).
    """
    from scipy.ndimage import map_coordinates

    img = np.asarray(image, float)
    if img.ndim == 3:
        img = img[..., :3].mean(axis=2)
    lab = np.asarray(labels)
    H, W = img.shape
    tested = cont = 0

    def contrast(pts, nrm):
        def samp(q):
            return map_coordinates(img, [q[:, 1], q[:, 0]], order=1, mode="nearest")

        centre = samp(pts)
        side = 0.5 * (samp(pts + offset_px * nrm) + samp(pts - offset_px * nrm))
        return float(np.mean(side - centre))

    for ln in lines:
        p0 = np.array([ln.col0, ln.row0], float)
        p1 = np.array([ln.col1, ln.row1], float)
        L = float(np.hypot(*(p1 - p0)))
        if L < 2.0 * reach_px:
            continue
        u = (p1 - p0) / L
        nrm = np.array([-u[1], u[0]])
        t = gap_px + np.arange(0.0, reach_px, 1.0)
        for end, sgn in ((p1, 1.0), (p0, -1.0)):
            out = end[None, :] + sgn * t[:, None] * u[None, :]
            cc, rr = np.round(out[:, 0]).astype(int), np.round(out[:, 1]).astype(int)
            inside = (cc >= 0) & (cc < W) & (rr >= 0) & (rr < H)
            other = np.zeros(len(t), bool)
            other[inside] = lab[rr[inside], cc[inside]] != grain
            if int(other.sum()) < min_px:
                continue
            c_in = contrast(end[None, :] - sgn * t[:, None] * u[None, :], nrm)
            if abs(c_in) <= 1e-12:
                continue
            c_out = contrast(out[other], nrm)
            tested += 1
            cont += bool(c_out * np.sign(c_in) >= 0.5 * abs(c_in))
    return None if tested == 0 else cont / tested
