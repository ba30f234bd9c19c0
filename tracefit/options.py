"""Every tunable setting of the analysis chain, declared once: name, type, range, default, meaning.

The library (:func:`tracefit.analyse_image`), the command line and the job file all read
their defaults from here and validate with :func:`check_options`, so one setting has one
default and one rule everywhere. Settings fall in three groups:

``detect``
    How band families are found (passed to :func:`tracefit.detect_bands`).
``identify``
    How families are matched to candidate planes (the probability model's knobs).
``analysis``
    How the chain is run around those two (which grains are analysed, the checks run).
``image``
    Facts about the picture (pixel size).

Examples
--------
>>> from tracefit.options import check_options, defaults
>>> defaults("identify")["p_none"]
0.05
>>> check_options({"min_bands": 4}, "detect")
{'min_bands': 4}
>>> check_options({"min_bands": 0}, "detect")
Traceback (most recent call last):
...
tracefit.options.OptionError: min_bands must be a whole number >= 1, got 0
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from tracefit.errors import TracefitInputError

__all__ = ["Option", "OptionError", "OPTIONS", "GROUPS", "MODES", "DEFAULT_MODES", "check_options", "defaults", "option"]

MODES = ("slip", "twin")
# One default for every entry point: a practitioner does not know in advance which mode made a band.
DEFAULT_MODES = ("slip", "twin")


class OptionError(TracefitInputError):
    """A setting of the wrong type or out of range; ``name`` is the setting's library name."""

    def __init__(self, name: str, message: str):
        super().__init__(message)
        self.name = name


@dataclass(frozen=True)
class Option:
    """One setting: its library name, kind, default, allowed range and meaning.

    Attributes
    ----------
    name : str
        The library name (keyword argument, job-file key).
    group : str
        ``"image"``, ``"detect"``, ``"identify"`` or ``"analysis"``.
    kind : str
        ``"float"``, ``"int"``, ``"bool"`` or ``"floats"`` (a non-empty list of numbers).
    default : Any
        The one default of every entry point (units as in ``help``).
    help : str
        What the setting means, with its unit.
    low, high : float or None
        Bounds of the value (``low_open``/``high_open``: the bound itself is excluded).
    flag : str or None
        The command-line spelling where the CLI exposes it.
    allow_none : bool
        None is a valid value (e.g. an unknown pixel size).

    Examples
    --------
    Every setting is declared in :data:`OPTIONS`; :func:`option` finds one by name:

    >>> p = option("p_none")
    >>> p.group, p.default, p.check(0.2)
    ('identify', 0.05, 0.2)
    >>> p.check(1.0)
    Traceback (most recent call last):
    ...
    tracefit.options.OptionError: p_none must be a number in [0, 1), got 1.0
    """

    name: str
    group: str
    kind: str
    default: Any
    help: str
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    high_open: bool = False
    flag: str | None = None
    allow_none: bool = False

    def check(self, value: Any, name: str | None = None) -> Any:
        """Return ``value`` normalised to this option's kind, or raise :class:`OptionError`.

        ``name`` replaces the option's name in the message where a function calls the same
        setting otherwise (``detect_grains(min_pixels=...)`` is ``min_grain_px``).

        Parameters
        ----------
        value : Any
            The value given.
        name : str, optional
            The name to use in the message.

        Returns
        -------
        Any
            bool, int, float, tuple of float, or None (where allowed).

        Raises
        ------
        OptionError
            Wrong type or out of range.

        Examples
        --------
        >>> option("scales").check([1, 2.5])
        (1.0, 2.5)
        """
        if name is not None and name != self.name:
            from dataclasses import replace

            return replace(self, name=name).check(value)
        if value is None and self.allow_none:
            return None
        if self.kind == "bool":
            if not isinstance(value, bool):
                try:
                    import numpy as np

                    if isinstance(value, np.bool_):
                        return bool(value)
                except ImportError:  # pragma: no cover
                    pass
                raise OptionError(self.name, f"{self.name} must be true or false, got {value!r}")
            return value
        if self.kind == "floats":
            if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__"):
                raise OptionError(self.name, f"{self.name} must be a list of numbers, got {value!r}")
            vals = [self._number(v) for v in value]
            if not vals:
                raise OptionError(self.name, f"{self.name} must list at least one number")
            return tuple(vals)
        return self._number(value)

    def _number(self, value: Any):
        whole = self.kind == "int"
        what = "a whole number" if whole else "a number"
        ok = isinstance(value, int) if whole else isinstance(value, (int, float))
        if isinstance(value, bool) or not ok:
            try:  # numpy scalars are fine
                import numpy as np

                ok = isinstance(value, np.integer) if whole else isinstance(value, (np.integer, np.floating))
            except ImportError:  # pragma: no cover
                ok = False
            if isinstance(value, bool) or not ok:
                raise OptionError(self.name, f"{self.name} must be {what}{self._range()}, got {value!r}")
        try:
            v = int(value) if whole else float(value)
            finite = math.isfinite(v)  # an int beyond float range overflows here
        except OverflowError:
            raise OptionError(self.name, f"{self.name} must be {what}{self._range()}, got {value!r:.40}") from None
        if not finite or not self._in_range(v):
            raise OptionError(self.name, f"{self.name} must be {what}{self._range()}, got {value!r}")
        return v

    def _in_range(self, v: float) -> bool:
        if self.low is not None and (v <= self.low if self.low_open else v < self.low):
            return False
        if self.high is not None and (v >= self.high if self.high_open else v > self.high):
            return False
        return True

    def _range(self) -> str:
        lo = None if self.low is None else f"{'>' if self.low_open else '>='} {self.low:g}"
        hi = None if self.high is None else f"{'<' if self.high_open else '<='} {self.high:g}"
        if lo and hi:
            return f" in {'(' if self.low_open else '['}{self.low:g}, {self.high:g}{')' if self.high_open else ']'}"
        return f" {lo or hi}" if (lo or hi) else ""


OPTIONS: tuple[Option, ...] = (
    # -- detection
    Option("find_bar", "detect", "bool", True, "look for an instrument data bar and exclude it"),
    Option("min_bands", "detect", "int", 3, "fewest parallel bands that make a family", low=1),
    Option("max_families", "detect", "int", 8, "most families reported per image or grain", low=1),
    Option("working_size", "detect", "int", 1536,
           "longest side of the working copy for enhancement and Hough, px; the image is reduced at most 3x", low=16),
    Option("scales", "detect", "floats", (1.0, 1.7, 2.8), "ridge-filter scales at working resolution, px", low=0.0,
           low_open=True, high=64.0),
    Option("min_coverage", "detect", "float", 0.3, "least share of a line's length that lies on ridge pixels",
           low=0.0, high=1.0, low_open=True),
    Option("min_depth", "detect", "float", 0.035, "least relative depth of a band below/above the local median grey",
           low=0.0),
    Option("oversampling", "detect", "int", 0,
           "how many times the image was enlarged after it was measured: 0 = recognise a nearest-neighbour "
           "(block) enlargement and note a smooth one, 1 = as given, 2-4 = the enlargement, stated",
           low=0, high=4),
    Option("min_significance", "detect", "float", 16.0,
           "least significance -log10(NFA) of a family (a contrario number of false alarms)"),
    # -- the image itself
    Option("pixel_size_um", "image", "float", None, "micrometres per pixel (band spacings in um)", low=0.0,
           low_open=True, allow_none=True, flag="--pixel-size"),
    # -- identification
    Option("orientation_sigma_deg", "identify", "float", 1.0,
           "orientation uncertainty per sample axis, degrees", low=0.0, high=45.0, flag="--orientation-sigma"),
    Option("frame_sigma_deg", "identify", "float", 0.5, "uncertainty of the frame rotation, degrees", low=0.0,
           high=45.0, flag="--frame-sigma"),
    Option("p_none", "identify", "float", 0.05,
           "prior probability that a family matches no candidate (scratch, wrong data)", low=0.0, high=1.0,
           high_open=True, flag="--p-none"),
    Option("schmid_weight", "identify", "float", 0.0, "weight planes by Schmid factor^k under a load (0 = off)",
           low=0.0, high=10.0, flag="--schmid-weight"),
    Option("allow_shared_planes", "identify", "bool", False, "let two families of one grain take the same plane",
           flag="--allow-shared-planes"),
    Option("report_threshold", "identify", "float", 0.01, "candidates below this probability are not listed",
           low=0.0, high=1.0, high_open=True),
    Option("ambiguity_ratio", "identify", "float", 0.1,
           "a runner-up with at least this share of the best's probability makes the family ambiguous",
           low=0.0, high=1.0, low_open=True),
    Option("crack_k_sigma", "identify", "float", 2.0, "a crack is consistent with a plane within this many sigma",
           low=0.0, low_open=True, flag="--crack-k-sigma"),
    # -- the chain around them
    Option("min_grain_px", "analysis", "int", 300, "grains with fewer pixels are not analysed", low=1,
           flag="--min-grain-px"),
    Option("artefacts", "analysis", "bool", True,
           "on grain maps, test the surface-artefact hypothesis (one image angle continuing across grains)"),
    Option("frame_check", "analysis", "bool", True, "on grain maps, test the frame rotation against the traces"),
    Option("guided_search", "analysis", "bool", True,
           "also look for band families along each grain's predicted traces, where a weaker family passes "
           "(few directions are tested); those families are marked guided"),
)

GROUPS = ("image", "detect", "identify", "analysis")
_BY_NAME = {o.name: o for o in OPTIONS}


def option(name: str) -> Option:
    """The :class:`Option` called ``name`` (KeyError if there is none).

    Parameters
    ----------
    name : str
        A setting's library name, e.g. ``"min_bands"``.

    Returns
    -------
    Option
        Its declaration: group, kind, default, range and meaning.

    Raises
    ------
    KeyError
        No setting has that name.

    Examples
    --------
    >>> o = option("min_grain_px")
    >>> o.group, o.kind, o.default, o.flag
    ('analysis', 'int', 300, '--min-grain-px')
    """
    return _BY_NAME[name]


def defaults(group: str) -> dict[str, Any]:
    """Default values of one group's settings, as a new dict.

    Parameters
    ----------
    group : str
        One of :data:`GROUPS`: ``"image"``, ``"detect"``, ``"identify"`` or ``"analysis"``.

    Returns
    -------
    dict of str -> Any
        Setting name -> default value (units as in each :class:`Option`'s ``help``).

    Raises
    ------
    ValueError
        An unknown group.

    Examples
    --------
    >>> sorted(defaults("analysis").items())
    [('artefacts', True), ('frame_check', True), ('guided_search', True), ('min_grain_px', 300)]
    """
    if group not in GROUPS:
        raise ValueError(f"group must be one of {', '.join(GROUPS)}, got {group!r}")
    return {o.name: o.default for o in OPTIONS if o.group == group}


def check_options(values: dict[str, Any], group: str | tuple[str, ...]) -> dict[str, Any]:
    """Validate settings of one or more groups; return them normalised (unknown names rejected).

    Parameters
    ----------
    values : dict
        Setting name -> value, e.g. a job file's ``detect`` table or keyword arguments.
    group : str or tuple of str
        Which groups the names may come from.

    Returns
    -------
    dict
        The same names with checked, normalised values (ints, floats, tuples of floats).

    Raises
    ------
    OptionError
        Unknown name, wrong type or value out of range; the message names the setting.

    Examples
    --------
    >>> check_options({"p_none": 0.1, "min_grain_px": 100}, ("identify", "analysis"))
    {'p_none': 0.1, 'min_grain_px': 100}
    >>> check_options({"p_nnoe": 0.1}, "identify")
    Traceback (most recent call last):
    ...
    tracefit.options.OptionError: unknown identify setting 'p_nnoe' (did you mean 'p_none'?)
    """
    groups = (group,) if isinstance(group, str) else tuple(group) if isinstance(group, (tuple, list)) else ()
    unknown = [g for g in groups if g not in GROUPS]
    if not groups or unknown:
        raise TracefitInputError(f"group must be one of {', '.join(GROUPS)} or a tuple of them, got {group!r}")
    if not isinstance(values, dict):
        raise TracefitInputError(f"values must be a dict of setting name -> value, got {type(values).__name__}")
    out = {}
    for name, value in values.items():
        opt = _BY_NAME.get(name)
        if opt is None or opt.group not in groups:
            known = sorted(o.name for o in OPTIONS if o.group in groups)
            import difflib

            near = difflib.get_close_matches(str(name), known, n=1)
            hint = f" (did you mean {near[0]!r}?)" if near else f"; known: {', '.join(known)}"
            raise OptionError(str(name), f"unknown {'/'.join(groups)} setting {name!r}{hint}")
        out[name] = opt.check(value)
    return out
