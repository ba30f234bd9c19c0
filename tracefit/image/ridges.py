"""Background flattening and oriented-ridge enhancement (Hessian, several scales).

Bands are thin straight valleys (dark) or ridges (bright) in the grey level. After
dividing out the slowly varying background (uneven illumination), the Hessian of the
Gaussian-smoothed image is steered to each orientation sector: a band shows a large
curvature across it and a small one along it. Dark and bright bands are kept apart,
so the weak opposite-sign side lobes beside a band never pose as bands.
"""

from __future__ import annotations

from dataclasses import dataclass

import cv2
import numpy as np

from tracefit.conventions import angle_to_pixel_direction


__all__ = ["flatten_background", "RidgePixels", "ridge_pixels", "noise_sigma"]


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
    col, row : ndarray of int16
        Pixel coordinates (working resolution, at most 32767).
    strength : ndarray of float32
        Ridge strength in threshold units (>= 1).
    polarity : int
        -1 dark bands, +1 bright bands.
    shape : (int, int)
    sector : ndarray of int16
        Orientation sector of each pixel (pixels are stored sector by sector).
    sector_deg : float
        Sector width, degrees; sector k holds bands at about ``k * sector_deg``.
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
    if sigma not in _WHITE:
        z = np.random.default_rng(12345).standard_normal((256, 256)).astype(np.float32)
        dxx, dyy, dxy = _hessian(z, sigma)
        dnn, dtt = _steered(dxx, dyy, dxy, 1.0, 0.0)
        r = sigma * sigma * np.maximum(dnn - np.abs(dtt), 0)[16:-16, 16:-16]
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


def _hessian(flat, sigma):
    s = cv2.GaussianBlur(flat, (0, 0), sigma, borderType=cv2.BORDER_REFLECT)
    dxx = cv2.Sobel(s, cv2.CV_32F, 2, 0, ksize=3, scale=0.25)
    dyy = cv2.Sobel(s, cv2.CV_32F, 0, 2, ksize=3, scale=0.25)
    dxy = cv2.Sobel(s, cv2.CV_32F, 1, 1, ksize=3, scale=0.25)
    return dxx, dyy, dxy


def ridge_pixels(flat: np.ndarray, mask: np.ndarray | None, sector_deg: float = 15.0,
                 scales=(1.0, 1.7, 2.8, 4.5), k_noise: float = 2.0):
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
        Dark then bright band pixels; ``angle_deg`` is the sector's band direction.
    """
    h, w = flat.shape
    sn = max(noise_sigma(flat, mask), 1e-6)
    derivs = []
    for sg in scales:
        dxx, dyy, dxy = _hessian(flat, sg)
        derivs.append((sg, dxx, dyy, dxy, cv2.add(dxx, dyy)))
    n_sec = int(round(180.0 / sector_deg))
    acc = {-1: [], 1: []}
    for k in range(n_sec):
        centre = k * sector_deg
        dc, dr = angle_to_pixel_direction(centre)  # band direction (col, row)
        c, s_ = -dr, dc  # its normal
        best = {-1: None, 1: None}
        for sg, dxx, dyy, dxy, tr in derivs:
            # curvature across the band, and |along| = |trace - across| (trace is invariant)
            dnn = cv2.scaleAdd(dxy, float(2 * c * s_), cv2.addWeighted(dxx, float(c * c), dyy, float(s_ * s_), 0.0))
            dtt = cv2.absdiff(tr, dnn)
            norm = float(sg * sg / (k_noise * sn * _white_noise_level(sg)))
            for pol in (-1, 1):
                resp = cv2.addWeighted(dnn, -pol * norm, dtt, -norm, 0.0)
                if best[pol] is None:
                    best[pol] = resp
                else:
                    cv2.max(best[pol], resp, dst=best[pol])
            del dnn, dtt
        # non-maximum suppression across the band (fixed normal per sector)
        oc, orow = int(np.rint(c)), int(np.rint(s_))
        for pol in (-1, 1):
            resp = best[pol]
            if mask is not None:
                resp[~mask] = 0
            pad = np.pad(resp, 1)
            fwd = pad[1 + orow : 1 + orow + h, 1 + oc : 1 + oc + w]
            bwd = pad[1 - orow : 1 - orow + h, 1 - oc : 1 - oc + w]
            keep = (resp > 1.0) & (resp >= fwd) & (resp > bwd)
            nz = cv2.findNonZero(keep.view(np.uint8))
            if nz is None:
                cc = rr = np.zeros(0, np.intp)
            else:
                nz = nz.reshape(-1, 2)
                cc, rr = nz[:, 0], nz[:, 1]
            acc[pol].append((cc.astype(np.int16), rr.astype(np.int16), resp[rr, cc], np.full(len(rr), k, np.int16)))
        best.clear()
    del derivs
    out = []
    for pol in (-1, 1):
        parts = acc[pol]
        cat = [np.concatenate([p[i] for p in parts]) for i in range(4)]
        parts.clear()
        out.append(RidgePixels(cat[0], cat[1], cat[2].astype(np.float32, copy=False), pol, (h, w), cat[3], float(sector_deg)))
    return out[0], out[1]
