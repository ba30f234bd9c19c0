"""Errors that the command line turns into one clear line on stderr and exit code 2."""

import math


class TracefitInputError(ValueError):
    """Bad input from the user: a malformed index, file, option or value.

    The message must say what was wrong and, where it helps, what was expected.
    The command line prints it as one line and exits with code 2.
    """


def real_number(value, name: str, *, finite: bool = True) -> float:
    """``value`` as a float, or :class:`TracefitInputError` naming the parameter ``name``.

    The door check of public functions: text, containers, complex numbers and booleans are
    refused (a bool is almost always a misplaced flag), as are NaN and infinities unless
    ``finite`` is False.

    Parameters
    ----------
    value : Any
        The value given.
    name : str
        The library parameter's name, for the message.
    finite : bool
        Refuse NaN and +-inf.

    Returns
    -------
    float

    Raises
    ------
    TracefitInputError
        Not a real number (or not finite).

    Examples
    --------
    >>> real_number(3, "a")
    3.0
    >>> real_number("3", "a")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: a must be a number, got '3'
    """
    import numbers

    if isinstance(value, bool) or not isinstance(value, numbers.Real) or type(value).__name__ == "bool_":
        raise TracefitInputError(f"{name} must be a number, got {_short(value)}")
    try:
        out = float(value)
    except (OverflowError, TypeError, ValueError):
        raise TracefitInputError(f"{name} must be a number of a usable size, got {_short(value)}") from None
    if finite and not math.isfinite(out):
        raise TracefitInputError(f"{name} must be a finite number, got {_short(value)}")
    return out


def real_array(value, name: str, *, finite: bool = True):
    """``value`` as a float numpy array, or :class:`TracefitInputError` naming the parameter ``name``.

    Parameters
    ----------
    value : array_like
        Numbers (nested lists, arrays); text and other objects are refused.
    name : str
        The library parameter's name, for the message.
    finite : bool
        Refuse NaN and +-inf entries.

    Returns
    -------
    numpy.ndarray
        float64, the shape of ``value``.

    Raises
    ------
    TracefitInputError
        Not numbers (or not finite).

    Examples
    --------
    >>> real_array([1, 2, 3], "euler").tolist()
    [1.0, 2.0, 3.0]
    >>> real_array("1,2,3", "euler")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: euler must be numbers, got '1,2,3'
    """
    import numpy as np

    if isinstance(value, (str, bytes)):
        raise TracefitInputError(f"{name} must be numbers, got {_short(value)}")
    try:
        with np.errstate(all="ignore"):
            arr = np.asarray(value, dtype=float)
    except (TypeError, ValueError, OverflowError):
        raise TracefitInputError(f"{name} must be numbers, got {_short(value)}") from None
    if finite and not np.isfinite(arr).all():
        raise TracefitInputError(f"{name} must be finite numbers, got {_short(value)}")
    return arr


def _short(value) -> str:
    """A repr short enough for a one-line message."""
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."
