"""Crystal orientations: the :class:`Orientation` type and the matrix functions it wraps.

Convention (fixed once here and in ``docs/conventions.md``)
-----------------------------------------------------------
* An orientation is the passive rotation ``g`` that maps sample to crystal coordinates:
  ``v_crystal = g @ v_sample``; ``g`` has shape ``(3, 3)`` or ``(N, 3, 3)``.
* Bunge Euler angles ``(phi1, Phi, phi2)``, passive:
  ``g = Rz(phi2) Rx(Phi) Rz(phi1)`` with passive (coordinate) rotation matrices. The same
  orientation as an active crystal -> sample rotation is ``R = g.T =
  scipy.spatial.transform.Rotation.from_euler("ZXZ", (phi1, Phi, phi2), degrees=True)``.
* Quaternions and axis-angle pairs follow Rowenhorst et al. (2015) with P = +1, see
  :mod:`tracefit.crystal.rotations`: Bunge ``(30, 0, 0)`` is the pair ``([0, 0, -1], 30)``.

The functions (``from_euler`` returning matrices, ``to_euler``, ...) are the one
implementation; :class:`Orientation` holds ``g`` and calls them. Other packages accept
either form at their doors through :func:`as_orientation_matrix`.
"""

from __future__ import annotations

import warnings
from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import ArrayLike

from tracefit.crystal.rotations import (
    _matrix_array,
    crystal_to_sample,
    from_axis_angle,
    from_matrix,
    from_quaternion,
    sample_to_crystal,
    to_axis_angle,
    to_quaternion,
)
from tracefit.crystal.orientation_input import (
    from_two_directions,
    looks_like_radians,
    parse_axis_angle,
    parse_euler,
    parse_matrix,
    parse_quaternion,
    parse_vector,
)
from tracefit.errors import TracefitInputError, real_array

if TYPE_CHECKING:  # names used in annotations only
    from tracefit.crystal.lattice import Lattice

__all__ = [
    "Orientation",
    "as_orientation_matrix",
    "from_euler",
    "to_euler",
    "from_quaternion",
    "to_quaternion",
    "from_matrix",
    "from_axis_angle",
    "to_axis_angle",
    "from_two_directions",
    "parse_euler",
    "parse_quaternion",
    "parse_matrix",
    "parse_axis_angle",
    "parse_vector",
    "crystal_to_sample",
    "sample_to_crystal",
    "looks_like_radians",
]

# ------------------------------------------------------------------ Euler angles
def _euler_array(euler, name: str) -> np.ndarray:
    e = real_array(euler, name, finite=False)
    if e.shape[-1:] != (3,):
        raise TracefitInputError(f"{name} must have 3 angles (phi1, Phi, phi2) per orientation, got shape {e.shape}")
    if not np.all(np.isfinite(e)):
        raise TracefitInputError(f"{name} must be finite numbers")
    return e


def _warn_radians(e_deg: np.ndarray, stacklevel: int) -> None:
    if looks_like_radians(e_deg):
        warnings.warn(
            "the Euler angles look like radians (all small, not whole numbers); tracefit reads degrees",
            stacklevel=stacklevel + 1,
        )


def from_euler(euler_deg: ArrayLike, warn_radians: bool = True) -> np.ndarray:
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

    Raises
    ------
    TracefitInputError
        Not three angles per orientation, or a non-finite angle.

    Examples
    --------
    >>> np.round(from_euler([90, 0, 0]) @ [1.0, 0.0, 0.0], 6).tolist()  # sample x in crystal axes
    [0.0, -1.0, 0.0]
    """
    e = _euler_array(euler_deg, "euler_deg")
    if warn_radians:
        _warn_radians(e, stacklevel=2)
    return _bunge_matrix(np.radians(e))


def _bunge_matrix(e_rad: np.ndarray) -> np.ndarray:
    p1, P, p2 = (e_rad[..., i] for i in range(3))
    c1, s1, c, s, c2, s2 = np.cos(p1), np.sin(p1), np.cos(P), np.sin(P), np.cos(p2), np.sin(p2)
    g = np.empty(e_rad.shape[:-1] + (3, 3))
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


def to_euler(g: ArrayLike) -> np.ndarray:
    """Bunge Euler angles (degrees) of orientation matrices.

    Ranges: ``0 <= phi1 < 360``, ``0 <= Phi <= 180``, ``0 <= phi2 < 360``. When ``Phi`` is 0 or
    180 only ``phi1 +- phi2`` is defined; then ``phi2 = 0``.

    Parameters
    ----------
    g : array_like, shape (3, 3) or (..., 3, 3)
        Orientation matrices, ``v_crystal = g @ v_sample``.

    Returns
    -------
    ndarray, shape (3,) or (..., 3)
        ``(phi1, Phi, phi2)`` in degrees.

    Raises
    ------
    TracefitInputError
        ``g`` is not made of 3 x 3 matrices.

    Examples
    --------
    >>> np.round(to_euler(from_euler([10, 20, 30])), 6).tolist()
    [10.0, 20.0, 30.0]
    """
    g = _matrix_array(g, "g")
    sP = np.hypot(g[..., 2, 0], g[..., 2, 1])
    P = np.arctan2(sP, g[..., 2, 2])  # better conditioned than arccos near 0 and 180
    deg = sP < 1e-10
    p1 = np.where(deg, np.arctan2(g[..., 0, 1], g[..., 0, 0]), np.arctan2(g[..., 2, 0], -g[..., 2, 1]))
    p2 = np.where(deg, 0.0, np.arctan2(g[..., 0, 2], g[..., 1, 2]))
    out = np.stack([np.degrees(p1) % 360.0, np.degrees(P), np.degrees(p2) % 360.0], axis=-1)
    out[..., 0] = np.where(out[..., 0] >= 360.0, 0.0, out[..., 0])
    out[..., 2] = np.where(out[..., 2] >= 360.0, 0.0, out[..., 2])
    return out


def as_orientation_matrix(x: Orientation | ArrayLike, name: str = "g") -> np.ndarray:
    """The orientation matrix array of an :class:`Orientation` or of an array ``g``.

    Lets a function accept both forms at its door. Only the shape is checked (cheap enough
    for inner loops); use :func:`from_matrix` to check orthonormality.

    Parameters
    ----------
    x : Orientation or array_like, shape (3, 3) or (N, 3, 3)
        Orientation(s), ``v_crystal = g @ v_sample``.
    name : str
        Parameter name used in the error message.

    Returns
    -------
    ndarray, shape (3, 3) or (N, 3, 3)
        Float matrices (the array itself when it already is a float array).

    Raises
    ------
    TracefitInputError
        Any other shape, or something that is not numeric.

    Examples
    --------
    >>> as_orientation_matrix(Orientation.from_euler([0, 0, 0])).shape
    (3, 3)
    >>> as_orientation_matrix(np.eye(3)[None]).shape
    (1, 3, 3)
    """
    if isinstance(x, Orientation):
        return x.as_matrix()
    try:
        g = np.asarray(x, dtype=float)
    except (TypeError, ValueError):
        raise TracefitInputError(f"{name} must be an Orientation or an array of 3 x 3 matrices, got {type(x).__name__}") from None
    if g.ndim not in (2, 3) or g.shape[-2:] != (3, 3):
        raise TracefitInputError(f"{name} must be an Orientation or have shape (3, 3) or (N, 3, 3), got {g.shape}")
    return g


# ------------------------------------------------------------------ the value type
class Orientation:
    """One or many crystal orientations (passive Bunge, ``v_crystal = g @ v_sample``).

    Batched like :class:`scipy.spatial.transform.Rotation`: one object holds a single
    orientation (``single`` is True, matrices of shape (3, 3)) or N of them ((N, 3, 3)).
    Build it with the ``from_*`` class methods; ``Orientation(g)`` validates matrices like
    :meth:`from_matrix`.

    Composition: ``(a * b).as_matrix() == a.as_matrix() @ b.as_matrix()``, i.e. apply ``b``
    then ``a`` to coordinates: ``v -> g_b v -> g_a (g_b v)``. In scipy's active crystal ->
    sample terms (``R = g.T``) this is ``R_b * R_a``. Shapes broadcast: single * many,
    many * single, or N * N element by element.

    Parameters
    ----------
    matrix : array_like, shape (3, 3) or (N, 3, 3)
        Orientation matrices ``g``.

    Raises
    ------
    TracefitInputError
        As :func:`from_matrix`.

    Examples
    --------
    >>> o = Orientation.from_euler([10, 20, 30])
    >>> o.single, np.round(o.as_euler(), 6).tolist()
    (True, [10.0, 20.0, 30.0])
    >>> from tracefit.crystal import Lattice
    >>> many = Orientation.from_euler([[0, 0, 0], [90, 0, 0]])
    >>> len(many), many[1].single
    (2, True)
    >>> round(float(many[0].misorientation(many[1], Lattice.fcc())), 6)
    0.0
    """

    __slots__ = ("_g",)

    def __init__(self, matrix: ArrayLike) -> None:
        g = from_matrix(matrix)
        if g.ndim not in (2, 3):
            raise TracefitInputError(f"matrix must have shape (3, 3) or (N, 3, 3), got {np.shape(matrix)}")
        self._g = g

    @classmethod
    def _trusted(cls, g: np.ndarray) -> "Orientation":
        obj = cls.__new__(cls)
        obj._g = g
        return obj

    # ------------------------------------------------------------ constructors
    @classmethod
    def from_euler(cls, euler: ArrayLike, degrees: bool = True) -> "Orientation":
        """Orientations from Bunge Euler angles ``(phi1, Phi, phi2)``.

        Parameters
        ----------
        euler : array_like, shape (3,) or (N, 3)
            Angles; degrees unless ``degrees=False``.
        degrees : bool
            True: degrees (a warning when they look like radians, see
            :func:`looks_like_radians`). False: radians.

        Returns
        -------
        Orientation

        Raises
        ------
        TracefitInputError
            Not three angles per orientation, or non-finite.

        Examples
        --------
        >>> np.round(Orientation.from_euler([np.pi / 2, 0, 0], degrees=False).as_euler(), 6).tolist()
        [90.0, 0.0, 0.0]
        """
        e = _batch(_euler_array(euler, "euler"), 1, "euler", "3 angles (phi1, Phi, phi2)")
        if degrees:
            _warn_radians(e, stacklevel=2)
            return cls._trusted(_bunge_matrix(np.radians(e)))
        return cls._trusted(_bunge_matrix(e))

    @classmethod
    def from_matrix(cls, matrix: ArrayLike, tol: float = 1e-3) -> "Orientation":
        """Orientations from matrices ``g`` (sample -> crystal), checked and cleaned.

        Parameters
        ----------
        matrix : array_like, shape (3, 3) or (N, 3, 3)
        tol : float
            Largest accepted entry of ``|g g^T - I|``.

        Returns
        -------
        Orientation

        Raises
        ------
        TracefitInputError
            As :func:`from_matrix`.

        Examples
        --------
        >>> Orientation.from_matrix(np.eye(3)).single
        True
        """
        g = _batch(_matrix_array(matrix, "matrix"), 2, "matrix", "a 3 x 3 matrix")
        return cls._trusted(from_matrix(g, tol))

    @classmethod
    def from_quaternion(cls, q: ArrayLike) -> "Orientation":
        """Orientations from quaternions (Rowenhorst et al. 2015, P = +1, scalar first).

        Parameters
        ----------
        q : array_like, shape (4,) or (N, 4)
            Normalised here.

        Returns
        -------
        Orientation

        Raises
        ------
        TracefitInputError
            As :func:`from_quaternion`.

        Examples
        --------
        >>> np.round(Orientation.from_quaternion([1, 0, 0, 0]).as_euler(), 6).tolist()
        [0.0, 0.0, 0.0]
        """
        qa = real_array(q, "q", finite=False)
        _batch(qa, 1, "q", "4 components (q0, q1, q2, q3)")
        return cls._trusted(from_quaternion(qa))

    @classmethod
    def from_axis_angle(cls, axis: ArrayLike, angle: ArrayLike, degrees: bool = True) -> "Orientation":
        """Orientations from axis-angle pairs (Rowenhorst et al. 2015, P = +1).

        Parameters
        ----------
        axis : array_like, shape (3,) or (N, 3)
            Axes in sample coordinates.
        angle : float or array_like, shape () or (N,)
            Angles; degrees unless ``degrees=False``.
        degrees : bool

        Returns
        -------
        Orientation

        Raises
        ------
        TracefitInputError
            As :func:`from_axis_angle`.

        Examples
        --------
        >>> np.round(Orientation.from_axis_angle([0, 0, -1], 30).as_euler(), 6).tolist()
        [30.0, 0.0, 0.0]
        """
        ax = np.asarray(axis, dtype=float)
        _batch(ax, 1, "axis", "3 components")
        ang = np.asarray(angle, dtype=float)
        return cls._trusted(from_axis_angle(ax, ang if degrees else np.degrees(ang)))

    @classmethod
    def from_two_directions(cls, lattice: Lattice, crystal_dir1: Sequence[int], sample_axis1: str | ArrayLike,
                            crystal_dir2: Sequence[int], sample_axis2: str | ArrayLike,
                            tol_deg: float = 1.0) -> "Orientation":
        """Orientation with ``crystal_dir1`` along ``sample_axis1`` and ``crystal_dir2`` toward ``sample_axis2``.

        Parameters
        ----------
        lattice : tracefit.crystal.Lattice
        crystal_dir1, crystal_dir2 : sequence of 3 or 4 int
        sample_axis1, sample_axis2 : str or sequence of 3 float
        tol_deg : float

        Returns
        -------
        Orientation
            A single orientation.

        Raises
        ------
        TracefitInputError
            As :func:`tracefit.crystal.from_two_directions`.

        Examples
        --------
        >>> from tracefit.crystal import Lattice
        >>> o = Orientation.from_two_directions(Lattice.fcc(), (0, 0, 1), "z", (1, 0, 0), "x")
        >>> np.round(o.as_euler(), 6).tolist()
        [0.0, 0.0, 0.0]
        """
        return cls._trusted(from_two_directions(lattice, crystal_dir1, sample_axis1, crystal_dir2, sample_axis2, tol_deg))

    @classmethod
    def identity(cls, n: int | None = None) -> "Orientation":
        """The identity orientation (crystal axes along sample axes), single or ``n`` copies.

        Parameters
        ----------
        n : int, optional
            Number of orientations; None gives a single one.

        Returns
        -------
        Orientation

        Examples
        --------
        >>> len(Orientation.identity(4))
        4
        """
        if n is None:
            return cls._trusted(np.eye(3))
        if isinstance(n, bool) or not isinstance(n, (int, np.integer)) or n < 0:
            raise TracefitInputError(f"n must be a non-negative whole number, got {n!r}")
        return cls._trusted(np.tile(np.eye(3), (int(n), 1, 1)))

    # ------------------------------------------------------------ views
    def as_matrix(self) -> np.ndarray:
        """Matrices ``g`` (``v_crystal = g @ v_sample``), shape (3, 3) or (N, 3, 3); a copy.

        Examples
        --------
        >>> Orientation.identity(2).as_matrix().shape
        (2, 3, 3)
        """
        return self._g.copy()

    def as_euler(self, degrees: bool = True) -> np.ndarray:
        """Bunge Euler angles, shape (3,) or (N, 3); ranges as :func:`to_euler`.

        Parameters
        ----------
        degrees : bool
            False gives radians.

        Returns
        -------
        ndarray

        Examples
        --------
        >>> np.round(Orientation.from_euler([10, 20, 30]).as_euler(degrees=False), 4).tolist()
        [0.1745, 0.3491, 0.5236]
        """
        e = to_euler(self._g)
        return e if degrees else np.radians(e)

    def as_quaternion(self) -> np.ndarray:
        """Unit quaternions (P = +1, scalar first, ``q0 >= 0``), shape (4,) or (N, 4).

        Examples
        --------
        >>> (np.round(Orientation.from_euler([30, 0, 0]).as_quaternion(), 4) + 0.0).tolist()
        [0.9659, 0.0, 0.0, -0.2588]
        """
        return to_quaternion(self._g)

    @property
    def single(self) -> bool:
        """True when this holds one orientation (matrices of shape (3, 3))."""
        return self._g.ndim == 2

    def __len__(self) -> int:
        if self.single:
            raise TypeError("a single Orientation has no len(); it is not a batch")
        return self._g.shape[0]

    def __getitem__(self, index) -> "Orientation":
        if self.single:
            raise TypeError("a single Orientation cannot be indexed; it is not a batch")
        return Orientation._trusted(self._g[index])

    # ------------------------------------------------------------ algebra
    def __mul__(self, other: "Orientation") -> "Orientation":
        if not isinstance(other, Orientation):
            return NotImplemented
        a, b = self._g, other._g
        if a.ndim == 3 and b.ndim == 3 and a.shape[0] != b.shape[0]:
            raise TracefitInputError(f"cannot compose {a.shape[0]} orientations with {b.shape[0]}; give equal numbers or one")
        return Orientation._trusted(a @ b)

    def inv(self) -> "Orientation":
        """The inverse: ``g.T`` (crystal -> sample), so ``o * o.inv()`` is the identity.

        Examples
        --------
        >>> o = Orientation.from_euler([10, 20, 30])
        >>> np.allclose((o * o.inv()).as_matrix(), np.eye(3))
        True
        """
        return Orientation._trusted(np.swapaxes(self._g, -1, -2).copy())

    def misorientation(self, other: "Orientation", lattice: Lattice, degrees: bool = True) -> np.ndarray | float:
        """Smallest rotation angle between two orientations under the lattice's symmetry.

        The angle of ``S g_other g_self^T`` minimised over the proper rotations ``S`` of the
        lattice's Laue class (both crystals share the lattice, so one-sided minimisation
        suffices: ``tr(S_i dg S_j) = tr(S_j S_i dg)``).

        Parameters
        ----------
        other : Orientation
            Single, or as many as ``self`` (element by element).
        lattice : tracefit.crystal.Lattice
            Gives the symmetry (:meth:`tracefit.crystal.Lattice.proper_rotations`).
        degrees : bool

        Returns
        -------
        float or ndarray, shape (N,)
            Angles in [0, 180] degrees (or radians).

        Raises
        ------
        TracefitInputError
            ``other`` is not an Orientation, or the counts differ.

        Examples
        --------
        >>> from tracefit.crystal import Lattice
        >>> a = Orientation.from_euler([0, 0, 0])
        >>> b = Orientation.from_euler([100, 0, 0])  # 100 deg about z = 10 deg after a 4-fold
        >>> round(float(a.misorientation(b, Lattice.fcc())), 6)
        10.0
        """
        if not isinstance(other, Orientation):
            raise TracefitInputError(f"other must be an Orientation, got {type(other).__name__}")
        dg = (other * self.inv())._g
        sym = np.asarray(lattice.proper_rotations(), float)  # (K, 3, 3)
        tr = np.einsum("kij,...ji->...k", sym, dg)
        best = np.argmax(tr, axis=-1)
        reduced = np.einsum("...ij,...jk->...ik", sym[best], dg)
        _, ang = to_axis_angle(reduced)
        ang = ang if degrees else np.radians(ang)
        return float(ang) if np.ndim(ang) == 0 else ang

    # ------------------------------------------------------------ text
    def to_dict(self) -> dict:
        """JSON-ready: Bunge angles (degrees) and quaternion, one list or a list per orientation.

        Examples
        --------
        >>> Orientation.from_euler([10, 20, 30]).to_dict()["euler_deg"]
        [10.0, 20.0, 30.0]
        """
        return {
            "convention": "Bunge ZXZ, passive, v_crystal = g v_sample",
            "euler_deg": np.round(self.as_euler(), 10).tolist(),
            "quaternion": np.round(self.as_quaternion(), 12).tolist(),
        }

    def __repr__(self) -> str:
        e = np.round(self.as_euler(), 3) + 0.0
        if self.single:
            return f"Orientation.from_euler([{', '.join(f'{x:g}' for x in e)}])"
        shown = ", ".join("[" + ", ".join(f"{x:g}" for x in row) + "]" for row in e[:3])
        more = ", ..." if len(e) > 3 else ""
        return f"Orientation.from_euler([{shown}{more}])  # {len(e)} orientations"


def _batch(a: np.ndarray, core: int, name: str, what: str) -> np.ndarray:
    """Accept one item or a flat batch of them (``core`` trailing axes), like scipy's Rotation."""
    if a.ndim not in (core, core + 1):
        raise TracefitInputError(f"{name} must be {what} or N of them, got shape {a.shape}")
    return a
