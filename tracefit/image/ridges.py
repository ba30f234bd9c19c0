"""Background flattening and oriented-ridge enhancement (Hessian, several scales).

Bands are thin straight valleys (dark) or ridges (bright) in the grey level. After
dividing out the slowly varying background (uneven illumination), the Hessian of the
Gaussian-smoothed image has one large eigenvalue across a band and a small one along
it; its eigenvector gives the local band orientation. Dark and bright bands are kept
apart, so the weak opposite-sign side lobes beside a band never pose as bands.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from tracefit.angles import pixel_direction_angle

__all__ = ["flatten_background", "RidgePixels", "ridge_pixels"]


def flatten_background(image: np.ndarray, mask: np.ndarray | None, sigma: float) -> np.ndarray:
    """Relative contrast ``image / background - 1``, zero outside the mask.

    The background is a masked (normalised) Gaussian blur of width ``sigma`` px,
    computed on a reduced copy for speed; excluded pixels do not leak into it.

    Parameters
    ----------
    image : ndarray of float32, (H, W)
    mask : ndarray of bool or None
    sigma : float
        Background scale, pixels (several band spacings).

    Returns
    -------
    ndarray of float32, (H, W)
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

    Attributes
    ----------
    col, row : ndarray of float32
        Pixel coordinates.
    strength : ndarray of float32
        Ridge strength in threshold units (>= 1).
    angle_deg : ndarray of float32
        Local band direction, image-frame axial degrees.
    sigma : ndarray of float32
        Hessian scale that responded best, pixels.
    polarity : int
        -1 dark bands, +1 bright bands.
    shape : (int, int)
    """

    col: np.ndarray
    row: np.ndarray
    strength: np.ndarray
    angle_deg: np.ndarray
    sigma: np.ndarray
    polarity: int
    shape: tuple[int, int]

    def __len__(self) -> int:
        return len(self.col)


def _hessian(flat, sigma):
    s = cv2.GaussianBlur(flat, (0, 0), sigma, borderType=cv2.BORDER_REFLECT)
    dxx = cv2.Sobel(s, cv2.CV_32F, 2, 0, ksize=3, scale=0.25)
    dyy = cv2.Sobel(s, cv2.CV_32F, 0, 2, ksize=3, scale=0.25)
    dxy = cv2.Sobel(s, cv2.CV_32F, 1, 1, ksize=3, scale=0.25)
    return dxx, dyy, dxy


_WHITE = {}


def _white_noise_level(sigma):
    """95th percentile of the ridge response to unit white noise at ``sigma`` (calibration)."""
    if sigma not in _WHITE:
        z = np.random.default_rng(12345).standard_normal((256, 256)).astype(np.float32)
        dxx, dyy, dxy = _hessian(z, sigma)
        half = 0.5 * (dxx - dyy)
        disc = np.sqrt(half * half + dxy * dxy)
        tr = 0.5 * (dxx + dyy)
        r = sigma * sigma * np.maximum(tr + disc - np.abs(tr - disc), 0)[16:-16, 16:-16]
        _WHITE[sigma] = float(np.percentile(r, 95))
    return _WHITE[sigma]


def noise_sigma(flat: np.ndarray, mask: np.ndarray | None) -> float:
    """Robust per-pixel noise of a flattened image from its diagonal second differences."""
    d = flat[2:, 2:] - 2 * flat[1:-1, 1:-1] + flat[:-2, :-2]
    if mask is not None:
        d = d[mask[1:-1, 1:-1]]
    d = d.ravel()[:: max(1, d.size // 400000)]
    # var(x[i+1] - 2 x[i] + x[i-1]) = 6 var(x) for white noise
    return 1.4826 * float(np.median(np.abs(d - np.median(d)))) / np.sqrt(6.0) if d.size else 0.0


def ridge_pixels(flat: np.ndarray, mask: np.ndarray | None, scales=(1.5, 2.5, 4.0), k_noise: float = 2.0):
    """Thin ridge pixels of both polarities from a flattened image.

    Parameters
    ----------
    flat : ndarray of float32, (H, W)
        Output of :func:`flatten_background`.
    mask : ndarray of bool or None
        Pixels to analyse (already eroded away from mask edges by the caller).
    scales : sequence of float
        Hessian scales, pixels (about half the band widths looked for).
    k_noise : float
        Threshold, in units of the 95th percentile of the response to white noise of the
        image's noise level (so the strength of a kept pixel is >= 1).

    Returns
    -------
    (RidgePixels, RidgePixels)
        Dark then bright band pixels.
    """
    h, w = flat.shape
    best = {-1: None, 1: None}
    sn = max(noise_sigma(flat, mask), 1e-6)
    for sg in scales:
        dxx, dyy, dxy = _hessian(flat, sg)
        half = 0.5 * (dxx - dyy)
        disc = np.sqrt(half * half + dxy * dxy)
        tr = 0.5 * (dxx + dyy)
        lhi = tr + disc
        llo = tr - disc
        # normal direction of the large-|eigenvalue| eigenvector (x = col, y = row)
        phi_hi = 0.5 * np.arctan2(2.0 * dxy, dxx - dyy)
        s2 = np.float32(sg * sg / (k_noise * sn * _white_noise_level(sg)))  # response in threshold units
        dark = s2 * np.maximum(lhi - np.abs(llo), 0)  # valley: large positive curvature across
        bright = s2 * np.maximum(-llo - np.abs(lhi), 0)
        del dxx, dyy, half, disc, tr, lhi, llo
        for pol, resp, phi in ((-1, dark, phi_hi), (1, bright, phi_hi + np.float32(np.pi / 2))):
            if best[pol] is None:
                best[pol] = [resp, phi.astype(np.float32), np.full((h, w), sg, np.float32)]
            else:
                r0, p0, s0 = best[pol]
                better = resp > r0
                r0[better] = resp[better]
                p0[better] = phi[better]
                s0[better] = sg
        del dark, bright, phi_hi, dxy
    out = []
    for pol in (-1, 1):
        resp, phi, sig = best[pol]
        if mask is not None:
            resp[~mask] = 0
        thr = 1.0
        # Non-maximum suppression across the ridge (8-neighbour quantised normal).
        cand = resp > thr
        rr, cc = np.nonzero(cand)
        if len(rr) == 0:
            out.append(RidgePixels(*(np.zeros(0, np.float32) for _ in range(5)), pol, (h, w)))
            continue
        ph = phi[rr, cc]
        dc = np.rint(np.cos(ph)).astype(np.int64)
        dr = np.rint(np.sin(ph)).astype(np.int64)
        r1, c1 = np.clip(rr + dr, 0, h - 1), np.clip(cc + dc, 0, w - 1)
        r2, c2 = np.clip(rr - dr, 0, h - 1), np.clip(cc - dc, 0, w - 1)
        v = resp[rr, cc]
        keep = (v >= resp[r1, c1]) & (v > resp[r2, c2])
        rr, cc, ph, v = rr[keep], cc[keep], ph[keep], v[keep]
        # band direction is perpendicular to the normal (cos phi, sin phi) in (col, row)
        ang = pixel_direction_angle(-np.sin(ph), np.cos(ph)).astype(np.float32)
        out.append(RidgePixels(cc.astype(np.float32), rr.astype(np.float32), v.astype(np.float32), ang,
                               sig[rr, cc].astype(np.float32), pol, (h, w)))
        del resp, phi, sig
    best.clear()
    return out[0], out[1]
