"""Seeded fuzz of the public API and the command line (issue 16, "Checks").

Random, hostile and edge inputs go to the flat namespace (``import tracefit as tf``) and to
``tracefit.cli.main([...])`` in-process. The rules checked:

* library: a call returns or raises :class:`tracefit.errors.TracefitInputError`; never another
  exception type, never a NaN or None probability in an identification;
* command line: exit code 2 with exactly one stderr line starting ``tracefit: error:`` for bad
  input, 0 for good input, never a traceback (an exception out of ``main``), and nothing else on
  stderr (native-library messages written to file descriptor 2 are caught there too).

Usage::

    PYTHONPATH=$PWD python benchmarks/fuzz.py --n-library 10000 --n-cli 400 --seed 1

Prints the number of calls, failures by kind and the first reproducers; exits 0 (a figure, not a
gate: ``tests/test_fuzz.py`` runs the same generators in a short mode and asserts zero failures).
"""

from __future__ import annotations

import argparse
import contextlib
import io
import math
import os
import random
import re
import sys
import tempfile
import time
import warnings
from collections import Counter
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np

NAN = float("nan")
INF = float("inf")

# Values that break naive number handling: non-finite, huge, tiny, wrong types.
HOSTILE_NUMBERS: list[Any] = [
    0, 0.0, -0.0, 1, -1, 0.5, 1e-300, -1e-300, 1e300, -1e300, NAN, INF, -INF, 90, 180, 360, 720,
    -720, 1e16, 2**63, -(2**63), True, False, None, "x", "1", "", [1.0], (), {}, np.float32(3.5),
    np.int64(7), np.nan, complex(1, 1), object(),
]
ANGLES = [0.0, 12.0, 45.0, 71.0, 89.999, 90.0, 135.0, 179.999, 180.0, -30.0, 400.0]


def pick(rng: random.Random, items: list[Any]) -> Any:
    return items[rng.randrange(len(items))]


def number(rng: random.Random, lo: float = -400.0, hi: float = 400.0, hostile: float = 0.3) -> Any:
    """A plain number most of the time, a hostile value with probability ``hostile``."""
    if rng.random() < hostile:
        return pick(rng, HOSTILE_NUMBERS)
    return rng.uniform(lo, hi)


def huge_int(rng: random.Random) -> int:
    return rng.choice([1, -1]) * rng.randrange(10 ** rng.randrange(1, 25))


def index_text(rng: random.Random) -> Any:
    """Miller-index strings: good, odd and hostile."""
    good = ["(111)", "{111}", "{110}", "{112}", "{123}", "{0001}", "{10-10}", "{10-12}", "{10-11}",
            "{11-22}", "(1 1 -1)", "[110]", "<111>", "<11-20>", "{111}<110>", "{110}<111>",
            "{10-12}<-1011>", "(100)", "[001]"]
    bad = ["", "(", "()", "(000)", "{0000}", "(1,1)", "{1 1 1 1 1}", "(abc)", "{11-2}", "{1.5 1 1}",
           "(nan nan nan)", "(inf 1 1)", "{-}", "<>", "[[1]]", "{111", "111}", "\x00", "(１１１)",
           "{10-10}<", "(1 1 1)(1 1 1)", "   ", "{1e3 1 1}"]
    roll = rng.random()
    if roll < 0.4:
        return pick(rng, good)
    if roll < 0.7:
        return pick(rng, bad)
    if roll < 0.9:
        n = rng.choice([3, 4])
        vals = [str(huge_int(rng)) for _ in range(n)]
        sep = rng.choice([",", " ", ""])
        return rng.choice(["({})", "{{{}}}", "[{}]", "<{}>"]).format(sep.join(vals))
    return pick(rng, HOSTILE_NUMBERS)


def lattice_args(rng: random.Random) -> tuple[tuple, dict]:
    args = tuple(number(rng, 0.5, 10.0) for _ in range(3)) + tuple(number(rng, 30, 150) for _ in range(3))
    kw: dict[str, Any] = {}
    if rng.random() < 0.5:
        kw["laue"] = pick(rng, ["m-3m", "6/mmm", "4/mmm", "mmm", "2/m", "-1", "-3m", "m3m", "x", None, 3])
    if rng.random() < 0.2:
        kw["hex_setting"] = pick(rng, ["x_a1", "x_a1star", "bogus", None, 1])
    return args, kw


def some_lattice(rng: random.Random):
    import tracefit as tf

    roll = rng.random()
    if roll < 0.35:
        return tf.Lattice.fcc()
    if roll < 0.6:
        return tf.Lattice.bcc()
    if roll < 0.9:
        return tf.Lattice.hcp(pick(rng, [None, 1.587, 1.633, 1.856]))
    return tf.Lattice(3.0, 3.0, 4.0, 90, 90, 90, laue="4/mmm")


def orientation_value(rng: random.Random) -> Any:
    import tracefit as tf

    roll = rng.random()
    if roll < 0.6:
        return tf.Orientation.from_euler([rng.uniform(0, 360), rng.uniform(0, 180), rng.uniform(0, 360)])
    if roll < 0.8:
        return np.array([rng.uniform(0, 360), rng.uniform(0, 180), rng.uniform(0, 360)])
    return pick(rng, [None, [1, 2], [NAN, 0, 0], np.eye(3), np.zeros((3, 3)), "35,20,60", 5.0,
                      np.full(3, INF), [[1, 2, 3]]])


def observed_list(rng: random.Random) -> list:
    import tracefit as tf

    out: list[Any] = []
    for _ in range(rng.randrange(0, 5)):
        roll = rng.random()
        if roll < 0.7:
            kw = {}
            if rng.random() < 0.4:
                kw["angle_sigma_deg"] = number(rng, 0.01, 5.0, hostile=0.5)
            angle = number(rng, 0, 180, hostile=0.15)
            try:
                out.append(tf.ObservedFamily(angle, **kw))
            except Exception:  # noqa: BLE001 - the observed generator reports these
                out.append(pick(rng, ANGLES))
        elif roll < 0.9:
            out.append(number(rng, 0, 180, hostile=0.3))
        else:
            out.append(pick(rng, ["12", None, [12.0], object()]))
    return out


IDENTIFY_SETTINGS: list[tuple[str, Callable[[random.Random], Any]]] = [
    ("p_none", lambda r: pick(r, [0.0, 1e-12, 0.05, 0.5, 0.999999, 1 - 1e-15, 1.0, -0.1, NAN, INF, "0.1", None])),
    ("orientation_sigma_deg", lambda r: number(r, 0, 10, hostile=0.6)),
    ("frame_sigma_deg", lambda r: number(r, 0, 10, hostile=0.6)),
    ("schmid_weight", lambda r: number(r, 0, 4, hostile=0.5)),
    ("allow_shared_planes", lambda r: pick(r, [True, False, 1, "yes", None])),
    ("bogus_setting", lambda r: 1.0),
]


@dataclass
class Case:
    """One fuzz call: a target name, a reproducer text and the call itself."""

    target: str
    repro: str
    call: Callable[[], Any]


@dataclass
class Failure:
    kind: str
    repro: str
    detail: str


@dataclass
class Tally:
    calls: int = 0
    failures: list[Failure] = field(default_factory=list)

    def kinds(self) -> Counter:
        return Counter(f.kind for f in self.failures)


def _r(x: Any) -> str:
    """A short, runnable-looking repr of an argument."""
    if isinstance(x, np.ndarray):
        return f"np.zeros({x.shape}, {x.dtype.name})" if x.size > 12 else f"np.array({x.tolist()!r}, {x.dtype.name!r})"
    if isinstance(x, float) and not math.isfinite(x):
        return f"float({str(x)!r})"
    if type(x) is object:
        return "object()"
    return repr(x)


# ---------------------------------------------------------------- library generators

def gen_observed(rng):
    import tracefit as tf

    angle = number(rng, 0, 180, hostile=0.6)
    kw: dict[str, Any] = {}
    if rng.random() < 0.5:
        kw["angle_sigma_deg"] = number(rng, 0.01, 5.0, hostile=0.6)
    if rng.random() < 0.2:
        kw["n_bands"] = pick(rng, [3, 0, -1, 2.5, NAN, "3", None])
    if rng.random() < 0.2:
        kw["strength"] = number(rng, 0, 1, hostile=0.6)
    return Case("ObservedFamily", f"tf.ObservedFamily({_r(angle)}, **{kw!r})", lambda: tf.ObservedFamily(angle, **kw))


def gen_lattice(rng):
    import tracefit as tf

    if rng.random() < 0.3:
        c = number(rng, 0.5, 3.0, hostile=0.5)
        kw = {"a": number(rng, 0.5, 5, hostile=0.3)} if rng.random() < 0.3 else {}
        return Case("Lattice.hcp", f"tf.Lattice.hcp({_r(c)}, **{kw!r})", lambda: tf.Lattice.hcp(c, **kw))
    args, kw = lattice_args(rng)
    return Case("Lattice", f"tf.Lattice(*{tuple(map(_r, args))}, **{kw!r})".replace("'", ""),
                lambda: tf.Lattice(*args, **kw))


def gen_orientation(rng):
    import tracefit as tf

    kind = rng.choice(["euler", "quaternion", "matrix"])
    if kind == "euler":
        v = pick(rng, [[number(rng, -720, 720) for _ in range(3)], [1, 2], [], "1,2,3", None,
                       np.zeros((2, 3)), [[1, 2, 3]], np.array([NAN, 1, 2]), [INF, 0, 0]])
        deg = pick(rng, [True, False, "yes", None])
        return Case("Orientation.from_euler", f"tf.Orientation.from_euler({_r(v)}, degrees={deg!r})",
                    lambda: tf.Orientation.from_euler(v, degrees=deg))
    if kind == "quaternion":
        v = pick(rng, [[number(rng, -2, 2) for _ in range(4)], [0, 0, 0, 0], [1, 0, 0], [1e300, 1e300, 0, 0],
                       [NAN, 0, 0, 1], "1,0,0,0", None, [[1, 0, 0, 0]]])
        return Case("Orientation.from_quaternion", f"tf.Orientation.from_quaternion({_r(v)})",
                    lambda: tf.Orientation.from_quaternion(v))
    v = pick(rng, [np.eye(3), -np.eye(3), np.zeros((3, 3)), np.full((3, 3), NAN), np.eye(4), np.eye(3) * 1e300,
                   np.array([[0, 1, 0], [1, 0, 0], [0, 0, 1]]), [[1, 0, 0]], "eye", None,
                   np.eye(3) + rng.uniform(-0.01, 0.01)])
    tol = pick(rng, [1e-3, 0.0, -1.0, NAN, INF, 10.0])
    return Case("Orientation.from_matrix", f"tf.Orientation.from_matrix({_r(v)}, tol={_r(tol)})",
                lambda: tf.Orientation.from_matrix(v, tol=tol))


def gen_load(rng):
    import tracefit as tf

    if rng.random() < 0.6:
        axis = pick(rng, ["x", "y", "z", "-x", "[110]", "<111>", "[0 0 0]", "w", "", [0, 1, 0], [0, 0, 0],
                          [NAN, 1, 0], [1, 2], None, 3, "[11-20]", "[1e400 0 0]"])
        sense = pick(rng, ["tension", "compression", "shear", None, 1])
        frame = pick(rng, ["image", "sample", "crystal", "bogus", None])
        lat = some_lattice(rng) if rng.random() < 0.4 else None
        return Case("Load.axis", f"tf.Load.axis({axis!r}, sense={sense!r}, frame={frame!r}, lattice={lat!r})",
                    lambda: tf.Load.axis(axis, sense=sense, lattice=lat, frame=frame))
    s = pick(rng, [[number(rng, -500, 500) for _ in range(6)], np.eye(3) * 100, np.zeros(6), [1, 2, 3],
                   np.full(6, NAN), np.full((3, 3), INF), np.arange(9).reshape(3, 3), "100,0,0,0,0,0", None])
    frame = pick(rng, ["image", "sample", "bogus"])
    return Case("Load.stress", f"tf.Load.stress({_r(s)}, frame={frame!r})", lambda: tf.Load.stress(s, frame=frame))


def gen_catalogue(rng):
    import tracefit as tf

    lat = some_lattice(rng)
    fams = pick(rng, [None, [index_text(rng)], [index_text(rng), index_text(rng)], index_text(rng), [], 5])
    modes = pick(rng, [("slip", "twin"), "slip", "twin", ["slip"], "kink", [], None, 3])
    return Case("catalogue", f"tf.catalogue({lat!r}, modes={modes!r}, families={fams!r})",
                lambda: tf.catalogue(lat, modes=modes, families=fams))


def gen_parse_index(rng):
    import tracefit as tf

    text = index_text(rng)
    lat = some_lattice(rng) if rng.random() < 0.5 else None
    expect = pick(rng, [None, "plane", "direction", "family", "bogus"])
    three = rng.random() < 0.2
    return Case("parse_index", f"tf.parse_index({text!r}, {lat!r}, expect={expect!r}, hex_three_index={three})",
                lambda: tf.parse_index(text, lat, expect=expect, hex_three_index=three))


def gen_predict(rng):
    import tracefit as tf

    lat = some_lattice(rng)
    g = orientation_value(rng)
    kw: dict[str, Any] = {}
    if rng.random() < 0.3:
        kw["load"] = pick(rng, ["x", "y", "-z", [0, 1, 0], [0, 0, 0], "bogus", [NAN, 0, 1]])
    if rng.random() < 0.2:
        kw["near_surface_deg"] = number(rng, 0, 30, hostile=0.6)
    if rng.random() < 0.15:
        kw["sort"] = pick(rng, ["auto", "angle", "schmid", "bogus", None])
    if rng.random() < 0.15:
        kw["stress"] = pick(rng, [[100, 0, 0, 0, 0, 0], np.full(6, NAN), [1, 2]])

    def call():
        return tf.predict_traces(lat, g, tf.catalogue(lat), **kw)

    return Case("predict_traces", f"tf.predict_traces({lat!r}, {_r(g)}, tf.catalogue(lat), **{kw!r})", call)


def gen_identify(rng):
    import tracefit as tf

    lat = some_lattice(rng)
    g = orientation_value(rng)
    obs = observed_list(rng)
    settings = {}
    for name, make in IDENTIFY_SETTINGS:
        if rng.random() < (0.5 if name == "p_none" else 0.15 if name != "bogus_setting" else 0.03):
            settings[name] = make(rng)
    kw: dict[str, Any] = {}
    if rng.random() < 0.2:
        kw["load"] = pick(rng, ["y", "x", [0, 0, 0], "bogus", None])
    if rng.random() < 0.15:
        kw["modes"] = pick(rng, [("slip",), "twin", (), ["kink"], None])
    if rng.random() < 0.1:
        kw["prior"] = pick(rng, [{"{111}<110>": 2.0}, {"{111}<110>": -1}, {"{111}<110>": NAN}, {"bogus": 1}, 3])
    return Case("identify", f"tf.identify({obs!r}, {lat!r}, orientation={_r(g)}, **{ {**kw, **settings}!r})",
                lambda: tf.identify(obs, lat, orientation=g, **kw, **settings))


def small_image(rng: random.Random, nrng: np.random.Generator) -> np.ndarray:
    """Small arrays of odd shapes and dtypes."""
    shape = pick(rng, [(1, 1), (1, 40), (40, 1), (2, 2), (3, 50), (17, 23), (32, 32), (48, 64), (64, 48, 3),
                       (40, 40, 4), (30, 30, 1), (20, 20, 2), (0, 10), (10, 0), (5,), (4, 4, 4, 4), (64, 64)])
    dtype = pick(rng, ["bool", "uint8", "uint16", "int32", "float32", "float64", "int8", "complex64", "object"])
    if dtype == "object":
        return np.empty(shape, dtype=object)
    if dtype == "bool":
        return nrng.random(shape) > 0.5
    if dtype.startswith("complex"):
        return np.zeros(shape, dtype)
    if dtype.startswith("float"):
        a = nrng.random(shape).astype(dtype) * pick(rng, [1.0, 255.0, 1e30, -1.0])
        if rng.random() < 0.4 and a.size:
            a.flat[nrng.integers(0, a.size, max(1, a.size // 7))] = pick(rng, [NAN, INF, -INF])
        if rng.random() < 0.1:
            a[...] = pick(rng, [0.0, NAN])
        return a
    info = np.iinfo(dtype)
    a = nrng.integers(max(info.min, -1000), min(info.max, 65535), size=shape, endpoint=True).astype(dtype)
    if rng.random() < 0.15:
        a[...] = 0
    return a


def lined_image(nrng: np.random.Generator, h: int = 64, w: int = 64) -> np.ndarray:
    """A tiny picture with parallel dark lines, so detection has something to find."""
    yy, xx = np.mgrid[0:h, 0:w]
    img = 180 + 10 * nrng.random((h, w))
    img[((xx + yy) % 9) == 0] = 60
    img[((xx - 2 * yy) % 11) == 0] = 80
    return img.astype(np.uint8)


DETECT_OPTIONS: list[tuple[str, Callable[[random.Random], Any]]] = [
    ("min_bands", lambda r: pick(r, [0, 1, 2, 3, -5, 10**6, 2.5, "three", None, True, NAN])),
    ("max_families", lambda r: pick(r, [0, 1, 8, -1, 10**9, 1.5, None])),
    ("working_size", lambda r: pick(r, [0, 1, 2, 7, 64, 1536, -10, 10**7, 2.5, NAN, "big"])),
    ("scales", lambda r: pick(r, [(), (1.0,), (0.0,), (-1.0,), (NAN,), (1e6,), "1,2", [1, 2], 3.0, None])),
    ("min_coverage", lambda r: number(r, 0, 1, hostile=0.5)),
    ("min_depth", lambda r: number(r, 0, 1, hostile=0.5)),
    ("min_significance", lambda r: number(r, 0, 50, hostile=0.5)),
    ("find_bar", lambda r: pick(r, [True, False, 0, "no", None])),
    ("pixel_size_um", lambda r: number(r, 0.01, 5, hostile=0.5)),
]


def gen_detect(rng, nrng):
    import tracefit as tf

    img = small_image(rng, nrng) if rng.random() < 0.7 else lined_image(nrng, rng.randrange(8, 80), rng.randrange(8, 80))
    kw = {name: make(rng) for name, make in DETECT_OPTIONS if rng.random() < 0.15}
    if rng.random() < 0.15:
        kw["mask"] = pick(rng, [np.ones(img.shape[:2], bool), np.zeros(img.shape[:2], bool), np.ones((3, 3), bool),
                                np.ones(img.shape[:2], np.float32) * NAN])
    if rng.random() < 0.1:
        kw["labels"] = pick(rng, [np.ones(img.shape[:2], np.int32), np.zeros((2, 2), np.int32),
                                  np.full(img.shape[:2], -1, np.int64)])
        kw["grain"] = pick(rng, [1, 0, 99, None, "a"])
    return Case("detect_bands", f"tf.detect_bands({_r(img)}, **{ {k: (_r(v)) for k, v in kw.items()} })",
                lambda: tf.detect_bands(img, **kw))


def gen_two_traces(rng):
    import tracefit as tf

    a = number(rng, 0, 180, hostile=0.4)
    b = number(rng, 0, 180, hostile=0.4)
    kw = {}
    if rng.random() < 0.3:
        kw["sigma1_deg"] = number(rng, 0, 3, hostile=0.6)
    if rng.random() < 0.2:
        kw["sigma2_deg"] = number(rng, 0, 3, hostile=0.6)
    if rng.random() < 0.2:
        from tracefit.matching import FaceGeometry

        def call():
            geom = FaceGeometry(edge_angle_deg=number(rng, 0, 180, 0.5), dihedral_deg=number(rng, 0, 180, 0.5))
            return tf.plane_from_two_traces(a, b, geom, **kw)

        return Case("plane_from_two_traces", f"tf.plane_from_two_traces({_r(a)}, {_r(b)}, FaceGeometry(...), **{kw!r})", call)
    return Case("plane_from_two_traces", f"tf.plane_from_two_traces({_r(a)}, {_r(b)}, **{kw!r})",
                lambda: tf.plane_from_two_traces(a, b, **kw))


def gen_check_options(rng):
    from tracefit.options import OPTIONS, check_options

    opts = list(OPTIONS.values()) if isinstance(OPTIONS, dict) else list(OPTIONS)
    values: Any = {}
    for _ in range(rng.randrange(0, 4)):
        o = pick(rng, opts)
        values[o.name] = pick(rng, HOSTILE_NUMBERS + [o.default, [1, 2], (NAN,), "1,2", 10**400])
    if rng.random() < 0.1:
        values = pick(rng, [None, [("p_none", 1)], "p_none=1", {1: 2}])
    group = pick(rng, ["detect", "identify", "analysis", "image", ("identify", "analysis"), "bogus", (), None])
    return Case("check_options", f"check_options({values!r}, {group!r})", lambda: check_options(values, group))


def gen_analyse(rng, nrng):
    import tracefit as tf

    img = lined_image(nrng, rng.randrange(2, 48), rng.randrange(2, 48)) if rng.random() < 0.6 else small_image(rng, nrng)
    lat = pick(rng, ["fcc", "bcc", "hcp", "bogus", 3]) if rng.random() < 0.3 else some_lattice(rng)
    g = orientation_value(rng)
    kw: dict[str, Any] = {}
    if rng.random() < 0.3:
        kw["detect"] = {name: make(rng) for name, make in DETECT_OPTIONS[:4] if rng.random() < 0.5}
    if rng.random() < 0.3:
        kw["p_none"] = pick(rng, [0.0, 0.999999, NAN, 1.0])
    if rng.random() < 0.2:
        kw["pixel_size_um"] = number(rng, 0.01, 5, hostile=0.6)
    if rng.random() < 0.2:
        kw["measured"] = observed_list(rng)
    if rng.random() < 0.1:
        kw["frame"] = pick(rng, ["image", 0.0, None, {}])
    return Case("analyse_image", f"tf.analyse_image({_r(img)}, {lat!r}, orientation={_r(g)}, **{kw!r})",
                lambda: tf.analyse_image(img, lat, orientation=g, **kw))


def frame_value(rng: random.Random) -> Any:
    import tracefit as tf

    kw: dict[str, Any] = {}
    if rng.random() < 0.5:
        kw["rotation_deg"] = number(rng, -360, 360, hostile=0.5)
    if rng.random() < 0.3:
        kw["flip_x"] = pick(rng, [True, False, 1, "yes", None])
    if rng.random() < 0.3:
        kw["tilt_deg"] = number(rng, -89, 89, hostile=0.5)
    if rng.random() < 0.2:
        kw["tilt_axis"] = pick(rng, ["x", "y", "z", "", None, 1])
    return kw


def gen_frame(rng):
    import tracefit as tf

    kw = frame_value(rng)
    return Case("FrameSettings", f"tf.FrameSettings(**{kw!r})", lambda: tf.FrameSettings(**kw))


def gen_format_index(rng):
    import tracefit as tf

    values = pick(rng, [[1, 1, 1], [1, 0, -1, 0], [0, 0, 0], [], [1.5, 1, 1], [huge_int(rng)] * 3, "111", None,
                        [NAN, 1, 1], [1, 2], np.array([1, -1, 0]), [[1, 1, 1]], [True, 1, 0]])
    kind = pick(rng, ["plane", "direction", "bogus", None])
    fam = pick(rng, [False, True, "x"])
    return Case("format_index", f"tf.format_index({_r(values)}, {kind!r}, family={fam!r})",
                lambda: tf.format_index(values, kind, family=fam))


def gen_identify_more(rng):
    """identify with frames, per-grain orientation tables, CRSS and priors of odd kinds."""
    import tracefit as tf

    lat = some_lattice(rng)
    obs = observed_list(rng)
    kw: dict[str, Any] = {}
    frame_kw = frame_value(rng)
    try:
        kw["frame"] = tf.FrameSettings(**frame_kw) if rng.random() < 0.7 else pick(rng, ["image", 3, {}, None])
    except ValueError:
        kw["frame"] = None
    if rng.random() < 0.5:
        grains = pick(rng, [None, 1, "A", -1, 2.5])
        obs = [tf.ObservedFamily(o.angle_deg, grain=grains) if isinstance(o, tf.ObservedFamily) else o for o in obs]
        kw["orientations"] = pick(rng, [{grains: orientation_value(rng)}, {}, {1: [1, 2, 3], 2: "x"}, [1, 2, 3],
                                        {grains: np.eye(3)}, {grains: None}])
    else:
        kw["orientation"] = orientation_value(rng)
    if rng.random() < 0.3:
        kw["crss"] = pick(rng, [{"{111}<110>": 10.0}, {"{111}<110>": -1.0}, {"{111}<110>": NAN}, {"x": 1}, [1], "10"])
        kw["load"] = pick(rng, ["y", None, [0, 1, 0]])
    if rng.random() < 0.2:
        kw["families"] = pick(rng, [["{111}"], "{111}", [], None, [3], ["{10-12}"]])
    return Case("identify", f"tf.identify({obs!r}, {lat!r}, **{kw!r})", lambda: tf.identify(obs, lat, **kw))


def gen_search(rng):
    import tracefit as tf

    lat = some_lattice(rng)
    obs = observed_list(rng)
    kw: dict[str, Any] = {"n_samples": pick(rng, [200, 0, -1, 1, 2.5, "x", 50]), "n_seeds": pick(rng, [4, 0, 1, -3])}
    if rng.random() < 0.3:
        kw["known_direction"] = pick(rng, [[1, 1, 0], [0, 0, 0], "110", [1, 2], None])
        kw["known_axis"] = pick(rng, [[0, 0, 1], [0, 0, 0], [NAN, 0, 1], "z", None])
    if rng.random() < 0.2:
        kw["direction_tol_deg"] = number(rng, 0, 10, hostile=0.6)
    if rng.random() < 0.2:
        kw["max_solutions"] = pick(rng, [0, 1, -1, 8, 10**9])

    def call():
        return tf.search_orientations(obs, lat, tf.catalogue(lat), **kw)

    return Case("search_orientations", f"tf.search_orientations({obs!r}, {lat!r}, tf.catalogue(lat), **{kw!r})", call)


def gen_detect_edges(rng, nrng):
    """detect_bands just above the size limit, with masks, labels and grains of odd kinds."""
    import tracefit as tf

    h, w = pick(rng, [(16, 16), (16, 300), (300, 16), (17, 19), (24, 24), (40, 33)])
    img = lined_image(nrng, h, w)
    roll = rng.random()
    if roll < 0.2:
        img = np.dstack([img] * pick(rng, [2, 3, 4]))
    elif roll < 0.4:
        img = img.astype(pick(rng, ["uint16", "float32", "bool", "int64", "float16"]))
    elif roll < 0.5:
        img = img.astype(float)
        img[: h // 2] = pick(rng, [NAN, INF, -INF])
    kw: dict[str, Any] = {}
    if rng.random() < 0.3:
        kw["mask"] = pick(rng, [np.ones((h, w), bool), np.zeros((h, w), bool), np.ones((h, w), np.uint8) * 255,
                                np.ones((w, h), bool), np.eye(h, w, dtype=bool)])
    if rng.random() < 0.3:
        lab = np.ones((h, w), np.int32)
        lab[:, w // 2:] = 2
        kw["labels"] = pick(rng, [lab, lab.astype(float), lab[:-1], -lab, np.zeros((h, w), np.int32)])
        kw["grain"] = pick(rng, [1, 2, 3, 0, -1, "1", None, 1.5])
    if rng.random() < 0.2:
        name, make = pick(rng, DETECT_OPTIONS)
        kw[name] = make(rng)
    return Case("detect_bands", f"tf.detect_bands({_r(img)}, **{ {k: _r(v) for k, v in kw.items()} })",
                lambda: tf.detect_bands(img, **kw))


# Relative weights: cheap geometry calls dominate, image calls are few (they cost milliseconds).
LIBRARY_GENERATORS: list[tuple[str, float, bool]] = [
    ("lattice", 10, False), ("orientation", 10, False), ("load", 8, False), ("catalogue", 10, False),
    ("parse_index", 14, False), ("predict", 8, False), ("identify", 20, False), ("two_traces", 8, False),
    ("check_options", 8, False), ("observed", 5, False), ("frame", 4, False), ("format_index", 4, False),
    ("identify_more", 10, False), ("search", 0.5, False), ("detect_edges", 1.5, True), ("detect", 3, True), ("analyse", 1.2, True),
]
_GEN = {"lattice": gen_lattice, "orientation": gen_orientation, "load": gen_load, "catalogue": gen_catalogue,
        "parse_index": gen_parse_index, "predict": gen_predict, "identify": gen_identify,
        "two_traces": gen_two_traces, "check_options": gen_check_options, "observed": gen_observed,
        "frame": gen_frame, "format_index": gen_format_index, "identify_more": gen_identify_more, "search": gen_search,
        "detect_edges": gen_detect_edges, "detect": gen_detect,
        "analyse": gen_analyse}


def _bad_probability(value: Any) -> bool:
    return value is None or not isinstance(value, (int, float, np.floating)) or not math.isfinite(float(value))


def check_result(result: Any) -> str | None:
    """A reason the result breaks the rules (NaN/None probability), or None."""
    families = getattr(result, "families", None)
    if families is None:
        ident = getattr(result, "identification", None)
        families = getattr(ident, "families", None)
    for fam in families or ():
        if _bad_probability(getattr(fam, "p_none", 0.0)):
            return f"p_none={getattr(fam, 'p_none', None)!r}"
        for cand in getattr(fam, "candidates", ()) or ():
            if _bad_probability(cand.probability):
                return f"candidate probability={cand.probability!r}"
    return None


def run_library(n: int, seed: int, tally: Tally | None = None, max_reproducers: int = 5) -> Tally:
    """Run ``n`` library calls of the weighted generators; collect failures."""
    from tracefit.errors import TracefitInputError

    tally = tally or Tally()
    rng = random.Random(seed)
    nrng = np.random.default_rng(seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        _library_loop(n, rng, nrng, tally)
    return tally


def _library_loop(n: int, rng: random.Random, nrng: np.random.Generator, tally: Tally) -> None:
    from tracefit.errors import TracefitInputError

    names = [g[0] for g in LIBRARY_GENERATORS]
    weights = [g[1] for g in LIBRARY_GENERATORS]
    needs_nrng = {g[0]: g[2] for g in LIBRARY_GENERATORS}
    for _ in range(n):
        name = rng.choices(names, weights)[0]
        try:
            case = _GEN[name](rng, nrng) if needs_nrng[name] else _GEN[name](rng)
        except Exception as exc:  # a generator building an input object hit a library error
            case = Case(name, f"<input construction for {name}>", lambda exc=exc: (_ for _ in ()).throw(exc))
        tally.calls += 1
        try:
            result = case.call()
        except TracefitInputError:
            continue
        except Exception as exc:  # the finding: any other exception type
            tally.failures.append(Failure(f"{case.target}: {type(exc).__name__}", case.repro,
                                          str(exc).splitlines()[0][:160] if str(exc) else ""))
            continue
        reason = check_result(result)
        if reason:
            tally.failures.append(Failure(f"{case.target}: NaN/None probability", case.repro, reason))


# ---------------------------------------------------------------- command-line fuzz

def make_files(folder: Path) -> dict[str, Path]:
    """Tiny good and broken input files for the command line."""
    import cv2

    nrng = np.random.default_rng(0)
    f: dict[str, Path] = {}
    img = lined_image(nrng, 64, 64)
    f["png"] = folder / "good.png"
    cv2.imwrite(str(f["png"]), img)
    f["rgba"] = folder / "rgba.png"
    cv2.imwrite(str(f["rgba"]), np.dstack([img, img, img, np.full_like(img, 255)]))
    f["tif16"] = folder / "deep.tif"
    cv2.imwrite(str(f["tif16"]), img.astype(np.uint16) * 200)
    f["tiny"] = folder / "tiny.png"
    cv2.imwrite(str(f["tiny"]), np.zeros((1, 1), np.uint8))
    f["strip"] = folder / "strip.png"
    cv2.imwrite(str(f["strip"]), np.zeros((1, 200), np.uint8))
    f["mask_bad"] = folder / "mask_small.png"
    cv2.imwrite(str(f["mask_bad"]), np.full((10, 10), 255, np.uint8))
    f["mask"] = folder / "mask.png"
    cv2.imwrite(str(f["mask"]), np.full((64, 64), 255, np.uint8))
    labels = np.ones((64, 64), np.uint16)
    labels[:, 32:] = 2
    f["labels"] = folder / "labels.png"
    cv2.imwrite(str(f["labels"]), labels)
    f["labels_bad"] = folder / "labels_small.png"
    cv2.imwrite(str(f["labels_bad"]), np.ones((5, 7), np.uint16))
    f["grains_csv"] = folder / "grains.csv"
    f["grains_csv"].write_text("grain,phi1,Phi,phi2\n1,10,20,30\n2,200,40,100\n")
    f["grains_csv_bad"] = folder / "grains_bad.csv"
    f["grains_csv_bad"].write_text("grain,phi1,Phi,phi2\n1,ten,20,30\n2,nan,inf,\n")
    png_bytes = f["png"].read_bytes()
    f["truncated"] = folder / "truncated.png"
    f["truncated"].write_bytes(png_bytes[: len(png_bytes) // 2])
    f["corrupt"] = folder / "corrupt.png"
    f["corrupt"].write_bytes(png_bytes[:40] + bytes(200) + png_bytes[240:])
    f["text_png"] = folder / "text.png"
    f["text_png"].write_text("not a picture\n")
    f["empty"] = folder / "empty.tif"
    f["empty"].write_bytes(b"")
    f["bad_tif"] = folder / "bad.tif"
    f["bad_tif"].write_bytes(b"II*\x00" + bytes(60))
    f["dir_png"] = folder / "folder.png"
    f["dir_png"].mkdir()
    f["broken_link"] = folder / "link.png"
    f["broken_link"].symlink_to(folder / "nowhere.png")
    f["missing"] = folder / "missing.png"
    f["measured"] = folder / "measured.csv"
    f["measured"].write_text("angle_deg\n12\n71\n")
    f["measured_bad"] = folder / "measured_bad.csv"
    f["measured_bad"].write_text("angle_deg\nabc\n\n1e400\n")
    f["points"] = folder / "points.csv"
    f["points"].write_text("image_x,image_y,map_x,map_y\n1,1,1,1\n2,2,2,2\n")
    job_head = 'format = 1\n[[image]]\nname = "a"\nfile = "good.png"\nlattice = "fcc"\neuler_deg = [10.0, 20.0, 30.0]\n'
    f["job"] = folder / "job.toml"
    f["job"].write_text(job_head)
    f["job_bad"] = folder / "job_bad.toml"
    f["job_bad"].write_text(
        job_head + 'detect = { min_bands = "three" }\nmatch = { p_none = 2.0 }\n')
    # Option tables of the job file with one bad value each (issue 16, item 3): refused as a job-file error.
    for i, table in enumerate(['detect = { min_bands = 0 }', 'detect = { working_size = 0 }', 'detect = { scales = [] }',
                               'detect = { max_families = 0 }', 'detect = { min_bands = -5 }', 'match = { p_none = 2.0 }',
                               'match = { p_none = "x" }', 'detect = { bogus = 1 }', 'detect = { min_depth = nan }']):
        f[f"job_table{i}"] = folder / f"job_table{i}.toml"
        f[f"job_table{i}"].write_text(job_head + table + "\n")
    f["job_garbage"] = folder / "job_garbage.toml"
    f["job_garbage"].write_text("this is = = not toml [[[\n")
    f["job_missing_img"] = folder / "job_missing.toml"
    f["job_missing_img"].write_text('format = 1\n[[image]]\nname = "a"\nfile = "nope.png"\nlattice = "fcc"\n')
    f["systems_bad"] = folder / "systems.toml"
    f["systems_bad"].write_text('[lattice]\na = "x"\n')
    f["existing_file"] = folder / "existing.png"
    f["existing_file"].write_bytes(png_bytes)
    f["ang"] = folder / "scan.ang"
    f["ang"].write_text("# not a real scan\n1 2 3\n")
    return f


def _euler(rng) -> str:
    return pick(rng, ["35,20,60", "0,0,0", "10,20", "a,b,c", "nan,0,0", "inf,1,2", "1e400,0,0", "", "10,20,30,40",
                      "263,50,135", "-10,-20,-30"])


def _bad_value(rng) -> str:
    return pick(rng, ["", "nan", "inf", "-inf", "-1", "0", "1e400", "abc", "1,2", "3.5", "-0", "9" * 40, " ", "\x01"])


def cli_cases(rng: random.Random, files: dict[str, Path], out: Path) -> list[tuple[list[str], str]]:
    """A pool of argument lists with what they should give: "good", "bad" or "any" (no traceback)."""
    F = {k: str(v) for k, v in files.items()}
    img_any = lambda: F[pick(rng, ["png", "rgba", "tif16", "tiny", "strip", "truncated", "corrupt", "text_png",  # noqa: E731
                                   "empty", "bad_tif", "dir_png", "broken_link", "missing"])]
    bad_img = lambda: F[pick(rng, ["truncated", "corrupt", "text_png", "empty", "bad_tif", "dir_png",  # noqa: E731
                                   "broken_link", "missing"])]
    j = ["--json"] if rng.random() < 0.5 else []
    o = str(out / f"o{rng.randrange(10**6)}")
    cases: list[tuple[list[str], str]] = [
        # predict / systems: cheap and geometry-only
        (["predict", "-l", "fcc", "-e", "35,20,60", *j], "good"),
        (["predict", "-l", "hcp", "-e", "10,20,30", "--c-over-a", "1.587", *j], "good"),
        (["predict", "-l", pick(rng, ["fcc", "bcc", "hcp", "xyz", ""]), "-e", _euler(rng), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--c-over-a", _bad_value(rng), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--tilt", _bad_value(rng), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--near-surface", _bad_value(rng), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--frame-rotation", _bad_value(rng), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--load", pick(rng, ["y", "[110]", "0,0,0", "q", "1,nan,0"]), *j], "any"),
        (["predict", "-l", "fcc", "-e", "35,20,60", "--stress", pick(rng, ["100,0,0,0,0,0", "1,2", "nan,0,0,0,0,0", "x"]), *j], "any"),
        (["predict", "-l", "fcc", "--quaternion", pick(rng, ["1,0,0,0", "0,0,0,0", "1,0,0", "nan,0,0,1"]), *j], "any"),
        (["predict", "-l", "fcc", "--matrix", pick(rng, ["1,0,0,0,1,0,0,0,1", "0,0,0,0,0,0,0,0,0", "1,2,3"]), *j], "any"),
        (["predict", "-l", "fcc", "--families", pick(rng, ["{111}", "{999999999999999999999 1 1}", "(((", "{0001}"]), "-e", "1,2,3", *j], "any"),
        (["predict", "-l", "fcc", "-e", "1,2,3", "--overlay", img_any(), "--out", o + pick(rng, [".png", ".xyz", ".tif", ""]), *j], "any"),
        (["predict", "-l", "fcc", "-e", "1,2,3", "--canvas", pick(rng, ["64x64", "0x0", "axb", "100000x100000", "-5x5", "64"]), "--out", o + ".png"], "any"),
        (["predict", "-l", "fcc", "-e", "1,2,3", "--out", str(files["dir_png"]) + "/sub/none/x.png", "--canvas", "32x32"], "bad"),
        (["systems", "-l", pick(rng, ["fcc", "bcc", "hcp"]), *j], "good"),
        (["systems", "-l", "fcc", "--load", pick(rng, ["[110]", "[000]", "[1 1]", "y", "nonsense"]), *j], "any"),
        (["systems", "-l", "fcc", "--systems-file", pick(rng, [F["systems_bad"], F["missing"], F["text_png"], F["dir_png"]])], "bad"),
        (["systems", "-l", "hcp", "--hex-setting", pick(rng, ["x_a1", "bogus", ""]), *j], "any"),
        # identify
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "12", "--angle", "71", *j], "good"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "12", "--angle", "71", "--p-none", pick(rng, ["0", "0.999999", "0.5"]), *j], "good"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "12", "--p-none", _bad_value(rng), *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", _bad_value(rng), *j], "any"),
        (["identify", "-l", "fcc", "-e", _euler(rng), "--angle", "30", *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "30", "--orientation-sigma", _bad_value(rng), *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "30", "--schmid-weight", _bad_value(rng), "--load", "y", *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--crack", pick(rng, ["30", "x", "nan"]), *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--measured", pick(rng, [F["measured"], F["measured_bad"], F["missing"], F["dir_png"], F["png"]]), *j], "any"),
        (["identify", "-l", "fcc", "-e", "35,20,60", "--angle", "30", "--prior", pick(rng, ["{111}<110>=2", "x=y", "{111}<110>=-1", "=", "{111}<110>=nan"]), *j], "any"),
        (["identify", "-l", "fcc", "--angle", "30", *j], "any"),
        (["identify", img_any(), "-l", "fcc", "-e", "35,20,60", *j], "any"),
        (["identify", bad_img(), "-l", "fcc", "-e", "35,20,60", *j], "bad"),
        (["identify", F["png"], "-l", "fcc", "-e", "35,20,60", "--grains", pick(rng, [F["labels"], F["labels_bad"], F["text_png"], F["missing"]]),
          "--orientations", pick(rng, [F["grains_csv"], F["grains_csv_bad"], F["missing"], F["png"]]), *j], "any"),
        (["identify", F["png"], "-l", "fcc", "-e", "35,20,60", "--overlay", o + pick(rng, [".png", ".xyz", ".jpg", ""]), *j], "any"),
        (["identify", F["png"], "-l", "fcc", "-e", "35,20,60", "--overlay", F["dir_png"], *j], "bad"),
        (["identify", F["png"], "-l", "fcc", "--orientation-map", pick(rng, [F["ang"], F["missing"], F["png"]]), *j], "any"),
        (["identify", F["png"], "-l", "fcc", "--orientation-map", F["ang"], "--control-points", pick(rng, [F["points"], F["missing"], F["text_png"]]), *j], "any"),
        # detect
        (["detect", F["png"], *j], "good"),
        (["detect", img_any(), *j], "any"),
        (["detect", bad_img(), *j], "bad"),
        (["detect", F["png"], "--mask", pick(rng, [F["mask_bad"], F["text_png"], F["missing"], F["mask"]]), *j], "any"),
        (["detect", F["png"], "--mask", F["mask_bad"], *j], "bad"),
        (["detect", F["png"], "--overlay", o + pick(rng, [".png", ".xyz", ".tif", "", ".jpg", ".PNG"]), *j], "any"),
        (["detect", F["png"], "--overlay", str(out / "nofolder" / "deeper" / "x.png"), *j], "any"),
        (["detect", F["png"], "--overlay", F["dir_png"], *j], "bad"),
        (["detect", F["png"], pick(rng, ["--min-bands", "--max-families", "--working-size"]), _bad_value(rng), *j], "any"),
        (["detect", F["png"], pick(rng, ["--min-depth", "--min-coverage", "--pixel-size"]), _bad_value(rng), *j], "any"),
        (["detect", F["png"], "--scales", pick(rng, ["", "1,2", "0", "-1", "nan", "a,b", ",", "1e400"]), *j], "any"),
        (["detect", F["png"], "--working-size", pick(rng, ["0", "1", "-3"]), *j], "bad"),
        # other commands
        (["find-orientation", "--angle", "12", "--angle", "71", "--angle", "130", "-l", "fcc", "--samples", "200", *j], "good"),
        (["find-orientation", "--angle", _bad_value(rng), "-l", "fcc", "--samples", "50", *j], "any"),
        (["find-orientation", "--angle", "12", "-l", "fcc", "--samples", pick(rng, ["0", "-1", "abc", "1"]), *j], "any"),
        (["find-orientation", "--angle", "12", "--angle", "40", "-l", "fcc", "--sigma", _bad_value(rng), "--samples", "50", *j], "any"),
        (["two-face", "--pair", "30:60", "--edge-angle", "0", "--dihedral", "90", *j], "good"),
        (["two-face", "--pair", pick(rng, ["30:60", "inf:10", "nan:1", "30", "a:b", "1e400:2", "", "30,60", "90:90"]), "--edge-angle", _bad_value(rng),
          "--dihedral", pick(rng, ["90", "0", "180", "-5", "nan", "inf"]), *j], "any"),
        (["two-face", "--pair", "30:60", "--sigma", _bad_value(rng), "-l", "fcc", "-e", "1,2,3", *j], "any"),
        (["align-frame", F["png"], "--grains", pick(rng, [F["labels"], F["labels_bad"], F["missing"]]),
          "--orientations", pick(rng, [F["grains_csv"], F["grains_csv_bad"], F["missing"]]), "-l", "fcc", *j], "any"),
        (["map-grains", pick(rng, [F["ang"], F["missing"], F["png"], F["text_png"], F["dir_png"]]), *j], "any"),
        (["survey", F["job"], "--out", o, "-w", "1", "-q", *j], "good"),
        (["survey", pick(rng, [F["job_bad"], F["job_garbage"], F["missing"], F["png"], F["dir_png"]]), "--out", o, "-w", "1", "-q", *j], "bad"),
        (["survey", F[f"job_table{rng.randrange(9)}"], "--out", o, "-w", "1", "-q", *j], "bad"),
        (["survey", F["job_missing_img"], "--out", o, "-w", "1", "-q", *j], "any"),
        (["survey", F["job"], "--out", F["existing_file"], "-w", "1", "-q", *j], "bad"),
        (["survey", F["job"], "--out", o, "-w", pick(rng, ["0", "-1", "abc", "1e9"]), "-q", *j], "any"),
        # plain usage errors
        ([pick(rng, ["predict", "identify", "detect", "systems", "survey", "two-face", "nonsense"]),
          pick(rng, ["--bogus", "--json=3", "-z", "--lattice", "--euler"])], "bad"),
        (["predict", "-l", "fcc", "-e"], "bad"),
        (["--version"], "good"),
        ([], "any"),
        (["identify", "--help"], "good"),
    ]
    return cases


@contextlib.contextmanager
def captured_fd2():
    """Capture everything written to file descriptor 2 (native libraries write there directly)."""
    sys.stderr.flush()
    saved = os.dup(2)
    with tempfile.TemporaryFile(mode="w+b") as tmp:
        os.dup2(tmp.fileno(), 2)
        box: dict[str, str] = {}
        try:
            yield box
        finally:
            sys.stderr.flush()
            os.dup2(saved, 2)
            os.close(saved)
            tmp.seek(0)
            box["text"] = tmp.read().decode("utf-8", "replace")


def run_cli_call(argv: list[str]) -> tuple[int | None, str, str, str | None]:
    """Run ``tracefit.cli.main(argv)`` in-process: (code, stdout, stderr, exception type or None)."""
    from tracefit.cli import main

    out, err = io.StringIO(), io.StringIO()
    exc_name = None
    code = None
    with captured_fd2() as fd2, contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
        try:
            code = main(list(argv))
        except SystemExit as exc:  # main must return, not exit
            exc_name = f"SystemExit({exc.code})"
        except BaseException as exc:  # noqa: BLE001 - the finding
            if isinstance(exc, KeyboardInterrupt):
                raise
            exc_name = f"{type(exc).__name__}: {str(exc).splitlines()[0][:120] if str(exc) else ''}"
    return code, out.getvalue(), err.getvalue() + fd2.get("text", ""), exc_name


# Messages of other libraries (and Python warnings) that reach stderr beside tracefit's own lines.
NATIVE_NOISE = re.compile(r"libpng|OpenCV|cv2\.|\[ WARN|<tifffile|tifffile\.|Warning:|warnings\.warn|Traceback|"
                          r"imread_|RuntimeWarning|DeprecationWarning|UserWarning")


def judge_cli(argv: list[str], expect: str, code, stderr: str, exc_name) -> tuple[str, str] | None:
    """(kind, detail) of a broken rule, or None."""
    cmd = argv[0] if argv else "(none)"
    if exc_name:
        return f"cli {cmd}: traceback", exc_name
    lines = [ln for ln in stderr.splitlines() if ln.strip()]
    if code == 2:
        if len(lines) != 1 or not lines[0].startswith("tracefit: error:"):
            return f"cli {cmd}: stderr not one error line", " | ".join(lines)[:300]
        if expect == "good":
            return f"cli {cmd}: good input refused", lines[0][:200]
        return None
    if expect == "bad":
        return f"cli {cmd}: bad input exit {code}", " | ".join(lines)[:200]
    if expect == "good" and code != 0:
        return f"cli {cmd}: good input exit {code}", " | ".join(lines)[:200]
    if code not in (0, 1, 2):
        return f"cli {cmd}: exit {code}", " | ".join(lines)[:200]
    noise = [ln for ln in lines if NATIVE_NOISE.search(ln)]
    if noise:
        return f"cli {cmd}: native noise", " | ".join(noise)[:300]
    return None


def run_cli(n: int, seed: int, tally: Tally | None = None) -> Tally:
    """Run ``n`` command lines drawn from :func:`cli_cases`; collect failures."""
    import shlex

    tally = tally or Tally()
    rng = random.Random(seed + 7919)
    with tempfile.TemporaryDirectory(prefix="tracefit-fuzz-") as tmp:
        folder = Path(tmp)
        files = make_files(folder)
        out = folder / "out"
        out.mkdir()
        for _ in range(n):
            argv, expect = pick(rng, cli_cases(rng, files, out))
            code, _stdout, stderr, exc_name = run_cli_call(argv)
            tally.calls += 1
            broken = judge_cli(argv, expect, code, stderr, exc_name)
            if broken:
                kind, detail = broken
                repro = "tracefit " + " ".join(shlex.quote(a.replace(tmp, "$TMP")) for a in argv)
                tally.failures.append(Failure(kind, repro, detail.replace(tmp, "$TMP")))
    return tally


# Native messages printed while tracefit/image/io.py decodes a damaged picture (tifffile's logger,
# OpenCV's PNG decoder); silencing them belongs in that module (issue 16, item 5).
IMAGE_IO_NOISE = re.compile(r"<tifffile\.TiffFile|\[ WARN:[^]]*\] global grfmt_|libpng")


def is_image_io_noise(failure: Failure) -> bool:
    """The failure is only native noise from reading a damaged picture (tracefit/image/io.py)."""
    return failure.kind.endswith(("stderr not one error line", "native noise")) and bool(IMAGE_IO_NOISE.search(failure.detail))


def summary(title: str, tally: Tally, n_repro: int = 3) -> str:
    io_noise = sum(is_image_io_noise(f) for f in tally.failures)
    lines = [f"{title}: {tally.calls} calls, {len(tally.failures)} failures"
             + (f" ({io_noise} of them native noise while reading a damaged picture)" if io_noise else "")]
    for kind, count in tally.kinds().most_common():
        lines.append(f"  {count:6d}  {kind}")
        shown = [f for f in tally.failures if f.kind == kind][:n_repro]
        for f in shown:
            lines.append(f"            {f.repro[:300]}")
            if f.detail:
                lines.append(f"              -> {f.detail[:200]}")
    return "\n".join(lines)


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n-library", type=int, default=10000)
    parser.add_argument("--n-cli", type=int, default=400)
    parser.add_argument("--seed", type=int, default=1)
    parser.add_argument("--reproducers", type=int, default=3, help="reproducers shown per kind")
    args = parser.parse_args(argv)
    os.environ.setdefault("OMP_NUM_THREADS", "1")
    t0 = time.perf_counter()
    lib = run_library(args.n_library, args.seed)
    t1 = time.perf_counter()
    print(summary(f"library (seed {args.seed})", lib, args.reproducers))
    print(f"  {t1 - t0:.1f} s")
    cli = run_cli(args.n_cli, args.seed)
    t2 = time.perf_counter()
    print(summary(f"command line (seed {args.seed})", cli, args.reproducers))
    print(f"  {t2 - t1:.1f} s")
    return 0


if __name__ == "__main__":
    sys.exit(main())
