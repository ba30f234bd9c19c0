"""From posterior probabilities to verdicts: the listed candidates, "unexplained", ambiguity and
the plain-language notes and separation hints of every family.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np

from tracefit.crystal.indices import restate_label
from tracefit.matching.candidates import CandidateSet, plane_key
from tracefit.matching.observed import ObservedFamily
from tracefit.matching.likelihood import logsumexp
from tracefit.matching.results import Candidate, FamilyIdentification, ModeShare, format_plane
from tracefit.predict import NEAR_SURFACE_DEG

# GrainPosterior, family_verdict and flag_all_unexplained serve tracefit.matching.assign only.
__all__ = ["separation_hints"]


@dataclass
class GrainPosterior:
    """Everything the verdicts of one grain's families are read from.

    Attributes
    ----------
    cands : CandidateSet
        P candidates.
    post : ndarray, shape (F, P + 1)
        Posterior probabilities; the last column is "none" (artefact share removed).
    p_art : ndarray, shape (F,)
        Posterior probability of the surface artefact.
    art_angle : list (F) of float or None
        Angle of the artefact direction each family would sit on.
    logw, resid, sig : ndarray, shape (F, P + 1), (F, P), (F, P)
        Log weights, residuals (deg) and total sigmas (deg).
    ang, incl, psig : ndarray, shape (P,)
        Predicted angle, inclination and predicted-trace sigma of every candidate, degrees.
    systems_ranked : list (P) of list of SystemChoice
    load : None, LoadAxis or stress array
    """

    cands: CandidateSet
    post: np.ndarray
    p_art: np.ndarray
    art_angle: list
    logw: np.ndarray
    resid: np.ndarray
    sig: np.ndarray
    ang: np.ndarray
    incl: np.ndarray
    psig: np.ndarray
    systems_ranked: list
    load: Any


def _best_system(gp: GrainPosterior, c: int):
    ranked = gp.systems_ranked[c]
    return ranked[0] if ranked and gp.load is not None and ranked[0].active_sense else None


def _plane_candidate(gp: GrainPosterior, f: int, members: np.ndarray, p_plane: float) -> Candidate:
    """One plane row: the plane's probability, its most probable mode's fields, the split by mode."""
    post = gp.post[f]
    order = members[np.argsort(-post[members], kind="stable")]
    c = int(order[0])
    modes = [ModeShare(mode=gp.cands.modes[k], family=gp.cands.families[k],
                       share=float(post[k] / p_plane) if p_plane > 0 else 1.0 / len(order),
                       probability=float(post[k]), best_system=_best_system(gp, k), systems=gp.systems_ranked[k])
             for k in order]
    return Candidate(
        plane=gp.cands.planes[c],
        family=gp.cands.families[c],
        mode=gp.cands.modes[c],
        predicted_deg=float(gp.ang[c]),
        residual_deg=float(gp.resid[f, c]),
        probability=float(p_plane),
        sigma_deg=float(gp.sig[f, c]),
        predicted_sigma_deg=float(gp.psig[c]),
        inclination_deg=float(gp.incl[c]),
        best_system=_best_system(gp, c),
        systems=gp.systems_ranked[c],
        near_surface=bool(gp.incl[c] < NEAR_SURFACE_DEG),
        log_likelihood=float(logsumexp(gp.logw[f, members])),
        modes=modes,
    )


def _listed_candidates(gp: GrainPosterior, f: int, threshold: float) -> list[Candidate]:
    """Family f's candidate planes above the report threshold, most probable first.

    Plane first: a plane's probability is summed over the modes on it, and the split between
    them is the second level (:class:`ModeShare`). The best plane is listed even below the
    threshold when the family is explained.
    """
    P = len(gp.cands)
    post = gp.post[f]
    p_other = float(post[P]) + float(gp.p_art[f])
    ids = np.asarray(gp.cands.plane_ids, int)
    p_plane = np.bincount(ids, weights=post[:P], minlength=int(ids.max()) + 1)
    out = []
    for q in np.argsort(-p_plane, kind="stable"):
        if p_plane[q] < threshold and not (len(out) == 0 and p_plane[q] > 0 and p_other < 0.5):
            break
        out.append(_plane_candidate(gp, f, np.flatnonzero(ids == q), float(p_plane[q])))
    return out


def _is_ambiguous(cl: list[Candidate], ratio: float) -> bool:
    """A second distinct plane holds at least ``ratio`` of the best plane's summed probability."""
    plane_p: dict = {}
    for c in cl:
        k = plane_key(c.plane)
        plane_p[k] = plane_p.get(k, 0.0) + c.probability
    ps = sorted(plane_p.values(), reverse=True)
    return len(ps) > 1 and ps[1] >= ratio * ps[0]


def _notes(cl: list[Candidate], pn: float, pa: float, reason: str | None, art_angle) -> list[str]:
    notes = []
    if reason is not None and reason.startswith("surface artefact"):
        notes.append(
            f"p_artefact = {pa:.2f}: this family keeps one image angle ({float(art_angle):.1f} deg) in several grains "
            "whose crystallography predicts different traces there; a polishing scratch or other surface mark "
            "runs straight through grain boundaries, slip and twin traces do not"
        )
    elif reason is not None:
        notes.append(
            f"no candidate explains this family (p_none = {pn:.2f}): a scratch or polishing mark, "
            "a wrong orientation, a wrong frame alignment, or a system outside the selected modes"
        )
    for c in cl:
        if c.near_surface:
            notes.append(f"plane {format_plane(c.plane)} lies within {NEAR_SURFACE_DEG:g} deg of the surface: its trace is ill-defined")
            break
    return notes


def family_verdict(o: ObservedFamily, f: int, gp: GrainPosterior, g: np.ndarray, threshold: float,
                   ratio: float) -> FamilyIdentification:
    """The verdict of family ``f`` of a grain.

    Parameters
    ----------
    o : ObservedFamily
        The family.
    f : int
        Its row in ``gp``.
    gp : GrainPosterior
        The grain's posteriors.
    g : ndarray, shape (3, 3)
        The grain's orientation.
    threshold : float
        Report threshold of candidate probabilities.
    ratio : float
        Ambiguity ratio.

    Returns
    -------
    FamilyIdentification
    """
    P = len(gp.cands)
    pn, pa = float(gp.post[f, P]), float(gp.p_art[f])
    art_angle = gp.art_angle[f]
    cl = _listed_candidates(gp, f, threshold)
    unexplained = pn + pa >= 0.5
    reason = None
    if unexplained:
        if pa > pn and art_angle is not None:
            reason = f"surface artefact (continues across grains at {float(art_angle):.1f} deg)"
        else:
            reason = "no candidate fits"
    ambiguous = (not unexplained) and _is_ambiguous(cl, ratio)
    sep = separation_hints(cl, gp.load, g, gp.cands) if (ambiguous or _mixed_modes(cl)) and not unexplained else []
    r = FamilyIdentification(o.angle_deg, o.angle_sigma_deg, o.grain, o.source, o.label,
                             bool(unexplained), bool(ambiguous), pn, cl, sep, _notes(cl, pn, pa, reason, art_angle))
    r.p_artefact = pa
    r.unexplained_reason = reason
    bc = getattr(o, "boundary_continuation", None)
    r.boundary_continuation = bc
    if bc is not None and bc >= 0.5:
        r.notes.append(
            f"{100 * bc:.0f} % of its line ends run on straight into the neighbouring grain with the same contrast: "
            "typical of a surface scratch (a slip or twin band stops at the boundary or turns); not used in the probabilities"
        )
    if getattr(o, "sought_at_deg", None) is not None and o.search_width_deg < 180.0:
        r.notes.append(
            f"looked for only within {o.search_width_deg / 2:g} deg of the predicted trace at {o.sought_at_deg:.2f} deg "
            "(a guided search): its nearness to that trace is no evidence, and p_none is weighed per trace searched"
            + ("; found on line sums of the band response, its significance a bound on those sums (not the "
               "ridge-pixel count of other families)" if getattr(o, "sought_on", None) == "line sums" else "")
        )
    r.artefact_angle_deg = None if art_angle is None or pa < threshold else float(art_angle)
    r.nearest = _nearest(gp, f)
    r.margin = _margin(gp, f)
    return r


def _nearest(gp: GrainPosterior, f: int, n: int = 3) -> list[dict]:
    """The ``n`` planes whose predicted traces are nearest the family, in sigmas, whatever their probability."""
    P = len(gp.cands)
    z = np.abs(gp.resid[f, :P]) / np.maximum(gp.sig[f, :P], 1e-9)
    ids = np.asarray(gp.cands.plane_ids, int)
    out, seen = [], set()
    for c in np.argsort(z, kind="stable"):
        if ids[c] in seen:
            continue
        seen.add(ids[c])
        out.append({"plane": [int(x) for x in gp.cands.planes[c]], "family": restate_label(gp.cands.families[c]),
                    "mode": gp.cands.modes[c], "predicted_deg": round(float(gp.ang[c]), 3),
                    "residual_deg": round(float(gp.resid[f, c]), 3), "n_sigma": round(float(z[c]), 2)})
        if len(out) == n:
            break
    return out


def _margin(gp: GrainPosterior, f: int) -> float | None:
    """Best plane's probability over the runner-up plane's."""
    P = len(gp.cands)
    ids = np.asarray(gp.cands.plane_ids, int)
    p_plane = np.sort(np.bincount(ids, weights=gp.post[f, :P], minlength=int(ids.max()) + 1))[::-1]
    if len(p_plane) < 2 or p_plane[0] <= 0:
        return None
    if p_plane[1] <= p_plane[0] * 1e-12:  # (also when that product underflows to zero)
        return 1e12  # capped: beyond that the margin means "certain"
    return float(p_plane[0] / p_plane[1])


def flag_all_unexplained(results: list[FamilyIdentification], grain: Any) -> None:
    """Add a note to every family of a grain when several families and none fits.

    Then the orientation (or the frame) is the likelier culprit than the families.

    Parameters
    ----------
    results : list of FamilyIdentification
        All verdicts of one grain (changed in place).
    grain : optional
        The grain key (None for a single-orientation image).
    """
    if len(results) >= 2 and all(r.unexplained and r.p_artefact < r.p_none for r in results):
        where = "this grain" if grain is None else f"grain {grain}"
        for r in results:
            r.notes.append(
                f"all {len(results)} families of {where} are unexplained: its orientation, the frame alignment or the "
                "phase is probably wrong; tracefit find-orientation can propose orientations from these angles"
            )


def _mixed_modes(cl: list[Candidate]) -> bool:
    """The best plane carries more than one mode with a share worth mentioning (>= 1 %)."""
    if not cl:
        return False
    if cl[0].modes:
        return sum(m.share >= 0.01 for m in cl[0].modes) > 1
    k0 = plane_key(cl[0].plane)
    return any(plane_key(c.plane) == k0 and c.mode != cl[0].mode for c in cl[1:])


def _mode_rows(cl: list[Candidate]) -> list:
    """(plane, mode, best_system) of every mode listed on the candidates (or the rows themselves)."""
    rows = []
    for c in cl:
        if c.modes:
            rows += [(c.plane, m.mode, m.best_system) for m in c.modes if m.share >= 0.01]
        else:
            rows.append((c.plane, c.mode, c.best_system))
    return rows


def _plane_hints(pl: list[Candidate], load: Any) -> list[str]:
    """Hints that separate several distinct planes."""
    names = ", ".join(f"{format_plane(c.plane)} {c.mode}" for c in pl)
    hints = [f"several planes predict this trace within the uncertainty: {names}"]
    incs = [c.inclination_deg for c in pl]
    if max(incs) - min(incs) >= 10.0:
        hints.append(
            "plane inclination differs ("
            + ", ".join(f"{format_plane(c.plane)}: {c.inclination_deg:.0f} deg" for c in pl)
            + "): band width or step height on the surface, or a section, separates them"
        )
    if load is not None:
        ms = [(c, c.best_system.schmid_factor if c.best_system else 0.0) for c in pl]
        vals = [m for _, m in ms]
        if max(vals) - min(vals) >= 0.1:
            hints.append(
                "Schmid factor under the load differs ("
                + ", ".join(f"{format_plane(c.plane)}: {m:.2f}" for c, m in ms)
                + "): the higher one is the likelier to have been active"
            )
    else:
        hints.append("the Schmid factor under the known load would help: give the load")
    hints.append("a trace on a second surface of known geometry fixes the plane normal (two-face analysis)")
    return hints


def _mode_hints(rows: list, load: Any) -> list[str]:
    """Hints that separate slip from twin; ``rows`` from :func:`_mode_rows`."""
    hints = []
    if load is not None:
        tw = [r for r in rows if r[1] == "twin"]
        pos = [r for r in tw if r[2] is not None]
        if pos and len(pos) < len(tw):
            hints.append("twin polarity: only some twin candidates are sheared in their twinning sense by this load")
        elif not pos:
            hints.append("twin polarity: the load shears every twin candidate against its twinning sense, favouring slip")
    hints.append(
        "slip or twin on the same trace: twins are lens-shaped bands with a lattice misorientation "
        "(check the band interior by diffraction or etching); slip lines are not"
    )
    return hints


def separation_hints(cl: list[Candidate], load: Any, g: np.ndarray | None = None,
                     cands: CandidateSet | None = None) -> list[str]:
    """Plain-language criteria that would separate the candidates in a set.

    Parameters
    ----------
    cl : list of Candidate
        The listed candidate planes, most probable first (the first six are considered, with
        the modes on each).
    load : None, LoadAxis or stress array
        The load, if known.
    g, cands : optional
        Unused; kept for callers that pass the grain's orientation and candidates.

    Returns
    -------
    list of str
        One sentence per criterion (empty when there is nothing to separate).

    Examples
    --------
    >>> a = Candidate((1, 1, 1), "{111}", "slip", 135.0, 0.2, 0.5, 1.0, 1.0, 54.7)
    >>> b = Candidate((1, 1, -1), "{111}", "slip", 135.0, 0.2, 0.5, 1.0, 1.0, 54.7)
    >>> separation_hints([a, b], None)[0]
    'several planes predict this trace within the uncertainty: (111) slip, (11-1) slip'
    """
    top = cl[:6]
    planes: dict = {}
    for c in top:
        planes.setdefault(plane_key(c.plane), c)
    hints = _plane_hints(list(planes.values()), load) if len(planes) > 1 else []
    rows = _mode_rows(top)
    if any(r[1] == "twin" for r in rows) and any(r[1] == "slip" for r in rows):
        hints += _mode_hints(rows, load)
    return hints
