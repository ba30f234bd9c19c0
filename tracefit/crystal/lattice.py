"""Crystal lattices: direct and reciprocal bases, metric tensors, plane normals and directions.

Cartesian crystal frame ("standard setting"): x along a, b in the x-y plane,
z completing a right-handed set (so z is along c* ). For a hexagonal lattice this is
x along a1, z along c, y = z x x (the tracefit default). The other common
hexagonal setting, x along a1* (then y along a2), is the same basis turned by
-30 deg about c and is selected with ``hex_setting="x-along-a1-reciprocal"``.

Plane normals always come from the reciprocal basis, n = h a* + k b* + l c*;
(hkl) is reused as a direction only where that is exact (cubic lattices), and even
there it is computed the same way.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import ArrayLike

from tracefit.conventions import miller_bravais_to_miller, miller_to_miller_bravais, rotation_z
from tracefit.crystal.symmetry import proper_rotations as symmetry_rotations
from tracefit.errors import TracefitInputError, real_array, real_number

__all__ = [
    "Lattice",
    "lattice_preset",
    "PRESETS",
    "IDEAL_C_OVER_A",
    "miller_bravais_to_miller",
    "miller_to_miller_bravais",
]

IDEAL_C_OVER_A = math.sqrt(8.0 / 3.0)  # 1.63299..., hard-sphere ideal (common practice, no source)

HEX_SETTINGS = ("x-along-a1", "x-along-a1-reciprocal")
# The names before 0.2, still read (with a warning) for one release.
OLD_HEX_SETTINGS = {"x_a1": "x-along-a1", "x_a1star": "x-along-a1-reciprocal"}
LAUE_CLASSES = ("m-3m", "m-3", "6/mmm", "6/m", "-3m", "-3", "4/mmm", "4/m", "mmm", "2/m", "-1")


@dataclass(frozen=True)
class Lattice:
    """A crystal lattice from its six cell parameters.

    Parameters
    ----------
    a, b, c : float
        Cell edge lengths (any consistent unit; only ratios matter here).
    alpha, beta, gamma : float
        Cell angles in degrees.
    name : str
        Label for reports, e.g. ``"fcc"``.
    laue : str, optional
        Laue class whose proper rotations give the crystal symmetry. Inferred from the
        cell when omitted (trigonal cells must say ``"-3m"`` or ``"-3"``).
    hex_setting : {"x-along-a1", "x-along-a1-reciprocal"}
        Cartesian setting for hexagonal/trigonal cells (ignored otherwise).

    Raises
    ------
    TracefitInputError
        Non-positive edges, angles outside (0, 180) deg or unable to close a cell, an unknown
        Laue class or hexagonal setting.

    Examples
    --------
    >>> Lattice.hcp(c_over_a=1.587).laue
    '6/mmm'
    >>> np.round(Lattice.fcc().plane_normal((1, 1, 1)), 4).tolist()
    [0.5774, 0.5774, 0.5774]
    >>> Lattice(1.0, 1.2, 1.5).laue
    'mmm'
    """

    a: float
    b: float
    c: float
    alpha: float = 90.0
    beta: float = 90.0
    gamma: float = 90.0
    name: str = "custom"
    laue: str | None = None
    hex_setting: str = "x-along-a1"
    _cache: dict = field(default_factory=dict, repr=False, compare=False, hash=False)

    def __post_init__(self):
        for k in ("a", "b", "c", "alpha", "beta", "gamma"):
            real_number(getattr(self, k), k)  # checked only: the values are kept as given
        for k in ("a", "b", "c"):
            v = getattr(self, k)
            if not v > 0:
                raise TracefitInputError(f"lattice parameter {k} must be a positive number, got {v!r}")
        # Edges far apart in size overflow the metric tensor (and are no crystal).
        if max(self.a, self.b, self.c) / min(self.a, self.b, self.c) > 1e6:
            raise TracefitInputError(
                f"lattice parameters a, b, c differ by more than a factor 1e6: {self.a!r}, {self.b!r}, {self.c!r}"
            )
        for k in ("alpha", "beta", "gamma"):
            v = getattr(self, k)
            if not (0 < v < 180):
                raise TracefitInputError(f"lattice angle {k} must lie strictly between 0 and 180 deg, got {v!r}")
        if isinstance(self.hex_setting, str) and self.hex_setting in OLD_HEX_SETTINGS:
            new = OLD_HEX_SETTINGS[self.hex_setting]
            warnings.warn(f"the hexagonal setting {self.hex_setting!r} is now called {new!r}; the old name is read "
                          f"until the next release", FutureWarning, stacklevel=3)
            object.__setattr__(self, "hex_setting", new)
        if not isinstance(self.hex_setting, str) or self.hex_setting not in HEX_SETTINGS:
            raise TracefitInputError(
                f"hexagonal setting must be one of {', '.join(HEX_SETTINGS)}, got {self.hex_setting!r}"
            )
        if self.laue is None:
            object.__setattr__(self, "laue", self._infer_laue())
        elif not isinstance(self.laue, str) or self.laue not in LAUE_CLASSES:
            raise TracefitInputError(f"unknown Laue class {self.laue!r}; use one of {', '.join(LAUE_CLASSES)}")
        # Cell volume must be real (the three angles must be able to close a cell).
        ca, cb, cg = (math.cos(math.radians(x)) for x in (self.alpha, self.beta, self.gamma))
        if 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg <= 1e-12:
            raise TracefitInputError("lattice angles alpha, beta, gamma cannot form a cell")

    # ----------------------------------------------------------------- named cells
    @classmethod
    def fcc(cls, a: float = 1.0) -> "Lattice":
        """Face-centred cubic lattice (Laue class m-3m), named ``"fcc"`` so the built-in systems apply.

        Parameters
        ----------
        a : float
            Cell edge (any unit; only ratios matter for traces).

        Returns
        -------
        Lattice

        Raises
        ------
        TracefitInputError
            ``a`` not a positive number.

        Examples
        --------
        >>> Lattice.fcc().name, Lattice.fcc().is_cubic
        ('fcc', True)
        """
        return cls(a, a, a, name="fcc")

    @classmethod
    def bcc(cls, a: float = 1.0) -> "Lattice":
        """Body-centred cubic lattice (Laue class m-3m), named ``"bcc"``.

        Parameters
        ----------
        a : float
            Cell edge.

        Returns
        -------
        Lattice

        Raises
        ------
        TracefitInputError
            ``a`` not a positive number.

        Examples
        --------
        >>> Lattice.bcc(a=2.87).a
        2.87
        """
        return cls(a, a, a, name="bcc")

    @classmethod
    def hcp(cls, c_over_a: float | None = None, a: float = 1.0, hex_setting: str = "x-along-a1") -> "Lattice":
        """Hexagonal close-packed lattice (Laue class 6/mmm), named ``"hcp"``.

        Parameters
        ----------
        c_over_a : float, optional
            Axial ratio. Omitted: the ideal sqrt(8/3) = 1.633 with a warning (twin and
            pyramidal traces move with c/a; real metals differ).
        a : float
            Basal edge.
        hex_setting : {"x-along-a1", "x-along-a1-reciprocal"}
            Cartesian setting: x along a1 (default) or along a1*.

        Returns
        -------
        Lattice

        Raises
        ------
        TracefitInputError
            ``c_over_a`` or ``a`` not positive, unknown ``hex_setting``.

        Examples
        --------
        >>> round(Lattice.hcp(c_over_a=1.624).c_over_a, 3)
        1.624
        """
        return _hcp(c_over_a, a, hex_setting, stacklevel=3)

    @classmethod
    def tetragonal(cls, c_over_a: float, a: float = 1.0) -> "Lattice":
        """Tetragonal lattice (Laue class 4/mmm), named ``"tetragonal"``.

        Parameters
        ----------
        c_over_a : float
            Axial ratio (required; e.g. 0.546 for beta-tin, from memory).
        a : float
            Basal edge.

        Returns
        -------
        Lattice

        Raises
        ------
        TracefitInputError
            ``c_over_a`` missing or not positive.

        Examples
        --------
        >>> Lattice.tetragonal(c_over_a=0.546).laue
        '4/mmm'
        """
        c_over_a = _check_c_over_a(c_over_a, required="a tetragonal lattice")
        return cls(a, a, a * c_over_a, name="tetragonal")

    # ----------------------------------------------------------------- classification
    def _infer_laue(self) -> str:
        eq = lambda x, y: abs(x - y) <= 1e-6 * max(abs(x), abs(y))  # noqa: E731
        right = all(abs(x - 90.0) < 1e-6 for x in (self.alpha, self.beta, self.gamma))
        if right and eq(self.a, self.b) and eq(self.b, self.c):
            return "m-3m"
        if eq(self.a, self.b) and abs(self.alpha - 90) < 1e-6 and abs(self.beta - 90) < 1e-6 and abs(self.gamma - 120) < 1e-6:
            return "6/mmm"
        if right and eq(self.a, self.b):
            return "4/mmm"
        if right:
            return "mmm"
        if sum(abs(x - 90.0) < 1e-6 for x in (self.alpha, self.beta, self.gamma)) == 2:
            return "2/m"
        return "-1"

    @property
    def is_cubic(self) -> bool:
        """True for the cubic Laue classes m-3m and m-3."""
        return self.laue in ("m-3m", "m-3")

    @property
    def is_hexagonal(self) -> bool:
        """True for hexagonal and trigonal (hexagonal axes) cells: written with four indices."""
        return self.laue in ("6/mmm", "6/m", "-3m", "-3") and abs(self.gamma - 120.0) < 1e-6

    @property
    def c_over_a(self) -> float:
        """Axial ratio c / a."""
        return self.c / self.a

    # ----------------------------------------------------------------- bases
    @property
    def direct_matrix(self) -> np.ndarray:
        """3x3 matrix whose columns are a, b, c in the Cartesian crystal frame."""
        if "A" not in self._cache:
            al, be, ga = (math.radians(x) for x in (self.alpha, self.beta, self.gamma))
            cx = self.c * math.cos(be)
            cy = self.c * (math.cos(al) - math.cos(be) * math.cos(ga)) / math.sin(ga)
            cz = math.sqrt(max(self.c**2 - cx**2 - cy**2, 0.0))
            A = np.array(
                [
                    [self.a, self.b * math.cos(ga), cx],
                    [0.0, self.b * math.sin(ga), cy],
                    [0.0, 0.0, cz],
                ]
            )
            if self.is_hexagonal and self.hex_setting == "x-along-a1-reciprocal":
                A = rotation_z(-30.0) @ A  # brings a1* (30 deg from a1) onto x
            A[np.abs(A) < 1e-14] = 0.0
            self._cache["A"] = A
        return self._cache["A"]

    @property
    def reciprocal_matrix(self) -> np.ndarray:
        """3x3 matrix whose columns are a*, b*, c* (no 2 pi), so that A^T B = I."""
        if "B" not in self._cache:
            self._cache["B"] = np.linalg.inv(self.direct_matrix).T
        return self._cache["B"]

    @property
    def metric(self) -> np.ndarray:
        """Direct metric tensor G = A^T A."""
        A = self.direct_matrix
        return A.T @ A

    @property
    def reciprocal_metric(self) -> np.ndarray:
        """Reciprocal metric tensor G* = G^-1."""
        return np.linalg.inv(self.metric)

    # ----------------------------------------------------------------- vectors
    def _three(self, idx, kind: str) -> np.ndarray:
        v = real_array(idx, kind)
        if v.ndim == 0:
            raise TracefitInputError(f"a {kind} needs 3 (or, hexagonal, 4) indices, got {idx!r}")
        if v.shape[-1] == 4:
            if not self.is_hexagonal:
                raise TracefitInputError(f"four-index {kind} given for a non-hexagonal lattice ({self.name})")
            v = miller_bravais_to_miller(v, kind)
        elif v.shape[-1] != 3:
            raise TracefitInputError(f"a {kind} needs 3 (or, hexagonal, 4) indices, got {v.shape[-1]}")
        if np.any(np.all(v == 0, axis=-1)):
            raise TracefitInputError(f"the all-zero {kind} has no direction")
        return v

    def plane_normal(self, hkl: ArrayLike) -> np.ndarray:
        """Unit plane normal(s) in the Cartesian crystal frame, from the reciprocal basis.

        Parameters
        ----------
        hkl : array_like, shape (..., 3) or (..., 4)
            Miller or, for hexagonal cells, Miller-Bravais indices.

        Returns
        -------
        ndarray, shape (..., 3)

        Raises
        ------
        TracefitInputError
            Wrong count, four indices on a non-hexagonal cell, all-zero or a broken sum rule.

        Examples
        --------
        >>> np.round(Lattice.hcp(c_over_a=1.633).plane_normal((0, 0, 0, 1)), 6).tolist()
        [0.0, 0.0, 1.0]
        """
        v = self._three(hkl, "plane") @ self.reciprocal_matrix.T
        return v / np.linalg.norm(v, axis=-1, keepdims=True)

    def direction_vector(self, uvw: ArrayLike, unit: bool = True) -> np.ndarray:
        """Direction(s) [uvw] (or [uvtw]) as Cartesian crystal vectors, unit length by default.

        Parameters
        ----------
        uvw : array_like, shape (..., 3) or (..., 4)
        unit : bool
            False keeps the lattice length (in the unit of a, b, c).

        Returns
        -------
        ndarray, shape (..., 3)

        Raises
        ------
        TracefitInputError
            As :meth:`plane_normal`.

        Examples
        --------
        >>> (np.round(Lattice.hcp(c_over_a=1.6).direction_vector((2, -1, -1, 0), unit=False), 6) + 0.0).tolist()
        [3.0, 0.0, 0.0]
        """
        v = self._three(uvw, "direction") @ self.direct_matrix.T
        return v / np.linalg.norm(v, axis=-1, keepdims=True) if unit else v

    def d_spacing(self, hkl: ArrayLike) -> np.ndarray:
        """Interplanar spacing d_hkl in the unit of a, b, c.

        Parameters
        ----------
        hkl : array_like, shape (..., 3) or (..., 4)

        Returns
        -------
        ndarray, shape (...)

        Examples
        --------
        >>> round(float(Lattice.fcc(a=3.6).d_spacing((1, 1, 1))), 4)
        2.0785
        """
        v = self._three(hkl, "plane") @ self.reciprocal_matrix.T
        return 1.0 / np.linalg.norm(v, axis=-1)

    def with_setting(self, hex_setting: str) -> "Lattice":
        """The same cell in another hexagonal Cartesian setting (``"x-along-a1"`` or ``"x-along-a1-reciprocal"``).

        Examples
        --------
        >>> Lattice.hcp(c_over_a=1.587).with_setting("x-along-a1-reciprocal").hex_setting
        'x-along-a1-reciprocal'
        """
        return Lattice(self.a, self.b, self.c, self.alpha, self.beta, self.gamma, self.name, self.laue, hex_setting)

    def proper_rotations(self) -> np.ndarray:
        """Proper rotations of the Laue class in this lattice's Cartesian frame.

        See :func:`tracefit.crystal.symmetry.proper_rotations` (cached per lattice).

        Returns
        -------
        ndarray, shape (K, 3, 3)
            Active rotation matrices, identity first.

        Examples
        --------
        >>> Lattice.fcc().proper_rotations().shape
        (24, 3, 3)
        """
        return symmetry_rotations(self)



def _check_c_over_a(c_over_a, required: str | None = None) -> float | None:
    if c_over_a is None:
        if required:
            raise TracefitInputError(f"{required} needs its c_over_a ratio (e.g. 0.546 for beta-tin)")
        return None
    if isinstance(c_over_a, bool) or not isinstance(c_over_a, (int, float, np.integer, np.floating)) \
            or not (np.isfinite(c_over_a) and c_over_a > 0):
        raise TracefitInputError(f"c_over_a must be a positive number, got {c_over_a!r}")
    return float(c_over_a)


def _hcp(c_over_a, a: float, hex_setting: str, stacklevel: int) -> Lattice:
    c_over_a = _check_c_over_a(c_over_a)
    a = real_number(a, "a")
    if c_over_a is None:
        warnings.warn(
            f"no c/a given for hcp: using the ideal {IDEAL_C_OVER_A:.3f}; real metals differ "
            "(Mg 1.624, Ti 1.587, Zn 1.856), and twin and pyramidal traces move with c/a",
            stacklevel=stacklevel,
        )
        c_over_a = IDEAL_C_OVER_A
    return Lattice(a, a, a * c_over_a, 90.0, 90.0, 120.0, name="hcp", hex_setting=hex_setting)


#: name -> constructor taking ``c_over_a`` (and ``hex_setting`` for hcp); see :func:`lattice_preset`
PRESETS = {
    "fcc": lambda c_over_a=None: Lattice.fcc(),
    "bcc": lambda c_over_a=None: Lattice.bcc(),
    "hcp": lambda c_over_a=None, hex_setting="x-along-a1": _hcp(c_over_a, 1.0, hex_setting, stacklevel=4),
    "tetragonal": lambda c_over_a=None: Lattice.tetragonal(c_over_a),
}


def lattice_preset(name: str, c_over_a: float | None = None, hex_setting: str = "x-along-a1") -> Lattice:
    """A named lattice: ``fcc``, ``bcc``, ``hcp`` (c/a, default ideal with a warning) or ``tetragonal`` (c/a required).

    The same cells as :meth:`Lattice.fcc`, :meth:`Lattice.bcc`, :meth:`Lattice.hcp` and
    :meth:`Lattice.tetragonal`, chosen by name (as text input gives them).

    Parameters
    ----------
    name : {"fcc", "bcc", "hcp", "tetragonal"}
        Case and surrounding spaces are ignored.
    c_over_a : float, optional
        Axial ratio (hcp, tetragonal); must be omitted for cubic lattices.
    hex_setting : {"x-along-a1", "x-along-a1-reciprocal"}
        Hexagonal Cartesian setting (hcp only).

    Returns
    -------
    Lattice

    Raises
    ------
    TracefitInputError
        Unknown name, a c/a for a cubic lattice, a missing or non-positive c/a where needed.

    Examples
    --------
    >>> lattice_preset("hcp", 1.587) == Lattice.hcp(c_over_a=1.587)
    True
    """
    key = name.strip().lower() if isinstance(name, str) else None
    if key not in PRESETS:
        raise TracefitInputError(f"unknown lattice {name!r}; choose one of {', '.join(PRESETS)} or give a lattice file")
    _check_c_over_a(c_over_a)
    if key in ("fcc", "bcc") and c_over_a is not None:
        raise TracefitInputError(f"c_over_a does not apply to a cubic ({key}) lattice")
    kw = {"hex_setting": hex_setting} if key == "hcp" else {}
    return PRESETS[key](c_over_a=c_over_a, **kw)
