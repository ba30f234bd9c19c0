"""Depth test of the band detector: how far a band stands from the local median grey.

A band differs from the local *median* grey level; the gaps in a lattice of bright bands
(and vice versa) sit at that level and are no bands. :func:`_depth_map` gives the
relative depth ``(I - B) / B`` against the local background level B, and a sampler at
full-resolution points; :func:`_on_band_side` keeps the ridge pixels on the band's side
of the median, :func:`_hough_depth` screens candidate families cheaply before the
full-resolution fits. Private to the package.
"""

from __future__ import annotations

import math

import cv2
import numpy as np

from tracefit.conventions import axial_mean
from tracefit.image.geometry import _hough_line, _segment_in_image, _to_full, _to_working
from tracefit.image.hough import _pixels_near_angle
from tracefit.image.ridges import RidgePixels, _pixel_noise


SPAN_PX = 1.5  # ridge pixels this near a Hough line (working px) give the stretch its depth is read on


def _depth_map(wk, mw, f, spacing_hint, pixel_noise=None, full=None):
    """Relative depth map ``(I - B) / B`` and a sampler at full-resolution points.

    B is the local background level: a median over about ``spacing_hint`` px refined
    towards the local mode (the grey level between the bands).

    Parameters
    ----------
    wk : ndarray of float32, (h, w)
        Working copy of the image.
    mw : ndarray of bool or None
        Analysed pixels of the working copy.
    f : int
        Reduction factor of the working copy.
    spacing_hint : float
        Median window, working pixels (several band spacings).
    pixel_noise : float, optional
        ``_pixel_noise(wk, mw)`` when the caller has it already (speed); computed otherwise.
    full : ndarray of float32, (H, W), optional
        The full-resolution image of a reduced copy (``f`` > 1), for ``depth_of(..., exact=True)``.

    Returns
    -------
    depth_of : callable
        ``depth_of(points_full)`` -> depth at each (col, row) full-resolution point, (n,), read
        on the working copy. ``depth_of(points_full, exact=True)`` reads the grey level on
        ``full`` instead, smoothed over one image pixel (as the working copy is at ``f`` = 1):
        for points on a fitted band centre line, where a band narrower than ``f`` px keeps
        the depth that the reduction averages away.
    dmap : ndarray of float32, (h, w)
        The depth map itself.
    """
    h, w = wk.shape
    ds = max(1, int(round(min(h, w) / 256)))
    # strided, not averaged: averaging would smear the bands into the background level
    small = np.ascontiguousarray(wk[ds // 2 :: ds, ds // 2 :: ds])
    if mw is not None:
        ms = mw[ds // 2 :: ds, ds // 2 :: ds]
        if ms.any():
            small = np.where(ms, small, np.median(small[ms])).astype(np.float32)
    lo, hi = np.percentile(small, [0.1, 99.9])
    u8 = np.clip((small - lo) / max(hi - lo, 1e-12) * 254 + 0.5, 0, 255).astype(np.uint8)
    k = int(2 * math.ceil(spacing_hint / ds) + 1)
    k = max(3, min(k, 2 * (min(small.shape) // 2) - 1))
    med = cv2.medianBlur(u8, k).astype(np.float32) / 254.0 * (hi - lo) + lo
    # From the median towards the mode (the background between bands): average only
    # the pixels near the current level, twice. Where bands cover much of the area the
    # median leans towards them; the mode does not.
    sig = (_pixel_noise(wk, mw) if pixel_noise is None else pixel_noise) * 1.0
    valid = np.ones(small.shape, bool) if mw is None else ms
    for _ in range(2):
        near = (np.abs(small - med) <= 2.5 * sig) & valid
        wgt = near.astype(np.float32)
        num = cv2.blur(small * wgt, (k, k), borderType=cv2.BORDER_REFLECT)
        den = cv2.blur(wgt, (k, k), borderType=cv2.BORDER_REFLECT)
        med = np.where(den > 0.05, num / np.maximum(den, 1e-6), med).astype(np.float32)
    med = cv2.resize(med, (w, h), interpolation=cv2.INTER_LINEAR)
    med = np.maximum(med, max(1e-6, 0.05 * abs(float(np.median(med)))))
    dmap = cv2.GaussianBlur(wk, (0, 0), 1.0)
    dmap -= med
    dmap /= med
    if full is None or f == 1:
        del med

    def depth_of(points_full, exact=False):
        pf = np.asarray(points_full, float)
        pw = _to_working(pf, f)
        if exact and full is not None and f > 1:
            pw32 = pw.astype(np.float32)
            bg = cv2.remap(med, pw32[:, :1], pw32[:, 1:], cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)[:, 0]
            return (_smoothed_at(full, pf) - bg) / bg
        c = np.clip(np.rint(pw[:, 0]).astype(int), 0, w - 1)
        r = np.clip(np.rint(pw[:, 1]).astype(int), 0, h - 1)
        return dmap[r, c]

    return depth_of, dmap


_NEAR = np.array([(dr, dc) for dr in range(-3, 4) for dc in range(-3, 4)])
_GAUSS = np.exp(-0.5 * (_NEAR**2).sum(axis=1)).astype(np.float32)
_GAUSS /= _GAUSS.sum()


def _smoothed_at(img, points):
    """Grey level of ``img`` at (col, row) points (nearest pixel), smoothed by a Gaussian of sigma 1 px.

    The 7 x 7 pixels about each point with the Gaussian's weights, edges repeated: the
    smoothing of the working copy's depth map at ``f`` = 1.
    """
    h, w = img.shape
    c = np.rint(points[:, 0]).astype(np.intp)
    r = np.rint(points[:, 1]).astype(np.intp)
    rr = np.clip(r[:, None] + _NEAR[None, :, 0], 0, h - 1)
    cc = np.clip(c[:, None] + _NEAR[None, :, 1], 0, w - 1)
    return img[rr, cc] @ _GAUSS


def _keep(rp: RidgePixels, sel) -> RidgePixels:
    """The ridge pixels selected by ``sel`` (bool or index array)."""
    return RidgePixels(rp.col[sel], rp.row[sel], rp.strength[sel], rp.polarity, rp.shape, rp.sector[sel], rp.sector_deg)


def _on_band_side(rp: RidgePixels, dmap, min_depth) -> RidgePixels:
    """Ridge pixels at least ``min_depth`` below (dark) / above (bright) the local median grey.

    This drops the gaps between bands, which are ridges of the opposite sign at the
    median level.
    """
    return _keep(rp, rp.polarity * dmap[rp.row.astype(np.intp), rp.col.astype(np.intp)] >= min_depth)


def _hough_depth(rp: RidgePixels, lines, depth_of, f, region, n_lines=5):
    """Median signed depth along the strongest Hough lines of a candidate (best of 3 offsets).

    Parameters
    ----------
    rp : RidgePixels
        Ridge pixels of the candidate's polarity (gives the sign).
    lines : ndarray, (n, 5)
        The candidate's Hough lines (alpha, theta, rho, votes, coverage).
    depth_of : callable
        From :func:`_depth_map`.
    f : int
        Reduction factor of the working copy.
    region : ndarray of bool, (h, w)
        Analysed pixels of the working copy.
    n_lines : int
        How many of the strongest lines to sample.

    Returns
    -------
    whole, span : float
        Median over the lines of their signed relative depth along the whole line across
        the region, and along the stretch their ridge pixels occupy (0.0 when none could
        be sampled).

    Notes
    -----
    The stretch runs from the first to the last percentile, along the line, of the ridge
    pixels within ``SPAN_PX`` of it (the whole line when fewer than 8 samples fall in it).
    Bands confined to one part of an image (one grain of a micrograph) are judged by it;
    along the whole line they would be judged by the background beyond their ends.
    """
    h, w = region.shape
    top = lines[np.argsort(-lines[:, 3])[:n_lines]]
    near = _pixels_near_angle(rp, float(axial_mean(top[:, 0], top[:, 3])))
    px = np.column_stack([rp.col[near], rp.row[near]]).astype(np.float64)
    vals = []
    for _, th, rho, _, _ in top:
        nt, dt = _hough_line(th)
        seg = _segment_in_image(rho * nt, dt, w, h)
        if seg is None:
            continue
        tt = np.linspace(seg[0], seg[1], int(np.clip((seg[1] - seg[0]) / 2, 8, 96)))
        in_span = np.ones(len(tt), bool)
        on = np.abs(px @ nt - rho) <= SPAN_PX
        if on.sum() >= 8:
            t0, t1 = np.percentile(px[on] @ dt, [1, 99])
            in_span = (tt >= t0 - SPAN_PX) & (tt <= t1 + SPAN_PX)
        best = None
        for off in (-1.0, 0.0, 1.0):
            pw = rho * nt + off * nt + tt[:, None] * dt
            ok = region[np.clip(np.rint(pw[:, 1]).astype(int), 0, h - 1), np.clip(np.rint(pw[:, 0]).astype(int), 0, w - 1)]
            if ok.sum() < 8:
                continue
            d = rp.polarity * depth_of(_to_full(pw[ok], f))
            whole = float(np.median(d))
            span = float(np.median(d[in_span[ok]])) if in_span[ok].sum() >= 8 else whole
            best = (whole, span) if best is None else (max(best[0], whole), max(best[1], span))
        if best is not None:
            vals.append(best)
    return tuple(float(v) for v in np.median(vals, axis=0)) if vals else (0.0, 0.0)
