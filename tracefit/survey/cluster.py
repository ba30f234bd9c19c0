"""A survey on a Dask cluster: one task per image, records written here as each task finishes.

The workers run the same :func:`~tracefit.survey.record.image_record` as the local processes and
send the record, with its figure PNGs as bytes, back to this process (the client), which writes
them with :func:`~tracefit.survey.record.write_record`: atomically, the record last. So the output
folder is the local run's, byte for byte, and an interrupted run (client killed, a worker lost, the
scheduler restarted) goes on with ``resume``. Workers read the images from the paths in the job
file: they must see the same files at the same paths (checked on one worker before any work).

Dask (``dask`` and ``distributed``) is optional (``pip install 'tracefit[cluster]'``) and imported
only here, inside the functions.
"""

from __future__ import annotations

import os
import threading
import time
from contextlib import contextmanager
from pathlib import Path
from typing import Any, Callable

import tracefit
from tracefit.crystal.indices import current_index_notation
from tracefit.errors import TracefitInputError
from tracefit.survey.record import INPUT_FIELDS, failed_record, figure_names, image_record, write_record
from tracefit.survey.scheduler import SchedulerChoice

__all__ = ["require_dask", "run_on_cluster", "ALLOWED_FAILURES"]

# A worker that dies while analysing an image: Dask runs the image again at most this many times,
# then it is recorded as failed (distributed.scheduler.allowed-failures).
ALLOWED_FAILURES = 2
INSTALL_HINT = "pip install 'tracefit[cluster]'"
CONNECT_TIMEOUT_S = 20.0  # how long to keep trying to reach a scheduler address


def require_dask() -> None:
    """Check that dask and distributed can be imported; else one clear line on what to install.

    Raises
    ------
    TracefitInputError
        When either is missing.

    Examples
    --------
    >>> try:
    ...     require_dask()
    ... except Exception as exc:  # without Dask the message says what to install
    ...     assert "tracefit[cluster]" in str(exc)
    """
    try:
        import dask  # noqa: F401
        import distributed  # noqa: F401
    except ImportError as exc:
        missing = getattr(exc, "name", None) or "dask"
        raise TracefitInputError(f"running on a Dask scheduler needs dask and distributed ({missing} is not "
                                 f"installed): {INSTALL_HINT}") from None


# --------------------------------------------------------------------------- on the workers
_SETUP_LOCK = threading.Lock()
_SETUP_DONE = False


def _worker_setup() -> None:
    # Once per worker process: a numba cache folder of its own (before orix is imported) and one
    # OpenCV thread per task thread (the worker's threads already use the cores).
    global _SETUP_DONE
    with _SETUP_LOCK:
        if _SETUP_DONE:
            return
        from tracefit.survey.pool import claim_numba_cache

        claim_numba_cache()
        _adaptive_malloc()
        try:
            import cv2

            cv2.setNumThreads(1)
        except Exception:  # pragma: no cover - OpenCV without threading control
            pass
        _SETUP_DONE = True


def _adaptive_malloc() -> None:
    # Dask's nanny starts each worker with MALLOC_TRIM_THRESHOLD_=65536 (hand freed memory back at
    # once). That also switches off glibc's adaptive mmap threshold, so every array over 128 kB is
    # a fresh mmap with its page faults: the analysis ran 1.8x slower in a Dask worker than in a
    # plain process (benchmarks/cluster.md). Set the thresholds the adaptive rule reaches (arrays
    # under 32 MB reuse the heap; larger ones, e.g. a 16 MP image, still go back to the system).
    import sys

    if not sys.platform.startswith("linux") or "MALLOC_TRIM_THRESHOLD_" not in os.environ:
        return
    try:
        import ctypes

        libc = ctypes.CDLL("libc.so.6")
        libc.mallopt(-3, 32 << 20)  # M_MMAP_THRESHOLD
        libc.mallopt(-1, 64 << 20)  # M_TRIM_THRESHOLD
    except (OSError, AttributeError):  # pragma: no cover - not glibc
        pass


# What a worker imports before its first image (as the local pool's fork server does), so that
# the progress rate and the measured start-up cost are honest from the first image on.
_WARM_MODULES = ("tracefit.survey.record", "tracefit.pipeline", "tracefit.image", "tracefit.matching",
                 "tracefit.viz.plots", "matplotlib.figure", "matplotlib.backends.backend_agg")


def _warm_worker() -> bool:
    """Run on every worker at the start: set it up and import the chain's modules."""
    import importlib

    _worker_setup()
    for name in _WARM_MODULES:
        importlib.import_module(name)
    return True


def _check_on_worker(paths: list[str]) -> dict:
    """Run on one worker first: its tracefit version and the input files it cannot read."""
    import socket

    _worker_setup()
    bad = []
    for p in paths:
        try:
            with open(p, "rb") as f:
                f.read(1)
        except OSError as exc:
            bad.append((p, exc.strerror or type(exc).__name__))
    try:
        from distributed import get_worker

        where = get_worker().address
    except (ImportError, ValueError):  # pragma: no cover - not on a worker
        where = socket.gethostname()
    return {"version": tracefit.__version__, "unreadable": bad, "worker": where}


def _remote_image(im, analyse, figures: bool, notation: str = "four") -> tuple[dict, dict]:
    """One image on a worker: its record and its figure files (name -> PNG bytes).

    ``notation`` is the client's index notation (labels in the record are printed in it).
    """
    import tempfile

    from tracefit.crystal.indices import index_notation

    _worker_setup()
    with tempfile.TemporaryDirectory(prefix="tracefit-figures-") as tmp, index_notation(notation):
        rec = image_record(im, analyse, figures, tmp)
        files = {name: (Path(tmp) / name).read_bytes() for name in figure_names(rec)}
    return rec, files


def _set_allowed_failures(dask_scheduler=None, value: int = ALLOWED_FAILURES) -> int:
    """On the scheduler: set how often a task is retried after its worker dies; returns the old value."""
    old = dask_scheduler.allowed_failures
    dask_scheduler.allowed_failures = value
    return old


# --------------------------------------------------------------------------- here, on the client
@contextmanager
def _quiet_dask_logs(local: bool):
    # A LocalCluster's scheduler and nannies log to this process's stderr (worker restarts, a task
    # given up): the survey reports those itself, in one line per image.
    import logging

    names = ["distributed", "distributed.client"] if local else ["distributed.client"]
    old = {n: logging.getLogger(n).level for n in names}
    for n in names:
        logging.getLogger(n).setLevel(logging.CRITICAL)
    try:
        yield
    finally:
        for n, lvl in old.items():
            logging.getLogger(n).setLevel(lvl)


@contextmanager
def _connect(choice: SchedulerChoice):
    """A Client on a new LocalCluster (``local:N``) or on the scheduler at ``choice.address``."""
    import logging

    import dask
    from distributed import Client, LocalCluster

    if choice.local_workers is not None:
        settings = {"distributed.scheduler.allowed-failures": ALLOWED_FAILURES,
                    # one task at a time per one-thread worker: a dying worker takes only its own image along
                    "distributed.scheduler.worker-saturation": 1.0}
        with dask.config.set(settings):
            try:
                cluster = LocalCluster(n_workers=choice.local_workers, threads_per_worker=1, processes=True,
                                       host="127.0.0.1", dashboard_address=None, worker_dashboard_address=None,
                                       silence_logs=logging.CRITICAL,
                                       # no dashboard; the scheduler's small HTTP server on a free loopback port
                                       scheduler_kwargs={"dashboard": False, "dashboard_address": "127.0.0.1:0"})
            except Exception as exc:
                raise TracefitInputError(f"could not start {choice.local_workers} local Dask worker(s): "
                                         f"{type(exc).__name__}: {exc}") from None
        try:
            with Client(cluster) as client:
                yield client, None
        finally:
            cluster.close()
        return
    try:
        client = Client(choice.address, timeout=f"{CONNECT_TIMEOUT_S}s")
    except (OSError, TimeoutError) as exc:
        raise TracefitInputError(f"cannot reach the Dask scheduler at {choice.address} ({choice.source}): "
                                 f"{str(exc).splitlines()[0] if str(exc) else type(exc).__name__}; is it running "
                                 f"and is the address right?") from None
    old = None
    try:
        try:
            old = client.run_on_scheduler(_set_allowed_failures, value=ALLOWED_FAILURES)
        except ImportError as exc:  # the scheduler unpickles every task too: it needs tracefit as well
            raise TracefitInputError(f"the Dask scheduler at {choice.address} cannot import tracefit ({exc}); "
                                     f"install tracefit {tracefit.__version__} where the scheduler and the workers "
                                     f"run ({INSTALL_HINT})") from None
        except Exception:  # a scheduler that runs no client code: its own retry setting stays
            old = None
        yield client, old
    finally:
        if old is not None:
            try:
                client.run_on_scheduler(_set_allowed_failures, value=old)
            except Exception:  # pragma: no cover - the scheduler is gone
                pass
        client.close()


def _check_workers(client, todo: list, address: str, wait_s: float) -> str:
    """On one worker: the same tracefit, and every input this computer can read readable there too."""
    try:
        client.wait_for_workers(1, timeout=wait_s)
    except (TimeoutError, OSError):
        raise TracefitInputError(f"no Dask worker joined the scheduler at {address} within {wait_s:.0f} s; start "
                                 f"workers (docs/scaling.md)") from None
    paths = sorted({str(p) for im in todo for k in INPUT_FIELDS if (p := getattr(im, k)) is not None
                    and os.access(p, os.R_OK)})
    try:
        got = client.submit(_check_on_worker, paths, pure=False, key=f"tracefit-check-{os.getpid()}-{time.time_ns()}"
                            ).result()
    except Exception as exc:
        raise TracefitInputError(f"the Dask cluster at {address} could not run tracefit's check ({type(exc).__name__}: "
                                 f"{str(exc).splitlines()[0] if str(exc) else ''}); install tracefit "
                                 f"{tracefit.__version__} where the scheduler and the workers run ({INSTALL_HINT})"
                                 ) from None
    if got["version"] != tracefit.__version__:
        raise TracefitInputError(f"the Dask worker {got['worker']} runs tracefit {got['version']}, this computer "
                                 f"{tracefit.__version__}: install the same version on the workers")
    if got["unreadable"]:
        p, why = got["unreadable"][0]
        more = f" (and {len(got['unreadable']) - 1} more input file(s))" if len(got["unreadable"]) > 1 else ""
        raise TracefitInputError(f"the Dask worker {got['worker']} cannot read {p!r}{more} ({why}), which this "
                                 f"computer can: workers must see the inputs at the same paths (docs/scaling.md)")
    try:  # every worker present imports the chain now (workers that join later do so on their first image)
        client.run(_warm_worker)
    except Exception:  # pragma: no cover - a worker gone meanwhile: its images go elsewhere
        pass
    return got["worker"]


def _collect(fut, im, out_dir: Path, address: str) -> dict:
    """A finished task's record written here (figures first, the record last); a failed task, a failed image."""
    from distributed import KilledWorker

    if fut.status == "cancelled":
        raise TracefitInputError(f"lost the Dask scheduler at {address} while image {im.name} was running; the "
                                 f"finished images are kept: run the same command with --resume")
    if fut.status == "error":
        exc = fut.exception()
        if isinstance(exc, KilledWorker):
            err = (f"a Dask worker died while analysing this image, {exc.allowed_failures + 1} times (retried "
                   f"{exc.allowed_failures} times); it may need more memory than a worker has")
        else:
            err = f"the Dask task failed: {type(exc).__name__}: {str(exc).splitlines()[0] if str(exc) else ''}"
        return failed_record(im, out_dir, err)
    rec, files = fut.result()
    return write_record(out_dir, rec, files)


def run_on_cluster(choice: SchedulerChoice, todo: list, out_dir: Path, analyse: Callable | None, figures: bool,
                   records: dict, bar: Any, worker_wait_s: float = 600.0) -> dict:
    """Analyse ``todo`` on a Dask cluster, one task per image, writing each record here as it finishes.

    Parameters
    ----------
    choice : SchedulerChoice
        ``local:N`` (a LocalCluster of N one-thread worker processes on 127.0.0.1, no dashboard) or
        a scheduler address (:func:`tracefit.survey.scheduler.choose_scheduler`).
    todo : list of ImageJob
        The images to analyse.
    out_dir : Path
        The survey's output folder (only this process writes to it).
    analyse : callable or None
        Replacement for ``analyse_image``; must be importable on the workers.
    figures : bool
        Draw the figures (on the workers; the PNG bytes come back with the record).
    records : dict
        Filled in place: image name -> record.
    bar : object
        Progress display with ``note(text)``, ``start()`` and ``step(name, status)``.
    worker_wait_s : float
        How long to wait for a first worker to join the scheduler.

    Returns
    -------
    dict
        Where it ran: ``where`` (``"dask"``), ``scheduler`` (address), ``local_cluster``,
        ``workers`` and ``threads`` (at the start), ``allowed_failures``; ``startup_s`` (connect,
        check, imports) and ``tasks_s`` (first task submitted to last record written), seconds.

    Raises
    ------
    TracefitInputError
        Dask missing, the scheduler unreachable or lost, no worker, a worker that cannot run
        tracefit or read an input this computer can read.
    KeyboardInterrupt
        After the outstanding tasks were cancelled, when the survey was stopped.

    Examples
    --------
    The survey's runner calls it for ``scheduler="local:N"`` or an address; doing so from a
    script needs the ``if __name__ == "__main__":`` guard (workers start as new processes):

    >>> import inspect
    >>> list(inspect.signature(run_on_cluster).parameters)[:3]
    ['choice', 'todo', 'out_dir']
    """
    # Over 80 lines because of its numpydoc docstring; the code is connect, check, submit, collect.
    require_dask()
    from distributed import as_completed

    t0 = time.perf_counter()
    with _quiet_dask_logs(choice.local_workers is not None), _connect(choice) as (client, old_failures):
        address = client.scheduler.address
        _check_workers(client, todo, address, worker_wait_s)
        nthreads = client.nthreads()
        info = {"where": "dask", "scheduler": address, "local_cluster": choice.local_workers is not None,
                "source": choice.source, "workers": len(nthreads), "threads": int(sum(nthreads.values())),
                "allowed_failures": ALLOWED_FAILURES if choice.local_workers is not None or old_failures is not None
                else None, "startup_s": round(time.perf_counter() - t0, 3)}
        bar.note(f"survey: {len(todo)} image(s) on the Dask scheduler {address} "
                 f"({info['workers']} worker(s), {info['threads']} thread(s))")
        bar.start()
        t_tasks = time.perf_counter()
        token = f"{os.getpid()}-{time.time_ns()}"
        futs = {client.submit(_remote_image, im, analyse, figures, current_index_notation(), pure=False, key=f"tracefit-{im.name}-{token}"): im
                for im in todo}
        try:
            for fut in as_completed(futs):
                im = futs[fut]
                rec = _collect(fut, im, out_dir, address)
                records[im.name] = rec
                bar.step(im.name, rec["status"] if rec["status"] == "ok" else "FAILED")
                fut.release()
            info["tasks_s"] = round(time.perf_counter() - t_tasks, 3)  # submit to last record written
        except BaseException:  # stopped, or the scheduler lost: nothing more is wanted from the cluster
            try:
                client.cancel(list(futs), force=True)
            except Exception:  # pragma: no cover - the scheduler is already gone
                pass
            raise
    return info
