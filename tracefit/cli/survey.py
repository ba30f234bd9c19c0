"""``tracefit survey JOB.toml``: run every image of a job file, write results and the report."""

from __future__ import annotations

from pathlib import Path
from typing import Annotated, Optional

import typer

from tracefit.cli import app

OutOpt = Annotated[Optional[Path], typer.Option("--out", "-o", help="Output folder (default: out/<job file name>).")]
WorkersOpt = Annotated[
    Optional[int], typer.Option("--workers", "-w", min=1, metavar="<n>", help="Worker processes (default: one per core, fewer when free memory would not hold them at about 1.2 GB each; 1 = no subprocesses).")
]
SchedulerOpt = Annotated[
    Optional[str], typer.Option("--scheduler", metavar="<address>", help="Run the images as tasks on a Dask scheduler: tcp://HOST:PORT, or local:N for N Dask workers on this machine, or none for local processes (default: the job file's [run] scheduler, else $TRACEFIT_SCHEDULER, else local processes). Needs pip install 'tracefit[cluster]'; see docs/scaling.md.")
]
ResumeOpt = Annotated[bool, typer.Option("--resume", help="Keep finished images of an earlier run into the same folder; redo the rest.")]
QuietOpt = Annotated[bool, typer.Option("--quiet", "-q", help="No progress bar.")]
JsonOpt = Annotated[bool, typer.Option("--json", help="Print one JSON summary object to stdout.")]


def summary_dict(result) -> dict:
    """The ``--json`` summary of a survey (the full record is in results.json)."""
    return {
        "out_dir": str(result.out_dir),
        "report": str(result.report_path),
        "results_csv": str(result.csv_path),
        "results_json": str(result.json_path),
        "n_images": len(result.records),
        "n_ok": result.n_ok,
        "n_failed": result.n_failed,
        "resumed": list(result.reused),
        "failed": [{"image": r["name"], "error": r.get("error")} for r in result.records if r["status"] != "ok"],
        "exit_code": result.exit_code,
    }


def print_summary(result, json_out: bool) -> None:
    import sys

    if json_out:
        from tracefit.cli.common import print_json

        print_json(summary_dict(result))
        return
    for r in result.records:
        if r["status"] != "ok":
            print(f"tracefit: image {r['name']} failed: {r.get('error')}", file=sys.stderr)
    n = len(result.records)
    print(f"{result.n_ok} of {n} image(s) analysed" + (f", {result.n_failed} failed" if result.n_failed else "")
          + (f" ({len(result.reused)} resumed)" if result.reused else ""))
    print(f"results: {result.csv_path}")
    print(f"report:  {result.report_path}")
    from tracefit.survey.runner import statistics_age

    newer = statistics_age(result.out_dir)
    if newer:
        print(f"note: {result.out_dir / 'stats'} was written before {newer} image(s) were analysed anew; "
              f"run 'tracefit stats {result.out_dir}' again", file=sys.stderr)


@app.command("survey")
def survey(
    job: Annotated[Path, typer.Argument(help="Job file (TOML) listing the images and their settings; see docs/job-file.md.")],
    out: OutOpt = None,
    workers: WorkersOpt = None,
    scheduler: SchedulerOpt = None,
    resume: ResumeOpt = False,
    quiet: QuietOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Run every image of a job file in parallel, here or on a Dask cluster; write results CSV/JSON, overlays and an HTML report.

    Exit code 0 when every image succeeded, 1 when some failed (reported and skipped), 2 for a bad job file or an unusable scheduler, 130 when interrupted (rerun with --resume).
    """
    from tracefit.errors import TracefitInputError
    from tracefit.survey import load_job
    from tracefit.survey import run_survey
    from tracefit.survey.scheduler import parse_scheduler

    import sys

    if scheduler is not None and workers is not None and parse_scheduler(scheduler).uses_dask:
        raise TracefitInputError("--workers sets local processes, --scheduler a Dask cluster: give one of them "
                                 "(--scheduler local:N runs N Dask workers here)")
    j = load_job(job)
    out_dir = out if out is not None else Path("out") / job.stem
    try:
        result = run_survey(j, out_dir, workers=workers, resume=resume, progress=not quiet, scheduler=scheduler)
    except KeyboardInterrupt:
        print(f"\ntracefit: survey interrupted; finished images are kept in {out_dir}: "
              f"run the same command with --resume to go on", file=sys.stderr)
        raise typer.Exit(130) from None
    print_summary(result, json_out)
    raise typer.Exit(result.exit_code)
