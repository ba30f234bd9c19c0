"""Labels the figures and the report print: planes, directions and a family's verdict.

Written once here so that the report, the figures, the overlay and the survey tables all
print a plane the same way, through the project's one index printer,
:func:`tracefit.crystal.format_index` (compact ``(1-11)``, space separated once an index
has two digits, ``(1 0 -1 12)``). Only plain records (dicts) and index sequences come in;
nothing here imports matplotlib or the survey.
"""

from __future__ import annotations

from collections.abc import Sequence

from tracefit.crystal import format_index

__all__ = ["plane_label", "direction_label", "family_label"]


def plane_label(plane: Sequence[int] | str | None) -> str:
    """Printable plane label.

    Parameters
    ----------
    plane : sequence of int (3 or 4,), str or None
        Miller (hkl) or Miller-Bravais (hkil) indices of one plane; a string is taken as an
        already printed label.

    Returns
    -------
    str
        ``"(1-11)"``, ``"(10-12)"``, ``"(1 0 -1 12)"``; a string unchanged; ``"?"`` for None.

    Raises
    ------
    TypeError, ValueError
        If an index cannot be read as an integer.

    Examples
    --------
    >>> plane_label((1, -1, 1)), plane_label([1, 0, -1, 2]), plane_label("(111)"), plane_label(None)
    ('(1-11)', '(10-12)', '(111)', '?')
    """
    if plane is None:
        return "?"
    if isinstance(plane, str):
        return plane
    return format_index(tuple(int(x) for x in plane), kind="plane")


def direction_label(direction: Sequence[int]) -> str:
    """Printable direction label, e.g. ``"[11-20]"``.

    Parameters
    ----------
    direction : sequence of int (3 or 4,)
        Indices [uvw] or [uvtw] of one direction.

    Returns
    -------
    str
        The bracketed direction; when an entry is not an integer (e.g. a string), the entries
        as given, space separated, in square brackets.

    Examples
    --------
    >>> direction_label((1, 1, -2, 0)), direction_label([0, 1, 1])
    ('[11-20]', '[011]')
    >>> direction_label(["a", "b", "c"])
    '[a b c]'
    """
    try:
        return format_index(tuple(int(x) for x in direction), kind="direction")
    except (TypeError, ValueError, OverflowError):
        # a record that carries something other than integers is still shown, as written
        return "[" + " ".join(str(x) for x in direction) + "]"


def family_label(ident: dict | None) -> str:
    """Short verdict label of one band family: its identified plane and mode, or why not.

    Parameters
    ----------
    ident : dict or None
        A family's identification record (the ``identification`` entry of a survey image
        record): keys ``candidates`` (list of dicts with ``plane`` and ``mode``, best first),
        ``unexplained`` and ``ambiguous`` (bool).

    Returns
    -------
    str
        ``"(1-11) slip"``; ``"(1-11) or (111) (ambiguous)"`` with the first two distinct
        planes; ``"unexplained"``; ``"not identified"`` for an empty record.

    Examples
    --------
    >>> c = [{"plane": [1, -1, 1], "mode": "slip"}, {"plane": [1, 1, 1], "mode": "slip"}]
    >>> family_label({"candidates": c})
    '(1-11) slip'
    >>> family_label({"candidates": c, "ambiguous": True})
    '(1-11) or (111) (ambiguous)'
    >>> family_label({"candidates": [], "unexplained": True}), family_label(None)
    ('unexplained', 'not identified')
    """
    if not ident:
        return "not identified"
    cands = ident.get("candidates") or []
    if ident.get("unexplained") or not cands:
        return "unexplained"
    best = cands[0]
    if not ident.get("ambiguous"):
        return f"{plane_label(tuple(best['plane']))} {best.get('mode', '')}".strip()
    seen = [plane_label(tuple(best["plane"]))]
    for c in cands[1:]:
        p = plane_label(tuple(c["plane"]))
        if p not in seen:
            seen.append(p)
            break
    return " or ".join(seen) + " (ambiguous)"
