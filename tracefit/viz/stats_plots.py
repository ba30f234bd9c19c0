"""Figures of a survey's statistics, drawn from their plain form (``SurveyStatistics.to_dict()``):
Schmid-factor histograms of active against all candidate systems per mode, the CRSS ratios with
their 95 % intervals, and the onset curves of in-situ series.
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

__all__ = ["schmid_histograms", "crss_ratio_figure", "onset_figure", "write_stats_figures", "write_statistics", "STATS_FIGURES"]

#: figure files :func:`write_stats_figures` writes (those that have data)
STATS_FIGURES = ("schmid-histograms.png", "crss-ratios.png", "onsets.png")


def _figure(size_in):
    from matplotlib.backends.backend_agg import FigureCanvasAgg
    from matplotlib.figure import Figure

    fig = Figure(figsize=size_in, dpi=100)
    FigureCanvasAgg(fig)
    return fig


def schmid_histograms(stats: dict):
    """Per mode: the drive of all candidate systems (outline) and of the active ones (filled), each
    normalised to its total, so that a shift to the right shows activity favouring stressed systems.

    Parameters
    ----------
    stats : dict
        ``SurveyStatistics.to_dict()`` (its ``activity.histograms`` and ``unit`` are used).

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> d = {"unit": "Schmid factor", "activity": {"histograms": {"slip": {"edges": [0, 0.25, 0.5],
    ...      "all": [10, 10], "active": [1, 4]}}}}
    >>> len(schmid_histograms(d).axes)
    1
    """
    hists = (stats.get("activity") or {}).get("histograms") or {}
    modes = sorted(hists) or ["slip"]
    fig = _figure((4.2 * len(modes), 3.2))
    for i, mode in enumerate(modes):
        ax = fig.add_subplot(1, len(modes), i + 1)
        h = hists.get(mode)
        if not h:
            continue
        e = np.asarray(h["edges"], float)
        for key, kw in (("all", dict(histtype="step", color="0.35", label="all candidate systems")),
                        ("active", dict(histtype="stepfilled", alpha=0.6, color="#c0392b", label="active (soft)"))):
            c = np.asarray(h[key], float)
            if c.sum() > 0:
                ax.hist(e[:-1], bins=e, weights=c / c.sum(), **kw)
        ax.set_xlabel(stats.get("unit", "Schmid factor") if stats.get("unit") != "MPa" else "resolved shear stress (MPa)")
        ax.set_ylabel("fraction")
        ax.set_title(f"{mode}: drive of active vs all systems", fontsize=10)
        ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return fig


def crss_ratio_figure(stats: dict):
    """CRSS ratios to the reference with their 95 % intervals (log scale; open ends as arrows).

    Parameters
    ----------
    stats : dict
        ``SurveyStatistics.to_dict()``.

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> d = {"reference": "{10-10}", "crss": {"families": [
    ...     {"label": "{10-10}", "estimate": 1.0, "low": 1.0, "high": 1.0, "status": "reference"},
    ...     {"label": "{0001}", "estimate": 1.5, "low": 1.3, "high": 1.7, "status": "estimated"},
    ...     {"label": "{11-22}", "estimate": None, "low": 3.0, "high": None, "status": "lower bound only"}]}}
    >>> fig = crss_ratio_figure(d); fig.axes[0].get_yscale()
    'log'
    """
    fams = ((stats.get("crss") or {}).get("families")) or []
    fig = _figure((max(3.5, 1.1 * len(fams) + 1.5), 3.4))
    ax = fig.add_subplot(1, 1, 1)
    ax.set_yscale("log")
    ax.axhline(1.0, color="0.6", lw=0.8)
    for i, f in enumerate(fams):
        est, lo, hi = f["estimate"], f.get("low"), f.get("high")
        # an estimate at the edge of the search (no upper bound) is drawn hollow: only its interval means anything
        if est is not None:  # None: the likelihood peaks at the edge of the search, only the interval counts
            ax.plot([i], [est], "o", color="#17324d", mfc="#17324d" if hi is not None else "white")
        ax.plot([i, i], [lo if lo is not None else 1 / 50, hi if hi is not None else 50], color="#17324d", lw=2)
        if hi is None:
            ax.annotate("", (i, 50), (i, 25), arrowprops=dict(arrowstyle="->", color="#17324d"))
        if lo is None:
            ax.annotate("", (i, 1 / 50), (i, 1 / 25), arrowprops=dict(arrowstyle="->", color="#17324d"))
    ax.set_xticks(range(len(fams)), [f["label"] for f in fams], fontsize=9)
    ax.set_xlim(-0.6, len(fams) - 0.4)
    ax.set_ylabel(f"CRSS / CRSS of {stats.get('reference')}")
    ax.set_title("Relative CRSS, 95 % intervals", fontsize=10)
    fig.tight_layout()
    return fig


def onset_figure(stats: dict):
    """Onset curves of every series: fraction of the grains with each family active against strain.

    Parameters
    ----------
    stats : dict
        ``SurveyStatistics.to_dict()`` (its ``series``).

    Returns
    -------
    matplotlib.figure.Figure

    Examples
    --------
    >>> d = {"series": [{"name": "ramp", "strains": [0, 0.01, 0.02], "curves": {"{10-10}": [0, 0.2, 0.5]}}]}
    >>> len(onset_figure(d).axes[0].lines)
    1
    """
    series = stats.get("series") or []
    fig = _figure((4.4 * max(1, len(series)), 3.2))
    for i, s in enumerate(series):
        ax = fig.add_subplot(1, max(1, len(series)), i + 1)
        x = np.asarray(s["strains"], float)
        for lab, y in s.get("curves", {}).items():
            ax.step(x, y, where="post", marker="o", ms=3, label=lab)
        ax.set_xlabel("strain")
        ax.set_ylabel("fraction of grains with the family active")
        ax.set_title(f"series {s['name']}: onsets", fontsize=10)
        ax.set_ylim(0, 1.05)
        if s.get("curves"):
            ax.legend(fontsize=8, loc="upper left")
    fig.tight_layout()
    return fig


def write_stats_figures(stats: dict, folder: str | os.PathLike) -> list[Path]:
    """Write the figures that have data into ``folder`` (:data:`STATS_FIGURES`).

    Parameters
    ----------
    stats : dict
        ``SurveyStatistics.to_dict()``.
    folder : str or Path
        Created if needed.

    Returns
    -------
    list of Path

    Examples
    --------
    >>> import tempfile
    >>> d = {"unit": "Schmid factor", "activity": {"histograms": {"slip": {"edges": [0, 0.25, 0.5],
    ...      "all": [10, 10], "active": [1, 4]}}}}
    >>> with tempfile.TemporaryDirectory() as t:
    ...     [p.name for p in write_stats_figures(d, t)]
    ['schmid-histograms.png']
    """
    from tracefit.viz.plots import save_figure

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = [save_figure(schmid_histograms(stats), folder / STATS_FIGURES[0], dpi=90)]
    if (stats.get("crss") or {}).get("families"):
        out.append(save_figure(crss_ratio_figure(stats), folder / STATS_FIGURES[1], dpi=90))
    if stats.get("series"):
        out.append(save_figure(onset_figure(stats), folder / STATS_FIGURES[2], dpi=90))
    return out


def write_statistics(stats, out_dir: str | Path, figures: bool = True, report: bool = True) -> dict:
    """Write a survey's statistics beside it: ``OUT/stats/`` tables and figures, and the report's section.

    Parameters
    ----------
    stats : SurveyStatistics
        From :func:`tracefit.survey_statistics` (anything with ``to_dict()`` and ``write_tables(folder)``).
    out_dir : str or Path
        The survey folder; the statistics go to ``OUT/stats/``.
    figures : bool
        Draw the figures.
    report : bool
        Write ``OUT/report.html`` again with the statistics section (needs ``OUT/results.json``).

    Returns
    -------
    dict
        ``tables``, ``figures`` (lists of paths) and ``report`` (path or None).

    Examples
    --------
    >>> import tempfile
    >>> class Fake:
    ...     def to_dict(self): return {"activity": {"histograms": {}}, "series": []}
    ...     def write_tables(self, folder): return []
    >>> with tempfile.TemporaryDirectory() as d:
    ...     out = write_statistics(Fake(), d, figures=False)
    >>> out["report"] is None
    True
    """
    import json

    from tracefit.viz.report import write_report

    out_dir = Path(out_dir)
    folder = out_dir / "stats"
    d = stats.to_dict()
    out = {"tables": [str(p) for p in stats.write_tables(folder)], "figures": [], "report": None}
    if figures:
        out["figures"] = [str(p) for p in write_stats_figures(d, folder)]
    res = out_dir / "results.json"
    if report and res.is_file():
        payload = json.loads(res.read_text(encoding="utf-8"))
        payload["statistics"] = d
        out["report"] = str(write_report(payload, out_dir / "report.html"))
    return out
