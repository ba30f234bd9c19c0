"""The orientation-data frame versus the image frame, and stage-tilt foreshortening.

Image frame: x right, y up the screen, z toward the viewer (see :mod:`tracefit.angles`).
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
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass

import numpy as np

from tracefit.angles import fold_axial
from tracefit.errors import TracefitInputError

__all__ = ["FrameSettings", "data_to_image_matrix", "apparent_angle", "true_angle", "rotation_z"]

TILT_AXES = ("x", "y")


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
                raise TracefitInputError(f"frame {k.replace('_deg', '')} must be a finite number of degrees, got {v!r}")
        for k in ("flip_x", "flip_y"):
            v = getattr(self, k)
            if not isinstance(v, (bool, np.bool_)):
                raise TracefitInputError(f"frame {k} must be true or false, got {v!r}")
            object.__setattr__(self, k, bool(v))
        if not abs(self.tilt_deg) < 90.0:
            raise TracefitInputError(f"stage tilt must lie strictly between -90 and 90 deg, got {self.tilt_deg:g}")
        axis = str(self.tilt_axis).strip().lower()
        if axis not in TILT_AXES:
            raise TracefitInputError(f"tilt axis must be 'x' (image horizontal) or 'y' (image vertical), got {self.tilt_axis!r}")
        object.__setattr__(self, "tilt_axis", axis)

    def to_dict(self) -> dict:
        return asdict(self)


def rotation_z(deg: float) -> np.ndarray:
    """Active counterclockwise rotation matrix about z by ``deg`` degrees."""
    t = math.radians(deg)
    c, s = math.cos(t), math.sin(t)
    return np.array([[c, -s, 0.0], [s, c, 0.0], [0.0, 0.0, 1.0]])


def data_to_image_matrix(frame: FrameSettings | None = None) -> np.ndarray:
    """Proper rotation ``M`` with ``v_image = M @ v_data`` (flips first, then Rz(rho)).

    Tilt is not part of ``M``: it is a projection, see :func:`apparent_angle`.
    """
    frame = frame or FrameSettings()
    f = np.diag([-1.0 if frame.flip_x else 1.0, -1.0 if frame.flip_y else 1.0, 1.0])
    f[2, 2] = f[0, 0] * f[1, 1]  # z follows so that det = +1
    return rotation_z(frame.rotation_deg) @ f


def _tilt_factors(frame: FrameSettings):
    c = math.cos(math.radians(frame.tilt_deg))
    return (1.0, c) if frame.tilt_axis == "x" else (c, 1.0)


def apparent_angle(true_deg, frame: FrameSettings | None = None):
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
    """
    frame = frame or FrameSettings()
    fx, fy = _tilt_factors(frame)
    t = np.radians(np.asarray(true_deg, float))
    return fold_axial(np.degrees(np.arctan2(np.sin(t) * fy, np.cos(t) * fx)))


def true_angle(apparent_deg, frame: FrameSettings | None = None):
    """True image-frame axial angle from the apparent angle seen under stage tilt (inverse of :func:`apparent_angle`)."""
    frame = frame or FrameSettings()
    fx, fy = _tilt_factors(frame)
    a = np.radians(np.asarray(apparent_deg, float))
    # (cos a, sin a) ~ (t_x fx, t_y fy)  ->  t ~ (cos a / fx, sin a / fy); multiply by fx*fy > 0.
    return fold_axial(np.degrees(np.arctan2(np.sin(a) * fx, np.cos(a) * fy)))
