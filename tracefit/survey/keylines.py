"""Where each key of a TOML text sits: line numbers for the job reader's error messages.

Python's ``tomllib`` gives no source positions, so :func:`key_lines` finds them itself and
:class:`_Ctx` turns a key path into a message that names the field and its line.
"""

from __future__ import annotations

import difflib
import math
import re
from pathlib import Path
from typing import Any

from tracefit.errors import TracefitInputError

__all__ = ["key_lines"]


# --------------------------------------------------------------------------- key positions
_BARE = r"[A-Za-z0-9_\-]+"
_QUOTED = r'"(?:[^"\\]|\\.)*"|\'[^\']*\''
_KEYPART = rf"(?:{_BARE}|{_QUOTED})"
_DOTTED = rf"{_KEYPART}(?:\s*\.\s*{_KEYPART})*"
_KEY_RE = re.compile(rf"^\s*({_DOTTED})\s*=")
_AOT_RE = re.compile(rf"^\s*\[\[\s*({_DOTTED})\s*\]\]")
_TABLE_RE = re.compile(rf"^\s*\[\s*({_DOTTED})\s*\]")
_INLINE_KEY_RE = re.compile(rf"[{{,]\s*({_BARE})\s*=")


def _split_dotted(s: str) -> list[str]:
    parts = re.findall(_KEYPART, s)
    return [p[1:-1] if p[:1] in "\"'" else p for p in parts]


def _scan_rest(text: str, state: dict) -> None:
    """Advance the lexer state (open multi-line string, bracket depth) over one line's text."""
    i, n = 0, len(text)
    while i < n:
        ml = state["ml"]
        if ml:
            j = text.find(ml, i)
            if j < 0:
                return
            state["ml"] = None
            i = j + 3
            continue
        c = text[i]
        if c == "#":
            return
        if text.startswith('"""', i) or text.startswith("'''", i):
            state["ml"] = text[i : i + 3]
            i += 3
            continue
        if c == '"':
            j = i + 1
            while j < n and text[j] != '"':
                j += 2 if text[j] == "\\" else 1
            i = j + 1
            continue
        if c == "'":
            j = text.find("'", i + 1)
            i = n if j < 0 else j + 1
            continue
        if c in "[{":
            state["depth"] += 1
        elif c in "]}":
            state["depth"] = max(0, state["depth"] - 1)
        i += 1


def key_lines(text: str) -> dict[tuple, int]:
    """Line number (1-based) of every table header and key in a TOML text.

    Keys are paths as tuples; arrays of tables contribute their index, so the ``file``
    key of the second ``[[image]]`` is ``("image", 1, "file")``. Keys of inline tables
    get the line of their parent key. Lines inside multi-line strings and arrays are
    skipped. This is a locator for error messages, not a TOML parser.

    Parameters
    ----------
    text : str
        TOML text.

    Returns
    -------
    dict of tuple -> int
        Key path -> 1-based line number.

    Examples
    --------
    >>> text = '''title = "Two coupons"
    ... [[image]]
    ... name = "A"
    ... [[image]]
    ... name = "B"
    ... load = { axis = "y", sense = "tension" }
    ... '''
    >>> lines = key_lines(text)
    >>> lines[("title",)], lines[("image", 1, "name")], lines[("image", 1, "load", "sense")]
    (1, 5, 6)
    """
    lines: dict[tuple, int] = {}
    aot_count: dict[tuple, int] = {}
    aot_names: set[tuple] = set()
    current: tuple = ()
    state = {"ml": None, "depth": 0}

    def resolve(parts: list[str]) -> tuple:
        out: list = []
        for p in parts:
            out.append(p)
            if tuple(out) in aot_names:
                out.append(aot_count[tuple(out)] - 1)
        return tuple(out)

    for no, raw in enumerate(text.splitlines(), start=1):
        if state["ml"] or state["depth"]:
            _scan_rest(raw, state)
            continue
        m = _AOT_RE.match(raw)
        if m:
            parts = _split_dotted(m.group(1))
            base = resolve(parts[:-1]) + (parts[-1],)
            aot_names.add(base)
            aot_count[base] = aot_count.get(base, 0) + 1
            current = base + (aot_count[base] - 1,)
            lines.setdefault(base, no)
            lines[current] = no
            _scan_rest(raw[m.end() :], state)
            continue
        m = _TABLE_RE.match(raw)
        if m:
            current = resolve(_split_dotted(m.group(1)))
            lines[current] = no
            _scan_rest(raw[m.end() :], state)
            continue
        m = _KEY_RE.match(raw)
        if m:
            path = current + tuple(_split_dotted(m.group(1)))
            lines[path] = no
            rest = raw[m.end() :]
            if rest.lstrip().startswith("{"):
                for k in _INLINE_KEY_RE.findall(rest):
                    lines.setdefault(path + (k,), no)
            _scan_rest(rest, state)
            continue
        _scan_rest(raw, state)
    return lines


class _Ctx:
    """Error helper: knows the file name and where each key sits."""

    def __init__(self, path: Path, lines: dict[tuple, int]):
        self.path = path
        self.lines = lines

    def line(self, key: tuple) -> int | None:
        k = tuple(key)
        while k:
            if k in self.lines:
                return self.lines[k]
            k = k[:-1]
        return None

    @staticmethod
    def label(key: tuple) -> str:
        out = ""
        for p in key:
            if isinstance(p, int):
                out += f"[{p + 1}]"
            else:
                out += ("." if out else "") + p
        return out

    def fail(self, key: tuple, what: str) -> TracefitInputError:
        ln = self.line(key)
        where = f"{self.path.name}, line {ln}" if ln else f"{self.path.name}"
        return TracefitInputError(f"{where}: field '{self.label(key)}' {what}")


# ------------------------------------------------------------------ field readers (name the field and its line)
def _unknown(ctx: _Ctx, key: tuple, allowed: dict) -> TracefitInputError:
    close = difflib.get_close_matches(str(key[-1]), list(allowed), n=1)
    hint = f"; did you mean '{close[0]}'?" if close else f"; expected one of {', '.join(sorted(allowed))}"
    return ctx.fail(key, f"is not a known field{hint}")


def _number(ctx, key, v, positive=False) -> float:
    if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(v):
        raise ctx.fail(key, f"must be a number, got {v!r}")
    if positive and v <= 0:
        raise ctx.fail(key, f"must be a positive number, got {v!r}")
    return float(v)


def _string(ctx, key, v) -> str:
    if not isinstance(v, str) or not v.strip():
        raise ctx.fail(key, f"must be a non-empty string, got {v!r}")
    return v.strip()


def _str_list(ctx, key, v) -> tuple[str, ...]:
    if isinstance(v, str):
        v = [v]
    if not isinstance(v, list) or not v or not all(isinstance(x, str) and x.strip() for x in v):
        raise ctx.fail(key, f"must be a list of strings, got {v!r}")
    return tuple(x.strip() for x in v)


def _table(ctx, key, v) -> dict:
    if not isinstance(v, dict):
        raise ctx.fail(key, f"must be a table (e.g. {{ key = value }}), got {v!r}")
    return dict(v)


def _file(ctx, key, v, base: Path) -> Path:
    s = _string(ctx, key, v)
    p = Path(s).expanduser()
    return (p if p.is_absolute() else base / p).resolve()


def _load_field(ctx: _Ctx, k: tuple, v: Any) -> dict:
    """``load = "y"`` or ``{ axis, sense, frame }`` or ``{ stress = [s11, s22, s33, s23, s13, s12], frame }``."""
    if isinstance(v, str):
        return {"axis": _string(ctx, k, v), "sense": "tension", "frame": "image", "stress": None}
    t = _table(ctx, k, v)
    allowed = {"axis": 1, "sense": 1, "frame": 1, "stress": 1}
    for kk in t:
        if kk not in allowed:
            raise _unknown(ctx, k + (kk,), allowed)
    frame = _string(ctx, k + ("frame",), t.get("frame", "image")).lower()
    if frame not in ("image", "sample"):
        raise ctx.fail(k + ("frame",), f'must be "image" (the picture\'s axes) or "sample" (the orientation data\'s), got {t.get("frame")!r}')
    if "stress" in t:
        if "axis" in t or "sense" in t:
            raise ctx.fail(k + ("stress",), "replaces axis and sense: give a stress or an axis, not both")
        s = t["stress"]
        if not isinstance(s, list) or len(s) != 6:
            raise ctx.fail(k + ("stress",), f"must be six numbers [s11, s22, s33, s23, s13, s12] in MPa, got {s!r}")
        return {"axis": None, "sense": "tension", "frame": frame,
                "stress": tuple(_number(ctx, k + ("stress",), x) for x in s)}
    if "axis" not in t:
        raise ctx.fail(k + ("axis",), 'is missing: give the load axis, e.g. axis = "[001]" or "y", or stress = [...]')
    axis = _string(ctx, k + ("axis",), t["axis"])
    sense = _string(ctx, k + ("sense",), t.get("sense", "tension")).lower()
    if sense not in ("tension", "compression"):
        raise ctx.fail(k + ("sense",), f"must be \"tension\" or \"compression\", got {t.get('sense')!r}")
    return {"axis": axis, "sense": sense, "frame": frame, "stress": None}
