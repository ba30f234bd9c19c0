"""Arguments checked at the door, with messages in the library's parameter names.

Orientations are accepted as (3, 3) arrays ``g`` (v_crystal = g v_sample) or as any object
with an ``as_matrix()`` method that returns such a g (an orientation type); nothing here
imports that type.
"""

from __future__ import annotations

import math
from typing import Any, Mapping

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["orientation_matrix", "orientation_table", "check_fraction", "check_sigma", "check_matcher_options"]

# A rotation matrix is orthonormal to rounding; 1e-3 still admits matrices typed with 4 decimals.
_ORTHO_TOL = 1e-3


def orientation_matrix(g: Any, name: str = "g") -> np.ndarray:
    """One orientation as a (3, 3) rotation matrix.

    Parameters
    ----------
    g : array_like, shape (3, 3), or object with ``as_matrix()``
        Orientation, v_crystal = g v_sample. ``as_matrix()`` may return (3, 3) or (1, 3, 3)
        (a batch of one); an array must be (3, 3).
    name : str
        Parameter name for messages.

    Returns
    -------
    ndarray, shape (3, 3)

    Raises
    ------
    TracefitInputError
        When ``g`` is not a finite proper rotation matrix of shape (3, 3).

    Examples
    --------
    >>> orientation_matrix(np.eye(3)).shape
    (3, 3)
    >>> class Turned:
    ...     def as_matrix(self):
    ...         return np.eye(3)[None]
    >>> orientation_matrix(Turned()).shape
    (3, 3)
    """
    from_object = hasattr(g, "as_matrix")
    if from_object:
        g = g.as_matrix()
    try:
        m = np.asarray(g, float)
    except (TypeError, ValueError):
        raise TracefitInputError(f"{name} must be a 3x3 orientation matrix or an orientation, got {type(g).__name__}") from None
    if from_object and m.shape == (1, 3, 3):
        m = m[0]  # a batch of one orientation
    if m.shape != (3, 3):
        raise TracefitInputError(f"{name} must be one 3x3 orientation matrix, got shape {m.shape}")
    if not np.all(np.isfinite(m)):
        raise TracefitInputError(f"{name} has non-finite entries")
    if np.abs(m @ m.T - np.eye(3)).max() > _ORTHO_TOL or np.linalg.det(m) < 0:
        raise TracefitInputError(f"{name} is not a rotation matrix (g g^T = I, det g = +1)")
    return m


def orientation_table(orientations: Any, name: str = "orientations") -> dict:
    """Per-grain orientations as a dict grain -> (3, 3) matrix.

    Parameters
    ----------
    orientations : mapping grain -> orientation
        Each value as :func:`orientation_matrix` accepts.
    name : str
        Parameter name for messages.

    Returns
    -------
    dict

    Raises
    ------
    TracefitInputError
        When ``orientations`` is not a mapping or a value is not an orientation.

    Examples
    --------
    >>> sorted(orientation_table({2: np.eye(3), 1: np.eye(3)}))
    [1, 2]
    """
    if not isinstance(orientations, Mapping):
        raise TracefitInputError(f"{name} must be a dict grain -> orientation, got {type(orientations).__name__}")
    return {k: orientation_matrix(v, f"{name}[{k!r}]") for k, v in orientations.items()}


def _number(value: Any, name: str, ok, expected: str) -> float:
    """``value`` as a float when ``ok`` accepts it, else a TracefitInputError naming ``name``."""
    try:
        v = float(value)
    except (TypeError, ValueError):
        v = math.nan
    if not ok(v):
        raise TracefitInputError(f"{name} must be {expected}, got {value!r}")
    return v


def check_fraction(value: Any, name: str, *, allow_one: bool = False) -> float:
    """A probability-like number in [0, 1) (or [0, 1] with ``allow_one``).

    Parameters
    ----------
    value : float
        The number given.
    name : str
        Parameter name for messages.
    allow_one : bool
        Accept 1.

    Returns
    -------
    float

    Raises
    ------
    TracefitInputError
        Outside the range, or not a number.

    Examples
    --------
    >>> check_fraction(0.05, "p_none")
    0.05
    """
    top = 1.0 if allow_one else math.nextafter(1.0, 0.0)
    return _number(value, name, lambda v: 0.0 <= v <= top, f"in [0, 1{']' if allow_one else ')'}")


def check_sigma(value: Any, name: str) -> float:
    """A finite number >= 0 (a sigma in degrees, or an exponent).

    Parameters
    ----------
    value : float
        A sigma (degrees) or an exponent.
    name : str
        Library parameter name used in the message.

    Returns
    -------
    float
        ``value`` as a float.

    Raises
    ------
    TracefitInputError
        Negative, non-finite or not a number.

    Examples
    --------
    >>> check_sigma(1, "orientation_sigma_deg")
    1.0
    >>> check_sigma(-1, "frame_sigma_deg")
    Traceback (most recent call last):
    tracefit.errors.TracefitInputError: frame_sigma_deg must be a finite number >= 0, got -1
    """
    return _number(value, name, lambda v: math.isfinite(v) and v >= 0.0, "a finite number >= 0")


def check_matcher_options(*, p_none: float, orientation_sigma_deg: float, frame_sigma_deg: float,
                          schmid_weight: float, report_threshold: float, ambiguity_ratio: float,
                          grain_sigma_deg: Mapping | None = None) -> None:
    """Check the numeric options shared by :func:`tracefit.matching.identify_families` and
    :func:`tracefit.matching.identify_grains`.

    Parameters
    ----------
    p_none : float
        In [0, 1).
    orientation_sigma_deg, frame_sigma_deg, schmid_weight : float
        Finite, >= 0.
    report_threshold, ambiguity_ratio : float
        In [0, 1].
    grain_sigma_deg : mapping grain -> float, optional
        Each finite, >= 0.

    Returns
    -------
    None

    Raises
    ------
    TracefitInputError
        Naming the first parameter out of range.

    Examples
    --------
    >>> check_matcher_options(p_none=1.0, orientation_sigma_deg=1, frame_sigma_deg=0.5, schmid_weight=0,
    ...                       report_threshold=0.01, ambiguity_ratio=0.1)
    Traceback (most recent call last):
    tracefit.errors.TracefitInputError: p_none must be in [0, 1), got 1.0
    """
    check_fraction(p_none, "p_none")
    check_sigma(orientation_sigma_deg, "orientation_sigma_deg")
    check_sigma(frame_sigma_deg, "frame_sigma_deg")
    check_sigma(schmid_weight, "schmid_weight")
    check_fraction(report_threshold, "report_threshold", allow_one=True)
    check_fraction(ambiguity_ratio, "ambiguity_ratio", allow_one=True)
    if grain_sigma_deg:
        if not isinstance(grain_sigma_deg, Mapping):
            raise TracefitInputError(f"grain_sigma_deg must be a dict grain -> degrees, got {type(grain_sigma_deg).__name__}")
        for k, v in grain_sigma_deg.items():
            check_sigma(v, f"grain_sigma_deg[{k!r}]")
