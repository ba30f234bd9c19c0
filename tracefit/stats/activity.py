"""Activity tables: which system families were seen, in how many grains, at what Schmid factors, and
whether the most stressed system was the one that slipped (its rank within the grain).

Counts come twice: soft (identification probabilities summed, times ``1 - p_none``) and hard
(families whose verdict is "identified", credited to their most probable plane). A family seen on a
plane is credited to the most driven system on that plane, as ``results.csv`` does.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tracefit.stats.data import GrainCase, family_labels

__all__ = ["ActivityTables", "activity_tables", "family_credit"]


def family_credit(case: GrainCase, ob) -> dict[str, float]:
    """How much one observed family counts for each system family of its grain (soft count).

    Parameters
    ----------
    case : GrainCase
    ob : Observation

    Returns
    -------
    dict
        System family name -> ``weight * probability`` of its most probable plane in the family.

    Examples
    --------
    >>> from tracefit.stats import simulate_population
    >>> case = simulate_population({"basal": 1.5, "prismatic": 1.0}, 1, seed=2)[0]
    >>> sum(family_credit(case, case.observations[0]).values())
    1.0
    """
    out: dict[str, float] = {}
    for s, a in zip(case.systems, ob.system_weights):
        if a > 0:
            out[s.name] = max(out.get(s.name, 0.0), float(ob.weight * a))
    return out


def _rank(values: np.ndarray, v: float) -> int:
    return int(1 + np.sum(values > v + 1e-9))


@dataclass
class ActivityTables:
    """The activity tables of a survey (plain rows; ``to_frame`` gives pandas).

    Attributes
    ----------
    families : list of dict
        One per system family: ``label``, ``name``, ``mode``, ``grains_candidate`` (grains where
        it was a candidate), ``grains_most_stressed`` (grains where it held the most driven
        system), ``seen_soft`` / ``seen_identified`` (families seen: summed probabilities /
        identified), ``grains_seen_soft`` / ``grains_seen`` (grains with it), and the median drive
        of its active systems beside that of all its candidate systems.
    events : list of dict
        One per observed family: image, grain, family, credited system family and plane, its
        probability, its drive, the grain's largest drive, and the rank of its drive in the
        grain (1 = the most stressed system), overall and among systems of its mode.
    ranks : list of dict
        Per mode of the active system and for all: soft number of families, the fraction whose
        system was the most stressed (rank 1), mean rank.
    histograms : dict
        Per mode: ``edges`` and the counts of ``all`` candidate systems' drives and of the
        ``active`` ones (soft).
    unit : str
        ``"Schmid factor"`` or ``"MPa"``.

    Examples
    --------
    >>> from tracefit.stats import simulate_population
    >>> t = activity_tables(simulate_population({"basal": 1.5, "prismatic": 1.0}, 40, seed=1))
    >>> [f["label"] for f in t.families], t.families[0]["grains_candidate"]
    (['{0001}', '{10-10}'], 40)
    """

    families: list
    events: list
    ranks: list
    histograms: dict
    unit: str = "Schmid factor"
    notes: list = field(default_factory=list)

    def to_frame(self, table: str = "families"):
        """A pandas DataFrame of one table: ``"families"`` (default), ``"events"`` or ``"ranks"``."""
        import pandas as pd

        return pd.DataFrame(getattr(self, table))

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        from tracefit.results import jsonable

        return jsonable({"families": self.families, "events": self.events, "ranks": self.ranks,
                         "histograms": self.histograms, "unit": self.unit, "notes": self.notes})


def _edges(cases, unit):
    if unit == "Schmid factor":
        return np.linspace(-0.5 if any(s.mode == "twin" for c in cases for s in c.systems) else 0.0, 0.5, 21)
    hi = max((float(np.max(np.abs(c.drive))) for c in cases), default=1.0)
    return np.linspace(-hi if any(s.mode == "twin" for c in cases for s in c.systems) else 0.0, hi, 21)


def activity_tables(cases: list[GrainCase]) -> ActivityTables:
    """Activity tables over the grains of a survey (one lattice).

    Parameters
    ----------
    cases : list of GrainCase

    Returns
    -------
    ActivityTables

    Examples
    --------
    >>> from tracefit.stats import simulate_population
    >>> t = activity_tables(simulate_population({"basal": 1.5, "prismatic": 1.0, "pyramidal-ca-2": 3.0}, 100, seed=1))
    >>> sum(f["seen_identified"] for f in t.families), t.ranks[-1]["mode"]
    (100, 'all')
    """
    # Over 80 lines: three tables filled in one pass over the grains, then summarised; kept together
    # so that every count reads the same grains the same way.
    systems = {s.name: s for c in cases for s in c.systems}
    labels = family_labels(list(systems.values()))
    unit = cases[0].unit if cases else "Schmid factor"
    fam = {n: {"label": labels[n], "name": n, "mode": s.mode, "grains_candidate": 0, "grains_most_stressed": 0,
               "seen_soft": 0.0, "seen_identified": 0, "grains_seen_soft": 0.0, "grains_seen": 0,
               "_active": [], "_w": [], "_all": []} for n, s in systems.items()}
    events = []
    edges = _edges(cases, unit)
    hist: dict = {}
    for c in cases:
        names = [s.name for s in c.systems]
        modes = np.array([s.mode for s in c.systems])
        top = names[int(np.argmax(c.drive))]
        fam[top]["grains_most_stressed"] += 1
        not_seen: dict[str, float] = {}
        hard: set = set()
        for n in dict.fromkeys(names):
            fam[n]["grains_candidate"] += 1
            fam[n]["_all"].extend(c.drive[[i for i, m in enumerate(names) if m == n]].tolist())
        for mode in set(modes.tolist()):
            h = hist.setdefault(mode, {"edges": edges.tolist(), "all": np.zeros(len(edges) - 1),
                                       "active": np.zeros(len(edges) - 1)})
            h["all"] += np.histogram(np.clip(c.drive[modes == mode], edges[0], edges[-1]), edges)[0]
        for ob in c.observations:
            for n, cr in family_credit(c, ob).items():
                fam[n]["seen_soft"] += cr
                not_seen[n] = not_seen.get(n, 1.0) * (1.0 - min(cr, 1.0))
            if ob.best_system is None:
                continue
            s = c.systems[ob.best_system]
            v = float(c.drive[ob.best_system])
            f = fam[s.name]
            f["_active"].append(v)
            f["_w"].append(ob.weight * ob.probability)
            if ob.identified:
                f["seen_identified"] += 1
                hard.add(s.name)
            hist[s.mode]["active"] += ob.weight * ob.probability * np.histogram(np.clip([v], edges[0], edges[-1]), edges)[0]
            events.append({"image": ob.image, "grain": c.grain, "family": ob.family, "label": labels[s.name],
                           "system_family": s.name, "mode": s.mode, "plane": list(ob.plane or []),
                           "angle_deg": round(ob.angle_deg, 2),
                           "probability": round(ob.probability, 4), "weight": round(ob.weight, 4),
                           "identified": ob.identified, "drive": round(v, 4),
                           "grain_max_drive": round(float(np.max(c.drive)), 4),
                           "rank_in_grain": _rank(c.drive, v), "rank_in_mode": _rank(c.drive[modes == s.mode], v),
                           "onset": ob.onset})
        for n, q in not_seen.items():
            fam[n]["grains_seen_soft"] += 1.0 - q
        for n in hard:
            fam[n]["grains_seen"] += 1
    rows = []
    for f in fam.values():
        act, w, al = np.array(f.pop("_active")), np.array(f.pop("_w")), np.array(f.pop("_all"))
        f["seen_soft"] = round(f["seen_soft"], 3)
        f["grains_seen_soft"] = round(f["grains_seen_soft"], 3)
        f["median_drive_active"] = None if act.size == 0 else round(float(np.median(act)), 4)
        f["median_drive_all"] = None if al.size == 0 else round(float(np.median(al)), 4)
        rows.append(f)
    ranks = []
    for mode in [*sorted({e["mode"] for e in events}), "all"]:
        ev = [e for e in events if mode in ("all", e["mode"])]
        w = np.array([e["weight"] * e["probability"] for e in ev])
        r = np.array([e["rank_in_grain"] for e in ev], float)
        rm = np.array([e["rank_in_mode"] for e in ev], float)
        tot = float(w.sum())
        ranks.append({"mode": mode, "families_soft": round(tot, 3),
                      "fraction_most_stressed": None if tot == 0 else round(float(w @ (r == 1)) / tot, 4),
                      "fraction_most_stressed_in_mode": None if tot == 0 else round(float(w @ (rm == 1)) / tot, 4),
                      "mean_rank": None if tot == 0 else round(float(w @ r) / tot, 3)})
    hist = {m: {"edges": h["edges"], "all": h["all"].tolist(), "active": h["active"].tolist()} for m, h in hist.items()}
    return ActivityTables(rows, events, ranks, hist, unit)
