"""Atomic file writes: a temporary file in the target's folder, flushed, then renamed over it.

A reader (or a resumed survey) sees either the old file or the complete new one, never a
half-written file, even if the process is killed mid-write.
"""

from __future__ import annotations

import os
import tempfile
from pathlib import Path

__all__ = ["write_bytes", "write_text"]


def _umask() -> int:
    old = os.umask(0)
    os.umask(old)
    return old


def write_bytes(path, data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically; creates the parent folder. Returns the path."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(dir=path.parent, prefix=f".{path.name}.", suffix=".tmp")
    try:
        with os.fdopen(fd, "wb") as f:
            f.write(data)
            f.flush()
            os.fsync(f.fileno())
        os.chmod(tmp, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual file mode
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise
    return path


def write_text(path, text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically."""
    return write_bytes(path, text.encode("utf-8"))
