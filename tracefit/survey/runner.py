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
"""

from __future__ import annotations

import csv
import hashlib
import io
import json
import sys
import time
import traceback
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



# --------------------------------------------------------------------------- figures and record
def _draw_figures(im: ImageJob, a: ImageAnalysis, img_dir: Path) -> dict:
    from tracefit.viz import family_label, plots

    figs = {}
    labels = []
    for fam, ident in zip(a.families, a.identifications):
        lab = family_label(ident)
        if fam.get("grain") is not None:
            lab = f"G{fam['grain']} {lab}"
        labels.append(lab)
    fig = plots.overlay_figure(a.image, a.families, labels=labels, title=im.name, grain_labels=a.labels)
    figs["overlay"] = plots.save_figure(fig, img_dir / f"{im.name}.overlay.png", dpi=90).name
    angles = [f["angle_deg"] for f in a.families]
    weights = [f.get("n_bands") or 1 for f in a.families]
    fig = plots.rose_diagram(angles, weights=weights, labels=[f"F{i + 1}" for i in range(len(angles))])
    figs["rose"] = plots.save_figure(fig, img_dir / f"{im.name}.rose.png", dpi=90).name
    if getattr(a, "grain_map", None) is not None:  # grains from an orientation map: show the registration
        from tracefit.viz import registration_figure

        fig = registration_figure(a.image, a.grain_map)
        figs["grain_map"] = plots.save_figure(fig, img_dir / f"{im.name}.grain-map.png", dpi=90).name
    figs["stereograms"] = []
    for k, gr in enumerate(a.grains, start=1):
        matched, observed, mcolors = [], [], []
        palette = plots.family_colors(len(a.families))
        for i, (fam, ident) in enumerate(zip(a.families, a.identifications)):
            if fam.get("grain") != gr.get("grain"):
                continue
            observed.append(fam["angle_deg"])
            c = ident.get("candidates") or []
            if c and not ident.get("unexplained"):
                matched.append(tuple(c[0]["plane"]))
                mcolors.append(palette[i])
        planes = [{"plane": tuple(p["plane"]), "normal_sample": p["normal_image"]} for p in gr["predicted"]]
        title = "Wulff net (equal angle), upper hemisphere, sample frame = image frame"
        if gr.get("grain") is not None:
            title = f"Grain {gr['grain']}: " + title
        fig = plots.stereogram(planes, matched=matched, observed_deg=observed, title=title, matched_colors=mcolors)
        figs["stereograms"].append(plots.save_figure(fig, img_dir / f"{im.name}.stereo-{k}.png", dpi=90).name)
    return figs


def _file_digest(p: Path | None) -> str | None:
    if p is None:
        return None
    try:
        h = hashlib.sha256()
        with open(p, "rb") as f:
            for chunk in iter(lambda: f.read(1 << 20), b""):
                h.update(chunk)
        return h.hexdigest()
    except OSError:
        return "missing"


def image_fingerprint(im: ImageJob) -> str:
    """Hash of an image's input files, its settings and the tracefit version (resume key).

    Parameters
    ----------
    im : ImageJob
        One image of a job.

    Returns
    -------
    str
        SHA-256 hex digest (64 characters); a missing input file hashes as ``"missing"``.

    Examples
    --------
    Any change of a setting changes the fingerprint, so ``resume`` redoes that image:

    >>> import dataclasses
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> im = load_job(demo_job_path()).images[0]
    >>> fp = image_fingerprint(im)
    >>> len(fp), fp == image_fingerprint(im), fp == image_fingerprint(dataclasses.replace(im, pixel_size_um=0.25))
    (64, True, False)
    """
    d = {
        "settings": im.settings(),
        "files": {k: _file_digest(getattr(im, k)) for k in ("file", "mask", "labels", "orientations", "orientation_map", "control_points")},
        "version": tracefit.__version__,
    }
    return hashlib.sha256(json.dumps(d, sort_keys=True, default=str).encode()).hexdigest()


def process_image(im: ImageJob, out_dir: str | Path, analyse: Callable[[ImageJob], ImageAnalysis] | None = None,
                  figures: bool = True) -> dict:
    """Analyse one image, draw its figures and write its record; never raises for a bad image.

    ``figures=False`` skips the overlay, stereogram and rose PNGs (faster; the report then
    shows tables only).

    Parameters
    ----------
    im : ImageJob
        One image of a job.
    out_dir : str or Path
        The survey's output folder (``images/`` is created in it).
    analyse : callable, optional
        Replacement for :func:`analyse_image` (``ImageJob -> ImageAnalysis``).
    figures : bool
        Draw the overlay, stereogram and rose PNGs.

    Returns
    -------
    dict
        The record written to ``OUT/images/NAME.json``: ``status`` is ``"ok"`` or
        ``"failed"`` (with ``error``); ``families`` as :func:`tracefit.results.family_record`
        gives them, ``elapsed_s`` in seconds.

    Raises
    ------
    OSError
        The record cannot be written (a bad image itself never raises).

    Examples
    --------
    >>> import os, tempfile
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> im = load_job(demo_job_path()).images[0]
    >>> with tempfile.TemporaryDirectory() as d:
    ...     rec = process_image(im, d, figures=False)
    ...     written = sorted(os.listdir(os.path.join(d, "images")))
    >>> rec["status"], len(rec["families"]), written
    ('ok', 2, ['coupon-A.json'])
    """
    # Over 80 lines because of its numpydoc docstring; the code is one record built in a few steps.
    analyse = analyse or analyse_image
    out_dir = Path(out_dir)
    img_dir = out_dir / "images"
    img_dir.mkdir(parents=True, exist_ok=True)
    t0 = time.perf_counter()
    rec = {
        "name": im.name,
        "file": str(im.file),
        "line": im.line,
        "status": "ok",
        "error": None,
        "fingerprint": image_fingerprint(im),
        "inputs_sha256": {k: _file_digest(getattr(im, k)) for k in ("file", "mask", "labels", "orientations", "orientation_map", "control_points")
                          if getattr(im, k) is not None},
        "tracefit_version": tracefit.__version__,
        "settings": jsonable(im.settings()),
        "started_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
    }
    try:
        a = analyse(im)
        rec.update({
            "image_shape": list(np.asarray(a.image).shape[:2]),
            "families": [dict(f, index=i + 1, identification=ident)
                         for i, (f, ident) in enumerate(zip(a.families, a.identifications))],
            "grains": jsonable(a.grains),
            "warnings": list(a.warnings),
            "notes": list(getattr(a, "notes", []) or []),
            **(getattr(a, "extra", None) or {}),
        })
        rec["figures"] = _draw_figures(im, a, img_dir) if figures else {}
    except TracefitInputError as exc:
        rec.update(status="failed", error=str(exc))
    except MemoryError:
        rec.update(status="failed", error="out of memory while analysing this image")
    except Exception as exc:  # a bug or a broken file must not stop the survey
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" (in {Path(tb[-1].filename).name}:{tb[-1].lineno})" if tb else ""
        rec.update(status="failed", error=f"{type(exc).__name__}: {exc}{where}")
    rec["elapsed_s"] = round(time.perf_counter() - t0, 3)
    rec = jsonable(rec)
    write_text(img_dir / f"{im.name}.json", json.dumps(rec, indent=1))
    return rec


def _failed_record(im: ImageJob, out_dir: Path, error: str) -> dict:
    """The record of an image whose worker process died, written like any other."""
    rec = {"name": im.name, "file": str(im.file), "line": im.line, "status": "failed", "error": error,
           "fingerprint": image_fingerprint(im), "settings": jsonable(im.settings()),
           "tracefit_version": tracefit.__version__}
    write_text(Path(out_dir) / "images" / f"{im.name}.json", json.dumps(rec, indent=1))
    return rec


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
            "images": self.records,
        }


class _Progress:
    """A plain progress bar on stderr (redrawn in place on a terminal, one line per image otherwise)."""

    def __init__(self, total: int, enabled: bool, stream=None):
        self.total, self.done, self.enabled = total, 0, enabled
        self.stream = stream or sys.stderr
        self.tty = hasattr(self.stream, "isatty") and self.stream.isatty()
        self.t0 = time.perf_counter()

    def step(self, name: str, status: str) -> None:
        self.done += 1
        if not self.enabled:
            return
        width = 24
        filled = int(round(width * self.done / max(self.total, 1)))
        bar = "#" * filled + "-" * (width - filled)
        el = time.perf_counter() - self.t0
        msg = f"survey [{bar}] {self.done}/{self.total} {el:5.1f}s  {name}: {status}"
        if self.tty:
            self.stream.write("\r\033[K" + msg + ("\n" if self.done == self.total else ""))
        else:
            self.stream.write(msg + "\n")
        self.stream.flush()


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


def _previous(out_dir: Path, im: ImageJob, figures: bool) -> dict | None:
    p = out_dir / "images" / f"{im.name}.json"
    try:
        rec = json.loads(p.read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return None
    if rec.get("status") != "ok" or rec.get("fingerprint") != image_fingerprint(im):
        return None
    figs = rec.get("figures") or {}
    if not figs and not figures:
        return rec
    names = [figs.get("overlay"), figs.get("rose"), *(figs.get("stereograms") or [])]
    if not all(n and (out_dir / "images" / n).is_file() for n in names):
        return None
    return rec


def run_survey(job: Job, out_dir: str | Path, workers: int | None = None, resume: bool = False, progress: bool = True,
               analyse: Callable[[ImageJob], ImageAnalysis] | None = None, report: bool = True,
               figures: bool = True) -> SurveyResult:
    """Run every image of a job and write the output folder.

    Parameters
    ----------
    job : Job
        From :func:`tracefit.survey.jobs.load_job`.
    out_dir : str or Path
        Output folder (created). See the module docstring for its layout.
    workers : int, optional
        Worker processes; default all cores. 1 runs in this process. Workers start from a
        fresh server process (``forkserver``; ``spawn`` where that does not exist), so a
        script that calls this with ``workers > 1`` needs the usual
        ``if __name__ == "__main__":`` guard.
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

    Returns
    -------
    SurveyResult
        ``exit_code`` is 0 when every image succeeded and 1 when some failed.

    Raises
    ------
    TracefitInputError
        ``workers`` below 1, an output folder that cannot be written or is in use by
        another survey, or tables that cannot be written (finished images are kept).

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
    out_dir = Path(out_dir)
    n_workers = int(workers) if workers else default_workers()
    if n_workers < 1:
        raise TracefitInputError(f"workers must be at least 1, got {workers}")
    prepare_output(out_dir)
    with SurveyLock(out_dir), TermAsInterrupt():
        remove_stale_temporaries(out_dir)
        try:
            return _survey(job, out_dir, n_workers, resume, progress, analyse, report, figures)
        except BaseException:  # a worker ended mid-write leaves its temporary file: the lock is still ours
            remove_stale_temporaries(out_dir)
            raise


def _survey(job, out_dir, n_workers, resume, progress, analyse, report, figures) -> SurveyResult:
    records: dict[str, dict] = {}
    reused = []
    todo = []
    for im in job.images:
        prev = _previous(out_dir, im, figures) if resume else None
        if prev is not None:
            records[im.name] = prev
            reused.append(im.name)
        else:
            todo.append(im)
    bar = _Progress(len(job.images), progress)
    for name in reused:
        bar.step(name, "done earlier (resumed)")

    n_workers = min(n_workers, max(len(todo), 1))
    if n_workers == 1:
        for im in todo:
            rec = process_image(im, out_dir, analyse, figures)
            records[im.name] = rec
            bar.step(im.name, rec["status"] if rec["status"] == "ok" else "FAILED")
    elif todo:
        run_in_pool(process_image, _failed_record, todo, out_dir, analyse, figures, n_workers, records, bar)
    ordered = [records[im.name] for im in job.images]
    result = SurveyResult(job=job, out_dir=out_dir, records=ordered, reused=reused)
    try:
        result.csv_path = write_results_csv(ordered, out_dir / "results.csv")
        result.json_path = write_text(out_dir / "results.json", json.dumps(jsonable(result.to_dict()), indent=1))
        if report:
            from tracefit.viz.report import write_report

            result.report_path = write_report(result, out_dir / "report.html")
    except OSError as exc:  # a full disk or a folder made read-only under us: the images are safe
        raise TracefitInputError(f"could not write the survey's tables or report in {str(out_dir)!r}: "
                                 f"{exc.strerror or exc}; every finished image is kept, so free the space and "
                                 f"run again with --resume") from None
    return result


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
    coupon-A,ok,,,,,,,,,,,no bands found,,,,,,,,,,,,,,,,,
    """
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=CSV_COLUMNS, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for row in csv_rows(records):
        w.writerow({k: _csv_text(k, row) for k in CSV_COLUMNS})
    return write_text(path, buf.getvalue())
