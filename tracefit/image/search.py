"""Search rounds of the band detector: line candidates, screen, family fits, distinct families.

Stages 4-7 of :func:`tracefit.image.detect_bands` on one working copy (private to the
package). :func:`_search_rounds` runs up to ``SEARCH_ROUNDS`` rounds: Hough lines per
polarity clustered into candidates (:func:`_candidate_families`), screened by their depth
(:func:`_screen_candidates`), fitted and tested (:func:`_fit_candidates`), one family per
angle kept (:func:`_distinct_families`); after a round that found families their bands are
taken out of the ridge pixels (:func:`_without_bands`), so a weaker family crossing or beside
them gets its own candidates in the next.

A later round repeats much of the first: sectors that lost no ridge pixel give the same
Hough lines, the same lines the same depth, and a candidate with the same lines and pixels
the same family. These results are kept per working copy (:class:`_RoundMemo`), keyed by the
content of the pixels they read, so the rounds give what they gave without it.
"""

from __future__ import annotations

import copy
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field

import numpy as np

from tracefit.conventions import axial_difference
from tracefit.image.depth import _hough_depth, _keep
from tracefit.image.geometry import _direction_and_normal, _to_working
from tracefit.image.hough import (
    SECTOR_DEG,
    _candidate_key,
    _chord_lengths,
    _cluster_angles,
    _hough_theta,
    _line_candidates,
    _pixels_near_angle,
    _SectorDigests,
    _vote_mean_angle,
)
from tracefit.image.prepare import _WorkingCopy
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.ridges import RidgePixels

SEARCH_ROUNDS = 2  # searches for further families after taking out the bands found
MAX_RESEARCH_PX = 600_000  # ... in regions of at most this many working pixels
SAME_FAMILY_DEG = 2.0  # families closer than this are one
SAME_BAND_MIN_DEG = 1.0  # two band lines whose angles agree within this (or SAME_BAND_SIGMAS of their uncertainty) ...
SAME_BAND_SIGMAS = 2.0
SAME_BAND_SHARE = 0.25  # ... and lie, end to end, within this share of the smaller family spacing ...
SAME_BAND_MIN_PX = 2.0  # ... (or this many pixels) of each other are one band


@dataclass
class _SearchContext:
    """What the search rounds of one working copy need."""

    wc: _WorkingCopy
    ridges: Sequence[RidgePixels]  # dark and bright ridge pixels on the band side
    depth_of: Callable  # full-resolution points -> relative depth (tracefit.image.depth)
    min_depth: float
    min_bands: int
    min_coverage: float
    max_families: int


@dataclass
class _RoundMemo:
    """Results of one working copy's search rounds that a later round would compute again."""

    digests: _SectorDigests = field(default_factory=_SectorDigests)
    lines: dict = field(default_factory=dict)  # sector pixels -> Hough lines
    depth: dict = field(default_factory=dict)  # (polarity, lines) -> screen depth
    built: dict = field(default_factory=dict)  # candidate key -> (family or None, significance verdict)


def _candidate_families(ridges: Sequence[RidgePixels], region, min_bands, min_coverage, memo: _RoundMemo | None = None):
    """Stage 4: Hough lines per polarity clustered by angle; (ridge pixels, lines) per candidate, most votes first.

    ``memo`` keeps the Hough lines of each sector for the next round.
    """
    theta, alpha = _hough_theta()
    chord, _ = _chord_lengths(region, theta)
    v_min = max(20.0, 0.06 * min(region.shape))
    cands = []
    for rp in ridges:
        lines = _line_candidates(rp, theta, alpha, chord, v_min, min_coverage,
                                 None if memo is None else memo.lines, None if memo is None else memo.digests)
        if len(lines) == 0:
            continue
        for grp in _cluster_angles(lines[:, 0], lines[:, 3]):
            if len(grp) < min_bands:
                continue
            cands.append((rp, lines[grp]))
    # opposite-polarity echoes (the gaps between bands) are resolved after fitting,
    # where they fail the sharpness test
    cands.sort(key=lambda c: -c[1][:, 3].sum())
    return cands


def _screen_candidates(cands, depth_of, wc: _WorkingCopy, min_depth, memo: _RoundMemo | None = None):
    """Stage 5: keep candidates whose strongest Hough lines lie deeper than the local median grey.

    A cheap test before the full-resolution fits (it rejects the gaps between bands). A
    candidate passes on the depth over the stretch its lines' ridge pixels occupy (bands of
    one part of the image), and candidates are ordered by the depth along the whole lines:
    a band family before the gaps beside it and before shorter lines crossing it. On a copy
    reduced ``f`` times a band 1 px wide is averaged down to about 1/f of its depth, so a
    1/f share of the depth is asked here; the fitted bands' depth is then read at full
    resolution (stage 6). ``memo`` (one per image) keeps the depths of each candidate (its
    polarity, lines and the ridge pixels near their angle) for the next round.
    """
    known = {} if memo is None else memo.depth

    def depth(rp, ln):
        key = (rp.polarity, ln.tobytes()) if memo is None else _candidate_key(rp, ln, memo.digests)
        if key not in known:
            known[key] = _hough_depth(rp, ln, depth_of, wc.factor, wc.region)
        return known[key]

    # passed on the depth where the lines' ridge pixels lie (bands of one part of the image),
    # ordered by the depth along the whole lines (a family before the shorter lines crossing it)
    scored = [(depth(rp, ln), rp, ln) for rp, ln in cands]
    scored = [c for c in scored if c[0][1] >= 0.6 * min_depth / wc.factor]
    scored.sort(key=lambda c: (-c[0][0], -c[0][1]))
    return [(rp, ln) for _, rp, ln in scored]


def _fit_candidates(try_candidate, cands, max_families, known=()) -> tuple[list[BandFamily], int]:
    """Stage 6: build a family from each candidate, at most ``3 * max_families`` attempts.

    ``try_candidate(rp, lines)`` builds a family and tests its significance (None when it fails);
    candidates within ``SAME_FAMILY_DEG`` of a family already kept (here or in ``known``) are
    skipped: a split cluster of the family, or its gaps. Lines crossing a family at a few
    degrees are refined onto it and give a copy with a few of its bands: such a copy (same
    polarity, within ``SAME_FAMILY_DEG``) does not skip the family's own candidates, the
    stronger of the two (more and longer bands) is kept, and a copy of a family of ``known``
    (an earlier round) is dropped. Returns the families and the number of candidates tried.
    """
    fams: list[BandFamily] = []
    skip_near: list[list[float]] = []  # per kept family: the angles whose candidates are skipped
    attempts = 0
    for rp, ln in cands:
        if attempts >= 3 * max_families:
            break
        a_c = _vote_mean_angle(ln)
        near = [fm.angle_deg for fm in known] + [a for angles in skip_near for a in angles]
        if any(abs(axial_difference(a_c, a)) < SAME_FAMILY_DEG for a in near):
            continue
        attempts += 1
        fam = try_candidate(rp, ln)
        if fam is None:
            continue

        def again(fm):
            return fm.polarity == fam.polarity and abs(axial_difference(fam.angle_deg, fm.angle_deg)) < SAME_FAMILY_DEG

        if any(again(fm) for fm in known):
            continue
        # a family refined far from its candidate's angle is a copy: its angle skips nothing
        angles = [a_c] + ([fam.angle_deg] if abs(axial_difference(a_c, fam.angle_deg)) < SAME_FAMILY_DEG else [])
        twin = next((k for k, fm in enumerate(fams) if again(fm)), None)
        if twin is None:
            fams.append(fam)
            skip_near.append(angles)
        elif fam.strength > fams[twin].strength:
            fams[twin] = fam
            skip_near[twin] += angles
        else:
            skip_near[twin].append(a_c)
    return fams, attempts


def _on_same_bands(fam: BandFamily, other: BandFamily) -> bool:
    """True when at least half of ``fam``'s bands (two or more) are bands of ``other`` again.

    Such a family is ``other`` seen again at a nearby angle: lines that fan out a little
    (a picture taken in perspective, curved bands) give fits a few degrees apart from the
    same bands, which the family angle alone does not tell apart. Two band lines are one
    band (:func:`_same_band`) when their angles agree within their uncertainties and the
    shorter lies, end to end, within ``SAME_BAND_SHARE`` of the smaller family spacing (at
    least ``SAME_BAND_MIN_PX``) of the longer one's line; each band of ``other`` stands for
    one band of ``fam`` only.
    """
    if not fam.lines or not other.lines:
        return False
    tol = max(SAME_BAND_MIN_PX, SAME_BAND_SHARE * min(fam.spacing_px, other.spacing_px))
    # the angle test for every pair at once (families of a hundred bands each: 10,000 pairs), the
    # end-to-end test only for the pairs that pass it
    a = np.array([[ln.angle_deg, ln.angle_sigma_deg] for ln in fam.lines], float)
    b = np.array([[ln.angle_deg, ln.angle_sigma_deg] for ln in other.lines], float)
    agree = _angles_agree(a[:, :1], a[:, 1:], b[:, 0], b[:, 1])  # (bands of fam, bands of other)
    free = list(range(len(other.lines)))
    shared = 0
    for i, ln in enumerate(fam.lines):
        k = next((k for k, j in enumerate(free) if agree[i, j] and _same_band(ln, other.lines[j], tol)), None)
        if k is not None:
            free.pop(k)
            shared += 1
    return shared >= 2 and 2 * shared >= len(fam.lines)


def _angles_agree(a_deg, a_sigma, b_deg, b_sigma):
    """True where band angles agree within ``SAME_BAND_SIGMAS`` combined sigmas (at least ``SAME_BAND_MIN_DEG``).

    A non-finite sigma counts as none; a NaN angle agrees with nothing (fitted angles are
    finite). Scalars or arrays (broadcast together), degrees.
    """
    a_sigma, b_sigma = np.asarray(a_sigma, float), np.asarray(b_sigma, float)
    spread = np.where(np.isfinite(a_sigma) & np.isfinite(b_sigma), np.hypot(a_sigma, b_sigma), 0.0)
    return np.abs(axial_difference(a_deg, b_deg)) <= np.maximum(SAME_BAND_MIN_DEG, SAME_BAND_SIGMAS * spread)


def _same_band(a: BandLine, b: BandLine, tol: float) -> bool:
    """True when band lines ``a`` and ``b``, whose angles agree (:func:`_angles_agree`, tested by the
    caller for all pairs at once), are one band (see :func:`_on_same_bands`); pixels (col, row)."""
    if min(a.length_px, b.length_px) <= 0:
        return False
    short, long_ = (a, b) if a.length_px <= b.length_px else (b, a)
    p0, d = np.array([long_.col0, long_.row0]), np.array([long_.col1 - long_.col0, long_.row1 - long_.row0])
    length = long_.length_px
    for end in ((short.col0, short.row0), (short.col1, short.row1)):
        rel = np.asarray(end) - p0
        along = float(rel @ d) / length
        across = abs(float(rel[0] * d[1] - rel[1] * d[0])) / length
        if across > tol or not -tol <= along <= length + tol:
            return False
    return True


def _repeats(fam: BandFamily, kept: Sequence[BandFamily]) -> bool:
    """True when ``fam`` is one of ``kept`` again: within ``SAME_FAMILY_DEG``, or on its bands (``_on_same_bands``)."""
    return any(abs(axial_difference(fam.angle_deg, g.angle_deg)) < SAME_FAMILY_DEG or _on_same_bands(fam, g)
               for g in kept)


def _distinct_families(fams: list[BandFamily]) -> list[BandFamily]:
    """Stage 7: one family per angle and per set of bands, strongest first.

    Dark and bright "families" at one angle are the bands and the gaps between them; the
    bands stand further from the median grey than the gaps do: families are taken in order
    of contrast, and one that repeats a family taken before it (:func:`_repeats`) is left out.
    """
    final: list[BandFamily] = []
    for fm in sorted(fams, key=lambda fm: -abs(fm.contrast)):
        if not _repeats(fm, final):
            final.append(fm)
    final.sort(key=lambda fm: -fm.strength)
    return final


def _without_bands(rp: RidgePixels, fams: list[BandFamily], factor: int, reach_px: float = 3.0) -> RidgePixels:
    """Ridge pixels of ``rp`` minus those on the bands of ``fams`` (near their line and direction).

    A crossing family keeps its pixels: only pixels whose sector lies near the found
    family's angle are taken away.
    """
    drop = np.zeros(len(rp), bool)
    for fam in fams:
        if fam.polarity != ("dark" if rp.polarity < 0 else "bright"):
            continue
        idx = _pixels_near_angle(rp, fam.angle_deg, window_deg=SECTOR_DEG / 2)
        if len(idx) == 0:
            continue
        pts = np.stack([rp.col[idx], rp.row[idx]], axis=1).astype(np.float64)
        # offsets across the family: a pixel further than reach_px + 1 from a band's offset range
        # lies further than reach_px from the band itself (speed: only the others are measured)
        _, nrm = _direction_and_normal(fam.angle_deg)
        across = pts @ nrm
        for ln in fam.lines:
            a = _to_working(np.array([ln.col0, ln.row0]), factor)
            b = _to_working(np.array([ln.col1, ln.row1]), factor)
            sa, sb = float(a @ nrm), float(b @ nrm)
            cand = np.flatnonzero((across >= min(sa, sb) - reach_px - 1.0) & (across <= max(sa, sb) + reach_px + 1.0))
            if len(cand) == 0:
                continue
            d = b - a
            q = pts[cand] - a
            t = np.clip(q @ d / max(float(d @ d), 1e-9), 0.0, 1.0)
            dist = np.hypot(q[:, 0] - t * d[0], q[:, 1] - t * d[1])
            drop[idx[cand[dist <= reach_px]]] = True
    return _keep(rp, ~drop)



def _search_rounds(sc: _SearchContext, build: Callable, accept: Callable) -> tuple[list[BandFamily], int, int]:
    """Stages 4-7, up to ``SEARCH_ROUNDS`` rounds.

    Parameters
    ----------
    sc : _SearchContext
    build : callable
        ``build(rp, lines)`` -> ``(BandFamily, strict)`` or None
        (:func:`tracefit.image.families._build_family`).
    accept : callable
        ``accept(fam, strict)`` -> True (kept), False (below the significance threshold) or
        None (refused before the significance test).

    Returns
    -------
    families : list of BandFamily
        Distinct families, strongest first.
    tried : int
        Candidates tried.
    rejected : int
        Candidates built but below the significance threshold.
    """
    memo = _RoundMemo()
    counts = {"rejected": 0}

    def try_candidate(rp, ln):
        key = _candidate_key(rp, ln, memo.digests)
        if key not in memo.built:
            built = build(rp, ln)
            verdict = None if built is None else accept(*built)
            memo.built[key] = (built[0] if verdict else None, verdict)
        fam, verdict = memo.built[key]
        counts["rejected"] += verdict is False
        return None if fam is None else copy.deepcopy(fam)  # the kept one stays as it was

    wc = sc.wc
    found: list[BandFamily] = []
    tried = 0
    search = list(sc.ridges)
    region_px = int(wc.region.sum())
    for _ in range(SEARCH_ROUNDS):
        cands = _candidate_families(search, wc.region, min(sc.min_bands, 2), sc.min_coverage, memo)
        fams, n = _fit_candidates(try_candidate, _screen_candidates(cands, sc.depth_of, wc, sc.min_depth, memo),
                                  sc.max_families, known=found)
        tried += n
        new = _distinct_families(fams)  # stage 7
        found = _distinct_families(found + new)
        if not new or len(found) >= sc.max_families or region_px > MAX_RESEARCH_PX:
            break  # large regions hold enough votes for every family in the first round
        search = [_without_bands(rp, found, wc.factor) for rp in search]
    return found, tried, counts["rejected"]
