"""``tracefit demo``: run the survey on the bundled (fictional) demo and say where the report is."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from tracefit.cli import app
from tracefit.cli.survey import JsonOpt, QuietOpt, WorkersOpt, print_summary


@app.command("demo")
def demo(
    out: Annotated[Optional[Path], typer.Option("--out", "-o", help="Output folder (default: ./tracefit-demo-out).")] = None,
    workers: WorkersOpt = None,
    quiet: QuietOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Run the whole job on the bundled demo: three synthetic coupons of a fictional bracket study.

    Writes the results and a self-contained HTML report, checks the identified planes
    against the planes the demo was drawn with, and prints where the report is.
    """
    from tracefit.demo import DEFAULT_DEMO_OUT, check_demo, demo_job_path, run_demo

    out_dir = out if out is not None else Path(DEFAULT_DEMO_OUT)
    if not quiet and not json_out:
        print(f"tracefit demo: job {demo_job_path()}", file=sys.stderr)
    result = run_demo(out_dir, workers=workers, progress=not quiet)
    checks = check_demo(result)
    if json_out:
        from tracefit.cli.common import print_json
        from tracefit.cli.survey import summary_dict

        d = summary_dict(result)
        d["demo_check"] = [
            {"image": c.image, "grain": c.grain, "drawn_plane": list(c.drawn_plane),
             "found_plane": None if c.found_plane is None else list(c.found_plane),
             "probability": c.probability, "ok": c.ok}
            for c in checks
        ]
        print_json(d)
    else:
        print_summary(result, False)
        n_ok = sum(c.ok for c in checks)
        print(f"demo check: {n_ok} of {len(checks)} drawn band families identified as the plane they were drawn from")
        print(f"open the report: {result.report_path.resolve().as_uri()}")
    code = result.exit_code
    if code == 0 and not all(c.ok for c in checks):
        code = 1
    raise typer.Exit(code)
