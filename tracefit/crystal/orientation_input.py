"""Orientations from user input: text (Euler angles, quaternions, matrices, axis-angle pairs,
sample axes) and two crystal directions laid along two sample axes.

The conventions (passive Bunge, ``v_crystal = g v_sample``) are those of
:mod:`tracefit.crystal.orientation`; this module only reads and aligns.
"""

from __future__ import annotations

import math
import re
import warnings
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from tracefit.errors import TracefitInputError

if TYPE_CHECKING:  # names used in annotations only
    from tracefit.crystal.lattice import Lattice

__all__ = [
    "looks_like_radians",
    "from_two_directions",
    "parse_euler",
    "parse_quaternion",
    "parse_matrix",
    "parse_axis_angle",
    "parse_vector",
]

_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"
_AXES = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}


_TWO_PI = 2.0 * math.pi


# ------------------------------------------------------------------ radians or degrees
def looks_like_radians(euler_deg: ArrayLike) -> bool:
    """Whether Bunge angles given as degrees were probably meant as radians.

    Rule: every triplet lies inside the radian ranges (``|phi1|, |phi2| <= 2 pi``,
    ``|Phi| <= pi``), not all values are zero, and at least one value is not a whole
    number. A single set like ``(0.52, 0.79, 0)`` is flagged; ``(0, 45, 0)`` (outside the
    range) and ``(1, 2, 3)`` (whole numbers, plausible degree input) are not. For many
    orientations, all of them must fit, so a degree dataset with a few small angles passes.

    Parameters
    ----------
    euler_deg : array_like, shape (3,) or (N, 3)
        Angles as received, nominally degrees.

    Returns
    -------
    bool

    Examples
    --------
    >>> looks_like_radians([0.52, 0.79, 0.0]), looks_like_radians([0, 45, 0])
    (True, False)
    """
    e = np.asarray(euler_deg, dtype=float).reshape(-1, 3)
    if e.size == 0 or not np.all(np.isfinite(e)):
        return False
    tol = 1e-9
    in_range = (
        np.all(np.abs(e[:, 0]) <= _TWO_PI + tol)
        and np.all(np.abs(e[:, 1]) <= math.pi + tol)
        and np.all(np.abs(e[:, 2]) <= _TWO_PI + tol)
    )
    not_zero = np.any(e != 0.0)
    fractional = np.any(np.abs(e - np.round(e)) > 1e-9)
    return bool(in_range and not_zero and fractional)


# ------------------------------------------------------------------ two directions
def from_two_directions(lattice: Lattice, crystal_dir1: Sequence[int], sample_axis1: str | ArrayLike, crystal_dir2: Sequence[int], sample_axis2: str | ArrayLike, tol_deg: float = 1.0) -> np.ndarray:
    """Orientation from two crystal directions and the sample axes they lie along.

    The first pair is met exactly; the second only fixes the turn about the first (it is
    orthogonalised). If the angle between the two crystal directions differs from that
    between the two sample axes by more than ``tol_deg``, a warning says so.

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice
        Converts ``[uvw]`` / ``[uvtw]`` to Cartesian crystal vectors (hexagonal works).
    crystal_dir1, crystal_dir2 : sequence of 3 or 4 numbers
        Direction indices, e.g. ``(0, 0, 1)`` or ``(2, -1, -1, 0)``.
    sample_axis1, sample_axis2 : sequence of 3 numbers or {"x", "y", "z", "-x", ...}
        Sample-frame vectors.
    tol_deg : float
        Largest accepted mismatch (degrees) of the two angles before a warning.

    Returns
    -------
    ndarray, shape (3, 3)
        ``g`` with ``g @ sample_axis1 = crystal_dir1`` (both as unit vectors).

    Raises
    ------
    TracefitInputError
        Parallel directions or axes, zero-length axes, unreadable axes.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> g = from_two_directions(Lattice.fcc(), (0, 0, 1), "z", (1, 0, 0), "x")
    >>> np.round(g, 6).tolist()
    [[1.0, 0.0, 0.0], [0.0, 1.0, 0.0], [0.0, 0.0, 1.0]]
    """
    c1 = np.asarray(lattice.direction_vector(crystal_dir1), float)
    c2 = np.asarray(lattice.direction_vector(crystal_dir2), float)
    s1 = _unit(_axis_vector(sample_axis1), "sample_axis1")
    s2 = _unit(_axis_vector(sample_axis2), "sample_axis2")
    tc, ts = _triad(c1, c2, "crystal directions"), _triad(s1, s2, "sample axes")
    ang_c = math.degrees(math.acos(float(np.clip(c1 @ c2, -1, 1))))
    ang_s = math.degrees(math.acos(float(np.clip(s1 @ s2, -1, 1))))
    if abs(ang_c - ang_s) > tol_deg:
        warnings.warn(
            f"the two crystal directions are {ang_c:.2f} deg apart but the two sample axes {ang_s:.2f} deg; "
            "the first pair is kept exactly and the second only sets the turn about it",
            stacklevel=2,
        )
    return tc @ ts.T


def _triad(v1, v2, what: str) -> np.ndarray:
    e3 = np.cross(v1, v2)
    s = np.linalg.norm(e3)
    if s < 1e-6:
        raise TracefitInputError(f"the two {what} are parallel, so they do not fix an orientation; give two different directions")
    e3 = e3 / s
    return np.stack([v1, e3, np.cross(v1, e3)], axis=-1)


def _unit(v, what: str) -> np.ndarray:
    v = np.asarray(v, float)
    n = np.linalg.norm(v)
    if not np.isfinite(n) or n < 1e-12:
        raise TracefitInputError(f"{what} has zero length")
    return v / n


def _axis_vector(a) -> np.ndarray:
    if isinstance(a, str):
        return parse_vector(a, "sample axis")
    v = np.asarray(a, float)
    if v.shape != (3,):
        raise TracefitInputError(f"a sample axis needs three components, got shape {v.shape}")
    return v


# ------------------------------------------------------------------ text input
def _floats(text: str, n: int, what: str, example: str) -> np.ndarray:
    if not isinstance(text, str) or not text.strip():
        raise TracefitInputError(f"empty {what}; expected {n} numbers like {example}")
    parts = [p for p in re.split(r"[,\s;]+", text.strip().strip("()[]")) if p]
    if len(parts) != n or not all(re.fullmatch(_NUM, p) for p in parts):
        raise TracefitInputError(f"cannot read {what} {text!r}; expected {n} numbers like {example}")
    v = np.array([float(p) for p in parts])
    if not np.all(np.isfinite(v)):
        raise TracefitInputError(f"{what} {text!r} has a value that is not finite")
    return v


def parse_euler(text: str) -> np.ndarray:
    """Bunge Euler angles from text ``"phi1,Phi,phi2"`` (degrees; commas or spaces).

    Parameters
    ----------
    text : str
        Three numbers.

    Returns
    -------
    ndarray, shape (3,)
        ``(phi1, Phi, phi2)`` in degrees.

    Raises
    ------
    TracefitInputError
        Not exactly three finite numbers.

    Examples
    --------
    >>> parse_euler("10, 20 30").tolist()
    [10.0, 20.0, 30.0]
    """
    return _floats(text, 3, "Euler angles", "'10,20,30' (phi1, Phi, phi2 in degrees)")


def parse_quaternion(text: str) -> np.ndarray:
    """Quaternion ``"q0,q1,q2,q3"`` (scalar first).

    Parameters
    ----------
    text : str
        Four numbers.

    Returns
    -------
    ndarray, shape (4,)
        As written (not normalised).

    Raises
    ------
    TracefitInputError
        Not exactly four finite numbers.

    Examples
    --------
    >>> parse_quaternion("1,0,0,0").tolist()
    [1.0, 0.0, 0.0, 0.0]
    """
    return _floats(text, 4, "quaternion", "'1,0,0,0' (q0 scalar first)")


def parse_matrix(text: str) -> np.ndarray:
    """Nine numbers, row by row, as a 3 x 3 matrix.

    Parameters
    ----------
    text : str
        Nine numbers, row-major.

    Returns
    -------
    ndarray, shape (3, 3)

    Raises
    ------
    TracefitInputError
        Not exactly nine finite numbers.

    Examples
    --------
    >>> parse_matrix("1 0 0 0 1 0 0 0 1").shape
    (3, 3)
    """
    return _floats(text, 9, "orientation matrix", "'1,0,0,0,1,0,0,0,1' (nine numbers, row by row)").reshape(3, 3)


def parse_axis_angle(text: str) -> tuple[np.ndarray, float]:
    """``"n1,n2,n3,angle"``: axis (sample frame) and angle in degrees.

    Parameters
    ----------
    text : str
        Four numbers.

    Returns
    -------
    axis : ndarray, shape (3,)
    angle_deg : float

    Raises
    ------
    TracefitInputError
        Not exactly four finite numbers.

    Examples
    --------
    >>> axis, angle = parse_axis_angle("0,0,1,30")
    >>> axis.tolist(), angle
    ([0.0, 0.0, 1.0], 30.0)
    """
    v = _floats(text, 4, "axis-angle", "'0,0,1,30' (axis x,y,z then angle in degrees)")
    return v[:3], float(v[3])


def parse_vector(text: str, what: str = "vector") -> np.ndarray:
    """A sample-frame vector: ``x``, ``-y``, ``+z`` or three numbers ``1,0,0``.

    Parameters
    ----------
    text : str
        Axis name (optionally signed) or three numbers.
    what : str
        Name used in error messages.

    Returns
    -------
    ndarray, shape (3,)
        Not normalised.

    Raises
    ------
    TracefitInputError
        Neither an axis name nor three numbers.

    Examples
    --------
    >>> parse_vector("-y").tolist()
    [0.0, -1.0, 0.0]
    >>> parse_vector("1,1,0").tolist()
    [1.0, 1.0, 0.0]
    """
    if not isinstance(text, str):
        raise TracefitInputError(f"{what} must be text such as 'x', '-z' or '1,0,0', got {type(text).__name__}")
    t = text.strip().lower().replace(" ", "")
    sign = 1.0
    if t[:1] in "+-" and t[1:] in _AXES:
        sign, t = (-1.0 if t[0] == "-" else 1.0), t[1:]
    if t in _AXES:
        return sign * np.array(_AXES[t]) + 0.0
    return _floats(text, 3, what, "'x', '-z' or '1,0,0'")
