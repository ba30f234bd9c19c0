"""Surveys: run every image of a job, in parallel, without ever losing finished work.

Output folder layout (all files written atomically: temporary file, then rename)::

    OUT/
      report.html              self-contained report (tracefit.viz.report)
      results.csv              one row per band family (failed images: one row, status "failed")
      results.json             job, settings, every image's full record
      images/NAME.json         per-image record; written last, so it marks the image done
      images/NAME.overlay.png  micrograph with each family labelled by its identified plane
      images/NAME.stereo-K.png stereogram of grain K's candidate planes (K = 1, 2, ...)
      images/NAME.rose.png     rose diagram of the band angles

A bad image (unreadable file, no orientation, a detector error) is recorded with its
error and skipped; the rest go on. ``resume=True`` reuses every finished image whose
inputs and settings are unchanged (same fingerprint) and redoes the rest.

The images run on local worker processes (:mod:`tracefit.survey.pool`, the default) or, when a
scheduler is chosen (:mod:`tracefit.survey.scheduler`), as one Dask task each
(:mod:`tracefit.survey.cluster`); both build each record with :mod:`tracefit.survey.record`.
"""

from __future__ import annotations

import csv
import io
import json
import time
from dataclasses import dataclass, field
from pathlib import Path
from typing import Callable

import numpy as np

import tracefit
from tracefit.atomic import write_text
from tracefit.errors import TracefitInputError
from tracefit.results import CSV_COLUMNS, family_rows, jsonable
from tracefit.survey.analysis import (  # noqa: F401 - kept importable from runner
    ImageAnalysis, _predicted_dicts, analyse_image, analysis_from_result, chain_inputs)
from tracefit.survey.guard import SurveyLock, TermAsInterrupt, prepare_output, remove_stale_temporaries
from tracefit.survey.jobs import ImageJob, Job
from tracefit.survey.pool import available_cores, default_workers, run_in_pool
from tracefit.survey.progress import Progress
from tracefit.survey.record import (  # noqa: F401 - kept importable from runner
    _draw_figures, _file_digest, failed_record, image_fingerprint, previous_record, process_image)
from tracefit.survey.scheduler import choose_scheduler

__all__ = [
    "SurveyResult",
    "ImageAnalysis",
    "run_survey",
    "analyse_image",
    "process_image",
    "image_fingerprint",
    "csv_rows",
    "write_results_csv",
    "software_versions",
    "available_cores",
    "CSV_COLUMNS",
    "EXIT_OK",
    "EXIT_SOME_FAILED",
    "EXIT_BAD_JOB",
]

EXIT_OK, EXIT_SOME_FAILED, EXIT_BAD_JOB = 0, 1, 2



# --------------------------------------------------------------------------- the survey
@dataclass
class SurveyResult:
    """Outcome of :func:`run_survey`.

    Attributes
    ----------
    job : Job
    out_dir : Path
    records : list of dict
        One per image, in job order (see :func:`process_image`).
    reused : list of str
        Names of images taken over from an earlier run (``resume``).
    csv_path, json_path, report_path : Path
        The files written (``report_path`` None without ``report``).
    run : dict
        Where it ran: ``where`` is ``"local processes"`` (with ``workers``) or ``"dask"`` (with
        ``scheduler``, ``workers``, ``threads``, ...); ``started_utc``, ``wall_s``.

    Examples
    --------
    :func:`run_survey` returns it; here for the bundled demo's first image:

    >>> import dataclasses, tempfile
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> job = load_job(demo_job_path())
    >>> job = dataclasses.replace(job, images=job.images[:1])
    >>> with tempfile.TemporaryDirectory() as d:
    ...     res = run_survey(job, d, workers=1, progress=False, figures=False, report=False)
    >>> res.n_ok, res.n_failed, res.exit_code, res.records[0]["name"]
    (1, 0, 0, 'coupon-A')
    """

    job: Job
    out_dir: Path
    records: list
    reused: list = field(default_factory=list)
    csv_path: Path | None = None
    json_path: Path | None = None
    report_path: Path | None = None
    run: dict = field(default_factory=dict)

    @property
    def n_failed(self) -> int:
        """Images that failed."""
        return sum(r["status"] != "ok" for r in self.records)

    @property
    def n_ok(self) -> int:
        """Images analysed."""
        return sum(r["status"] == "ok" for r in self.records)

    @property
    def exit_code(self) -> int:
        """0 when every image succeeded, 1 when some failed."""
        return EXIT_OK if self.n_failed == 0 else EXIT_SOME_FAILED

    def to_dict(self) -> dict:
        """The survey as plain values (the contents of ``results.json``)."""
        return {
            "tracefit_version": tracefit.__version__,
            "software": software_versions(),
            "caution": tracefit.CAUTION,
            "job": self.job.to_dict(),
            "out_dir": str(self.out_dir),
            "n_images": len(self.records),
            "n_ok": self.n_ok,
            "n_failed": self.n_failed,
            "reused": list(self.reused),
            "run": dict(self.run),
            "images": self.records,
        }


def software_versions() -> dict[str, str | None]:
    """Versions of Python and of the libraries the results depend on (for the audit trail).

    Returns
    -------
    dict of str -> str or None
        ``python``, ``platform`` and one entry per library (None where it is not installed).

    Examples
    --------
    >>> sorted(software_versions())
    ['matplotlib', 'numpy', 'opencv-python-headless', 'platform', 'python', 'scikit-image', 'scipy']
    """
    import platform
    from importlib import metadata

    out = {"python": platform.python_version(), "platform": platform.platform(terse=True)}
    for dist in ("numpy", "scipy", "opencv-python-headless", "scikit-image", "matplotlib"):
        try:
            out[dist] = metadata.version(dist)
        except metadata.PackageNotFoundError:
            out[dist] = None
    return out


def run_survey(job: Job, out_dir: str | Path, workers: int | None = None, resume: bool = False, progress: bool = True,
               analyse: Callable[[ImageJob], ImageAnalysis] | None = None, report: bool = True,
               figures: bool = True, scheduler: str | None = None) -> SurveyResult:
    """Run every image of a job and write the output folder, on local processes or a Dask cluster.

    Parameters
    ----------
    job : Job
        From :func:`tracefit.survey.jobs.load_job`.
    out_dir : str or Path
        Output folder (created). See the module docstring for its layout.
    workers : int, optional
        Local worker processes; default all cores (fewer when memory would not hold them). 1 runs
        in this process. Workers start from a fresh server process (``forkserver``; ``spawn``
        where that does not exist), so a script that calls this with ``workers > 1`` (or with a
        ``local:N`` scheduler) needs the usual ``if __name__ == "__main__":`` guard.
    resume : bool
        Reuse finished images of an earlier run into the same folder whose inputs and
        settings are unchanged; redo failed, missing and changed ones. Without it every
        image is redone.
    progress : bool
        Show a progress bar on stderr.
    analyse : callable, optional
        Replacement for :func:`analyse_image` (``ImageJob -> ImageAnalysis``), e.g. for
        tests; must be picklable (a module-level function) when ``workers > 1``.
    report : bool
        Write ``report.html`` as well.
    figures : bool
        Draw the overlay, stereogram and rose PNGs of each image (default); without them
        the run is faster and the report holds tables only.
    scheduler : str, optional
        Run on Dask instead (:mod:`tracefit.survey.cluster`, needs ``tracefit[cluster]``): a
        scheduler address ``"tcp://HOST:PORT"``, ``"local:N"`` for a LocalCluster of N workers
        here, or ``"none"`` for the local processes. Default: the job file's ``[run] scheduler``,
        else the environment variable ``TRACEFIT_SCHEDULER``, else local processes; an explicit
        ``workers`` alone keeps the run local. Records are written here as tasks finish, so
        ``resume`` works the same; the workers must see the input files at the same paths.

    Returns
    -------
    SurveyResult
        ``exit_code`` is 0 when every image succeeded and 1 when some failed.

    Raises
    ------
    TracefitInputError
        ``workers`` below 1, an output folder that cannot be written or is in use by
        another survey, or tables that cannot be written (finished images are kept); a
        scheduler that is not an address, Dask not installed, a scheduler that cannot be
        reached, or a worker that cannot read an input (see :func:`~tracefit.survey.cluster.run_on_cluster`).

    Examples
    --------
    The bundled demo (four coupons) in one process, tables only:

    >>> import os, tempfile
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> with tempfile.TemporaryDirectory() as d:
    ...     res = run_survey(load_job(demo_job_path()), d, workers=1, progress=False, figures=False, report=False)
    ...     files = sorted(os.listdir(d))
    >>> res.n_ok, res.exit_code, [len(r["families"]) for r in res.records], files
    (4, 0, [2, 2, 4, 1], ['images', 'results.csv', 'results.json'])
    """
    # Over 80 lines because of its numpydoc docstring; the code picks where to run, then runs under the lock.
    out_dir = Path(out_dir)
    choice = choose_scheduler(scheduler, getattr(job, "scheduler", None), workers_given=workers is not None)
    if choice.uses_dask:
        if workers is not None:
            raise TracefitInputError("workers sets local processes, scheduler a Dask cluster: give one of them "
                                     "(scheduler=\"local:N\" runs N Dask workers here)")
        from tracefit.survey.cluster import require_dask

        require_dask()
        n_workers = 0
    else:
        n_workers = int(workers) if workers else default_workers()
        if n_workers < 1:
            raise TracefitInputError(f"workers must be at least 1, got {workers}")
    prepare_output(out_dir)
    with SurveyLock(out_dir), TermAsInterrupt():
        remove_stale_temporaries(out_dir)
        try:
            return _survey(job, out_dir, n_workers, resume, progress, analyse, report, figures, choice)
        except BaseException:  # a worker ended mid-write leaves its temporary file: the lock is still ours
            remove_stale_temporaries(out_dir)
            raise


def _survey(job, out_dir, n_workers, resume, progress, analyse, report, figures, choice) -> SurveyResult:
    t0, started = time.perf_counter(), time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime())
    records: dict[str, dict] = {}
    reused = []
    todo = []
    for im in job.images:
        prev = previous_record(out_dir, im, figures) if resume else None
        if prev is not None:
            records[im.name] = prev
            reused.append(im.name)
        else:
            todo.append(im)
    bar = Progress(len(job.images), progress)
    for name in reused:
        bar.step(name, "done earlier (resumed)")

    if choice.uses_dask:
        if todo:
            from tracefit.survey.cluster import run_on_cluster

            run = run_on_cluster(choice, todo, out_dir, analyse, figures, records, bar)
        else:
            run = {"where": "dask", "scheduler": choice.address or f"local:{choice.local_workers}", "workers": 0}
    else:
        n_workers = min(n_workers, max(len(todo), 1))
        run = {"where": "local processes", "workers": n_workers}
        bar.start()
        if n_workers == 1:
            for im in todo:
                rec = process_image(im, out_dir, analyse, figures)
                records[im.name] = rec
                bar.step(im.name, rec["status"] if rec["status"] == "ok" else "FAILED")
        elif todo:
            run_in_pool(process_image, failed_record, todo, out_dir, analyse, figures, n_workers, records, bar)
    run.update(started_utc=started, wall_s=round(time.perf_counter() - t0, 3), images_run=len(todo))
    ordered = [records[im.name] for im in job.images]
    result = SurveyResult(job=job, out_dir=out_dir, records=ordered, reused=reused, run=run)
    try:
        result.csv_path = write_results_csv(ordered, out_dir / "results.csv")
        result.json_path = write_text(out_dir / "results.json", json.dumps(jsonable(result.to_dict()), indent=1))
        if report:
            from tracefit.viz.report import write_report

            result.report_path = write_report(_report_payload(result), out_dir / "report.html")
    except OSError as exc:  # a full disk or a folder made read-only under us: the images are safe
        raise TracefitInputError(f"could not write the survey's tables or report in {str(out_dir)!r}: "
                                 f"{exc.strerror or exc}; every finished image is kept, so free the space and "
                                 f"run again with --resume") from None
    return result


def statistics_age(out_dir: str | Path) -> int | None:
    """How many image records of a survey folder were written after its statistics; None without statistics.

    'tracefit stats' writes ``stats/statistics.json``; an image analysed after that (by a later
    survey run, resumed or not) makes them out of date until 'tracefit stats' runs again.

    Parameters
    ----------
    out_dir : str or Path
        The survey's output folder.

    Returns
    -------
    int or None
        Records newer than the statistics (0: they are current), or None when there are none.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     statistics_age(d) is None
    True
    """
    stats_file = Path(out_dir) / "stats" / "statistics.json"
    if not stats_file.is_file():
        return None
    written = stats_file.stat().st_mtime
    return sum(1 for rec in (Path(out_dir) / "images").glob("*.json") if rec.stat().st_mtime > written)


def _report_payload(result: SurveyResult) -> dict:
    """The report's content: the results, and what 'tracefit stats' wrote earlier in the folder.

    Statistics still describe the results when no image record was written after them (a
    resume that analysed nothing anew): the report keeps their section. Otherwise they are
    out of date and the report says so instead of dropping them without a word.
    """
    payload = result.to_dict()
    newer = statistics_age(result.out_dir)
    if newer == 0:
        try:
            payload["statistics"] = json.loads((result.out_dir / "stats" / "statistics.json").read_text(encoding="utf-8"))
        except (OSError, ValueError):
            payload["statistics_stale"] = "unreadable"
    elif newer:
        payload["statistics_stale"] = newer
    return payload


def csv_rows(records: list[dict]) -> list[dict]:
    """Results table rows: one per family; a failed image gives one row with its error, and an
    image without any band family one row with verdict "no bands found".

    Parameters
    ----------
    records : list of dict
        Per-image records (:func:`process_image`).

    Returns
    -------
    list of dict
        Rows keyed by the names of :data:`CSV_COLUMNS` (see :func:`tracefit.results.family_rows`).

    Examples
    --------
    >>> for row in csv_rows([{"name": "coupon-A", "status": "ok", "families": []},
    ...                      {"name": "coupon-D", "status": "failed", "error": "image file not found"}]):
    ...     print(row)
    {'image': 'coupon-A', 'status': 'ok', 'verdict': 'no bands found', 'error': ''}
    {'image': 'coupon-D', 'status': 'failed', 'error': 'image file not found'}
    """
    rows = []
    for rec in records:
        if rec.get("status") != "ok":
            rows.append({"image": rec["name"], "status": "failed", "error": rec.get("error")})
            continue
        rows.extend(family_rows(rec["name"], rec.get("families") or []))
    return rows


def _significant(x: float, digits: int) -> str:
    return f"{x:.{digits}g}"


def _csv_text(col: str, row: dict) -> str:
    """A table cell rounded to what the measurement supports (angles to their uncertainty)."""
    v = row.get(col)
    if v is None or v == "" or isinstance(v, (str, bool)):
        return "" if v is None else str(v)
    x = float(v)
    if not np.isfinite(x):
        return ""
    if col in ("angle_deg", "predicted_deg", "residual_deg"):
        sigma = row.get("angle_sigma_deg")
        sigma = float(sigma) if sigma not in (None, "") and float(sigma) > 0 else 0.1
        decimals = int(min(4, max(1, 1 - np.floor(np.log10(sigma)))))  # two significant digits of the sigma
        return f"{x:.{decimals}f}"
    if col in ("angle_sigma_deg", "spacing_um", "strength"):
        return _significant(x, 2 if col == "angle_sigma_deg" else 3)
    if col in ("probability", "second_probability", "p_none"):
        return f"{x:.4f}"
    if col == "schmid_factor":
        return f"{x:.3f}"
    if col in ("resolved_shear_mpa", "crss_mpa", "grain_x_px", "grain_y_px"):
        return f"{x:.1f}"
    return str(v)


def write_results_csv(records: list[dict], path: str | Path) -> Path:
    """Write the one-row-per-family results CSV atomically.

    Parameters
    ----------
    records : list of dict
        Per-image records (:func:`process_image`).
    path : str or Path
        The CSV file (written via a temporary file, then renamed).

    Returns
    -------
    Path
        The file written.

    Raises
    ------
    OSError
        The file cannot be written.

    Examples
    --------
    >>> import tempfile
    >>> from pathlib import Path
    >>> with tempfile.TemporaryDirectory() as d:
    ...     text = write_results_csv([{"name": "coupon-A", "status": "ok", "families": []}],
    ...                              Path(d) / "results.csv").read_text()
    >>> print(text.splitlines()[1])
    coupon-A,ok,,,,,,,,,,,,no bands found,,,,,,,,,,,,,,,,,
    """
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=CSV_COLUMNS, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for row in csv_rows(records):
        w.writerow({k: _csv_text(k, row) for k in CSV_COLUMNS})
    return write_text(path, buf.getvalue())
