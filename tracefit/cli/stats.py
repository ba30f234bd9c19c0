"""``tracefit stats OUT``: statistics of a survey folder (activity, relative CRSS, series onsets)."""

from __future__ import annotations

import sys
from pathlib import Path
from typing import Annotated, Optional

import typer

from tracefit.cli import app
from tracefit.cli.survey import JsonOpt, QuietOpt


@app.command("stats")
def stats(
    out: Annotated[Path, typer.Argument(help="The survey's output folder (what 'tracefit survey JOB --out OUT' wrote).")],
    reference: Annotated[Optional[str], typer.Option("--reference", "-r", help="Reference family of the CRSS ratios: a plane family as in results.csv ('{10-10}'), a system family or trade name ('prismatic'), or a mode; default the family seen most.")] = None,
    lattice: Annotated[Optional[str], typer.Option("--lattice", "-l", help="Which lattice to treat when the survey has several (default the one with most grains).")] = None,
    interval: Annotated[str, typer.Option("--interval", help="95 % intervals from the profile likelihood ('profile') or a bootstrap over grains ('bootstrap').")] = "profile",
    n_boot: Annotated[int, typer.Option("--boot", min=20, metavar="<n>", help="Bootstrap refits (--interval bootstrap).")] = 200,
    seed: Annotated[int, typer.Option("--seed", help="Seed of the bootstrap.")] = 0,
    no_figures: Annotated[bool, typer.Option("--no-figures", help="Tables only: no figures.")] = False,
    no_report: Annotated[bool, typer.Option("--no-report", help="Leave report.html as it is (no statistics section).")] = False,
    quiet: QuietOpt = False,
    json_out: JsonOpt = False,
) -> None:
    """Activity of each system family, relative CRSS with 95 % intervals and the onsets of in-situ
    series, from a survey's output folder. Writes OUT/stats/ (CSV tables, statistics.json,
    figures) and adds a statistics section to OUT/report.html.
    """
    from tracefit.stats import survey_statistics
    from tracefit.viz.stats_plots import write_statistics

    if interval not in ("profile", "bootstrap"):
        from tracefit.errors import TracefitInputError

        raise TracefitInputError(f"--interval must be 'profile' or 'bootstrap', got {interval!r}")
    if not quiet and not json_out:
        print(f"tracefit stats: reading {out}", file=sys.stderr)
    st = survey_statistics(out, reference, lattice=lattice, method=interval, n_boot=n_boot, seed=seed)
    files = write_statistics(st, out, figures=not no_figures, report=not no_report)
    if json_out:
        from tracefit.cli.common import print_json

        print_json({**st.to_dict(), "files": files})
        return
    d = st.to_dict()
    print(f"{d['n_grains']} grain(s) of {d['lattice']}")
    for f in (d.get("crss") or {}).get("families", []):
        lo = "0" if f["low"] is None else f"{f['low']:.3g}"
        hi = "unbounded" if f["high"] is None else f"{f['high']:.3g}"
        est = "-" if f["estimate"] is None else f"{f['estimate']:.3g}"
        print(f"  {f['label']:16s} {f['name']:28s} CRSS ratio {est}  [{lo}, {hi}]  {f['status']}")
    for s in d["series"]:
        print(f"series {s['name']}: {len(s['onsets'])} tracked families in {s['n_grains']} grains")
    for n in d["notes"]:
        print(f"note: {n}")
    print(f"tables:  {Path(out) / 'stats'}")
    if files["report"]:
        print(f"report:  {files['report']}")
