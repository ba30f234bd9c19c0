"""Where a survey runs: embedded local processes (the default) or a Dask scheduler.

The choice comes from, first to last: the ``scheduler`` argument (``--scheduler``), the job
file's ``[run] scheduler``, the environment variable ``TRACEFIT_SCHEDULER``. An explicit number
of local workers (``--workers``) without an explicit scheduler keeps the run local. Values:

``none``
    the embedded local process pool (no Dask; the default when nothing is set);
``local:N``
    a Dask ``LocalCluster`` of N worker processes on this machine, loopback only;
``tcp://HOST:PORT`` (or another Dask scheme: ``tls://``, ``ucx://``, ``ws://``, ``wss://``)
    a running Dask scheduler.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any, Mapping

from tracefit.errors import TracefitInputError
from tracefit.survey.keylines import _Ctx, _unknown

__all__ = ["SchedulerChoice", "parse_scheduler", "choose_scheduler", "run_table", "SCHEDULER_ENV"]

SCHEDULER_ENV = "TRACEFIT_SCHEDULER"
_ADDRESS_RE = re.compile(r"^(tcp|tls|ucx|ws|wss)://[^\s/]+$")
_LOCAL_RE = re.compile(r"^local:(\d+)$")
_HELP = ('give tcp://HOST:PORT (a running Dask scheduler), local:N (N Dask workers on this machine) or '
         'none (local processes, no Dask)')


@dataclass(frozen=True)
class SchedulerChoice:
    """Where a survey runs, and which setting said so.

    Attributes
    ----------
    address : str or None
        The Dask scheduler's address; None for ``none`` and ``local:N`` (the LocalCluster's
        address is known once it runs).
    local_workers : int or None
        N of ``local:N``.
    source : str
        ``"--scheduler"``, ``"job file"``, ``"TRACEFIT_SCHEDULER"`` or ``"default"``.

    Examples
    --------
    >>> c = parse_scheduler("local:2")
    >>> c.uses_dask, c.local_workers, c.address
    (True, 2, None)
    """

    address: str | None = None
    local_workers: int | None = None
    source: str = "default"

    @property
    def uses_dask(self) -> bool:
        """True for a LocalCluster or a scheduler address, False for the embedded local processes."""
        return self.address is not None or self.local_workers is not None


def parse_scheduler(text: str, source: str = "--scheduler") -> SchedulerChoice:
    """Read a scheduler setting: ``none``, ``local:N`` or a Dask address such as ``tcp://host:8786``.

    Parameters
    ----------
    text : str
        The setting as written.
    source : str
        Where it comes from, for the message and the run record.

    Returns
    -------
    SchedulerChoice

    Raises
    ------
    TracefitInputError
        For anything else (the message names ``source`` and the accepted forms).

    Examples
    --------
    >>> parse_scheduler("tcp://10.0.0.5:8786").address
    'tcp://10.0.0.5:8786'
    >>> parse_scheduler("none").uses_dask
    False
    >>> parse_scheduler("local:0")
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: --scheduler: 'local:0' needs at least one worker (local:1 or more)
    """
    if not isinstance(text, str):
        raise TracefitInputError(f"{source}: must be a string; {_HELP}")
    s = text.strip()
    if s.lower() == "none":
        return SchedulerChoice(source=source)
    m = _LOCAL_RE.match(s.lower())
    if m:
        n = int(m.group(1))
        if n < 1:
            raise TracefitInputError(f"{source}: {text!r} needs at least one worker (local:1 or more)")
        return SchedulerChoice(local_workers=n, source=source)
    if _ADDRESS_RE.match(s):
        return SchedulerChoice(address=s, source=source)
    raise TracefitInputError(f"{source}: {text!r} is not a scheduler address; {_HELP}")


def choose_scheduler(option: str | None = None, job_value: str | None = None,
                     environ: Mapping[str, str] | None = None, workers_given: bool = False) -> SchedulerChoice:
    """Pick where a survey runs: the option, else the job file, else ``TRACEFIT_SCHEDULER``.

    Parameters
    ----------
    option : str, optional
        ``--scheduler`` / ``run_survey(scheduler=...)``.
    job_value : str, optional
        The job file's ``[run] scheduler``.
    environ : mapping, optional
        Environment (default ``os.environ``).
    workers_given : bool
        A number of local workers was asked for explicitly: without an explicit ``option`` the
        run stays local (the job file and the environment are not consulted).

    Returns
    -------
    SchedulerChoice

    Raises
    ------
    TracefitInputError
        A setting that is not a scheduler address.

    Examples
    --------
    >>> choose_scheduler(None, "tcp://lab-head:8786", {}).source
    'job file'
    >>> choose_scheduler(None, None, {"TRACEFIT_SCHEDULER": "local:2"}).local_workers
    2
    >>> choose_scheduler(None, None, {"TRACEFIT_SCHEDULER": "local:2"}, workers_given=True).uses_dask
    False
    """
    import os

    env = os.environ if environ is None else environ
    if option is not None:
        return parse_scheduler(option, "--scheduler")
    if workers_given:
        return SchedulerChoice(source="--workers")
    if job_value is not None:
        return parse_scheduler(job_value, "job file")
    if env.get(SCHEDULER_ENV, "").strip():
        return parse_scheduler(env[SCHEDULER_ENV], SCHEDULER_ENV)
    return SchedulerChoice()


def run_table(ctx: _Ctx, run: Any) -> str | None:
    """A job file's optional ``[run]`` table, checked: its ``scheduler`` (stripped) or None.

    Parameters
    ----------
    ctx : keylines._Ctx
        The job file's error helper (names the field and its line).
    run : object
        The parsed ``[run]`` value (None when absent).

    Returns
    -------
    str or None

    Raises
    ------
    TracefitInputError
        ``[run]`` is not a table, has another key, or ``scheduler`` is not a scheduler address.

    Examples
    --------
    >>> from tracefit.survey import parse_job
    >>> text = '[run]\\nscheduler = "tcp://lab-head:8786"\\n[[image]]\\nname = "a"\\nfile = "a.png"\\nlattice = "fcc"\\neuler_deg = [0, 0, 0]\\n'
    >>> parse_job(text).scheduler
    'tcp://lab-head:8786'
    >>> parse_job(text.replace("tcp://lab-head:8786", "lab-head"))
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: job.toml, line 2: field 'run.scheduler' is not valid: 'lab-head' is not a scheduler address; give tcp://HOST:PORT (a running Dask scheduler), local:N (N Dask workers on this machine) or none (local processes, no Dask)
    """
    if run is None:
        return None
    if not isinstance(run, dict):
        raise ctx.fail(("run",), "must be a table: write [run] on its own line")
    for k in run:
        if k != "scheduler":
            raise _unknown(ctx, ("run", k), {"scheduler": "a Dask scheduler address"})
    if "scheduler" not in run:
        return None
    try:
        parse_scheduler(run["scheduler"], "scheduler")
    except TracefitInputError as exc:
        raise ctx.fail(("run", "scheduler"), f"is not valid: {str(exc).removeprefix('scheduler: ')}") from None
    return run["scheduler"].strip()
