"""Survey job files: one TOML file that lists many images and how to analyse each.

The format is tracefit's own (documented with a full example in ``docs/job-file.md``)::

    title = "Bracket coupon study"

    [defaults]                 # every [[image]] inherits these unless it says otherwise
    lattice = "fcc"            # fcc, bcc, hcp, tetragonal
    modes = ["slip"]           # slip, twin
    load = { axis = "y", sense = "tension" }   # or just load = "y"
    pixel_size_um = 0.5
    frame = { rotation_deg = 0.0 }

    [[image]]
    name = "coupon-A"
    file = "coupon_A.png"      # relative to the job file
    euler_deg = [10.0, 20.0, 30.0]

    [[image]]
    name = "coupon-B"
    file = "coupon_B.png"
    labels = "coupon_B_labels.png"         # grain label image ...
    orientations = "coupon_B_grains.csv"   # ... plus orientation table

Python's ``tomllib`` gives no source positions, so this module finds the line of every key
itself (:func:`key_lines`); every validation message names the field and its line.
"""

from __future__ import annotations

import re
import tomllib
from dataclasses import asdict, dataclass, field
from pathlib import Path
from typing import Any

from tracefit.errors import TracefitInputError
from tracefit.options import DEFAULT_MODES, MODES
from tracefit.survey.keylines import _Ctx, _file, _load_field, _number, _str_list, _string, _table, _unknown, key_lines
from tracefit.survey.scheduler import run_table

__all__ = ["Job", "ImageJob", "load_job", "parse_job", "key_lines", "JOB_FORMAT"]

JOB_FORMAT = 1

LATTICES = ("fcc", "bcc", "hcp", "tetragonal")

# Keys an image may set itself or inherit from [defaults].
_SHARED_KEYS = {
    "lattice": "a lattice name: one of " + ", ".join(LATTICES),
    "c_over_a": "a positive number (hcp or tetragonal only)",
    "modes": "a list drawn from " + ", ".join(f'"{m}"' for m in MODES),
    "families": 'a list of family strings such as "{111}<1-10>"',
    "load": 'the load axis: "x", "0,1,0" or a crystal direction "[001]"; or a table { axis = "y", sense = "compression", '
            'frame = "image" } or { stress = [s11, s22, s33, s23, s13, s12], frame = "image" } (MPa)',
    "pixel_size_um": "a positive number of micrometres per pixel",
    "frame": "a table of frame settings (rotation_deg, ...)",
    "detect": "a table of band-detection settings (docs/job-file.md lists them)",
    "match": "a table of identification settings (docs/job-file.md lists them)",
    "mask": "a mask image file name",
}
_IMAGE_ONLY_KEYS = {
    "name": "a short unique name (letters, digits, '-', '_', '.')",
    "file": "the image file name, relative to the job file",
    "euler_deg": "three Bunge Euler angles [phi1, Phi, phi2] in degrees",
    "labels": "a grain label image file name",
    "orientations": "an orientation table CSV file name",
    "orientation_map": "an orientation map file (.ang, .ctf or orix HDF5) registered onto the image",
    "control_points": "a CSV of control points image_x, image_y, map_x, map_y for orientation_map",
    "phase": "the orientation map's phase, by name or id",
    "grain_threshold_deg": "grain boundary misorientation in the orientation map, degrees (default 5)",
    "min_grain_points": "smallest grain of the orientation map, in map points",
    "registration": '"affine" (default) or "projective", the map-to-image transform',
    "notes": "free text",
}
_MAP_KEYS = ("orientation_map", "control_points", "phase", "grain_threshold_deg", "min_grain_points", "registration")
_TOP_KEYS = {
    "format": f"the job format number ({JOB_FORMAT})",
    "title": "a title for the report",
    "notes": "free text for the report",
    "defaults": "a table of settings every image inherits",
    "image": "one [[image]] table per image",
    "series": "one [[series]] table per in-situ series of frames (docs/job-file.md)",
    "run": 'where the survey runs: [run] scheduler = "tcp://HOST:PORT" or "local:N" (docs/scaling.md)',
}

_NAME_RE = re.compile(r"^[A-Za-z0-9][A-Za-z0-9_.\-]*$")


@dataclass(frozen=True)
class ImageJob:
    """One image of a survey, with every setting resolved (defaults applied).

    Paths are absolute. Exactly one orientation source is set: ``euler_deg`` (one
    orientation for the whole image) or ``labels`` plus ``orientations`` (per grain).

    Attributes
    ----------
    name : str
        Unique short name (output files are called after it).
    file : Path
        The micrograph.
    lattice : str
        Lattice preset name (``"fcc"``, ``"bcc"``, ``"hcp"``, ``"tetragonal"``).
    c_over_a : float or None
        Axial ratio c/a (hcp, tetragonal).
    modes : tuple of str
        ``"slip"`` and/or ``"twin"``.
    families : tuple of str or None
        Only these families, e.g. ``("{111}<1-10>",)``.
    load, load_sense : str or None, str
        Load axis as written (``"y"``, ``"[001]"``) and ``"tension"`` or ``"compression"``.
    pixel_size_um : float or None
        Micrometres per pixel.
    frame, detect, match : dict
        Frame settings, detection settings and identification/analysis settings
        (:mod:`tracefit.options`).
    mask : Path or None
        Mask image of the pixels to analyse.
    euler_deg : tuple of 3 float or None
        Bunge Euler angles (phi1, Phi, phi2) in degrees.
    labels, orientations : Path or None
        Grain label image and its orientation table.
    notes : str
        Free text.
    line : int
        Line of this image's ``[[image]]`` header in the job file (1-based).
    series : dict or None
        For a frame of an in-situ series: ``name``, ``frame``, ``strain``, ... (:mod:`tracefit.survey.series`).

    Examples
    --------
    One gets them from :func:`parse_job` or :func:`load_job`, with ``[defaults]`` applied:

    >>> job = parse_job('''
    ... [defaults]
    ... lattice = "bcc"
    ... [[image]]
    ... name = "coupon-B"
    ... file = "coupon_B.png"
    ... euler_deg = [0, 45, 0]
    ... ''')
    >>> im = job.images[0]
    >>> im.name, im.lattice, im.euler_deg, im.line
    ('coupon-B', 'bcc', (0.0, 45.0, 0.0), 4)
    """

    name: str
    file: Path
    lattice: str
    c_over_a: float | None = None
    modes: tuple[str, ...] = DEFAULT_MODES
    families: tuple[str, ...] | None = None
    load: str | None = None
    load_sense: str = "tension"
    load_frame: str = "image"
    load_stress: tuple[float, ...] | None = None
    pixel_size_um: float | None = None
    frame: dict = field(default_factory=dict)
    detect: dict = field(default_factory=dict)
    match: dict = field(default_factory=dict)
    mask: Path | None = None
    euler_deg: tuple[float, float, float] | None = None
    labels: Path | None = None
    orientations: Path | None = None
    orientation_map: Path | None = None
    control_points: Path | None = None
    map_settings: dict = field(default_factory=dict)
    notes: str = ""
    line: int = 0  # line of this image's [[image]] header in the job file
    series: dict | None = None  # a frame of an in-situ series: name, frame, strain, ... (survey/series.py)

    def settings(self) -> dict:
        """The analysis settings as plain JSON-ready values (for reports and resume checks).

        Returns
        -------
        dict
            Every field but ``line``; paths as str, tuples as lists.
        """
        d = asdict(self)
        for k in ("file", "mask", "labels", "orientations", "orientation_map", "control_points"):
            d[k] = None if d[k] is None else str(d[k])
        d["modes"] = list(self.modes)
        d["families"] = None if self.families is None else list(self.families)
        d["euler_deg"] = None if self.euler_deg is None else list(self.euler_deg)
        d.pop("line")
        return d


@dataclass(frozen=True)
class Job:
    """A parsed, validated survey job.

    Attributes
    ----------
    path : Path
        The job file (absolute); image paths in it are relative to its folder.
    title : str
        Title for the report (the file's stem when the job has none).
    images : tuple of ImageJob
        The images in job order, each with every setting resolved.
    notes : str
        Free text for the report.
    defaults : dict
        The ``[defaults]`` table as checked (plain values).
    text : str
        The job file as written (for the report's audit trail).

    Examples
    --------
    >>> job = parse_job('''
    ... title = "Bracket coupons"
    ... [defaults]
    ... lattice = "fcc"
    ... [[image]]
    ... name = "coupon-A"
    ... file = "coupon_A.png"
    ... euler_deg = [10, 20, 30]
    ... ''')
    >>> job.title, [im.name for im in job.images], job.defaults
    ('Bracket coupons', ['coupon-A'], {'lattice': 'fcc'})
    """

    path: Path
    title: str
    images: tuple[ImageJob, ...]
    notes: str = ""
    defaults: dict = field(default_factory=dict)
    text: str = ""  # the job file as written, kept for the report's audit trail
    scheduler: str | None = None  # [run] scheduler: a Dask scheduler address or "local:N" (survey/scheduler.py)

    def to_dict(self) -> dict:
        """The job as plain JSON-ready values (``results.json``'s ``job``)."""
        return {
            "path": str(self.path),
            "title": self.title,
            "notes": self.notes,
            "defaults": self.defaults,
            "images": [im.settings() for im in self.images],
            "text": self.text,
        }


# --------------------------------------------------------------------------- validation
def _check_shared(ctx: _Ctx, key: tuple, name: str, v: Any, base: Path):
    """Validate one of the keys an image can inherit; return the normalised value."""
    k = key + (name,)
    if name == "lattice":
        s = _string(ctx, k, v).lower()
        if s not in LATTICES:
            raise ctx.fail(k, f"must be one of {', '.join(LATTICES)}, got {v!r}")
        return s
    if name == "c_over_a":
        return _number(ctx, k, v, positive=True)
    if name == "modes":
        modes = tuple(m.lower() for m in _str_list(ctx, k, v))
        bad = [m for m in modes if m not in MODES]
        if bad:
            raise ctx.fail(k, f"has unknown mode {bad[0]!r}; expected {' and/or '.join(MODES)}")
        return modes
    if name == "families":
        return _str_list(ctx, k, v)
    if name == "load":
        return _load_field(ctx, k, v)
    if name == "pixel_size_um":
        return _number(ctx, k, v, positive=True)
    if name in ("frame", "detect", "match"):
        return _table(ctx, k, v)
    if name == "mask":
        return _file(ctx, k, v, base)
    raise AssertionError(name)  # pragma: no cover


def _check_with_geometry(ctx: _Ctx, key_of: dict, im: dict) -> None:
    """Checks that need the geometry modules: lattice + c/a, load string, frame settings.

    Each check runs only if the module is importable, so the job reader never depends on
    work that has not landed; the message still names the field and line.
    """
    import warnings

    from tracefit.crystal import lattice_preset

    try:
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")  # e.g. "ideal c/a assumed": repeated at analysis time
            lattice = lattice_preset(im["lattice"], im.get("c_over_a"))
    except TracefitInputError as exc:
        which = "c_over_a" if im.get("c_over_a") is not None else "lattice"
        raise ctx.fail(key_of[which], f"is not valid: {exc}") from None
    if im.get("load") is not None and im["load"].get("axis") is not None:
        try:
            from tracefit.predict import parse_load
        except ImportError:
            parse_load = None
        if parse_load is not None:
            try:
                parse_load(im["load"]["axis"], lattice, im["load"]["sense"], frame=im["load"]["frame"])
            except TracefitInputError as exc:
                raise ctx.fail(key_of["load"], f"is not valid: {exc}") from None
    if im.get("frame"):
        try:
            from tracefit.conventions import FrameSettings
        except ImportError:
            FrameSettings = None
        if FrameSettings is not None:
            import dataclasses

            names = {f.name for f in dataclasses.fields(FrameSettings)} if dataclasses.is_dataclass(FrameSettings) else None
            for fk in im["frame"]:
                if names is not None and fk not in names:
                    raise _unknown(ctx, key_of["frame"] + (fk,), dict.fromkeys(names))
            try:
                FrameSettings(**im["frame"])
            except TracefitInputError as exc:
                raise ctx.fail(key_of["frame"], f"is not valid: {exc}") from None
            except (TypeError, ValueError) as exc:
                raise ctx.fail(key_of["frame"], f"is not valid: {exc}") from None


def _check_options(ctx: _Ctx, key: tuple, opts: dict, groups) -> dict:
    """A detect/match table checked against the declared settings (:mod:`tracefit.options`)."""
    from tracefit.options import OptionError, check_options

    for k in opts:
        if k in _SHARED_KEYS or k in _IMAGE_ONLY_KEYS:
            raise ctx.fail(key + (k,), f"is an image setting: write it in [defaults] or [[image]], not inside '{key[-1]}'")
    try:
        return check_options(opts, groups)
    except OptionError as exc:
        raise ctx.fail(key + (exc.name,), f"is not valid: {exc}") from None


def _orientation_source(ctx: _Ctx, key: tuple, raw: dict, base: Path):
    """The image's one orientation source: Euler angles, a label image with a table, or an orientation map."""
    sources = [s for s, present in (("euler_deg", "euler_deg" in raw),
                                    ("labels/orientations", "labels" in raw or "orientations" in raw),
                                    ("orientation_map", "orientation_map" in raw)) if present]
    if len(sources) > 1:
        raise ctx.fail(key + (sources[0].split("/")[0],), f"conflicts with {sources[1]}: give one orientation source")
    stray = [k for k in _MAP_KEYS[1:] if k in raw and "orientation_map" not in raw]
    if stray:
        raise ctx.fail(key + (stray[0],), "goes with orientation_map = \"...\"")
    euler = labels = orient = omap = cpts = None
    map_settings: dict = {}
    if not sources:
        raise ctx.fail(key, "has no orientation: give euler_deg = [phi1, Phi, phi2], labels = \"...\" with "
                       "orientations = \"...\", or orientation_map = \"...\"")
    if sources[0] == "euler_deg":
        e = raw["euler_deg"]
        if not isinstance(e, list) or len(e) != 3:
            raise ctx.fail(key + ("euler_deg",), f"must be three angles [phi1, Phi, phi2] in degrees, got {e!r}")
        euler = tuple(_number(ctx, key + ("euler_deg",), x) for x in e)
    elif sources[0] == "labels/orientations":
        for need in ("labels", "orientations"):
            if need not in raw:
                other = "orientations" if need == "labels" else "labels"
                raise ctx.fail(key + (other,), f"needs '{need}' beside it ({_IMAGE_ONLY_KEYS[need]})")
        labels = _file(ctx, key + ("labels",), raw["labels"], base)
        orient = _file(ctx, key + ("orientations",), raw["orientations"], base)
    else:
        omap = _file(ctx, key + ("orientation_map",), raw["orientation_map"], base)
        if "control_points" in raw:
            cpts = _file(ctx, key + ("control_points",), raw["control_points"], base)
        if "phase" in raw:
            ph = raw["phase"]
            if isinstance(ph, bool) or not isinstance(ph, (int, str)):
                raise ctx.fail(key + ("phase",), f"must be a phase name or id, got {ph!r}")
            map_settings["phase"] = ph
        if "grain_threshold_deg" in raw:
            map_settings["threshold_deg"] = _number(ctx, key + ("grain_threshold_deg",), raw["grain_threshold_deg"],
                                                    positive=True)
        if "min_grain_points" in raw:
            v = raw["min_grain_points"]
            if isinstance(v, bool) or not isinstance(v, int) or v < 1:
                raise ctx.fail(key + ("min_grain_points",), f"must be a whole number >= 1, got {v!r}")
            map_settings["min_grain_points"] = v
        if "registration" in raw:
            reg = _string(ctx, key + ("registration",), raw["registration"]).lower()
            if reg not in ("affine", "projective"):
                raise ctx.fail(key + ("registration",), f'must be "affine" or "projective", got {raw["registration"]!r}')
            map_settings["registration"] = reg
    return euler, labels, orient, omap, cpts, map_settings


def _parse_image(ctx: _Ctx, i: int, raw: dict, defaults: dict, base: Path, seen: dict, key=None) -> ImageJob:
    """One [[image]] table (or a series' frame, at ``key``), with the [defaults] applied, as an :class:`ImageJob`."""
    allowed = {**_SHARED_KEYS, **_IMAGE_ONLY_KEYS}
    key = key or ("image", i)
    for k in raw:
        if k not in allowed:
            raise _unknown(ctx, key + (k,), allowed)
    for req in ("name", "file"):
        if req not in raw:
            raise ctx.fail(key + (req,), f"is missing: every [[image]] needs '{req}' ({allowed[req]})")
    name = _string(ctx, key + ("name",), raw["name"])
    if not _NAME_RE.match(name):
        raise ctx.fail(key + ("name",), f"must use letters, digits, '-', '_' or '.', got {name!r}")
    if name in seen:
        raise ctx.fail(key + ("name",), f"repeats the name {name!r} of image {seen[name] + 1}; names must be unique")
    seen[name] = i
    im: dict = dict(defaults)
    key_of = {k: ("defaults", k) for k in defaults}
    for k, v in raw.items():
        if k in _SHARED_KEYS:
            im[k] = _check_shared(ctx, key, k, v, base)
            key_of[k] = key + (k,)
    if "lattice" not in im:
        raise ctx.fail(key + ("lattice",), "is missing: set it in [defaults] or in this [[image]] "
                       f"({_SHARED_KEYS['lattice']})")
    if "modes" not in im:
        im["modes"] = DEFAULT_MODES
    file = _file(ctx, key + ("file",), raw["file"], base)

    euler, labels, orient, omap, cpts, map_settings = _orientation_source(ctx, key, raw, base)
    inote = raw.get("notes", "")
    if not isinstance(inote, str):
        raise ctx.fail(key + ("notes",), "must be a string")
    _check_with_geometry(ctx, {**key_of, "lattice": key_of.get("lattice", key)}, im)
    if im.get("detect"):
        im["detect"] = _check_options(ctx, key_of["detect"], im["detect"], "detect")
    if im.get("match"):
        im["match"] = _check_options(ctx, key_of["match"], im["match"], ("identify", "analysis"))
    return ImageJob(
        name=name,
        file=file,
        lattice=im["lattice"],
        c_over_a=im.get("c_over_a"),
        modes=tuple(im["modes"]),
        families=im.get("families"),
        load=im["load"]["axis"] if im.get("load") else None,
        load_sense=im["load"]["sense"] if im.get("load") else "tension",
        load_frame=im["load"]["frame"] if im.get("load") else "image",
        load_stress=im["load"]["stress"] if im.get("load") else None,
        pixel_size_um=im.get("pixel_size_um"),
        frame=dict(im.get("frame", {})),
        detect=dict(im.get("detect", {})),
        match=dict(im.get("match", {})),
        mask=im.get("mask"),
        euler_deg=euler,
        labels=labels,
        orientations=orient,
        orientation_map=omap,
        control_points=cpts,
        map_settings=map_settings,
        notes=inote,
        line=ctx.line(key) or 0,
    )


def parse_job(text: str, path: str | Path = "job.toml") -> Job:
    """Parse and validate job-file text; ``path`` sets the name in messages and the base for files.

    Parameters
    ----------
    text : str
        The job file's TOML text (format: the module docstring and ``docs/job-file.md``).
    path : str or Path
        Where the text comes from: its name appears in messages, and relative image, label,
        mask and table paths are taken from its folder. Nothing is read from it.

    Returns
    -------
    Job
        The validated job, every image with its settings resolved.

    Raises
    ------
    TracefitInputError
        For a TOML syntax error or any missing, unknown or wrongly typed field; the
        message names the field and its line.

    Examples
    --------
    >>> text = '''
    ... [defaults]
    ... lattice = "fcc"
    ... [[image]]
    ... name = "coupon-A"
    ... file = "coupon_A.png"
    ... euler_deg = [10, 20, 30]
    ... '''
    >>> job = parse_job(text)
    >>> job.title, job.images[0].modes, job.images[0].file.name
    ('job', ('slip', 'twin'), 'coupon_A.png')
    >>> parse_job(text.replace("lattice", "latice"))
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: job.toml, line 3: field 'defaults.latice' is not a known field; did you mean 'lattice'?
    """
    # Over 80 lines: its numpydoc docstring, then one check per top-level key in file order, which
    # reads best as one straight run (each image is parsed by _parse_image).
    path = Path(path)
    base = path.resolve().parent
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise TracefitInputError(f"{path.name}: not valid TOML: {exc}") from None
    ctx = _Ctx(path, key_lines(text))

    for k in data:
        if k not in _TOP_KEYS:
            raise _unknown(ctx, (k,), _TOP_KEYS)
    if "format" in data and data["format"] != JOB_FORMAT:
        raise ctx.fail(("format",), f"must be {JOB_FORMAT} (this tracefit reads job format {JOB_FORMAT}), got {data['format']!r}")
    title = _string(ctx, ("title",), data["title"]) if "title" in data else path.stem
    notes = data.get("notes", "")
    if not isinstance(notes, str):
        raise ctx.fail(("notes",), "must be a string")

    defaults_raw = data.get("defaults", {})
    if not isinstance(defaults_raw, dict):
        raise ctx.fail(("defaults",), "must be a table: write [defaults] on its own line")
    defaults: dict = {}
    for k, v in defaults_raw.items():
        if k not in _SHARED_KEYS:
            if k in _IMAGE_ONLY_KEYS:
                raise ctx.fail(("defaults", k), "belongs in an [[image]] table, not in [defaults]")
            raise _unknown(ctx, ("defaults", k), _SHARED_KEYS)
        defaults[k] = _check_shared(ctx, ("defaults",), k, v, base)

    images_raw = data.get("image", [] if "series" in data else None)
    if images_raw is None:
        raise TracefitInputError(f"{path.name}: the job lists no images; add one [[image]] table per image (with name and file)")
    if not isinstance(images_raw, list) or not all(isinstance(x, dict) for x in images_raw):
        raise ctx.fail(("image",), "must be written as [[image]] tables")
    if not images_raw and "series" not in data:
        raise ctx.fail(("image",), "lists no images")

    scheduler = run_table(ctx, data.get("run"))  # [run]: where the survey runs
    images: list[ImageJob] = []
    seen: dict[str, int] = {}
    for i, raw in enumerate(images_raw):
        images.append(_parse_image(ctx, i, raw, defaults, base, seen))
    if "series" in data:  # in-situ series: each frame is an image (survey/series.py)
        from tracefit.survey.series import parse_series

        images += parse_series(ctx, data["series"], base, lambda k, r: _parse_image(ctx, 0, r, defaults, base, seen, k),
                               len(images))
    jdefaults = {k: (list(v) if isinstance(v, tuple) else str(v) if isinstance(v, Path) else v) for k, v in defaults.items()}
    return Job(path=path.resolve(), title=title, images=tuple(images), notes=notes, defaults=jdefaults, text=text,
               scheduler=scheduler)


def load_job(path: str | Path) -> Job:
    """Read and validate a survey job file.

    Parameters
    ----------
    path : str or Path
        The TOML job file. Image, label, mask and table paths in it are relative to
        the job file's folder.

    Returns
    -------
    Job

    Raises
    ------
    TracefitInputError
        If the file cannot be read, or a field is missing, unknown or of the wrong type
        (the message names the field and its line).

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = (Path(d) / "study.toml").write_text('''
    ... title = "Bracket coupons"
    ... [[image]]
    ... name = "coupon-A"
    ... file = "coupon_A.png"
    ... lattice = "fcc"
    ... euler_deg = [10, 20, 30]
    ... ''')
    ...     job = load_job(Path(d) / "study.toml")
    >>> job.title, job.path.name, job.images[0].euler_deg
    ('Bracket coupons', 'study.toml', (10.0, 20.0, 30.0))
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise TracefitInputError(f"job file {str(p)!r} not found") from None
    except (OSError, UnicodeDecodeError) as exc:
        raise TracefitInputError(f"cannot read job file {str(p)!r}: {exc}") from None
    return parse_job(text, p)
