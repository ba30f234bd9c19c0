"""From an orientation map file to grains in the micrograph's pixels: the one entry point.

:func:`grain_map_from_orientation_map` reads the map (one phase), segments its grains,
registers the map onto the micrograph and warps the grain ids into the micrograph's pixels.
The result holds what the label-image route holds (a label image and an orientation table),
plus each grain's centroid in micrograph pixels, the registration residuals, notes and
warnings (returned as text, not emitted: the caller decides how to show them).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tracefit.crystal import Lattice, from_quaternion, to_euler
from tracefit.errors import TracefitInputError
from tracefit.maps.orientation_map import OrientationMap, read_orientation_map
from tracefit.maps.register import REGISTRATIONS, Registration, fit_registration, scaled_registration, warp_labels
from tracefit.maps.segment import DEFAULT_MIN_GRAIN_POINTS, GrainSegmentation, segment_grains
from tracefit.maps.tables import GrainOrientation

__all__ = ["GrainMap", "grain_map_from_orientation_map", "DEFAULT_MIN_GRAIN_PX"]

DEFAULT_MIN_GRAIN_PX = 100  # fewer micrograph pixels carry no band worth detecting (common practice, no source)


@dataclass
class GrainMap:
    """Grains of an orientation map in the micrograph's pixels.

    Parameters
    ----------
    labels : ndarray of int64, shape (H, W)
        Grain id per micrograph pixel; -1 outside every kept grain.
    table : dict of int -> GrainOrientation
        Kept grains: mean ``g`` and ``euler_deg`` (Bunge, degrees), ``phase`` (the map's phase
        name), ``c_over_a`` (axial cells), ``sigma_deg`` (the grain's orientation spread,
        degrees), ``extra`` with ``map_points``, ``image_px``, ``grain_x_px``, ``grain_y_px``.
    centroids_px : dict of int -> (float, float)
        Grain centroid (x, y) in micrograph pixels: x the column from the left edge, y the row
        down from the top edge.
    residuals_px : ndarray, shape (n,)
        Registration residual of each control point pair, micrograph pixels (empty without
        control points).
    registration : Registration
    orientation_map : OrientationMap
    segmentation : GrainSegmentation
        The grains on the map grid (``labels`` in map points).
    notes, warnings : list of str
        Plain remarks, and things that may make the result wrong.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> from tracefit.maps import grain_quaternions
    >>> lab = np.zeros((4, 8), int); lab[:, 4:] = 1
    >>> omap = OrientationMap(grain_quaternions(lab, [[0, 0, 0], [45, 0, 0]]), np.ones((4, 8), bool),
    ...                       Lattice.fcc(), (1.0, 1.0), "ni", 1)
    >>> gm = grain_map_from_orientation_map(omap, (40, 80), min_grain_px=10)
    >>> gm.labels[0, ::10].tolist(), gm.summary()["grains_in_image"]
    ([1, 1, 1, 1, 2, 2, 2, 2], 2)
    """

    labels: np.ndarray
    table: dict
    centroids_px: dict
    residuals_px: np.ndarray
    registration: Registration
    orientation_map: OrientationMap
    segmentation: GrainSegmentation
    notes: list = field(default_factory=list)
    warnings: list = field(default_factory=list)

    def summary(self) -> dict:
        """Map facts plus grains found, grains kept in the micrograph and the largest residual.

        Returns
        -------
        dict
            :meth:`OrientationMap.summary` keys plus ``grains_found``, ``grains_in_image``,
            ``registration``, ``max_residual_px`` (None without control points).

        Examples
        --------
        See :class:`GrainMap`.
        """
        s = self.orientation_map.summary()
        s.update(grains_found=self.segmentation.n_grains, grains_in_image=len(self.table),
                 registration=self.registration.kind,
                 max_residual_px=float(self.residuals_px.max()) if len(self.residuals_px) else None)
        return s


def _check_image_shape(image_shape) -> tuple[int, int]:
    try:
        h, w = (int(v) for v in tuple(image_shape)[:2])
    except (TypeError, ValueError):
        raise TracefitInputError(f"image_shape must be (rows, cols) of the micrograph, got {image_shape!r}") from None
    if h < 1 or w < 1:
        raise TracefitInputError(f"image_shape must be positive (rows, cols), got {image_shape!r}")
    return h, w


def _centroids(labels: np.ndarray, ids: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Pixel count and centroid column, row of each id (vectorised)."""
    flat = labels.ravel()
    inside = flat >= 0
    n = int(ids.max()) + 1 if len(ids) else 1
    rr, cc = np.divmod(np.flatnonzero(inside), labels.shape[1])
    count = np.bincount(flat[inside], minlength=n)
    sx = np.bincount(flat[inside], cc, minlength=n)
    sy = np.bincount(flat[inside], rr, minlength=n)
    with np.errstate(invalid="ignore", divide="ignore"):
        return count[ids], sx[ids] / count[ids], sy[ids] / count[ids]


def _grain_table(omap: OrientationMap, seg: GrainSegmentation, ids, count, cx, cy) -> dict:
    g = from_quaternion(seg.mean_quaternions[ids - 1])
    eul = to_euler(g).reshape(-1, 3)
    table = {}
    for k, gid in enumerate(ids):
        extra = {"map_points": int(seg.n_points[gid - 1]), "image_px": int(count[k]),
                 "grain_x_px": float(cx[k]), "grain_y_px": float(cy[k])}
        table[int(gid)] = GrainOrientation(int(gid), g[k], tuple(float(v) for v in eul[k]), omap.phase_name,
                                           omap.c_over_a, float(seg.spread_deg[gid - 1]), extra)
    return table


# Long because it is the whole chain in order (read, segment, register, warp, tabulate), each a call.
def grain_map_from_orientation_map(map_path, image_shape: tuple[int, int], control_points=None, phase: int | str | None = None,
                                   threshold_deg: float = 5.0, min_grain_points: int = DEFAULT_MIN_GRAIN_POINTS,
                                   registration: str = "affine", min_grain_px: int = DEFAULT_MIN_GRAIN_PX,
                                   residual_warn_px: float = 2.0, lattice: Lattice | None = None) -> GrainMap:
    """Grains of an orientation map, registered onto a micrograph.

    Parameters
    ----------
    map_path : str, Path or OrientationMap
        A .ang, .ctf or orix HDF5 file (read with ``orix.io.load``), or a map already read.
    image_shape : (int, int)
        The micrograph's (rows, cols) in pixels.
    control_points : str, Path or array_like (n, 4), optional
        CSV with columns image_x, image_y, map_x, map_y (pixel column and row in each, rows down
        from the top), or the numbers. Without them the map is stretched over the image, with a
        warning.
    phase : int or str, optional
        Phase id or name (see :meth:`OrientationMap.from_file`).
    threshold_deg : float
        Grain boundary misorientation, degrees.
    min_grain_points : int
        Smallest grain kept on the map, in map points.
    registration : {"affine", "projective"}
        Transform fitted to the control points.
    min_grain_px : int
        Grains covering fewer micrograph pixels are skipped (with a note).
    residual_warn_px : float
        Control point residuals above this (micrograph pixels) are warned about.
    lattice : tracefit.crystal.Lattice, optional
        Symmetry to use instead of the map's point group.

    Returns
    -------
    GrainMap

    Raises
    ------
    TracefitInputError
        An unreadable map, no indexed points, an unknown phase, bad control points (fewer than
        needed, collinear, outside either image), or a map that registers onto none of the image.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> from tracefit.maps import grain_quaternions
    >>> lab = np.zeros((10, 20), int); lab[:, 10:] = 1
    >>> q = grain_quaternions(lab, [[0, 0, 0], [30, 20, 10]])
    >>> omap = OrientationMap(q, np.ones((10, 20), bool), Lattice.fcc(), (1.0, 1.0), "ni", 1)
    >>> gm = grain_map_from_orientation_map(omap, (50, 100), min_grain_px=10)
    >>> sorted(gm.table), [tuple(round(v, 1) for v in gm.centroids_px[k]) for k in (1, 2)]
    ([1, 2], [(24.5, 24.5), (74.5, 24.5)])
    >>> np.round(gm.table[2].euler_deg, 3).tolist(), gm.registration.kind
    ([30.0, 20.0, 10.0], 'scaled')
    """
    h, w = _check_image_shape(image_shape)
    if registration not in REGISTRATIONS:
        raise TracefitInputError(f"registration must be one of {', '.join(REGISTRATIONS)}, got {registration!r}")
    if int(min_grain_px) != min_grain_px or min_grain_px < 1:
        raise TracefitInputError(f"min_grain_px must be a whole number >= 1, got {min_grain_px!r}")
    omap = map_path if isinstance(map_path, OrientationMap) else read_orientation_map(map_path, phase, lattice)
    warns = list(omap.warnings)
    seg = segment_grains(omap.quaternions, omap.valid, omap.lattice, threshold_deg, min_grain_points)
    notes = [f"{seg.n_grains} grains found in phase {omap.phase_name!r} ({omap.n_valid} indexed points, "
             f"threshold {threshold_deg:g} deg, at least {min_grain_points} points)"]
    if seg.n_dropped_regions:
        notes.append(f"{seg.n_dropped_regions} regions under {min_grain_points} map points were left out")
    if control_points is None:
        reg = scaled_registration((h, w), omap.shape)
    else:
        reg = fit_registration(control_points, (h, w), omap.shape, registration, residual_warn_px)
    warns += reg.warnings
    labels = warp_labels(seg.labels, reg, (h, w))
    present = np.unique(labels[labels >= 0])
    if len(present) == 0:
        raise TracefitInputError(
            f"no grain of phase {omap.phase_name!r} of the orientation map lands on the micrograph ({w} x {h} px) "
            f"under the {reg.kind} registration; check control_points")
    count, cx, cy = _centroids(labels, present)
    small = count < min_grain_px
    for gid, n in zip(present[small], count[small]):
        notes.append(f"grain {int(gid)} covers {int(n)} micrograph pixels (fewer than {min_grain_px}): skipped")
    if small.any():
        labels[np.isin(labels, present[small])] = -1
    keep = ~small
    table = _grain_table(omap, seg, present[keep], count[keep], cx[keep], cy[keep])
    if not table:
        warns.append(f"no grain covers {min_grain_px} micrograph pixels or more; nothing to analyse")
    centroids = {gid: (go.extra["grain_x_px"], go.extra["grain_y_px"]) for gid, go in table.items()}
    return GrainMap(labels, table, centroids, reg.residuals_px, reg, omap, seg, notes, warns)
