"""Every convention tracefit uses, written once.

Nothing else in the package turns pixel rows into angles, folds an axial angle, rotates
about the surface normal, applies a frame flip or stage tilt, or converts between three-
and four-index hexagonal notation: it calls this module. ``docs/conventions.md`` states
the same with worked vectors (and ``tests/test_conventions.py`` checks them).

Image frame
    x to the right, y *up* the screen. Angles are in degrees, counterclockwise from +x,
    and axial: a line has no sense, so 0 <= angle < 180. Pixel rows run *down*; this is
    the only place where a (column, row) direction becomes an image-frame angle.

Orientation-data frame versus image

Orientation data (EBSD maps and the like) may be stored in a frame that differs from the
image by a turn about the surface normal and by reversed axes. :class:`FrameSettings`
states the difference:

* **Flips** come first. ``flip_y`` says the data's y axis points down the image; it is
  applied as a proper 180 deg rotation about x (y and z both reversed), ``flip_x`` as a
  180 deg rotation about y (x and z reversed). Reversing one axis alone would make the
  frame left-handed, which no orientation can live in; reversing z with it keeps it a
  rotation (the data's surface normal then points into the sample).
* **Rotation** ``rotation_deg`` (rho) follows: ``v_image = Rz(rho) v_data`` (active,
  counterclockwise), so every predicted trace angle shifts by ``+rho``.

So ``v_image = Rz(rho) @ F @ v_data`` with ``F = diag(-1, 1, -1)`` for ``flip_x``,
``diag(1, -1, -1)`` for ``flip_y`` and their product ``diag(-1, -1, 1)`` for both.

**Stage tilt** alpha about the image's horizontal axis (``tilt_axis="x"``): a surface
direction ``(t_x, t_y)`` appears as ``(t_x, t_y cos alpha)``, so
``tan(apparent) = tan(true) cos(alpha)`` (45 deg true at 60 deg tilt appears at 26.565 deg).
About the vertical axis (``"y"``): ``(t_x cos alpha, t_y)``. Tilt acts in the image frame,
after rotation and flips.

Hexagonal indices
    (hkil) -> (hkl) and [uvtw] -> [u - t, v - t, w]; back: (hkl) -> (h, k, -(h+k), l) and
    [UVW] -> [(2U - V)/3, (2V - U)/3, -(U + V)/3, W].

The Bunge Euler convention (passive, ``v_crystal = g v_sample``) lives with the
orientation type in :mod:`tracefit.crystal.orientation`.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np
from numpy.typing import ArrayLike

from tracefit.errors import TracefitInputError

__all__ = [
    "fold_axial",
    "axial_difference",
    "pixel_direction_angle",
    "pixel_endpoints_angle",
    "angle_to_pixel_direction",
    "axial_mean",
    "FrameSettings",
    "rotation_z",
    "data_to_image_matrix",
    "apparent_angle",
    "true_angle",
    "miller_bravais_to_miller",
    "miller_to_miller_bravais",
]

TILT_AXES = ("x", "y")

# ------------------------------------------------------------------ image-frame angles
def fold_axial(angle_deg: ArrayLike) -> float | np.ndarray:
    """Fold angles onto the axial range [0, 180).

    Parameters
    ----------
    angle_deg : float or array_like
        Angle(s) in degrees, any range.

    Returns
    -------
    float or ndarray
        Equivalent axial angle(s) in degrees, 0 <= a < 180 (same shape as the input).

    Examples
    --------
    >>> fold_axial(-30.0)
    150.0
    >>> fold_axial([180.0, 365.0]).tolist()
    [0.0, 5.0]
    """
    a = np.mod(np.asarray(angle_deg, dtype=float), 180.0)
    # mod can return exactly 180.0 for tiny negative inputs through rounding.
    a = np.where(a >= 180.0, a - 180.0, a)
    return float(a) if a.ndim == 0 else a


def axial_difference(a_deg: ArrayLike, b_deg: ArrayLike) -> float | np.ndarray:
    """Signed smallest difference a - b between axial angles, in (-90, 90] degrees.

    Parameters
    ----------
    a_deg, b_deg : float or array_like
        Axial angles in degrees (broadcast together).

    Returns
    -------
    float or ndarray
        a - b folded onto (-90, 90], degrees.

    Examples
    --------
    >>> axial_difference(179.0, 1.0)
    -2.0
    >>> axial_difference(10.0, 100.0)
    90.0
    """
    d = np.mod(np.asarray(a_deg, dtype=float) - np.asarray(b_deg, dtype=float) + 90.0, 180.0) - 90.0
    d = np.where(d <= -90.0, d + 180.0, d)
    return float(d) if d.ndim == 0 else d


def pixel_direction_angle(d_col: ArrayLike, d_row: ArrayLike) -> float | np.ndarray:
    """Image-frame axial angle of a direction given in pixel (column, row) steps.

    Rows grow downward, so the upward screen component is ``-d_row``:
    angle = atan2(-d_row, d_col), folded to [0, 180).

    Parameters
    ----------
    d_col, d_row : float or array_like
        Direction components in pixels (column to the right, row downward).

    Returns
    -------
    float or ndarray
        Axial angle in degrees.

    Examples
    --------
    >>> pixel_direction_angle(1.0, -1.0)  # one column right, one row up the screen
    45.0
    """
    return fold_axial(np.degrees(np.arctan2(-np.asarray(d_row, float), np.asarray(d_col, float))))


def pixel_endpoints_angle(col0: ArrayLike, row0: ArrayLike, col1: ArrayLike, row1: ArrayLike) -> float | np.ndarray:
    """Axial image-frame angle of the line through two pixel points (col, row).

    Parameters
    ----------
    col0, row0, col1, row1 : float or array_like
        The two points in pixels (rows grow downward).

    Returns
    -------
    float or ndarray
        Axial angle in degrees, [0, 180).

    Raises
    ------
    TracefitInputError
        If the two points coincide (no direction).

    Examples
    --------
    >>> pixel_endpoints_angle(0, 99, 99, 0)  # lower-left to upper-right corner
    45.0
    """
    dc = np.asarray(col1, float) - np.asarray(col0, float)
    dr = np.asarray(row1, float) - np.asarray(row0, float)
    if np.any(np.hypot(dc, dr) == 0):
        raise TracefitInputError("the endpoints (col0, row0) and (col1, row1) coincide, so the line has no direction")
    return pixel_direction_angle(dc, dr)


def angle_to_pixel_direction(angle_deg: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Unit (d_col, d_row) pixel direction of an image-frame angle (inverse of :func:`pixel_direction_angle`).

    Parameters
    ----------
    angle_deg : float or array_like
        Image-frame angle(s) in degrees, counterclockwise from x.

    Returns
    -------
    d_col, d_row : float or ndarray
        Unit step in pixel columns (right) and rows (down).

    Examples
    --------
    >>> d_col, d_row = angle_to_pixel_direction(90.0)
    >>> round(float(d_col), 6), round(float(d_row), 6)
    (0.0, -1.0)
    """
    t = np.radians(np.asarray(angle_deg, float))
    return np.cos(t), -np.sin(t)


def axial_mean(angles_deg: ArrayLike, weights: ArrayLike | None = None) -> float:
    """Weighted mean of axial angles (angle doubling), in [0, 180) degrees.

    Parameters
    ----------
    angles_deg : array_like, shape (K,)
        Axial angles in degrees.
    weights : array_like, shape (K,), optional
        Non-negative weights; equal weights when omitted.

    Returns
    -------
    float
        Mean axial angle in degrees.

    Examples
    --------
    >>> round(axial_mean([178.0, 4.0]), 6)
    1.0
    """
    t = np.radians(2.0 * np.asarray(angles_deg, float))
    w = np.ones_like(t) if weights is None else np.asarray(weights, float)
    return fold_axial(np.degrees(np.arctan2(np.sum(w * np.sin(t)), np.sum(w * np.cos(t)))) / 2.0)


# ------------------------------------------------------------------ frames and tilt


@dataclass(frozen=True)
class FrameSettings:
    """How the orientation data's frame and the stage tilt relate to the image.

    Parameters
    ----------
    rotation_deg : float
        rho, degrees: ``v_image = Rz(rho) v_data`` (counterclockwise); trace angles shift by +rho.
    flip_x, flip_y : bool
        The data's x (or y) axis points the other way than the image's (each applied as a
        proper 180 deg rotation, reversing z as well; flips act before the rotation).
    tilt_deg : float
        Stage tilt alpha in degrees, ``|alpha| < 90``.
    tilt_axis : {"x", "y"}
        Tilt axis: the image's horizontal (x) or vertical (y) axis.

    Raises
    ------
    TracefitInputError
        A non-finite angle, a tilt of 90 deg or more, a flip that is not a bool, or an
        unknown tilt axis.

    Examples
    --------
    >>> f = FrameSettings(rotation_deg=90.0, tilt_deg=60.0)
    >>> f.to_dict()["tilt_axis"]
    'x'
    """

    rotation_deg: float = 0.0
    flip_x: bool = False
    flip_y: bool = False
    tilt_deg: float = 0.0
    tilt_axis: str = "x"

    def __post_init__(self):
        for k in ("rotation_deg", "tilt_deg"):
            v = getattr(self, k)
            if isinstance(v, (bool, np.bool_)) or not isinstance(v, (int, float, np.floating, np.integer)) or not math.isfinite(v):
                raise TracefitInputError(f"{k} must be a finite number of degrees, got {v!r}")
        for k in ("flip_x", "flip_y"):
            v = getattr(self, k)
            if not isinstance(v, (bool, np.bool_)):
                raise TracefitInputError(f"{k} must be true or false, got {v!r}")
            object.__setattr__(self, k, bool(v))
        if not abs(self.tilt_deg) < 90.0:
            raise TracefitInputError(f"tilt_deg must lie strictly between -90 and 90 deg, got {self.tilt_deg:g}")
        axis = str(self.tilt_axis).strip().lower()
        if axis not in TILT_AXES:
            raise TracefitInputError(f"tilt_axis must be 'x' (image horizontal) or 'y' (image vertical), got {self.tilt_axis!r}")
        object.__setattr__(self, "tilt_axis", axis)

    def to_dict(self) -> dict:
        """The five settings as a JSON-ready dict."""
        return asdict(self)


def rotation_z(deg: float) -> np.ndarray:
    """Active counterclockwise rotation matrix about z.

    Parameters
    ----------
    deg : float
        Rotation angle in degrees.

    Returns
    -------
    ndarray, shape (3, 3)
        ``Rz`` with ``v' = Rz @ v``.

    Examples
    --------
    >>> np.round(rotation_z(90.0) @ [1.0, 0.0, 0.0], 6).tolist()
    [0.0, 1.0, 0.0]
    """
    t = math.radians(deg)
    c, s = math.cos(t), math.sin(t)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def data_to_image_matrix(frame: FrameSettings | None = None) -> np.ndarray:
    """Proper rotation ``M`` with ``v_image = M @ v_data`` (flips first, then Rz(rho)).

    Tilt is not part of ``M``: it is a projection, see :func:`apparent_angle`.

    Parameters
    ----------
    frame : FrameSettings, optional
        Default: no rotation, no flips.

    Returns
    -------
    ndarray, shape (3, 3)
        Rotation matrix, determinant +1.

    Examples
    --------
    >>> np.round(data_to_image_matrix(FrameSettings(flip_y=True)), 6).tolist()
    [[1.0, 0.0, 0.0], [0.0, -1.0, 0.0], [0.0, 0.0, -1.0]]
    """
    frame = frame or FrameSettings()
    f = np.diag([-1.0 if frame.flip_x else 1.0, -1.0 if frame.flip_y else 1.0, 1.0])
    f[2, 2] = f[0, 0] * f[1, 1]  # z follows so that det = +1
    return rotation_z(frame.rotation_deg) @ f


def _tilt_factors(frame: FrameSettings):
    c = math.cos(math.radians(frame.tilt_deg))
    return (1.0, c) if frame.tilt_axis == "x" else (c, 1.0)


def apparent_angle(true_deg: ArrayLike, frame: FrameSettings | None = None) -> float | np.ndarray:
    """Apparent (tilted-view) axial angle of a surface line from its true image-frame angle.

    Parameters
    ----------
    true_deg : float or array_like
        True trace angle(s) in the image frame, degrees.
    frame : FrameSettings
        Only ``tilt_deg`` and ``tilt_axis`` are used.

    Returns
    -------
    float or ndarray
        Apparent angle(s), degrees in [0, 180).

    Examples
    --------
    >>> round(apparent_angle(45.0, FrameSettings(tilt_deg=60.0)), 3)
    26.565
    """
    frame = frame or FrameSettings()
    fx, fy = _tilt_factors(frame)
    t = np.radians(np.asarray(true_deg, float))
    return fold_axial(np.degrees(np.arctan2(np.sin(t) * fy, np.cos(t) * fx)))


def true_angle(apparent_deg: ArrayLike, frame: FrameSettings | None = None) -> float | np.ndarray:
    """True image-frame axial angle from the apparent angle seen under stage tilt.

    The inverse of :func:`apparent_angle`.

    Parameters
    ----------
    apparent_deg : float or array_like
        Apparent angle(s), degrees.
    frame : FrameSettings
        Only ``tilt_deg`` and ``tilt_axis`` are used.

    Returns
    -------
    float or ndarray
        True angle(s), degrees in [0, 180).

    Examples
    --------
    >>> round(true_angle(26.565051177, FrameSettings(tilt_deg=60.0)), 6)
    45.0
    """
    frame = frame or FrameSettings()
    fx, fy = _tilt_factors(frame)
    a = np.radians(np.asarray(apparent_deg, float))
    # (cos a, sin a) ~ (t_x fx, t_y fy)  ->  t ~ (cos a / fx, sin a / fy); multiply by fx*fy > 0.
    return fold_axial(np.degrees(np.arctan2(np.sin(a) * fx, np.cos(a) * fy)))


# ------------------------------------------------------------------ hexagonal indices
def _is_integer_array(v: np.ndarray) -> bool:
    return v.dtype.kind in "iub"


def miller_bravais_to_miller(idx: ArrayLike, kind: str) -> np.ndarray:
    """Four-index (hkil) plane or [uvtw] direction to three indices.

    Planes: (hkil) -> (hkl), with h + k + i = 0 required.
    Directions: [uvtw] -> [u - t, v - t, w], with u + v + t = 0 required.
    Three-index input is returned unchanged (as an array), so callers need not branch.

    Parameters
    ----------
    idx : array_like, shape (..., 4) or (..., 3)
        Indices; integer input gives integer output (the conversion is exact), float input
        float output.
    kind : {"plane", "direction"}
        What the indices describe.

    Returns
    -------
    ndarray, shape (..., 3)
        Three-index form, same dtype family as ``idx``.

    Raises
    ------
    TracefitInputError
        ``kind`` unknown, a count other than 3 or 4, or the sum rule broken.

    Examples
    --------
    >>> miller_bravais_to_miller((1, 0, -1, 2), "plane").tolist()
    [1, 0, 2]
    >>> miller_bravais_to_miller((2, -1, -1, 0), "direction").tolist()
    [3, 0, 0]
    """
    v = _index_array(idx, kind)
    if v.shape[-1] == 3:
        return v
    s = v[..., 0] + v[..., 1] + v[..., 2]
    if np.any(np.abs(s) > 1e-9):
        first = "h + k + i" if kind == "plane" else "u + v + t"
        raise TracefitInputError(f"Miller-Bravais {kind} {_index_text(v)} breaks {first} = 0")
    if kind == "plane":
        return np.stack([v[..., 0], v[..., 1], v[..., 3]], axis=-1)
    return np.stack([v[..., 0] - v[..., 2], v[..., 1] - v[..., 2], v[..., 3]], axis=-1)


def miller_to_miller_bravais(idx: ArrayLike, kind: str, integer: bool = False) -> np.ndarray:
    """Three indices to four: (hkl) -> (h, k, -(h+k), l); [UVW] -> [(2U-V)/3, (2V-U)/3, -(U+V)/3, W].

    Parameters
    ----------
    idx : array_like, shape (..., 3)
        Three-index plane(s) or direction(s).
    kind : {"plane", "direction"}
        What the indices describe.
    integer : bool
        Return integers (int64). Planes always convert exactly; a direction converts exactly
        only when every component of ``(2U-V, 2V-U, -(U+V), 3W)`` divides by 3 (it came from
        a whole [uvtw]); otherwise the call fails. False (default): floats, thirds allowed.

    Returns
    -------
    ndarray, shape (..., 4)
        Plane indices keep the dtype of integer input; directions are float unless ``integer``.

    Raises
    ------
    TracefitInputError
        ``kind`` unknown, not three indices, or ``integer=True`` for a direction whose
        four-index form is not whole.

    Examples
    --------
    >>> miller_to_miller_bravais((1, 0, 2), "plane").tolist()
    [1, 0, -1, 2]
    >>> np.round(miller_to_miller_bravais((1, 0, 0), "direction"), 3).tolist()
    [0.667, -0.333, -0.333, 0.0]
    >>> miller_to_miller_bravais((3, 0, 0), "direction", integer=True).tolist()
    [2, -1, -1, 0]
    """
    v = _index_array(idx, kind)
    if v.shape[-1] != 3:
        raise TracefitInputError(f"idx must hold three indices per {kind}, got shape {v.shape}")
    if kind == "plane":
        out = np.stack([v[..., 0], v[..., 1], -(v[..., 0] + v[..., 1]), v[..., 2]], axis=-1)
        return out.astype(np.int64) if integer else out
    U, V, W = v[..., 0], v[..., 1], v[..., 2]
    num = np.stack([2 * U - V, 2 * V - U, -(U + V), 3 * W], axis=-1)
    if not integer:
        return num / 3.0
    whole = np.round(num / 3.0)
    if np.any(np.abs(num / 3.0 - whole) > 1e-9):
        raise TracefitInputError(f"direction {_index_text(v)} has no whole four-index form; multiply it by 3")
    return whole.astype(np.int64)


def _index_array(idx, kind: str) -> np.ndarray:
    if kind not in ("plane", "direction"):
        raise TracefitInputError(f"kind must be 'plane' or 'direction', got {kind!r}")
    v = np.asarray(idx)
    if not _is_integer_array(v):
        v = v.astype(float)
    if v.shape[-1:] not in ((3,), (4,)):
        raise TracefitInputError(f"idx must hold 3 or 4 indices per {kind}, got shape {v.shape}")
    return v


def _index_text(v) -> str:
    return "(" + " ".join(f"{x:g}" for x in np.ravel(v)) + ")"
