"""The report's statistics section, from the plain statistics (``SurveyStatistics.to_dict()``)."""

from __future__ import annotations

import base64
import html
from pathlib import Path

__all__ = ["stats_section"]


def _e(x) -> str:
    return html.escape("" if x is None else str(x))


def _num(x, nd=3) -> str:
    return "" if x is None else f"{x:.{nd}g}" if isinstance(x, float) else _e(x)


def _table(rows: list[dict], cols: list[tuple[str, str]], cls: str) -> str:
    head = "".join(f"<th>{_e(t)}</th>" for _, t in cols)
    body = "".join("<tr>" + "".join(f"<td>{_num(r.get(k))}</td>" for k, _ in cols) + "</tr>" for r in rows)
    return f'<table class="{cls}"><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>'


def _figure(path: Path, alt: str) -> str:
    try:
        data = path.read_bytes()
    except OSError:
        return ""
    b64 = base64.b64encode(data).decode("ascii")
    return (f'<a href="stats/{_e(path.name)}" title="full resolution"><img class="stats" alt="{_e(alt)}" '
            f'src="data:image/png;base64,{b64}"></a>')


def _interval(f: dict) -> str:
    lo = "0" if f.get("low") is None else f"{f['low']:.3g}"
    hi = "unbounded" if f.get("high") is None else f"{f['high']:.3g}"
    return f"{lo} to {hi}"


def stats_section(stats: dict, stats_dir: str | Path | None = None) -> str:
    """HTML of the statistics section: CRSS ratios with intervals, activity, ranks, onsets, figures.

    Parameters
    ----------
    stats : dict
        ``SurveyStatistics.to_dict()``.
    stats_dir : str or Path, optional
        Folder of the statistics figures (embedded when present).

    Returns
    -------
    str

    Examples
    --------
    >>> html = stats_section({"lattice": "hcp", "n_grains": 3, "reference": "{10-10}", "crss": {"families": [
    ...     {"label": "{10-10}", "name": "prismatic <a>", "mode": "slip", "estimate": 1.0, "low": 1.0, "high": 1.0,
    ...      "status": "reference"}]}, "activity": {"families": [], "ranks": []}, "series": [], "notes": []})
    >>> "Relative CRSS" in html, "{10-10}" in html
    (True, True)
    """
    crss = stats.get("crss") or {}
    act = stats.get("activity") or {}
    parts = [f'<h2 id="statistics">Statistics over the grains</h2><p>{_e(stats.get("n_grains"))} grain(s) of '
             f'{_e(stats.get("lattice"))}; drives in {_e(stats.get("unit", "Schmid factor"))} units. Model and '
             "assumptions: docs/statistics.md. A ratio is the CRSS of a family over that of the reference "
             f'family {_e(stats.get("reference"))}.</p>']
    if crss.get("families"):
        rows = [dict(f, interval=_interval(f)) for f in crss["families"]]
        parts.append("<h3>Relative CRSS (maximum likelihood, 95 % intervals)</h3>" + _table(
            rows, [("label", "family"), ("name", "system family"), ("mode", "mode"), ("estimate", "CRSS ratio"),
                   ("interval", "95 % interval"), ("soft_count", "families seen"), ("grains_tested", "grains tested"),
                   ("status", "what the data say")], "crss"))
    parts.append("<h3>Activity</h3>" + _table(act.get("families") or [], [
        ("label", "family"), ("mode", "mode"), ("grains_candidate", "grains (candidate)"),
        ("grains_most_stressed", "grains where most stressed"), ("seen_soft", "seen (soft)"),
        ("seen_identified", "seen (identified)"), ("grains_seen", "grains seen"),
        ("median_drive_active", "median drive, active"), ("median_drive_all", "median drive, all")], "activity"))
    parts.append("<h3>Was the most stressed system the one seen?</h3>" + _table(act.get("ranks") or [], [
        ("mode", "mode"), ("families_soft", "families (soft)"), ("fraction_most_stressed", "most stressed in grain"),
        ("fraction_most_stressed_in_mode", "most stressed of its mode"), ("mean_rank", "mean rank")], "ranks"))
    for s in stats.get("series") or []:
        parts.append(f"<h3>Series {_e(s['name'])}: onsets</h3><p>{_e(len(s.get('onsets') or []))} tracked "
                     f"families in {_e(s.get('n_grains'))} grains over {_e(len(s.get('strains') or []))} frames "
                     f"(strains {_e(', '.join(f'{x:g}' for x in s.get('strains') or []))}).</p>" + _table(
                         s.get("summary") or [], [
                             ("label", "family"), ("tracks", "tracks"), ("median_onset_strain", "median onset strain"),
                             ("rss_onset_mean_mpa", "RSS at onset, mean (MPa)"), ("rss_onset_sd_mpa", "sd (MPa)"),
                             ("rss_onset_min_mpa", "min"), ("rss_onset_max_mpa", "max")], "onsets"))
    if stats.get("notes"):
        parts.append("<h3>What the data could not tell</h3><ul>" + "".join(
            f"<li>{_e(n)}</li>" for n in stats["notes"]) + "</ul>")
    if stats_dir is not None:
        d = Path(stats_dir)
        figs = [_figure(d / n, n) for n in ("schmid-histograms.png", "crss-ratios.png", "onsets.png")]
        parts.append('<div class="figs">' + "".join(figs) + "</div>")
    return "\n".join(parts)

