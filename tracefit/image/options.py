"""The detector's settings: the ``detect`` group of :mod:`tracefit.options`, where they are declared once.

:func:`tracefit.image.detect_bands` and :func:`tracefit.image.detect_grains` check their
arguments here at the door; the job file and the command line check theirs against the same
declarations, so a setting has one default and one rule everywhere.
"""

from __future__ import annotations

from typing import Any

from tracefit.options import OPTIONS, Option, option

__all__ = ["DETECT_OPTIONS", "check_detect_options"]

#: The detector's settings, plus ``pixel_size_um`` and ``detect_grains``'s ``min_pixels``
#: (the chain's ``min_grain_px``).
DETECT_OPTIONS: dict[str, Option] = {
    **{o.name: o for o in OPTIONS if o.group == "detect"},
    "pixel_size_um": option("pixel_size_um"),
    "min_pixels": option("min_grain_px"),
}
_ALIASES = {"min_pixels": "min_grain_px"}


def check_detect_options(**values: Any) -> dict[str, Any]:
    """Check detector settings; names without a rule pass unchanged.

    Returns
    -------
    dict
        The same names with normalised values (ints, tuples of floats).

    Raises
    ------
    tracefit.options.OptionError
        One line naming the first bad setting, what it must be and what it was.

    Examples
    --------
    >>> check_detect_options(min_bands=2, scales=[1.0, 2.0])
    {'min_bands': 2, 'scales': (1.0, 2.0)}
    >>> check_detect_options(scales=())
    Traceback (most recent call last):
    ...
    tracefit.options.OptionError: scales must list at least one number
    """
    return {k: (DETECT_OPTIONS[k].check(v, name=k) if k in DETECT_OPTIONS else v) for k, v in values.items()}
