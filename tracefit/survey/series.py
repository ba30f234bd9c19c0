"""In-situ series in a job file: the same field imaged at increasing strain.

::

    [[series]]
    name = "ramp"                      # frames are named ramp-f01, ramp-f02, ...
    labels = "ramp_labels.png"         # one grain map and orientation table for every frame ...
    orientations = "ramp_grains.csv"
    register = true                    # ... frames moved onto the first by phase correlation
    lattice = "hcp"                    # any image setting, for every frame

    [[series.frame]]
    file = "ramp_0.png"
    strain = 0.0                       # engineering strain of the frame
    stress_mpa = 0.0                   # optional: applied (uniaxial) stress, MPa

Each frame becomes one :class:`tracefit.survey.ImageJob` whose ``series`` holds the series'
``name``, the frame's position ``frame`` (1-based), ``n_frames``, ``strain``, ``stress_mpa``,
``register`` and ``reference`` (the first frame's file). The grain map belongs to the first frame.
"""

from __future__ import annotations

import dataclasses
import re
from pathlib import Path
from typing import Callable

from tracefit.survey.keylines import _Ctx, _file, _number, _string, _unknown

__all__ = ["parse_series", "SERIES_KEYS", "FRAME_KEYS"]

SERIES_KEYS = {
    "register": "true to move each frame onto the first by phase correlation (translation and a small rotation)",
    "frame": "one [[series.frame]] table per frame, in order of increasing strain",
}
FRAME_KEYS = {
    "file": "the frame's image file, relative to the job file",
    "strain": "the frame's strain (a number, e.g. 0.02)",
    "stress_mpa": "the applied uniaxial stress at the frame, MPa (optional)",
    "name": "a name for the frame (default SERIES-fNN)",
    "notes": "free text",
}
_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]*$")


def _frame(ctx: _Ctx, key: tuple, raw, base: Path, prev_strain) -> dict:
    if not isinstance(raw, dict):
        raise ctx.fail(key, "must be a [[series.frame]] table")
    for k in raw:
        if k not in FRAME_KEYS:
            raise _unknown(ctx, key + (k,), FRAME_KEYS)
    for need in ("file", "strain"):
        if need not in raw:
            raise ctx.fail(key + (need,), f"is missing: every frame needs '{need}' ({FRAME_KEYS[need]})")
    strain = _number(ctx, key + ("strain",), raw["strain"])
    if prev_strain is not None and strain < prev_strain:
        raise ctx.fail(key + ("strain",), f"is {strain:g}, below the frame before ({prev_strain:g}): list frames "
                       "in order of increasing strain")
    out = {"file": _file(ctx, key + ("file",), raw["file"], base), "strain": strain, "stress_mpa": None,
           "name": None, "notes": raw.get("notes", "")}
    if "stress_mpa" in raw:
        out["stress_mpa"] = _number(ctx, key + ("stress_mpa",), raw["stress_mpa"])
    if "name" in raw:
        out["name"] = _string(ctx, key + ("name",), raw["name"])
    return out


def _image_size(path: Path):
    try:
        from PIL import Image

        with Image.open(path) as im:
            return im.size[1], im.size[0]
    except Exception:  # unreadable here: the survey reports it for the image itself
        return None


def _check_sizes(ctx: _Ctx, key: tuple, name: str, frames: list[dict]) -> None:
    """Frames not registered must share the first frame's size (checked where the files exist)."""
    first = _image_size(frames[0]["file"]) if frames[0]["file"].is_file() else None
    for k, fr in enumerate(frames[1:], start=2):
        size = _image_size(fr["file"]) if first and fr["file"].is_file() else None
        if size and size != first:
            raise ctx.fail(key + ("frame", k - 1, "file"),
                           f"is {size[1]} x {size[0]} px but series {name!r} starts with a {first[1]} x {first[0]} px "
                           "frame; frames of one series share one size, or set register = true to move them onto "
                           "the first")


def parse_series(ctx: _Ctx, raw_series, base: Path, parse_image: Callable[[tuple, dict], object],
                 first_index: int) -> list:
    """The frames of every ``[[series]]`` table as image jobs (see the module docstring).

    Parameters
    ----------
    ctx : _Ctx
        The job reader's context (file name and key lines, for messages).
    raw_series : list of dict
        The ``series`` array of tables as TOML read it.
    base : Path
        The job file's folder.
    parse_image : callable
        ``(key, raw image table) -> ImageJob``: the job reader's own image parser, so a frame
        is checked exactly like an ``[[image]]``.
    first_index : int
        Index the first frame takes among the job's images.

    Returns
    -------
    list of ImageJob

    Raises
    ------
    TracefitInputError
        A missing, unknown or wrongly typed field (named with its line), frames out of order,
        or frames of another size than the first without ``register = true``.

    Examples
    --------
    >>> from tracefit.survey import parse_job
    >>> job = parse_job('''
    ... [[series]]
    ... name = "ramp"
    ... lattice = "fcc"
    ... euler_deg = [0, 0, 0]
    ... [[series.frame]]
    ... file = "f0.png"
    ... strain = 0.0
    ... [[series.frame]]
    ... file = "f1.png"
    ... strain = 0.01
    ... stress_mpa = 120
    ... ''')
    >>> [(im.name, im.series["frame"], im.series["stress_mpa"]) for im in job.images]
    [('ramp-f01', 1, None), ('ramp-f02', 2, 120.0)]
    """
    if not isinstance(raw_series, list) or not all(isinstance(x, dict) for x in raw_series):
        raise ctx.fail(("series",), "must be written as [[series]] tables")
    out = []
    for i, raw in enumerate(raw_series):
        key = ("series", i)
        if "name" not in raw:
            raise ctx.fail(key + ("name",), "is missing: every [[series]] needs a name")
        name = _string(ctx, key + ("name",), raw["name"])
        if not _NAME_RE.match(name):
            raise ctx.fail(key + ("name",), f"must use letters, digits, '-', '_' or '.', got {name!r}")
        register = raw.get("register", False)
        if not isinstance(register, bool):
            raise ctx.fail(key + ("register",), f"must be true or false, got {register!r}")
        frames_raw = raw.get("frame")
        if not isinstance(frames_raw, list) or len(frames_raw) < 1:
            raise ctx.fail(key + ("frame",), "is missing: list the frames as [[series.frame]] tables "
                           "(each with file and strain)")
        frames, prev = [], None
        for k, fr in enumerate(frames_raw):
            frames.append(_frame(ctx, key + ("frame", k), fr, base, prev))
            prev = frames[-1]["strain"]
        if not register:
            _check_sizes(ctx, key, name, frames)
        shared = {k: v for k, v in raw.items() if k not in SERIES_KEYS and k not in ("name", "file", "notes")}
        for k, fr in enumerate(frames, start=1):
            im = parse_image(key, dict(shared, name=fr["name"] or f"{name}-f{k:02d}", file=str(fr["file"]),
                                       notes=fr["notes"] or raw.get("notes", "")))
            info = {"name": name, "frame": k, "n_frames": len(frames), "strain": fr["strain"],
                    "stress_mpa": fr["stress_mpa"], "register": register, "reference": str(frames[0]["file"])}
            out.append(dataclasses.replace(im, series=info))
    return out
