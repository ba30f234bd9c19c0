"""Background flattening and oriented-ridge enhancement (Hessian, several scales).

Bands are thin straight valleys (dark) or ridges (bright) in the grey level. After
dividing out the slowly varying background (uneven illumination), the Hessian of the
Gaussian-smoothed image is steered to each orientation sector: a band shows a large
curvature across it and a small one along it. Dark and bright bands are kept apart,
so the weak opposite-sign side lobes beside a band never pose as bands.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass

import cv2
import numpy as np

from tracefit.conventions import angle_to_pixel_direction
from tracefit.image.selection import _mad_inplace
from tracefit.image.threads import ordered_map


__all__ = ["flatten_background", "RidgePixels", "ridge_pixels", "noise_sigma"]


def flatten_background(image: np.ndarray, mask: np.ndarray | None, sigma: float) -> np.ndarray:
    """Relative contrast ``image / background - 1``, zero outside the mask.

    The background is a masked (normalised) Gaussian blur of width ``sigma`` px,
    computed on a reduced copy for speed; excluded pixels do not leak into it.

    Parameters
    ----------
    image : ndarray of float32, (H, W)
        Grey image, any positive units.
    mask : ndarray of bool, (H, W), or None
        Pixels that count (None: all).
    sigma : float
        Background scale, pixels (several band spacings).

    Returns
    -------
    ndarray of float32, (H, W)
        Relative contrast (dimensionless; -0.2 = 20 % darker than the background).

    Examples
    --------
    >>> import numpy as np
    >>> img = np.full((64, 64), 100.0, np.float32)
    >>> img[:, 30:33] = 80.0
    >>> flat = flatten_background(img, None, 24.0)
    >>> print(round(float(flat[10, 31]), 2), round(float(flat[10, 5]), 2))
    -0.19 0.01
    """
    h, w = image.shape
    m = np.ones((h, w), np.float32) if mask is None else mask.astype(np.float32)
    q = max(1, int(sigma // 4))
    sh, sw = max(4, h // q), max(4, w // q)
    small = cv2.resize(image * m, (sw, sh), interpolation=cv2.INTER_AREA)
    msmall = cv2.resize(m, (sw, sh), interpolation=cv2.INTER_AREA)
    s = sigma / q
    num = cv2.GaussianBlur(small, (0, 0), s, borderType=cv2.BORDER_REFLECT)
    den = cv2.GaussianBlur(msmall, (0, 0), s, borderType=cv2.BORDER_REFLECT)
    bg_small = num / np.maximum(den, 1e-3)
    bg = cv2.resize(bg_small, (w, h), interpolation=cv2.INTER_LINEAR)
    floor = max(float(np.percentile(bg_small[msmall > 0.5], 1)) if (msmall > 0.5).any() else 1.0, 1e-3) * 0.2
    out = image / np.maximum(bg, floor) - 1.0
    out *= m
    return out.astype(np.float32, copy=False)


@dataclass
class RidgePixels:
    """Thin ridge (band-centre) pixels of one polarity.

    Parameters
    ----------
    col, row : ndarray of int16, (n,)
        Pixel coordinates (working resolution, at most 32767).
    strength : ndarray of float32, (n,)
        Ridge strength in threshold units (>= 1).
    polarity : int
        -1 dark bands, +1 bright bands.
    shape : (int, int)
        (rows, columns) of the image the pixels belong to.
    sector : ndarray of int16, (n,)
        Orientation sector of each pixel (pixels are stored sector by sector).
    sector_deg : float
        Sector width, degrees; sector k holds bands at about ``k * sector_deg``.

    Examples
    --------
    >>> import numpy as np
    >>> rp = RidgePixels(np.array([3, 4], np.int16), np.array([5, 5], np.int16),
    ...                  np.array([2.0, 3.0], np.float32), -1, (10, 10), np.array([0, 0], np.int16))
    >>> len(rp), rp.angle_deg.tolist()
    (2, [0.0, 0.0])
    """

    col: np.ndarray
    row: np.ndarray
    strength: np.ndarray
    polarity: int
    shape: tuple[int, int]
    sector: np.ndarray
    sector_deg: float = 15.0

    @property
    def angle_deg(self) -> np.ndarray:
        """Band direction of each pixel's sector, image-frame axial degrees."""
        return self.sector.astype(np.float32) * np.float32(self.sector_deg)

    def __len__(self) -> int:
        return len(self.col)


_WHITE: dict[float, float] = {}


def _steered(dxx, dyy, dxy, c, s_):
    """Second derivatives across (nn) and along (tt) a direction with unit normal (c, s)."""
    cc, ss, cs2 = np.float32(c * c), np.float32(s_ * s_), np.float32(2 * c * s_)
    dnn = cc * dxx + ss * dyy + cs2 * dxy
    dtt = ss * dxx + cc * dyy - cs2 * dxy
    return dnn, dtt


def _white_noise_level(sigma):
    """95th percentile of the oriented ridge response to unit white noise at ``sigma``."""
    return _white_noise_stats(sigma)[0]


def _white_noise_stats(sigma):
    """(95th percentile of the ridge response, robust spread of one second derivative) for unit white noise."""
    if sigma not in _WHITE:
        z = np.random.default_rng(12345).standard_normal((256, 256)).astype(np.float32)
        dxx, dyy, dxy = _hessian(z, sigma)
        dnn, dtt = _steered(dxx, dyy, dxy, 1.0, 0.0)
        r = sigma * sigma * np.maximum(dnn - np.abs(dtt), 0)[16:-16, 16:-16]
        _WHITE[sigma] = (float(np.percentile(r, 95)), _robust_spread(dxx[16:-16, 16:-16].ravel()))
    return _WHITE[sigma]


def _robust_spread(v: np.ndarray, copy: bool = True) -> float:
    """Standard deviation from the median absolute deviation (exact for Gaussian samples).

    ``copy=False`` lets it reorder ``v`` (contiguous, 1-D) in place.
    """
    if not v.size:
        return 0.0
    return 1.4826 * float(_mad_inplace(np.array(v, copy=True, order="C").ravel() if copy else v))


def _effective_noise(derivs_one_scale, mask, sn):
    """Noise level (white-noise sigma units) that explains the image's own response at one scale.

    The smallest robust spread of the curvature along four directions, over what unit
    white noise gives. Texture and noise correlated over several pixels (an enlarged
    image) respond more than white noise of the pixel sigma ``sn``; bands respond little
    along their own direction. Never below ``sn``.
    """
    sg, dxx, dyy, dxy = derivs_one_scale
    step = max(1, int(math.sqrt(dxx.size / 60000)))
    sel = (slice(None, None, step), slice(None, None, step))
    keep = None if mask is None else mask[sel]
    half = 0.5 * (dxx[sel] + dyy[sel])
    spreads = []
    for k, comp in enumerate((dxx[sel], dyy[sel], half - dxy[sel], half + dxy[sel])):
        if keep is not None:
            spreads.append(_robust_spread(comp[keep], copy=False))  # a fresh array
        else:  # a view of dxx or dyy (step 1) must be copied; the others are fresh
            spreads.append(_robust_spread(comp.ravel(), copy=k < 2 and step == 1))
    return max(sn, min(spreads) / max(_white_noise_stats(sg)[1], 1e-12))


def _diagonal_second_difference(a: np.ndarray, lag: int = 1) -> np.ndarray:
    """``a[i+L, j+L] - 2 a[i, j] + a[i-L, j-L]`` on the interior (L = ``lag``), shape (H - 2L, W - 2L)."""
    L = lag
    # the same three operations as a[2L:, 2L:] - 2 a[L:-L, L:-L] + a[:-2L, :-2L], in one buffer
    out = np.multiply(a[L:-L, L:-L], 2)
    np.subtract(a[2 * L :, 2 * L :], out, out=out)
    np.add(out, a[: -2 * L, : -2 * L], out=out)
    return out


def _every_nth_difference(a: np.ndarray, lag: int) -> np.ndarray:
    """The values of ``_diagonal_second_difference(a, lag).ravel()[::n]`` with ``n = max(1, size // 400000)``,
    in another order (fresh, contiguous, 1-D); only those differences are computed.

    Element ``k n`` of the flattened (H2, W2) differences lies in row r at a column c with
    c = -r W2 (mod n), so the rows r = j (mod n) take every n-th column from (-j W2) mod n on: n
    strided blocks hold the same values (their order does not matter to a median).
    """
    L = lag
    h2, w2 = a.shape[0] - 2 * L, a.shape[1] - 2 * L
    n = max(1, h2 * w2 // 400000)
    if n == 1:
        return _diagonal_second_difference(a, lag).ravel()
    hi, mid, lo = a[2 * L :, 2 * L :], a[L:-L, L:-L], a[: -2 * L, : -2 * L]
    parts = []
    for j in range(n):
        blk = (slice(j, h2, n), slice((-j * w2) % n, w2, n))
        out = np.multiply(mid[blk], 2)  # the same three operations as _diagonal_second_difference
        np.subtract(hi[blk], out, out=out)
        np.add(out, lo[blk], out=out)
        parts.append(out.ravel())
    return np.concatenate(parts)


def _lag_robust_sigma(a: np.ndarray, keep: np.ndarray | None) -> float:
    """White-noise sigma of ``a`` from diagonal second differences, robust to oversampling.

    An image enlarged (cubic or nearest) has noise correlated over several pixels: its
    one-pixel second differences see almost none of it. When the lag-1 estimate is well
    below the lag-3 to lag-6 ones (not the case for white noise, whose estimates agree at
    every lag), the largest estimate over lags 1-6 is used.

    Parameters
    ----------
    a : ndarray, (H, W)
    keep : ndarray of bool, (H, W), or None
        Pixels that count.
    """
    lags = [lag for lag in (1, 2, 3, 4, 6) if min(a.shape) > 2 * lag + 2]
    if not lags:
        return 0.0
    if keep is not None and keep.all():
        keep = None  # every pixel counts: the same differences, in the same order

    def at(lag):
        if keep is None:
            return _white_sigma(_every_nth_difference(a, lag), copy=False)
        d = _diagonal_second_difference(a, lag)
        d = d[keep[lag:-lag, lag:-lag] & keep[2 * lag :, 2 * lag :] & keep[: -2 * lag, : -2 * lag]]
        step = max(1, d.size // 400000)
        if not d.size:
            return 0.0
        # d is a fresh array here: partitioned in place unless only every step-th value is kept
        return _white_sigma(d if step == 1 else np.ascontiguousarray(d[::step]), copy=False)

    first = at(lags[0])
    if len(lags) < 3:
        return first
    # The lag-2 estimate only counts when the lag-1 one is given up: it is taken then (speed,
    # each estimate is the median of up to 400 000 values).
    far = [at(lag) for lag in lags[2:]]
    if first < 0.6 * max(far):
        return max(first, at(lags[1]), *far)
    return first


def _white_sigma(d: np.ndarray, copy: bool = True) -> float:
    """Standard deviation of white noise from its second differences (robust, via the MAD).

    ``copy=False`` lets it reorder ``d`` (contiguous, 1-D) in place.
    """
    # var(x[i+1] - 2 x[i] + x[i-1]) = 6 var(x) for white noise
    buf = np.array(d, copy=True, order="C").ravel() if copy else d
    return 1.4826 * float(_mad_inplace(buf)) / math.sqrt(6.0)


def noise_sigma(flat: np.ndarray, mask: np.ndarray | None) -> float:
    """Robust per-pixel noise of an image from its diagonal second differences.

    The median absolute deviation of the second differences, scaled to a standard
    deviation (x 1.4826, exact for Gaussian noise) and divided by sqrt(6) (the variance
    of a second difference of white noise is six times the pixel variance). Bands and
    slow background changes barely move the median.

    Parameters
    ----------
    flat : ndarray of float, (H, W)
        Image, typically :func:`flatten_background`'s output.
    mask : ndarray of bool, (H, W), or None
        Pixels to use (None: all).

    Returns
    -------
    float
        Noise standard deviation in the image's units (0.0 when no pixel is usable).

    Examples
    --------
    >>> import numpy as np
    >>> z = np.random.default_rng(0).normal(0.0, 0.05, (256, 256)).astype(np.float32)
    >>> print(round(noise_sigma(z, None), 2))
    0.05
    """
    return _lag_robust_sigma(flat, mask)


def _pixel_noise(img, m, bars=(), tile=512):
    """Robust per-pixel noise (image units) of a large image from a few tiles.

    Five tiles of ``tile`` px (centre and the four quarter points); with a data bar
    (``bars``, see :func:`tracefit.image.databar.find_databar`) and no mask, only the
    rows between the bars are used. Never below a millionth of the grey range.
    """
    h, w = img.shape
    if bars and m is None:
        top = max([b["bbox"][3] for b in bars if b["bbox"][1] == 0] or [0])
        bottom = min([b["bbox"][1] for b in bars if b["bbox"][1] > 0] or [h])
        if bottom - top >= 32:
            return _pixel_noise(img[top:bottom], None, (), tile)
    tiles, keeps = [], []
    for fr, fc in ((0.25, 0.25), (0.25, 0.75), (0.75, 0.25), (0.75, 0.75), (0.5, 0.5)):
        r0 = int(max(0, min(h - tile, fr * h - tile / 2)))
        c0 = int(max(0, min(w - tile, fc * w - tile / 2)))
        tiles.append(img[r0 : r0 + tile, c0 : c0 + tile])
        keeps.append(None if m is None else m[r0 : r0 + tile, c0 : c0 + tile])
    # the tiles side by side (small images: the same tile five times, which is harmless)
    t = np.concatenate([np.pad(x, 4, mode="reflect") for x in tiles], axis=1) if len(tiles) else img
    keep = None
    if m is not None:
        keep = np.concatenate([np.pad(k, 4, constant_values=False) for k in keeps], axis=1)
        if not keep.any():
            return 1e-3
    return max(_lag_robust_sigma(t, keep), 1e-6 * float(np.ptp(img[::16, ::16]) + 1e-12))


def _hessian(flat, sigma):
    s = cv2.GaussianBlur(flat, (0, 0), sigma, borderType=cv2.BORDER_REFLECT)
    dxx = cv2.Sobel(s, cv2.CV_32F, 2, 0, ksize=3, scale=0.25)
    dyy = cv2.Sobel(s, cv2.CV_32F, 0, 2, ksize=3, scale=0.25)
    dxy = cv2.Sobel(s, cv2.CV_32F, 1, 1, ksize=3, scale=0.25)
    return dxx, dyy, dxy


def _thin_across(resp, mask, oc, orow):
    """(cols, rows) of the pixels above 1 that are maxima across the band (pixel step (oc, orow))."""
    h, w = resp.shape
    if mask is not None:
        resp[~mask] = 0
    keep = resp > 1.0
    # against the neighbours (col + oc, row + orow) (>=) and (col - oc, row - orow) (>); outside
    # the image they count as 0, which a pixel above 1 beats anyway
    for sign, ge in ((1, True), (-1, False)):
        dr, dc = sign * orow, sign * oc
        rs = slice(max(0, -dr), h - max(0, dr))
        cs = slice(max(0, -dc), w - max(0, dc))
        nb = resp[rs.start + dr : rs.stop + dr, cs.start + dc : cs.stop + dc]
        keep[rs, cs] &= (resp[rs, cs] >= nb) if ge else (resp[rs, cs] > nb)
    nz = cv2.findNonZero(keep.view(np.uint8))
    if nz is None:
        return np.zeros(0, np.intp), np.zeros(0, np.intp)
    nz = nz.reshape(-1, 2)
    return nz[:, 0], nz[:, 1]


def _sector_response(derivs, c, s_, sn, k_noise):
    """Best response over the scales per polarity for bands with unit normal (c, s_), in threshold units."""
    best = {-1: None, 1: None}
    for sg, dxx, dyy, dxy in derivs:
        # curvature across the band and the magnitude of the curvature along it (no trace array kept: memory)
        dnn = cv2.scaleAdd(dxy, float(2 * c * s_), cv2.addWeighted(dxx, float(c * c), dyy, float(s_ * s_), 0.0))
        dtt = cv2.scaleAdd(dxy, float(-2 * c * s_), cv2.addWeighted(dxx, float(s_ * s_), dyy, float(c * c), 0.0))
        cv2.absdiff(dtt, 0.0, dst=dtt)
        norm = float(sg * sg / (k_noise * sn[sg] * _white_noise_level(sg)))
        for pol in (-1, 1):
            resp = cv2.addWeighted(dnn, -pol * norm, dtt, -norm, 0.0)
            if best[pol] is None:
                best[pol] = resp
            else:
                cv2.max(best[pol], resp, dst=best[pol])
        del dnn, dtt
    return best


def ridge_pixels(flat: np.ndarray, mask: np.ndarray | None, sector_deg: float = 15.0,
                 scales: Sequence[float] = (1.0, 1.7, 2.8, 4.5), k_noise: float = 2.0) -> tuple[RidgePixels, RidgePixels]:
    """Thin band-centre pixels per orientation sector and polarity (steered filters).

    For each sector (band direction ``k * sector_deg``) the Hessian is steered to the
    sector's normal: the response is the curvature across the band minus the
    magnitude of the curvature along it, normalised by scale (sigma**2) and by the
    response to white noise of the image's noise level. A band crossed by other
    bands keeps its own response (second derivatives add), which the isotropic
    eigen-analysis would lose at every crossing.

    Parameters
    ----------
    flat : ndarray of float32, (H, W)
        Output of :func:`flatten_background`.
    mask : ndarray of bool or None
        Pixels to analyse (already eroded away from mask edges by the caller).
    sector_deg : float
        Sector width, degrees (180 / sector_deg sectors).
    scales : sequence of float
        Hessian scales, pixels (about half the band widths looked for).
    k_noise : float
        Threshold in units of the 95th percentile of the white-noise response.

    Returns
    -------
    (RidgePixels, RidgePixels)
        Dark then bright band pixels (working-resolution coordinates, strength in
        threshold units); ``angle_deg`` is the sector's band direction.

    Examples
    --------
    >>> from tracefit.image import BandFamilySpec, render_micrograph
    >>> img, _ = render_micrograph((128, 128), [BandFamilySpec(30.0, 16)], seed=1)
    >>> dark, bright = ridge_pixels(flatten_background(img.astype("float32"), None, 24.0), None)
    >>> along, across = int((dark.sector == 2).sum()), int((dark.sector == 8).sum())  # 30 and 120 deg
    >>> along > 5 * across
    True
    """
    h, w = flat.shape
    sn = max(noise_sigma(flat, mask), 1e-6)
    derivs = []
    for sg in scales:
        dxx, dyy, dxy = _hessian(flat, sg)
        derivs.append((sg, dxx, dyy, dxy))
    # per-scale noise: the pixel sigma, or more where the image's own response says so
    sn = {d[0]: _effective_noise(d, mask, sn) for d in derivs}
    n_sec = int(round(180.0 / sector_deg))

    def sector(k):
        dc, dr = angle_to_pixel_direction(k * sector_deg)  # band direction (col, row)
        c, s_ = -dr, dc  # its normal
        best = _sector_response(derivs, c, s_, sn, k_noise)
        # non-maximum suppression across the band (fixed normal per sector)
        oc, orow = int(np.rint(c)), int(np.rint(s_))
        parts = {}
        for pol in (-1, 1):
            resp = best.pop(pol)
            cc, rr = _thin_across(resp, mask, oc, orow)
            parts[pol] = (cc.astype(np.int16), rr.astype(np.int16), resp[rr, cc], np.full(len(rr), k, np.int16))
            del resp
        return parts

    # the sectors are independent: in threads where OpenCV may use several (results in sector order)
    per_sector = ordered_map(sector, range(n_sec))
    acc = {pol: [p[pol] for p in per_sector] for pol in (-1, 1)}
    del per_sector
    del derivs
    out = []
    for pol in (-1, 1):
        parts = acc[pol]
        cat = [np.concatenate([p[i] for p in parts]) for i in range(4)]
        parts.clear()
        out.append(RidgePixels(cat[0], cat[1], cat[2].astype(np.float32, copy=False), pol, (h, w), cat[3], float(sector_deg)))
    return out[0], out[1]
