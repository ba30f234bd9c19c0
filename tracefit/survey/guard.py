"""What keeps a survey's output folder sound: one survey at a time, no stale temporaries,
clear errors for a folder that cannot be written, and SIGTERM handled like Ctrl-C.
"""

from __future__ import annotations

import os
from pathlib import Path

from tracefit.atomic import write_text
from tracefit.errors import TracefitInputError

__all__ = ["SurveyLock", "TermAsInterrupt", "prepare_output", "remove_stale_temporaries"]


class SurveyLock:
    """``OUT/.survey.lock`` holding the owner's pid: one survey per output folder at a time.

    A lock whose process no longer runs (a crash, a kill -9) is stale and taken over.

    Parameters
    ----------
    out_dir : Path
        The survey's output folder (must exist).

    Raises
    ------
    TracefitInputError
        On entering, when a running process of another survey holds the lock.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as d:
    ...     with SurveyLock(Path(d)) as lock:
    ...         held = lock.path.is_file()
    ...     print(lock.path.name, held, lock.path.is_file())
    .survey.lock True False
    """

    def __init__(self, out_dir: Path) -> None:
        self.path = out_dir / ".survey.lock"

    def __enter__(self) -> SurveyLock:
        try:
            owner = int(self.path.read_text().strip() or 0)
        except (OSError, ValueError):
            owner = 0
        if owner and owner != os.getpid() and _process_alive(owner):
            raise TracefitInputError(f"another survey (process {owner}) is writing to {self.path.parent}; wait for it "
                                     f"to finish or choose another output folder")
        write_text(self.path, f"{os.getpid()}\n")
        return self

    def __exit__(self, *exc: object) -> bool:
        self.path.unlink(missing_ok=True)
        return False


def _process_alive(pid: int) -> bool:
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # someone else's process with that pid
        return True
    return True


def remove_stale_temporaries(out_dir: Path) -> None:
    """Remove the temporary files an earlier run left when it was killed mid-write (``.NAME.XXXX.tmp``).

    Parameters
    ----------
    out_dir : Path
        The survey's output folder; it and its ``images/`` are cleaned.

    Examples
    --------
    >>> import os, tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as d:
    ...     prepare_output(Path(d))
    ...     _ = (Path(d) / "images" / ".coupon-A.json.x1y2.tmp").write_text("{")
    ...     remove_stale_temporaries(Path(d))
    ...     print(os.listdir(Path(d) / "images"))
    []
    """
    for folder in (out_dir, out_dir / "images"):
        for tmp in folder.glob(".*.tmp"):
            tmp.unlink(missing_ok=True)


def prepare_output(out_dir: Path) -> None:
    """Create the output folder and its ``images/`` and check that both can be written.

    Parameters
    ----------
    out_dir : Path
        The survey's output folder.

    Raises
    ------
    TracefitInputError
        The path is an existing file, or the folders cannot be created or written.

    Examples
    --------
    >>> import os, tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as d:
    ...     prepare_output(Path(d) / "out")
    ...     print(os.listdir(Path(d) / "out"))
    ['images']
    """
    if out_dir.exists() and not out_dir.is_dir():
        raise TracefitInputError(f"the output folder {str(out_dir)!r} is an existing file; give a folder")
    try:
        (out_dir / "images").mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise TracefitInputError(f"cannot create the output folder {str(out_dir)!r}: {exc.strerror or exc}") from None
    if not os.access(out_dir, os.W_OK) or not os.access(out_dir / "images", os.W_OK):
        raise TracefitInputError(f"the output folder {str(out_dir)!r} is not writable")


class TermAsInterrupt:
    """While running, SIGTERM (``kill PID``) stops the survey as Ctrl-C does: cleanly, resumable.

    Only in the main thread (where Python handles signals); elsewhere it does nothing. The
    previous handler is put back on exit.

    Examples
    --------
    >>> import signal
    >>> before = signal.getsignal(signal.SIGTERM)
    >>> with TermAsInterrupt():
    ...     changed = signal.getsignal(signal.SIGTERM) is not before
    >>> changed, signal.getsignal(signal.SIGTERM) is before
    (True, True)
    """

    def __enter__(self) -> TermAsInterrupt:
        import signal
        import threading

        self.old = None
        if threading.current_thread() is threading.main_thread():
            def _raise(signum, frame):
                raise KeyboardInterrupt

            self.old = signal.signal(signal.SIGTERM, _raise)
        return self

    def __exit__(self, *exc: object) -> bool:
        if self.old is not None:
            import signal

            signal.signal(signal.SIGTERM, self.old)
        return False
