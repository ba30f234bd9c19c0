"""Crystal orientations as rotation matrices ``g`` that map sample to crystal coordinates.

Convention (fixed once in ``docs/conventions.md``)
--------------------------------------------------
* ``v_crystal = g @ v_sample``; ``g`` has shape ``(3, 3)`` or ``(N, 3, 3)``.
* Bunge Euler angles ``(phi1, Phi, phi2)`` in degrees, passive:
  ``g = Rz(phi2) Rx(Phi) Rz(phi1)`` with passive (coordinate) rotation matrices. The same
  orientation as an active crystal -> sample rotation is ``R = g.T =
  scipy.spatial.transform.Rotation.from_euler("ZXZ", (phi1, Phi, phi2), degrees=True)``.
* Quaternions ``q = (q0, q1, q2, q3)``, scalar first, ``q0 >= 0``, and every conversion follow
  Rowenhorst et al. (2015), Modelling Simul. Mater. Sci. Eng. 23, 083501, with the sign
  convention **P = +1**. With P = +1 the quaternion algebra is the ordinary Hamilton one and
  ``q`` is the quaternion of the matrix ``g`` itself: ``v_crystal = q v_sample q*``.
* Axis-angle pairs ``(n, omega)`` follow the same paper: ``q = (cos(omega/2), n sin(omega/2))``,
  so ``g`` turns *coordinates* by ``omega`` about ``n``; the crystal axes are the sample axes
  turned by ``-omega``. Hence Bunge ``(30, 0, 0)`` equals the pair ``([0, 0, -1], 30)``. This
  is what orix does too.
"""

from __future__ import annotations

import math
import re
import warnings

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = [
    "from_euler",
    "to_euler",
    "from_quaternion",
    "to_quaternion",
    "from_matrix",
    "from_axis_angle",
    "to_axis_angle",
    "from_two_directions",
    "parse_euler",
    "parse_vector",
    "crystal_to_sample",
    "sample_to_crystal",
    "looks_like_radians",
]

_TWO_PI = 2.0 * math.pi


# ------------------------------------------------------------------ Euler angles
def looks_like_radians(euler_deg) -> bool:
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


def from_euler(euler_deg, warn_radians: bool = True) -> np.ndarray:
    """Orientation matrices from Bunge Euler angles.

    Parameters
    ----------
    euler_deg : array_like, shape (3,) or (..., 3)
        ``(phi1, Phi, phi2)`` in degrees.
    warn_radians : bool
        Warn (``warnings.warn``) when the values look like radians, see
        :func:`looks_like_radians`.

    Returns
    -------
    ndarray, shape (3, 3) or (..., 3, 3)
        ``g`` with ``v_crystal = g @ v_sample``.
    """
    e = np.asarray(euler_deg, dtype=float)
    if e.shape[-1:] != (3,):
        raise TracefitInputError(f"Bunge Euler angles need three values (phi1, Phi, phi2), got shape {e.shape}")
    if not np.all(np.isfinite(e)):
        raise TracefitInputError("Euler angles must be finite numbers (degrees)")
    if warn_radians and looks_like_radians(e):
        warnings.warn(
            "the Euler angles look like radians (all small, not whole numbers); tracefit reads degrees",
            stacklevel=2,
        )
    p1, P, p2 = (np.radians(e[..., i]) for i in range(3))
    c1, s1, c, s, c2, s2 = np.cos(p1), np.sin(p1), np.cos(P), np.sin(P), np.cos(p2), np.sin(p2)
    g = np.empty(e.shape[:-1] + (3, 3))
    g[..., 0, 0] = c1 * c2 - s1 * s2 * c
    g[..., 0, 1] = s1 * c2 + c1 * s2 * c
    g[..., 0, 2] = s2 * s
    g[..., 1, 0] = -c1 * s2 - s1 * c2 * c
    g[..., 1, 1] = -s1 * s2 + c1 * c2 * c
    g[..., 1, 2] = c2 * s
    g[..., 2, 0] = s1 * s
    g[..., 2, 1] = -c1 * s
    g[..., 2, 2] = c
    return g


def to_euler(g) -> np.ndarray:
    """Bunge Euler angles (degrees) of orientation matrices.

    Ranges: ``0 <= phi1 < 360``, ``0 <= Phi <= 180``, ``0 <= phi2 < 360``. When ``Phi`` is 0 or
    180 only ``phi1 +- phi2`` is defined; then ``phi2 = 0``.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (..., 3, 3)

    Returns
    -------
    ndarray, shape (3,) or (..., 3)
    """
    g = np.asarray(g, dtype=float)
    _check_shape(g)
    sP = np.hypot(g[..., 2, 0], g[..., 2, 1])
    P = np.arctan2(sP, g[..., 2, 2])  # better conditioned than arccos near 0 and 180
    deg = sP < 1e-10
    p1 = np.where(deg, np.arctan2(g[..., 0, 1], g[..., 0, 0]), np.arctan2(g[..., 2, 0], -g[..., 2, 1]))
    p2 = np.where(deg, 0.0, np.arctan2(g[..., 0, 2], g[..., 1, 2]))
    out = np.stack([np.degrees(p1) % 360.0, np.degrees(P), np.degrees(p2) % 360.0], axis=-1)
    out[..., 0] = np.where(out[..., 0] >= 360.0, 0.0, out[..., 0])
    out[..., 2] = np.where(out[..., 2] >= 360.0, 0.0, out[..., 2])
    return out


# ------------------------------------------------------------------ quaternions
def from_quaternion(q) -> np.ndarray:
    """Orientation matrices from unit quaternions (Rowenhorst et al. 2015, P = +1).

    Parameters
    ----------
    q : array_like, shape (4,) or (..., 4)
        ``(q0, q1, q2, q3)``, scalar first. Normalised here; zero length is rejected.
    """
    q = np.asarray(q, dtype=float)
    if q.shape[-1:] != (4,):
        raise TracefitInputError(f"a quaternion needs four values (q0, q1, q2, q3), got shape {q.shape}")
    if not np.all(np.isfinite(q)):
        raise TracefitInputError("quaternion components must be finite numbers")
    norm = np.linalg.norm(q, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError("a zero quaternion describes no rotation; expected (q0, q1, q2, q3) with non-zero length")
    q = q / norm
    q0, q1, q2, q3 = (q[..., i] for i in range(4))
    qq = q0 * q0 - (q1 * q1 + q2 * q2 + q3 * q3)
    P = 1.0
    g = np.empty(q.shape[:-1] + (3, 3))
    g[..., 0, 0] = qq + 2 * q1 * q1
    g[..., 0, 1] = 2 * (q1 * q2 - P * q0 * q3)
    g[..., 0, 2] = 2 * (q1 * q3 + P * q0 * q2)
    g[..., 1, 0] = 2 * (q1 * q2 + P * q0 * q3)
    g[..., 1, 1] = qq + 2 * q2 * q2
    g[..., 1, 2] = 2 * (q2 * q3 - P * q0 * q1)
    g[..., 2, 0] = 2 * (q1 * q3 - P * q0 * q2)
    g[..., 2, 1] = 2 * (q2 * q3 + P * q0 * q1)
    g[..., 2, 2] = qq + 2 * q3 * q3
    return g


def to_quaternion(g) -> np.ndarray:
    """Unit quaternions ``(q0, q1, q2, q3)`` with ``q0 >= 0`` of orientation matrices (P = +1).

    Uses the largest of the four ``|q_i|`` candidates from the matrix trace terms, so it is
    well conditioned for every rotation angle.
    """
    g = np.asarray(g, dtype=float)
    _check_shape(g)
    t = np.stack(
        [
            1 + g[..., 0, 0] + g[..., 1, 1] + g[..., 2, 2],
            1 + g[..., 0, 0] - g[..., 1, 1] - g[..., 2, 2],
            1 - g[..., 0, 0] + g[..., 1, 1] - g[..., 2, 2],
            1 - g[..., 0, 0] - g[..., 1, 1] + g[..., 2, 2],
        ],
        axis=-1,
    )
    k = np.argmax(t, axis=-1)
    r = 0.5 * np.sqrt(np.maximum(np.take_along_axis(t, k[..., None], -1)[..., 0], 0.0))  # = |q_k|
    f = 0.25 / r
    a = g[..., 2, 1] - g[..., 1, 2]  # 4 q0 q1 (P = +1)
    b = g[..., 0, 2] - g[..., 2, 0]  # 4 q0 q2
    c = g[..., 1, 0] - g[..., 0, 1]  # 4 q0 q3
    d = g[..., 0, 1] + g[..., 1, 0]  # 4 q1 q2
    e = g[..., 0, 2] + g[..., 2, 0]  # 4 q1 q3
    h = g[..., 1, 2] + g[..., 2, 1]  # 4 q2 q3
    cand = np.stack(
        [
            np.stack([r, a * f, b * f, c * f], -1),
            np.stack([a * f, r, d * f, e * f], -1),
            np.stack([b * f, d * f, r, h * f], -1),
            np.stack([c * f, e * f, h * f, r], -1),
        ],
        axis=-2,
    )
    q = np.take_along_axis(cand, k[..., None, None], -2)[..., 0, :]
    q = np.where(q[..., :1] < 0, -q, q)
    return q / np.linalg.norm(q, axis=-1, keepdims=True)


# ------------------------------------------------------------------ matrices, axis-angle
def from_matrix(m, tol: float = 1e-3) -> np.ndarray:
    """Validate orientation matrices ``g`` (sample -> crystal) and clean them to exact rotations.

    Parameters
    ----------
    m : array_like, shape (3, 3) or (..., 3, 3)
        Row-major, ``v_crystal = m @ v_sample``.
    tol : float
        Largest accepted entry of ``|m m^T - I|`` (typed-in matrices with 4 decimals pass).

    Raises
    ------
    TracefitInputError
        Wrong shape, non-finite, not orthonormal within ``tol`` (the deviation is shown) or
        improper (determinant -1: a mirror, not a rotation).
    """
    m = np.asarray(m, dtype=float)
    if m.shape[-2:] != (3, 3):
        raise TracefitInputError(f"an orientation matrix must be 3 x 3 (nine numbers), got shape {m.shape}")
    if not np.all(np.isfinite(m)):
        raise TracefitInputError("orientation matrix entries must be finite numbers")
    dev = np.abs(m @ np.swapaxes(m, -1, -2) - np.eye(3)).max(axis=(-2, -1))
    worst = float(np.max(dev)) if dev.size else 0.0
    if worst > tol:
        raise TracefitInputError(
            f"the orientation matrix is not orthonormal: max |M M^T - I| = {worst:.3g} (tolerance {tol:g}); "
            "expected the rows to be unit vectors at right angles"
        )
    det = np.linalg.det(m)
    if np.any(det < 0):
        raise TracefitInputError(
            f"the orientation matrix is improper (determinant {float(np.min(det)):.3f}): it contains a mirror; "
            "expected a proper rotation with determinant +1"
        )
    # Nearest exact rotation (polar decomposition) so later algebra stays clean.
    u, _, vt = np.linalg.svd(m)
    return u @ vt


def from_axis_angle(axis, angle_deg) -> np.ndarray:
    """Orientation matrices from axis-angle pairs (Rowenhorst et al. 2015, P = +1).

    ``q = (cos(omega/2), n sin(omega/2))`` and ``g`` is its matrix: ``g`` turns coordinates by
    ``omega`` about ``n`` (right hand), i.e. the crystal axes are the sample axes turned by
    ``-omega``. Bunge ``(phi1, 0, 0)`` is the pair ``([0, 0, -1], phi1)``.

    Parameters
    ----------
    axis : array_like, shape (3,) or (..., 3)
        Rotation axis in sample coordinates (normalised here; zero is rejected).
    angle_deg : float or array_like, shape () or (...)
        Rotation angle in degrees.
    """
    n = np.asarray(axis, dtype=float)
    w = np.asarray(angle_deg, dtype=float)
    if n.shape[-1:] != (3,):
        raise TracefitInputError(f"a rotation axis needs three components, got shape {n.shape}")
    if not (np.all(np.isfinite(n)) and np.all(np.isfinite(w))):
        raise TracefitInputError("axis and angle must be finite numbers")
    norm = np.linalg.norm(n, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError("the rotation axis has zero length; expected a direction such as 0,0,1")
    n = n / norm
    h = np.radians(w)[..., None] / 2.0
    q = np.concatenate([np.cos(h), n * np.sin(h)], axis=-1)
    return from_quaternion(q)


def to_axis_angle(g):
    """Axis-angle pairs (Rowenhorst, P = +1) of orientation matrices: ``(axis (...,3), angle_deg (...))``.

    Angles lie in [0, 180]; for a zero rotation the axis is ``[0, 0, 1]``.
    """
    q = to_quaternion(g)
    s = np.linalg.norm(q[..., 1:], axis=-1)
    ang = np.degrees(2.0 * np.arctan2(s, q[..., 0]))
    safe = np.where(s[..., None] > 1e-12, q[..., 1:] / np.maximum(s[..., None], 1e-300), [0.0, 0.0, 1.0])
    return safe, ang


def from_two_directions(lattice, crystal_dir1, sample_axis1, crystal_dir2, sample_axis2, tol_deg: float = 1.0) -> np.ndarray:
    """Orientation from two crystal directions and the sample axes they lie along.

    The first pair is met exactly; the second only fixes the turn about the first (it is
    orthogonalised). If the angle between the two crystal directions differs from that
    between the two sample axes by more than ``tol_deg``, a warning says so.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
        Converts ``[uvw]`` / ``[uvtw]`` to Cartesian crystal vectors (hexagonal works).
    crystal_dir1, crystal_dir2 : sequence of 3 or 4 numbers
        Direction indices, e.g. ``(0, 0, 1)`` or ``(2, -1, -1, 0)``.
    sample_axis1, sample_axis2 : sequence of 3 numbers or {"x", "y", "z", "-x", ...}
        Sample-frame vectors.

    Returns
    -------
    ndarray, shape (3, 3)
        ``g`` with ``g @ sample_axis1 = crystal_dir1`` (both as unit vectors).
    """
    c1 = np.asarray(lattice.direction_vector(crystal_dir1), float)
    c2 = np.asarray(lattice.direction_vector(crystal_dir2), float)
    s1 = _unit(_axis_vector(sample_axis1), "first sample axis")
    s2 = _unit(_axis_vector(sample_axis2), "second sample axis")
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
        raise TracefitInputError(f"the {what} has zero length")
    return v / n


_AXES = {"x": (1.0, 0.0, 0.0), "y": (0.0, 1.0, 0.0), "z": (0.0, 0.0, 1.0)}


def _axis_vector(a) -> np.ndarray:
    if isinstance(a, str):
        return parse_vector(a, "sample axis")
    v = np.asarray(a, float)
    if v.shape != (3,):
        raise TracefitInputError(f"a sample axis needs three components, got shape {v.shape}")
    return v


# ------------------------------------------------------------------ applying g
def crystal_to_sample(g, v_crystal) -> np.ndarray:
    """Crystal-frame vectors (M, 3) in sample coordinates: (M, 3) for one g, (N, M, 3) for (N, 3, 3)."""
    g = np.asarray(g, float)
    v = np.asarray(v_crystal, float)
    # v_s = g^T v_c, row-vector form: v_s = v_c @ g
    return np.einsum("...ij,mi->...mj", g, np.atleast_2d(v)) if v.ndim > 1 else np.einsum("...ij,i->...j", g, v)


def sample_to_crystal(g, v_sample) -> np.ndarray:
    """Sample-frame vectors in crystal coordinates (v_c = g v_s), broadcasting like :func:`crystal_to_sample`."""
    g = np.asarray(g, float)
    v = np.asarray(v_sample, float)
    return np.einsum("...ij,mj->...mi", g, v) if v.ndim > 1 else np.einsum("...ij,j->...i", g, v)


# ------------------------------------------------------------------ text input
_NUM = r"[-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?"


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
    """Bunge Euler angles from text ``"phi1,Phi,phi2"`` (degrees; commas or spaces)."""
    return _floats(text, 3, "Euler angles", "'10,20,30' (phi1, Phi, phi2 in degrees)")


def parse_quaternion(text: str) -> np.ndarray:
    """Quaternion ``"q0,q1,q2,q3"`` (scalar first)."""
    return _floats(text, 4, "quaternion", "'1,0,0,0' (q0 scalar first)")


def parse_matrix(text: str) -> np.ndarray:
    """Nine numbers, row by row, as a 3 x 3 matrix."""
    return _floats(text, 9, "orientation matrix", "'1,0,0,0,1,0,0,0,1' (nine numbers, row by row)").reshape(3, 3)


def parse_axis_angle(text: str):
    """``"n1,n2,n3,angle"``: axis (sample frame) and angle in degrees."""
    v = _floats(text, 4, "axis-angle", "'0,0,1,30' (axis x,y,z then angle in degrees)")
    return v[:3], float(v[3])


def parse_vector(text: str, what: str = "vector") -> np.ndarray:
    """A sample-frame vector: ``x``, ``-y``, ``+z`` or three numbers ``1,0,0``."""
    t = text.strip().lower().replace(" ", "")
    sign = 1.0
    if t[:1] in "+-" and t[1:] in _AXES:
        sign, t = (-1.0 if t[0] == "-" else 1.0), t[1:]
    if t in _AXES:
        return sign * np.array(_AXES[t]) + 0.0
    return _floats(text, 3, what, "'x', '-z' or '1,0,0'")


def _check_shape(g: np.ndarray) -> None:
    if g.shape[-2:] != (3, 3):
        raise TracefitInputError(f"orientation matrices must have shape (..., 3, 3), got {g.shape}")
