"""How many cores this process may run on: the one count for the detector's threads and the survey's workers."""

from __future__ import annotations

import os

__all__ = ["available_cores"]


def available_cores() -> int:
    """Cores this process may run on (the affinity mask where the system has one).

    Returns
    -------
    int
        At least 1.

    Examples
    --------
    >>> available_cores() >= 1
    True
    """
    try:
        return max(1, len(os.sched_getaffinity(0)))
    except (AttributeError, OSError):
        return os.cpu_count() or 1
