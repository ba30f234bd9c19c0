"""Crystal lattices: direct and reciprocal bases, metric tensors, plane normals and directions.

Cartesian crystal frame ("standard setting"): x along a, b in the x-y plane,
z completing a right-handed set (so z is along c* ). For a hexagonal lattice this is
x along a1, z along c, y = z x x (the tracefit default). The other common
hexagonal setting, x along a1* (then y along a2), is the same basis turned by
-30 deg about c and is selected with ``hex_setting="x_a1star"``.

Plane normals always come from the reciprocal basis, n = h a* + k b* + l c*;
(hkl) is reused as a direction only where that is exact (cubic lattices), and even
there it is computed the same way.
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field

import numpy as np

from tracefit.conventions import miller_bravais_to_miller, miller_to_miller_bravais, rotation_z
from tracefit.errors import TracefitInputError

__all__ = [
    "Lattice",
    "lattice_preset",
    "PRESETS",
    "IDEAL_C_OVER_A",
    "miller_bravais_to_miller",
    "miller_to_miller_bravais",
]

IDEAL_C_OVER_A = math.sqrt(8.0 / 3.0)  # 1.63299..., hard-sphere ideal (common practice, no source)

HEX_SETTINGS = ("x_a1", "x_a1star")
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
    hex_setting : {"x_a1", "x_a1star"}
        Cartesian setting for hexagonal/trigonal cells (ignored otherwise).
    """

    a: float
    b: float
    c: float
    alpha: float = 90.0
    beta: float = 90.0
    gamma: float = 90.0
    name: str = "custom"
    laue: str | None = None
    hex_setting: str = "x_a1"
    _cache: dict = field(default_factory=dict, repr=False, compare=False, hash=False)

    def __post_init__(self):
        for k in ("a", "b", "c"):
            v = getattr(self, k)
            if not (np.isfinite(v) and v > 0):
                raise TracefitInputError(f"lattice parameter {k} must be a positive number, got {v!r}")
        for k in ("alpha", "beta", "gamma"):
            v = getattr(self, k)
            if not (np.isfinite(v) and 0 < v < 180):
                raise TracefitInputError(f"lattice angle {k} must lie strictly between 0 and 180 deg, got {v!r}")
        if self.hex_setting not in HEX_SETTINGS:
            raise TracefitInputError(
                f"hexagonal setting must be one of {', '.join(HEX_SETTINGS)}, got {self.hex_setting!r}"
            )
        if self.laue is None:
            object.__setattr__(self, "laue", self._infer_laue())
        elif self.laue not in LAUE_CLASSES:
            raise TracefitInputError(f"unknown Laue class {self.laue!r}; use one of {', '.join(LAUE_CLASSES)}")
        # Cell volume must be real (the three angles must be able to close a cell).
        ca, cb, cg = (math.cos(math.radians(x)) for x in (self.alpha, self.beta, self.gamma))
        if 1 - ca * ca - cb * cb - cg * cg + 2 * ca * cb * cg <= 1e-12:
            raise TracefitInputError("lattice angles alpha, beta, gamma cannot form a cell")

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
        return self.laue in ("m-3m", "m-3")

    @property
    def is_hexagonal(self) -> bool:
        """True for hexagonal and trigonal (hexagonal axes) cells: written with four indices."""
        return self.laue in ("6/mmm", "6/m", "-3m", "-3") and abs(self.gamma - 120.0) < 1e-6

    @property
    def c_over_a(self) -> float:
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
            if self.is_hexagonal and self.hex_setting == "x_a1star":
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
        v = np.asarray(idx, dtype=float)
        if v.shape[-1] == 4:
            if not self.is_hexagonal:
                raise TracefitInputError(f"four-index {kind} given for a non-hexagonal lattice ({self.name})")
            v = miller_bravais_to_miller(v, kind)
        elif v.shape[-1] != 3:
            raise TracefitInputError(f"a {kind} needs 3 (or, hexagonal, 4) indices, got {v.shape[-1]}")
        if np.any(np.all(v == 0, axis=-1)):
            raise TracefitInputError(f"the all-zero {kind} has no direction")
        return v

    def plane_normal(self, hkl) -> np.ndarray:
        """Unit plane normal(s) in the Cartesian crystal frame, from the reciprocal basis.

        ``hkl`` may be (..., 3) Miller or, for hexagonal cells, (..., 4) Miller-Bravais.
        """
        v = self._three(hkl, "plane") @ self.reciprocal_matrix.T
        return v / np.linalg.norm(v, axis=-1, keepdims=True)

    def direction_vector(self, uvw, unit: bool = True) -> np.ndarray:
        """Direction(s) [uvw] (or [uvtw]) as Cartesian crystal vectors, unit length by default."""
        v = self._three(uvw, "direction") @ self.direct_matrix.T
        return v / np.linalg.norm(v, axis=-1, keepdims=True) if unit else v

    def d_spacing(self, hkl) -> np.ndarray:
        """Interplanar spacing d_hkl in the unit of a, b, c."""
        v = self._three(hkl, "plane") @ self.reciprocal_matrix.T
        return 1.0 / np.linalg.norm(v, axis=-1)

    def with_setting(self, hex_setting: str) -> "Lattice":
        return Lattice(self.a, self.b, self.c, self.alpha, self.beta, self.gamma, self.name, self.laue, hex_setting)



def _hcp(c_over_a: float | None = None, **kw) -> Lattice:
    if c_over_a is None:
        warnings.warn(
            f"no c/a given for hcp: using the ideal {IDEAL_C_OVER_A:.3f}; real metals differ "
            "(Mg 1.624, Ti 1.587, Zn 1.856), and twin and pyramidal traces move with c/a",
            stacklevel=3,
        )
        c_over_a = IDEAL_C_OVER_A
    return Lattice(1.0, 1.0, float(c_over_a), 90.0, 90.0, 120.0, name="hcp", **kw)


def _tetragonal(c_over_a: float | None = None, **kw) -> Lattice:
    if c_over_a is None:
        raise TracefitInputError("a tetragonal lattice needs its c/a ratio (e.g. --c-over-a 0.546 for beta-tin)")
    return Lattice(1.0, 1.0, float(c_over_a), name="tetragonal", **kw)


PRESETS = {
    "fcc": lambda c_over_a=None, **kw: Lattice(1.0, 1.0, 1.0, name="fcc", **kw),
    "bcc": lambda c_over_a=None, **kw: Lattice(1.0, 1.0, 1.0, name="bcc", **kw),
    "hcp": _hcp,
    "tetragonal": _tetragonal,
}


def lattice_preset(name: str, c_over_a: float | None = None, hex_setting: str = "x_a1") -> Lattice:
    """A named lattice: ``fcc``, ``bcc``, ``hcp`` (c/a, default ideal with a warning) or ``tetragonal`` (c/a required)."""
    key = name.strip().lower()
    if key not in PRESETS:
        raise TracefitInputError(f"unknown lattice {name!r}; choose one of {', '.join(PRESETS)} or give a lattice file")
    if c_over_a is not None and not (np.isfinite(c_over_a) and c_over_a > 0):
        raise TracefitInputError(f"c/a must be a positive number, got {c_over_a!r}")
    if key in ("fcc", "bcc") and c_over_a is not None:
        raise TracefitInputError(f"c/a does not apply to a cubic ({key}) lattice")
    kw = {"hex_setting": hex_setting} if key == "hcp" else {}
    return PRESETS[key](c_over_a=c_over_a, **kw)
