"""In-situ series: band families tracked across frames of increasing strain, and their onsets.

Every frame of a series shares one grain map, so a grain keeps its id. A family seen in a frame
continues a track of the same grain whose angle lies within three combined standard deviations
of the detection (``3 sqrt(s1^2 + s2^2)``, at least 0.5 deg); otherwise it starts a new track. A
track counts from the first frame it is seen in and persists (it is not lost when a later frame
misses it). Its onset lies between the strain of the frame before and that of the first frame; with
applied stresses, the resolved shear stress at onset ``stress x Schmid factor`` is a direct CRSS
estimate for the grain (an upper bound; the frame before gives a lower one). The identification of
a track is the most confident of its frames.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from tracefit.conventions import axial_difference
from tracefit.stats.data import GrainCase, family_labels, grain_cases

__all__ = ["SeriesOnsets", "track_series"]


@dataclass
class SeriesOnsets:
    """The tracked families of one series and their onsets.

    Attributes
    ----------
    name : str
    strains : list of float
        Strain of each frame, in order.
    stresses : list of float or None
        Applied stress of each frame, MPa (None where not given).
    onsets : list of dict
        One per track: ``grain``, ``track``, ``label``, ``system_family``, ``mode``, ``plane``, ``angle_deg``,
        ``probability``, ``identified``, ``onset_frame``, ``onset_strain``, ``previous_strain``,
        ``stress_mpa``, ``previous_stress_mpa``, ``schmid_factor``, ``rss_onset_mpa``,
        ``rss_previous_mpa``, ``frames_seen``.
    summary : list of dict
        Per system family: tracks, median onset strain and the resolved shear stress at onset
        (mean, standard deviation, min, max, MPa) where stresses were given.
    curves : dict
        Label -> fraction of the series' grains in which the family is active at each frame.
    n_grains : int
        Grains of the series' grain map that were analysed.
    notes : list of str

    Examples
    --------
    >>> s = SeriesOnsets("ramp", [0.0, 0.01], [0.0, 100.0], [], [], {}, 3)
    >>> s.to_dict()["name"], s.to_frame().shape
    ('ramp', (0, 0))
    """

    name: str
    strains: list
    stresses: list
    onsets: list
    summary: list
    curves: dict
    n_grains: int
    notes: list = field(default_factory=list)
    registration: list = field(default_factory=list)

    def to_dict(self) -> dict:
        """Plain values (JSON-ready)."""
        from tracefit.results import jsonable

        return jsonable({"name": self.name, "strains": self.strains, "stresses": self.stresses,
                         "onsets": self.onsets, "summary": self.summary, "curves": self.curves,
                         "n_grains": self.n_grains, "notes": self.notes, "registration": self.registration})

    def to_frame(self):
        """A pandas DataFrame, one row per tracked family."""
        import pandas as pd

        return pd.DataFrame(self.onsets)


def _matches(track, ob) -> bool:
    tol = max(0.5, 3.0 * float(np.hypot(track["sigma"], ob.angle_sigma_deg)))
    return abs(float(axial_difference(ob.angle_deg, track["angle"]))) <= tol


def _score(ob) -> float:
    return ob.weight * ob.probability


def track_series(frames: list[dict]) -> tuple[list[GrainCase], SeriesOnsets]:
    """Track the families of a series' frames per grain and find each one's onset.

    Parameters
    ----------
    frames : list of dict
        The per-image records of the series' frames (``settings.series`` set), any order.

    Returns
    -------
    cases : list of GrainCase
        One per grain of the series, its observations the tracks (each with ``onset`` set):
        what the activity tables and the CRSS fit count, each grain once.
    onsets : SeriesOnsets

    Examples
    --------
    Two frames of one grain: a family at 30 deg from the first frame on, one at 100 deg from
    the second:

    >>> def fam(i, a):
    ...     return {"grain": None, "index": i, "angle_deg": a, "angle_sigma_deg": 0.3,
    ...             "identification": {"candidates": [{"plane": [1, 1, 1], "probability": 1.0}], "p_none": 0.0}}
    >>> base = {"status": "ok", "grains": [{"grain": None, "euler_deg": [0, 0, 0], "status": "analysed"}]}
    >>> def frame(k, fams):
    ...     st = {"lattice": "fcc", "modes": ["slip"], "load": "z",
    ...           "series": {"name": "ramp", "frame": k, "strain": 0.01 * (k - 1), "stress_mpa": 100.0 * k}}
    ...     return dict(base, name=f"ramp-f{k}", settings=st, families=fams)
    >>> cases, s = track_series([frame(1, [fam(1, 30.0)]), frame(2, [fam(1, 30.2), fam(2, 100.0)])])
    >>> [(o["onset_frame"], o["onset_strain"]) for o in s.onsets]
    [(1, 0.0), (2, 0.01)]
    """
    # Over 80 lines: tracking, the onset table and its summary in one pass; split, the three would
    # have to share every intermediate.
    frames = sorted(frames, key=lambda r: r["settings"]["series"]["frame"])
    info = [r["settings"]["series"] for r in frames]
    name = info[0]["name"]
    strains = [float(i["strain"]) for i in info]
    stresses = [None if i.get("stress_mpa") is None else float(i["stress_mpa"]) for i in info]
    grains: dict = {}
    tracks: dict = {}
    for k, rec in enumerate(frames):
        for case in grain_cases(rec):
            grains.setdefault(case.grain, case)
            open_tracks = tracks.setdefault(case.grain, [])
            used: set = set()
            for ob in sorted(case.observations, key=_score, reverse=True):
                if ob.weight <= 0:
                    continue
                hit = [t for t in open_tracks if id(t) not in used and _matches(t, ob)]
                if hit:
                    t = min(hit, key=lambda t: abs(float(axial_difference(ob.angle_deg, t["angle"]))))
                    t.update(angle=ob.angle_deg, sigma=ob.angle_sigma_deg, seen=t["seen"] + 1)
                    if _score(ob) > _score(t["ob"]):
                        t["ob"] = ob
                else:
                    t = {"angle": ob.angle_deg, "sigma": ob.angle_sigma_deg, "ob": ob, "frame": k, "seen": 1}
                    open_tracks.append(t)
                used.add(id(t))
    systems = {s.name: s for c in grains.values() for s in c.systems}
    labels = family_labels(list(systems.values()))
    cases, onsets, notes = [], [], []
    for gid, case in grains.items():
        out = GrainCase(name, gid, case.lattice, case.systems, case.drive, case.unit, case.euler_deg, series=name)
        for n, t in enumerate(tracks.get(gid, []), start=1):
            ob, k = t["ob"], t["frame"]
            prev = k - 1 if k > 0 else None
            onset = {"frame": k + 1, "strain": strains[k], "previous_strain": None if prev is None else strains[prev],
                     "stress_mpa": stresses[k], "previous_stress_mpa": None if prev is None else stresses[prev]}
            ob.onset, ob.family = onset, f"T{n}"
            out.observations.append(ob)
            if ob.best_system is None:
                continue
            s = case.systems[ob.best_system]
            m = float(case.drive[ob.best_system])
            axis = case.unit == "Schmid factor"
            onsets.append({
                "series": name, "grain": gid, "track": f"T{n}", "label": labels[s.name], "system_family": s.name,
                "mode": s.mode, "plane": list(ob.plane or []), "angle_deg": round(ob.angle_deg, 2),
                "probability": round(ob.probability, 4),
                "identified": ob.identified, "onset_frame": k + 1, "onset_strain": strains[k],
                "previous_strain": onset["previous_strain"], "stress_mpa": stresses[k],
                "previous_stress_mpa": onset["previous_stress_mpa"], "schmid_factor": round(m, 4) if axis else None,
                "rss_onset_mpa": None if stresses[k] is None or not axis else round(stresses[k] * m, 2),
                "rss_previous_mpa": None if prev is None or stresses[prev] is None or not axis
                else round(stresses[prev] * m, 2),
                "frames_seen": t["seen"]})
        cases.append(out)
    if any(s is not None for s in stresses) and cases and cases[0].unit != "Schmid factor":
        notes.append("the load is a stress tensor: the frames' applied stresses are not used for onset stresses")
    summary, curves = _summary(onsets, strains, len(cases))
    reg = [r.get("series_frame", {}).get("registration") for r in frames]
    return cases, SeriesOnsets(name, strains, stresses, onsets, summary, curves, len(cases), notes, reg)


def _summary(onsets: list, strains: list, n_grains: int):
    summary, curves = [], {}
    for lab in dict.fromkeys(o["label"] for o in onsets):
        rows = [o for o in onsets if o["label"] == lab]
        st = np.array([o["onset_strain"] for o in rows], float)
        rss = np.array([o["rss_onset_mpa"] for o in rows if o["rss_onset_mpa"] is not None], float)
        summary.append({"label": lab, "system_family": rows[0]["system_family"], "mode": rows[0]["mode"],
                        "tracks": len(rows), "median_onset_strain": float(np.median(st)),
                        "rss_onset_mean_mpa": float(rss.mean()) if rss.size else None,
                        "rss_onset_sd_mpa": float(rss.std(ddof=1)) if rss.size > 1 else None,
                        "rss_onset_min_mpa": float(rss.min()) if rss.size else None,
                        "rss_onset_max_mpa": float(rss.max()) if rss.size else None})
        grains_on = [{o["grain"] for o in rows if o["onset_strain"] <= e} for e in strains]
        curves[lab] = [round(len(g) / max(n_grains, 1), 4) for g in grains_on]
    return summary, curves
