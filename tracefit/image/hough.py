"""Line candidates of the band detector: Hough lines, angle clusters and Radon refinement.

Stages 3 to 5 of :func:`tracefit.image.detect_bands` (private to the package):

- :func:`_line_candidates` -- straight-line Hough transform (scikit-image ``hough_line``,
  0.5 deg bins) per orientation sector, each on the ridge pixels whose local
  orientation fits that sector; votes are normalised by the chord length through the
  analysed region (:func:`_chord_lengths`).
- :func:`_cluster_angles` -- the axial angles of the Hough lines are clustered greedily;
  a cluster with ``min_bands`` lines is a candidate family.
- :func:`_family_profile` -- the candidate's angle is refined below the bin width with a
  projection (Radon) profile of the ridge pixels in a narrow window
  (:func:`_radon_refine`); the profile across the bands locates them.

Work is at the working-copy resolution; angles follow :mod:`tracefit.conventions`.
"""

from __future__ import annotations

import hashlib
import threading
from collections import OrderedDict
from dataclasses import dataclass

import cv2
import numpy as np
from scipy import ndimage
from skimage.transform import hough_line

from tracefit.conventions import axial_difference, axial_mean, fold_axial, pixel_direction_angle
from tracefit.image.geometry import _direction_and_normal
from tracefit.image.ridges import RidgePixels
from tracefit.image.threads import ordered_map

THETA_STEP_DEG = 0.5  # Hough angle bin
SECTOR_DEG = 15.0  # orientation sectors of the ridge filter
PROFILE_BIN_PX = 0.5  # bin of the projection profiles across a family
FAMILY_WINDOW_DEG = 8.0  # ridge sectors within this of a family feed its profile
MAX_PROFILE_PIXELS = 60000  # plenty for a profile; the strongest are kept


def _hough_theta():
    """skimage ``hough_line`` angles and the image-frame angles of their lines.

    Returns
    -------
    theta : ndarray of float, (360,)
        Normal angles, radians, [-90, 90) deg in 0.5 deg steps.
    alpha : ndarray of float, (360,)
        Image-frame axial angle of the lines of each ``theta``, degrees.
    """
    theta = np.deg2rad(np.arange(-90.0, 90.0, THETA_STEP_DEG))
    # the line direction is perpendicular to the normal (cos t, sin t) in (col, row)
    alpha = pixel_direction_angle(-np.sin(theta), np.cos(theta))
    return theta, np.asarray(alpha)


_CHORD_CACHE: OrderedDict = OrderedDict()  # (shape, region digest, theta digest) -> (chord, rho), newest last
_CHORD_CACHE_SIZE = 4  # a chord table of a 1536 px working copy is about 6 MB (of a 64-MP image's 2730 px copy, 11 MB)
_CHORD_LOCK = threading.Lock()


def _chord_lengths(region, theta):
    """Length (px) of every Hough chord (rho, theta) through the analysed region.

    The tables of the last few regions are kept (read-only): both search rounds of an image,
    and every image of a series of one size without a mask, share one.

    Parameters
    ----------
    region : ndarray of bool, (h, w)
        Analysed pixels of the working copy.
    theta : ndarray of float
        Hough normal angles, radians.

    Returns
    -------
    chord : ndarray of float32, (2 * ceil(hypot(h, w)) + 1, len(theta))
        Chord length per (rho, theta) cell, pixels (read-only).
    rho : ndarray of float
        The rho of each row, pixels (read-only).
    """
    region = np.asarray(region, bool)
    key = (region.shape, hashlib.blake2b(np.packbits(region).tobytes(), digest_size=16).digest(),
           hashlib.blake2b(np.ascontiguousarray(theta, float).tobytes(), digest_size=16).digest())
    with _CHORD_LOCK:
        hit = _CHORD_CACHE.get(key)
        if hit is not None:
            _CHORD_CACHE.move_to_end(key)
            return hit
    h, w = region.shape
    diag = int(np.ceil(np.hypot(h, w)))
    q = max(1, int(np.ceil(max(h, w) / 256)))
    small = cv2.resize(region.astype(np.float32), (max(2, w // q), max(2, h // q)), interpolation=cv2.INTER_AREA) > 0.5
    acc_s, _, dists_s = hough_line(small, theta=theta)
    rho = np.arange(-diag, diag + 1, dtype=np.float64)
    idx = np.clip(np.rint(rho / q - dists_s[0]).astype(int), 0, len(dists_s) - 1)
    chord = acc_s[idx].astype(np.float32) * q
    chord.flags.writeable = False
    rho.flags.writeable = False
    with _CHORD_LOCK:
        _CHORD_CACHE[key] = (chord, rho)
        while len(_CHORD_CACHE) > _CHORD_CACHE_SIZE:
            _CHORD_CACHE.popitem(last=False)
    return chord, rho


class _SectorDigests:
    """Content digest of each sector's ridge pixels (columns, rows, strengths), once per pixel set.

    Keys of the per-image memos of the search rounds: two pixel sets with the same digests in a
    sector hold the same pixels there, in the same order.
    """

    def __init__(self):
        self._by_id: dict = {}

    def __call__(self, rp: RidgePixels) -> list:
        hit = self._by_id.get(id(rp))
        if hit is None or hit[0] is not rp:
            n_sec = int(round(180.0 / SECTOR_DEG))
            bounds = np.searchsorted(rp.sector, np.arange(n_sec + 1))  # pixels are stored sector by sector
            digests = []
            for a, b in zip(bounds[:-1], bounds[1:]):
                h = hashlib.blake2b(digest_size=16)
                for arr in (rp.col, rp.row, rp.strength):
                    h.update(np.ascontiguousarray(arr[a:b]))
                digests.append(h.digest())
            hit = self._by_id[id(rp)] = (rp, digests)  # holding rp keeps its id unique
        return hit[1]


def _line_candidates(rp: RidgePixels, theta, alpha, chord, v_min, c_min, memo: dict | None = None,
                     digests: _SectorDigests | None = None):
    """Hough peaks per orientation sector on one polarity's ridge pixels.

    Parameters
    ----------
    rp : RidgePixels
        Ridge pixels (working resolution), stored sector by sector.
    theta, alpha : ndarray
        From :func:`_hough_theta`.
    chord : ndarray
        From :func:`_chord_lengths`.
    v_min : float
        Fewest votes (ridge pixels, summed over three rho bins) of a line.
    c_min : float
        Least coverage: votes over the chord length through the region.
    memo : dict, optional
        Lines of the sectors already transformed with the same ``theta``, ``chord``, ``v_min``
        and ``c_min`` (one image), keyed by the sector's pixels; filled as it goes. The second
        search round of an image repeats the sectors that lost no pixel.
    digests : _SectorDigests, optional
        Digests of the sectors' pixels (the keys of ``memo``); a new one when not given.

    Returns
    -------
    ndarray of float, (n, 5)
        One row per line: (alpha_deg, theta_rad, rho_px, votes, coverage).
    """
    h, w = rp.shape
    out = []
    if len(rp) == 0:
        return np.zeros((0, 5))
    n_sec = int(round(180.0 / SECTOR_DEG))
    sector_of_theta = np.floor(fold_axial(alpha + SECTOR_DEG / 2) / SECTOR_DEG).astype(int) % n_sec
    ci, ri = rp.col.astype(np.intp), rp.row.astype(np.intp)
    by_sector = None if memo is None else (digests or _SectorDigests())(rp)
    if np.all(rp.sector[1:] >= rp.sector[:-1]):  # stored sector by sector: each sector is a slice
        bounds = np.searchsorted(rp.sector, np.arange(n_sec + 1))
        in_sector = [slice(bounds[k], bounds[k + 1]) for k in range(n_sec)]
    else:
        in_sector = [np.flatnonzero(rp.sector == k) for k in range(n_sec)]
    slots: list = []  # per sector tried, in sector order: memo key and (known lines or None)
    for k in range(n_sec):
        sel_t = np.nonzero(sector_of_theta == k)[0]
        if len(ri[in_sector[k]]) < v_min or len(sel_t) == 0:
            continue
        key = None if memo is None else (k, (h, w), by_sector[k])
        slots.append((k, sel_t, key, None if key is None else memo.get(key)))

    def transform(slot):
        k, sel_t, _, known = slot
        if known is not None:
            return known
        near = in_sector[k]
        canvas = np.zeros((h, w), np.uint8)  # one per sector: sectors may run in threads
        canvas[ri[near], ci[near]] = 1
        acc, _, dists = hough_line(canvas, theta=theta[sel_t])
        acc = acc.astype(np.float32)
        acc3 = acc.copy()
        acc3[1:] += acc[:-1]
        acc3[:-1] += acc[1:]
        ln = chord[:, sel_t]
        cov = acc3 / np.maximum(ln, 0.25 * min(h, w))
        # local maxima over 7 x 5 cells; the votes are >= 0, so a border of zeros (scipy's
        # maximum_filter, mode="constant") and OpenCV's dilation agree exactly
        peak = acc3 == cv2.dilate(acc3, _PEAK_KERNEL, borderType=cv2.BORDER_CONSTANT, borderValue=0)
        ok = peak & (acc3 >= v_min) & (cov >= c_min)
        ii, jj = np.nonzero(ok)
        rows = np.column_stack([alpha[sel_t[jj]], theta[sel_t[jj]], dists[ii], acc3[ii, jj], cov[ii, jj]]).astype(float)
        rows.flags.writeable = False
        return rows

    for (_, _, key, known), rows in zip(slots, ordered_map(transform, slots)):
        if memo is not None and known is None:
            memo[key] = rows
        out.append(rows)
    return np.concatenate(out, axis=0) if out else np.zeros((0, 5))


_PEAK_KERNEL = np.ones((7, 5), np.uint8)  # Hough peak neighbourhood: 7 rho bins by 5 angle bins


def _cluster_angles(alpha, votes, tol_deg=1.5):
    """Greedy axial clustering of line angles: strongest line first, members within ``tol_deg``.

    Returns
    -------
    list of ndarray of int
        Indices of the lines of each cluster, strongest cluster seed first.
    """
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


def _vote_mean_angle(lines):
    """Vote-weighted axial mean angle (degrees) of candidate lines (rows of :func:`_line_candidates`)."""
    return float(axial_mean(lines[:, 0], lines[:, 3]))


def _radon_refine(x, y, wgt, alpha0, half=1.0, step=0.1, bin_px=PROFILE_BIN_PX):
    """Angle maximising the sharpness (sum of squares) of the projection profile.

    Parameters
    ----------
    x, y : ndarray of float
        Pixel columns and rows.
    wgt : ndarray of float
        Pixel weights (ridge strength).
    alpha0 : float
        Starting image-frame angle, degrees.
    half, step : float
        Half width and step of the first search grid, degrees (a finer grid follows).
    bin_px : float
        Profile bin, pixels.

    Returns
    -------
    float or None
        Refined axial angle, degrees; None when the profile is sharpest at the edge of
        the window (no family at ``alpha0``).
    """

    s, tmp = np.empty_like(x), np.empty_like(x)

    def score(a):
        # (x n0 + y n1 - min) / bin, floored, as separate operations in two buffers; the values
        # are >= 0, so truncation to integers is the floor
        _, n = _direction_and_normal(a)
        np.multiply(x, n[0], out=s)
        np.multiply(y, n[1], out=tmp)
        np.add(s, tmp, out=s)
        np.subtract(s, s.min(), out=s)
        np.divide(s, bin_px, out=s)
        hist = np.bincount(s.astype(np.intp), weights=wgt)
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


def _sectors_near_angle(angle_deg, window_deg=FAMILY_WINDOW_DEG) -> list:
    """The orientation sectors whose band direction lies within ``window_deg`` (plus half a sector) of ``angle_deg``."""
    n_sec = int(round(180.0 / SECTOR_DEG))
    return [k for k in range(n_sec) if abs(axial_difference(k * SECTOR_DEG, angle_deg)) <= window_deg + SECTOR_DEG / 2]


def _pixels_near_angle(rp: RidgePixels, angle_deg, window_deg=FAMILY_WINDOW_DEG):
    """Indices of the ridge pixels whose sector lies within ``window_deg`` of ``angle_deg``."""
    n_sec = int(round(180.0 / SECTOR_DEG))
    bounds = np.searchsorted(rp.sector, np.arange(n_sec + 1))  # pixels are stored sector by sector
    idx = [np.arange(bounds[k], bounds[k + 1]) for k in _sectors_near_angle(angle_deg, window_deg)]
    return np.concatenate(idx) if idx else np.zeros(0, np.intp)


def _candidate_key(rp: RidgePixels, lines, digests: _SectorDigests) -> tuple:
    """What :func:`_family_profile` (and so a family built from a candidate) depends on, as a key.

    The polarity, the lines, and the ridge pixels of the sectors near their angle (those the
    profile reads), by their ``digests``.
    """
    sectors = _sectors_near_angle(_vote_mean_angle(lines))
    by_sector = digests(rp)
    return rp.polarity, np.ascontiguousarray(lines, float).tobytes(), tuple(by_sector[k] for k in sectors)


@dataclass
class _FamilyProfile:
    """A candidate family's refined angle and its projection profile (working resolution).

    ``offset`` s of a point p is ``p @ normal``; profile bin i covers
    ``s0 + i * PROFILE_BIN_PX`` onwards.
    """

    angle_deg: float
    direction: np.ndarray  # (col, row) unit vector along the bands
    normal: np.ndarray  # (col, row) unit vector across them
    centre: np.ndarray  # strength-weighted centroid of the family's ridge pixels, (col, row)
    s0: float
    profile: np.ndarray  # Gaussian-smoothed (1 bin) profile of ridge strength across the bands


def _family_profile(rp: RidgePixels, lines, min_pixels=50):
    """Refine a candidate's angle (Radon) and build its profile across the bands.

    Parameters
    ----------
    rp : RidgePixels
        Ridge pixels of the candidate's polarity.
    lines : ndarray, (n, 5)
        The candidate's Hough lines (rows of :func:`_line_candidates`).
    min_pixels : int
        Fewest ridge pixels near the candidate's angle.

    Returns
    -------
    _FamilyProfile or None
        None when too few pixels lie near the angle or the refinement finds no family.
    """
    a0 = _vote_mean_angle(lines)
    near = _pixels_near_angle(rp, a0)
    if len(near) < min_pixels:
        return None
    if len(near) > MAX_PROFILE_PIXELS:
        near = near[np.argpartition(-rp.strength[near], MAX_PROFILE_PIXELS)[:MAX_PROFILE_PIXELS]]
    x, y, wt = rp.col[near].astype(np.float64), rp.row[near].astype(np.float64), rp.strength[near].astype(np.float64)
    a1 = _radon_refine(x, y, wt, a0)
    if a1 is None:
        return None
    d, n = _direction_and_normal(a1)
    cx, cy = float(np.average(x, weights=wt)), float(np.average(y, weights=wt))
    s_pix = x * n[0] + y * n[1]
    s0 = s_pix.min()
    prof = np.bincount(np.floor((s_pix - s0) / PROFILE_BIN_PX).astype(np.intp), weights=wt)
    prof = ndimage.gaussian_filter1d(prof, 1.0)
    return _FamilyProfile(a1, d, n, np.array([cx, cy]), s0, prof)
