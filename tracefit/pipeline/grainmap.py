"""Stage 1 of the chain: a grain label image and its orientation table, read and checked together."""

from __future__ import annotations

from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from tracefit.errors import TracefitInputError

if TYPE_CHECKING:  # for the hints only
    from tracefit.maps import GrainOrientation

__all__ = ["orientation_table", "read_label_map", "read_grain_map"]


def _as_matrix(orientation) -> np.ndarray:
    """One orientation matrix g (3, 3), checked to be a rotation, from an Orientation or an array."""
    from tracefit.matching.checks import orientation_matrix

    return orientation_matrix(orientation, name="orientation")


# --------------------------------------------------------------------------- stage 1: grain maps
def orientation_table(orientations: str | Path | dict) -> dict[int, GrainOrientation]:
    """Grain id -> GrainOrientation, from an orientation table file or a dict of orientations.

    Parameters
    ----------
    orientations : str, Path or dict
        Orientation table CSV (docs/orientation-table.md), or a dict grain id ->
        GrainOrientation, Orientation or matrix g (3, 3) (crystal -> sample, Bunge convention).

    Returns
    -------
    dict of int -> GrainOrientation
        One entry per grain, keyed by its integer id; a matrix or Orientation given in the
        dict becomes a GrainOrientation with that matrix ``g`` (3, 3).

    Raises
    ------
    TracefitInputError
        An unreadable table, or a value that is not an orientation.

    Examples
    --------
    Two grains given in a dict, one as a matrix and one as Bunge angles (degrees):

    >>> import numpy as np
    >>> from tracefit.crystal import from_euler
    >>> table = orientation_table({1: np.eye(3), "2": from_euler([0, 0, 90])})
    >>> sorted(table), type(table[2]).__name__, table[2].g.shape
    ([1, 2], 'GrainOrientation', (3, 3))
    """
    from tracefit.maps import GrainOrientation, read_orientation_table

    if isinstance(orientations, (str, Path)):
        return read_orientation_table(orientations)
    if not isinstance(orientations, dict):
        raise TracefitInputError("orientations must be an orientation table file or a dict grain id -> orientation")
    return {int(k): v if isinstance(v, GrainOrientation) else GrainOrientation(int(k), _as_matrix(v))
            for k, v in orientations.items()}


def read_label_map(labels: str | Path | np.ndarray, shape: tuple[int, ...] | None = None) -> np.ndarray:
    """A grain label image (file or array) as int64, checked against the micrograph's size.

    Parameters
    ----------
    labels : str, Path or ndarray (H, W) of int
        Grain label image file (PNG/TIFF) or array of integer grain ids.
    shape : tuple of int, optional
        The micrograph's (rows, columns, ...) in pixels; the label image must match its
        first two entries.

    Returns
    -------
    ndarray (H, W) of int64
        The grain ids, one per pixel.

    Raises
    ------
    TracefitInputError
        Not a 2-D integer image, or a size that differs from ``shape``.

    Examples
    --------
    >>> import numpy as np
    >>> lab = read_label_map(np.array([[1, 1, 2], [1, 2, 2]], dtype=np.uint8), shape=(2, 3))
    >>> lab.dtype, lab.shape
    (dtype('int64'), (2, 3))
    >>> read_label_map(np.zeros((2, 3), int), shape=(4, 4))
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: the grain label image is 3x2 px but the micrograph is 4x4 px; they must match pixel for pixel
    """
    from tracefit.maps import read_label_image

    lab = read_label_image(labels) if isinstance(labels, (str, Path)) else np.asarray(labels)
    if lab.ndim != 2 or not np.issubdtype(lab.dtype, np.integer):
        raise TracefitInputError("labels must be a 2-D image of integer grain ids")
    if shape is not None and tuple(lab.shape) != tuple(shape[:2]):
        raise TracefitInputError(
            f"the grain label image is {lab.shape[1]}x{lab.shape[0]} px but the micrograph is "
            f"{shape[1]}x{shape[0]} px; they must match pixel for pixel")
    return lab.astype(np.int64)


def read_grain_map(labels: str | Path | np.ndarray, orientations: str | Path | dict,
                   shape: tuple[int, ...] | None = None) -> tuple[np.ndarray, dict[int, GrainOrientation]]:
    """A grain label image and its orientation table, checked against each other and the image.

    Parameters
    ----------
    labels : str, Path or ndarray (H, W) of int
        Grain label image (integer ids).
    orientations : str, Path or dict
        Orientation table CSV (docs/orientation-table.md), or a dict grain id ->
        :class:`~tracefit.maps.GrainOrientation`, Orientation or matrix g (3, 3).
    shape : (int, int), optional
        The micrograph's (rows, columns); the label image must match it pixel for pixel.

    Returns
    -------
    labels : ndarray (H, W) of int64
        The grain id of every pixel.
    table : dict of int -> GrainOrientation
        The orientation of every grain in the table (grains of the image missing from it
        are left out, not an error).

    Raises
    ------
    TracefitInputError
        Unreadable files, a size mismatch, or no grain id in common.

    Examples
    --------
    A two-grain map built in memory (no files):

    >>> import numpy as np
    >>> labels = np.repeat([[1, 1, 2, 2]], 3, axis=0)
    >>> lab, table = read_grain_map(labels, {1: np.eye(3), 2: np.eye(3)}, shape=(3, 4))
    >>> lab.shape, sorted(table)
    ((3, 4), [1, 2])
    >>> read_grain_map(labels, {7: np.eye(3)})
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: no grain id of the orientation table occurs in the grain label image
    """
    lab = read_label_map(labels, shape)
    table = orientation_table(orientations)
    present = set(int(x) for x in np.unique(lab))
    if not present & set(table):
        raise TracefitInputError("no grain id of the orientation table occurs in the grain label image")
    return lab, table


def _traces_to_seek(lattice, systems, frame, table, orientation):
    """Predicted trace angles (image frame, after tilt) of the candidate planes: per grain of
    ``table`` (a dict), else of the one ``orientation``; planes nearly in the surface left out."""
    from tracefit.predict import predict_traces

    def angles(g):
        return sorted({round(t.angle_deg, 6) for t in predict_traces(lattice, g, systems, frame) if not t.near_surface})

    if table is not None:
        return {gid: angles(o.g) for gid, o in table.items()}
    return angles(_as_matrix(orientation))


def _centroids(labels: np.ndarray, ids: list[int]) -> dict[int, tuple[float, float]]:
    """Grain id -> (column, row) of its centroid in pixels."""
    from scipy import ndimage

    if not ids:
        return {}
    rc = ndimage.center_of_mass(np.ones(labels.shape), labels, ids)
    return {g: (float(c), float(r)) for g, (r, c) in zip(ids, rc)}
