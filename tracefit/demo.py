"""The bundled demo: a fictional bracket coupon study, run end to end.

The demo lives inside the package (``tracefit/data/demo/``) so that a plain
``pip install .`` carries it: three synthetic micrographs drawn by
:mod:`tracefit.image.synthetic` from the predicted traces of known planes, a grain label image
and orientation table, the job file ``job.toml`` and ``truth.json`` (what was drawn).
``demo_images/make_demo.py`` in the source tree regenerates them.

Scenario (invented): Harrow Lane Instruments, a fictional maker of sensor mounts,
examines three coupons from a prototype bracket: an FCC single crystal in tension, a BCC
grain pair and an HCP alloy with {10-12} twins. A second job, ``series.toml``
(``demo_images/make_series_demo.py``), is an in-situ tensile series of a titanium-like strip at
four strain steps with a drifting stage: the statistics show when each family switched on and
estimate the relative CRSS.
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from importlib import resources
from pathlib import Path

from tracefit.errors import TracefitInputError

__all__ = ["demo_dir", "demo_job_path", "run_demo", "check_demo", "DemoCheck", "DEFAULT_DEMO_OUT",
           "series_job_path", "run_series_demo", "check_series_demo"]

DEFAULT_DEMO_OUT = "tracefit-demo-out"


def demo_dir() -> Path:
    """Folder of the bundled demo files (inside the installed package)."""
    p = Path(str(resources.files("tracefit") / "data" / "demo"))
    if not (p / "job.toml").is_file():
        raise TracefitInputError(f"the bundled demo is missing from {p}; reinstall tracefit")
    return p


def demo_job_path() -> Path:
    """The demo's job file."""
    return demo_dir() / "job.toml"


@dataclass(frozen=True)
class DemoCheck:
    """One drawn family of the demo and what the survey made of it."""

    image: str
    grain: int | None
    drawn_plane: tuple
    drawn_angle_deg: float
    found_plane: tuple | None
    probability: float | None

    @property
    def ok(self) -> bool:
        if self.found_plane is None:
            return False
        a, b = tuple(self.drawn_plane), tuple(self.found_plane)
        return a == b or a == tuple(-x for x in b)


def check_demo(result) -> list[DemoCheck]:
    """Compare the survey's identified planes with the planes the demo generator drew.

    For each drawn family the detected family nearest in angle (same image and grain) is
    taken, and its most probable candidate plane is compared with the drawn one (a plane
    and its negative are the same plane).
    """
    from tracefit.conventions import axial_difference

    truth = json.loads((demo_dir() / "truth.json").read_text(encoding="utf-8"))
    records = {r["name"]: r for r in (result.records if hasattr(result, "records") else result["images"])}
    out = []
    for name, drawn in truth["images"].items():
        rec = records.get(name) or {}
        fams = rec.get("families") or []
        for d in drawn:
            same = [f for f in fams if f.get("grain") == d["grain"]]
            best = min(same, key=lambda f: abs(axial_difference(f["angle_deg"], d["angle_deg"])), default=None)
            found = prob = None
            if best is not None and abs(axial_difference(best["angle_deg"], d["angle_deg"])) < 5.0:
                ident = best.get("identification") or {}
                c = ident.get("candidates") or []
                if c and not ident.get("unexplained"):
                    found, prob = tuple(c[0]["plane"]), c[0]["probability"]
            out.append(DemoCheck(name, d["grain"], tuple(d["plane"]), d["angle_deg"], found, prob))
    return out


def run_demo(out_dir=DEFAULT_DEMO_OUT, workers: int | None = None, progress: bool = True, resume: bool = False):
    """Run the survey on the bundled demo.

    Parameters
    ----------
    out_dir : str or Path
        Output folder (default ``tracefit-demo-out`` in the current folder).
    workers : int, optional
        Worker processes (default all cores).

    Returns
    -------
    tracefit.survey.runner.SurveyResult
    """
    from tracefit.survey import load_job
    from tracefit.survey import run_survey

    return run_survey(load_job(demo_job_path()), out_dir, workers=workers, resume=resume, progress=progress)


def series_job_path() -> Path:
    """The demo's in-situ series job file."""
    return demo_dir() / "series.toml"


def run_series_demo(out_dir, workers: int | None = None, progress: bool = True, resume: bool = False):
    """Run the survey on the demo's in-situ series and its statistics.

    Parameters
    ----------
    out_dir : str or Path
        Output folder of the series survey.
    workers : int, optional
        Worker processes (default all cores).

    Returns
    -------
    result : tracefit.survey.runner.SurveyResult
    stats : tracefit.stats.SurveyStatistics
    """
    from tracefit.stats import survey_statistics
    from tracefit.survey import load_job, run_survey

    result = run_survey(load_job(series_job_path()), out_dir, workers=workers, resume=resume, progress=progress)
    return result, survey_statistics(out_dir, "prismatic")


def check_series_demo(stats) -> list[dict]:
    """Each drawn family of the series beside the track found for it (same grain, angle within 3 deg).

    Returns
    -------
    list of dict
        ``grain``, ``drawn_onset_frame``, ``found_onset_frame`` (None if not found), ``system``, ``ok``.
    """
    from tracefit.conventions import axial_difference

    truth = json.loads((demo_dir() / "ramp_truth.json").read_text(encoding="utf-8"))
    onsets = [o for s in stats.series for o in s.onsets]
    out = []
    for gid, drawn in truth["grains"].items():
        for d in drawn:
            near = [o for o in onsets if o["grain"] == int(gid) and abs(axial_difference(o["angle_deg"], d["angle_deg"])) < 3]
            found = near[0] if near else None
            out.append({"grain": int(gid), "system": d["system"], "drawn_onset_frame": d["onset_frame"],
                        "found_onset_frame": None if found is None else found["onset_frame"],
                        "ok": found is not None and found["onset_frame"] == d["onset_frame"]})
    return out
