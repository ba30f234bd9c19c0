"""Schmid factors, resolved shear stress and activation stress.

Schmid's law (uniaxial load, unit axis ``l`` in crystal coordinates, unit plane normal ``n``,
unit shear direction ``d``): ``m = cos(phi) cos(lambda) = (l . n)(l . d)``. Under a stress
tensor ``sigma`` the resolved shear stress is ``tau = n . sigma . d``; for uniaxial stress
``sigma = s l l^T`` (``s > 0`` tension) it is ``tau = s m``.

Slip runs either way along ``d`` and is reported as ``|m|``. Twinning is polar: a twin forms
only when the resolved shear is positive along its twinning direction ``d``. tracefit
therefore reports a twin's Schmid factor **signed** in the sense of the load,
``m_twin = s (l . n)(l . d)`` with ``s = +1`` in tension and ``-1`` in compression: a twin
that cannot form under this load has ``schmid_factor <= 0`` (and no activation stress).
"""

from __future__ import annotations

import math

import numpy as np
from numpy.typing import ArrayLike
from collections.abc import Sequence

from tracefit.crystal import Orientation, as_orientation_matrix
from tracefit.errors import TracefitInputError, real_array

__all__ = [
    "schmid_factor",
    "resolved_shear",
    "stress_tensor",
    "reported_drive",
    "activation_stress",
    "crss_of",
]


def schmid_factor(load_crystal: ArrayLike, n: ArrayLike, d: ArrayLike) -> np.ndarray:
    """Signed Schmid factor ``m = (l . n)(l . d)`` = cos(phi) cos(lambda) (Schmid's law).

    Parameters
    ----------
    load_crystal : array_like, shape (3,) or (N, 3)
        Load axis in crystal coordinates (normalised here).
    n, d : array_like, shape (3,) or (M, 3)
        Plane normals and shear directions, crystal coordinates (normalised here).

    Returns
    -------
    ndarray, shape (), (M,), (N,) or (N, M)

    Raises
    ------
    TracefitInputError
        Not three components, zero length, or unpaired ``n`` and ``d``.

    Examples
    --------
    >>> round(float(schmid_factor([0, 0, 1], [1, 1, 1], [-1, 0, 1])), 4)
    0.4082
    """
    l = _unit_rows(load_crystal, "load axis")
    n = _unit_rows(n, "plane normal")
    d = _unit_rows(d, "shear direction")
    if n.shape != d.shape:
        raise TracefitInputError(f"plane normals and shear directions must pair up, got shapes {n.shape} and {d.shape}")
    if n.ndim == 1:
        return (l @ n) * (l @ d)
    return (l @ n.T) * (l @ d.T)


def _unit_rows(v, what: str) -> np.ndarray:
    v = np.asarray(v, float)
    if v.shape[-1:] != (3,):
        raise TracefitInputError(f"{what} must have 3 components, got shape {v.shape}")
    norm = np.linalg.norm(v, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise TracefitInputError(f"{what} has zero length")
    return v / norm


def reported_drive(drive: ArrayLike, modes: Sequence[str]) -> np.ndarray:
    """Drive as reported per system: ``|drive|`` for slip, the signed value for twins.

    Parameters
    ----------
    drive : array_like, shape (..., S)
        From :func:`resolved_drive`.
    modes : sequence of {"slip", "twin"}, length S

    Returns
    -------
    ndarray, shape (..., S)

    Examples
    --------
    >>> reported_drive([-0.3, -0.3], ["slip", "twin"]).tolist()
    [0.3, -0.3]
    """
    drive = np.asarray(drive, float)
    twin = np.array([m == "twin" for m in modes])
    return np.where(twin, drive, np.abs(drive))


def stress_tensor(stress: ArrayLike) -> np.ndarray:
    """A symmetric 3x3 stress tensor from (3, 3) or Voigt ``(s11, s22, s33, s23, s13, s12)``.

    Parameters
    ----------
    stress : array_like, shape (3, 3) or (6,)

    Returns
    -------
    ndarray, shape (3, 3)

    Raises
    ------
    TracefitInputError
        Wrong shape, non-finite or non-symmetric.

    Examples
    --------
    >>> stress_tensor([1, 2, 3, 4, 5, 6]).tolist()
    [[1.0, 6.0, 5.0], [6.0, 2.0, 4.0], [5.0, 4.0, 3.0]]
    """
    s = real_array(stress, "stress_mpa", finite=False)
    if s.shape == (6,):
        s11, s22, s33, s23, s13, s12 = s
        s = np.array([[s11, s12, s13], [s12, s22, s23], [s13, s23, s33]])
    if s.shape != (3, 3):
        raise TracefitInputError(f"stress must be 3 x 3 or six Voigt values (s11, s22, s33, s23, s13, s12), got shape {s.shape}")
    if not np.all(np.isfinite(s)):
        raise TracefitInputError("stress components must be finite numbers")
    if np.abs(s - s.T).max() > 1e-9 * max(1.0, np.abs(s).max()):
        raise TracefitInputError("the stress tensor is not symmetric; expected s_ij = s_ji")
    return s


def resolved_shear(stress_sample: ArrayLike, g: Orientation | ArrayLike, n: ArrayLike, d: ArrayLike) -> np.ndarray:
    """Resolved shear stress ``tau = n . sigma . d`` (signed), all in the sample frame.

    Parameters
    ----------
    stress_sample : array_like, shape (3, 3) or (6,)
        Stress in sample coordinates (any unit; ``tau`` has the same unit). Voigt order
        (s11, s22, s33, s23, s13, s12).
    g : Orientation or array_like, shape (3, 3) or (N, 3, 3)
        Orientation(s), ``v_crystal = g v_sample``.
    n, d : array_like, shape (3,) or (M, 3)
        Plane normals and shear directions in crystal coordinates (normalised here).

    Returns
    -------
    ndarray, shape (), (M,), (N,) or (N, M)

    Raises
    ------
    TracefitInputError
        Bad stress, orientation or vectors.

    Examples
    --------
    >>> round(float(resolved_shear([0, 0, 100, 0, 0, 0], np.eye(3), [1, 1, 1], [-1, 0, 1])), 2)
    40.82
    """
    s = stress_tensor(stress_sample)
    g = as_orientation_matrix(g)
    n_s = _unit_rows(n, "plane normal") @ g  # row form of g^T n
    d_s = _unit_rows(d, "shear direction") @ g
    return np.einsum("...i,ij,...j->...", n_s, s, d_s)


def activation_stress(crss: float | None, schmid: float | None) -> float | None:
    """Applied uniaxial stress at which a system reaches its CRSS: ``sigma = CRSS / m``.

    Parameters
    ----------
    crss : float or None
        Critical resolved shear stress (any unit; the result has the same unit).
    schmid : float or None
        Reported Schmid factor.

    Returns
    -------
    float or None
        None when either is None or ``m <= 0`` (the load cannot activate the system).

    Examples
    --------
    >>> round(activation_stress(10.0, 0.5), 6), activation_stress(10.0, -0.2)
    (20.0, None)
    """
    if crss is None or schmid is None or not (schmid > 1e-9):
        return None
    return float(crss) / float(schmid)


def crss_of(crss: dict | None, system) -> float | None:
    """The CRSS a user gave for one system: looked up by system name, plane family, then mode.

    Parameters
    ----------
    crss : dict or None
        CRSS values (MPa, or any stress unit) keyed by system family name
        (``"{111}<110> slip"``), plane family (``"{111}"``) or mode (``"twin"``).
    system : DeformationSystem or object with ``name``, ``family``, ``mode``

    Returns
    -------
    float or None
        None when ``crss`` names nothing of this system.

    Raises
    ------
    TracefitInputError
        A value that is not a positive finite number.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, catalogue
    >>> s = catalogue(Lattice.fcc(), modes="slip")[0]
    >>> crss_of({"{111}": 10.0}, s), crss_of({"twin": 5.0}, s)
    (10.0, None)
    """
    if not crss:
        return None
    for key in (getattr(system, "name", None), getattr(system, "family", None), getattr(system, "mode", None)):
        if key is not None and key in crss:
            try:
                v = float(crss[key])
            except (TypeError, ValueError):
                v = float("nan")
            if not (math.isfinite(v) and v > 0):
                raise TracefitInputError(f"crss for {key} must be a positive number, got {crss[key]!r}")
            return v
    return None
