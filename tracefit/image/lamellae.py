"""Wide twin lamellae: a pair of parallel step edges of opposite sign as one band family.

An annealing twin seen in a section is often a lamella tens of pixels wide, darker or
brighter than its grain and bounded by two straight parallel edges; the ridge filters of
:mod:`tracefit.image.ridges` look for thin bands and do not respond to it. Here edges are
found with Canny's detector on a copy reduced to at most ``WORK_PX`` px (area average),
each edge pixel votes with its gradient direction for a line (direction bins of
``ANGLE_BIN_DEG``, offsets of 1 px, the two gradient signs apart), and a line of one sign
paired with a parallel line of the other sign, close beside it, makes a lamella.

A pair is kept when it is much longer than wide, not along an image axis (scan lines,
tile seams), and significant: its number of false alarms against edge pixels of that
direction scattered at random over the region (the a contrario count of
:mod:`tracefit.image.significance`, after Desolneux, Moisan & Morel, IJCV 40, 2000) is at
most ``10 ** -min_significance``.

Experimental: not called by :func:`tracefit.image.detect_bands` and not exported. On the
real steel images (benchmarks/realdata.md) it finds lamellae the ridge search finds too
(S1-A, S5-A, S12-B) but not the single lamellae it was written for (S1-D, S12-C, in
masked regions), and it reports pairs on scikit-image's camera (tripod legs) and a few
unmatched pairs on whole images; its count of false alarms is not calibrated yet.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from tracefit.conventions import axial_difference, pixel_direction_angle
from tracefit.errors import TracefitInputError
from tracefit.image.results import BandFamily, BandLine
from tracefit.image.significance import binomial_log10_tail

__all__ = ["find_lamellae"]

WORK_PX = 768  # longest side of the copy searched, px
EDGE_SIGMA_PX = 2.5  # Gaussian smoothing before the gradient, working px
ANGLE_BIN_DEG = 1.0  # direction bins of the line votes
ANGLE_WINDOW_DEG = 3.0  # an edge pixel counts for directions within this of its own
MIN_WIDTH_PX = 3.0  # narrowest lamella, working px (narrower ones are thin bands)
MIN_LENGTH_TO_WIDTH = 3.0  # a lamella is at least this many times longer than wide
AXIS_GUARD_DEG = 0.5  # pairs along an image axis are seams or scan lines
MIN_SIGNIFICANCE = 40.0  # least -log10(NFA) of a pair, whatever the caller asks less


def _edges(img, mask):
    """Canny edge pixels of a float image and their gradient angles (degrees, [0, 360), pixel frame)."""
    g = cv2.GaussianBlur(img, (0, 0), EDGE_SIGMA_PX)
    gx = cv2.Sobel(g, cv2.CV_32F, 1, 0, ksize=3)
    gy = cv2.Sobel(g, cv2.CV_32F, 0, 1, ksize=3)
    inside = gx[mask] if mask is not None else gx.ravel()
    noise = 1.4826 * float(np.median(np.abs(inside - np.median(inside)))) + 1e-12
    scale = 8.0 / noise  # gradients in units of noise/8, stored as int16 for OpenCV's Canny
    dx = np.clip(gx * scale, -32000, 32000).astype(np.int16)
    dy = np.clip(gy * scale, -32000, 32000).astype(np.int16)
    edge = cv2.Canny(dx, dy, 8.0 * 3.0, 8.0 * 6.0, L2gradient=True) > 0  # 3 and 6 noise sigmas
    if mask is not None:
        edge &= mask
    r, c = np.nonzero(edge)
    phi = np.degrees(np.arctan2(gy[r, c], gx[r, c])) % 360.0
    return c.astype(np.float64), r.astype(np.float64), phi


def _line_votes(c, r, phi, theta_deg, n_rho, rho0):
    """Offset histograms (1 px bins) of the edge pixels near direction ``theta_deg``, per gradient sign."""
    diff = (phi - theta_deg + 180.0) % 360.0 - 180.0  # gradient along +normal: sign +1
    out = {}
    for sign, centre in ((1, 0.0), (-1, 180.0)):
        sel = np.abs((diff - centre + 180.0) % 360.0 - 180.0) <= ANGLE_WINDOW_DEG
        th = math.radians(theta_deg)
        rho = c[sel] * math.cos(th) + r[sel] * math.sin(th) - rho0
        hist = np.bincount(np.clip(rho.astype(np.intp), 0, n_rho - 1), minlength=n_rho).astype(np.float64)
        out[sign] = (np.convolve(hist, [1.0, 1.0, 1.0], mode="same"), sel, rho)
    return out


def _fit_edge(c, r, f):
    """Total least squares line through edge pixels (working px) in full-resolution px.

    Returns (centre, direction, angle_deg, sigma_deg, (t_min, t_max)).
    """
    pts = np.stack([(c + 0.5) * f - 0.5, (r + 0.5) * f - 0.5], axis=1)
    ctr = pts.mean(axis=0)
    u, s, vt = np.linalg.svd(pts - ctr, full_matrices=False)
    d = vt[0]
    t = (pts - ctr) @ d
    res = (pts - ctr) @ np.array([-d[1], d[0]])
    sxx = float(np.sum((t - t.mean()) ** 2))
    # neighbouring edge pixels are correlated over about the smoothing length
    corr = max(1.0, 2.5 * EDGE_SIGMA_PX)
    sig = math.degrees(math.sqrt(corr) * float(np.std(res)) / math.sqrt(max(sxx, 1e-9))) + 1e-4
    return ctr, d, float(pixel_direction_angle(d[0], d[1])), sig, (float(t.min()), float(t.max()))


def _pair_log10_nfa(n_px, p, counts, n_side):
    """log10 NFA of two lines with (samples, hits) ``counts`` among edge pixels of density ``p``."""
    log_lines = 3.0 * math.log10(max(n_side, 2.0))
    tot = sum(log_lines + binomial_log10_tail(n, k, p) for n, k in counts)
    return math.log10(2 * 180.0 / ANGLE_BIN_DEG) + tot - math.log10(2.0)


def find_lamellae(image: np.ndarray, mask: np.ndarray | None = None, min_significance: float = 16.0,
                  max_families: int = 2, pixel_size_um: float | None = None) -> list[BandFamily]:
    """Wide lamellae bounded by two parallel straight edges, one family per direction.

    Parameters
    ----------
    image : ndarray of float, (H, W)
        Grey image (finite).
    mask : ndarray of bool, (H, W), optional
        Pixels to analyse.
    min_significance : float
        Least ``-log10(NFA)`` of a pair (never below ``MIN_SIGNIFICANCE``).
    max_families : int
        Most families returned (>= 1), strongest first.
    pixel_size_um : float, optional
        Micrometres per pixel, for ``spacing_um``.

    Returns
    -------
    list of BandFamily
        Each with two lines (the lamella's edges, full-resolution pixels), ``n_bands`` 2,
        ``spacing_px`` the lamella width, ``polarity`` dark or bright (the lamella against
        its surroundings) and its ``log10_nfa``.

    Raises
    ------
    TracefitInputError
        ``image`` not 2-D, or ``mask`` of another shape.

    Examples
    --------
    A dark lamella 30 px wide at 60 deg across a noisy grain:

    >>> rng = np.random.default_rng(0)
    >>> rr, cc = np.mgrid[0:300, 0:300]
    >>> s = cc * math.sin(math.radians(60)) + rr * math.cos(math.radians(60))
    >>> img = np.where(np.abs(s - 200) < 15, 80.0, 120.0) + rng.normal(0, 3, (300, 300))
    >>> fams = find_lamellae(img.astype(np.float32))
    >>> [(round(f.angle_deg), round(f.spacing_px), f.polarity) for f in fams]
    [(60, 30, 'dark')]
    >>> find_lamellae(rng.normal(100, 3, (200, 200)).astype(np.float32))
    []
    """
    # Over 80 lines only through its docstring and the guards of a pair, each with its reason.
    img = np.asarray(image, np.float32)
    if img.ndim != 2:
        raise TracefitInputError(f"image has shape {img.shape}; expected a 2-D grey image")
    if mask is not None and np.shape(mask) != img.shape:
        raise TracefitInputError(f"mask has shape {np.shape(mask)} but the image has {img.shape}; expected the same")
    h, w = img.shape
    f = max(1, int(math.ceil(max(h, w) / WORK_PX)))
    wk = cv2.resize(img, (w // f, h // f), interpolation=cv2.INTER_AREA) if f > 1 else img
    mw = None
    if mask is not None:
        mw = cv2.resize(np.asarray(mask, np.uint8) * np.uint8(255), (w // f, h // f), interpolation=cv2.INTER_AREA) >= 250 if f > 1 else np.asarray(mask, bool)
        mw = cv2.erode(mw.astype(np.uint8), np.ones((7, 7), np.uint8)) > 0  # region border is no edge
        if mw.sum() < 400:
            return []
    c, r, phi = _edges(wk, mw)
    if len(c) < 40:
        return []
    hh, ww = wk.shape
    n_region = int(mw.sum()) if mw is not None else hh * ww
    diag = math.hypot(hh, ww)
    n_rho = int(2 * math.ceil(diag)) + 3
    rho0 = -math.ceil(diag) - 1
    found = []
    for theta in np.arange(0.0, 180.0, ANGLE_BIN_DEG):
        votes = _line_votes(c, r, phi, theta, n_rho, rho0)
        p = max(1e-4, (votes[1][1].sum() + votes[-1][1].sum()) * 3.0 / n_region)  # hits within 1 px
        pk = {s: np.argsort(-votes[s][0])[:3] for s in (1, -1)}
        for i in pk[1]:
            for j in pk[-1]:
                width = abs(float(i) - float(j))
                if width < MIN_WIDTH_PX or min(votes[1][0][i], votes[-1][0][j]) < max(25.0, MIN_LENGTH_TO_WIDTH * width):
                    continue
                found.append((theta, i, j, votes, p))
    fams = []
    for theta, i, j, votes, p in found:
        edges = []
        for s, k in ((1, i), (-1, j)):
            _, sel, rho = votes[s]
            near = np.abs(rho - (k + 0.5)) <= 1.5
            idx = np.flatnonzero(sel)[near]
            if len(idx) < 20:
                break
            edges.append((s, _fit_edge(c[idx], r[idx], f), len(idx)))
        if len(edges) < 2:
            continue
        (_, e1, n1), (_, e2, n2) = edges
        ang = float(np.average([e1[2], e1[2] + axial_difference(e2[2], e1[2])], weights=[1 / e1[3] ** 2, 1 / e2[3] ** 2]) % 180.0)
        if abs(axial_difference(e1[2], e2[2])) > 3.0 * math.hypot(e1[3], e2[3]) + 0.5:
            continue  # not parallel
        if min(abs(axial_difference(ang, a)) for a in (0.0, 90.0)) < AXIS_GUARD_DEG:
            continue
        width = abs(float((e2[0] - e1[0]) @ np.array([-e1[1][1], e1[1][0]])))
        seen = [e[4][1] - e[4][0] for e in (e1, e2)]
        if min(seen) < MIN_LENGTH_TO_WIDTH * width or width < MIN_WIDTH_PX * f:
            continue  # a wide block (a grain, a square) is no lamella
        # a contrario: each edge's hits (pixels within 1.5 px) among its seen length in samples of 1 working px
        counts = [(int(max(sn / f, nk)), int(nk)) for sn, nk in zip(seen, (n1, n2))]
        lnfa = _pair_log10_nfa(n_region, min(p, 0.999), counts, diag)
        if not -lnfa >= max(min_significance, MIN_SIGNIFICANCE) or not math.isfinite(lnfa):
            continue
        # the edge whose gradient points along +normal is the lamella's far side when it is dark
        th = math.radians(theta)
        nrm = np.array([math.cos(th), math.sin(th)])
        dark = (e1[0] @ nrm) > (e2[0] @ nrm)  # intensity falls at e2 (sign -1) before it rises at e1
        lines = []
        for e in (e1, e2):
            pa, pb = e[0] + e[4][0] * e[1], e[0] + e[4][1] * e[1]
            lines.append(BandLine(float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1]), e[2], e[3], float("nan")))
        sig = 1.0 / math.sqrt(1 / e1[3] ** 2 + 1 / e2[3] ** 2)
        fams.append(BandFamily(
            angle_deg=ang, angle_sigma_deg=sig, n_bands=2, spacing_px=width, spacing_sigma_px=float("nan"),
            spacing_um=None if pixel_size_um is None else width * pixel_size_um,
            strength=float(sum(seen)) / (diag * f), polarity="dark" if dark else "bright",
            lines=lines, log10_nfa=float(lnfa)))
    out: list[BandFamily] = []
    for fm in sorted(fams, key=lambda z: z.log10_nfa):
        if not any(abs(axial_difference(fm.angle_deg, g.angle_deg)) < 2.0 for g in out):
            out.append(fm)
    return out[:max_families]
