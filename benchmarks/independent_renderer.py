"""An independent renderer of synthetic micrographs, for `benchmarks/independent_micrographs.py`.

Written for this check from scratch with numpy/scipy/opencv only, sharing no code with
`tracefit.image.synthetic`, so that the detector is measured on pictures drawn otherwise
than its own test images: erf (flat-top) or Gaussian band profiles 1-8 px wide, irregular
spacing, bands spanning the image or partial and staggered, smooth background texture,
illumination gradients and vignetting, Gaussian and Poisson noise, blur, JPEG, 8/16-bit or
float output, scratches, pores, Voronoi grain patches (negatives). All parameters are this
check's own choices (no source); the scenes are invented.

Angle convention: degrees, axial [0, 180), counterclockwise from image +x with y up the
screen (docs/conventions.md).

``draw_params(kind, index)`` -> dict (JSON-able, seeded, reproducible);
``render(params)`` -> (image, truth), truth a list of per-family dicts.
"""
from __future__ import annotations

import math

import cv2
import numpy as np
from scipy import ndimage
from scipy.special import erf

SIZES = [256, 384, 512, 640, 768, 1024, 1280, 1536, 2048]


def _axial_diff(a, b):
    d = abs((a - b) % 180.0)
    return min(d, 180.0 - d)


# ----------------------------------------------------------------------------- params
def _draw_angles(rng, nfam):
    """Family angles: some near 0/90/45/135, some pairs 15-30 deg apart."""
    angles = []
    mode = rng.random()
    if nfam >= 2 and mode < 0.35:
        a0 = rng.uniform(0, 180)
        angles = [a0, (a0 + rng.choice([-1, 1]) * rng.uniform(15, 30)) % 180]
    while len(angles) < nfam:
        r = rng.random()
        if r < 0.22:
            a = (rng.choice([0.0, 90.0]) + rng.uniform(-3, 3)) % 180
        elif r < 0.34:
            a = (rng.choice([45.0, 135.0]) + rng.uniform(-3, 3)) % 180
        else:
            a = rng.uniform(0, 180)
        if all(_axial_diff(a, b) >= 15 for b in angles):
            angles.append(a)
    return [float(a) for a in angles]


def draw_params(kind: str, index: int) -> dict:
    """kind: 'main' (clearly visible), 'faint', or 'neg' (no bands)."""
    base = {"main": 1000, "faint": 2000, "neg": 3000}[kind]
    rng = np.random.default_rng(base + index)
    if rng.random() < 0.6:
        H = W = int(rng.choice(SIZES))
    else:
        H, W = (int(v) for v in rng.choice(SIZES, 2, replace=False))
    p = {"kind": kind, "index": index, "seed": int(base * 7 + index), "H": H, "W": W,
         "g0": float(rng.uniform(0.3, 0.7))}
    # background texture / illumination
    p["tex_amp"] = float(rng.choice([0.0, rng.uniform(0.0, 0.03)]))
    p["tex_len"] = float(rng.uniform(15, 150))
    p["grad"] = [float(v) for v in rng.uniform(-0.25, 0.25, 2)] if rng.random() < 0.5 else [0.0, 0.0]
    p["vignette"] = float(rng.uniform(0.05, 0.35)) if rng.random() < 0.35 else 0.0
    # noise
    p["gauss_sigma"] = float(rng.choice([0.003, 0.008, 0.015, 0.025]))
    p["photons"] = float(rng.choice([0, 200, 1000, 5000]))  # 0 = no Poisson noise
    p["blur"] = float(rng.uniform(0.5, 1.5)) if rng.random() < 0.35 else 0.0
    p["jpeg"] = int(rng.integers(60, 91)) if rng.random() < 0.3 else 0
    p["dtype"] = str(rng.choice(["u8", "u16", "f32"]))
    # clutter
    p["scratches"] = int(rng.choice([0, 0, 1, 2, 3]))
    p["pores"] = int(rng.choice([0, 0, 5, 20, 60]))
    p["grains"] = 0
    p["families"] = []
    if kind == "neg":
        r = rng.random()
        p["tex_amp"] = float(rng.uniform(0.005, 0.05))
        p["scratches"] = 1 if r < 0.4 else 0
        p["pores"] = int(rng.choice([0, 10, 40]))
        p["grains"] = int(rng.integers(6, 40)) if rng.random() < 0.5 else 0
        p["grain_contrast"] = float(rng.uniform(0.03, 0.15))
        p["scratch_angles"] = [float(rng.uniform(0, 180))]
        return p
    nfam = int(rng.choice([1, 1, 2, 2, 3]))
    angles = _draw_angles(rng, nfam)
    for a in angles:
        f = {"angle": a,
             "profile": str(rng.choice(["gauss", "erf"])),
             "width": float(rng.uniform(1.0, 8.0)),
             "polarity": str(rng.choice(["dark", "bright"])),
             "irregular": float(rng.uniform(0.0, 0.6)),
             "partial": bool(rng.random() < 0.3),
             "cluster": float(rng.uniform(0.35, 1.0)) if rng.random() < 0.4 else 1.0,
             "n": int(rng.integers(3, 41))}
        if kind == "main":
            f["contrast"] = float(rng.uniform(0.08, 0.40))
        else:
            f["contrast"] = float(rng.uniform(0.03, 0.07))
        p["families"].append(f)
    p["scratch_angles"] = []
    while len(p["scratch_angles"]) < p["scratches"]:
        a = float(rng.uniform(0, 180))
        if all(_axial_diff(a, f["angle"]) >= 8 for f in p["families"]):
            p["scratch_angles"].append(a)
    if kind == "main":
        _make_visible(p, rng)
    else:
        # faint: low contrast (3-7 %); lower the noise until per-pixel SNR >= 1.5
        levels = [0.003, 0.008, 0.015, 0.025]
        for _ in range(12):
            if all(visibility(p, f)["snr"] >= 1.5 for f in p["families"]):
                break
            if p["photons"] and p["photons"] < 5000:
                p["photons"] = float(p["photons"] * 5)
            elif p["gauss_sigma"] > 0.003:
                p["gauss_sigma"] = levels[max(0, levels.index(p["gauss_sigma"]) - 1)]
            elif p["blur"] > 0:
                p["blur"] = 0.0
    return p


def _noise_rel(p):
    """Pixel noise sigma relative to local grey (before quantisation / JPEG)."""
    v = p["gauss_sigma"] ** 2 / p["g0"] ** 2
    if p["photons"] > 0:
        v += 1.0 / p["photons"]
    return math.sqrt(v)


def peak_after_blur(f, blur):
    """Peak relative depth factor of one band after optional Gaussian blur."""
    w = f["width"]
    if f["profile"] == "gauss":
        sb = w / 2.3548
        return sb / math.sqrt(sb * sb + blur * blur)
    edge = 0.5
    se = math.sqrt(edge * edge + blur * blur)
    return float(erf(w / 2 / (math.sqrt(2) * se)))


def visibility(p, f):
    """Clear-visibility rule (see report): effective peak depth c_eff = contrast x
    peak-after-blur; requires c_eff >= 0.06, c_eff >= 3 x pixel noise, and c_eff >= 2 x
    background texture amplitude."""
    c_eff = f["contrast"] * peak_after_blur(f, p["blur"])
    return {"c_eff": c_eff, "snr": c_eff / _noise_rel(p),
            "clear": bool(c_eff >= 0.06 and c_eff >= 3 * _noise_rel(p)
                          and c_eff >= 2 * p["tex_amp"])}


def _make_visible(p, rng):
    """Main set: lower noise / texture until every family passes the visibility rule."""
    for _ in range(20):
        if all(visibility(p, f)["clear"] for f in p["families"]):
            return
        levels = [0.003, 0.008, 0.015, 0.025]
        if p["photons"] and p["photons"] < 5000:
            p["photons"] = float(p["photons"] * 5)
        elif p["gauss_sigma"] > 0.003:
            p["gauss_sigma"] = levels[max(0, levels.index(p["gauss_sigma"]) - 1)]
        elif p["tex_amp"] > 0.005:
            p["tex_amp"] *= 0.5
        else:
            for f in p["families"]:
                if not visibility(p, f)["clear"]:
                    f["contrast"] = min(0.4, f["contrast"] * 1.3)
                    if f["width"] < 2 and p["blur"] > 0:
                        p["blur"] *= 0.7


# ----------------------------------------------------------------------------- render
def _coords(H, W):
    r = np.arange(H, dtype=np.float64)[:, None]
    c = np.arange(W, dtype=np.float64)[None, :]
    x = c - (W - 1) / 2.0
    y = -(r - (H - 1) / 2.0)
    return x, y


def _smooth_field(rng, H, W, length):
    """Zero-mean, unit-std smooth random field with correlation length ~length px."""
    f = max(1, int(length / 4))
    h, w = max(4, H // f + 2), max(4, W // f + 2)
    g = ndimage.gaussian_filter(rng.normal(size=(h, w)), sigma=length / f / 2.0, mode="wrap")
    g = cv2.resize(g.astype(np.float32), (W, H), interpolation=cv2.INTER_CUBIC).astype(np.float64)
    g -= g.mean()
    s = g.std()
    return g / s if s > 0 else g


def _profile(d, f_width, kind, edge=0.5):
    if kind == "gauss":
        sb = f_width / 2.3548
        return np.exp(-0.5 * (d / sb) ** 2)
    k = 1.0 / (math.sqrt(2) * edge)
    return 0.5 * (erf((d + f_width / 2) * k) - erf((d - f_width / 2) * k))


def render(p: dict):
    rng = np.random.default_rng(p["seed"])
    H, W = p["H"], p["W"]
    x, y = _coords(H, W)
    g0 = p["g0"]
    # background: texture and illumination (multiplicative)
    bg = np.ones((H, W))
    if p["tex_amp"] > 0:
        bg += p.get("tex_scale", 1.0) * p["tex_amp"] * _smooth_field(rng, H, W, p["tex_len"])
    gx, gy = p["grad"]
    bg *= 1 + gx * x / W * 2 + gy * y / H * 2
    if p["vignette"] > 0:
        rr = (x / (W / 2)) ** 2 + (y / (H / 2)) ** 2
        bg *= 1 - p["vignette"] * rr / 2
    if p.get("grains"):
        from scipy.spatial import cKDTree
        seeds = np.column_stack([rng.uniform(0, H, p["grains"]), rng.uniform(0, W, p["grains"])])
        rr_, cc_ = np.mgrid[0:H, 0:W]
        _, lab = cKDTree(seeds).query(np.column_stack([rr_.ravel(), cc_.ravel()]))
        lv = 1 + p["grain_contrast"] * rng.uniform(-1, 1, p["grains"])
        gr = lv[lab].reshape(H, W)
        bg *= ndimage.gaussian_filter(gr, 1.0)
    # bands: relative modulation m (image = bg * (1 + m))
    m = np.zeros((H, W))
    truth = []
    for fi, f in enumerate(p["families"]):
        th = math.radians(f["angle"])
        s = -math.sin(th) * x + math.cos(th) * y     # normal coordinate
        t = math.cos(th) * x + math.sin(th) * y      # along-band coordinate
        Ls = abs(W * math.sin(th)) + abs(H * math.cos(th))
        Lt = abs(W * math.cos(th)) + abs(H * math.sin(th))
        w = f["width"]
        span = Ls * f["cluster"]
        n = f["n"]
        min_gap = max(3.0 * w + 3, 8.0)
        n = int(max(3, min(n, span / min_gap - 1)))
        gaps = np.exp(rng.normal(0, f["irregular"], n + 1))
        gaps = gaps / gaps.sum() * span
        gaps = np.maximum(gaps, min_gap)
        pos = np.cumsum(gaps)[:-1]
        pos = pos - pos.mean() + rng.uniform(-(Ls - span) / 2, (Ls - span) / 2 + 1e-9)
        pos = np.sort(pos)
        widths = w * rng.uniform(0.8, 1.2, n)
        contr = f["contrast"] * rng.uniform(0.75, 1.25, n)
        sign = -1.0 if f["polarity"] == "dark" else 1.0
        # along-band windows
        if f["partial"]:
            lens = Lt * rng.uniform(0.25, 0.8, n)
            if p.get("partial_frac"):
                lens = Lt * p["partial_frac"] * rng.uniform(0.9, 1.1, n)
            cen = rng.uniform(-Lt / 2, Lt / 2, n)
            if p.get("partial_aligned") is not None:
                cen = np.full(n, float(p["partial_aligned"]))
        else:
            lens = np.full(n, 4 * Lt)
            cen = np.zeros(n)
        # nearest and second-nearest band per pixel
        idx = np.searchsorted(pos, s)
        fam = np.zeros((H, W))
        vis_len = np.zeros(n)
        chord = np.zeros(n)
        for j in (idx - 1, idx):
            jj = np.clip(j, 0, n - 1)
            valid = (j >= 0) & (j < n)
            d = s - pos[jj]
            prof = _profile(d, widths[jj], f["profile"])
            tt = t - cen[jj]
            half = lens[jj] / 2
            win = 0.5 * (erf((tt + half) / 4.0) - erf((tt - half) / 4.0))
            contrib = np.where(valid, sign * contr[jj] * prof * win, 0.0)
            fam += contrib
            core = valid & (np.abs(d) < 0.5) & (win > 0.5)
            vis_len += np.bincount(jj[core], minlength=n)[:n]
            chord += np.bincount(jj[valid & (np.abs(d) < 0.5)], minlength=n)[:n]
        if fi not in p.get("mute_fams", []):
            m += fam
        vis = visibility(p, f)
        truth.append({"angle": f["angle"], "n_bands": n, "n_visible_ge60": int((vis_len >= 60).sum()),
                      "median_len": float(np.median(vis_len)),
                      "coverage": [round(float(v), 3) for v in vis_len / np.maximum(chord, 1)],
                      "lengths": [round(float(v), 1) for v in vis_len],
                      "width": w, "profile": f["profile"], "polarity": f["polarity"],
                      "contrast": f["contrast"], "partial": f["partial"],
                      "spacing_med": float(np.median(np.diff(pos))) if n > 1 else 0.0, **vis})
    # scratches: single thin lines, other directions
    for si, a in enumerate(p.get("scratch_angles", [])[: max(p["scratches"], 0)]):
        th = math.radians(a)
        s = -math.sin(th) * x + math.cos(th) * y
        t = math.cos(th) * x + math.sin(th) * y
        Ls = abs(W * math.sin(th)) + abs(H * math.cos(th))
        Lt = abs(W * math.cos(th)) + abs(H * math.sin(th))
        s0 = rng.uniform(-0.4, 0.4) * Ls
        if p.get("scratch_s0"):
            s0 = p["scratch_s0"][si]
        L = rng.uniform(0.5, 1.0) * Lt
        c0 = rng.uniform(-(Lt - L) / 2, (Lt - L) / 2 + 1e-9)
        sw = rng.uniform(0.5, 1.0)
        amp = rng.uniform(0.05, 0.3) * rng.choice([-1, 1])
        win = 0.5 * (erf((t - c0 + L / 2) / 3.0) - erf((t - c0 - L / 2) / 3.0))
        if not p.get("mute_scratch"):
            m += amp * np.exp(-0.5 * ((s - s0) / sw) ** 2) * win
    img = bg * (1 + m)
    # pores: dark elliptical blobs
    for _ in range(p["pores"]):
        rad = rng.uniform(1.5, 10.0)
        r0, c0 = rng.uniform(0, H), rng.uniform(0, W)
        ecc = rng.uniform(0.5, 1.0)
        ang = rng.uniform(0, math.pi)
        depth = rng.uniform(0.3, 0.8)
        R = int(3 * rad) + 2
        r1, r2 = int(max(0, r0 - R)), int(min(H, r0 + R))
        c1, c2 = int(max(0, c0 - R)), int(min(W, c0 + R))
        if r2 <= r1 or c2 <= c1:
            continue
        rr, cc = np.mgrid[r1:r2, c1:c2]
        dr, dc = rr - r0, cc - c0
        u = dr * math.cos(ang) + dc * math.sin(ang)
        v = -dr * math.sin(ang) + dc * math.cos(ang)
        q = (u / rad) ** 2 + (v / (rad * ecc)) ** 2
        if not p.get("mute_pores"):
            img[r1:r2, c1:c2] *= 1 - depth / (1 + np.exp((q - 1) * 4))
    img *= g0
    if p["blur"] > 0:
        img = ndimage.gaussian_filter(img, p["blur"])
    # noise
    if p["photons"] > 0:
        k = p["photons"] / g0
        pn = rng.poisson(np.clip(img, 0, None) * k) / k
        img = img + p.get("noise_scale", 1.0) * (pn - img)
    img = img + p.get("noise_scale", 1.0) * rng.normal(0, p["gauss_sigma"], img.shape)
    # output type
    if p["dtype"] == "u8" or (p["jpeg"] and not p.get("no_jpeg")):
        out = np.clip(np.round(img * 255), 0, 255).astype(np.uint8)
        if p["jpeg"] and not p.get("no_jpeg"):
            ok, buf = cv2.imencode(".jpg", out, [cv2.IMWRITE_JPEG_QUALITY, int(p["jpeg"])])
            out = cv2.imdecode(buf, cv2.IMREAD_UNCHANGED)
    elif p["dtype"] == "u16":
        out = np.clip(np.round(img * 65535), 0, 65535).astype(np.uint16)
    else:
        out = img.astype(np.float32)
    return out, truth
