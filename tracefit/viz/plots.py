"""Matplotlib figures for notebooks and reports: labelled overlay, stereogram, rose diagram.

All figures use the Agg backend objects directly (no pyplot state, no display needed), so
they work in worker processes and on machines without a screen. matplotlib itself is
imported only when a figure is made, so the projection helpers (:func:`wulff_project`,
:func:`great_circle`, :func:`line_endpoints`) cost no matplotlib import.

Frames: the stereogram's sample frame is the image frame (X right, Y up, Z toward the
viewer, see ``docs/conventions.md``), so a plane's great circle meets the primitive
circle at the same angle as its trace in the image.
"""

from __future__ import annotations

import io
import os
from collections.abc import Sequence
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from tracefit.conventions import FrameSettings, data_to_image_matrix, fold_axial
from tracefit.errors import TracefitInputError
from tracefit.viz.labels import plane_label

if TYPE_CHECKING:  # annotations only: matplotlib is imported when a figure is made
    from matplotlib.axes import Axes
    from matplotlib.figure import Figure

    from tracefit.crystal import Lattice
    from tracefit.predict import LoadAxis

__all__ = [
    "wulff_project",
    "great_circle",
    "stereogram",
    "stereogram_for",
    "rose_diagram",
    "overlay_figure",
    "family_colors",
    "plane_label",
    "line_endpoints",
    "figure_png_bytes",
    "save_figure",
]

# Colour-blind-safe qualitative palette (Okabe & Ito, "Color Universal Design", 2008).
_PALETTE = ["#0072B2", "#D55E00", "#009E73", "#CC79A7", "#E69F00", "#56B4E9", "#F0E442", "#000000"]


def family_colors(n: int) -> list[str]:
    """``n`` distinct colours, cycling through a colour-blind-safe palette.

    Parameters
    ----------
    n : int
        Number of colours (one per band family).

    Returns
    -------
    list of str, length n
        Hex colours (Okabe & Ito palette); entry ``i`` is palette colour ``i % 8``.

    Examples
    --------
    >>> family_colors(3)
    ['#0072B2', '#D55E00', '#009E73']
    >>> family_colors(9)[8] == family_colors(1)[0]
    True
    """
    return [_PALETTE[i % len(_PALETTE)] for i in range(n)]


def _get(obj, key, default=None):
    if isinstance(obj, dict):
        return obj.get(key, default)
    return getattr(obj, key, default)


def _new_figure(size_in=(5.0, 5.0), dpi=100) -> Figure:
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size_in, dpi=dpi)
    FigureCanvasAgg(fig)
    return fig


# --------------------------------------------------------------------------- projection
def wulff_project(v: ArrayLike) -> np.ndarray:
    """Equal-angle (Wulff, stereographic) projection of directions onto the surface plane.

    Vectors are first turned into the upper hemisphere (z >= 0; an axis has no sense),
    then projected from the south pole: (x, y) / (1 + z), so a direction at angle rho
    from Z lands at radius tan(rho / 2) (1 on the primitive circle).

    Parameters
    ----------
    v : array_like, shape (..., 3)
        Directions in the sample frame (need not be unit length, must not be zero).

    Returns
    -------
    ndarray, shape (..., 2)
        Projected (x, y), dimensionless, inside the unit circle.

    Examples
    --------
    >>> wulff_project([0, 0, 1])  # the surface normal lands at the centre
    array([0., 0.])
    >>> (np.round(wulff_project([[1, 0, 0], [0, 1, 1], [0, -1, -1]]), 3) + 0.0).tolist()  # v and -v: one point
    [[1.0, 0.0], [0.0, 0.414], [0.0, 0.414]]
    """
    v = np.asarray(v, dtype=float)
    v = v / np.linalg.norm(v, axis=-1, keepdims=True)
    v = np.where(v[..., 2:3] < 0, -v, v)
    return v[..., :2] / (1.0 + v[..., 2:3])


def great_circle(normal: ArrayLike, n_points: int = 181) -> np.ndarray:
    """Upper-hemisphere half of the great circle of the plane with the given normal.

    The arc runs from one end of the plane's surface trace (direction Z x n, on the
    primitive circle) through the plane's steepest line to the other end.

    Parameters
    ----------
    normal : array_like, shape (3,)
        Plane normal in the sample frame (any length but zero).
    n_points : int
        Points along the arc.

    Returns
    -------
    ndarray, shape (n_points, 3)
        Unit vectors lying in the plane, all with z >= 0.

    Examples
    --------
    The upright plane with normal X meets the surface along Y; its arc rises to Z:

    >>> (np.round(great_circle([1, 0, 0], 3), 3) + 0.0).tolist()
    [[0.0, 1.0, 0.0], [0.0, 0.0, 1.0], [0.0, -1.0, 0.0]]
    """
    nrm = np.asarray(normal, dtype=float)
    nrm = nrm / np.linalg.norm(nrm)
    a = np.cross([0.0, 0.0, 1.0], nrm)
    if np.linalg.norm(a) < 1e-9:  # plane parallel to the surface: its circle is the primitive
        a = np.array([1.0, 0.0, 0.0])
    a = a / np.linalg.norm(a)
    b = np.cross(nrm, a)
    if b[2] < 0:
        b = -b
    t = np.linspace(0.0, np.pi, n_points)[:, None]
    return np.cos(t) * a + np.sin(t) * b


# --------------------------------------------------------------------------- stereogram
def _primitive(ax, radius=1.0):
    t = np.linspace(0, 2 * np.pi, 361)
    ax.plot(radius * np.cos(t), radius * np.sin(t), color="black", lw=1.0)
    ax.plot([-0.03, 0.03], [0, 0], color="black", lw=0.6)
    ax.plot([0, 0], [-0.03, 0.03], color="black", lw=0.6)
    for ang, lab, ha, va in ((0, "X\n(right)", "left", "center"), (90, "Y (image up)", "center", "bottom")):
        x, y = np.cos(np.radians(ang)), np.sin(np.radians(ang))
        ax.annotate(lab, (x * 1.02, y * 1.02), ha=ha, va=va, fontsize=7, color="0.3")
    ax.set_xlim(-1.25, 1.42)
    ax.set_ylim(-1.2, 1.2)
    ax.set_aspect("equal")
    ax.axis("off")


def _matched_colours(matched, matched_colors) -> dict:
    """Plane label -> colour of each matched plane (the first colour given for a label wins)."""
    labels = [plane_label(m) for m in (matched or [])]
    if matched_colors is None:
        return dict(zip(dict.fromkeys(labels), family_colors(len(set(labels)))))
    colours = {}
    for lab, col in zip(labels, matched_colors):
        colours.setdefault(lab, col)
    return colours


def _plane_and_pole(ax, normal, lab, colours, drawn, label_planes):
    """One candidate's great circle and pole; matched planes (in ``colours``) stand out."""
    xy = wulff_project(great_circle(normal))
    is_m = lab in colours
    ax.plot(xy[:, 0], xy[:, 1], color=colours.get(lab, "0.65"), lw=1.6 if is_m else 0.7, zorder=3 if is_m else 2)
    pole = wulff_project(normal)
    if is_m:
        ax.plot(*pole, marker="o", ms=7, color=colours[lab], mec="black", mew=0.6, zorder=5)
        if lab not in drawn:
            ax.annotate(lab, pole, xytext=(5, 5), textcoords="offset points", fontsize=8, color=colours[lab],
                        fontweight="bold", zorder=6)
            drawn.add(lab)
    else:
        ax.plot(*pole, marker="o", ms=3.5, mfc="white", mec="0.45", mew=0.7, zorder=4)
        if label_planes:
            ax.annotate(lab, pole, xytext=(3, -8), textcoords="offset points", fontsize=5.5, color="0.45")


def _stereogram_legend(ax, with_observed: bool) -> None:
    handles = [
        ax.plot([], [], color="0.65", lw=0.7, label="candidate plane (great circle)")[0],
        ax.plot([], [], ls="none", marker="o", mfc="white", mec="0.45", ms=4, label="candidate pole")[0],
        ax.plot([], [], ls="none", marker="o", color="#0072B2", mec="black", ms=6, label="matched pole")[0],
    ]
    if with_observed:
        handles.append(ax.plot([], [], ls="--", color="black", alpha=0.6, label="observed trace")[0])
    ax.legend(handles=handles, loc="lower left", fontsize=6, frameon=False, bbox_to_anchor=(-0.02, -0.03))


def stereogram(planes: Sequence, matched: Sequence | None = None, observed_deg: Sequence[float] | None = None,
               title: str | None = None, ax: Axes | None = None, label_planes: bool = True,
               matched_colors: Sequence[str] | None = None) -> Figure:
    """Stereographic projection of candidate planes: great-circle traces and matched poles.

    Equal-angle (Wulff) projection, upper hemisphere, sample frame = image frame
    (X right, Y up, Z toward the viewer).

    Parameters
    ----------
    planes : sequence of dict or PredictedTrace
        Candidates, each with ``normal_sample`` (3,) in the image frame and ``plane`` (label;
        a tuple of indices or a string). Entries without a normal are skipped.
    matched : sequence, optional
        Planes (labels, as in ``planes``) that matched an observed family; their poles
        are drawn as filled markers and their great circles in colour.
    observed_deg : sequence of float, optional
        Observed band angles (degrees, image frame), drawn as dashed diameters: a matching
        great circle meets the primitive circle at their ends.
    title : str, optional
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.
    label_planes : bool
        Write the indices beside every candidate pole (matched poles are always labelled).
    matched_colors : sequence of str, optional
        One colour per entry of ``matched`` (e.g. the overlay's family colours).

    Returns
    -------
    matplotlib.figure.Figure
        The figure of ``ax``, or a new 5.2 x 5.0 in figure with one axes.

    Examples
    --------
    >>> planes = [{"plane": (1, 1, 1), "normal_sample": [1, 1, 1]},
    ...           {"plane": (1, -1, 1), "normal_sample": [1, -1, 1]}]
    >>> fig = stereogram(planes, matched=[(1, 1, 1)], observed_deg=[135.0])
    >>> len(fig.axes), sorted(t.get_text() for t in fig.axes[0].texts if t.get_text()[1:2].isdigit())
    (1, ['(1-11)', '(111)'])
    """
    fig = ax.figure if ax is not None else _new_figure((5.2, 5.0))
    ax = ax if ax is not None else fig.add_axes([0.02, 0.02, 0.96, 0.90])
    _primitive(ax)
    colours = _matched_colours(matched, matched_colors)
    drawn = set()
    for p in planes:
        n = _get(p, "normal_sample")
        if n is not None:
            _plane_and_pole(ax, np.asarray(n, float), plane_label(_get(p, "plane")), colours, drawn, label_planes)
    for a in observed_deg or []:
        # the stereogram's axes are the image frame (y up): an angle's direction is (cos, sin)
        t = np.radians(a)
        ax.plot([-np.cos(t), np.cos(t)], [-np.sin(t), np.sin(t)], ls="--", lw=0.9, color="black", alpha=0.6, zorder=1)
    # y given: where matplotlib would place it over axes without axis lines, without measuring hidden ticks
    ax.set_title(title or "Stereogram: equal-angle (Wulff), upper hemisphere, sample = image frame", fontsize=8, y=1.0)
    _stereogram_legend(ax, bool(observed_deg))
    return fig


def stereogram_for(lattice: Lattice, g: ArrayLike, systems: Sequence, frame: FrameSettings | None = None,
                   load: LoadAxis | str | None = None, observed_deg: Sequence[float] | None = None,
                   matched: Sequence | None = None, title: str | None = None, ax: Axes | None = None) -> Figure:
    """Stereogram of every candidate plane of one orientation (a notebook convenience).

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice
    g : array_like (3, 3)
        Orientation, v_crystal = g v_sample (Bunge, passive).
    systems : sequence of DeformationSystem
        Candidates, e.g. ``tracefit.crystal.catalogue(lattice)``.
    frame : tracefit.conventions.FrameSettings, optional
        Orientation-data frame -> image; the projection is drawn in the image frame.
    load : LoadAxis or str, optional
        Load axis, passed on to :func:`tracefit.predict.predict_traces`.
    observed_deg : sequence of float, optional
        Observed band angles (image frame, degrees), drawn as dashed diameters.
    matched : sequence of plane index tuples, optional
        Planes whose poles are highlighted (e.g. the best candidate of each family).
    title : str, optional
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure
        As :func:`stereogram`.

    Examples
    --------
    >>> from tracefit.crystal import catalogue, from_euler, lattice_preset
    >>> fcc = lattice_preset("fcc")
    >>> fig = stereogram_for(fcc, from_euler([0.0, 0.0, 0.0]), catalogue(fcc, ["slip"]), matched=[(1, 1, 1)])
    >>> len([ln for ln in fig.axes[0].lines if len(ln.get_xydata()) > 100])  # four {111} + the rim
    5
    """
    from tracefit.predict import predict_traces

    M = data_to_image_matrix(frame)
    planes = [{"plane": tuple(t.plane), "normal_sample": M @ np.asarray(t.normal_sample, float)}
              for t in predict_traces(lattice, np.asarray(g, float), systems, frame, load)]
    return stereogram(planes, matched=matched, observed_deg=observed_deg, title=title, ax=ax)


# --------------------------------------------------------------------------- rose diagram
def rose_diagram(angles_deg: ArrayLike, weights: ArrayLike | None = None, bin_deg: float = 5.0, title: str | None = None, ax: Axes | None = None,
                 labels: Sequence[str] | None = None) -> Figure:
    """Axial rose diagram of band angles: 0-180 deg histogram, mirrored onto 180-360.

    Parameters
    ----------
    angles_deg : array_like, shape (n,)
        Band angles in degrees (image frame, any range; folded to [0, 180)).
    weights : array_like, shape (n,), optional
        One weight per angle (e.g. the number of bands in a family); default 1.
    bin_deg : float
        Sector width in degrees; 180 must be a whole multiple of it.
    title : str, optional
    ax : matplotlib Axes, optional
        A polar axes to draw into instead of a new figure.
    labels : sequence of str, optional
        One label per angle, written at the rim beside its sector.

    Returns
    -------
    matplotlib.figure.Figure
        One polar axes with 2 * 180 / bin_deg bars (each sector at theta and theta + 180).

    Raises
    ------
    TracefitInputError
        If ``bin_deg`` does not divide 180.

    Examples
    --------
    >>> fig = rose_diagram([10.0, 190.0, 100.0], bin_deg=30.0)
    >>> [float(b.get_height()) for b in fig.axes[0].patches][:6]
    [2.0, 0.0, 0.0, 1.0, 0.0, 0.0]
    """
    nb = int(round(180.0 / bin_deg)) if np.isfinite(bin_deg) and bin_deg > 0 else 0
    if nb < 1 or abs(nb * bin_deg - 180.0) > 1e-9:
        raise TracefitInputError(f"bin_deg must divide 180, got {bin_deg}")
    a = np.atleast_1d(fold_axial(np.asarray(angles_deg, float))) if np.size(angles_deg) else np.zeros(0)
    w = np.ones_like(a) if weights is None else np.asarray(weights, float).reshape(a.shape)
    counts, edges = np.histogram(a, bins=nb, range=(0.0, 180.0), weights=w)
    fig = ax.figure if ax is not None else _new_figure((4.2, 4.2))
    ax = ax if ax is not None else fig.add_axes([0.1, 0.05, 0.8, 0.78], projection="polar")
    width = np.radians(bin_deg)
    for off in (0.0, 180.0):  # axial data: each sector drawn at theta and theta + 180
        bars = ax.bar(np.radians(edges[:-1] + off), counts, width=width, align="edge", color="#0072B2",
                      edgecolor="white", lw=0.5, alpha=0.85 if off == 0 else 0.45)
        for b in np.asarray(bars.patches, dtype=object)[counts == 0]:  # no pixel, but sets the axis limits
            b.set_visible(False)
    ax.set_theta_zero_location("E")
    ax.set_theta_direction(1)  # counterclockwise from image +x, like the image-frame angle
    ax.set_thetagrids(range(0, 360, 30), fontsize=6)
    ax.tick_params(axis="y", labelsize=6)
    if labels is not None:
        top = counts.max() if counts.size and counts.max() > 0 else 1.0
        for ang, lab in zip(a, labels):
            ax.annotate(str(lab), (np.radians(ang), top * 1.08), fontsize=7, ha="center", color="#D55E00")
    ax.set_title(title or "Band angles (axial, deg ccw from image +x)", fontsize=8, pad=14)
    return fig


# --------------------------------------------------------------------------- overlay figure
def line_endpoints(line: object) -> tuple[float, float, float, float]:
    """Pixel endpoints (col0, row0, col1, row1) of one band line, however it is stored.

    Parameters
    ----------
    line : BandLine, dict or sequence of 4 numbers
        A detected line (attributes or keys ``col0, row0, col1, row1``, ``x0, y0, x1, y1``,
        ``c0, r0, c1, r1``, or ``endpoints`` / ``endpoints_px`` / ``points`` holding four
        numbers) or the four numbers themselves.

    Returns
    -------
    tuple of 4 float
        Column and row (pixels, rows downward) of both ends.

    Raises
    ------
    TracefitInputError
        If no four endpoint numbers can be found.

    Examples
    --------
    >>> line_endpoints([1, 2, 3, 4])
    (1.0, 2.0, 3.0, 4.0)
    >>> line_endpoints({"x0": 0, "y0": 5, "x1": 10, "y1": 5})
    (0.0, 5.0, 10.0, 5.0)
    """
    if isinstance(line, (list, tuple, np.ndarray)) and len(line) == 4:
        return tuple(float(x) for x in line)
    for names in (("col0", "row0", "col1", "row1"), ("x0", "y0", "x1", "y1"), ("c0", "r0", "c1", "r1")):
        vals = [_get(line, k) for k in names]
        if all(v is not None for v in vals):
            return tuple(float(v) for v in vals)
    for k in ("endpoints", "endpoints_px", "points"):
        v = _get(line, k)
        if v is not None:
            arr = np.asarray(v, float).ravel()
            if arr.size == 4:
                return tuple(arr)
    raise TracefitInputError(f"cannot read pixel endpoints from the line {line!r}; expected (col0, row0, col1, row1)")


def _grain_layer(ax, grain_labels, step: int, w: int, h: int) -> None:
    """Grain boundaries (yellow) and each large grain's id at its median pixel."""
    lab_img = np.asarray(grain_labels)
    edge = np.zeros(lab_img.shape, bool)
    edge[:, 1:] |= lab_img[:, 1:] != lab_img[:, :-1]
    edge[1:, :] |= lab_img[1:, :] != lab_img[:-1, :]
    if step > 1:  # thicken before striding so thin boundaries survive
        from scipy.ndimage import binary_dilation

        edge = binary_dilation(edge, iterations=step // 2)[::step, ::step]
    rgba = np.zeros(edge.shape + (4,))
    rgba[edge] = (1.0, 0.85, 0.0, 0.9)
    ax.imshow(rgba, interpolation="nearest", extent=(-0.5, w - 0.5, h - 0.5, -0.5))
    for gid in np.unique(lab_img):
        if gid < 0:  # not a grain (background, data bar)
            continue
        rr, cc = np.nonzero(lab_img == gid)
        if rr.size > 0.01 * lab_img.size:
            ax.text(float(np.median(cc)), float(np.median(rr)), f"G{int(gid)}", color="#F0E442", fontsize=10,
                    ha="center", va="center", fontweight="bold",
                    bbox=dict(boxstyle="round,pad=0.2", fc="black", ec="none", alpha=0.55))


def _family_layer(ax, i: int, fam, label: str, colour: str, w: int, h: int) -> None:
    """Family ``i``'s band lines and its ``F<i+1>: label`` tag beside the longest one."""
    best = None
    for ln in list(_get(fam, "lines", None) or []):
        c0, r0, c1, r1 = line_endpoints(ln)
        ax.plot([c0, c1], [r0, r1], color=colour, lw=1.4, alpha=0.9)
        length = np.hypot(c1 - c0, r1 - r0)
        if best is None or length > best[0]:
            best = (length, c0, r0, c1, r1)
    if best is not None:
        _, c0, r0, c1, r1 = best
        # label a third of the way along the longest band: inside its grain, off the grain label
        cx, cy = c0 + 0.3 * (c1 - c0), r0 + 0.3 * (r1 - r0)
        cx = float(np.clip(cx, 0.02 * w, 0.72 * w))
        cy = float(np.clip(cy, 0.04 * h, 0.9 * h))
    else:
        cx, cy = 0.05 * w, (0.06 + 0.07 * i) * h
    ax.text(cx, cy, f"F{i + 1}: {label}", color="white", fontsize=8, fontweight="bold",
            bbox=dict(boxstyle="round,pad=0.25", fc=colour, ec="none", alpha=0.9))


def overlay_figure(image: np.ndarray, families: Sequence, labels: Sequence[str] | None = None,
                   title: str | None = None, ax: Axes | None = None, max_width_in: float = 7.0,
                   grain_labels: np.ndarray | None = None) -> Figure:
    """The micrograph with each detected band family drawn and labelled.

    Parameters
    ----------
    image : ndarray, shape (H, W) or (H, W, 3)
        The micrograph (gray or RGB; any numeric range, shown min-max scaled).
    families : sequence of BandFamily or dict
        Each with ``lines`` (pixel endpoints (col0, row0, col1, row1) per band, see
        :func:`line_endpoints`) and ``angle_deg``.
    labels : sequence of str, optional
        One label per family, e.g. its identified plane ``"(1-11)"``; default the angle.
    title : str, optional
    ax : matplotlib Axes, optional
        Draw into this axes instead of a new figure.
    max_width_in : float
        Width of a new figure, inches (its height follows the image's aspect).
    grain_labels : ndarray of int (H, W), optional
        Grain label image; grain boundaries are drawn and each grain's id is written at
        its centre (negative ids: not a grain, not labelled).

    Returns
    -------
    matplotlib.figure.Figure
        Axes in full-resolution pixel coordinates (x = column, y = row downward).

    Examples
    --------
    >>> fams = [{"angle_deg": 45.0, "lines": [[0, 59, 59, 0]]}, {"angle_deg": 135.0, "lines": [[0, 0, 50, 50]]}]
    >>> fig = overlay_figure(np.zeros((60, 80)), fams, labels=["(1-11) slip", "(111) slip"])
    >>> [t.get_text() for t in fig.axes[0].texts], len(fig.axes[0].lines)
    (['F1: (1-11) slip', 'F2: (111) slip'], 2)
    """
    img = np.asarray(image, float)
    h, w = img.shape[:2]
    if ax is None:
        fw = max_width_in
        fig = _new_figure((fw, fw * h / w + 0.45))
        ax = fig.add_axes([0.0, 0.0, 1.0, (fw * h / w) / (fw * h / w + 0.45)])
    else:
        fig = ax.figure
    # a large micrograph is shown through a strided copy (the figure has ~600 px anyway);
    # the extent keeps full-resolution pixel coordinates for the band lines
    step = max(1, int(np.ceil(max(h, w) / 1600)))
    view = img[::step, ::step]
    lo, hi = np.nanmin(view), np.nanmax(view)
    disp = (view - lo) / (hi - lo) if hi > lo else np.zeros_like(view)
    ax.imshow(disp, cmap="gray" if disp.ndim == 2 else None, vmin=0, vmax=1, interpolation="nearest",
              extent=(-0.5, w - 0.5, h - 0.5, -0.5))
    if grain_labels is not None:
        _grain_layer(ax, grain_labels, step, w, h)
    colours = family_colors(len(families))
    for i, fam in enumerate(families):
        lab = labels[i] if labels is not None else f"{_get(fam, 'angle_deg', 0.0):.1f} deg"
        _family_layer(ax, i, fam, lab, colours[i], w, h)
    ax.set_xlim(-0.5, w - 0.5)
    ax.set_ylim(h - 0.5, -0.5)
    ax.axis("off")
    if title:
        fig.suptitle(title, fontsize=9, y=0.995)
    if view.ndim == 2 and hi > lo:  # the grey scale stated: a strain map's values are data, not brightness
        ax.text(0.995, 0.005, f"grey: {lo:.4g} (black) to {hi:.4g} (white)", transform=ax.transAxes, ha="right",
                va="bottom", fontsize=7, color="white", bbox={"facecolor": "black", "alpha": 0.6, "pad": 1.5, "linewidth": 0})
    return fig


# --------------------------------------------------------------------------- output
def figure_png_bytes(fig: Figure, dpi: int = 100) -> bytes:
    """PNG bytes of a figure.

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    dpi : int
        Resolution, dots per inch (a 5 in figure at 100 dpi is 500 px wide).

    Returns
    -------
    bytes
        The PNG file's content.

    Examples
    --------
    >>> figure_png_bytes(rose_diagram([30.0]), dpi=20)[:4]
    b'\\x89PNG'
    """
    from matplotlib import __version__ as mpl_version
    from PIL import Image, PngImagePlugin  # Pillow comes with matplotlib

    # matplotlib's PNG is RGBA at zlib level 6; opaque figures (all ours) as RGB at level 3: same pixels, 1/3 the time
    w, h = int(fig.get_figwidth() * dpi), int(fig.get_figheight() * dpi)  # the canvas: int(size * dpi) pixels
    buf = io.BytesIO()
    fig.savefig(buf, format="rgba", dpi=dpi)
    img = Image.frombuffer("RGBA", (w, h), buf.getvalue(), "raw", "RGBA", 0, 1) if buf.tell() == 4 * w * h else None
    buf = io.BytesIO()
    if img is None:  # not the canvas size expected: matplotlib's own PNG
        fig.savefig(buf, format="png", dpi=dpi)
        return buf.getvalue()
    info = PngImagePlugin.PngInfo()
    info.add_text("Software", f"Matplotlib version{mpl_version}, https://matplotlib.org/")
    img = img.convert("RGB") if img.getextrema()[3] == (255, 255) else img
    img.save(buf, format="png", dpi=(dpi, dpi), pnginfo=info, compress_level=3)
    return buf.getvalue()


def save_figure(fig: Figure, path: str | os.PathLike, dpi: int = 100) -> Path:
    """Write a figure as PNG atomically (temporary file in the same folder, then rename).

    Parameters
    ----------
    fig : matplotlib.figure.Figure
    path : str or Path
        Output file; its folder must exist.
    dpi : int
        Resolution, dots per inch.

    Returns
    -------
    Path
        ``path``.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     p = save_figure(rose_diagram([30.0]), Path(d) / "rose.png", dpi=20)
    ...     p.name, p.read_bytes()[:4]
    ('rose.png', b'\\x89PNG')
    """
    from tracefit.atomic import write_bytes

    return write_bytes(path, figure_png_bytes(fig, dpi=dpi))
