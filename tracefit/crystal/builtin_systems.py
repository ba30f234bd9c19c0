"""The built-in slip and twin systems of fcc, bcc and hcp lattices, and the filter that picks
system families by label, system name or trade name.

Twin senses are derived from K1, eta1 and eta2 (see :mod:`tracefit.crystal.systems`).
"""

from __future__ import annotations

import functools
import math
import re
import warnings
from collections.abc import Iterable, Sequence
from dataclasses import dataclass

from tracefit.crystal.indices import parse_index
from tracefit.crystal.lattice import Lattice
from tracefit.crystal.systems import (
    MODES,
    DeformationSystem,
    _signed_shear,
    expand_slip,
    expand_twin,
    twin_shear,
)
from tracefit.crystal.symmetry import canonical_sign, direction_variants, plane_variants
from tracefit.errors import TracefitInputError

__all__ = [
    "catalogue",
    "available_families",
    "filter_systems",
    "TRADE_NAMES",
]


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


def available_families(lattice: Lattice) -> list[str]:
    """Labels accepted by the ``families`` filter for the built-ins of ``lattice``.

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice

    Returns
    -------
    list of str
        One label per built-in system family, with its trade name where it has one.

    Raises
    ------
    TracefitInputError
        No built-ins for the lattice.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> available_families(Lattice.fcc())
    ['{111}<110> slip', '{111}<112> twin']
    """
    out = []
    for key, mode, systems in _builtin(lattice):
        s = systems[0]
        out.append(s.family_label + (f" ({key})" if key else "") + f" {mode}")
    return out


def filter_systems(systems: Sequence[DeformationSystem], lattice: Lattice | None = None, modes: str | Iterable[str] = MODES, families: str | Iterable[str] | None = None) -> list[DeformationSystem]:
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

    Returns
    -------
    list of DeformationSystem
        In the order of ``families`` (then catalogue order), each system once.

    Raises
    ------
    TracefitInputError
        Unknown mode, or a label that matches nothing (the message lists what is available).

    Examples
    --------
    >>> from tracefit.crystal import Lattice, catalogue
    >>> lat = Lattice.hcp(c_over_a=1.587)
    >>> len(filter_systems(catalogue(lat), lat, modes="slip", families=["basal", "prismatic"]))
    6
    """
    modes = _check_modes(modes)
    kept = [s for s in systems if s.mode in modes]
    if families is None:
        return kept
    if isinstance(families, str):
        families = [families]
    if not isinstance(families, (list, tuple, set, frozenset)) or not all(isinstance(f, str) for f in families):
        raise TracefitInputError(f"families must be a family label such as '{{111}}' or a list of them, got {families!r}")
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
    if not isinstance(modes, (list, tuple, set, frozenset)) or not all(isinstance(m, str) for m in modes):
        raise TracefitInputError(f"modes must be 'slip', 'twin' or a list of them, got {modes!r}")
    modes = tuple(m.strip().lower() for m in modes)
    bad = [m for m in modes if m not in MODES]
    if bad:
        raise TracefitInputError(f"unknown mode {bad[0]!r}; use 'slip', 'twin' or both")
    return modes


def catalogue(lattice: Lattice, modes: str | Iterable[str] = MODES, families: str | Iterable[str] | None = None) -> list[DeformationSystem]:
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

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> len(catalogue(Lattice.fcc())), len(catalogue(Lattice.bcc(), modes="slip"))
    (24, 48)
    """
    modes = _check_modes(modes)
    systems = [s for _, mode, group in _builtin(lattice) if mode in modes for s in group]
    return filter_systems(systems, lattice, modes, families)


