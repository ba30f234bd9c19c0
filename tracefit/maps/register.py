"""Registration of an orientation map onto a micrograph, and grain ids warped into its pixels.

Control points pair a pixel of the micrograph (``image_x``, ``image_y``: column and row, rows
counted down from the top) with a point of the map grid (``map_x``, ``map_y``: map column and
row, likewise). The transform map -> image is fitted by least squares with scikit-image
(``AffineTransform``, or ``ProjectiveTransform`` on request); every pair's residual is the
distance, in micrograph pixels, between its image point and where the fit puts its map point.

Without control points the map is taken to cover the micrograph exactly: pixel edges of the
map's first and last points on the micrograph's edges, scaled on each axis.
"""

from __future__ import annotations

import csv
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["Registration", "read_control_points", "fit_registration", "scaled_registration", "warp_labels",
           "CONTROL_POINT_COLUMNS", "REGISTRATIONS"]

CONTROL_POINT_COLUMNS = ("image_x", "image_y", "map_x", "map_y")
REGISTRATIONS = ("affine", "projective")
_MIN_POINTS = {"affine": 3, "projective": 4}
_COLLINEAR_RATIO = 0.01  # thinner point sets leave the transform across them undetermined


@dataclass
class Registration:
    """A fitted transform from map grid (column, row) to micrograph pixels (column, row).

    Parameters
    ----------
    matrix : ndarray, shape (3, 3)
        Homogeneous matrix: ``[x_img, y_img, 1] ~ matrix @ [map_x, map_y, 1]``.
    kind : {"affine", "projective", "scaled"}
        ``"scaled"``: no control points, the map stretched over the image.
    residuals_px : ndarray, shape (n,)
        Residual of each control point pair, micrograph pixels (empty for ``"scaled"``).
    control_points : ndarray, shape (n, 4) or None
        The pairs (image_x, image_y, map_x, map_y).
    warnings : list of str

    Examples
    --------
    >>> r = Registration(np.diag([2.0, 2.0, 1.0]), "scaled")
    >>> r.map_to_image([[1.0, 3.0]]).tolist(), r.image_to_map([[2.0, 6.0]]).tolist()
    ([[2.0, 6.0]], [[1.0, 3.0]])
    """

    matrix: np.ndarray
    kind: str
    residuals_px: np.ndarray = field(default_factory=lambda: np.zeros(0))
    control_points: np.ndarray | None = None
    warnings: list = field(default_factory=list)

    def map_to_image(self, xy: np.ndarray) -> np.ndarray:
        """Map grid points (col, row), shape (n, 2), to micrograph pixels (col, row), shape (n, 2)."""
        return _apply(self.matrix, xy)

    def image_to_map(self, xy: np.ndarray) -> np.ndarray:
        """Micrograph pixels (col, row), shape (n, 2), to map grid points (col, row), shape (n, 2)."""
        return _apply(np.linalg.inv(self.matrix), xy)


def _apply(m: np.ndarray, xy) -> np.ndarray:
    p = np.asarray(xy, float).reshape(-1, 2)
    h = p @ m[:, :2].T + m[:, 2]
    return h[:, :2] / h[:, 2:3]


def read_control_points(points: str | Path | np.ndarray) -> np.ndarray:
    """Control point pairs from a CSV (columns image_x, image_y, map_x, map_y) or an array.

    Parameters
    ----------
    points : str, Path or array_like, shape (n, 4)
        A CSV file with a header naming the four columns (any order, other columns ignored,
        ``#`` comment lines skipped), or the numbers in the column order above.

    Returns
    -------
    ndarray, shape (n, 4)

    Raises
    ------
    TracefitInputError
        A missing file, missing columns, or a value that is not a finite number.

    Examples
    --------
    >>> read_control_points([[10, 20, 1, 2], [30, 20, 3, 2], [10, 40, 1, 4]]).shape
    (3, 4)
    """
    if not isinstance(points, (str, Path)):
        a = np.asarray(points, float)
        if a.ndim != 2 or a.shape[1] != 4 or not np.all(np.isfinite(a)):
            raise TracefitInputError(f"control_points must be finite numbers in 4 columns ({', '.join(CONTROL_POINT_COLUMNS)}), got shape {a.shape}")
        return a
    p = Path(points)
    if not p.is_file():
        raise TracefitInputError(f"control points file {str(p)!r} not found (expected a CSV with columns {','.join(CONTROL_POINT_COLUMNS)})")
    rows = [ln for ln in p.read_text(encoding="utf-8-sig").splitlines() if ln.strip() and not ln.lstrip().startswith("#")]
    if not rows:
        raise TracefitInputError(f"control points file {str(p)!r} is empty")
    reader = csv.reader(rows)
    header = [h.strip().lower() for h in next(reader)]
    missing = [c for c in CONTROL_POINT_COLUMNS if c not in header]
    if missing:
        raise TracefitInputError(f"control points file {str(p)!r} lacks column(s) {', '.join(missing)}; expected a header {','.join(CONTROL_POINT_COLUMNS)}")
    out = []
    for ln, row in enumerate(reader, start=2):
        try:
            vals = [float(row[header.index(c)]) for c in CONTROL_POINT_COLUMNS]
        except (ValueError, IndexError):
            raise TracefitInputError(f"control points file {str(p)!r} line {ln}: expected numbers in {', '.join(CONTROL_POINT_COLUMNS)}") from None
        if not all(np.isfinite(vals)):
            raise TracefitInputError(f"control points file {str(p)!r} line {ln}: values must be finite")
        out.append(vals)
    return np.array(out, float).reshape(-1, 4)


def _check_inside(xy: np.ndarray, shape: tuple[int, int], what: str, cols: str) -> None:
    """Points (col, row) must lie on the grid of ``shape`` (rows, cols), pixel edges included."""
    h, w = shape
    out = (xy[:, 0] < -0.5) | (xy[:, 0] > w - 0.5) | (xy[:, 1] < -0.5) | (xy[:, 1] > h - 0.5)
    if out.any():
        i = int(np.flatnonzero(out)[0])
        raise TracefitInputError(
            f"control point {i + 1}: {cols} = ({xy[i, 0]:g}, {xy[i, 1]:g}) lies outside the {what} "
            f"({w} x {h}; columns 0..{w - 1}, rows 0..{h - 1})")


def _check_spread(xy: np.ndarray, what: str) -> None:
    """Reject points on (or nearly on) one line: they fix no transform across it."""
    c = xy - xy.mean(axis=0)
    s = np.linalg.svd(c, compute_uv=False)
    if s[0] == 0 or s[1] < _COLLINEAR_RATIO * s[0]:
        raise TracefitInputError(f"the control points are collinear in the {what}; give at least 3 points that span an area")


def fit_registration(points: str | Path | np.ndarray, image_shape: tuple[int, int], map_shape: tuple[int, int], kind: str = "affine",
                     residual_warn_px: float = 2.0) -> Registration:
    """Fit the map -> micrograph transform from control point pairs.

    Parameters
    ----------
    points : str, Path or array_like, shape (n, 4)
        Control points (:func:`read_control_points`).
    image_shape : (int, int)
        Micrograph (rows, cols) in pixels.
    map_shape : (int, int)
        Map grid (rows, cols) in points.
    kind : {"affine", "projective"}
        Affine needs 3 pairs or more, projective 4.
    residual_warn_px : float
        Pairs whose residual exceeds this (micrograph pixels) are named in a warning.

    Returns
    -------
    Registration

    Raises
    ------
    TracefitInputError
        An unknown kind, too few pairs, points outside either image, collinear points, or a
        fit that fails.

    Examples
    --------
    >>> pts = [[20, 10, 0, 0], [120, 10, 50, 0], [20, 90, 0, 40], [120, 90, 50, 40]]
    >>> r = fit_registration(pts, (100, 140), (41, 51))
    >>> (np.round(r.matrix, 3) + 0.0).tolist(), round(float(r.residuals_px.max()), 6)
    ([[2.0, 0.0, 20.0], [0.0, 2.0, 10.0], [0.0, 0.0, 1.0]], 0.0)
    """
    from skimage.transform import AffineTransform, ProjectiveTransform

    if kind not in REGISTRATIONS:
        raise TracefitInputError(f"registration must be one of {', '.join(REGISTRATIONS)}, got {kind!r}")
    cp = read_control_points(points)
    need = _MIN_POINTS[kind]
    if len(cp) < need:
        raise TracefitInputError(f"a {kind} registration needs at least {need} control points, got {len(cp)}")
    img, mp = cp[:, :2], cp[:, 2:]
    _check_inside(img, tuple(image_shape[:2]), "micrograph", "image_x, image_y")
    _check_inside(mp, tuple(map_shape[:2]), "orientation map", "map_x, map_y")
    _check_spread(img, "micrograph")
    _check_spread(mp, "orientation map")
    model = {"affine": AffineTransform, "projective": ProjectiveTransform}[kind]
    if hasattr(model, "from_estimate"):  # scikit-image >= 0.26
        tform = model.from_estimate(mp, img)
    else:  # older releases: estimate() in place, returning success
        tform = model()
        tform = tform if tform.estimate(mp, img) else None
    if not tform or not np.all(np.isfinite(tform.params)) or abs(np.linalg.det(tform.params)) < 1e-12:
        raise TracefitInputError(f"the {kind} registration could not be fitted to the control points")
    reg = Registration(np.asarray(tform.params, float), kind, control_points=cp)
    reg.residuals_px = np.linalg.norm(reg.map_to_image(mp) - img, axis=1)
    for i in np.flatnonzero(reg.residuals_px > residual_warn_px):
        reg.warnings.append(
            f"control point {i + 1} (image {img[i, 0]:g}, {img[i, 1]:g}) is {reg.residuals_px[i]:.2f} px from where the "
            f"{kind} fit puts it (more than {residual_warn_px:g} px): check the pair")
    return reg


def scaled_registration(image_shape: tuple[int, int], map_shape: tuple[int, int]) -> Registration:
    """The map stretched to cover the micrograph exactly (no control points), with a warning.

    Examples
    --------
    >>> r = scaled_registration((100, 200), (10, 20))
    >>> r.map_to_image([[-0.5, -0.5], [19.5, 9.5]]).tolist()
    [[-0.5, -0.5], [199.5, 99.5]]
    """
    (h, w), (mh, mw) = image_shape[:2], map_shape[:2]
    sx, sy = w / mw, h / mh
    m = np.array([[sx, 0.0, 0.5 * sx - 0.5], [0.0, sy, 0.5 * sy - 0.5], [0.0, 0.0, 1.0]])
    warn = (f"no control points: the orientation map ({mw} x {mh} points) is taken to cover the micrograph "
            f"({w} x {h} px) exactly; give control_points to register it")
    return Registration(m, "scaled", warnings=[warn])


def warp_labels(map_labels: np.ndarray, registration: Registration, image_shape: tuple[int, int]) -> np.ndarray:
    """Grain ids of the map grid resampled onto the micrograph's pixels (nearest neighbour).

    Parameters
    ----------
    map_labels : ndarray of int, shape (rows, cols)
        Grain id per map point, -1 for none.
    registration : Registration
    image_shape : (int, int)
        Micrograph (rows, cols).

    Returns
    -------
    ndarray of int64, shape image_shape
        Grain id per pixel; -1 where no map point of a grain lands.

    Examples
    --------
    >>> lab = np.array([[1, 2]])
    >>> warp_labels(lab, scaled_registration((2, 4), (1, 2)), (2, 4)).tolist()
    [[1, 1, 2, 2], [1, 1, 2, 2]]
    """
    lab = np.asarray(map_labels, np.int64)
    mh, mw = lab.shape
    h, w = int(image_shape[0]), int(image_shape[1])
    inv = np.linalg.inv(registration.matrix)
    out = np.full((h, w), -1, np.int64)
    cols = np.arange(w, dtype=float)
    block = max(1, 2_000_000 // max(w, 1))  # rows per block, to bound memory on large pictures
    for r0 in range(0, h, block):
        rr, cc = np.meshgrid(np.arange(r0, min(h, r0 + block), dtype=float), cols, indexing="ij")
        hom = np.column_stack([cc.ravel(), rr.ravel()]) @ inv[:, :2].T + inv[:, 2]
        front = hom[:, 2] > 0  # a projective map's far side of its horizon is not the map
        with np.errstate(divide="ignore", invalid="ignore"):
            mc, mr = np.floor(hom[:, 0] / hom[:, 2] + 0.5), np.floor(hom[:, 1] / hom[:, 2] + 0.5)
        ok = front & (mc >= 0) & (mc < mw) & (mr >= 0) & (mr < mh)
        vals = np.full(len(hom), -1, np.int64)
        vals[ok] = lab[mr[ok].astype(np.int64), mc[ok].astype(np.int64)]
        out[r0:r0 + rr.shape[0]] = vals.reshape(rr.shape)
    return out
