"""Rotation conversions shared by orientations and crystal symmetry: quaternions, axis-angle
pairs, matrix checks, and applying ``g`` to vectors.

The matrices are passive orientation matrices ``g`` with ``v_crystal = g @ v_sample`` (see
:mod:`tracefit.crystal.orientation` for the Bunge angles and the
:class:`~tracefit.crystal.orientation.Orientation` type built on these functions).

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

import numpy as np
from numpy.typing import ArrayLike

from tracefit.errors import TracefitInputError, real_array, real_number

__all__ = [
    "from_quaternion",
    "to_quaternion",
    "from_matrix",
    "from_axis_angle",
    "to_axis_angle",
    "crystal_to_sample",
    "sample_to_crystal",
]


# ------------------------------------------------------------------ quaternions
def from_quaternion(q: ArrayLike) -> np.ndarray:
    """Orientation matrices from unit quaternions (Rowenhorst et al. 2015, P = +1).

    Parameters
    ----------
    q : array_like, shape (4,) or (..., 4)
        ``(q0, q1, q2, q3)``, scalar first. Normalised here; zero length is rejected.

    Returns
    -------
    ndarray, shape (3, 3) or (..., 3, 3)
        ``g`` with ``v_crystal = g @ v_sample``.

    Raises
    ------
    TracefitInputError
        Not four components, non-finite, or zero length.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> c = np.cos(np.radians(15.0))
    >>> np.round(from_quaternion([c, 0, 0, -np.sqrt(1 - c * c)]), 6).tolist() == np.round(from_euler([30, 0, 0]), 6).tolist()
    True
    """
    q = np.asarray(q, dtype=float)
    if q.shape[-1:] != (4,):
        raise TracefitInputError(f"q must have four components (q0, q1, q2, q3) per orientation, got shape {q.shape}")
    if not np.all(np.isfinite(q)):
        raise TracefitInputError("q components must be finite numbers")
    norm = np.linalg.norm(q, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError("a zero quaternion describes no rotation; expected q = (q0, q1, q2, q3) with non-zero length")
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


def to_quaternion(g: ArrayLike) -> np.ndarray:
    """Unit quaternions ``(q0, q1, q2, q3)`` with ``q0 >= 0`` of orientation matrices (P = +1).

    Uses the largest of the four ``|q_i|`` candidates from the matrix trace terms, so it is
    well conditioned for every rotation angle.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (..., 3, 3)
        Orientation matrices.

    Returns
    -------
    ndarray, shape (4,) or (..., 4)

    Raises
    ------
    TracefitInputError
        ``g`` is not made of 3 x 3 matrices.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> (np.round(to_quaternion(from_euler([30, 0, 0])), 4) + 0.0).tolist()
    [0.9659, 0.0, 0.0, -0.2588]
    """
    g = _matrix_array(g, "g")
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
def from_matrix(m: ArrayLike, tol: float = 1e-3) -> np.ndarray:
    """Validate orientation matrices ``g`` (sample -> crystal) and clean them to exact rotations.

    Parameters
    ----------
    m : array_like, shape (3, 3) or (..., 3, 3)
        Row-major, ``v_crystal = m @ v_sample``.
    tol : float
        Largest accepted entry of ``|m m^T - I|`` (typed-in matrices with 4 decimals pass).

    Returns
    -------
    ndarray, shape (3, 3) or (..., 3, 3)
        The nearest exact rotations (polar decomposition).

    Raises
    ------
    TracefitInputError
        Wrong shape, non-finite, not orthonormal within ``tol`` (the deviation is shown) or
        improper (determinant -1: a mirror, not a rotation).

    Examples
    --------
    >>> np.round(from_matrix([[0, 1, 0], [-1, 0, 0], [0, 0, 1.0001]]), 3).tolist()
    [[0.0, 1.0, 0.0], [-1.0, 0.0, 0.0], [0.0, 0.0, 1.0]]
    """
    m = real_array(m, "matrix", finite=False)
    tol = real_number(tol, "tol")
    if tol < 0:
        raise TracefitInputError(f"tol must be >= 0, got {tol!r}")
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


def from_axis_angle(axis: ArrayLike, angle_deg: ArrayLike) -> np.ndarray:
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

    Returns
    -------
    ndarray, shape (3, 3) or (..., 3, 3)

    Raises
    ------
    TracefitInputError
        Not three axis components, non-finite values, or a zero axis.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> np.allclose(from_axis_angle([0, 0, -1], 30), from_euler([30, 0, 0]))
    True
    """
    n = np.asarray(axis, dtype=float)
    w = np.asarray(angle_deg, dtype=float)
    if n.shape[-1:] != (3,):
        raise TracefitInputError(f"axis must have three components, got shape {n.shape}")
    if not (np.all(np.isfinite(n)) and np.all(np.isfinite(w))):
        raise TracefitInputError("axis and angle_deg must be finite numbers")
    norm = np.linalg.norm(n, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError("axis has zero length; expected a direction such as 0,0,1")
    n = n / norm
    h = np.radians(w)[..., None] / 2.0
    q = np.concatenate([np.cos(h), n * np.sin(h)], axis=-1)
    return from_quaternion(q)


def to_axis_angle(g: ArrayLike) -> tuple[np.ndarray, np.ndarray]:
    """Axis-angle pairs (Rowenhorst, P = +1) of orientation matrices.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (..., 3, 3)

    Returns
    -------
    axis : ndarray, shape (3,) or (..., 3)
        Unit axes; ``[0, 0, 1]`` for a zero rotation.
    angle_deg : ndarray, shape () or (...)
        Angles in [0, 180] degrees.

    Raises
    ------
    TracefitInputError
        ``g`` is not made of 3 x 3 matrices.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> axis, angle = to_axis_angle(from_euler([30, 0, 0]))
    >>> (np.round(axis, 6) + 0.0).tolist(), round(float(angle), 6)
    ([0.0, 0.0, -1.0], 30.0)
    """
    q = to_quaternion(g)
    s = np.linalg.norm(q[..., 1:], axis=-1)
    ang = np.degrees(2.0 * np.arctan2(s, q[..., 0]))
    safe = np.where(s[..., None] > 1e-12, q[..., 1:] / np.maximum(s[..., None], 1e-300), [0.0, 0.0, 1.0])
    return safe, ang


# ------------------------------------------------------------------ applying g
def crystal_to_sample(g: ArrayLike, v_crystal: ArrayLike) -> np.ndarray:
    """Crystal-frame vectors in sample coordinates, ``v_sample = g.T @ v_crystal``.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (N, 3, 3)
    v_crystal : array_like, shape (3,) or (M, 3)

    Returns
    -------
    ndarray
        (3,) or (M, 3) for one ``g``; (N, 3) or (N, M, 3) for many.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> (np.round(crystal_to_sample(from_euler([90, 0, 0]), [0.0, -1.0, 0.0]), 6) + 0.0).tolist()
    [1.0, 0.0, 0.0]
    """
    g = np.asarray(g, float)
    v = np.asarray(v_crystal, float)
    # v_s = g^T v_c, row-vector form: v_s = v_c @ g
    return np.einsum("...ij,mi->...mj", g, np.atleast_2d(v)) if v.ndim > 1 else np.einsum("...ij,i->...j", g, v)


def sample_to_crystal(g: ArrayLike, v_sample: ArrayLike) -> np.ndarray:
    """Sample-frame vectors in crystal coordinates, ``v_crystal = g @ v_sample``.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (N, 3, 3)
    v_sample : array_like, shape (3,) or (M, 3)

    Returns
    -------
    ndarray
        Broadcast like :func:`crystal_to_sample`.

    Examples
    --------
    >>> from tracefit.crystal import from_euler
    >>> np.round(sample_to_crystal(from_euler([90, 0, 0]), [1.0, 0.0, 0.0]), 6).tolist()
    [0.0, -1.0, 0.0]
    """
    g = np.asarray(g, float)
    v = np.asarray(v_sample, float)
    return np.einsum("...ij,mj->...mi", g, v) if v.ndim > 1 else np.einsum("...ij,j->...i", g, v)


def _matrix_array(g, name: str) -> np.ndarray:
    g = real_array(g, name, finite=False)
    if g.shape[-2:] != (3, 3):
        raise TracefitInputError(f"{name} must hold 3 x 3 orientation matrices, shape (..., 3, 3), got {g.shape}")
    return g


