"""From a survey folder to material statistics: :func:`survey_statistics` and its result object."""

from __future__ import annotations

import csv
import io
import json
from dataclasses import dataclass, field
from pathlib import Path

from tracefit.errors import TracefitInputError
from tracefit.stats.activity import ActivityTables, activity_tables
from tracefit.stats.crss import CrssFit, fit_crss
from tracefit.stats.data import grain_cases, read_survey
from tracefit.stats.series import SeriesOnsets, track_series

__all__ = ["SurveyStatistics", "survey_statistics", "TABLE_FILES"]

#: the CSV files :meth:`SurveyStatistics.write_tables` writes
TABLE_FILES = ("activity.csv", "events.csv", "ranks.csv", "crss.csv", "onsets.csv", "onset_summary.csv")


@dataclass
class SurveyStatistics:
    """Statistics of a survey: activity tables, relative CRSS, onsets of in-situ series.

    Attributes
    ----------
    path : Path
        The survey folder.
    title : str
    lattice : str
        The lattice the statistics are about (``"hcp c/a=1.587"``).
    activity : ActivityTables
    crss : CrssFit or None
        None when no grain had a family to fit to (``notes`` says so).
    series : list of SeriesOnsets
    n_grains : int
        Grains counted (each grain of a series once).
    notes : list of str
        What was left out and why, and what the data could not separate.

    Examples
    --------
    >>> from tracefit.stats import simulate_population
    >>> cases = simulate_population({"basal": 1.5, "prismatic": 1.0}, 60, seed=1)
    >>> st = SurveyStatistics(Path("sim"), "simulated", cases[0].lattice, activity_tables(cases),
    ...                       fit_crss(cases, "prismatic"), [], len(cases))
    >>> sorted(st.to_dict()["crss_ratios"]), st.to_dict()["reference"], list(st.to_frame()["label"])
    (['{0001}', '{10-10}'], '{10-10}', ['{0001}', '{10-10}'])
    """

    path: Path
    title: str
    lattice: str
    activity: ActivityTables
    crss: CrssFit | None
    series: list
    n_grains: int
    notes: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """Plain values: ``crss_ratios`` (label -> estimate, low, high), ``reference``, the tables."""
        from tracefit.results import jsonable

        return jsonable({
            "survey": str(self.path), "title": self.title, "lattice": self.lattice, "n_grains": self.n_grains,
            "unit": self.activity.unit,
            "reference": None if self.crss is None else self.crss.reference,
            "crss_ratios": {} if self.crss is None else self.crss.ratios(),
            "crss": None if self.crss is None else self.crss.to_dict(),
            "activity": self.activity.to_dict(),
            "series": [s.to_dict() for s in self.series],
            "notes": self.notes,
        })

    def to_frame(self):
        """A pandas DataFrame, one row per system family: activity counts beside the CRSS ratio."""
        import pandas as pd

        crss = {f["label"]: f for f in (self.crss.families if self.crss else [])}
        rows = []
        for f in self.activity.families:
            c = crss.get(f["label"], {})
            rows.append({**f, "crss_ratio": c.get("estimate"), "crss_low": c.get("low"), "crss_high": c.get("high"),
                         "crss_status": c.get("status")})
        return pd.DataFrame(rows)

    def write_tables(self, folder: str | Path) -> list[Path]:
        """Write the tables as CSV (:data:`TABLE_FILES`) and everything as ``statistics.json``.

        Parameters
        ----------
        folder : str or Path
            Created if needed.

        Returns
        -------
        list of Path
            The files written.
        """
        from tracefit.atomic import write_text

        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        onsets = [o for s in self.series for o in s.onsets]
        summary = [dict(row, series=s.name) for s in self.series for row in s.summary]
        tables = {"activity.csv": self.activity.families, "events.csv": self.activity.events,
                  "ranks.csv": self.activity.ranks, "crss.csv": self.crss.families if self.crss else [],
                  "onsets.csv": onsets, "onset_summary.csv": summary}
        out = []
        for name, rows in tables.items():
            out.append(write_text(folder / name, _csv(rows)))
        out.append(write_text(folder / "statistics.json", json.dumps(self.to_dict(), indent=1)))
        return out


def _csv(rows: list[dict]) -> str:
    cols = list(dict.fromkeys(k for r in rows for k in r if k != "onset"))
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=cols, extrasaction="ignore", lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: (" ".join(str(x) for x in v) if isinstance(v, list) else ("" if v is None else v))
                    for k, v in r.items() if k in cols})
    return buf.getvalue()


def _pick_lattice(cases_by_lattice: dict, lattice: str | None, notes: list) -> str:
    if lattice is not None:
        hits = [k for k in cases_by_lattice if k == lattice or k.split()[0] == lattice.strip().lower()]
        if not hits:
            raise TracefitInputError(f"the survey has no analysed grains of lattice {lattice!r}; it has "
                                     + ", ".join(cases_by_lattice))
        key = hits[0]
    else:
        key = max(cases_by_lattice, key=lambda k: len(cases_by_lattice[k]))
    for other, cs in cases_by_lattice.items():
        if other != key:
            notes.append(f"{len(cs)} grain(s) of lattice {other} left out: the statistics are about {key} "
                         "(choose another with --lattice, or lattice= in the API)")
    return key


def survey_statistics(out_dir: str | Path, reference: str | None = None, *, lattice: str | None = None,
                      method: str = "profile", n_boot: int = 200, seed: int = 0) -> SurveyStatistics:
    """Activity tables, relative CRSS with 95 % intervals and series onsets of a survey folder.

    Parameters
    ----------
    out_dir : str or Path
        The folder ``tracefit survey`` wrote.
    reference : str, optional
        The reference family of the CRSS ratios: a label as in ``results.csv``'s
        ``plane_family`` (``{10-10}``), a system family name, a trade name (``prismatic``) or a
        mode; default the family seen most.
    lattice : str, optional
        Which lattice to treat when the survey has several (default the one with most grains).
    method : {"profile", "bootstrap"}
        How the 95 % intervals are found.
    n_boot : int
        Bootstrap refits (``method="bootstrap"``).
    seed : int
        Seed of the bootstrap.

    Returns
    -------
    SurveyStatistics

    Raises
    ------
    TracefitInputError
        No survey in the folder, an image without a load, a failed frame of a series, no
        analysed grain, an unknown reference or lattice.

    Examples
    --------
    >>> import tempfile
    >>> with tempfile.TemporaryDirectory() as d:
    ...     survey_statistics(d)
    Traceback (most recent call last):
    ...
    tracefit.errors.TracefitInputError: no survey in ... (expected results.json or images/*.json written by 'tracefit survey')
    """
    # Over 80 lines through its docstring; the body reads the folder, groups grains and fits.
    data = read_survey(out_dir)
    notes: list[str] = []
    failed = [r for r in data.records if r.get("status") != "ok"]
    for r in failed:
        ser = (r.get("settings") or {}).get("series")
        if ser:
            raise TracefitInputError(f"series {ser.get('name')!r}: frame {r['name']!r} failed in the survey: "
                                     f"{r.get('error')}")
    if failed:
        notes.append(f"{len(failed)} image(s) failed in the survey and are left out: "
                     + ", ".join(r["name"] for r in failed))
    plain, series = [], {}
    for r in data.records:
        if r.get("status") != "ok":
            continue
        ser = (r.get("settings") or {}).get("series")
        if ser:
            series.setdefault(ser["name"], []).append(r)
        else:
            plain.extend(grain_cases(r))
    onsets: list[SeriesOnsets] = []
    cases = list(plain)
    for frames in series.values():
        sc, so = track_series(frames)
        cases += sc
        onsets.append(so)
    if not cases:
        raise TracefitInputError(f"no analysed grain with an orientation in the survey {str(data.path)!r}")
    by_lat: dict = {}
    for c in cases:
        by_lat.setdefault(c.lattice, []).append(c)
    key = _pick_lattice(by_lat, lattice, notes)
    cases = by_lat[key]
    units = {c.unit for c in cases}
    if len(units) > 1:
        raise TracefitInputError("the survey mixes axis loads (Schmid factors) and stress loads (MPa) for "
                                 f"{key}; give every image the same kind of load")
    act = activity_tables(cases)
    crss = None
    if any(o.weight > 0 for c in cases for o in c.observations):
        crss = fit_crss(cases, reference, method=method, n_boot=n_boot, seed=seed)
        notes += crss.notes
    else:
        notes.append("no grain has an identified band family: no CRSS ratios")
    for s in onsets:
        notes += [f"series {s.name}: {n}" for n in s.notes]
    return SurveyStatistics(data.path, data.title, key, act, crss, [s for s in onsets if s.n_grains], len(cases), notes)
