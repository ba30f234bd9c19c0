"""Pixel geometry shared by the detector and the renderer (private to the package).

Points and directions are (column, row) pixel pairs, rows down. Image-frame *angles*
never appear here except through :mod:`tracefit.conventions`.

- line clipping to a pixel box (Liang-Barsky),
- working <-> full-resolution coordinates (the detector locates bands on a copy reduced
  by an integer factor ``f`` and fits them at full resolution; pixel centres map as
  ``full = (working + 0.5) * f - 0.5``),
- the straight line of a Hough cell (skimage convention ``rho = col cos t + row sin t``),
- direction and normal of an image-frame angle.
"""

from __future__ import annotations

import math

import numpy as np

from tracefit.conventions import angle_to_pixel_direction


def _clip_line_to_box(p, d, box):
    """Parameter range of the line ``p + t d`` inside a pixel box (Liang-Barsky).

    Parameters
    ----------
    p, d : pair of float
        A point and a direction of the line, (col, row) pixels.
    box : (c0, r0, c1, r1)
        Inclusive box bounds, pixels.

    Returns
    -------
    (float, float) or None
        ``(t_lo, t_hi)`` with ``t_lo < t_hi``, or None when the line misses the box.
    """
    c0, r0, c1, r1 = box
    t_lo, t_hi = -np.inf, np.inf
    for pp, dd, lo, hi in ((p[0], d[0], c0, c1), (p[1], d[1], r0, r1)):
        if abs(dd) < 1e-12:
            if pp < lo or pp > hi:
                return None
            continue
        a, b = (lo - pp) / dd, (hi - pp) / dd
        if a > b:
            a, b = b, a
        t_lo, t_hi = max(t_lo, a), min(t_hi, b)
    if t_hi <= t_lo:
        return None
    return t_lo, t_hi


def _segment_in_image(p, d, w, h, min_length=2.0):
    """``(t_lo, t_hi)`` of the line ``p + t d`` inside a ``w`` x ``h`` image, or None if shorter than ``min_length``."""
    seg = _clip_line_to_box(p, d, (0.0, 0.0, w - 1.0, h - 1.0))
    if seg is None or seg[1] - seg[0] < min_length:
        return None
    return seg


def _to_full(points_w, f):
    """Working-copy pixel coordinates to full resolution (reduction factor ``f``)."""
    return (points_w + 0.5) * f - 0.5


def _to_working(points_f, f):
    """Full-resolution pixel coordinates to the working copy (reduction factor ``f``)."""
    return (points_f + 0.5) / f - 0.5


def _hough_line(theta):
    """Unit normal and direction (col, row) of the Hough lines at normal angle ``theta`` (radians).

    The line of cell (rho, theta) passes through ``rho * normal`` along ``direction``.
    """
    normal = np.array([math.cos(theta), math.sin(theta)])
    direction = np.array([-math.sin(theta), math.cos(theta)])
    return normal, direction


def _direction_and_normal(angle_deg):
    """Unit direction of an image-frame angle and its normal, both as (col, row) arrays."""
    dc, dr = angle_to_pixel_direction(angle_deg)
    return np.array([dc, dr]), np.array([-dr, dc])
