"""Detect families of parallel straight bands (slip or twin traces) in a micrograph.

Pipeline (one concern per step):

1. Exclude an instrument data bar (:mod:`tracefit.image.databar`) and any user mask.
2. Work on a reduced copy (at most ``working_size`` px on a side): flatten the
   background and enhance oriented ridges with a multi-scale Hessian
   (:mod:`tracefit.image.ridges`), dark and bright bands apart.
3. Straight-line Hough transform (scikit-image ``hough_line``, 0.5 deg bins) per
   orientation sector, each on the ridge pixels whose local orientation fits that
   sector; votes are normalised by the chord length through the analysed region.
4. Families: the axial angles of the Hough lines are clustered; a family needs
   ``min_bands`` parallel bands.
5. Sub-bin refinement: the family angle is refined with a projection (Radon) profile
   of the ridge pixels in a narrow angular window, then every band is fitted at full
   resolution on a strip sampled along it (sub-pixel band centres, robust straight-line
   fit). The family angle is the weighted mean of its bands, with a standard
   uncertainty from their fit errors and scatter.

Angles are image-frame, axial, degrees ccw from +x (:mod:`tracefit.conventions`); pixel
coordinates are (column, row), rows down.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import cv2
import numpy as np
from scipy import ndimage
from skimage.transform import hough_line

from tracefit.conventions import angle_to_pixel_direction, axial_difference, fold_axial, pixel_direction_angle, pixel_endpoints_angle
from tracefit.errors import TracefitInputError
from tracefit.image.databar import find_databar
from tracefit.image.ridges import RidgePixels, flatten_background, ridge_pixels

__all__ = ["BandLine", "BandFamily", "DetectionResult", "detect_bands", "detect_grains"]


# --------------------------------------------------------------------------- results


@dataclass
class BandLine:
    """One detected band: its fitted centre line between two pixel endpoints.

    Attributes
    ----------
    col0, row0, col1, row1 : float
        Endpoints in pixels (column right, row down) of the part where the band was seen.
    angle_deg : float
        Image-frame axial angle of this band's fitted line, degrees.
    angle_sigma_deg : float
        Standard uncertainty of that angle, degrees.
    snr : float
        Median band contrast-to-noise ratio along the line.
    """

    col0: float
    row0: float
    col1: float
    row1: float
    angle_deg: float
    angle_sigma_deg: float = float("nan")
    snr: float = float("nan")

    @property
    def length_px(self) -> float:
        return float(math.hypot(self.col1 - self.col0, self.row1 - self.row0))

    def to_dict(self) -> dict:
        return {
            "col0": round(self.col0, 2), "row0": round(self.row0, 2),
            "col1": round(self.col1, 2), "row1": round(self.row1, 2),
            "angle_deg": round(self.angle_deg, 4),
        }


@dataclass
class BandFamily:
    """A family of parallel bands.

    Attributes
    ----------
    angle_deg : float
        Image-frame axial angle, degrees, 0 <= angle < 180, ccw from +x.
    angle_sigma_deg : float
        Standard uncertainty of the angle, degrees.
    n_bands : int
        Number of bands fitted.
    spacing_px : float
        Mean perpendicular distance between neighbouring bands, pixels (nan if < 2 bands).
    spacing_sigma_px : float
        Standard deviation of those distances, pixels.
    spacing_um : float or None
        ``spacing_px`` times the pixel size, micrometres, when the pixel size is known.
    strength : float
        Sum over bands of (seen length / image diagonal) x band contrast-to-noise ratio.
    polarity : str
        "dark" or "bright" bands.
    contrast : float
        Median relative grey level of the band centres against the local median
        background (negative for dark bands), e.g. -0.2 = 20 % darker.
    lines : list of BandLine
    """

    angle_deg: float
    angle_sigma_deg: float
    n_bands: int
    spacing_px: float
    spacing_sigma_px: float
    spacing_um: float | None
    strength: float
    polarity: str = "dark"
    contrast: float = float("nan")
    lines: list[BandLine] = field(default_factory=list)

    def to_dict(self, with_lines: bool = False) -> dict:
        d = {
            "angle_deg": round(float(self.angle_deg), 4),
            "angle_sigma_deg": round(float(self.angle_sigma_deg), 4),
            "n_bands": int(self.n_bands),
            "spacing_px": _num(self.spacing_px, 3),
            "spacing_um": None if self.spacing_um is None or not math.isfinite(self.spacing_um) else round(float(self.spacing_um), 4),
            "strength": round(float(self.strength), 3),
        }
        if with_lines:
            d["spacing_sigma_px"] = _num(self.spacing_sigma_px, 3)
            d["polarity"] = self.polarity
            d["contrast"] = _num(self.contrast, 4)
            d["lines"] = [ln.to_dict() for ln in self.lines]
        return d


def _num(x, nd):
    return None if x is None or not math.isfinite(x) else round(float(x), nd)


@dataclass
class DetectionResult:
    """Result of :func:`detect_bands` for one image (or one grain of it).

    Attributes
    ----------
    path : str or None
        Source file, when known.
    width, height : int
        Image size, pixels.
    excluded : list of dict
        Regions left out: ``{"kind": "databar" | "mask", "bbox": [c0, r0, c1, r1], "note": str}``.
    families : list of BandFamily
        Strongest first; empty when no bands were found.
    notes : list of str
        What was done and found, for the user.
    pixel_size_um : float or None
    grain : int or None
        Grain id when the detection ran on one grain of a label image.
    """

    path: str | None
    width: int
    height: int
    excluded: list[dict] = field(default_factory=list)
    families: list[BandFamily] = field(default_factory=list)
    notes: list[str] = field(default_factory=list)
    pixel_size_um: float | None = None
    grain: int | None = None

    def to_dict(self, with_lines: bool = False) -> dict:
        """The JSON object of ``tracefit detect --json`` (band lines only if ``with_lines``)."""
        return {
            "image": {"path": self.path, "width": int(self.width), "height": int(self.height), "excluded": list(self.excluded)},
            "families": [f.to_dict(with_lines=with_lines) for f in self.families],
        }


# --------------------------------------------------------------------------- helpers

_THETA_STEP_DEG = 0.5
_SECTOR_DEG = 15.0
_SECTOR_TOL_DEG = 7.0


def _hough_theta():
    """skimage hough_line angles (normal angle, radians, [-90, 90) deg) and their line angles."""
    theta = np.deg2rad(np.arange(-90.0, 90.0, _THETA_STEP_DEG))
    # the line direction is perpendicular to the normal (cos t, sin t) in (col, row)
    alpha = pixel_direction_angle(-np.sin(theta), np.cos(theta))
    return theta, np.asarray(alpha)


def _chord_lengths(mask_w, theta):
    """Length (px) of every Hough chord (rho, theta) through the analysed region."""
    h, w = mask_w.shape
    diag = int(np.ceil(np.hypot(h, w)))
    q = max(1, int(np.ceil(max(h, w) / 256)))
    small = cv2.resize(mask_w.astype(np.float32), (max(2, w // q), max(2, h // q)), interpolation=cv2.INTER_AREA) > 0.5
    acc_s, _, dists_s = hough_line(small, theta=theta)
    rho = np.arange(-diag, diag + 1, dtype=np.float64)
    idx = np.clip(np.rint(rho / q - dists_s[0]).astype(int), 0, len(dists_s) - 1)
    return acc_s[idx].astype(np.float32) * q, rho


def _line_candidates(rp: RidgePixels, mask_w, theta, alpha, chord, v_min, c_min):
    """Hough peaks per orientation sector: arrays (alpha_deg, theta, rho, votes, coverage)."""
    h, w = rp.shape
    out = []
    if len(rp) == 0:
        return np.zeros((0, 5))
    n_sec = int(round(180.0 / _SECTOR_DEG))
    sector_of_theta = np.floor(fold_axial(alpha + _SECTOR_DEG / 2) / _SECTOR_DEG).astype(int) % n_sec
    canvas = np.zeros((h, w), np.uint8)
    ci, ri = rp.col.astype(np.intp), rp.row.astype(np.intp)
    for k in range(n_sec):
        centre = k * _SECTOR_DEG
        sel_t = np.nonzero(sector_of_theta == k)[0]
        near = rp.sector == k
        if near.sum() < v_min or len(sel_t) == 0:
            continue
        canvas[ri[near], ci[near]] = 1
        acc, _, dists = hough_line(canvas, theta=theta[sel_t])
        canvas[ri[near], ci[near]] = 0
        acc = acc.astype(np.float32)
        acc3 = acc.copy()
        acc3[1:] += acc[:-1]
        acc3[:-1] += acc[1:]
        ln = chord[:, sel_t]
        cov = acc3 / np.maximum(ln, 0.25 * min(h, w))
        peak = acc3 == ndimage.maximum_filter(acc3, size=(7, 5), mode="constant")
        ok = peak & (acc3 >= v_min) & (cov >= c_min)
        ii, jj = np.nonzero(ok)
        for i, j in zip(ii, jj):
            out.append((alpha[sel_t[j]], theta[sel_t[j]], dists[i], acc3[i, j], cov[i, j]))
    return np.array(out, float).reshape(-1, 5)


def _cluster_angles(alpha, votes, tol_deg=1.5):
    """Greedy axial clustering: strongest line first, members within ``tol_deg``."""
    order = np.argsort(-votes)
    label = np.full(len(alpha), -1)
    groups = []
    for i in order:
        if label[i] >= 0:
            continue
        members = np.nonzero((label < 0) & (np.abs(axial_difference(alpha, alpha[i])) <= tol_deg))[0]
        label[members] = len(groups)
        groups.append(members)
    return groups


def _normal(alpha_deg):
    dc, dr = angle_to_pixel_direction(alpha_deg)
    return np.array([dc, dr]), np.array([-dr, dc])


def _radon_refine(x, y, wgt, alpha0, half=1.0, step=0.1, bin_px=0.5):
    """Angle maximising the sharpness (sum of squares) of the projection profile."""

    def score(a):
        _, n = _normal(a)
        s = x * n[0] + y * n[1]
        idx = np.floor((s - s.min()) / bin_px).astype(np.intp)
        hist = np.bincount(idx, weights=wgt)
        return float(np.dot(hist, hist))

    best = alpha0
    for stage, (hw, st) in enumerate(((half, step), (1.5 * step, step / 5))):
        grid = best + np.arange(-hw, hw + st / 2, st)
        sc = np.array([score(a) for a in grid])
        k = int(np.argmax(sc))
        if stage == 0 and (k == 0 or k == len(grid) - 1):
            return None  # the profile is sharpest outside the window: no family at alpha0
        best = float(grid[k])
        if 0 < k < len(grid) - 1:
            den = sc[k - 1] - 2 * sc[k] + sc[k + 1]
            if den < 0:
                best += float(0.5 * st * (sc[k - 1] - sc[k + 1]) / den)
    return float(fold_axial(best))


def _clip_to_box(p, d, w, h):
    """Segment of the line p + t d inside [0, w-1] x [0, h-1]; (t0, t1) or None."""
    t_lo, t_hi = -np.inf, np.inf
    for pp, dd, hi in ((p[0], d[0], w - 1.0), (p[1], d[1], h - 1.0)):
        if abs(dd) < 1e-12:
            if pp < 0 or pp > hi:
                return None
            continue
        a, b = (0.0 - pp) / dd, (hi - pp) / dd
        if a > b:
            a, b = b, a
        t_lo, t_hi = max(t_lo, a), min(t_hi, b)
    if t_hi - t_lo < 2:
        return None
    return t_lo, t_hi


def _fit_band(img, valid, p, d, half_width, polarity, pixel_noise, max_samples=1500, f=1):
    """Fit one band's centre line at full resolution on a strip sampled along it.

    Returns a dict (point, direction, angle, sigma, endpoints, snr, seen length) or None.
    """
    h, w = img.shape
    n = np.array([-d[1], d[0]])
    seg = _clip_to_box(p, d, w, h)
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
    inside = (mapx.min(1) >= 0) & (mapx.max(1) <= w - 1) & (mapy.min(1) >= 0) & (mapy.max(1) <= h - 1)
    if valid is not None:
        # the analysed region, checked on the (working-resolution) mask at the strip's
        # centre and edges
        vh, vw = valid.shape
        ok = np.ones(nt, bool)
        for j in (0, hw, 2 * hw):
            cc = np.clip(np.rint((mapx[:, j] + 0.5) / f - 0.5).astype(np.intp), 0, vw - 1)
            rr = np.clip(np.rint((mapy[:, j] + 0.5) / f - 0.5).astype(np.intp), 0, vh - 1)
            ok &= valid[rr, cc] > 0
        inside &= ok
    # background: a straight line between the strip's two outer edges, row by row
    ne = 2 if hw < 6 else 3
    left = strip[:, :ne].mean(axis=1, keepdims=True)
    right = strip[:, -ne:].mean(axis=1, keepdims=True)
    frac_u = (u[None, :] + hw) / max(2 * hw, 1)
    q = polarity * (strip - (left + (right - left) * frac_u))
    step = float(t[1] - t[0]) if nt > 1 else 1.0
    q = cv2.GaussianBlur(q, (0, 0), sigmaX=0.8, sigmaY=max(0.5, 2.0 / step))
    # pixel noise reduced by the strip smoothing (sum of squared Gaussian weights per axis)
    noise = pixel_noise * math.sqrt(1.0 / (2 * math.sqrt(math.pi) * 0.8) / (2 * math.sqrt(math.pi) * max(0.5, 2.0 / step))) + 1e-12
    k = np.argmax(q[:, 1:-1], axis=1) + 1
    rows = np.arange(nt)
    qm, q0, qp = q[rows, k - 1], q[rows, k], q[rows, k + 1]
    den = qm - 2 * q0 + qp
    frac = np.where(den < 0, 0.5 * (qm - qp) / np.where(den < 0, den, -1.0), 0.0)
    upk = u[k] + np.clip(frac, -0.5, 0.5)
    snr = q0 / noise
    typical = float(np.median(q0[inside])) if inside.any() else 0.0
    good = inside & (snr >= 4.0) & (q0 >= 0.3 * typical) & (k >= 2) & (k <= 2 * hw - 2)
    if good.sum() < max(12, 0.08 * nt):
        return None
    tg, ug, wg = t[good].astype(np.float64), upk[good].astype(np.float64), np.minimum(snr[good], 30.0).astype(np.float64) ** 2
    keep = np.ones(len(tg), bool)
    for _ in range(4):
        if keep.sum() < 10:
            return None
        a_, b_ = _wfit(tg[keep], ug[keep], wg[keep])
        res = ug - (a_ + b_ * tg)
        mad = 1.4826 * float(np.median(np.abs(res[keep])))
        new = np.abs(res) <= max(3.0 * mad, 0.35)
        if np.array_equal(new, keep):
            break
        keep = new
    if keep.sum() < max(10, 0.06 * nt):
        return None
    a_, b_ = _wfit(tg[keep], ug[keep], wg[keep])
    res = ug[keep] - (a_ + b_ * tg[keep])
    tk = tg[keep]
    # samples are correlated over about the along-band smoothing length
    corr = max(1.0, 2.5 * 2.0 / step)
    s_res = float(np.sqrt(np.average(res**2, weights=wg[keep])))
    sxx = float(np.sum((tk - tk.mean()) ** 2))
    sig_b = s_res * math.sqrt(corr) / math.sqrt(max(sxx, 1e-9))
    d_new = d + b_ * n
    d_new = d_new / np.hypot(*d_new)
    p_new = p + a_ * n
    # endpoints of the seen part (projected on the new line)
    pa = p_new + (tk.min() * (d + b_ * n)) @ np.eye(2)
    pb = p_new + (tk.max() * (d + b_ * n)) @ np.eye(2)
    return {
        "point": p_new,
        "direction": d_new,
        "angle": float(pixel_direction_angle(d_new[0], d_new[1])),
        "sigma": math.degrees(math.atan(sig_b)) / (1.0 + b_ * b_) + 1e-4,
        "ends": (pa, pb),
        "snr": float(np.median(snr[good][keep])),
        "seen": float(tk.max() - tk.min()),
        "rms": s_res,
        "shift": float(max(abs(a_ + b_ * tk.min()), abs(a_ + b_ * tk.max()))),
        "n": int(keep.sum()),
    }


def _wfit(t, u, w):
    sw = w.sum()
    tm, um = (w * t).sum() / sw, (w * u).sum() / sw
    stt = (w * (t - tm) ** 2).sum()
    b = (w * (t - tm) * (u - um)).sum() / max(stt, 1e-12)
    return um - b * tm, b


# --------------------------------------------------------------------------- main entry


def _prepare(image, mask, labels, grain):
    img = np.asarray(image)
    if img.ndim == 3 and img.shape[2] in (3, 4):
        from tracefit.image.io import to_gray

        img = to_gray(img)
    if img.ndim != 2:
        raise TracefitInputError(f"image has shape {img.shape}; expected a 2-D grey image (or RGB(A))")
    if min(img.shape) < 16:
        raise TracefitInputError(f"image is {img.shape[1]} x {img.shape[0]} pixels; expected at least 16 x 16")
    img = img.astype(np.float32, copy=False)
    step = max(1, (1 << 22) // max(1, img.shape[1]))  # row blocks: no full-size temporaries
    if not all(np.isfinite(img[r : r + step]).all() for r in range(0, img.shape[0], step)):
        raise TracefitInputError("image contains NaN or infinite values; expected finite grey levels")
    lo, hi = float(img.min()), float(img.max())
    if hi - lo <= 0:
        raise TracefitInputError(f"image is constant (every pixel = {lo:g}); expected a micrograph with contrast")
    m = None
    if mask is not None:
        m = np.asarray(mask)
        if m.shape != img.shape:
            raise TracefitInputError(
                f"mask is {m.shape[-1]} x {m.shape[0]} pixels but the image is {img.shape[1]} x {img.shape[0]}; expected the same size"
            )
        m = m.astype(bool)
    if labels is not None:
        lab = np.asarray(labels)
        if lab.shape != img.shape:
            raise TracefitInputError(
                f"label image is {lab.shape[-1]} x {lab.shape[0]} pixels but the image is {img.shape[1]} x {img.shape[0]}; expected the same size"
            )
        if grain is not None:
            g = lab == grain
            if not g.any():
                raise TracefitInputError(f"grain id {grain} does not occur in the label image")
            m = g if m is None else (m & g)
    return img, m


def detect_bands(
    image,
    mask=None,
    pixel_size_um: float | None = None,
    labels=None,
    grain: int | None = None,
    *,
    path: str | None = None,
    find_bar: bool = True,
    min_bands: int = 3,
    max_families: int = 8,
    working_size: int = 1536,
    scales=(1.0, 1.7, 2.8),
    min_coverage: float = 0.3,
    min_depth: float = 0.035,
    notes: list[str] | None = None,
) -> DetectionResult:
    """Detect families of parallel straight bands.

    Parameters
    ----------
    image : ndarray, (H, W) or (H, W, 3|4)
        Grey (any units) or RGB(A) image.
    mask : ndarray of bool, optional
        Pixels to analyse (True), same size as the image.
    pixel_size_um : float, optional
        Pixel size, micrometres per pixel; gives spacings in um.
    labels : ndarray of int, optional
        Grain label image of the image's size; with ``grain`` only that grain's pixels
        are analysed (see :func:`detect_grains` to run every grain).
    grain : int, optional
        Grain id in ``labels``.
    path : str, optional
        Source file name, carried into the result.
    find_bar : bool
        Look for an instrument data bar and exclude it.
    min_bands : int
        Fewest parallel bands that make a family (isolated scratches do not).
    max_families : int
        Most families reported.
    working_size : int
        Longest side of the reduced copy used for ridge enhancement and Hough, px.
    scales : sequence of float
        Hessian scales at working resolution, px.
    min_coverage : float
        Least fraction of a Hough chord that must lie on ridge pixels.
    min_depth : float
        Least relative depth of a band below (dark) or above (bright) the local median
        grey level, e.g. 0.035 = 3.5 %.
    notes : list of str, optional
        Notes to start the result with (e.g. from :func:`tracefit.image.io.read_image`).

    Returns
    -------
    DetectionResult
        Families strongest first; an empty list (with a note) when there are no bands.

    Raises
    ------
    TracefitInputError
        Not a 2-D image, constant or non-finite image, mask / labels of the wrong size.
    """
    img, m = _prepare(image, mask, labels, grain)
    h, w = img.shape
    res = DetectionResult(path=path, width=w, height=h, notes=list(notes or []), pixel_size_um=pixel_size_um, grain=grain)
    if pixel_size_um is not None and not (pixel_size_um > 0 and math.isfinite(pixel_size_um)):
        raise TracefitInputError(f"pixel size {pixel_size_um!r} um; expected a positive number")
    bars = find_databar(img) if find_bar else []
    for b in bars:
        res.excluded.append(b)
        res.notes.append(b["note"])
        if m is not None:
            c0, r0, c1, r1 = b["bbox"]
            m[r0:r1, c0:c1] = False
    if m is not None:
        if not m.any():
            res.notes.append("no pixels left to analyse after masking; no bands reported")
            return res
        if mask is not None:
            res.excluded.append({"kind": "mask", "bbox": [0, 0, w, h], "note": f"user mask keeps {100 * m.mean():.1f} % of the pixels"})

    # ---- reduced working copy
    f = max(1, int(math.ceil(max(h, w) / working_size)))
    if f > 1:
        wk = cv2.resize(img, (w // f, h // f), interpolation=cv2.INTER_AREA)
        mw = None if m is None else cv2.resize(m.view(np.uint8) * np.uint8(255), (w // f, h // f), interpolation=cv2.INTER_AREA) >= 250
        res.notes.append(f"bands located on a {w // f} x {h // f} copy (1/{f}), fitted at full resolution")
    else:
        wk, mw = img, (None if m is None else m.copy())
    if bars and m is None:
        # a bar alone: mark it on the working mask only (no full-size mask needed)
        mw = np.ones(wk.shape, bool)
        for b in bars:
            c0, r0, c1, r1 = b["bbox"]
            mw[max(0, r0 // f - 1) : -(-r1 // f), max(0, c0 // f - 1) : -(-c1 // f)] = False
    hw_, ww_ = wk.shape
    bg_sigma = max(24.0, min(hw_, ww_) / 12.0)
    flat = flatten_background(wk, mw, bg_sigma)
    erode_r = int(math.ceil(2.5 * max(scales))) + 1
    if mw is not None:
        ker = cv2.getStructuringElement(cv2.MORPH_ELLIPSE, (2 * erode_r + 1, 2 * erode_r + 1))
        mw_in = cv2.erode(mw.astype(np.uint8), ker, borderType=cv2.BORDER_CONSTANT, borderValue=1) > 0
    else:
        mw_in = np.ones((hw_, ww_), bool)
    if mw_in.sum() < 400:
        res.notes.append("analysed region too small for band detection; no bands reported")
        return res
    dark, bright = ridge_pixels(flat, mw_in, sector_deg=_SECTOR_DEG, scales=scales)
    del flat
    depth_of, dmap = _depth_sampler(wk, mw, f, spacing_hint=bg_sigma)
    # band pixels must lie below (dark) / above (bright) the local median grey: this drops
    # the gaps between bands, which are ridges of the opposite sign at the median level
    dark, bright = (_keep(rp, rp.polarity * dmap[rp.row.astype(np.intp), rp.col.astype(np.intp)] >= 0.5 * min_depth)
                    for rp in (dark, bright))

    theta, alpha = _hough_theta()
    chord, _ = _chord_lengths(mw_in, theta)
    v_min = max(20.0, 0.06 * min(hw_, ww_))

    # ---- candidate families per polarity
    cands = []
    for rp in (dark, bright):
        lines = _line_candidates(rp, mw_in, theta, alpha, chord, v_min, min_coverage)
        if len(lines) == 0:
            continue
        for grp in _cluster_angles(lines[:, 0], lines[:, 3]):
            if len(grp) < min_bands:
                continue
            cands.append((rp, lines[grp]))
    # strongest candidates first; opposite-polarity echoes (the gaps between bands) are
    # resolved after fitting, where they fail the sharpness test
    cands.sort(key=lambda c: -c[1][:, 3].sum())
    kept = cands
    valid_full = None if mw is None else mw.astype(np.uint8)  # checked at working resolution
    fams = []
    diag_w = math.hypot(hw_, ww_)
    pix_noise = _pixel_noise(img, m, bars)
    # cheap screen before the full-resolution fits: the strongest Hough lines of a
    # family must be deeper than the local median grey (rejects gaps between bands)
    # Cheap screen before the full-resolution fits: the strongest Hough lines must be
    # deeper than the local median grey (rejects the gaps between bands). The deepest
    # candidates are fitted first, so a band family comes before the gaps beside it.
    scored = [(_hough_depth(rp, ln, depth_of, f, mw_in), rp, ln) for rp, ln in kept]
    scored = [c for c in scored if c[0] >= 0.6 * min_depth]
    scored.sort(key=lambda c: -c[0])
    attempts = 0
    for _, rp, ln in scored:
        if attempts >= 3 * max_families:
            break
        a_c = _vote_mean_angle(ln)
        if any(abs(axial_difference(a_c, fm.angle_deg)) < 2.0 for fm in fams):
            continue  # a split cluster of a family already fitted, or its gaps
        attempts += 1
        fam = _build_family(img, valid_full, rp, ln, f, pixel_size_um, min_bands, diag_w, pix_noise, depth_of, min_depth=min_depth)
        if fam is not None:
            fams.append(fam)
    # Dark and bright "families" at one angle: the bands and the gaps between them. The
    # bands stand further from the median grey than the gaps do.
    fams.sort(key=lambda fm: -abs(fm.contrast))
    final: list[BandFamily] = []
    for fm in fams:
        if any(abs(axial_difference(fm.angle_deg, g.angle_deg)) < 2.0 for g in final):
            continue
        final.append(fm)
    final.sort(key=lambda fm: -fm.strength)
    res.families = final[:max_families]
    if not res.families:
        res.notes.append("no band families found")
    else:
        res.notes.append(
            f"{len(res.families)} band famil{'y' if len(res.families) == 1 else 'ies'} found: "
            + ", ".join(f"{fm.angle_deg:.2f} deg ({fm.n_bands} bands)" for fm in res.families)
        )
    return res


_DEBUG = None


def _family_sigma(prof, ss, s0, spacing, bin_px=0.5):
    """Band width scale (px, ~FWHM / 2.4) from the mean projection peak of the bands."""
    half = int(max(4, min(40, 0.45 * spacing / bin_px)))
    stack = []
    for s in ss:
        i = int((s - s0) / bin_px)
        if half <= i < len(prof) - half:
            stack.append(prof[i - half : i + half + 1])
    if not stack:
        return 1.5
    pk = np.mean(stack, axis=0)
    pk = pk - min(pk[0], pk[-1])
    top = pk[half]
    if top <= 0:
        return 1.5
    above = np.nonzero(pk >= 0.5 * top)[0]
    fwhm = (above.max() - above.min() + 1) * bin_px
    return float(np.clip(fwhm / 2.355, 0.8, 8.0))


def _hough_depth(rp, lines, depth_of, f, mw_in, n_lines=5):
    """Median signed depth along the strongest Hough lines of a candidate (best of 3 offsets)."""
    h, w = mw_in.shape
    top = lines[np.argsort(-lines[:, 3])[:n_lines]]
    vals = []
    for _, th, rho, _, _ in top:
        nt = np.array([math.cos(th), math.sin(th)])
        dt = np.array([-math.sin(th), math.cos(th)])
        seg = _clip_to_box(rho * nt, dt, w, h)
        if seg is None:
            continue
        tt = np.linspace(seg[0], seg[1], int(np.clip((seg[1] - seg[0]) / 2, 8, 96)))
        best = None
        for off in (-1.0, 0.0, 1.0):
            pw = rho * nt + off * nt + tt[:, None] * dt
            ok = mw_in[np.clip(np.rint(pw[:, 1]).astype(int), 0, h - 1), np.clip(np.rint(pw[:, 0]).astype(int), 0, w - 1)]
            if ok.sum() < 8:
                continue
            v = float(np.median(rp.polarity * depth_of(((pw + 0.5) * f - 0.5)[ok])))
            best = v if best is None else max(best, v)
        if best is not None:
            vals.append(best)
    return float(np.median(vals)) if vals else 0.0


def _depth_sampler(wk, mw, f, spacing_hint):
    """Relative depth map ``(I - B) / B`` and a sampler at full-resolution points.

    B is the local background level: a median over about ``spacing_hint`` px refined
    towards the local mode (the grey level between the bands).
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
    sig = _pixel_noise(wk, mw) * 1.0
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
    del med

    def depth(points_full):
        pw = (np.asarray(points_full, float) + 0.5) / f - 0.5
        c = np.clip(np.rint(pw[:, 0]).astype(int), 0, w - 1)
        r = np.clip(np.rint(pw[:, 1]).astype(int), 0, h - 1)
        return dmap[r, c]

    return depth, dmap


def _keep(rp: RidgePixels, sel) -> RidgePixels:
    return RidgePixels(rp.col[sel], rp.row[sel], rp.strength[sel], rp.polarity, rp.shape, rp.sector[sel], rp.sector_deg)


def _pixel_noise(img, m, bars=(), tile=512):
    """Robust per-pixel noise (image units) from diagonal second differences on a few tiles."""
    h, w = img.shape
    if bars and m is None:
        top = max([b["bbox"][3] for b in bars if b["bbox"][1] == 0] or [0])
        bottom = min([b["bbox"][1] for b in bars if b["bbox"][1] > 0] or [h])
        if bottom - top >= 32:
            return _pixel_noise(img[top:bottom], None, (), tile)
    vals = []
    for fr, fc in ((0.25, 0.25), (0.25, 0.75), (0.75, 0.25), (0.75, 0.75), (0.5, 0.5)):
        r0 = int(max(0, min(h - tile, fr * h - tile / 2)))
        c0 = int(max(0, min(w - tile, fc * w - tile / 2)))
        t = img[r0 : r0 + tile, c0 : c0 + tile]
        d = t[2:, 2:] - 2 * t[1:-1, 1:-1] + t[:-2, :-2]
        if m is not None:
            d = d[m[r0 + 1 : r0 + t.shape[0] - 1, c0 + 1 : c0 + t.shape[1] - 1]]
        vals.append(d.ravel())
    v = np.concatenate(vals)
    if v.size == 0:
        return 1e-3
    # var(x[i+1] - 2 x[i] + x[i-1]) = 6 var(x) for white noise
    return max(1.4826 * float(np.median(np.abs(v - np.median(v)))) / math.sqrt(6.0), 1e-6 * float(np.ptp(img[::16, ::16]) + 1e-12))


def _vote_mean_angle(lines):
    from tracefit.conventions import axial_mean

    return float(axial_mean(lines[:, 0], lines[:, 3]))


def _build_family(img, valid_full, rp: RidgePixels, lines, f, pixel_size_um, min_bands, diag_w, pixel_noise, depth_of,
                  max_rms=1.0, min_depth=0.035, max_spacing_cv=0.75):
    """Refine one candidate family; None when it does not hold up as >= min_bands bands."""
    a0 = _vote_mean_angle(lines)
    # ridge pixels of the orientation sectors within 8 deg of the family (pixels are
    # stored sector by sector)
    n_sec = int(round(180.0 / _SECTOR_DEG))
    bounds = np.searchsorted(rp.sector, np.arange(n_sec + 1))
    idx = [np.arange(bounds[k], bounds[k + 1]) for k in range(n_sec)
           if abs(axial_difference(k * _SECTOR_DEG, a0)) <= 8.0 + _SECTOR_DEG / 2]
    near = np.concatenate(idx) if idx else np.zeros(0, np.intp)
    if len(near) < 50:
        return None
    if len(near) > 60000:  # plenty for the profile; keep the strongest
        near = near[np.argpartition(-rp.strength[near], 60000)[:60000]]
    x, y, wt = rp.col[near].astype(np.float64), rp.row[near].astype(np.float64), rp.strength[near].astype(np.float64)
    a1 = _radon_refine(x, y, wt, a0)
    if a1 is None:
        return None
    d, n = _normal(a1)
    cx, cy = float(np.average(x, weights=wt)), float(np.average(y, weights=wt))
    # profile across the bands at the refined angle, to centre the Hough lines
    s_pix = x * n[0] + y * n[1]
    s0 = s_pix.min()
    prof = np.bincount(np.floor((s_pix - s0) / 0.5).astype(np.intp), weights=wt)
    prof = ndimage.gaussian_filter1d(prof, 1.0)
    pos = []
    for a_l, th, rho, votes, cov in lines:
        nt = np.array([math.cos(th), math.sin(th)])
        dt = np.array([-math.sin(th), math.cos(th)])
        p = rho * nt
        p = p + ((np.array([cx, cy]) - p) @ dt) * dt
        s = float(p @ n)
        i = int((s - s0) / 0.5)
        lo, hi = max(0, i - 4), min(len(prof), i + 5)
        if hi > lo:
            s = s0 + 0.5 * (lo + int(np.argmax(prof[lo:hi])) + 0.5)
        pos.append((s, votes))
    pos.sort()
    merge = 2.5
    uniq: list[list[float]] = []
    for s, v in pos:
        if uniq and s - uniq[-1][0] < merge:
            if v > uniq[-1][1]:
                uniq[-1] = [s, v]
            continue
        uniq.append([s, v])
    if len(uniq) < min_bands:
        return None
    ss = np.array([u_[0] for u_ in uniq])
    gaps = np.diff(ss)
    spacing_w = float(np.median(gaps)) if len(gaps) else 50.0
    sig_med = _family_sigma(prof, ss, s0, spacing_w)
    # ---- full-resolution fits
    sig_full = sig_med * f
    half = int(max(4, min(math.ceil(3.5 * sig_full + 2), math.floor(0.45 * spacing_w * f))))
    cen = np.array([cx, cy]) @ d
    fits = []
    order = np.argsort([-u_[1] for u_ in uniq])
    tried = 0
    for s in ss[order]:
        tried += 1
        if tried == 8 and sum(ft["rms"] <= max_rms for ft in fits) < 3:
            return None  # the strongest lines are not sharp bands: not a family
        pw = s * n + cen * d  # working coordinates
        pf = (pw + 0.5) * f - 0.5
        fit = _fit_band(img, valid_full, pf, d, half, rp.polarity, pixel_noise, f=f)
        if fit is not None and fit["shift"] > 0.3:
            # a second pass, centred on the first fit, when the first one moved the line
            fit2 = _fit_band(img, valid_full, fit["point"], fit["direction"], half, rp.polarity, pixel_noise, f=f)
            fit = fit2 or fit
        if fit is not None:
            fits.append(fit)
    # a broad plateau (the gap between bands of another polarity) gives a wandering
    # centre; a band gives a sharp one
    fits = [ft for ft in fits if ft["rms"] <= min(max_rms, 0.3 * (half - 2))]
    # Hough lines that converged onto the same band: keep the best fit
    fits.sort(key=lambda z: float(z["point"] @ n))
    dedup = []
    for ft in fits:
        if dedup and abs(float((ft["point"] - dedup[-1]["point"]) @ n)) < max(2.0, 1.2 * sig_full, 0.3 * spacing_w * f):
            if ft["n"] * ft["snr"] > dedup[-1]["n"] * dedup[-1]["snr"]:
                dedup[-1] = ft
            continue
        dedup.append(ft)
    fits = dedup
    # A band differs from the local *median* grey level; the dark gaps in a lattice of
    # bright bands (and vice versa) sit at that level and are no bands.
    for ft in fits:
        pa, pb = ft["ends"]
        tt = np.linspace(0.0, 1.0, max(8, int(ft["seen"] / (2.0 * f))))[:, None]
        pts = pa[None, :] * (1 - tt) + pb[None, :] * tt
        ft["depth"] = float(np.median(rp.polarity * depth_of(pts)))
    if _DEBUG is not None:
        _DEBUG.append((rp.polarity, float(np.median([ft["angle"] for ft in fits])) if fits else None, [round(ft["depth"], 3) for ft in fits]))
    fits = [ft for ft in fits if ft["depth"] >= min_depth]
    if len(fits) < min_bands:
        return None
    ang = np.array([ft["angle"] for ft in fits])
    sig = np.array([ft["sigma"] for ft in fits])
    ref = float(np.median(ang)) if np.ptp(ang) < 90 else a1
    dev = np.asarray(axial_difference(ang, ref))
    spread = 1.4826 * float(np.median(np.abs(dev)))
    ok = np.abs(dev) <= np.maximum(4.0 * np.hypot(sig, spread), 0.05)
    if ok.sum() < min_bands:
        return None
    fits = [ft for ft, o in zip(fits, ok) if o]
    dev, sig = dev[ok], sig[ok]
    wgt = 1.0 / sig**2
    mean_dev = float(np.sum(wgt * dev) / np.sum(wgt))
    angle = float(fold_axial(ref + mean_dev))
    nb = len(fits)
    chi2 = float(np.sum(wgt * (dev - mean_dev) ** 2)) / max(nb - 1, 1)
    angle_sigma = math.sqrt(1.0 / float(np.sum(wgt))) * math.sqrt(max(1.0, chi2))
    if angle_sigma > 1.0:
        return None
    d_f, n_f = _normal(angle)
    offs = np.sort(np.array([ft["point"] @ n_f for ft in fits]))
    gaps = np.diff(offs)
    # bands of a family keep a spacing (missed bands only make gaps of several spacings)
    if len(gaps) >= 2 and np.mean(gaps < 0.45 * np.median(gaps)) > 0.25:
        return None
    spacing = float(np.mean(gaps)) if len(gaps) else float("nan")
    spacing_sd = float(np.std(gaps, ddof=1)) if len(gaps) > 1 else float("nan")
    if len(gaps) > 1 and spacing_sd > max_spacing_cv * spacing:
        # irregular, unless only a few holes (missed bands) widen the spread
        med_gap = float(np.median(gaps))
        robust_cv = 1.4826 * float(np.median(np.abs(gaps - med_gap))) / max(med_gap, 1e-9)
        if robust_cv > 0.4 or len(gaps) < 8:
            return None  # no consistent spacing: chance alignments, not a band family
    diag_full = diag_w * f
    strength = float(sum(ft["seen"] / diag_full * ft["snr"] for ft in fits))
    band_lines = []
    for ft in sorted(fits, key=lambda z: z["point"] @ n_f):
        pa, pb = ft["ends"]
        band_lines.append(BandLine(float(pa[0]), float(pa[1]), float(pb[0]), float(pb[1]), ft["angle"], ft["sigma"], ft["snr"]))
    return BandFamily(
        angle_deg=angle,
        angle_sigma_deg=angle_sigma,
        n_bands=nb,
        spacing_px=spacing,
        spacing_sigma_px=spacing_sd,
        spacing_um=None if pixel_size_um is None or not math.isfinite(spacing) else spacing * pixel_size_um,
        strength=strength,
        polarity="dark" if rp.polarity < 0 else "bright",
        contrast=float(rp.polarity * np.median([ft["depth"] for ft in fits])),
        lines=band_lines,
    )


def detect_grains(image, labels, mask=None, pixel_size_um: float | None = None, *, path: str | None = None,
                  min_pixels: int = 2500, grains=None, **kwargs) -> dict[int, DetectionResult]:
    """Run :func:`detect_bands` on every grain of a label image, each on its own pixels.

    Parameters
    ----------
    image : ndarray, (H, W)
    labels : ndarray of int, (H, W)
        Grain ids; every id is a grain (pass ``grains`` to choose some).
    mask : ndarray of bool, optional
        Pixels to analyse, combined with each grain.
    pixel_size_um : float, optional
    min_pixels : int
        Grains with fewer analysable pixels are skipped (with a note in their result).
    grains : iterable of int, optional
        Grain ids to analyse (default: all).
    **kwargs
        Passed to :func:`detect_bands`.

    Returns
    -------
    dict of int -> DetectionResult
        Band lines are in the coordinates of the whole image.
    """
    img, m = _prepare(image, mask, labels, None)
    lab = np.asarray(labels)
    h, w = img.shape
    bars = find_databar(img) if kwargs.pop("find_bar", True) else []
    base = np.ones((h, w), bool) if m is None else m.copy()
    for b in bars:
        c0, r0, c1, r1 = b["bbox"]
        base[r0:r1, c0:c1] = False
    ids = [int(g) for g in (np.unique(lab) if grains is None else grains)]
    out: dict[int, DetectionResult] = {}
    objs = ndimage.find_objects(lab.astype(np.int64) + 1) if lab.min() >= -1 else None
    for gid in ids:
        if objs is not None and 0 <= gid + 1 <= len(objs) and objs[gid] is not None:
            sl = objs[gid]
        else:
            rr, cc = np.nonzero(lab == gid)
            if len(rr) == 0:
                raise TracefitInputError(f"grain id {gid} does not occur in the label image")
            sl = (slice(rr.min(), rr.max() + 1), slice(cc.min(), cc.max() + 1))
        r0, r1 = max(0, sl[0].start - 8), min(h, sl[0].stop + 8)
        c0, c1 = max(0, sl[1].start - 8), min(w, sl[1].stop + 8)
        gm = (lab[r0:r1, c0:c1] == gid) & base[r0:r1, c0:c1]
        res_g = DetectionResult(path=path, width=w, height=h, excluded=list(bars), pixel_size_um=pixel_size_um, grain=gid)
        if gm.sum() < min_pixels or min(gm.shape) < 16:
            res_g.notes.append(f"grain {gid}: {int(gm.sum())} pixels, too few to analyse (< {min_pixels})")
            out[gid] = res_g
            continue
        crop = img[r0:r1, c0:c1]
        if float(crop[gm].max() - crop[gm].min()) <= 0:
            res_g.notes.append(f"grain {gid}: constant grey level, no bands")
            out[gid] = res_g
            continue
        r = detect_bands(crop, mask=gm, pixel_size_um=pixel_size_um, find_bar=False, **kwargs)
        for fam in r.families:
            for ln in fam.lines:
                ln.col0 += c0
                ln.col1 += c0
                ln.row0 += r0
                ln.row1 += r0
        res_g.families = r.families
        res_g.notes.extend(f"grain {gid}: {t}" for t in r.notes)
        out[gid] = res_g
    return out
