"""Proper rotation groups of the Laue classes, and the variants of plane and direction families.

The rotations are built from the lattice's own basis vectors (Cartesian crystal frame of
:class:`tracefit.crystal.lattice.Lattice`), so they follow whatever setting the lattice uses
(e.g. hexagonal x || a1 or x || a1*). Rotation axes per Laue class:

=========  ===========  ==========================================================
Laue       rotations    generators (axes as lattice vectors)
=========  ===========  ==========================================================
m-3m       432 (24)     4 || c, 4 || a (gives the 3-folds || <111>)
m-3        23 (12)      2 || c, 2 || a, 3 || a + b + c
6/mmm      622 (12)     6 || c, 2 || a1
6/m        6 (6)        6 || c
-3m        32 (6)       3 || c, 2 || a1 (the "-3m1" choice, 2-folds along a1, a2, a3)
-3         3 (3)        3 || c
4/mmm      422 (8)      4 || c, 2 || a
4/m        4 (4)        4 || c
mmm        222 (4)      2 || a, 2 || b, 2 || c
2/m        2 (2)        2 || the unique axis (b when alpha = gamma = 90 deg)
-1         1 (1)        identity
=========  ===========  ==========================================================

Only proper rotations are returned: every Laue group is the proper group times
inversion, and inversion maps a plane or direction onto its own negative, which is the
same plane (one trace) or, for signed directions, is dealt with by the caller.

Variants are found in integer index space: each rotation R is carried into the
reciprocal basis (planes, M = B^-1 R B) or the direct basis (directions, M = A^-1 R A),
checked to be integral, and applied to the integer indices, so variants are exact.

Order of variants (stable, documented): each variant is written with a canonical sign
(first non-zero index positive) for unsigned results, and the list is sorted in
descending lexicographic order of the written indices, e.g.
{111} -> (111), (11-1), (1-11), (1-1-1).
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import TYPE_CHECKING

import numpy as np

from tracefit.conventions import miller_bravais_to_miller, miller_to_miller_bravais
from tracefit.crystal.indices import MillerIndex, check_values, parse_index, to_three
from tracefit.crystal.rotations import from_axis_angle
from tracefit.errors import TracefitInputError

if TYPE_CHECKING:  # names used in annotations only
    from tracefit.crystal.lattice import Lattice

__all__ = [
    "proper_rotations",
    "index_rotations",
    "plane_variants",
    "direction_variants",
    "canonical_sign",
    "same_family",
    "GROUP_OF_LAUE",
]

#: Laue class -> proper rotation group (Hermann-Mauguin symbol)
GROUP_OF_LAUE = {
    "m-3m": "432",
    "m-3": "23",
    "6/mmm": "622",
    "6/m": "6",
    "-3m": "32",
    "-3": "3",
    "4/mmm": "422",
    "4/m": "4",
    "mmm": "222",
    "2/m": "2",
    "-1": "1",
}

_ORDER = {"432": 24, "23": 12, "622": 12, "6": 6, "32": 6, "3": 3, "422": 8, "4": 4, "222": 4, "2": 2, "1": 1}


def _axis_rotation(axis, fold: int) -> np.ndarray:
    """Active rotation by 360/fold degrees about ``axis``.

    The passive matrix of :func:`tracefit.crystal.rotations.from_axis_angle` (the one
    axis-angle convention) turns coordinates; its transpose turns vectors.
    """
    R = from_axis_angle(axis, 360.0 / fold).T
    R[np.abs(R) < 1e-15] = 0.0
    return R


def _close(generators: list[np.ndarray], order: int) -> np.ndarray:
    """All products of the generators (breadth first, so the order is deterministic)."""
    found = [np.eye(3)]
    keys = {tuple(np.round(found[0], 8).ravel())}
    frontier = [np.eye(3)]
    while frontier:
        nxt = []
        for g in frontier:
            for h in generators:
                p = h @ g
                key = tuple(np.round(p, 8).ravel() + 0.0)
                if key not in keys:
                    keys.add(key)
                    found.append(p)
                    nxt.append(p)
        frontier = nxt
        if len(found) > order:
            break
    if len(found) != order:
        return None  # the axes, taken from the cell, do not form the group: wrong cell for the class
    return np.array(found)


def _unique_axis(lattice) -> int:
    """Index (0 a, 1 b, 2 c) of the monoclinic unique axis: the one perpendicular to the other two."""
    right = [abs(x - 90.0) < 1e-6 for x in (lattice.alpha, lattice.beta, lattice.gamma)]
    # alpha = b^c, beta = a^c, gamma = a^b; b is unique when alpha and gamma are right angles.
    if right[0] and right[2]:
        return 1
    if right[0] and right[1]:
        return 2
    if right[1] and right[2]:
        return 0
    raise TracefitInputError(
        f"Laue class 2/m needs a cell with two right angles (unique axis), got alpha, beta, gamma = "
        f"{lattice.alpha}, {lattice.beta}, {lattice.gamma}"
    )


def proper_rotations(lattice: Lattice) -> np.ndarray:
    """Proper rotations of the lattice's Laue class, in its Cartesian crystal frame.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice

    Returns
    -------
    ndarray, shape (N, 3, 3)
        Active rotation matrices, identity first. N = 24 (m-3m), 12 (m-3, 6/mmm), 6 (6/m, -3m),
        8 (4/mmm), 4 (4/m, mmm), 3 (-3), 2 (2/m), 1 (-1).

    Raises
    ------
    TracefitInputError
        If the cell does not have the symmetry its Laue class claims (the rotations would not
        map the lattice onto itself).

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> len(proper_rotations(Lattice.fcc())), len(proper_rotations(Lattice.hcp(c_over_a=1.587)))
    (24, 12)
    """
    key = ("proper_rotations", lattice.laue, lattice.hex_setting)
    cache = getattr(lattice, "_cache", None)
    if cache is not None and key in cache:
        return cache[key]
    A = lattice.direct_matrix
    a, b, c = A[:, 0], A[:, 1], A[:, 2]
    group = GROUP_OF_LAUE[lattice.laue]
    gens = {
        "432": lambda: [_axis_rotation(c, 4), _axis_rotation(a, 4)],
        "23": lambda: [_axis_rotation(c, 2), _axis_rotation(a, 2), _axis_rotation(a + b + c, 3)],
        "622": lambda: [_axis_rotation(c, 6), _axis_rotation(a, 2)],
        "6": lambda: [_axis_rotation(c, 6)],
        "32": lambda: [_axis_rotation(c, 3), _axis_rotation(a, 2)],
        "3": lambda: [_axis_rotation(c, 3)],
        "422": lambda: [_axis_rotation(c, 4), _axis_rotation(a, 2)],
        "4": lambda: [_axis_rotation(c, 4)],
        "222": lambda: [_axis_rotation(a, 2), _axis_rotation(b, 2), _axis_rotation(c, 2)],
        "2": lambda: [_axis_rotation(A[:, _unique_axis(lattice)], 2)],
        "1": lambda: [],
    }[group]()
    rots = _close(gens, _ORDER[group])
    # The group must map the lattice onto itself: integral in the direct basis.
    Ainv = np.linalg.inv(A)
    M = None if rots is None else np.einsum("ij,njk,kl->nil", Ainv, rots, A)
    if M is None or np.max(np.abs(M - np.round(M))) > 1e-6:
        raise TracefitInputError(
            f"the cell of lattice {lattice.name!r} (a={lattice.a:g}, b={lattice.b:g}, c={lattice.c:g}, "
            f"alpha={lattice.alpha:g}, beta={lattice.beta:g}, gamma={lattice.gamma:g}) does not have the symmetry "
            f"of Laue class {lattice.laue}; give a matching cell or a lower Laue class"
            + ("; trigonal cells go on hexagonal axes (a = b, gamma = 120 deg)" if lattice.laue in ("-3m", "-3") else "")
        )
    rots.setflags(write=False)
    if cache is not None:
        cache[key] = rots
    return rots


def index_rotations(lattice: Lattice, kind: str) -> np.ndarray:
    """The proper rotations as integer matrices acting on three-index (hkl) or [uvw].

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    kind : {"plane", "direction"}
        Planes transform with M = B^-1 R B (B: columns a*, b*, c*), directions with
        M = A^-1 R A (A: columns a, b, c).

    Returns
    -------
    ndarray of int, shape (N, 3, 3)

    Raises
    ------
    TracefitInputError
        As :func:`proper_rotations`.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> index_rotations(Lattice.fcc(), "plane").dtype.kind, index_rotations(Lattice.fcc(), "plane").shape
    ('i', (24, 3, 3))
    """
    key = ("index_rotations", kind, lattice.laue, lattice.hex_setting)
    cache = getattr(lattice, "_cache", None)
    if cache is not None and key in cache:
        return cache[key]
    R = proper_rotations(lattice)
    X = lattice.reciprocal_matrix if kind == "plane" else lattice.direct_matrix
    M = np.einsum("ij,njk,kl->nil", np.linalg.inv(X), R, X)
    Mi = np.round(M).astype(int)
    if np.max(np.abs(M - Mi)) > 1e-6:  # pragma: no cover - proper_rotations already checked this
        raise TracefitInputError(f"the symmetry of lattice {lattice.name!r} is not integral in its {kind} index basis")
    Mi.setflags(write=False)
    if cache is not None:
        cache[key] = Mi
    return Mi


def canonical_sign(values: Sequence[int]) -> tuple[int, ...]:
    """The index with its first non-zero entry made positive (a plane and its negative are one).

    Parameters
    ----------
    values : sequence of int
        Three or four indices.

    Returns
    -------
    tuple of int

    Examples
    --------
    >>> canonical_sign((0, -1, 1))
    (0, 1, -1)
    """
    v = tuple(int(x) for x in values)
    for x in v:
        if x != 0:
            return v if x > 0 else tuple(-y for y in v)
    return v


def _as_values(idx, lattice, kind: str) -> tuple[int, ...]:
    if isinstance(idx, MillerIndex):
        if idx.kind != kind:
            raise TracefitInputError(f"expected a {kind}, got the {idx.kind} {idx}")
        vals = idx.values
    elif isinstance(idx, str):
        vals = parse_index(idx, expect=kind).values
    else:
        try:
            arr = np.asarray(idx)
            if arr.ndim != 1:
                raise ValueError
            vals = tuple(int(round(float(x))) for x in arr)
            if any(abs(float(x) - y) > 1e-9 for x, y in zip(arr, vals)):
                raise ValueError
        except (TypeError, ValueError):
            raise TracefitInputError(f"a {kind} must be 3 or 4 integer indices, got {idx!r}") from None
    check_values(vals, kind)
    if len(vals) == 4 and not lattice.is_hexagonal:
        raise TracefitInputError(
            f"four (Miller-Bravais) indices only apply to hexagonal lattices, and {lattice.name} is not one; give three"
        )
    return vals


def _variants(lattice, values, kind):
    M = index_rotations(lattice, kind)
    v3 = miller_bravais_to_miller(np.asarray(values, dtype=np.int64), kind)
    out = np.einsum("nij,j->ni", M, v3)
    if len(values) == 4:
        # symmetry maps a whole [uvtw] onto whole [uvtw]s, so the integer form exists
        out = miller_to_miller_bravais(out, kind, integer=True)
    return [tuple(int(x) for x in row) for row in out]


def plane_variants(lattice: Lattice, hkl: Sequence[int] | str | MillerIndex) -> list[tuple[int, ...]]:
    """Distinct planes of the family of ``hkl``, a plane and its negative counted once.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    hkl : sequence of int, str or MillerIndex
        Any member of the family: (hkl), or (hkil) for hexagonal lattices.

    Returns
    -------
    list of tuple of int
        Each plane once, first non-zero index positive, sorted in descending lexicographic
        order; same number of indices as ``hkl``.

    Raises
    ------
    TracefitInputError
        Unreadable indices, or four indices on a non-hexagonal lattice.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> plane_variants(Lattice.fcc(), "{111}")
    [(1, 1, 1), (1, 1, -1), (1, -1, 1), (1, -1, -1)]
    >>> len(plane_variants(Lattice.hcp(c_over_a=1.587), (1, 0, -1, 2)))
    6
    """
    vals = _as_values(hkl, lattice, "plane")
    found = {canonical_sign(v) for v in _variants(lattice, vals, "plane")}
    return sorted(found, reverse=True)


def direction_variants(lattice: Lattice, uvw: Sequence[int] | str | MillerIndex, signed: bool = True) -> list[tuple[int, ...]]:
    """Distinct directions of the family of ``uvw``.

    Parameters
    ----------
    lattice : tracefit.crystal.lattice.Lattice
    uvw : sequence of int, str or MillerIndex
        [uvw], or [uvtw] for hexagonal lattices.
    signed : bool
        True (default): [uvw] and [-u-v-w] are different (a twinning direction keeps its
        sense); the result is the orbit under the proper rotations plus inversion (the Laue
        group). False: each +- pair once, first non-zero index positive.

    Returns
    -------
    list of tuple of int
        Sorted in descending lexicographic order.

    Raises
    ------
    TracefitInputError
        Unreadable indices, or four indices on a non-hexagonal lattice.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> len(direction_variants(Lattice.fcc(), (1, 1, 0))), len(direction_variants(Lattice.fcc(), (1, 1, 0), signed=False))
    (12, 6)
    """
    vals = _as_values(uvw, lattice, "direction")
    vs = _variants(lattice, vals, "direction")
    if signed:
        found = set(vs) | {tuple(-x for x in v) for v in vs}
    else:
        found = {canonical_sign(v) for v in vs}
    return sorted(found, reverse=True)


def same_family(lattice: Lattice, a: Sequence[int] | str | MillerIndex, b: Sequence[int] | str | MillerIndex, kind: str = "plane") -> bool:
    """True when ``a`` and ``b`` belong to the same family (up to sign) under the lattice symmetry.

    Parameters
    ----------
    lattice : tracefit.crystal.Lattice
    a, b : sequence of int, str or MillerIndex
        Two planes (or directions); three and four indices may be mixed on hexagonal lattices.
    kind : {"plane", "direction"}

    Returns
    -------
    bool

    Raises
    ------
    TracefitInputError
        Unreadable indices.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> same_family(Lattice.fcc(), (1, -1, 1), (1, 1, 1)), same_family(Lattice.fcc(), (1, 1, 0), (1, 1, 1))
    (True, False)
    """
    va = _as_values(a, lattice, kind)
    vb = _as_values(b, lattice, kind)
    if len(va) != len(vb):
        va, vb = to_three(va, kind), to_three(vb, kind)
    members = plane_variants(lattice, va) if kind == "plane" else direction_variants(lattice, va, signed=False)
    return canonical_sign(vb) in members
