"""The detector's options, declared once: name, type, range, default and unit.

:data:`DETECT_OPTIONS` is the one table that :func:`tracefit.image.detect_bands` and
:func:`tracefit.image.detect_grains` check their arguments against at the door
(:func:`check_detect_options`); a job file's ``detect`` table or a command line can
check theirs against the same rules. Every message names the library parameter.
"""

from __future__ import annotations

import math
import numbers
from dataclasses import dataclass
from typing import Any

import numpy as np

from tracefit.errors import TracefitInputError

__all__ = ["DetectOption", "DETECT_OPTIONS", "check_detect_options"]


@dataclass(frozen=True)
class DetectOption:
    """The rule for one detector option.

    Parameters
    ----------
    name : str
        Keyword of :func:`tracefit.image.detect_bands` (or ``detect_grains``).
    kind : {"int", "number", "bool", "scales"}
        ``"int"``: an integer (an integral float is accepted); ``"number"``: a finite real
        number; ``"bool"``: True or False; ``"scales"``: a non-empty sequence of numbers.
    default : object
        The default of the keyword.
    low, high : float or None
        Inclusive bounds (None: unbounded). For ``"scales"`` they bound each element.
    low_open : bool
        The lower bound itself is excluded (``value > low``).
    allow_none : bool
        None is a valid value (it means "not given").
    unit : str
        Unit or meaning shown in messages, e.g. ``"pixels"``.

    Examples
    --------
    >>> opt = DetectOption("min_bands", "int", 3, low=1)
    >>> opt.describe()
    'an integer >= 1'
    """

    name: str
    kind: str
    default: Any
    low: float | None = None
    high: float | None = None
    low_open: bool = False
    allow_none: bool = False
    unit: str = ""

    def describe(self) -> str:
        """What a valid value is, in words (the tail of an error message).

        Returns
        -------
        str
            E.g. ``"an integer >= 16 (pixels)"``.
        """
        what = {"int": "an integer", "number": "a finite number", "bool": "true or false",
                "scales": "a non-empty sequence of numbers"}[self.kind]
        bounds = []
        if self.low is not None:
            bounds.append(f"{'>' if self.low_open else '>='} {self.low:g}")
        if self.high is not None:
            bounds.append(f"<= {self.high:g}")
        text = what + ((" " + " and ".join(bounds)) if bounds else "")
        if self.unit:
            text += f" ({self.unit})"
        if self.allow_none:
            text += " or None"
        return text

    def check(self, value: Any) -> Any:
        """Return ``value`` (integers as ``int``, scales as a tuple) or raise.

        Parameters
        ----------
        value : object
            The value given for this option.

        Returns
        -------
        object
            The value, normalised: ``int`` for ``"int"``, ``bool`` for ``"bool"``, a
            tuple for ``"scales"``; numbers are returned unchanged.

        Raises
        ------
        TracefitInputError
            When the value has the wrong type, is not finite or is out of range.

        Examples
        --------
        >>> DetectOption("working_size", "int", 1536, low=16).check(1024.0)
        1024
        >>> DetectOption("working_size", "int", 1536, low=16).check(0)
        Traceback (most recent call last):
        ...
        tracefit.errors.TracefitInputError: working_size must be an integer >= 16, got 0
        """
        if value is None and self.allow_none:
            return None
        if self.kind == "bool":
            if isinstance(value, (bool, np.bool_)):
                return bool(value)
            raise self._error(value)
        if self.kind == "scales":
            if isinstance(value, (str, bytes)) or not hasattr(value, "__iter__"):
                raise self._error(value)
            items = tuple(value)
            if not items or not all(self._in_range(v) for v in items):
                raise self._error(value)
            return items
        if not self._in_range(value):
            raise self._error(value)
        if self.kind == "int":
            if float(value) != math.floor(float(value)):
                raise self._error(value)
            return int(value)
        return value

    def _in_range(self, v) -> bool:
        if isinstance(v, (bool, np.bool_)) or not isinstance(v, numbers.Real):
            return False
        x = float(v)
        if not math.isfinite(x):
            return False
        if self.low is not None and (x < self.low or (self.low_open and x == self.low)):
            return False
        return self.high is None or x <= self.high

    def _error(self, value) -> TracefitInputError:
        return TracefitInputError(f"{self.name} must be {self.describe()}, got {value!r}")


#: Every option of :func:`tracefit.image.detect_bands` that has a rule, and
#: ``min_pixels`` of :func:`tracefit.image.detect_grains`.
DETECT_OPTIONS: dict[str, DetectOption] = {o.name: o for o in (
    DetectOption("pixel_size_um", "number", None, low=0.0, low_open=True, allow_none=True, unit="micrometres per pixel"),
    DetectOption("find_bar", "bool", True),
    DetectOption("min_bands", "int", 3, low=1),
    DetectOption("max_families", "int", 8, low=1),
    DetectOption("working_size", "int", 1536, low=16, unit="pixels"),
    DetectOption("scales", "scales", (1.0, 1.7, 2.8), low=0.0, low_open=True, high=64.0, unit="pixels"),
    DetectOption("min_coverage", "number", 0.3, low=0.0),
    DetectOption("min_depth", "number", 0.035, low=0.0),
    DetectOption("min_pixels", "int", 2500, low=0, unit="pixels"),
)}


def check_detect_options(**values: Any) -> dict[str, Any]:
    """Check detector options against :data:`DETECT_OPTIONS`.

    Parameters
    ----------
    **values
        Option name -> value; names without a rule pass unchanged.

    Returns
    -------
    dict
        The same names with normalised values (see :meth:`DetectOption.check`).

    Raises
    ------
    TracefitInputError
        One line naming the first bad option, what it must be and what it was.

    Examples
    --------
    >>> check_detect_options(min_bands=2, scales=[1.0, 2.0])
    {'min_bands': 2, 'scales': (1.0, 2.0)}
    >>> check_detect_options(scales=())
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: scales must be a non-empty sequence of numbers > 0 and <= 64 (pixels), got ()
    """
    return {k: (DETECT_OPTIONS[k].check(v) if k in DETECT_OPTIONS else v) for k, v in values.items()}
