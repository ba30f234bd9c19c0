"""Worker processes of a survey: how many, how they start, and how they stop.

Workers come from a fresh server process (``forkserver``; ``spawn`` where that does not exist),
never from a fork of the possibly multi-threaded caller. A stop (Ctrl-C, SIGTERM) ends them at
once; every output file is written atomically, so nothing is left half-written. Each worker
(here or on a Dask cluster) compiles numba code into a cache folder of its own
(:func:`claim_numba_cache`): workers sharing one cache have corrupted it.
"""

from __future__ import annotations

import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from pathlib import Path
from typing import Any, Callable

from tracefit.cores import available_cores
from tracefit.crystal.indices import current_index_notation

__all__ = ["available_cores", "default_workers", "run_in_pool", "claim_numba_cache"]


def default_workers(memory_per_worker_gb: float = 1.2) -> int:
    """Workers to start by default: one per core, fewer when memory would not hold them.

    A worker on a 64-megapixel image holds about 1 GB (benchmarks/detect.py measures it), so
    the count is also capped at the available memory over ``memory_per_worker_gb``.

    Parameters
    ----------
    memory_per_worker_gb : float
        Memory one worker may need, in GB (1e9 bytes).

    Returns
    -------
    int
        Between 1 and :func:`available_cores`.

    Examples
    --------
    >>> n = default_workers()
    >>> n >= 1, n <= available_cores()
    (True, True)
    """
    cores = available_cores()
    try:
        avail = os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE") / 1e9
    except (ValueError, OSError, AttributeError):  # pragma: no cover - no sysconf
        return cores
    return max(1, min(cores, int(avail // memory_per_worker_gb)))


_NUMBA_SLOT = None  # (folder, open lock file) of this process, once claimed


def claim_numba_cache(base: str | os.PathLike | None = None) -> Path | None:
    """Give this worker process a numba cache folder of its own (``NUMBA_CACHE_DIR``), reused across runs.

    orix compiles with numba and caches the machine code; worker processes compiling into one
    cache at once have corrupted it (a crash on a later import). Each worker takes the first free
    slot ``BASE/HOST-K`` (K = 0, 1, ...), free meaning no running process holds its lock file, so
    concurrent workers never share a folder while the next run's workers find their code compiled.
    Call it before numba is imported (it updates numba's setting if it already was). Once per
    process; later calls return the same folder.

    Parameters
    ----------
    base : str or path, optional
        Parent of the slots; default ``$NUMBA_CACHE_DIR`` (as the user set it), else
        ``$XDG_CACHE_HOME/tracefit/numba`` (``~/.cache/tracefit/numba``).

    Returns
    -------
    Path or None
        The folder, or None where it cannot be made (numba then uses its own default).

    Examples
    --------
    >>> import os, subprocess, sys, tempfile
    >>> code = "from tracefit.survey.pool import claim_numba_cache as c; import os; print(c() == c(), os.path.basename(os.environ['NUMBA_CACHE_DIR']))"
    >>> with tempfile.TemporaryDirectory() as d:
    ...     env = dict(os.environ, NUMBA_CACHE_DIR=d)
    ...     out = subprocess.run([sys.executable, "-c", code], env=env, capture_output=True, text=True).stdout
    >>> out.split()[0], out.split()[1].endswith("-0")
    ('True', True)
    """
    global _NUMBA_SLOT
    if _NUMBA_SLOT is not None:
        return _NUMBA_SLOT[0]
    import socket
    import sys

    if base is None:
        base = os.environ.get("NUMBA_CACHE_DIR") or Path(
            os.environ.get("XDG_CACHE_HOME") or Path.home() / ".cache") / "tracefit" / "numba"
    host = "".join(c if c.isalnum() or c in "-_." else "_" for c in socket.gethostname()) or "host"
    try:
        import fcntl
    except ImportError:  # pragma: no cover - Windows: a folder per process (compiled again each run)
        fcntl = None
    try:
        Path(base).mkdir(parents=True, exist_ok=True)
        for k in range(4096):
            folder = Path(base) / f"{host}-{k if fcntl else os.getpid()}"
            if fcntl is None:
                lock = None
                break
            lock = open(Path(base) / f"{host}-{k}.lock", "a")
            try:
                fcntl.flock(lock.fileno(), fcntl.LOCK_EX | fcntl.LOCK_NB)
                break
            except OSError:
                lock.close()
        else:  # pragma: no cover - 4096 live workers on one host
            return None
        folder.mkdir(exist_ok=True)
    except OSError:
        return None
    _NUMBA_SLOT = (folder, lock)  # the lock stays held (file open) for the life of this process
    os.environ["NUMBA_CACHE_DIR"] = str(folder)
    if "numba" in sys.modules:
        try:
            sys.modules["numba"].config.CACHE_DIR = str(folder)
        except AttributeError:  # pragma: no cover
            pass
    return folder


def _mp_context(with_orix: bool = False):
    # Workers come from a fresh server process ("forkserver"), not from a fork of this
    # possibly multi-threaded process (BLAS, OpenCV and GUI threads do not survive a fork
    # reliably); where forkserver does not exist (Windows, macOS default) use spawn.
    import multiprocessing as mp

    methods = mp.get_all_start_methods()
    if "forkserver" not in methods:
        return mp.get_context("spawn")
    ctx = mp.get_context("forkserver")
    # the server imports the heavy modules once; each worker forked from it starts warm
    preload = ["tracefit.survey.runner", "tracefit.pipeline", "tracefit.image", "tracefit.matching",
               "tracefit.viz.plots", "matplotlib.figure", "matplotlib.backends.backend_agg"]
    if with_orix:
        # orix compiles with numba on import: once, in the server, not in every worker at once
        preload.append("tracefit.maps.orix_preload")
    ctx.set_forkserver_preload(preload)
    return ctx


def _init_worker(notation: str = "four") -> None:
    # Ctrl-C reaches the whole process group: the parent stops the survey and ends the workers, so
    # a worker must not die on its own mid-image with a traceback of its own.
    import signal

    signal.signal(signal.SIGINT, signal.SIG_IGN)
    # labels in the records follow the survey's index notation (a display setting of the caller)
    from tracefit.crystal.indices import _HEX_NOTATION

    _HEX_NOTATION.set(notation)
    claim_numba_cache()  # before anything imports orix (and numba) in this worker
    # One process per core already: keep OpenCV from starting a thread per core in each worker.
    try:
        import cv2

        cv2.setNumThreads(1)
    except Exception:  # pragma: no cover - OpenCV missing or without threading control
        pass


def _worker(args):
    process, *rest = args
    return process(*rest)


def run_in_pool(process: Callable, failed_record: Callable, todo: list, out_dir: Path, analyse: Callable | None,
                figures: bool, n_workers: int, records: dict, bar: Any) -> None:
    """Analyse ``todo`` in worker processes, recording each image as it finishes.

    On an interrupt (Ctrl-C, or SIGTERM turned into one) no new image starts, the workers and
    their server process are ended at once (their images are abandoned, not half-written: every
    file is written atomically) and the interrupt goes on to the caller.

    Parameters
    ----------
    process : callable
        ``(ImageJob, out_dir, analyse, figures) -> dict``, run in a worker (picklable).
    failed_record : callable
        ``(ImageJob, out_dir, error) -> dict``, run here for an image whose worker died.
    todo : list of ImageJob
        The images to analyse.
    out_dir : Path
        The survey's output folder.
    analyse : callable or None
        Passed on to ``process``.
    figures : bool
        Passed on to ``process``.
    n_workers : int
        Worker processes to start.
    records : dict
        Filled in place: image name -> record.
    bar : object
        Progress display with ``step(name, status)``.

    Raises
    ------
    KeyboardInterrupt
        After the workers have been ended, when the survey was stopped.

    Examples
    --------
    The survey's runner calls it for ``workers > 1``; doing so from a script needs the
    ``if __name__ == "__main__":`` guard, so this example only shows what it needs:

    >>> import inspect
    >>> list(inspect.signature(run_in_pool).parameters)[:3]
    ['process', 'failed_record', 'todo']
    """
    with_orix = any(getattr(im, "orientation_map", None) for im in todo)
    pool = ProcessPoolExecutor(max_workers=n_workers, mp_context=_mp_context(with_orix), initializer=_init_worker,
                               initargs=(current_index_notation(),))
    try:
        futs = {pool.submit(_worker, (process, im, out_dir, analyse, figures)): im for im in todo}
        for fut in as_completed(futs):
            im = futs[fut]
            try:
                rec = fut.result()
            except Exception as exc:  # the worker process itself died
                rec = failed_record(im, out_dir, f"worker process failed: {type(exc).__name__}: {exc}")
            records[im.name] = rec
            bar.step(im.name, rec["status"] if rec["status"] == "ok" else "FAILED")
    except BaseException:
        _stop_pool(pool)
        raise
    pool.shutdown(wait=True)


def _stop_pool(pool) -> None:
    """End a process pool now: cancel what has not started, terminate the workers and the fork server."""
    procs = list((getattr(pool, "_processes", None) or {}).values())
    pool.shutdown(wait=False, cancel_futures=True)
    for proc in procs:
        try:
            proc.terminate()
        except Exception:  # pragma: no cover - already gone
            pass
    for proc in procs:
        proc.join(timeout=3)
        if proc.is_alive():  # pragma: no cover - a worker stuck in native code
            proc.kill()
    try:  # the fork server outlives the pool otherwise (its workers are gone, it is not needed)
        from multiprocessing import forkserver

        forkserver._forkserver._stop()
    except Exception:  # pragma: no cover - private API moved, or spawn was used
        pass
