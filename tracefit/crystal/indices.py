"""Parse and print Miller (hkl) and Miller-Bravais (hkil) indices as the trade writes them.

Brackets carry the meaning:

==========  =====================  ===========
bracket     meaning                example
==========  =====================  ===========
``( )``     one plane              ``(1-11)``, ``(10-12)``
``{ }``     family of planes       ``{111}``, ``{10-12}``
``[ ]``     one direction          ``[11-20]``
``< >``     family of directions   ``<110>``, ``<-1-123>``
==========  =====================  ===========

Inside the brackets three styles are accepted:

* compact, one digit per index with ``-`` as the bar: ``(1-11)``, ``<-1-123>``;
* separated by spaces: ``(1 -1 1)``, ``(1 0 -1 12)`` (needed for two-digit indices);
* separated by commas: ``(1,-1,1)``.

A Unicode minus (U+2212) and an overbar written as a combining overline or macron after
the digit (``1̄``) are read as a minus sign too.

Four indices are Miller-Bravais: planes (hkil) need h + k + i = 0, directions [uvtw]
need u + v + t = 0. With a ``lattice`` given, hexagonal lattices require four indices
(three only with the opt-in ``hex_three_index=True``, which then means plain Miller
indices on the hexagonal a1, a2, c cell) and other lattices reject four.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterator, Sequence
from contextlib import contextmanager
from contextvars import ContextVar
from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np

from tracefit.conventions import miller_bravais_to_miller
from tracefit.errors import TracefitInputError

if TYPE_CHECKING:  # names used in annotations only
    from tracefit.crystal.lattice import Lattice

__all__ = ["MillerIndex", "parse_index", "format_index", "check_values", "to_three", "BRACKETS", "HEX_NOTATIONS",
           "index_notation", "current_index_notation", "restate_label"]

#: How hexagonal planes and directions are printed: four Miller-Bravais indices (the default)
#: or three Miller indices on the a1, a2, c cell.
HEX_NOTATIONS = ("four", "three")
# A display setting, like numpy's print options: set once at the edge (a command's flag, a
# notebook), read by every label printer, never by the science. A ContextVar keeps threads apart.
_HEX_NOTATION: ContextVar[str] = ContextVar("tracefit_hex_notation", default="four")

#: opening bracket -> (closing bracket, kind, family)
BRACKETS = {
    "(": (")", "plane", False),
    "{": ("}", "plane", True),
    "[": ("]", "direction", False),
    "<": (">", "direction", True),
}
_CLOSE = {v[0]: k for k, v in BRACKETS.items()}
_OPEN_FOR = {(v[1], v[2]): k for k, v in BRACKETS.items()}

_HELP = "write e.g. (111), (1-11), (1 0 -1 2), {111}, [11-20] or <110>"
_INT = re.compile(r"[+-]?\d+\Z")
_COMPACT = re.compile(r"(?:-?\d)+\Z")
_BARS = ("\u0304", "\u0305")  # combining macron, combining overline


@dataclass(frozen=True)
class MillerIndex:
    """A parsed index.

    Attributes
    ----------
    values : tuple of int
        Three (Miller) or four (Miller-Bravais) integers, exactly as written.
    kind : {"plane", "direction"}
        ``()``/``{}`` give planes, ``[]``/``<>`` directions.
    family : bool
        True for ``{}`` and ``<>`` (all symmetry equivalents).

    Examples
    --------
    >>> idx = MillerIndex((1, 0, -1, 2), "plane", family=True)
    >>> str(idx), idx.is_four, idx.three()
    ('{10-12}', True, (1, 0, 2))
    """

    values: tuple[int, ...]
    kind: str
    family: bool = False

    def __str__(self) -> str:
        return format_index(self.values, self.kind, self.family)

    @property
    def is_four(self) -> bool:
        """True for Miller-Bravais (four-index) notation."""
        return len(self.values) == 4

    def three(self) -> tuple[int, ...]:
        """The equivalent three-index form: (hkil) -> (hkl), [uvtw] -> [u-t, v-t, w]."""
        return to_three(self.values, self.kind)


def to_three(values: Sequence[int], kind: str) -> tuple[int, ...]:
    """Integer three-index form of a 3- or 4-index plane or direction (unchanged if 3).

    A thin wrapper of :func:`tracefit.conventions.miller_bravais_to_miller` (the one place
    the conversion is written) that returns Python ints.

    Parameters
    ----------
    values : sequence of int
        Three or four integer indices.
    kind : {"plane", "direction"}
        (hkil) -> (hkl); [uvtw] -> [u - t, v - t, w].

    Returns
    -------
    tuple of int
        Three indices.

    Raises
    ------
    TracefitInputError
        Unknown ``kind``, a count other than 3 or 4, or a broken sum rule.

    Examples
    --------
    >>> to_three((-1, -1, 2, 3), "direction")
    (-3, -3, 3)
    >>> to_three((1, 0, -1, 2), "plane")
    (1, 0, 2)
    """
    v = np.asarray([int(x) for x in values], dtype=np.int64)
    return tuple(int(x) for x in miller_bravais_to_miller(v, kind))


def _normalise_text(text: str) -> str:
    t = text.strip().replace("\u2212", "-").replace("\u2013", "-")
    # An overbar after a digit ("1̄") means that digit is negative: move it in front.
    for bar in _BARS:
        t = re.sub(r"(\d)" + bar, r"-\1", t)
    return t


def _split_body(body: str, text: str) -> list[int]:
    body = body.strip()
    if not body:
        raise TracefitInputError(f"no indices inside the brackets in {text!r}; {_HELP}")
    if "," in body or re.search(r"\s", body):
        tokens = [t for t in re.split(r"[,\s]+", body) if t]
        if "," in body and any(not t.strip() for t in body.split(",")):
            raise TracefitInputError(f"empty index between commas in {text!r}; {_HELP}")
        bad = [t for t in tokens if not _INT.match(t)]
        if bad:
            raise TracefitInputError(
                f"cannot read {bad[0]!r} in {text!r} as one integer index; with spaces or commas "
                f"each index is written whole, e.g. (1 0 -1 12); {_HELP}"
            )
        return [int(t) for t in tokens]
    if not _COMPACT.match(body):
        raise TracefitInputError(f"cannot read the indices in {text!r}: only digits and minus signs belong inside; {_HELP}")
    return [int(m) for m in re.findall(r"-?\d", body)]


def parse_index(text: str, lattice: Lattice | None = None, expect: str | None = None, hex_three_index: bool = False) -> MillerIndex:
    """Read one plane, plane family, direction or direction family.

    Parameters
    ----------
    text : str
        The index as written, e.g. ``"(1-11)"``, ``"{10-12}"``, ``"<-1-123>"``, ``"(1,-1,1)"``.
    lattice : tracefit.crystal.lattice.Lattice, optional
        When given, the number of indices is checked against it: four for hexagonal
        lattices, three for all others.
    expect : {"plane", "direction"}, optional
        Reject the other kind with a message saying which was expected.
    hex_three_index : bool
        Opt-in: accept three-index (hkl)/[UVW] for a hexagonal lattice (plain Miller indices
        on the a1, a2, c cell). Off by default because a missing i is the usual typing slip.

    Returns
    -------
    MillerIndex

    Raises
    ------
    TracefitInputError
        Malformed text, unbalanced brackets, all-zero index, broken h + k + i = 0 or
        u + v + t = 0, or an index count that does not suit the lattice.

    Examples
    --------
    >>> parse_index("(1-11)")
    MillerIndex(values=(1, -1, 1), kind='plane', family=False)
    >>> parse_index("<11-20>").values
    (1, 1, -2, 0)
    """
    if not isinstance(text, str):
        raise TracefitInputError(f"an index must be text such as '(111)' or '[11-20]', got {type(text).__name__}")
    if expect not in (None, "plane", "direction"):
        raise TracefitInputError(f"expect must be None, 'plane' or 'direction', not {expect!r}")
    t = _normalise_text(text)
    if not t:
        raise TracefitInputError(f"empty index; {_HELP}")
    opening = t[0]
    if opening not in BRACKETS:
        if t[-1] in _CLOSE:
            raise TracefitInputError(f"unbalanced brackets in {text!r}: it closes with {t[-1]!r} but does not open with {_CLOSE[t[-1]]!r}")
        raise TracefitInputError(
            f"{text!r} is not an index: put it in brackets, () for a plane, {{}} a plane family, "
            f"[] a direction, <> a direction family"
        )
    closing, kind, family = BRACKETS[opening]
    if t[-1] != closing:
        raise TracefitInputError(f"unbalanced brackets in {text!r}: {opening!r} must close with {closing!r}")
    body = t[1:-1]
    if any(c in body for c in "(){}[]<>"):
        raise TracefitInputError(f"unbalanced or nested brackets in {text!r}; give one index per entry; {_HELP}")
    values = tuple(_split_body(body, text))
    if expect is not None and kind != expect:
        example = "(111) or {111}" if expect == "plane" else "[110] or <110>"
        raise TracefitInputError(f"expected a {expect} such as {example}, got the {kind} {text.strip()!r}")
    check_values(values, kind, lattice=lattice, text=text.strip(), hex_three_index=hex_three_index)
    return MillerIndex(values, kind, family)


MAX_INDEX = 999  # the largest index magnitude accepted (common practice, no source: real systems stay below 10)


def check_values(values: Sequence[int], kind: str, lattice: Lattice | None = None, text: str | None = None, hex_three_index: bool = False) -> None:
    """Validate integer indices of a plane or direction (count, all-zero, four-index sum rule).

    Parameters
    ----------
    values : sequence of int
        Three or four indices.
    kind : {"plane", "direction"}
        What the indices describe.
    lattice : tracefit.crystal.Lattice, optional
        When given, the count must suit it (four for hexagonal, three otherwise).
    text : str, optional
        The indices as the user wrote them, quoted in messages.
    hex_three_index : bool
        Accept three indices on a hexagonal lattice.

    Returns
    -------
    None

    Raises
    ------
    TracefitInputError
        With a message naming the broken rule.

    Examples
    --------
    >>> check_values((1, 0, -1, 2), "plane")  # passes silently
    >>> check_values((1, 1, 1, 2), "plane")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: Miller-Bravais plane (1112) breaks h + k + i = 0 (here 1 + 1 + 1 = 3); the third index must be i = -(h + k) = -2
    """
    if text is not None:
        shown = text
    elif values and all(isinstance(v, int) for v in values):
        shown = format_index(values, kind)
    else:
        shown = repr(tuple(values))
    n = len(values)
    if n not in (3, 4):
        raise TracefitInputError(
            f"{shown} has {n} indices; a {kind} takes three (Miller) or, on a hexagonal lattice, four (Miller-Bravais)"
        )
    if all(v == 0 for v in values):
        raise TracefitInputError(f"{shown} is all zero, which is no {kind}; at least one index must be non-zero")
    if any(abs(v) > MAX_INDEX for v in values):
        # real deformation planes and directions have small indices; huge ones only overflow the arithmetic
        raise TracefitInputError(f"{shown[:60]}{'...' if len(shown) > 60 else ''}: indices above {MAX_INDEX} in size are "
                                 f"not {kind} indices of a slip or twin system")
    if n == 4:
        a, b, c = values[0], values[1], values[2]
        s = a + b + c
        if s != 0:
            if kind == "plane":
                raise TracefitInputError(
                    f"Miller-Bravais plane {shown} breaks h + k + i = 0 (here {_sum_text(a, b, c)}); "
                    f"the third index must be i = -(h + k) = {-(a + b)}"
                )
            raise TracefitInputError(
                f"Miller-Bravais direction {shown} breaks u + v + t = 0 (here {_sum_text(a, b, c)}); "
                f"the third index must be t = -(u + v) = {-(a + b)}"
            )
    if lattice is not None:
        hexagonal = bool(getattr(lattice, "is_hexagonal", False))
        name = getattr(lattice, "name", "this")
        if hexagonal and n == 3 and not hex_three_index:
            if kind == "plane":
                raise TracefitInputError(
                    f"{shown}: hexagonal planes take four indices (hkil), e.g. (10-12); "
                    f"for ({values[0]} {values[1]} {values[2]}) write "
                    f"{format_index((values[0], values[1], -(values[0] + values[1]), values[2]), 'plane')}"
                )
            raise TracefitInputError(f"{shown}: hexagonal directions take four indices [uvtw], e.g. [11-20] or [-1-123]")
        if not hexagonal and n == 4:
            raise TracefitInputError(
                f"{shown}: four (Miller-Bravais) indices only apply to hexagonal lattices, and {name} lattice is not one; "
                f"give three indices"
            )


def _sum_text(a: int, b: int, c: int) -> str:
    terms = [str(a)] + [f"+ {x}" if x >= 0 else f"- {-x}" for x in (b, c)]
    return f"{' '.join(terms)} = {a + b + c}"


def format_index(values: Sequence[int], kind: str = "plane", family: bool = False, notation: str | None = None) -> str:
    """Print indices in the compact trade form with minus signs for bars.

    Parameters
    ----------
    values : sequence of int
        Three or four integer indices.
    kind : {"plane", "direction"}
    family : bool
        Curly/angle brackets for families.
    notation : {"four", "three"} or None
        How four-index (hexagonal) input is printed: as given (``"four"``) or converted to
        three Miller indices on the a1, a2, c cell (``"three"``: (hkil) -> (hkl),
        [uvtw] -> [u-t, v-t, w] in lowest terms). None (default): the setting of
        :func:`index_notation`, which is ``"four"`` unless changed. Three-index input is
        printed as given either way.

    Returns
    -------
    str
        E.g. ``"(1-11)"``, ``"{10-12}"``, ``"<11-20>"``; space separated when any index has
        two or more digits, e.g. ``"(1 0 -1 12)"``.

    Raises
    ------
    TracefitInputError
        Unknown ``kind`` or ``notation``.

    Examples
    --------
    >>> format_index((1, 1, -2, 0), "direction", family=True)
    '<11-20>'
    >>> format_index((1, 0, -1, 12))
    '(1 0 -1 12)'
    >>> format_index((1, 0, -1, 2), notation="three"), format_index((1, 1, -2, 3), "direction", notation="three")
    ('(102)', '[111]')
    """
    if kind not in ("plane", "direction"):
        raise TracefitInputError(f"kind must be 'plane' or 'direction', not {kind!r}")
    vals = _whole_numbers(values)
    if len(vals) == 4 and _checked_notation(notation) == "three":
        vals = list(to_three(vals, kind))
        if kind == "direction":  # [uvtw] -> [UVW] may carry a common factor, e.g. [11-23] -> [333]
            common = math.gcd(*vals) or 1
            vals = [v // common for v in vals]
    opening = _OPEN_FOR[(kind, bool(family))]
    closing = BRACKETS[opening][0]
    if any(abs(v) > 9 for v in vals):
        body = " ".join(str(v) for v in vals)
    else:
        body = "".join(str(v) for v in vals)
    return f"{opening}{body}{closing}"


def _checked_notation(notation: str | None) -> str:
    if notation is None:
        return _HEX_NOTATION.get()
    if notation not in HEX_NOTATIONS:
        raise TracefitInputError(f"notation must be one of {', '.join(HEX_NOTATIONS)}, got {notation!r}")
    return notation


def current_index_notation() -> str:
    """The hexagonal index notation labels are printed in now: ``"four"`` or ``"three"``.

    Returns
    -------
    str
        The setting of the innermost :func:`index_notation` block, else ``"four"``.

    Examples
    --------
    >>> current_index_notation()
    'four'
    """
    return _HEX_NOTATION.get()


@contextmanager
def index_notation(notation: str) -> Iterator[str]:
    """Print hexagonal planes and directions with four (Miller-Bravais) or three (Miller) indices.

    A display setting only: inside the block every label tracefit prints (tables, ``--json``
    labels, CSV, report) uses ``notation``; the analysis and the stored index tuples do not
    change. Blocks nest; the setting is restored on exit.

    Parameters
    ----------
    notation : {"four", "three"}
        ``"four"``: (hkil) and [uvtw], the default. ``"three"``: (hkl) and [UVW] on the
        a1, a2, c cell.

    Yields
    ------
    str
        The notation now in force.

    Raises
    ------
    TracefitInputError
        An unknown notation.

    Examples
    --------
    >>> with index_notation("three"):
    ...     format_index((-1, 0, 1, 1), "plane", family=True)
    '{-101}'
    >>> format_index((-1, 0, 1, 1), "plane", family=True)
    '{-1011}'
    """
    if notation not in HEX_NOTATIONS:
        raise TracefitInputError(f"notation must be one of {', '.join(HEX_NOTATIONS)}, got {notation!r}")
    token = _HEX_NOTATION.set(notation)
    try:
        yield notation
    finally:
        _HEX_NOTATION.reset(token)


_BRACKETED = re.compile(r"([({\[<])([^(){}\[\]<>]*)([)}\]>])")


def restate_label(text: str, notation: str | None = None) -> str:
    """A label with every four-index group printed in ``notation`` (other text untouched).

    Labels of system families are stored with four indices on hexagonal lattices
    (``"{10-12}<-1011>"``); this prints them in the notation in force at the edge.

    Parameters
    ----------
    text : str
        Any label, e.g. ``"{10-12}<-1011> twin"`` or ``"basal <a>"``.
    notation : {"four", "three"} or None
        As in :func:`format_index`; None: the :func:`index_notation` setting.

    Returns
    -------
    str
        ``text`` with each bracketed group of four whole indices restated; groups that are
        not four indices (``<a>``, three-index groups) are left as they are.

    Examples
    --------
    >>> restate_label("{10-12}<-1011> twin", notation="three")
    '{102}<-2-11> twin'
    >>> restate_label("basal <a>", notation="three")
    'basal <a>'
    """
    if _checked_notation(notation) == "four" or not isinstance(text, str):
        return text

    def one(match: re.Match) -> str:
        opening, body, closing = match.groups()
        if BRACKETS.get(opening, (None,))[0] != closing:
            return match.group(0)
        try:
            values = _split_body(body, match.group(0))
        except TracefitInputError:
            return match.group(0)
        if len(values) != 4 or sum(values[:3]) != 0:
            return match.group(0)
        _, kind, family = BRACKETS[opening]
        return format_index(values, kind, family, notation="three")

    return _BRACKETED.sub(one, text)


def _whole_numbers(values) -> list[int]:
    """``values`` as 3 or 4 whole numbers; anything else is an input error (no silent truncation)."""
    import numbers

    if isinstance(values, (str, bytes)) or not hasattr(values, "__iter__"):
        raise TracefitInputError(f"values must be 3 or 4 whole numbers, got {values!r}")
    vals = list(values)
    ok = len(vals) in (3, 4) and all(
        isinstance(v, numbers.Real) and not isinstance(v, bool) and math.isfinite(v) and float(v) == int(v) for v in vals)
    if not ok:
        raise TracefitInputError(f"values must be 3 or 4 whole numbers, got {values!r}")
    return [int(v) for v in vals]
