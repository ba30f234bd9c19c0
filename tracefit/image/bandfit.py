"""Fit one band's centre line at full resolution (private to the package).

A strip is sampled along the candidate line (bilinear, ``2 * half_width + 1`` samples
across); its background is a straight line between the strip's two outer edges, row by
row. The band centre in each row is the sub-pixel peak of the smoothed,
background-removed profile; a robust weighted straight-line fit of those centres gives
the band's line, angle and angle uncertainty.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import NamedTuple

import cv2
import numpy as np

from tracefit.conventions import pixel_direction_angle
from tracefit.image.geometry import _segment_in_image, _to_working
from tracefit.image.selection import _median_inplace

STRIP_SMOOTH_ACROSS_PX = 0.8  # Gaussian smoothing of the strip across the band
STRIP_SMOOTH_ALONG_PX = 2.0  # ... and along it (in pixels of the image)
MIN_SNR = 4.0  # least centre contrast-to-noise ratio of a row that counts
# most rows sampled along a band: a longer band's rows lie several px apart, still independent
# samples for the line fit. 1500, then 800 before (benchmarks/detect.py, 16 MP, interleaved runs: detection
# / bare Canny + Hough 1.34-1.46 at 800, 1.05-1.21 at 400; angle errors within 0.0002 deg either way;
# standard suite median error 0.0012 -> 0.0013 deg)
MAX_STRIP_ROWS = 400


@dataclass
class _BandFit:
    """The fitted centre line of one band (full-resolution pixels, (col, row))."""

    point: np.ndarray  # a point on the line
    direction: np.ndarray  # unit direction
    angle: float  # image-frame axial angle, degrees
    sigma: float  # its standard uncertainty, degrees
    ends: tuple  # (pa, pb) endpoints of the seen part
    snr: float  # median contrast-to-noise ratio of the rows used
    seen: float  # length of the seen part, px
    rms: float  # weighted rms of the centres about the line, px
    shift: float  # largest move of the line from the starting line, px
    n: int  # rows used
    depth: float = float("nan")  # relative depth against the local median grey (set later)


class _Strip(NamedTuple):
    values: np.ndarray  # (nt, 2 hw + 1) float32 samples
    t: np.ndarray  # (nt,) float32 positions along the line, px
    u: np.ndarray  # (2 hw + 1,) float32 offsets across it, px
    hw: int
    inside: np.ndarray  # (nt,) bool: the whole row lies in the image and the analysed region


def _sample_strip(img, valid, p, d, half_width, max_samples, f):
    """Sample the strip along ``p + t d``; None when the line crosses less than 20 px of image."""
    h, w = img.shape
    n = np.array([-d[1], d[0]])
    seg = _segment_in_image(p, d, w, h)
    if seg is None:
        return None
    t0, t1 = seg
    length = t1 - t0
    if length < 20:
        return None
    nt = int(min(max_samples, math.ceil(length) + 1))
    t = np.linspace(t0, t1, nt).astype(np.float32)
    hw = int(half_width)
    u = np.arange(-hw, hw + 1, dtype=np.float32)
    mapx = (p[0] + t[:, None] * d[0] + u[None, :] * n[0]).astype(np.float32)
    mapy = (p[1] + t[:, None] * d[1] + u[None, :] * n[1]).astype(np.float32)
    strip = cv2.remap(img, mapx, mapy, cv2.INTER_LINEAR, borderMode=cv2.BORDER_REPLICATE)
    # each row is monotonic across the strip (a constant plus u * n, rounded), so its extremes
    # are its two end samples: the same test as min/max over the whole row
    x0, x1, y0, y1 = mapx[:, 0], mapx[:, -1], mapy[:, 0], mapy[:, -1]
    inside = ((np.minimum(x0, x1) >= 0) & (np.maximum(x0, x1) <= w - 1)
              & (np.minimum(y0, y1) >= 0) & (np.maximum(y0, y1) <= h - 1))
    if valid is not None:
        # the analysed region, checked on the (working-resolution) mask at the strip's
        # centre and edges
        vh, vw = valid.shape
        ok = np.ones(nt, bool)
        for j in (0, hw, 2 * hw):
            cc = np.clip(np.rint(_to_working(mapx[:, j], f)).astype(np.intp), 0, vw - 1)
            rr = np.clip(np.rint(_to_working(mapy[:, j], f)).astype(np.intp), 0, vh - 1)
            ok &= valid[rr, cc] > 0
        inside &= ok
    return _Strip(strip, t, u, hw, inside)


def _row_centres(s: _Strip, polarity, pixel_noise):
    """Sub-pixel band centre of each strip row and its contrast-to-noise ratio.

    Returns
    -------
    upk : ndarray (nt,)
        Centre offset across the strip, px.
    snr : ndarray (nt,)
        Peak height over the smoothed pixel noise.
    good : ndarray of bool (nt,)
        Rows whose peak is inside the analysed region, significant, not far below the
        typical peak and not at the strip's edge.
    step : float
        Spacing of the rows along the line, px.
    """
    strip, t, u, hw, inside = s
    nt = len(t)
    # background: a straight line between the strip's two outer edges, row by row
    ne = 2 if hw < 6 else 3
    left = strip[:, :ne].mean(axis=1, keepdims=True)
    right = strip[:, -ne:].mean(axis=1, keepdims=True)
    frac_u = (u[None, :] + hw) / max(2 * hw, 1)
    q = polarity * (strip - (left + (right - left) * frac_u))
    step = float(t[1] - t[0]) if nt > 1 else 1.0
    along = max(0.5, STRIP_SMOOTH_ALONG_PX / step)
    q = cv2.GaussianBlur(q, (0, 0), sigmaX=STRIP_SMOOTH_ACROSS_PX, sigmaY=along)
    # pixel noise reduced by the strip smoothing (sum of squared Gaussian weights per axis)
    noise = pixel_noise * math.sqrt(1.0 / (2 * math.sqrt(math.pi) * STRIP_SMOOTH_ACROSS_PX) / (2 * math.sqrt(math.pi) * along)) + 1e-12
    k = np.argmax(q[:, 1:-1], axis=1) + 1
    rows = np.arange(nt)
    qm, q0, qp = q[rows, k - 1], q[rows, k], q[rows, k + 1]
    den = qm - 2 * q0 + qp
    frac = np.where(den < 0, 0.5 * (qm - qp) / np.where(den < 0, den, -1.0), 0.0)
    upk = u[k] + np.clip(frac, -0.5, 0.5)
    snr = q0 / noise
    typical = float(_median_inplace(q0[inside])) if inside.any() else 0.0
    good = inside & (snr >= MIN_SNR) & (q0 >= 0.3 * typical) & (k >= 2) & (k <= 2 * hw - 2)
    return upk, snr, good, step


def _wfit(t, u, w):
    """Weighted least-squares line ``u = a + b t``; returns (a, b)."""
    sw = w.sum()
    tm, um = (w * t).sum() / sw, (w * u).sum() / sw
    stt = (w * (t - tm) ** 2).sum()
    b = (w * (t - tm) * (u - um)).sum() / max(stt, 1e-12)
    return um - b * tm, b


def _robust_line(tg, ug, wg, min_kept):
    """Weighted line fit with up to four rounds of 3-MAD outlier rejection.

    Returns
    -------
    (a, b, keep) or None
        Offset and slope of ``u = a + b t`` and the rows kept; None when fewer than
        ``min_kept`` rows survive.
    """
    keep = np.ones(len(tg), bool)
    for _ in range(4):
        if keep.sum() < 10:
            return None
        a_, b_ = _wfit(tg[keep], ug[keep], wg[keep])
        res = ug - (a_ + b_ * tg)
        mad = 1.4826 * float(_median_inplace(np.abs(res[keep])))
        new = np.abs(res) <= max(3.0 * mad, 0.35)
        if np.array_equal(new, keep):
            break
        keep = new
    if keep.sum() < min_kept:
        return None
    a_, b_ = _wfit(tg[keep], ug[keep], wg[keep])
    return a_, b_, keep


def _fit_band(img, valid, p, d, half_width, polarity, pixel_noise, max_samples=MAX_STRIP_ROWS, f=1):
    """Fit one band's centre line at full resolution on a strip sampled along it.

    Parameters
    ----------
    img : ndarray of float32, (H, W)
        Full-resolution grey image.
    valid : ndarray of uint8 or None
        Analysed region at working resolution (reduction factor ``f``).
    p, d : ndarray, (2,)
        Starting point and unit direction (col, row), full-resolution pixels.
    half_width : int
        Half width of the strip, px.
    polarity : {-1, 1}
        Dark (-1) or bright (+1) bands.
    pixel_noise : float
        Per-pixel noise of ``img``, image units.
    max_samples : int
        Most rows sampled along the line.
    f : int
        Working-copy reduction factor (for ``valid``).

    Returns
    -------
    _BandFit or None
        None when the line is short or too few rows show a significant band.
    """
    s = _sample_strip(img, valid, p, d, half_width, max_samples, f)
    if s is None:
        return None
    nt = len(s.t)
    upk, snr, good, step = _row_centres(s, polarity, pixel_noise)
    # shares of the rows inside the analysed region, not of the whole line across the
    # image: a band in a small grain of a large image is short
    nt = int(s.inside.sum())
    if good.sum() < max(12, 0.08 * nt):
        return None
    tg, ug = s.t[good].astype(np.float64), upk[good].astype(np.float64)
    wg = np.minimum(snr[good], 30.0).astype(np.float64) ** 2
    line = _robust_line(tg, ug, wg, max(10, 0.06 * nt))
    if line is None:
        return None
    a_, b_, keep = line
    res = ug[keep] - (a_ + b_ * tg[keep])
    tk = tg[keep]
    # samples are correlated over about the along-band smoothing length
    corr = max(1.0, 2.5 * STRIP_SMOOTH_ALONG_PX / step)
    wk = wg[keep]
    s_res = float(np.sqrt(np.multiply(res**2, wk).sum() / wk.sum()))  # np.average's own sum and division
    sxx = float(np.sum((tk - tk.mean()) ** 2))
    sig_b = s_res * math.sqrt(corr) / math.sqrt(max(sxx, 1e-9))
    n = np.array([-d[1], d[0]])
    d_new = d + b_ * n
    d_new = d_new / np.hypot(*d_new)
    p_new = p + a_ * n
    # endpoints of the seen part (projected on the new line)
    pa = p_new + tk.min() * (d + b_ * n)
    pb = p_new + tk.max() * (d + b_ * n)
    return _BandFit(
        point=p_new,
        direction=d_new,
        angle=float(pixel_direction_angle(d_new[0], d_new[1])),
        sigma=math.degrees(math.atan(sig_b)) / (1.0 + b_ * b_) + 1e-4,
        ends=(pa, pb),
        snr=float(_median_inplace(snr[good][keep])),
        seen=float(tk.max() - tk.min()),
        rms=s_res,
        shift=float(max(abs(a_ + b_ * tk.min()), abs(a_ + b_ * tk.max()))),
        n=int(keep.sum()),
    )
