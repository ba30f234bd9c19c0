"""Slip and twin systems: the :class:`DeformationSystem` type, expansion of a system over the
crystal symmetry, and twin shears. The built-in catalogue lives in
:mod:`tracefit.crystal.builtin_systems`, the systems-file reader in
:mod:`tracefit.crystal.systems_file`.

Each :class:`DeformationSystem` is one physical system, listed once:

* slip: (n, d), (-n, d), (n, -d) and (-n, -d) are the same system; the plane is written
  with its first non-zero index positive, the direction likewise.
* twin: (n, d) and (-n, -d) are the same, but (n, -d) is not: ``d`` is the twinning
  direction *with its sense*. Convention: the twin forms when the resolved shear stress
  tau = n . sigma . d is positive, i.e. the crystal on the +n side of the plane moves along
  +d relative to the crystal on the -n side. For uniaxial stress sigma along unit l
  (tension > 0) that is sigma (l . n)(l . d) > 0.

How the twinning sense is derived (not typed in): every built-in twin is stored with its
K1 plane, eta1 direction and the second undistorted direction eta2 (Yoo 1981, Metall.
Trans. A 12, 409, Table I; Christian & Mahajan 1995, Prog. Mater. Sci. 39, 1). The
twinning shear S = I + s eta1 n^T must carry the lattice vector along eta2 onto the
(negated) mirror image of itself in K1, which keeps its length. Writing
eta2 = p eta1 + q n (unit eta1, n), |S eta2| = |eta2| gives the signed shear

    s = -2 (eta1 . eta2) / (n . eta2).

If s > 0 the shear runs along +eta1; if s < 0 the twinning direction is -eta1. The
magnitude |s| is checked against the published closed forms (:func:`twin_shear`). This
reproduces the known behaviour: fcc (111)[11-2] and bcc (112)[-1-11] (not the
anti-twinning [11-1]); hcp {10-12} twins extend the c axis for c/a < sqrt 3 (Mg, Ti, Zr,
Be) and contract it for c/a > sqrt 3 (Zn, Cd); {11-21} extend c; {10-11} and {11-22}
contract c at the c/a of the usual metals.
"""


from __future__ import annotations

import math
import re
from collections.abc import Sequence
from dataclasses import dataclass, field

import numpy as np

from tracefit.conventions import miller_to_miller_bravais
from tracefit.crystal.indices import format_index, parse_index, to_three
from tracefit.crystal.lattice import Lattice
from tracefit.crystal.symmetry import canonical_sign, direction_variants, index_rotations, plane_variants
from tracefit.errors import TracefitInputError

__all__ = [
    "DeformationSystem",
    "twin_shear",
    "expand_slip",
    "expand_twin",
    "MODES",
]

MODES = ("slip", "twin")


@dataclass(frozen=True)
class DeformationSystem:
    """One slip or twin system.

    Attributes
    ----------
    mode : {"slip", "twin"}
    family : str
        Plane family label, e.g. ``"{111}"``, ``"{10-12}"``.
    direction_family : str
        Direction family label, e.g. ``"<110>"``, ``"<10-11>"``.
    name : str
        Human label of the system family, e.g. ``"{111}<110> slip"``, ``"basal <a>"``,
        ``"{10-12}<10-11> twin"``.
    plane : tuple of int
        The plane, 3 or 4 indices as written (hexagonal: 4).
    direction : tuple of int
        The slip or twinning direction (twins: with its shear sense).
    normal : ndarray, shape (3,)
        Unit plane normal, Cartesian crystal frame (from the reciprocal lattice).
    dir_unit : ndarray, shape (3,)
        Unit direction, Cartesian crystal frame.
    shear : float or None
        Twin shear magnitude (dimensionless); None for slip (and for user twins without one).
    source : str
        Where the entry came from: ``"built-in"`` or the systems file path.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, catalogue
    >>> s = catalogue(Lattice.fcc(), modes="slip")[0]
    >>> s.label, s.family_label, s.mode
    ('(111)[10-1]', '{111}<110>', 'slip')
    """

    mode: str
    family: str
    direction_family: str
    name: str
    plane: tuple
    direction: tuple
    normal: np.ndarray = field(compare=False, repr=False)
    dir_unit: np.ndarray = field(compare=False, repr=False)
    shear: float | None = None
    source: str = field(default="built-in", compare=False)

    @property
    def plane_label(self) -> str:
        """The plane in trade notation, e.g. ``"(1-11)"``."""
        return format_index(self.plane, "plane")

    @property
    def direction_label(self) -> str:
        """The direction in trade notation, e.g. ``"[0-11]"``."""
        return format_index(self.direction, "direction")

    @property
    def label(self) -> str:
        """Plane and direction, e.g. ``"(111)[-101]"``."""
        return self.plane_label + self.direction_label

    @property
    def family_label(self) -> str:
        """Plane and direction families, e.g. ``"{111}<110>"``."""
        return self.family + self.direction_family

    def to_dict(self) -> dict:
        """JSON-ready description (vectors as lists)."""
        return {
            "mode": self.mode,
            "name": self.name,
            "family": self.family,
            "direction_family": self.direction_family,
            "plane": self.plane_label,
            "direction": self.direction_label,
            "plane_indices": list(self.plane),
            "direction_indices": list(self.direction),
            "normal": [float(x) for x in self.normal],
            "dir_unit": [float(x) for x in self.dir_unit],
            "shear": self.shear,
            "source": self.source,
        }


# --------------------------------------------------------------------------- twin shears
def _s_10m12(g):
    return abs(g * g - 3.0) / (math.sqrt(3.0) * g)


def _s_11m21(g):
    return 1.0 / g


def _s_10m11(g):
    return abs(4.0 * g * g - 9.0) / (4.0 * math.sqrt(3.0) * g)


def _s_11m22(g):
    return abs(2.0 * (g * g - 2.0) / (3.0 * g))


# Closed forms from Yoo 1981 (Metall. Trans. A 12, 409), Table I; gamma = c/a.
_HEX_SHEAR = {
    (1, 0, -1, 2): _s_10m12,
    (1, 1, -2, 1): _s_11m21,
    (1, 0, -1, 1): _s_10m11,
    (1, 1, -2, 2): _s_11m22,
}


def _family_key(text: str) -> tuple[int, ...]:
    label = text.strip()
    m = re.match(r"^([({][^)}]*[)}])", label)
    if not m:
        raise TracefitInputError(f"expected a twin plane family such as {{10-12}} or {{111}}, got {text!r}")
    return tuple(parse_index(m.group(1), expect="plane").values)


def twin_shear(family: str, c_over_a: float | None = None) -> float:
    """Twin shear magnitude of a built-in twin family.

    Parameters
    ----------
    family : str
        ``"{111}"`` (fcc), ``"{112}"`` (bcc): 1/sqrt 2 (Christian & Mahajan 1995).
        Hexagonal (Yoo 1981, gamma = c/a): ``"{10-12}"`` |gamma^2 - 3| / (sqrt 3 gamma);
        ``"{11-21}"`` 1/gamma; ``"{10-11}"`` |4 gamma^2 - 9| / (4 sqrt 3 gamma);
        ``"{11-22}"`` 2 |gamma^2 - 2| / (3 gamma). A direction part (``"{10-12}<10-11>"``) is allowed.
    c_over_a : float, optional
        Required for the hexagonal families.

    Returns
    -------
    float
        Shear magnitude s >= 0 (dimensionless).

    Raises
    ------
    TracefitInputError
        No built-in shear for the family, or a hexagonal family without a positive c/a.

    Examples
    --------
    >>> round(twin_shear("{10-12}", 1.624), 4)  # Mg
    0.1289
    >>> round(twin_shear("{111}"), 4)
    0.7071
    """
    key = canonical_sign(_family_key(family))
    if len(key) == 3 and (key in plane_variants(_CUBIC_REF, (1, 1, 1)) or key in plane_variants(_CUBIC_REF, (1, 1, 2))):
        return 1.0 / math.sqrt(2.0)
    fam = None
    for proto in _HEX_SHEAR:
        if len(key) == 4 and key in plane_variants(_HEX_REF, proto):
            fam = proto
    if fam is None:
        raise TracefitInputError(
            f"no built-in twin shear for {family!r}; known: {{111}} (fcc), {{112}} (bcc), "
            "{10-12}, {11-21}, {10-11}, {11-22} (hexagonal)"
        )
    if c_over_a is None or not (np.isfinite(c_over_a) and c_over_a > 0):
        raise TracefitInputError(f"the shear of the hexagonal twin {family} needs a positive c/a, got {c_over_a!r}")
    return float(_HEX_SHEAR[fam](float(c_over_a)))


# Reference cells for recognising family labels (index symmetry does not depend on c/a).
_HEX_REF = Lattice(1.0, 1.0, 1.6, 90.0, 90.0, 120.0, name="hexagonal-reference")
_CUBIC_REF = Lattice(1.0, 1.0, 1.0, name="cubic-reference")


# --------------------------------------------------------------------------- construction
def _unit_vectors(lattice, plane, direction, where: str):
    n = lattice.plane_normal(plane)
    d = lattice.direction_vector(direction)
    if abs(float(n @ d)) > 1e-9:
        raise TracefitInputError(
            f"{where}: direction {format_index(direction, 'direction')} does not lie in plane "
            f"{format_index(plane, 'plane')} (n . d = {float(n @ d):.3g}); a slip or twin direction must lie in its plane"
        )
    n = np.array(n, dtype=float)
    d = np.array(d, dtype=float)
    n.setflags(write=False)
    d.setflags(write=False)
    return n, d


def _zone(plane, direction) -> int:
    """Zone-law sum h u + k v + l w in three-index form (0 when the direction lies in the plane)."""
    return int(np.dot(to_three(plane, "plane"), to_three(direction, "direction")))


def _family_label(lattice, values, kind) -> str:
    return format_index(values, kind, family=True, notation="four")  # stored keys stay four-index


def expand_slip(lattice: Lattice, plane: Sequence[int], direction: Sequence[int], name: str | None = None, source: str = "built-in",
                plane_family: str | None = None, direction_family: str | None = None) -> list[DeformationSystem]:
    """All slip systems of a plane family and a direction family (directions lying in the planes).

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    plane, direction : sequence of int
        Any member of each family (3 indices, or 4 for hexagonal lattices).
    name : str, optional
        Label; default ``"{hkl}<uvw> slip"``.

    plane_family, direction_family : str, optional
        Family labels to store; default from the indices.
    source : str
        Where the systems come from.

    Returns
    -------
    list of DeformationSystem
        Ordered by plane (as :func:`tracefit.crystal.symmetry.plane_variants`) then direction.

    Raises
    ------
    TracefitInputError
        No direction of the family lies in any plane of the family.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> len(expand_slip(Lattice.bcc(), (1, 1, 0), (1, -1, 1)))
    12
    """
    pf = plane_family or _family_label(lattice, plane, "plane")
    df = direction_family or _family_label(lattice, direction, "direction")
    name = name or f"{pf}{df} slip"
    dirs = direction_variants(lattice, direction, signed=False)
    out = []
    for p in plane_variants(lattice, plane):
        for d in dirs:
            if _zone(p, d) == 0:
                n, u = _unit_vectors(lattice, p, d, name)
                out.append(DeformationSystem("slip", pf, df, name, p, d, n, u, None, source))
    if not out:
        raise TracefitInputError(
            f"{name}: no direction of {df} lies in any plane of {pf}; check the indices"
        )
    return out


def _signed_shear(lattice, k1, eta1, eta2) -> float:
    n = lattice.plane_normal(k1)
    e1 = lattice.direction_vector(eta1)
    e2 = lattice.direction_vector(eta2, unit=False)
    if abs(n @ e1) > 1e-9:
        raise RuntimeError(f"eta1 {eta1} not in K1 {k1}")
    # eta2 must lie in the plane of shear (spanned by n and eta1).
    if abs(np.cross(n, e1) @ e2) > 1e-9 * np.linalg.norm(e2):
        raise RuntimeError(f"eta2 {eta2} not in the plane of shear of {k1}{eta1}")
    q = float(n @ e2)
    if abs(q) < 1e-12:
        raise RuntimeError(f"eta2 {eta2} lies in K1 {k1}")
    return -2.0 * float(e1 @ e2) / q


def expand_twin(lattice: Lattice, plane: Sequence[int], direction: Sequence[int], name: str | None = None, shear: float | None = None,
                source: str = "built-in", plane_family: str | None = None,
                direction_family: str | None = None) -> list[DeformationSystem]:
    """All variants of one twin system given with its shear sense.

    The variants are the orbit of (plane, direction) under the proper rotations; (n, d) and
    (-n, -d) are one variant; the direction keeps its sense.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    plane, direction : sequence of int
        One twin plane K1 and its twinning direction with the sense of the shear.
    name : str, optional
    shear : float, optional
        Twin shear magnitude stored on each variant.
    source : str
        Where the systems come from.
    plane_family, direction_family : str, optional
        Family labels to store; default from the indices.

    Returns
    -------
    list of DeformationSystem
        Sorted by (plane, direction), descending.

    Raises
    ------
    TracefitInputError
        The direction does not lie in the plane.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> tw = expand_twin(Lattice.fcc(), (1, 1, 1), (-1, -1, 2))
    >>> len(tw), tw[0].mode
    (12, 'twin')
    """
    plane = tuple(int(x) for x in plane)
    direction = tuple(int(x) for x in direction)
    pf = plane_family or _family_label(lattice, canonical_sign(plane), "plane")
    df = direction_family or _family_label(lattice, canonical_sign(direction), "direction")
    name = name or f"{pf}{df} twin"
    _unit_vectors(lattice, plane, direction, name)
    Mp = index_rotations(lattice, "plane")
    Md = index_rotations(lattice, "direction")
    p3 = np.array(to_three(plane, "plane"))
    d3 = np.array(to_three(direction, "direction"))
    seen = {}
    for A, B in zip(Mp, Md):
        p = A @ p3
        d = B @ d3
        if len(plane) == 4:
            p = miller_to_miller_bravais(p, "plane", integer=True)
        if len(direction) == 4:
            d = miller_to_miller_bravais(d, "direction", integer=True)
        p = tuple(int(x) for x in p)
        d = tuple(int(x) for x in d)
        cp = canonical_sign(p)
        if cp != p:
            d = tuple(-x for x in d)
        seen.setdefault((cp, d), None)
    out = []
    for p, d in sorted(seen, reverse=True):
        n, u = _unit_vectors(lattice, p, d, name)
        out.append(DeformationSystem("twin", pf, df, name, p, d, n, u, shear, source))
    return out


