"""Benchmark: band-family recall on realistic HR-DIC-like max-shear strain maps, grain by grain.

Not part of the test suite; prints figures. The maps are drawn here with numpy/scipy only
(an independent renderer, not ``tracefit.image.synthetic``) and run through
``tracefit.image.detect_grains`` -- the per-grain detection that ``tracefit identify`` and
``tracefit.pipeline.detect_families`` run on a grain map (label image, every id >= 0 a
grain, ``min_pixels`` = the ``min_grain_px`` default, 300).

What a map holds, and why (the numbers are this benchmark's choices; where a fact of the
trade lies behind one it is marked "common practice, no source" or "from memory"):

Map and grains
    200 x 300 map points (the size of the held-out map). Grains: Voronoi cells of about
    28 seeds, relaxed twice (Lloyd) so that most cells hold 650-3300 points, on coordinates
    warped by a smooth random displacement (amplitude about 3 px) so that boundaries are
    wavy, not straight polygons. Annealing twins (fcc; from memory: common in Ni-base and
    austenitic alloys): in "typical" and "hard" maps some grains get a straight
    parallel-sided lamella 5-12 px wide with its own label; the parent's pieces on
    either side become grains of their own (connected components), as EBSD grain
    reconstruction that keeps twin boundaries gives (common practice, no source).
    The label image given to the detector is the EBSD grain map on the DIC grid: it is
    the drawing's label map re-computed with a slightly different warp and a shift of up
    to 1.5 px, i.e. an EBSD-DIC registration error of 1-2 points (common practice, no
    source), so a grain's mask can include a sliver of its neighbour and its boundary.
    Only grains of 650-3300 label points are scored (the held-out grain sizes); bands
    are drawn in every grain.

Strain field
    The in-plane strain tensor is drawn component by component, (exx - eyy)/2 and exy,
    and the map is the max-shear strain sqrt(((exx - eyy)/2)^2 + exy^2), as HR-DIC maps
    show (common practice, no source). So the background is a Rician-like, positive,
    right-skewed field, and a band adds to it in quadrature or linearly depending on
    the angle between its shear and the grain's mean shear.
    - Grain mean shear: magnitude 0.015 times a log-normal grain factor (sigma 0.35, the
      grain-to-grain level differences; the level about 1-2 % at a few % applied strain,
      from memory), random phase per grain, times a smooth map-wide factor (+-20 %).
    - Higher strain near grain boundaries: the mean shear times 1 + beta exp(-d / 3 px)
      (d the distance to the drawn boundary, beta 0.3-1.2 per grain and modulated along
      the boundary); twin boundaries included (strain localises along them; from memory).
    - Noise: per component white noise smoothed with a Gaussian of sigma 1.2 points (DIC
      subsets overlap: neighbouring points share pixels; common practice, no source),
      its amplitude modulated by a smooth log-normal field (speckle quality varies) and
      0.3 % of points with outlier spikes (bad but not failed correlations): heavy-tailed.
    - Everything, bands included, smoothed with sigma 0.5 points (subset averaging).
Bands (slip bands of a deformed fcc alloy)
    - 1-3 families per grain (easy/typical/hard mix below), angles uniform, at least
      15 deg apart (fcc {111} traces are often close; 15 deg is the brief's floor).
    - Each band is simple shear along its trace: its shear g >= 0 adds the vector
      g (-sin 2a, cos 2a) to ((exx - eyy)/2, exy), its sign chosen so that it adds to the
      grain's mean shear (slip accommodates the applied deformation).
    - Spacing irregular: gaps = family mean spacing (6-14 px) times log-normal (0.35),
      clipped to 4-20 px; about 15 % of the positions left empty.
    - Length: 45 % of bands span the grain; the others cover 25-90 % of their chord at a
      random place; in the second and third family 35 % stop at the first family's bands
      (the segment between two first-family crossings). Ends tapered over 2 px.
    - Cross-section: Gaussian of sigma 0.4-1.0 points (FWHM 1-2.4, then subset smoothing:
      widths 1-3 px). Slight waviness (+-0.4 px, wavelength ~20 px: cross slip).
    - Intensity: family level x band factor (log-normal, sigma 0.6) x along-band factor
      (smooth log-normal, sigma 0.4, correlation ~6 px): heavy tailed, band to band and
      along a band.
    - The first family stronger than the second and third: level ratios below.
NaN (failed correlation)
    A few round holes (radius 1-5), one or two NaN row segments (30-150 points; a scratch
    or a stitching seam), one or two irregular patches (8-20 points), and 0.2 % isolated
    NaN points.
Difficulty levels (family level in multiples of the grain's mean shear; noise sigma
per component in the same units; the ranges are this benchmark's, no source)
    easy     first 5x, second 0.6-1.0 of first, third 0.5-0.9; noise 0.15; no twins; few NaN
    typical  first 3.5x, second 0.3-0.7, third 0.25-0.55; noise 0.25; twins in 25 % of grains
    hard     first 2.5x, second 0.15-0.4, third 0.12-0.3; noise 0.35; twins in 35 %; more NaN
    Families per grain: easy 1/2/3 = 40/40/20 %, typical 30/45/25 %, hard 25/45/30 %.
    Negatives: the same maps (same grains, boundaries, twins, noise, NaN) without bands:
    every grain must give no family.

Truth and scoring
    A drawn family counts as a true family of a scored grain when at least two of its
    bands are at least 8 points long inside the grain's label mask. A detected family
    within 2 deg (axial) of a true family counts as found (one-to-one, closest first);
    the others are spurious. Families are ranked by strength (level x drawn length).

Predicted traces (``--guided SIGMA``)
    ``tracefit identify`` knows each grain's orientation and asks the detector to look along
    the candidate planes' predicted traces as well (``predicted_traces``; stages 6c and 6d). The
    maps' bands are not drawn from orientations, so the traces are simulated: per grain four
    (fcc's {111}), each true family's angle off by a normal error of SIGMA deg (orientation
    and registration error) and random angles for the planes that did not slip; band-free
    grains get four random angles. It also prints how well the guided families' p_none
    states the share of them that match no true family: p_none as identification weighs a
    guided family (tracefit.matching.family_log_weights with its window), the four traces
    standing for four equally likely planes whose predicted-trace spread is SIGMA.

Usage::

    python benchmarks/strainmap.py               # 3 levels x 4 seeds + negatives (~2-3 min)
    python benchmarks/strainmap.py --quick       # 3 levels x 2 seeds + negatives
    python benchmarks/strainmap.py --levels hard --seeds 8 --opt min_significance=10
    python benchmarks/strainmap.py --save-maps /tmp/maps   # .npy maps, labels and truth to look at
    python benchmarks/strainmap.py --guided 1    # with simulated predicted traces, 1 deg off (as identify runs)

Target of the held-out check: recall >= 0.9 within 2 deg, no spurious families, none on
negatives. Results support, never replace, qualified investigation.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import sys
import time
from dataclasses import dataclass, field

import numpy as np
from scipy import ndimage

from tracefit.conventions import axial_difference
from tracefit.image import detect_grains
from tracefit.options import option

SHAPE = (200, 300)
N_SEEDS_GRAINS = 28
SCORED_PX = (650, 3300)
MATCH_TOL_DEG = 2.0
MIN_SEP_DEG = 15.0
MIN_VISIBLE_LEN = 8.0  # points inside the grain mask for a band to count as visible
MEAN_SHEAR = 0.015

#: realism features that ``--without`` can leave out (ablation), to see which one costs recall
FEATURES = {
    "nan": "NaN holes, rows, patches and points",
    "spikes": "outlier spikes of the noise",
    "correlated": "spatial correlation of the noise (white noise instead)",
    "boundary": "higher strain near grain boundaries",
    "registration": "EBSD-DIC registration error of the label map",
    "tensor": "max-shear magnitude of a tensor field (a scalar sum instead)",
    "short": "bands shorter than the grain and stopping at other bands",
    "wobble": "band waviness",
    "along": "intensity variation along a band",
}

LEVELS = {
    "easy": dict(first=5.0, r2=(0.6, 1.0), r3=(0.5, 0.9), noise=0.15, p_twin=0.0, n_fam=(0.4, 0.4, 0.2), nan_scale=0.5),
    "typical": dict(first=3.5, r2=(0.3, 0.7), r3=(0.25, 0.55), noise=0.25, p_twin=0.25, n_fam=(0.3, 0.45, 0.25), nan_scale=1.0),
    "hard": dict(first=2.5, r2=(0.15, 0.4), r3=(0.12, 0.3), noise=0.35, p_twin=0.35, n_fam=(0.25, 0.45, 0.3), nan_scale=1.5),
}


# --------------------------------------------------------------------------- grains
def _smooth_noise(rng, shape, sigma, amp=1.0):
    f = ndimage.gaussian_filter(rng.standard_normal(shape), sigma, mode="reflect")
    return amp * f / (f.std() + 1e-12)


def _voronoi(rng, shape, n, warp_c, warp_r, lloyd=2):
    h, w = shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    rw, cw = rr + warp_r, cc + warp_c
    seeds = np.column_stack([rng.uniform(0, h, n), rng.uniform(0, w, n)])

    def assign(s):
        d = (rw[..., None] - s[:, 0]) ** 2 + (cw[..., None] - s[:, 1]) ** 2
        return np.argmin(d, axis=-1)

    lab = assign(seeds)
    for _ in range(lloyd):
        idx = np.arange(n)
        cnt = ndimage.sum(np.ones(shape), lab, idx)
        keep = cnt > 0
        sr = np.asarray(ndimage.mean(rr, lab, idx))
        sc = np.asarray(ndimage.mean(cc, lab, idx))
        seeds = np.column_stack([sr, sc])[keep]
        lab = assign(seeds)
    return seeds, assign


def _add_twins(rng, lab, p_twin):
    """Straight lamellae 5-12 px wide across some grains, each a new label; then connected components."""
    lab = lab.copy()
    h, w = lab.shape
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    nxt = lab.max() + 1
    twins = []
    for g in np.unique(lab):
        m = lab == g
        if m.sum() < 1200 or rng.random() >= p_twin:
            continue
        r0, c0 = rr[m].mean() + rng.normal(0, 4), cc[m].mean() + rng.normal(0, 4)
        a = math.radians(rng.uniform(0, 180))
        nc, nr = math.sin(a), math.cos(a)  # normal of a line at image angle a, in (col, row)
        d = (cc - c0) * nc + (rr - r0) * nr
        width = rng.uniform(5, 12)
        strip = m & (np.abs(d) <= width / 2)
        lab[strip] = nxt
        twins.append((int(nxt), math.degrees(a) % 180))
        nxt += 1
    out = np.zeros_like(lab)
    k = 0
    for g in np.unique(lab):
        comp, n = ndimage.label(lab == g)
        for j in range(1, n + 1):
            out[comp == j] = k
            k += 1
    return out, twins


# --------------------------------------------------------------------------- bands
@dataclass
class Band:
    offset: float
    u0: float
    u1: float
    level: float
    sigma: float
    length_in_grain: float = 0.0


@dataclass
class Family:
    angle: float
    level: float
    bands: list = field(default_factory=list)
    rank: int = 0
    strength: float = 0.0
    n_visible: int = 0
    mean_spacing: float = 0.0


def _angles(rng, k):
    for _ in range(1000):
        a = sorted(rng.uniform(0, 180, k))
        if all(abs(axial_difference(x, y)) >= MIN_SEP_DEG for i, x in enumerate(a) for y in a[i + 1:]):
            return list(rng.permutation(a))
    return list(a)


def _frame(a_deg):
    a = math.radians(a_deg)
    return (math.cos(a), -math.sin(a)), (math.sin(a), math.cos(a))  # along, normal in (col, row)


def _families_for_grain(rng, m, rr, cc, cfg, mean_level, off=frozenset()):
    """Families (angles, band positions, extents, levels) of one grain; coordinates on the grain's pixels."""
    p = np.asarray(cfg["n_fam"])
    k = int(rng.choice([1, 2, 3], p=p / p.sum()))
    angs = _angles(rng, k)
    levels = [cfg["first"]]
    if k >= 2:
        levels.append(cfg["first"] * rng.uniform(*cfg["r2"]))
    if k >= 3:
        levels.append(cfg["first"] * rng.uniform(*cfg["r3"]))
    cg, rg = cc[m], rr[m]
    fams = []
    for a, lv in zip(angs, levels):
        (tc, tr), (nc, nr) = _frame(a)
        u, v = cg * tc + rg * tr, cg * nc + rg * nr
        vmin, vmax = v.min(), v.max()
        fam = Family(angle=float(a), level=lv * mean_level)
        spacing = rng.uniform(6, 14)
        pos = vmin + rng.uniform(0, spacing)
        while pos < vmax:
            if rng.random() > 0.15:
                sel = np.abs(v - pos) < 0.7
                if sel.sum() >= 3:
                    lo, hi = float(u[sel].min()), float(u[sel].max())
                    if rng.random() < 0.45 or "short" in off:
                        u0, u1 = lo - 2, hi + 2
                    else:
                        frac = rng.uniform(0.25, 0.9)
                        ln = frac * (hi - lo)
                        s = rng.uniform(lo, hi - ln) if hi - lo > ln else lo
                        u0, u1 = s, s + ln
                    fam.bands.append(Band(float(pos), u0, u1, fam.level * float(rng.lognormal(0, 0.6)),
                                          float(rng.uniform(0.4, 1.0))))
            pos += float(np.clip(spacing * rng.lognormal(0, 0.35), 4, 20))
        fams.append(fam)
    # second / third family bands stopping at the first family's bands
    if len(fams) >= 2 and fams[0].bands:
        (t1c, t1r), (n1c, n1r) = _frame(fams[0].angle)
        v1 = sorted(b.offset for b in fams[0].bands)
        for fam in fams[1:]:
            (tc, tr), (nc, nr) = _frame(fam.angle)
            # a point at (u along, offset v) of this family: (col,row) = u*t + v*n; its first-family offset
            # is u*(t.n1) + v*(n.n1): solve for the u where it equals each v1
            tn = tc * n1c + tr * n1r
            nn = nc * n1c + nr * n1r
            if abs(tn) < 1e-6:
                continue
            for b in fam.bands:
                if rng.random() >= 0.35 or "short" in off:
                    continue
                cross = sorted((x - b.offset * nn) / tn for x in v1)
                cross = [x for x in cross if b.u0 < x < b.u1]
                if len(cross) >= 2:
                    i = int(rng.integers(0, len(cross) - 1))
                    b.u0, b.u1 = cross[i], cross[i + 1]
    return fams


def _draw_band_shear(rng, m, rr, cc, fam, box, off=frozenset()):
    """Shear g >= 0 of one family's bands on the grain's bounding box."""
    rs, cs = box
    sub_r, sub_c = rr[rs, cs], cc[rs, cs]
    mm = m[rs, cs]
    (tc, tr), (nc, nr) = _frame(fam.angle)
    u = sub_c * tc + sub_r * tr
    v = sub_c * nc + sub_r * nr
    g = np.zeros(sub_r.shape)
    for b in fam.bands:
        ph, lam = rng.uniform(0, 2 * math.pi), rng.uniform(15, 30)
        wob = (0.0 if "wobble" in off else 0.4) * np.sin(2 * math.pi * u / lam + ph)
        d = v - b.offset - wob
        near = np.abs(d) < 4 * b.sigma + 1
        if not near.any():
            continue
        # along-band factor: smooth log-normal on a 1-D grid of u
        ug = np.arange(math.floor(u.min()) - 2, math.ceil(u.max()) + 3)
        f1 = ndimage.gaussian_filter1d(rng.standard_normal(ug.size), 6.0)
        f1 = np.exp((0.0 if "along" in off else 0.4) * f1 / (f1.std() + 1e-12))
        along = np.interp(u[near], ug, f1)
        taper = np.clip((u[near] - b.u0) / 2.0, 0, 1) * np.clip((b.u1 - u[near]) / 2.0, 0, 1)
        prof = np.exp(-0.5 * (d[near] / b.sigma) ** 2)
        g[near] += b.level * prof * along * taper
        inside = mm & (np.abs(d) < 0.5) & (u >= b.u0) & (u <= b.u1)
        b.length_in_grain = float(inside.sum())  # ~ one point per unit length near the centre line
    return g


# --------------------------------------------------------------------------- map
@dataclass
class StrainMap:
    image: np.ndarray  # float32, NaN where correlation failed
    labels: np.ndarray  # EBSD labels on the DIC grid (what the detector gets)
    truth: dict  # label id -> list of Family (scored, visible families only)
    scored: list  # label ids scored
    sizes: dict  # label id -> number of label points
    drawn_bands: dict  # label id -> number of drawn bands per family (for the miss list)


def render(seed: int, level: str, with_bands: bool = True, off=frozenset()) -> StrainMap:
    cfg = LEVELS[level]
    rng = np.random.default_rng(seed)
    h, w = SHAPE
    rr, cc = np.mgrid[0:h, 0:w].astype(np.float64)
    warp_c, warp_r = _smooth_noise(rng, SHAPE, 12, 3.0), _smooth_noise(rng, SHAPE, 12, 3.0)
    seeds, assign = _voronoi(rng, SHAPE, N_SEEDS_GRAINS, warp_c, warp_r)
    lab0 = assign(seeds)
    lab_true, twins = _add_twins(rng, lab0, cfg["p_twin"])
    # the EBSD label map: the drawing's labels sampled at points shifted by up to 1.5 px plus a
    # smooth 0.8 px wobble (registration error), nearest neighbour; ids as drawn
    dr, dc = rng.uniform(-1.5, 1.5, 2)
    sr = rr + dr + _smooth_noise(rng, SHAPE, 10, 0.8)
    sc = cc + dc + _smooth_noise(rng, SHAPE, 10, 0.8)
    lab_ebsd = lab_true.copy() if "registration" in off else ndimage.map_coordinates(lab_true, [sr, sc], order=0, mode="nearest")

    # grain mean shear, map-wide factor, boundary elevation
    ids = np.unique(lab_true)
    gfac = rng.lognormal(0, 0.35, ids.size)
    phase = rng.uniform(0, 2 * math.pi, ids.size)
    mapwide = 1 + 0.2 * np.tanh(_smooth_noise(rng, SHAPE, 40))
    bnd = np.zeros(SHAPE, bool)
    bnd[:-1] |= lab_true[:-1] != lab_true[1:]
    bnd[1:] |= lab_true[1:] != lab_true[:-1]
    bnd[:, :-1] |= lab_true[:, :-1] != lab_true[:, 1:]
    bnd[:, 1:] |= lab_true[:, 1:] != lab_true[:, :-1]
    dist = ndimage.distance_transform_edt(~bnd)
    beta = rng.uniform(0.3, 1.2, ids.size)[lab_true] * np.exp(0.4 * _smooth_noise(rng, SHAPE, 8))
    level_map = MEAN_SHEAR * gfac[lab_true] * mapwide * (1 + (0.0 if "boundary" in off else beta) * np.exp(-dist / 3.0))
    A = level_map * np.cos(phase[lab_true])
    B = level_map * np.sin(phase[lab_true])

    # noise: correlated, amplitude-modulated, with spikes
    sig = cfg["noise"] * MEAN_SHEAR * gfac[lab_true]
    qual = np.exp(0.35 * _smooth_noise(rng, SHAPE, 15))
    for comp in (0, 1):
        n = _smooth_noise(rng, SHAPE, 1e-3 if "correlated" in off else 1.2) * sig * qual
        spikes = rng.random(SHAPE) < (0.0 if "spikes" in off else 0.003)
        kick = rng.lognormal(math.log(4 * MEAN_SHEAR), 0.6, SHAPE) * rng.choice([-1, 1], SHAPE)
        n[spikes] += kick[spikes]
        if comp == 0:
            A = A + n
            scalar = level_map + n  # for the "tensor" ablation: a scalar field, bands added
        else:
            B = B + n

    # bands
    truth, drawn, sizes, scored = {}, {}, {}, []
    objs = ndimage.find_objects(lab_true + 1)
    fams_by_true = {}
    if with_bands:
        for g in ids:
            sl = objs[g]
            if sl is None:
                continue
            m = lab_true == g
            if m.sum() < 150:
                continue
            box = (slice(max(0, sl[0].start - 3), min(h, sl[0].stop + 3)), slice(max(0, sl[1].start - 3), min(w, sl[1].stop + 3)))
            fams = _families_for_grain(rng, m, rr, cc, cfg, MEAN_SHEAR * gfac[g], off)
            ga, gb = np.zeros(SHAPE), np.zeros(SHAPE)
            for fam in fams:
                shear = np.zeros(SHAPE)
                shear[box] = _draw_band_shear(rng, m, rr, cc, fam, box, off)
                shear *= m  # bands stop at the (drawn) grain boundary
                t = math.radians(fam.angle)
                va, vb = -math.sin(2 * t), math.cos(2 * t)
                if va * math.cos(phase[g]) + vb * math.sin(phase[g]) < 0:
                    va, vb = -va, -vb
                scalar = scalar + shear
                ga += shear * va
                gb += shear * vb
            A += ga
            B += gb
            fams_by_true[int(g)] = fams

    # subset smoothing, then max shear
    A = ndimage.gaussian_filter(A, 0.5)
    B = ndimage.gaussian_filter(B, 0.5)
    img = np.sqrt(A * A + B * B)
    if "tensor" in off:
        img = np.abs(ndimage.gaussian_filter(scalar, 0.5))

    # NaN: holes, row segments, patches, isolated points
    s = cfg["nan_scale"]
    nan = np.zeros(SHAPE, bool)
    for _ in range(int(round(rng.uniform(3, 7) * s))):
        r0, c0, rad = rng.uniform(0, h), rng.uniform(0, w), rng.uniform(1, 5)
        nan |= (rr - r0) ** 2 + (cc - c0) ** 2 <= rad * rad
    for _ in range(int(rng.integers(1, 3))):
        r0, c0, ln = int(rng.integers(0, h)), int(rng.integers(0, w - 30)), int(rng.integers(30, 151))
        nan[r0, c0:c0 + ln] = True
    for _ in range(int(round(rng.uniform(1, 2.5) * s))):
        r0, c0, sz = rng.uniform(0, h), rng.uniform(0, w), rng.uniform(8, 20)
        blob = ndimage.gaussian_filter(rng.standard_normal(SHAPE), 3) > 0
        nan |= blob & (np.hypot(rr - r0, cc - c0) < sz / 2)
    nan |= rng.random(SHAPE) < 0.002 * s
    if "nan" not in off:
        img[nan] = np.nan

    # truth on the EBSD labels
    for e in np.unique(lab_ebsd):
        me = lab_ebsd == e
        n = int(me.sum())
        sizes[int(e)] = n
        if not SCORED_PX[0] <= n <= SCORED_PX[1]:
            continue
        scored.append(int(e))
        g = int(np.bincount(lab_true[me]).argmax())  # the drawn grain it mostly is
        fams = fams_by_true.get(g, [])
        vis = []
        for fam in fams:
            lens = [_visible_length(b, fam.angle, me, rr, cc) for b in fam.bands]
            fam.n_visible = sum(1 for x in lens if x >= MIN_VISIBLE_LEN)
            fam.strength = sum(b.level * x for b, x in zip(fam.bands, lens))
            offs = sorted(b.offset for b, x in zip(fam.bands, lens) if x >= MIN_VISIBLE_LEN)
            fam.mean_spacing = float(np.mean(np.diff(offs))) if len(offs) > 1 else float("nan")
            if fam.n_visible >= 2:
                vis.append(fam)
        for k, fam in enumerate(sorted(vis, key=lambda f: -f.strength)):
            fam.rank = k + 1
        truth[int(e)] = vis
        drawn[int(e)] = [len(f.bands) for f in fams]
    return StrainMap(img.astype(np.float32), lab_ebsd.astype(np.int32), truth, scored, sizes, drawn)


def _visible_length(b: Band, angle, me, rr, cc):
    (tc, tr), (nc, nr) = _frame(angle)
    u = cc * tc + rr * tr
    v = cc * nc + rr * nr
    sel = me & (np.abs(v - b.offset) < 0.5) & (u >= b.u0) & (u <= b.u1)
    return float(sel.sum())


# --------------------------------------------------------------------------- stage tracer (--trace)
class StageTracer:
    """Where a missed family's candidate died inside the detector (diagnostic only, ``--trace``).

    Wraps, for the length of a ``with`` block, private stage functions of
    ``tracefit.image.families`` and ``tracefit.image.detect`` (read only: they are called
    unchanged) and records for every candidate family the detector built: its angle and the
    first stage it failed, or its significance. The detector is being developed; when
    these private names change, the tracer says so and the benchmark runs without it.
    """

    STAGES = ("profile", "positions", "band fits", "depth", "angle", "refused (spacing/axis)", "below significance",
              "accepted")

    def __init__(self):
        self.events = []
        self.ok = True

    def __enter__(self):
        try:
            import tracefit.image.detect as D
            import tracefit.image.families as F
        except ImportError:
            self.ok = False
            return self
        names_f = ("_family_profile", "_band_positions", "_fit_family_bands", "_depth_test", "_family_angle")
        if not all(hasattr(F, n) for n in names_f) or not hasattr(D, "_build_family") or not hasattr(D, "_search_rounds"):
            self.ok = False
            return self
        self._saved = [(F, n, getattr(F, n)) for n in names_f] + [(D, "_build_family", D._build_family),
                                                                   (D, "_search_rounds", D._search_rounds)]
        cur = {}
        tr = self

        def wrap(mod, name, stage, test):
            orig = getattr(mod, name)

            def f(*a, **k):
                out = orig(*a, **k)
                if name == "_family_profile" and out is not None:
                    cur["angle"] = float(out.angle_deg)
                if test(out, a):
                    cur.setdefault("stage", stage)
                if name in ("_fit_family_bands", "_depth_test") and out is not None:
                    cur["n_" + stage.replace(" ", "_")] = len(out)
                return out
            setattr(mod, name, f)

        least = lambda: cur.get("least", 2)  # noqa: E731
        wrap(F, "_family_profile", "profile", lambda o, a: o is None)
        wrap(F, "_band_positions", "positions", lambda o, a: len(o) < least())
        wrap(F, "_fit_family_bands", "band fits", lambda o, a: o is None or len(o) < least())
        wrap(F, "_depth_test", "depth", lambda o, a: len(o) < least())
        wrap(F, "_family_angle", "angle", lambda o, a: o is None)
        orig_build = D._build_family

        def build(ctx, rp, lines):
            cur.clear()
            cur["least"] = min(ctx.min_bands, 2) if ctx.relaxed else ctx.min_bands
            out = orig_build(ctx, rp, lines)
            ev = dict(angle=cur.get("angle"), stage=cur.get("stage"), polarity="dark" if rp.polarity < 0 else "bright",
                      n_fits=cur.get("n_band_fits"), n_deep=cur.get("n_depth"))
            if out is not None:
                ev["angle"] = out[0].angle_deg
                ev["n_bands"] = out[0].n_bands
                ev["family"] = out[0]
            tr.events.append(ev)
            return out
        D._build_family = build
        orig_search = D._search_rounds

        def search(sc, b, accept):
            def acc(fam, strict):
                v = accept(fam, strict)
                for ev in reversed(tr.events):
                    if ev.get("family") is fam:
                        ev["stage"] = ("refused (spacing/axis)" if v is None else
                                       "below significance" if v is False else "accepted")
                        ev["significance"] = None if fam.log10_nfa is None else -fam.log10_nfa
                        ev["strict"] = strict
                        break
                return v
            return orig_search(sc, b, acc)
        D._search_rounds = search
        return self

    def __exit__(self, *exc):
        for mod, name, f in getattr(self, "_saved", []):
            setattr(mod, name, f)
        return False

    def verdict_for(self, angle, tol=3.0):
        """The furthest stage reached by any candidate within ``tol`` deg of ``angle`` (text)."""
        near = [e for e in self.events if e.get("angle") is not None and abs(axial_difference(e["angle"], angle)) <= tol]
        if not near:
            return "no candidate direction within 3 deg (ridge pixels / Hough stage)"
        best = max(near, key=lambda e: self.STAGES.index(e["stage"]) if e["stage"] in self.STAGES else -1)
        st = best["stage"] or "built"
        extra = []
        if best.get("n_fits") is not None:
            extra.append(f"{best['n_fits']} band fits")
        if best.get("n_deep") is not None:
            extra.append(f"{best['n_deep']} deep enough")
        if best.get("significance") is not None:
            extra.append(f"significance {best['significance']:.1f}, {'strict' if best.get('strict') else 'relaxed'}, "
                         f"{best.get('n_bands')} bands")
        if st == "accepted":
            st = "accepted, then dropped in selection or by max_families"
        return f"{len(near)} candidate(s) near; furthest: {st}" + (f" ({', '.join(extra)})" if extra else "")


# --------------------------------------------------------------------------- scoring
def _match(true_angles, found_angles):
    """One-to-one matches within MATCH_TOL_DEG, closest first: list of (i_true, j_found, err)."""
    pairs = sorted((abs(axial_difference(t, f)), i, j) for i, t in enumerate(true_angles) for j, f in enumerate(found_angles))
    ut, uf, out = set(), set(), []
    for d, i, j in pairs:
        if d <= MATCH_TOL_DEG and i not in ut and j not in uf:
            ut.add(i)
            uf.add(j)
            out.append((i, j, d))
    return out


def _smoothed(img, sigma):
    """The map blurred by a Gaussian of ``sigma`` points (NaN points stay NaN): smooth content at its own sampling."""
    from scipy.ndimage import gaussian_filter

    nan = np.isnan(img)
    out = gaussian_filter(np.where(nan, np.nanmedian(img), img), sigma).astype(np.float32)
    out[nan] = np.nan
    return out


def _predicted(truth, ids, seed, sigma, n_traces=4):
    """Simulated predicted traces per grain: each true family's angle off by N(0, sigma) deg (orientation and
    registration error) and random decoys (the planes that did not slip) up to ``n_traces`` (fcc: 4 {111})."""
    out = {}
    for g in ids:
        rng = np.random.default_rng([seed, int(g), 7])
        tr = [float(f.angle + rng.normal(0, sigma)) % 180 for f in truth.get(g, [])][:n_traces]
        tr += list(rng.uniform(0, 180, n_traces - len(tr)))
        out[int(g)] = [float(a) for a in rng.permutation(tr)]
    return out


def _guided_p_none(fam, traces, sigma):
    """(p_none as identification computes it, p_none over 180 deg) of a guided family, its grain's simulated traces
    standing for four equally likely candidate planes whose predicted-trace spread is the simulation's ``sigma``."""
    from tracefit.matching import observed_from_detection
    from tracefit.matching.likelihood import DEFAULT_P_NONE, family_log_weights

    obs = observed_from_detection([fam])[0]
    out = []
    for width in (obs.search_width_deg, 180.0):
        logw, _, _ = family_log_weights([obs.angle_deg], [obs.angle_sigma_deg], traces, [sigma] * len(traces),
                                        np.log(np.full(len(traces), (1 - DEFAULT_P_NONE) / len(traces))),
                                        DEFAULT_P_NONE, windows=[(obs.sought_at_deg, width)])
        w = np.exp(logw[0] - logw[0].max())
        out.append(float(w[-1] / w.sum()))
    return tuple(out)


def run_level(level, seeds, opts, negatives=True, save=None, off=frozenset(), trace=False, smooth=0.0, guided=None):
    n_true = n_found = n_spur = 0
    n_guided = 0
    guided_calib = []  # (p_none, p_none over 180 deg, matched no true family) per guided family of a scored grain
    by_rank = {1: [0, 0], 2: [0, 0], 3: [0, 0]}
    errs, misses, spurious = [], [], []
    neg_fams, neg_grains, neg_list = 0, 0, []
    n_grains = 0
    t_det = 0.0
    min_px = option("min_grain_px").default
    for seed in seeds:
        sm = render(seed, level, True, off)
        if smooth:
            sm.image = _smoothed(sm.image, smooth)
        if save:
            os.makedirs(save, exist_ok=True)
            np.save(os.path.join(save, f"{level}_{seed}_map.npy"), sm.image)
            np.save(os.path.join(save, f"{level}_{seed}_labels.npy"), sm.labels)
            with open(os.path.join(save, f"{level}_{seed}_truth.json"), "w") as fh:
                json.dump({g: [round(f.angle, 2) for f in fs] for g, fs in sm.truth.items()}, fh)
        t0 = time.process_time()
        traces = None if guided is None else _predicted(sm.truth, np.unique(sm.labels), seed, guided)
        g_opts = {} if guided is None else {"predicted_traces": traces}
        res = detect_grains(sm.image, sm.labels, min_pixels=min_px, **opts, **g_opts)
        t_det += time.process_time() - t0
        for g in sm.scored:
            n_grains += 1
            fams = sm.truth[g]
            det = res[g]
            got = [f.angle_deg for f in det.families]
            mt = _match([f.angle for f in fams], got)
            hit = {i: (j, d) for i, j, d in mt}
            for i, fam in enumerate(fams):
                n_true += 1
                by_rank[min(fam.rank, 3)][0] += 1
                if i in hit:
                    n_found += 1
                    n_guided += getattr(det.families[hit[i][0]], "sought_at", None) is not None
                    by_rank[min(fam.rank, 3)][1] += 1
                    errs.append(hit[i][1])
                else:
                    near = min((abs(axial_difference(a, fam.angle)) for a in got), default=float("nan"))
                    misses.append(dict(seed=seed, grain=g, px=sm.sizes[g], rank=fam.rank, n_fam=len(fams),
                                       angle=fam.angle, bands=fam.n_visible, drawn=len(fam.bands),
                                       spacing=fam.mean_spacing,
                                       rel=fam.level / max(f.level for f in fams), found=len(got), nearest=near,
                                       verdict=det.verdict, reason=det.reason))
            grain_misses = [d for d in misses if d["seed"] == seed and d["grain"] == g]
            if trace and grain_misses:
                with StageTracer() as tr:
                    if tr.ok:
                        detect_grains(sm.image, sm.labels, min_pixels=min_px, grains=[g], **opts)
                for d in grain_misses:
                    d["stage"] = tr.verdict_for(d["angle"]) if tr.ok else "tracer unavailable (detector internals changed)"
            used = {j for _, j, _ in mt}
            for j, f in enumerate(det.families):
                if getattr(f, "sought_at", None) is not None:
                    guided_calib.append((*_guided_p_none(f, traces[int(g)], guided), j not in used))
            for j, f in enumerate(det.families):
                if j not in used:
                    n_spur += 1
                    near = min((abs(axial_difference(f.angle_deg, t.angle)) for t in fams), default=float("nan"))
                    spurious.append(dict(seed=seed, grain=g, px=sm.sizes[g], angle=f.angle_deg, n_bands=f.n_bands,
                                         sig=-f.log10_nfa if f.log10_nfa is not None else float("nan"),
                                         pol=f.polarity, nearest_true=near,
                                         guided=getattr(f, "sought_at", None) is not None))
        if negatives:
            nm = render(seed, level, False, off)
            if smooth:
                nm.image = _smoothed(nm.image, smooth)
            t0 = time.process_time()
            g_opts = {} if guided is None else {"predicted_traces": _predicted({}, np.unique(nm.labels), seed, guided)}
            rn = detect_grains(nm.image, nm.labels, min_pixels=min_px, **opts, **g_opts)
            t_det += time.process_time() - t0
            for g in nm.scored:
                neg_grains += 1
                nf = len(rn[g].families)
                neg_fams += nf
                for f in rn[g].families:
                    neg_list.append(dict(seed=seed, grain=g, px=nm.sizes[g], angle=f.angle_deg, n_bands=f.n_bands,
                                         sig=-f.log10_nfa if f.log10_nfa is not None else float("nan"), pol=f.polarity,
                                         guided=getattr(f, "sought_at", None) is not None))
    return dict(level=level, grains=n_grains, true=n_true, found=n_found, spurious=n_spur, by_rank=by_rank,
                med_err=float(np.median(errs)) if errs else float("nan"), misses=misses, spurious_list=spurious,
                neg_grains=neg_grains, neg_fams=neg_fams, neg_list=neg_list, cpu_s=t_det, guided_found=n_guided,
                guided_calib=guided_calib)


def _print_level(r, verbose=True):
    rec = r["found"] / r["true"] if r["true"] else float("nan")
    print(f"\n== {r['level']}: {r['grains']} scored grains, {r['true']} true families, found within "
          f"{MATCH_TOL_DEG:g} deg {r['found']} (recall {rec:.3f}); spurious {r['spurious']}; "
          f"median angle error {r['med_err']:.2f} deg; detector CPU {r['cpu_s']:.1f} s")
    if r.get("guided_found"):
        print(f"   of the families found, {r['guided_found']} were found along their predicted traces (guided)")
    print("   recall by strength rank: " + ", ".join(
        f"{k}: {v[1]}/{v[0]} ({v[1] / v[0]:.2f})" if v[0] else f"{k}: -" for k, v in r["by_rank"].items()))
    if "neg_grains" in r and r["neg_grains"]:
        print(f"   negatives: {r['neg_grains']} grains, {r['neg_fams']} families reported "
              f"({sum(1 for _ in {(d['seed'], d['grain']) for d in r['neg_list']})} grains with any)")
    traced = [d["stage"] for d in r["misses"] if "stage" in d]
    if traced:
        keys = {}
        for t in traced:
            k = t.split("furthest: ")[-1].split(" (")[0] if "furthest" in t else t.split(" (")[0]
            keys[k] = keys.get(k, 0) + 1
        print("   where the misses died (furthest stage of the nearest candidate): "
              + "; ".join(f"{k}: {v}" for k, v in sorted(keys.items(), key=lambda kv: -kv[1])))
    if not verbose:
        return
    if r["misses"]:
        print("   misses (seed grain px | rank/of rel-level | visible/drawn bands, mean spacing | angle | "
              "families found, nearest | verdict: reason)")
        for d in r["misses"]:
            print(f"    s{d['seed']} g{d['grain']:<3d} {d['px']:5d}px | {d['rank']}/{d['n_fam']} {d['rel']:.2f} | "
                  f"{d['bands']:2d}/{d['drawn']:2d} {d['spacing']:5.1f}px | {d['angle']:6.1f} | "
                  f"{d['found']} {d['nearest']:5.1f} | {d['verdict']}: {d['reason'][:110]}")
            if "stage" in d:
                print(f"        trace: {d['stage']}")
    if r["spurious_list"]:
        print("   spurious (seed grain px | angle | bands | significance | polarity | nearest true)")
        for d in r["spurious_list"]:
            print(f"    s{d['seed']} g{d['grain']:<3d} {d['px']:5d}px | {d['angle']:6.1f} | {d['n_bands']} | "
                  f"{d['sig']:.1f} | {d['pol']} | {d['nearest_true']:.1f}")
    if r["neg_list"]:
        print("   families on negatives (seed grain px | angle | bands | significance | polarity)")
        for d in r["neg_list"]:
            print(f"    s{d['seed']} g{d['grain']:<3d} {d['px']:5d}px | {d['angle']:6.1f} | {d['n_bands']} | "
                  f"{d['sig']:.1f} | {d['pol']}")


def _parse_opts(items):
    out = {}
    for it in items or []:
        k, _, v = it.partition("=")
        if not _:
            raise ValueError(f"--opt expects NAME=VALUE, got {it!r}")
        if k == "scales":
            out[k] = tuple(float(x) for x in v.split(","))
        elif k in ("min_bands", "max_families", "working_size", "oversampling"):
            out[k] = int(v)
        else:
            out[k] = float(v)
    return out


def main(argv=None):
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--levels", default="easy,typical,hard")
    ap.add_argument("--seeds", type=int, default=4, help="maps per level (seeds 1..N)")
    ap.add_argument("--quick", action="store_true", help="2 maps per level")
    ap.add_argument("--no-negatives", action="store_true")
    ap.add_argument("--opt", action="append", help="detector option NAME=VALUE (scales as 1,1.7,2.8); repeatable")
    ap.add_argument("--trace", action="store_true",
                    help="for each miss, the detector stage where the nearest candidate died (re-runs missed grains)")
    ap.add_argument("--brief", action="store_true", help="no lists of misses")
    ap.add_argument("--without", default="", help="realism features to leave out (ablation), comma-separated: "
                    + ", ".join(FEATURES))
    ap.add_argument("--save-maps", default=None, help="folder for the maps, labels and truth (.npy/.json)")
    ap.add_argument("--guided", type=float, default=None, metavar="SIGMA",
                    help="give the detector simulated predicted traces (fcc: 4 per grain): the true families' angles "
                         "off by N(0, SIGMA) deg and random decoys")
    ap.add_argument("--smooth", type=float, default=0.0,
                    help="blur every map by a Gaussian of this many points (smooth content at its own sampling)")
    a = ap.parse_args(argv)
    try:
        opts = _parse_opts(a.opt)
        levels = [x.strip() for x in a.levels.split(",") if x.strip()]
        off = frozenset(x.strip() for x in a.without.split(",") if x.strip())
        if off - set(FEATURES):
            raise ValueError(f"unknown feature {sorted(off - set(FEATURES))[0]!r}; expected {', '.join(FEATURES)}")
        bad = [x for x in levels if x not in LEVELS]
        if bad:
            raise ValueError(f"unknown level {bad[0]!r}; expected {', '.join(LEVELS)}")
    except ValueError as e:
        print(f"error: {e}", file=sys.stderr)
        return 2
    n = 2 if a.quick else a.seeds
    seeds = list(range(1, n + 1))
    print(f"strain-map benchmark: levels {levels}, seeds {seeds}, detector options {opts or 'defaults'}, "
          f"left out: {', '.join(sorted(off)) or 'nothing'}, " + (f"smoothed by {a.smooth:g} points, " if a.smooth else "") +
          f"map {SHAPE[0]} x {SHAPE[1]}, scored grains {SCORED_PX[0]}-{SCORED_PX[1]} px, match {MATCH_TOL_DEG:g} deg")
    t0 = time.perf_counter()
    tot = dict(true=0, found=0, spurious=0, neg=0, negg=0)
    calib = []
    for lv in levels:
        r = run_level(lv, seeds, opts, negatives=not a.no_negatives, save=a.save_maps, off=off, trace=a.trace,
                      smooth=a.smooth, guided=a.guided)
        _print_level(r, verbose=not a.brief)
        tot["true"] += r["true"]
        tot["found"] += r["found"]
        tot["spurious"] += r["spurious"]
        tot["neg"] += r["neg_fams"]
        tot["negg"] += r["neg_grains"]
        calib += r["guided_calib"]
    print(f"\nall levels: recall {tot['found']}/{tot['true']} = {tot['found'] / max(1, tot['true']):.3f}, "
          f"spurious {tot['spurious']}, families on negatives {tot['neg']} in {tot['negg']} grains; "
          f"wall {time.perf_counter() - t0:.0f} s")
    if calib:
        _print_guided_calibration(np.array(calib, float))
    return 0


def _print_guided_calibration(c):
    """How well the guided families' p_none states the share of them that match no true family (rows: p_none as
    identification computes it, p_none over 180 deg, matched no true family)."""
    print(f"\nguided families of scored grains: {len(c)}; matched no true family: {int(c[:, 2].sum())} "
          f"({c[:, 2].mean():.3f})")
    print(f"   mean p_none weighed per trace searched (as identify computes it): {c[:, 0].mean():.3f}; "
          f"as an open search's (before): {c[:, 1].mean():.4f}")
    for lo, hi in ((0.0, 0.03), (0.03, 0.06), (0.06, 0.1), (0.1, 1.01)):
        sel = (c[:, 0] >= lo) & (c[:, 0] < hi)
        if sel.any():
            print(f"   p_none {lo:.2f}-{min(hi, 1.0):.2f}: {int(sel.sum())} families, mean p_none {c[sel, 0].mean():.3f}, "
                  f"matched no true family {c[sel, 2].mean():.3f}")


if __name__ == "__main__":
    raise SystemExit(main())
