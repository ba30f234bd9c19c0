"""Option parsing shared by the commands: lattice and systems, orientation, frame, load, output.

Commands declare their options with the ``Annotated`` aliases below (so every command spells
them the same) and turn them into library objects with the ``build_*`` functions. Everything
here raises :class:`tracefit.errors.TracefitInputError` on bad input.
"""

from __future__ import annotations

import contextlib
import json
import re
import sys
import warnings
from pathlib import Path
from typing import Annotated, Optional

import numpy as np
import typer

from tracefit.errors import TracefitInputError

__all__ = [
    "check_output_file",
    "LatticeOpt",
    "CoverAOpt",
    "HexSettingOpt",
    "SystemsFileOpt",
    "ModesOpt",
    "FamiliesOpt",
    "EulerOpt",
    "QuaternionOpt",
    "MatrixOpt",
    "AxisAngleOpt",
    "AlignOpt",
    "FrameRotationOpt",
    "FlipXOpt",
    "FlipYOpt",
    "TiltOpt",
    "TiltAxisOpt",
    "LoadOpt",
    "CompressionOpt",
    "LoadFrameOpt",
    "StressOpt",
    "PriorOpt",
    "parse_prior",
    "CrssOpt",
    "JsonOpt",
    "build_lattice",
    "build_systems",
    "build_orientation",
    "build_frame",
    "build_load",
    "parse_modes",
    "parse_crss",
    "parse_align",
    "lattice_dict",
    "cli_warnings",
    "print_json",
]

# ------------------------------------------------------------------ option aliases
LatticeOpt = Annotated[
    Optional[str], typer.Option("--lattice", "-l", help="Lattice: fcc, bcc, hcp or tetragonal (or give --systems-file).")
]
CoverAOpt = Annotated[Optional[float], typer.Option("--c-over-a", help="c/a ratio for hcp (default ideal 1.633, with a warning) or tetragonal.")]
HexSettingOpt = Annotated[
    str, typer.Option("--hex-setting", help="Hexagonal Cartesian setting: x-along-a1 (x along a1, default) or x-along-a1-reciprocal (x along a1*).")
]
SystemsFileOpt = Annotated[
    Optional[Path], typer.Option("--systems-file", help="TOML file with a lattice and/or slip and twin systems (docs/systems-file.md).")
]
ModesOpt = Annotated[str, typer.Option("--modes", help="Deformation modes to include: slip, twin or slip,twin.")]
FamiliesOpt = Annotated[
    Optional[str], typer.Option("--families", help="Only these families, comma separated, e.g. '{111}<110>' or 'basal,prismatic'.")
]
EulerOpt = Annotated[Optional[str], typer.Option("--euler", "-e", help="Bunge Euler angles phi1,Phi,phi2 in degrees.")]
QuaternionOpt = Annotated[Optional[str], typer.Option("--quaternion", help="Orientation quaternion q0,q1,q2,q3 (scalar first, Rowenhorst P=+1).")]
MatrixOpt = Annotated[
    Optional[str], typer.Option("--matrix", help="Orientation matrix g (sample -> crystal), nine numbers row by row.")
]
AxisAngleOpt = Annotated[
    Optional[str],
    typer.Option("--axis-angle", help="Axis-angle pair of g: x,y,z,angle_deg (Rowenhorst P=+1: Euler 30,0,0 = 0,0,-1,30)."),
]
AlignOpt = Annotated[
    Optional[str], typer.Option("--align", help="Two crystal directions along two sample axes, e.g. '[001]:z,[100]:x'.")
]
FrameRotationOpt = Annotated[
    float, typer.Option("--frame-rotation", help="Rotation rho (deg, ccw) from the orientation data's frame to the image; traces shift by +rho.")
]
FlipXOpt = Annotated[bool, typer.Option("--flip-x", help="The data's x axis points left in the image (applied as 180 deg about y).")]
FlipYOpt = Annotated[bool, typer.Option("--flip-y", help="The data's y axis points down in the image (applied as 180 deg about x).")]
TiltOpt = Annotated[float, typer.Option("--tilt", help="Stage tilt in degrees (|tilt| < 90); traces are foreshortened.")]
TiltAxisOpt = Annotated[str, typer.Option("--tilt-axis", help="Tilt axis: x (image horizontal) or y (image vertical).")]
LoadOpt = Annotated[
    Optional[str],
    typer.Option("--load", help="Load axis: x, y, z (sample, also -x), a sample vector 1,0,0 or a crystal direction [110] / [11-20]."),
]
CompressionOpt = Annotated[bool, typer.Option("--compression", help="The load is compressive (default tension).")]
LoadFrameOpt = Annotated[
    str,
    typer.Option("--load-frame", help="Frame of --load / --stress: image (the picture's axes, default) or sample "
                                      "(the orientation data's axes; they differ when the frame is rotated or flipped)."),
]
StressOpt = Annotated[
    Optional[str],
    typer.Option("--stress", help="Stress tensor in MPa, Voigt order s11,s22,s33,s23,s13,s12 (1 = x, 2 = y, 3 = z); "
                                  "gives resolved shear per system instead of Schmid factors."),
]
PriorOpt = Annotated[
    Optional[str],
    typer.Option("--prior", help="Prior weights per system family, e.g. '{110}<111>=2' (each family 1 by default, "
                                 "spread over its planes; 0 removes one)."),
]
CrssOpt = Annotated[
    Optional[str],
    typer.Option("--crss", help="Critical resolved shear stresses per family, e.g. '{111}=10' or 'basal <a>=0.5,{10-12}=2' (gives activation stresses with --load)."),
]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print one JSON object to stdout instead of a table.")]


# ------------------------------------------------------------------ builders
def build_lattice(lattice: str | None, c_over_a: float | None = None, hex_setting: str = "x-along-a1", systems_file: Path | None = None):
    """The lattice, and the systems file's systems if a file was given.

    Returns
    -------
    (Lattice, list of DeformationSystem or None)
    """
    from tracefit.crystal import lattice_preset

    base = None
    if lattice is not None:
        base = lattice_preset(lattice, c_over_a, hex_setting=hex_setting)
    elif c_over_a is not None:
        raise TracefitInputError(
            "--c-over-a needs --lattice (e.g. --lattice hcp --c-over-a 1.624); a systems file's [lattice] table carries its own c/a"
        )
    if systems_file is None:
        if base is None:
            raise TracefitInputError("no lattice given; use --lattice fcc|bcc|hcp|tetragonal or --systems-file FILE")
        return base, None
    from tracefit.crystal import load_systems_file

    file_lattice, systems = load_systems_file(systems_file, lattice=base)
    if file_lattice is not None and base is not None:
        raise TracefitInputError(f"{systems_file} defines its own [lattice]; drop --lattice/--c-over-a or remove the table from the file")
    lat = file_lattice or base
    if file_lattice is not None and hex_setting != "x-along-a1":
        lat = lat.with_setting(hex_setting)
    return lat, systems


def parse_modes(text: str | None) -> tuple[str, ...]:
    """``"slip,twin"`` -> ("slip", "twin")."""
    if text is None or not text.strip():
        return ("slip", "twin")
    modes = tuple(m.strip().lower() for m in re.split(r"[,\s]+", text.strip()) if m.strip())
    bad = [m for m in modes if m not in ("slip", "twin")]
    if bad:
        raise TracefitInputError(f"unknown mode {bad[0]!r} in --modes; expected slip, twin or slip,twin")
    return modes


def _split_families(text: str | None):
    if text is None or not text.strip():
        return None
    # Commas inside brackets belong to an index, e.g. {1,1,1}: split only outside brackets.
    parts, depth, cur = [], 0, ""
    for ch in text:
        if ch in "({[<":
            depth += 1
        elif ch in ")}]>":
            depth -= 1
        if ch == "," and depth == 0:
            parts.append(cur)
            cur = ""
        else:
            cur += ch
    parts.append(cur)
    return [p.strip() for p in parts if p.strip()]


def build_systems(lattice, file_systems=None, modes: str | None = None, families: str | None = None):
    """Systems to use: the file's (if any) else the built-in catalogue, filtered by modes and families."""
    from tracefit.crystal import catalogue, filter_systems

    m = parse_modes(modes)
    fams = _split_families(families)
    if file_systems is not None:
        systems = filter_systems(file_systems, lattice, m, fams)
    else:
        systems = catalogue(lattice, m, fams)
    if not systems:
        raise TracefitInputError(f"no {' or '.join(m)} systems left for {lattice.name} with these filters")
    return systems


_ALIGN = re.compile(r"\s*([\[<][^\]>]*[\]>])\s*:\s*([+-]?[xyzXYZ])\s*")


def parse_align(text: str, lattice):
    """``"[001]:z,[100]:x"`` -> orientation g (first pair exact, second sets the turn)."""
    from tracefit.crystal import parse_index
    from tracefit.crystal import from_two_directions

    t = text.strip()
    pairs = []
    pos = 0
    while pos < len(t):
        m = _ALIGN.match(t, pos)
        if not m:
            break
        pairs.append((m.group(1), m.group(2).lower()))
        pos = m.end()
        if pos < len(t) and t[pos] in ",;":
            pos += 1
    if len(pairs) != 2 or pos != len(t):
        raise TracefitInputError(
            f"cannot read --align {text!r}; expected two crystal directions on sample axes, e.g. '[001]:z,[100]:x' "
            "(hexagonal: '[0001]:z,[2-1-10]:x')"
        )
    (d1, a1), (d2, a2) = pairs
    i1 = parse_index(d1, lattice, expect="direction")
    i2 = parse_index(d2, lattice, expect="direction")
    for i, d in ((i1, d1), (i2, d2)):
        if i.family:
            raise TracefitInputError(f"--align needs single directions in square brackets, not the family {d}")
    return from_two_directions(lattice, i1.values, a1, i2.values, a2)


def build_orientation(lattice, euler=None, quaternion=None, matrix=None, axis_angle=None, align=None):
    """Orientation matrix g from exactly one of the orientation options, and a description dict."""
    from tracefit.crystal import orientation as ori

    given = {k: v for k, v in (("--euler", euler), ("--quaternion", quaternion), ("--matrix", matrix), ("--axis-angle", axis_angle), ("--align", align)) if v is not None}
    if len(given) != 1:
        what = "none" if not given else ", ".join(given)
        raise TracefitInputError(f"give exactly one orientation: --euler, --quaternion, --matrix, --axis-angle or --align (got {what})")
    if euler is not None:
        g = ori.from_euler(ori.parse_euler(euler))
    elif quaternion is not None:
        g = ori.from_quaternion(ori.parse_quaternion(quaternion))
    elif matrix is not None:
        g = ori.from_matrix(ori.parse_matrix(matrix))
    elif axis_angle is not None:
        axis, ang = ori.parse_axis_angle(axis_angle)
        g = ori.from_axis_angle(axis, ang)
    else:
        g = parse_align(align, lattice)
    desc = {
        "input": {k.lstrip("-").replace("-", "_"): v for k, v in given.items()},
        "euler_deg": [float(x) for x in ori.to_euler(g)],
        "quaternion": [float(x) for x in ori.to_quaternion(g)],
        "matrix": g.tolist(),
    }
    return g, desc


def build_frame(rotation: float = 0.0, flip_x: bool = False, flip_y: bool = False, tilt: float = 0.0, tilt_axis: str = "x"):
    from tracefit.conventions import FrameSettings

    return FrameSettings(rotation_deg=float(rotation), flip_x=bool(flip_x), flip_y=bool(flip_y), tilt_deg=float(tilt), tilt_axis=tilt_axis)


def parse_crss(text: str | None, systems=None) -> dict | None:
    """``"{111}=10,basal <a>=0.5"`` -> {"{111}": 10.0, "basal <a>": 0.5}; keys must name a family, system name or mode."""
    if text is None or not text.strip():
        return None
    out = {}
    for part in _split_families(text):
        key, sep, val = part.rpartition("=")
        key = key.strip()
        try:
            v = float(val)
        except ValueError:
            v = None
        if not sep or not key or v is None or not np.isfinite(v) or v <= 0:
            raise TracefitInputError(f"cannot read --crss entry {part!r}; expected family=positive number, e.g. '{{111}}=10'")
        out[key] = v
    if systems is not None:
        known = {k for s in systems for k in (s.family, s.name, s.mode)}
        unknown = [k for k in out if k not in known]
        if unknown:
            raise TracefitInputError(f"--crss names {unknown[0]!r}, which matches no family here; use one of {', '.join(sorted({s.family for s in systems}))}")
    return out


def build_load(text: str | None, lattice, compression: bool = False, frame: str = "image", stress: str | None = None):
    """The load from --load (axis) or --stress (Voigt, MPa), in the frame --load-frame names."""
    from tracefit.predict import Load, parse_load

    fr = str(frame).strip().lower()
    if fr not in ("image", "sample"):
        raise TracefitInputError(f"--load-frame must be image or sample, got {frame!r}")
    if stress is not None:
        if text is not None or compression:
            raise TracefitInputError("give either --load (an axis, with --compression) or --stress (a tensor), not both")
        try:
            vals = [float(x) for x in stress.replace(";", ",").split(",") if x.strip()]
        except ValueError:
            raise TracefitInputError(f"--stress {stress!r}: expected six numbers s11,s22,s33,s23,s13,s12 in MPa") from None
        if len(vals) != 6:
            raise TracefitInputError(f"--stress needs six numbers s11,s22,s33,s23,s13,s12 in MPa, got {len(vals)}")
        return Load.stress(vals, frame=fr)
    if text is None:
        if compression:
            raise TracefitInputError("--compression needs --load (the load axis)")
        return None
    return parse_load(text, lattice, "compression" if compression else "tension", frame=fr)


def parse_prior(text: str | None) -> dict | None:
    """--prior '{110}<111>=2,{112}<111>=1' as a dict family -> weight."""
    if text is None:
        return None
    out = {}
    for part in _split_families(text):
        if not part.strip():
            continue
        name, sep, val = part.rpartition("=")
        try:
            w = float(val)
        except ValueError:
            w = None
        if not sep or not name.strip() or w is None or w < 0:
            raise TracefitInputError(f"--prior {text!r}: expected FAMILY=WEIGHT pairs such as '{{110}}<111>=2' (weights >= 0)")
        out[name.strip()] = w
    return out


def lattice_dict(lattice) -> dict:
    """The lattice as ``--json`` shows it (:func:`tracefit.results.lattice_summary`)."""
    from tracefit.results import lattice_summary

    return lattice_summary(lattice)


# ------------------------------------------------------------------ output
#: Picture formats the drawing commands can write (OpenCV's writers, chosen by suffix).
PICTURE_SUFFIXES = (".png", ".jpg", ".jpeg", ".tif", ".tiff", ".bmp")


def check_output_file(path, flag: str, suffixes: tuple[str, ...] = PICTURE_SUFFIXES) -> None:
    """Refuse an output file that cannot be written, before any work is done.

    Checked at the door so a bad path gives one error line, not a finished analysis followed by
    an error (or a native library's message).

    Parameters
    ----------
    path : str or Path
        The file to be written.
    flag : str
        The option that named it, for the message (e.g. ``"--overlay"``).
    suffixes : tuple of str
        Accepted suffixes (lower case).

    Raises
    ------
    TracefitInputError
        Unknown suffix, a folder, a missing or read-only parent folder.

    Examples
    --------
    >>> check_output_file("out.xyz", "--overlay")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: --overlay out.xyz: unknown picture type '.xyz'; expected .png, .jpg, .jpeg, .tif, .tiff or .bmp
    """
    import os

    p = Path(path)
    kinds = ", ".join(suffixes[:-1]) + " or " + suffixes[-1]
    if p.is_dir():
        raise TracefitInputError(f"{flag} {p}: is a folder; expected a file name ending in {kinds}")
    if p.suffix.lower() not in suffixes:
        raise TracefitInputError(f"{flag} {p}: unknown picture type {p.suffix or '(none)'!r}; expected {kinds}")
    parent = p.parent if str(p.parent) else Path(".")
    if not parent.is_dir():
        raise TracefitInputError(f"{flag} {p}: the folder {parent} does not exist")
    if not os.access(parent, os.W_OK | os.X_OK):
        raise TracefitInputError(f"{flag} {p}: the folder {parent} is not writable")


@contextlib.contextmanager
def cli_warnings():
    """Collect Python warnings and print each as one ``tracefit: warning:`` line on stderr."""
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            yield
        except TracefitInputError:
            # Bad input ends the command with one error line; warnings about the refused run would
            # only bury it.
            caught.clear()
            raise
        finally:
            seen = set()
            for w in caught:
                msg = " ".join(str(w.message).split())
                if msg not in seen:
                    seen.add(msg)
                    print(f"tracefit: warning: {msg}", file=sys.stderr)


def _jsonable(o):
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, (np.floating, np.integer)):
        return o.item()
    if isinstance(o, np.bool_):
        return bool(o)
    if isinstance(o, Path):
        return str(o)
    raise TypeError(f"not JSON serialisable: {type(o).__name__}")


def print_json(obj) -> None:
    """The command's one JSON object on stdout."""
    sys.stdout.write(json.dumps(obj, default=_jsonable, allow_nan=False) + "\n")
