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
    """Run the whole job on the bundled demo: synthetic coupons of a fictional bracket study, then a
    small in-situ series with its statistics (onsets and relative CRSS).

    Writes the results and a self-contained HTML report, checks the identified planes
    against the planes the demo was drawn with, and prints where the report is.
    """
    from tracefit.demo import DEFAULT_DEMO_OUT, check_demo, demo_job_path, run_demo

    out_dir = out if out is not None else Path(DEFAULT_DEMO_OUT)
    if not quiet and not json_out:
        print(f"tracefit demo: job {demo_job_path()}", file=sys.stderr)
    result = run_demo(out_dir, workers=workers, progress=not quiet)
    checks = check_demo(result)
    series_result, series_stats, series_checks = _series(out_dir / "series", workers, quiet, json_out)
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
        d["series_demo"] = {"out_dir": str(out_dir / "series"), "reference": series_stats.crss.reference,
                            "crss_ratios": series_stats.crss.ratios(), "onset_check": series_checks}
        print_json(d)
    else:
        print_summary(result, False)
        n_ok = sum(c.ok for c in checks)
        print(f"demo check: {n_ok} of {len(checks)} drawn band families identified as the plane they were drawn from")
        print(f"open the report: {result.report_path.resolve().as_uri()}")
        _print_series(series_stats, series_checks, series_result)
    code = max(result.exit_code, series_result.exit_code)
    if code == 0 and not (all(c.ok for c in checks) and all(c["ok"] for c in series_checks)):
        code = 1
    raise typer.Exit(code)


def _series(folder: Path, workers, quiet: bool, json_out: bool):
    """The demo's in-situ series: survey, statistics (tables, figures, report section) and the onset check."""
    from tracefit.demo import check_series_demo, run_series_demo, series_job_path
    from tracefit.viz.stats_plots import write_statistics

    if not quiet and not json_out:
        print(f"tracefit demo: in-situ series, job {series_job_path()}", file=sys.stderr)
    result, stats = run_series_demo(folder, workers=workers, progress=not quiet)
    write_statistics(stats, folder)
    return result, stats, check_series_demo(stats)


def _print_series(stats, checks, result) -> None:
    s = stats.series[0]
    n_ok = sum(c["ok"] for c in checks)
    print(f"in-situ series {s.name}: {len(s.onsets)} families tracked over strains "
          f"{', '.join(f'{x:g}' for x in s.strains)}; {n_ok} of {len(checks)} drawn families found switching on "
          "at the frame they were drawn in")
    for row in s.summary:
        rss = "" if row["rss_onset_mean_mpa"] is None else (
            f", resolved shear at onset {row['rss_onset_mean_mpa']:.0f} MPa"
            + ("" if row["rss_onset_sd_mpa"] is None else f" (sd {row['rss_onset_sd_mpa']:.0f})"))
        print(f"  {row['label']:10s} {row['system_family']:28s} {row['tracks']} track(s), median onset strain "
              f"{row['median_onset_strain']:g}{rss}")
    for f in stats.crss.families:
        if f["status"] == "reference":
            continue
        hi = "unbounded" if f["high"] is None else f"{f['high']:.2g}"
        lo = "0" if f["low"] is None else f"{f['low']:.2g}"
        est = "no estimate" if f["estimate"] is None else f"{f['estimate']:.2g}"
        print(f"  CRSS {f['label']} / {stats.crss.reference}: {est} (95 % {lo} to {hi}; {f['status']})")
    print(f"series report: {result.report_path.resolve().as_uri()}")
