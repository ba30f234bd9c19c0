"""Import orix once per machine at a time, so that numba's compiled-code cache stays whole.

orix compiles its rotation kernels with numba when it is first imported and caches the
machine code beside its sources. Two processes compiling at once (the workers of a survey,
two commands started together) have left that cache corrupt on our machines, and a corrupt
cache crashes every later import with a segmentation fault. So every import of orix in
tracefit goes through :func:`import_orix`, which holds an exclusive file lock while orix
loads: the first process compiles and writes the cache, the others wait and then read it.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

import numpy as np

__all__ = ["import_orix"]

_LOADED = False


def _lock_path() -> Path:
    # beside numba's own cache when the user moved it, else in the system temporary folder
    base = os.environ.get("NUMBA_CACHE_DIR") or tempfile.gettempdir()
    return Path(base) / f"tracefit-orix-import-{os.getuid() if hasattr(os, 'getuid') else 'user'}.lock"


def import_orix() -> None:
    """Import orix (its readers, crystal maps and rotations) under a machine-wide lock.

    Cheap after the first call in a process. Where file locks are not available (no
    ``fcntl``, an unwritable temporary folder) orix is imported without the lock.

    Examples
    --------
    >>> import_orix()
    >>> import sys
    >>> "orix.quaternion" in sys.modules
    True
    """
    global _LOADED
    if _LOADED:
        return
    try:
        import fcntl

        handle = open(_lock_path(), "a")
    except (ImportError, OSError):  # pragma: no cover - Windows, or no writable temp folder
        handle = None
    try:
        if handle is not None:
            fcntl.flock(handle, fcntl.LOCK_EX)
        # orix loads its submodules lazily: name the ones that hold numba kernels, so that
        # they compile (or load from the cache) here, inside the lock
        import orix.crystal_map.crystal_map  # noqa: F401
        import orix.io._io  # noqa: F401
        import orix.quaternion._conversions  # noqa: F401
        import orix.quaternion._numba  # noqa: F401
        import orix.quaternion.orientation  # noqa: F401
        from orix.quaternion import Quaternion
        from orix.vector import Vector3d

        # the quaternion product, conjugate and vector rotation compile on first use: use them here
        try:
            q = Quaternion([1.0, 0.0, 0.0, 0.0])
            qs = Quaternion(np.tile([1.0, 0.0, 0.0, 0.0], (2, 1)))
            _ = (q * q, ~q, q * Vector3d([0.0, 0.0, 1.0]), qs * Vector3d(np.eye(3)[:2]), qs.outer(Vector3d(np.eye(3))))
        except Exception:  # pragma: no cover - a warm-up only; orix's own use compiles what is missing
            pass
    finally:
        if handle is not None:
            handle.close()  # closing releases the lock
    _LOADED = True
