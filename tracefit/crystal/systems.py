"""Slip and twin systems: built-in catalogues (fcc, bcc, hcp) and user systems files.

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

import functools
import math
import re
import tomllib
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.crystal.indices import MillerIndex, format_index, parse_index, to_three
from tracefit.crystal.lattice import Lattice, lattice_preset
from tracefit.crystal.symmetry import (
    _to_four,
    canonical_sign,
    direction_variants,
    index_rotations,
    plane_variants,
    proper_rotations,
)

__all__ = [
    "DeformationSystem",
    "catalogue",
    "available_families",
    "filter_systems",
    "load_systems_file",
    "twin_shear",
    "expand_slip",
    "expand_twin",
    "TRADE_NAMES",
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


# --------------------------------------------------------------------------- built-in tables
@dataclass(frozen=True)
class _SlipSpec:
    key: str  # trade name for the families filter, "" if none
    name: str
    plane: tuple
    direction: tuple
    plane_family: str
    direction_family: str


@dataclass(frozen=True)
class _TwinSpec:
    key: str
    name: str
    k1: tuple  # K1 plane
    eta1: tuple  # eta1, sense as tabulated; the geometric sense is derived
    eta2: tuple  # second undistorted direction, fixes the sense
    plane_family: str
    direction_family: str


_FCC_SLIP = [_SlipSpec("", "{111}<110> slip", (1, 1, 1), (1, -1, 0), "{111}", "<110>")]
_FCC_TWIN = [_TwinSpec("", "{111}<112> twin", (1, 1, 1), (1, 1, -2), (1, 1, 2), "{111}", "<112>")]
_BCC_SLIP = [
    _SlipSpec("", "{110}<111> slip", (1, 1, 0), (1, -1, 1), "{110}", "<111>"),
    _SlipSpec("", "{112}<111> slip", (1, 1, 2), (1, 1, -1), "{112}", "<111>"),
    _SlipSpec("", "{123}<111> slip", (1, 2, 3), (1, 1, -1), "{123}", "<111>"),
]
_BCC_TWIN = [_TwinSpec("", "{112}<111> twin", (1, 1, 2), (1, 1, -1), (1, 1, 1), "{112}", "<111>")]
_HCP_SLIP = [
    _SlipSpec("basal", "basal <a>", (0, 0, 0, 1), (1, 1, -2, 0), "{0001}", "<11-20>"),
    _SlipSpec("prismatic", "prismatic <a>", (1, 0, -1, 0), (1, 1, -2, 0), "{10-10}", "<11-20>"),
    _SlipSpec("pyramidal-a", "pyramidal <a>", (1, 0, -1, 1), (1, 1, -2, 0), "{10-11}", "<11-20>"),
    _SlipSpec("pyramidal-ca-1", "pyramidal <c+a> 1st order", (1, 0, -1, 1), (1, 1, -2, 3), "{10-11}", "<11-23>"),
    _SlipSpec("pyramidal-ca-2", "pyramidal <c+a> 2nd order", (1, 1, -2, 2), (1, 1, -2, 3), "{11-22}", "<11-23>"),
]
# K1, eta1, eta2 after Yoo 1981 Table I (indices from memory of the table). Each use is checked
# in _builtin/_signed_shear: eta1 in K1, eta2 in the plane of shear, |s| equal to the closed form.
_HCP_TWIN = [
    _TwinSpec("twin-10-12", "{10-12}<10-11> twin", (1, 0, -1, 2), (-1, 0, 1, 1), (1, 0, -1, 1), "{10-12}", "<10-11>"),
    _TwinSpec("twin-11-21", "{11-21}<11-26> twin", (1, 1, -2, 1), (-1, -1, 2, 6), (1, 1, -2, 0), "{11-21}", "<11-26>"),
    _TwinSpec("twin-10-11", "{10-11}<10-12> twin", (1, 0, -1, 1), (1, 0, -1, -2), (3, 0, -3, 2), "{10-11}", "<10-12>"),
    _TwinSpec("twin-11-22", "{11-22}<11-23> twin", (1, 1, -2, 2), (1, 1, -2, -3), (2, 2, -4, 3), "{11-22}", "<11-23>"),
]

#: trade names accepted by the ``families`` filter
TRADE_NAMES = {s.key: s.name for s in _HCP_SLIP + _HCP_TWIN if s.key}


def _builtin_kind(lattice) -> str:
    name = (lattice.name or "").strip().lower()
    if name in ("fcc", "bcc") and lattice.is_cubic:
        return name
    if lattice.is_hexagonal and lattice.laue == "6/mmm":
        return "hcp"
    return ""


def _no_builtins_message(lattice) -> str:
    if lattice.is_cubic:
        return (
            f"the cubic lattice {lattice.name!r} has no built-in systems: name it 'fcc' or 'bcc' "
            "(lattice_preset) or give the systems in a systems file (docs/systems-file.md)"
        )
    return (
        f"there are no built-in slip or twin systems for the {lattice.laue} lattice {lattice.name!r} "
        "(built-ins exist for fcc, bcc and hcp); give them in a systems file (docs/systems-file.md)"
    )


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
    return format_index(values, kind, family=True)


def expand_slip(lattice, plane, direction, name: str | None = None, source: str = "built-in",
                plane_family: str | None = None, direction_family: str | None = None) -> list[DeformationSystem]:
    """All slip systems of a plane family and a direction family (directions lying in the planes).

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    plane, direction : sequence of int
        Any member of each family (3 indices, or 4 for hexagonal lattices).
    name : str, optional
        Label; default ``"{hkl}<uvw> slip"``.

    Returns
    -------
    list of DeformationSystem
        Ordered by plane (as :func:`tracefit.crystal.symmetry.plane_variants`) then direction.
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


def expand_twin(lattice, plane, direction, name: str | None = None, shear: float | None = None,
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
            p = _to_four(p, "plane")
        if len(direction) == 4:
            d = _to_four(d, "direction")
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


def _builtin(lattice) -> list[tuple[str, str, list[DeformationSystem]]]:
    """(key, mode, systems) per built-in system family (cached per lattice; systems are immutable)."""
    kind = _builtin_kind(lattice)
    if not kind:
        raise TracefitInputError(_no_builtins_message(lattice))
    groups, omitted = _builtin_cached(lattice)
    for name in omitted:  # warned on every call, not only when first cached
        warnings.warn(f"{name} has no shear at c/a = {lattice.c_over_a:.4f} and is left out", stacklevel=3)
    return [(k, m, list(g)) for k, m, g in groups]


@functools.lru_cache(maxsize=64)
def _builtin_cached(lattice) -> tuple:
    kind = _builtin_kind(lattice)
    out, omitted = [], []
    if kind == "fcc":
        slips, twins = _FCC_SLIP, _FCC_TWIN
    elif kind == "bcc":
        slips, twins = _BCC_SLIP, _BCC_TWIN
    elif kind == "hcp":
        slips, twins = _HCP_SLIP, _HCP_TWIN
    else:
        raise TracefitInputError(_no_builtins_message(lattice))
    for s in slips:
        out.append((s.key, "slip", expand_slip(lattice, s.plane, s.direction, s.name, plane_family=s.plane_family,
                                               direction_family=s.direction_family)))
    for t in twins:
        s = _signed_shear(lattice, t.k1, t.eta1, t.eta2)
        mag = twin_shear(t.plane_family, lattice.c_over_a if kind == "hcp" else None)
        if not math.isclose(abs(s), mag, rel_tol=1e-9, abs_tol=1e-12):  # pragma: no cover - table check
            raise RuntimeError(f"{t.name}: geometric shear {abs(s)} differs from the closed form {mag}")
        if mag < 1e-6:
            omitted.append(t.name)
            continue
        direction = t.eta1 if s > 0 else tuple(-x for x in t.eta1)
        out.append(
            (t.key, "twin", expand_twin(lattice, t.k1, direction, t.name, mag, plane_family=t.plane_family,
                                         direction_family=t.direction_family))
        )
    return tuple((k, m, tuple(g)) for k, m, g in out), tuple(omitted)


def _norm_label(text: str) -> str:
    return re.sub(r"\s+", "", text.strip().lower())


def _label_keys(lattice, text: str):
    """Parse a label like '{111}<110>' or '{10-12}' into (plane_family_members, direction members or None)."""
    t = re.sub(r"\s*(slip|twin|twinning)$", "", text.strip(), flags=re.I)
    m = re.fullmatch(r"\s*([({][^)}]*[)}])\s*([\[<][^\]>]*[\]>])?\s*", t)
    if not m:
        return None
    try:
        p = parse_index(m.group(1), expect="plane")
        pv = set(plane_variants(lattice, p.values))
        dv = None
        if m.group(2):
            d = parse_index(m.group(2), expect="direction")
            dv = set(direction_variants(lattice, d.values, signed=False))
    except TracefitInputError:
        return None
    return pv, dv


def available_families(lattice) -> list[str]:
    """Labels accepted by the ``families`` filter for the built-ins of ``lattice``."""
    out = []
    for key, mode, systems in _builtin(lattice):
        s = systems[0]
        out.append(s.family_label + (f" ({key})" if key else "") + f" {mode}")
    return out


def filter_systems(systems, lattice=None, modes=MODES, families=None) -> list[DeformationSystem]:
    """Keep the systems of the given modes whose family matches one of ``families``.

    Parameters
    ----------
    systems : list of DeformationSystem
    lattice : Lattice, optional
        Needed to match index labels written with another family member (e.g. ``{1-11}``).
    modes : iterable of {"slip", "twin"}
    families : iterable of str, optional
        Labels such as ``"{111}<110>"``, ``"{10-12}"``, a system name (``"basal <a>"``) or a
        trade name (``"basal"``, ``"prismatic"``, ``"pyramidal-a"``, ``"pyramidal-ca-1"``,
        ``"pyramidal-ca-2"``, ``"twin-10-12"``...). None keeps all.
    """
    modes = _check_modes(modes)
    kept = [s for s in systems if s.mode in modes]
    if families is None:
        return kept
    if isinstance(families, str):
        families = [families]
    chosen: list[DeformationSystem] = []
    for label in families:
        hits = _match(kept, lattice, label)
        if not hits:
            avail = []
            for s in kept:
                text = f"{s.family_label} {s.mode}"
                text = text if s.name == text else f"{text} ({s.name})"
                if text not in avail:
                    avail.append(text)
            trade = [k for k in TRADE_NAMES if any(s.name == TRADE_NAMES[k] for s in kept)]
            raise TracefitInputError(
                f"no {'/'.join(modes)} system family matches {label!r}; available: "
                + "; ".join(avail)
                + (f"; trade names: {', '.join(trade)}" if trade else "")
            )
        for s in hits:
            if s not in chosen:
                chosen.append(s)
    return chosen


def _match(systems, lattice, label):
    key = _norm_label(label)
    if key in TRADE_NAMES:
        return [s for s in systems if s.name == TRADE_NAMES[key]]
    by_name = [s for s in systems if _norm_label(s.name) == key]
    if by_name:
        return by_name
    parsed = _label_keys(lattice, label) if lattice is not None else None
    mode = None
    mm = re.search(r"(slip|twin|twinning)\s*$", label.strip(), flags=re.I)
    if mm:
        mode = "twin" if mm.group(1).lower().startswith("twin") else "slip"
    out = []
    for s in systems:
        if mode and s.mode != mode:
            continue
        if parsed is not None:
            pv, dv = parsed
            if canonical_sign(s.plane) not in pv:
                continue
            if dv is not None and canonical_sign(s.direction) not in dv:
                continue
            out.append(s)
        else:
            lab = re.sub(r"\s*(slip|twin|twinning)$", "", key)
            if lab in (_norm_label(s.family), _norm_label(s.family_label)):
                out.append(s)
    return out


def _check_modes(modes):
    if isinstance(modes, str):
        modes = (modes,)
    modes = tuple(m.strip().lower() for m in modes)
    bad = [m for m in modes if m not in MODES]
    if bad:
        raise TracefitInputError(f"unknown mode {bad[0]!r}; use 'slip', 'twin' or both")
    return modes


def catalogue(lattice, modes=MODES, families=None) -> list[DeformationSystem]:
    """Built-in slip and twin systems of a lattice.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
        Built-ins exist for lattices named ``"fcc"`` and ``"bcc"`` (cubic) and for any
        hexagonal 6/mmm lattice (hcp; c/a from the lattice).
    modes : iterable of {"slip", "twin"}
    families : iterable of str, optional
        Filter, see :func:`filter_systems`.

    Returns
    -------
    list of DeformationSystem
        fcc: 12 {111}<110> slip, 12 {111}<112> twin. bcc: 12 {110}<111>, 12 {112}<111>,
        24 {123}<111> slip, 12 {112}<111> twin. hcp: 3 basal, 3 prismatic, 6 pyramidal <a>,
        12 pyramidal <c+a> 1st order, 6 2nd order slip; 6 each of the {10-12}, {11-21},
        {10-11}, {11-22} twins.

    Raises
    ------
    TracefitInputError
        No built-ins for the lattice (use a systems file), unknown mode or family.
    """
    modes = _check_modes(modes)
    systems = [s for _, mode, group in _builtin(lattice) if mode in modes for s in group]
    return filter_systems(systems, lattice, modes, families)


# --------------------------------------------------------------------------- systems files
_LATTICE_KEYS = {"preset", "name", "a", "b", "c", "alpha", "beta", "gamma", "c_over_a", "laue", "hex_setting"}
_SYSTEM_KEYS = {"mode", "plane", "direction", "name", "shear", "expand", "eta2"}
_TOP_KEYS = {"format", "version", "lattice", "system", "description"}


def _system_lines(text: str) -> list[int]:
    return [i + 1 for i, line in enumerate(text.splitlines()) if re.match(r"\s*\[\[\s*system\s*\]\]", line)]


def _read_lattice(tab, path) -> Lattice:
    where = f"{path}: [lattice]"
    if not isinstance(tab, dict):
        raise TracefitInputError(f"{where} must be a table")
    unknown = set(tab) - _LATTICE_KEYS
    if unknown:
        raise TracefitInputError(f"{where}: unknown key(s) {', '.join(sorted(unknown))}; allowed: {', '.join(sorted(_LATTICE_KEYS))}")

    def num(k, default=None):
        v = tab.get(k, default)
        if v is None:
            return None
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise TracefitInputError(f"{where}: {k} must be a number, got {v!r}")
        return float(v)

    name = tab.get("name")
    if name is not None and not isinstance(name, str):
        raise TracefitInputError(f"{where}: name must be text")
    if "preset" in tab:
        extra = set(tab) & {"a", "b", "c", "alpha", "beta", "gamma"}
        if extra:
            raise TracefitInputError(f"{where}: give either preset (with c_over_a) or the cell a, b, c, alpha, beta, gamma, not both")
        lat = lattice_preset(str(tab["preset"]), c_over_a=num("c_over_a"), hex_setting=tab.get("hex_setting", "x_a1"))
        if name or "laue" in tab:
            lat = Lattice(lat.a, lat.b, lat.c, lat.alpha, lat.beta, lat.gamma, name or lat.name, tab.get("laue", lat.laue), lat.hex_setting)
        return lat
    if "a" not in tab:
        raise TracefitInputError(f"{where}: missing a (cell edge) or preset; e.g. a = 5.831, c = 3.182 or preset = \"hcp\"")
    a = num("a")
    coa = num("c_over_a")
    if "c" not in tab and coa is None:
        raise TracefitInputError(f"{where}: missing c (or c_over_a)")
    c = num("c") if "c" in tab else a * coa
    b = num("b", a)
    return Lattice(a, b, c, num("alpha", 90.0), num("beta", 90.0), num("gamma", 90.0), name or "custom",
                   tab.get("laue"), tab.get("hex_setting", "x_a1"))


def load_systems_file(path, lattice: Lattice | None = None) -> tuple[Lattice | None, list[DeformationSystem]]:
    """Read a user systems file (TOML, format described in docs/systems-file.md).

    Parameters
    ----------
    path : str or Path
    lattice : Lattice, optional
        Used when the file has no ``[lattice]`` table.

    Returns
    -------
    (Lattice or None, list of DeformationSystem)
        The file's lattice (None if it has none) and its systems, expanded over symmetry
        where asked.

    Raises
    ------
    TracefitInputError
        Unreadable file, TOML syntax error, unknown or missing keys, wrong index counts,
        unknown modes, directions not in their planes; messages name the entry and its line.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except OSError as exc:
        raise TracefitInputError(f"cannot read systems file {p}: {exc.strerror or exc}") from None
    except UnicodeDecodeError:
        raise TracefitInputError(f"systems file {p} is not UTF-8 text") from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise TracefitInputError(f"systems file {p} is not valid TOML: {exc}") from None
    unknown = set(data) - _TOP_KEYS
    if unknown:
        raise TracefitInputError(f"{p}: unknown top-level key(s) {', '.join(sorted(unknown))}; allowed: {', '.join(sorted(_TOP_KEYS))}")
    fmt = data.get("format", "tracefit-systems")
    if fmt != "tracefit-systems":
        raise TracefitInputError(f"{p}: format must be \"tracefit-systems\", got {fmt!r}")
    version = data.get("version", 1)
    if version != 1:
        raise TracefitInputError(f"{p}: this tracefit reads systems-file version 1, the file says {version!r}")
    file_lattice = _read_lattice(data["lattice"], p) if "lattice" in data else None
    if file_lattice is not None:
        try:
            proper_rotations(file_lattice)  # the cell must have the symmetry of its Laue class
        except TracefitInputError as exc:
            raise TracefitInputError(f"{p}: [lattice]: {exc}") from None
    lat = file_lattice or lattice
    if lat is None:
        raise TracefitInputError(f"{p}: no [lattice] table, and no lattice was given; add [lattice] (see docs/systems-file.md)")
    entries = data.get("system", [])
    if not isinstance(entries, list) or not entries:
        raise TracefitInputError(f"{p}: no systems; add one or more [[system]] tables with mode, plane and direction")
    lines = _system_lines(text)
    out: list[DeformationSystem] = []
    for i, e in enumerate(entries):
        line = f", line {lines[i]}" if i < len(lines) else ""
        label = e.get("name") if isinstance(e, dict) else None
        where = f"{p}: system {i + 1}{line}" + (f" ({label})" if isinstance(label, str) else "")
        out.extend(_read_entry(e, lat, where, str(p)))
    return file_lattice, out


def _sense_from_eta2(lat, pl: MillerIndex, di: MillerIndex, eta2_text, shear):
    """Twinning sense and shear from K1, eta1 and eta2 (see the module docstring)."""
    if not isinstance(eta2_text, str):
        raise TracefitInputError(f"eta2 must be text in index brackets, e.g. \"[101]\", got {eta2_text!r}")
    e2 = parse_index(eta2_text, lattice=lat, expect="direction")
    if e2.family:
        raise TracefitInputError(f"eta2 must be one direction in [], the one in the plane of shear of {pl}{di}, got {e2}")
    try:
        s = _signed_shear(lat, pl.values, di.values, e2.values)
    except RuntimeError:
        raise TracefitInputError(
            f"eta2 {e2} does not lie in the plane of shear of {pl}{di} (the plane holding eta1 and the K1 normal), "
            "or lies in K1; give the eta2 variant that does"
        ) from None
    if abs(s) < 1e-9:
        raise TracefitInputError(f"{pl}{di} with eta2 {e2} has no shear; check the indices")
    if shear is not None and not math.isclose(shear, abs(s), rel_tol=0.01):
        raise TracefitInputError(f"shear = {shear:g} disagrees with the {abs(s):.4g} that K1, eta1 and eta2 give for this lattice")
    d = di.values if s > 0 else tuple(-x for x in di.values)
    return MillerIndex(d, "direction", False), abs(s)


def _read_entry(e, lat, where, source) -> list[DeformationSystem]:
    if not isinstance(e, dict):
        raise TracefitInputError(f"{where}: each [[system]] must be a table")
    unknown = set(e) - _SYSTEM_KEYS
    if unknown:
        raise TracefitInputError(f"{where}: unknown key(s) {', '.join(sorted(unknown))}; allowed: {', '.join(sorted(_SYSTEM_KEYS))}")
    for k in ("mode", "plane", "direction"):
        if k not in e:
            raise TracefitInputError(f"{where}: missing {k}" + {"mode": " (\"slip\" or \"twin\")", "plane": " (e.g. \"{110}\" or \"(110)\")", "direction": " (e.g. \"<001>\" or \"[001]\")"}[k])
    mode = e["mode"]
    if not isinstance(mode, str) or mode.strip().lower() not in MODES:
        raise TracefitInputError(f"{where}: unknown mode {mode!r}; use \"slip\" or \"twin\"")
    mode = mode.strip().lower()
    for k in ("plane", "direction"):
        if not isinstance(e[k], str):
            raise TracefitInputError(f"{where}: {k} must be text in index brackets, e.g. \"(101)\", got {e[k]!r}")
    name = e.get("name")
    if name is not None and not isinstance(name, str):
        raise TracefitInputError(f"{where}: name must be text")
    expand = e.get("expand")
    if expand is not None and not isinstance(expand, bool):
        raise TracefitInputError(f"{where}: expand must be true or false")
    shear = e.get("shear")
    if "eta2" in e and mode != "twin":
        raise TracefitInputError(f"{where}: eta2 applies to twins only")
    if shear is not None:
        if mode != "twin":
            raise TracefitInputError(f"{where}: shear applies to twins only")
        if isinstance(shear, bool) or not isinstance(shear, (int, float)) or not (shear > 0 and math.isfinite(shear)):
            raise TracefitInputError(f"{where}: shear must be a positive number, got {shear!r}")
        shear = float(shear)
    try:
        pl = parse_index(e["plane"], lattice=lat, expect="plane")
        di = parse_index(e["direction"], lattice=lat, expect="direction")
    except TracefitInputError as exc:
        raise TracefitInputError(f"{where}: {exc}") from None
    if pl.family != di.family:
        raise TracefitInputError(
            f"{where}: write both plane and direction as families ({{}} and <>) or both as single indices (() and [])"
        )
    family = pl.family
    if expand is None:
        expand = family
    if family and not expand:
        raise TracefitInputError(f"{where}: families ({{}} and <>) always expand; write () and [] for one system")
    try:
        if mode == "slip":
            # Families pair every plane with every direction lying in it; single indices must fit.
            if not family and _zone(pl.values, di.values) != 0:
                raise TracefitInputError(
                    f"direction {di} does not lie in plane {pl} (h u + k v + l w = {_zone(pl.values, di.values)}, must be 0)"
                )
            if expand:
                return expand_slip(lat, pl.values, di.values, name, source=source)
            p, d = canonical_sign(pl.values), canonical_sign(di.values)
            pf, df = format_index(p, "plane", True), format_index(d, "direction", True)
            n, u = _unit_vectors(lat, p, d, name or f"{pf}{df} slip")
            return [DeformationSystem("slip", pf, df, name or f"{pf}{df} slip", p, d, n, u, None, source)]
        if family:
            raise TracefitInputError(
                "a twin needs one plane and its twinning direction with the shear sense, e.g. "
                "plane = \"(301)\", direction = \"[10-3]\"; add expand = true for all variants"
            )
        if _zone(pl.values, di.values) != 0:
            raise TracefitInputError(
                f"direction {di} does not lie in plane {pl} (h u + k v + l w = {_zone(pl.values, di.values)}, must be 0)"
            )
        if "eta2" in e:
            di, shear = _sense_from_eta2(lat, pl, di, e["eta2"], shear)
        if expand:
            return expand_twin(lat, pl.values, di.values, name, shear, source=source)
        p, d = pl.values, di.values
        if canonical_sign(p) != p:
            p, d = canonical_sign(p), tuple(-x for x in d)
        pf, df = format_index(p, "plane", True), format_index(canonical_sign(d), "direction", True)
        n, u = _unit_vectors(lat, p, d, name or f"{pf}{df} twin")
        return [DeformationSystem("twin", pf, df, name or f"{pf}{df} twin", p, d, n, u, shear, source)]
    except TracefitInputError as exc:
        msg = str(exc)
        raise TracefitInputError(msg if msg.startswith(where) else f"{where}: {msg}") from None
