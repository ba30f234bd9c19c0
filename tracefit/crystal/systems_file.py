"""User systems files (TOML, format described in docs/systems-file.md): a lattice and slip or
twin systems given by plane and direction, expanded over the crystal symmetry where asked.
"""

from __future__ import annotations

import math
import re
import tomllib
from os import PathLike
from pathlib import Path

from tracefit.crystal.indices import MillerIndex, format_index, parse_index
from tracefit.crystal.lattice import Lattice, lattice_preset
from tracefit.crystal.symmetry import canonical_sign, proper_rotations
from tracefit.crystal.systems import (
    MODES,
    DeformationSystem,
    _signed_shear,
    _unit_vectors,
    _zone,
    expand_slip,
    expand_twin,
)
from tracefit.errors import TracefitInputError

__all__ = ["load_systems_file"]


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
        lat = lattice_preset(str(tab["preset"]), c_over_a=num("c_over_a"), hex_setting=tab.get("hex_setting", "x-along-a1"))
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
                   tab.get("laue"), tab.get("hex_setting", "x-along-a1"))


def load_systems_file(path: str | PathLike, lattice: Lattice | None = None) -> tuple[Lattice | None, list[DeformationSystem]]:
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

    Examples
    --------
    >>> import pathlib, tempfile
    >>> lines = ['[lattice]', 'preset = "bcc"', '[[system]]', 'mode = "slip"', 'plane = "{110}"', 'direction = "<111>"']
    >>> with tempfile.TemporaryDirectory() as tmp:
    ...     path = pathlib.Path(tmp, "bcc.toml")
    ...     _ = path.write_text(chr(10).join(lines), encoding="utf-8")
    ...     lattice, systems = load_systems_file(path)
    >>> lattice.name, len(systems)
    ('bcc', 12)
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
    """Twinning sense and shear from K1, eta1 and eta2 (see :mod:`tracefit.crystal.systems`)."""
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


def _entry_fields(e, where):
    """Checked (mode, name, expand, shear) of one [[system]] table; indices are read later."""
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
    return mode, name, expand, shear


def _read_entry(e, lat, where, source) -> list[DeformationSystem]:
    mode, name, expand, shear = _entry_fields(e, where)
    try:
        pl = parse_index(e["plane"], lattice=lat, expect="plane")
        di = parse_index(e["direction"], lattice=lat, expect="direction")
    except TracefitInputError as exc:
        raise TracefitInputError(f"{where}: {exc}") from None
    if pl.family != di.family:
        raise TracefitInputError(
            f"{where}: write both plane and direction as families ({{}} and <>) or both as single indices (() and [])"
        )
    if expand is None:
        expand = pl.family
    if pl.family and not expand:
        raise TracefitInputError(f"{where}: families ({{}} and <>) always expand; write () and [] for one system")
    try:
        if mode == "slip":
            return _slip_entry(lat, pl, di, name, expand, source)
        return _twin_entry(lat, pl, di, name, expand, shear, e.get("eta2"), source)
    except TracefitInputError as exc:
        msg = str(exc)
        raise TracefitInputError(msg if msg.startswith(where) else f"{where}: {msg}") from None


def _check_zone(pl: MillerIndex, di: MillerIndex) -> None:
    if _zone(pl.values, di.values) != 0:
        raise TracefitInputError(
            f"direction {di} does not lie in plane {pl} (h u + k v + l w = {_zone(pl.values, di.values)}, must be 0)"
        )


def _slip_entry(lat, pl, di, name, expand, source) -> list[DeformationSystem]:
    # Families pair every plane with every direction lying in it; single indices must fit.
    if not pl.family:
        _check_zone(pl, di)
    if expand:
        return expand_slip(lat, pl.values, di.values, name, source=source)
    p, d = canonical_sign(pl.values), canonical_sign(di.values)
    pf, df = format_index(p, "plane", True, "four"), format_index(d, "direction", True, "four")
    n, u = _unit_vectors(lat, p, d, name or f"{pf}{df} slip")
    return [DeformationSystem("slip", pf, df, name or f"{pf}{df} slip", p, d, n, u, None, source)]


def _twin_entry(lat, pl, di, name, expand, shear, eta2, source) -> list[DeformationSystem]:
    if pl.family:
        raise TracefitInputError(
            "a twin needs one plane and its twinning direction with the shear sense, e.g. "
            "plane = \"(301)\", direction = \"[10-3]\"; add expand = true for all variants"
        )
    _check_zone(pl, di)
    if eta2 is not None:
        di, shear = _sense_from_eta2(lat, pl, di, eta2, shear)
    if expand:
        return expand_twin(lat, pl.values, di.values, name, shear, source=source)
    p, d = pl.values, di.values
    if canonical_sign(p) != p:
        p, d = canonical_sign(p), tuple(-x for x in d)
    pf, df = format_index(p, "plane", True, "four"), format_index(canonical_sign(d), "direction", True, "four")
    n, u = _unit_vectors(lat, p, d, name or f"{pf}{df} twin")
    return [DeformationSystem("twin", pf, df, name or f"{pf}{df} twin", p, d, n, u, shear, source)]
