"""The registration check figure: the micrograph with the warped grain boundaries drawn over it.

A person sees at a glance whether the map sits right: the drawn boundaries should follow the
grain boundaries visible in the picture. Control points are marked where the user put them
(cross) and where the fitted transform puts their map points (circle), with the residual.
matplotlib is imported only when a figure is made.
"""

from __future__ import annotations

import os
from pathlib import Path

from typing import TYPE_CHECKING

import numpy as np

from tracefit.errors import TracefitInputError

if TYPE_CHECKING:  # for the annotations only: no import cycle, no matplotlib at import
    from matplotlib.figure import Figure

    from tracefit.maps.grain_map import GrainMap

__all__ = ["grain_boundaries", "registration_figure", "write_registration_figure"]


def grain_boundaries(labels: np.ndarray) -> np.ndarray:
    """Pixels whose right or lower neighbour has another grain id.

    Parameters
    ----------
    labels : ndarray of int, shape (H, W)

    Returns
    -------
    ndarray of bool, shape (H, W)

    Examples
    --------
    >>> lab = np.array([[1, 1, 2], [1, 1, 2]])
    >>> grain_boundaries(lab).astype(int).tolist()
    [[0, 1, 0], [0, 1, 0]]
    """
    lab = np.asarray(labels)
    b = np.zeros(lab.shape, bool)
    b[:, :-1] |= lab[:, :-1] != lab[:, 1:]
    b[:-1, :] |= lab[:-1, :] != lab[1:, :]
    return b


def _grey(image: np.ndarray) -> np.ndarray:
    a = np.asarray(image, float)
    if a.ndim == 3:
        a = a[..., :3] @ np.array([0.299, 0.587, 0.114])
    lo, hi = np.nanpercentile(a, [0.5, 99.5])
    return np.clip((a - lo) / max(hi - lo, 1e-12), 0.0, 1.0)


def registration_figure(image: np.ndarray, grain_map: "GrainMap", max_inches: float = 8.0) -> "Figure":
    """The micrograph with the grain map's boundaries, grain ids and control points drawn over it.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, 3)
        The micrograph (any numeric type; shown as grey between its 0.5 and 99.5 percentiles).
    grain_map : tracefit.maps.GrainMap
        From :func:`tracefit.maps.grain_map_from_orientation_map` for this image's shape.
    max_inches : float
        Size of the figure's longer side, inches.

    Returns
    -------
    matplotlib.figure.Figure

    Raises
    ------
    TracefitInputError
        The image's size differs from the grain map's.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> from tracefit.maps import OrientationMap, grain_map_from_orientation_map, grain_quaternions
    >>> lab = np.zeros((4, 8), int); lab[:, 4:] = 1
    >>> omap = OrientationMap(grain_quaternions(lab, [[0, 0, 0], [45, 0, 0]]), np.ones((4, 8), bool),
    ...                       Lattice.fcc(), (1.0, 1.0), "ni", 1)
    >>> gm = grain_map_from_orientation_map(omap, (40, 80), min_grain_px=10)
    >>> len(registration_figure(np.zeros((40, 80)), gm).axes)
    1
    """
    from matplotlib.figure import Figure

    lab = grain_map.labels
    if tuple(np.shape(image)[:2]) != lab.shape:
        raise TracefitInputError(f"image is {np.shape(image)[1]} x {np.shape(image)[0]} px but the grain map is "
                                 f"{lab.shape[1]} x {lab.shape[0]} px")
    h, w = lab.shape
    scale = max_inches / max(h, w)
    fig = Figure(figsize=(max(w * scale, 2.0), max(h * scale, 2.0) + 0.5))
    ax = fig.add_axes((0.0, 0.0, 1.0, h * scale / (max(h * scale, 2.0) + 0.5)))
    ax.imshow(_grey(image), cmap="gray", vmin=0, vmax=1, interpolation="nearest")
    over = np.zeros((h, w, 4))
    over[grain_boundaries(lab)] = (1.0, 0.85, 0.0, 1.0)  # amber: visible on dark and light pictures
    ax.imshow(over, interpolation="nearest")
    for gid, (x, y) in grain_map.centroids_px.items():
        ax.text(x, y, str(gid), color="cyan", fontsize=8, ha="center", va="center",
                bbox={"facecolor": "black", "alpha": 0.5, "pad": 1, "linewidth": 0})
    reg = grain_map.registration
    if reg.control_points is not None:
        cp = reg.control_points
        fit = reg.map_to_image(cp[:, 2:])
        ax.plot(cp[:, 0], cp[:, 1], "x", color="red", ms=8, mew=2)
        ax.plot(fit[:, 0], fit[:, 1], "o", mfc="none", mec="lime", ms=10)
        for i, (x, y) in enumerate(cp[:, :2]):
            ax.text(x + 6, y - 6, f"{i + 1}: {grain_map.residuals_px[i]:.2f} px", color="red", fontsize=7)
    ax.set_xlim(-0.5, w - 0.5)
    ax.set_ylim(h - 0.5, -0.5)
    ax.set_axis_off()
    s = grain_map.summary()
    res = "" if s["max_residual_px"] is None else f", largest residual {s['max_residual_px']:.2f} px"
    fig.suptitle(f"{s['phase']}: {s['grains_in_image']} grains, {reg.kind} registration{res}", fontsize=9,
                 y=1.0 - 0.1 / (max(h * scale, 2.0) + 0.5))
    return fig


def write_registration_figure(path: str | os.PathLike, image: np.ndarray, grain_map: "GrainMap", dpi: int = 100) -> Path:
    """Write :func:`registration_figure` as a PNG.

    Parameters
    ----------
    path : str or Path
        Output .png; its folder must exist.
    image : ndarray, shape (H, W) or (H, W, 3)
    grain_map : tracefit.maps.GrainMap
    dpi : int

    Returns
    -------
    Path

    Raises
    ------
    TracefitInputError
        Not a .png name, a missing folder, or sizes that differ.

    Examples
    --------
    >>> write_registration_figure("check.jpg", np.zeros((2, 2)), None)
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: registration figure 'check.jpg' must be a .png file
    """
    p = Path(path)
    if p.suffix.lower() != ".png":
        raise TracefitInputError(f"registration figure {str(p)!r} must be a .png file")
    if not p.parent.exists():
        raise TracefitInputError(f"registration figure {str(p)!r}: the folder {str(p.parent)!r} does not exist")
    from tracefit.viz.plots import save_figure

    return save_figure(registration_figure(image, grain_map), p, dpi=dpi)
