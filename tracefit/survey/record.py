"""One survey image's record: analyse, draw its figures, write ``images/NAME.json`` last.

The local worker processes and the Dask tasks (:mod:`tracefit.survey.cluster`) build the record
with the same :func:`image_record`; the local route writes it in the worker, the cluster route
ships it (with the figure PNGs as bytes) back to the client, which writes it with the same
:func:`write_record`. The record is written after the figures, so it marks the image done and a
resumed survey (:func:`previous_record`) trusts an image only when its record and figures are all there.
"""

from __future__ import annotations

import hashlib
import json
import time
import traceback
from pathlib import Path
from typing import TYPE_CHECKING, Callable

import numpy as np

import tracefit
from tracefit.atomic import write_bytes, write_text
from tracefit.errors import TracefitInputError
from tracefit.results import jsonable
from tracefit.survey.analysis import ImageAnalysis, analyse_image

if TYPE_CHECKING:  # for the hints only
    from tracefit.survey.jobs import ImageJob

__all__ = ["image_fingerprint", "image_record", "process_image", "write_record", "figure_names", "previous_record",
           "failed_record", "INPUT_FIELDS"]

# The fields of an ImageJob that name input files (fingerprinted, and checked on a cluster's worker).
INPUT_FIELDS = ("file", "mask", "labels", "orientations", "orientation_map", "control_points")
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
        "files": {k: _file_digest(getattr(im, k)) for k in INPUT_FIELDS},
        "version": tracefit.__version__,
    }
    return hashlib.sha256(json.dumps(d, sort_keys=True, default=str).encode()).hexdigest()



def image_record(im: ImageJob, analyse: Callable[[ImageJob], ImageAnalysis] | None = None, figures: bool = True,
                 figure_dir: str | Path | None = None) -> dict:
    """Analyse one image and build its record, drawing its figures into ``figure_dir``; never raises for a bad image.

    Nothing else is written: :func:`write_record` writes the record (:func:`process_image` does both).

    Parameters
    ----------
    im : ImageJob
        One image of a job.
    analyse : callable, optional
        Replacement for :func:`~tracefit.survey.analysis.analyse_image` (``ImageJob -> ImageAnalysis``).
    figures : bool
        Draw the overlay, stereogram and rose PNGs (into ``figure_dir``, which is then required).
    figure_dir : str or Path, optional
        Folder for the PNGs (created); their names are in the record's ``figures``.

    Returns
    -------
    dict
        JSON-ready: ``status`` is ``"ok"`` or ``"failed"`` (with ``error``); ``families`` as
        :func:`tracefit.results.family_record` gives them, ``elapsed_s`` in seconds.

    Examples
    --------
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> rec = image_record(load_job(demo_job_path()).images[0], figures=False)
    >>> rec["name"], rec["status"], len(rec["families"]), rec["figures"]
    ('coupon-A', 'ok', 2, {})
    """
    # Over 80 lines because of its numpydoc docstring; the code is one record built in a few steps.
    analyse = analyse or analyse_image
    t0 = time.perf_counter()
    rec = {
        "name": im.name,
        "file": str(im.file),
        "line": im.line,
        "status": "ok",
        "error": None,
        "fingerprint": image_fingerprint(im),
        "inputs_sha256": {k: _file_digest(getattr(im, k)) for k in INPUT_FIELDS if getattr(im, k) is not None},
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
        if figures:
            fig_dir = Path(figure_dir)
            fig_dir.mkdir(parents=True, exist_ok=True)
            rec["figures"] = _draw_figures(im, a, fig_dir)
        else:
            rec["figures"] = {}
    except TracefitInputError as exc:
        rec.update(status="failed", error=str(exc))
    except MemoryError:
        rec.update(status="failed", error="out of memory while analysing this image")
    except Exception as exc:  # a bug or a broken file must not stop the survey
        tb = traceback.extract_tb(exc.__traceback__)
        where = f" (in {Path(tb[-1].filename).name}:{tb[-1].lineno})" if tb else ""
        rec.update(status="failed", error=f"{type(exc).__name__}: {exc}{where}")
    rec["elapsed_s"] = round(time.perf_counter() - t0, 3)
    return jsonable(rec)


def figure_names(rec: dict) -> list[str]:
    """The figure files a record names (overlay, rose, grain map, stereograms), in that order.

    Parameters
    ----------
    rec : dict
        An image record (:func:`image_record`).

    Returns
    -------
    list of str
        File names inside the survey's ``images/`` folder.

    Examples
    --------
    >>> figure_names({"figures": {"overlay": "a.overlay.png", "rose": "a.rose.png", "stereograms": ["a.stereo-1.png"]}})
    ['a.overlay.png', 'a.rose.png', 'a.stereo-1.png']
    """
    figs = rec.get("figures") or {}
    names = [figs.get("overlay"), figs.get("rose"), figs.get("grain_map"), *(figs.get("stereograms") or [])]
    return [n for n in names if n]


def write_record(out_dir: str | Path, rec: dict, files: dict[str, bytes] | None = None) -> dict:
    """Write an image's figure files, then its record ``images/NAME.json`` (each atomically).

    Parameters
    ----------
    out_dir : str or Path
        The survey's output folder.
    rec : dict
        The record (:func:`image_record`).
    files : dict of str -> bytes, optional
        Figure files to write into ``images/`` first (a cluster task's PNGs); None when the
        figures are already there.

    Returns
    -------
    dict
        ``rec``.

    Raises
    ------
    OSError
        A file cannot be written.

    Examples
    --------
    >>> import os, tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     _ = write_record(d, {"name": "x1", "status": "ok"}, {"x1.rose.png": b"png"})
    ...     print(sorted(os.listdir(os.path.join(d, "images"))))
    ['x1.json', 'x1.rose.png']
    """
    img_dir = Path(out_dir) / "images"
    for name, data in (files or {}).items():
        write_bytes(img_dir / Path(name).name, data)
    write_text(img_dir / f"{rec['name']}.json", json.dumps(rec, indent=1))
    return rec


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
        The record written to ``OUT/images/NAME.json`` (:func:`image_record`).

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
    img_dir = Path(out_dir) / "images"
    img_dir.mkdir(parents=True, exist_ok=True)
    return write_record(out_dir, image_record(im, analyse, figures, img_dir))


def failed_record(im: ImageJob, out_dir: str | Path, error: str) -> dict:
    """Write the record of an image whose worker died (or whose task was lost), like any other.

    Parameters
    ----------
    im : ImageJob
        The image.
    out_dir : str or Path
        The survey's output folder.
    error : str
        What happened, one line.

    Returns
    -------
    dict
        The record written (``status`` ``"failed"``).

    Examples
    --------
    >>> import tempfile
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> with tempfile.TemporaryDirectory() as d:
    ...     rec = failed_record(load_job(demo_job_path()).images[0], d, "worker process died")
    >>> rec["status"], rec["error"]
    ('failed', 'worker process died')
    """
    rec = {"name": im.name, "file": str(im.file), "line": im.line, "status": "failed", "error": error,
           "fingerprint": image_fingerprint(im), "settings": jsonable(im.settings()),
           "tracefit_version": tracefit.__version__}
    return write_record(out_dir, rec)


def previous_record(out_dir: str | Path, im: ImageJob, figures: bool) -> dict | None:
    """An earlier run's record of this image, if it can be reused (``resume``), else None.

    Reusable: status ``"ok"``, the same fingerprint (inputs, settings, version) and, when
    figures are wanted or were drawn, every figure file present.

    Parameters
    ----------
    out_dir : str or Path
        The survey's output folder.
    im : ImageJob
        The image.
    figures : bool
        Whether this run draws figures.

    Returns
    -------
    dict or None

    Examples
    --------
    >>> import tempfile
    >>> from tracefit.demo import demo_job_path
    >>> from tracefit.survey import load_job
    >>> im = load_job(demo_job_path()).images[0]
    >>> with tempfile.TemporaryDirectory() as d:
    ...     before = previous_record(d, im, figures=False)
    ...     _ = process_image(im, d, figures=False)
    ...     after = previous_record(d, im, figures=False)
    >>> before, after["name"]
    (None, 'coupon-A')
    """
    out_dir = Path(out_dir)
    try:
        rec = json.loads((out_dir / "images" / f"{im.name}.json").read_text(encoding="utf-8"))
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
