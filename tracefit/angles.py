"""Image-frame angle conventions, in one place.

Image frame: x to the right, y *up* the screen. Angles are in degrees,
counterclockwise from +x, and axial: a line has no sense, so 0 <= angle < 180.
Pixel rows run *down*; this module is the only place where a (column, row)
direction becomes an image-frame angle.
"""

from __future__ import annotations

import numpy as np

__all__ = [
    "fold_axial",
    "axial_difference",
    "pixel_direction_angle",
    "pixel_endpoints_angle",
    "angle_to_pixel_direction",
    "axial_mean",
]


def fold_axial(angle_deg):
    """Fold angles onto the axial range [0, 180).

    Parameters
    ----------
    angle_deg : float or array_like
        Angle(s) in degrees, any range.

    Returns
    -------
    float or ndarray
        Equivalent axial angle(s) in degrees, 0 <= a < 180.
    """
    a = np.mod(np.asarray(angle_deg, dtype=float), 180.0)
    # mod can return exactly 180.0 for tiny negative inputs through rounding.
    a = np.where(a >= 180.0, a - 180.0, a)
    return float(a) if a.ndim == 0 else a


def axial_difference(a_deg, b_deg):
    """Signed smallest difference a - b between axial angles, in (-90, 90] degrees."""
    d = np.mod(np.asarray(a_deg, dtype=float) - np.asarray(b_deg, dtype=float) + 90.0, 180.0) - 90.0
    d = np.where(d <= -90.0, d + 180.0, d)
    return float(d) if d.ndim == 0 else d


def pixel_direction_angle(d_col, d_row):
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
    """
    return fold_axial(np.degrees(np.arctan2(-np.asarray(d_row, float), np.asarray(d_col, float))))


def pixel_endpoints_angle(col0, row0, col1, row1):
    """Axial image-frame angle of the line through two pixel points (col, row).

    Raises
    ------
    ValueError
        If the two points coincide (no direction).
    """
    dc = np.asarray(col1, float) - np.asarray(col0, float)
    dr = np.asarray(row1, float) - np.asarray(row0, float)
    if np.any(np.hypot(dc, dr) == 0):
        raise ValueError("the two endpoints coincide, so the line has no direction")
    return pixel_direction_angle(dc, dr)


def angle_to_pixel_direction(angle_deg):
    """Unit (d_col, d_row) pixel direction of an image-frame angle (inverse of the above)."""
    t = np.radians(np.asarray(angle_deg, float))
    return np.cos(t), -np.sin(t)


def axial_mean(angles_deg, weights=None):
    """Weighted mean of axial angles (angle doubling), in [0, 180) degrees."""
    t = np.radians(2.0 * np.asarray(angles_deg, float))
    w = np.ones_like(t) if weights is None else np.asarray(weights, float)
    return fold_axial(np.degrees(np.arctan2(np.sum(w * np.sin(t)), np.sum(w * np.cos(t)))) / 2.0)
