"""The survey's progress bar on stderr: images done of total, rate and time left (both run routes)."""

from __future__ import annotations

import sys
import time

__all__ = ["Progress", "format_duration"]


def format_duration(seconds: float) -> str:
    """A short duration for the progress bar: ``42s``, ``3m05s``, ``2h07m``.

    Parameters
    ----------
    seconds : float
        Non-negative duration.

    Returns
    -------
    str

    Examples
    --------
    >>> format_duration(42.4), format_duration(185), format_duration(7625)
    ('42s', '3m05s', '2h07m')
    """
    s = int(round(max(seconds, 0.0)))
    if s < 60:
        return f"{s}s"
    if s < 3600:
        return f"{s // 60}m{s % 60:02d}s"
    return f"{s // 3600}h{(s % 3600) // 60:02d}m"


class Progress:
    """A plain progress bar on stderr: redrawn in place on a terminal, one line per image otherwise.

    The rate and the time left count only the images analysed in this run (not those taken over
    by ``resume``), from :meth:`start` (called when the workers are ready).

    Parameters
    ----------
    total : int
        Images in the survey.
    enabled : bool
        Draw anything at all.
    stream : file-like, optional
        Where to draw (default ``sys.stderr``).

    Examples
    --------
    >>> import io
    >>> buf = io.StringIO()
    >>> bar = Progress(4, True, buf)
    >>> bar.step("coupon-A", "done earlier (resumed)")
    >>> bar.start()
    >>> bar.step("coupon-B", "ok")
    >>> line = buf.getvalue().splitlines()[-1]
    >>> line.startswith("survey [############------------] 2/4"), "img/s" in line, "left" in line
    (True, True, True)
    """

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total, self.done, self.enabled = total, 0, enabled
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.t0 = None  # set by start(): the rate counts from there
        self.started_at = 0  # images already done when start() was called (resumed ones)

    def start(self) -> None:
        """Start the clock for the rate: the images from now on are analysed in this run."""
        self.t0 = time.perf_counter()
        self.started_at = self.done

    def note(self, text: str) -> None:
        """One line of news (e.g. where the survey runs), unless the bar is off."""
        if self.enabled:
            self.stream.write(("\r\033[K" if self.tty else "") + text + "\n")
            self.stream.flush()

    def step(self, name: str, status: str) -> None:
        """One image finished (or taken over): count it and redraw."""
        self.done += 1
        if not self.enabled:
            return
        width = 24
        filled = int(round(width * self.done / max(self.total, 1)))
        bar = "#" * filled + "-" * (width - filled)
        el = time.perf_counter() - self.t0 if self.t0 is not None else 0.0
        n_run = self.done - self.started_at
        if self.t0 is not None and n_run > 0 and el > 0:
            rate = n_run / el
            left = (self.total - self.done) / rate
            speed = f"{rate:.2f} img/s, {format_duration(left)} left" if rate < 10 else f"{rate:.0f} img/s, {format_duration(left)} left"
        else:
            speed = "-- img/s, -- left"
        msg = f"survey [{bar}] {self.done}/{self.total}  {speed}  {name}: {status}"
        if self.tty:
            self.stream.write("\r\033[K" + msg + ("\n" if self.done == self.total else ""))
        else:
            self.stream.write(msg + "\n")
        self.stream.flush()
