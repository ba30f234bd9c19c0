"""A contrario significance of a band family: its number of false alarms (NFA).

The background model (the *a contrario* hypothesis H0) is that the ridge pixels of one
polarity, aligned with the family's direction, are scattered independently over the
analysed region with the density ``p`` they have there. A band is a run of samples along
a line that land on such pixels; under H0 the chance of ``k`` hits among ``L`` samples is
the binomial tail ``B(L, k, p)``. The number of false alarms of a family of ``m`` bands is

``NFA = N_angles * (N_lines)^m / m! * prod_i B(L_i, k_i, p)``

with ``N_angles`` the tested directions and ``N_lines`` the line segments per direction
(offsets times start and end points), after Desolneux, Moisan & Morel, "Meaningful
alignments", IJCV 40 (2000) 7-23, and the segment count of von Gioi et al., "LSD: a fast
line segment detector with a false detection control", IEEE TPAMI 32 (2010) 722-732.
A family with NFA < 1 (``log10_nfa < 0``) is expected less than once in a picture of
texture alone of the same size and density; its ``significance`` is ``-log10_nfa``.
Texture that is itself striped at the family's angle raises ``p`` and so lowers the
significance of lines that merely follow it.

Families found by projection (:mod:`tracefit.image.projection`) are judged with
``whole_lines=True``: each band on the least likely segment of the family's line through it
(the segment count above pays for that choice), against the density of aligned pixels away
from the family's bands, estimated by Laplace's rule of succession.

Samples are taken every ``step`` working pixels (2 px, and one original pixel or more
on an internally enlarged image) so that neighbouring samples are roughly independent.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

import cv2
import numpy as np

from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.image.geometry import _direction_and_normal, _to_working
from tracefit.image.ridges import RidgePixels

__all__ = ["binomial_log10_tail", "family_log10_nfa"]

ANGLE_STEP_DEG = 0.5  # resolution of the tested directions (the Hough bin)
HIT_PX = 1  # a sample hits when an aligned ridge pixel lies within this many pixels
CORRIDOR_PX = 3  # half width of the corridor about each band left out of the background density
_MAX_ENDS = 48  # hits tried as segment ends per band (1176 segments, single hits included)


def binomial_log10_tail(n: int, k: int, p: float) -> float:
    """log10 of the probability of at least ``k`` successes in ``n`` trials of probability ``p``.

    Parameters
    ----------
    n : int
        Trials (>= 0).
    k : int
        Least number of successes.
    p : float
        Probability of a success, in [0, 1].

    Returns
    -------
    float
        ``log10 P(X >= k)`` for X ~ Binomial(n, p), <= 0 (0.0 when ``k <= 0``).

    Raises
    ------
    TracefitInputError
        ``n`` negative or ``p`` outside [0, 1].

    Examples
    --------
    Ten heads in ten fair tosses: probability 2**-10.

    >>> print(round(binomial_log10_tail(10, 10, 0.5), 4), round(-10 * math.log10(2), 4))
    -3.0103 -3.0103
    >>> binomial_log10_tail(10, 0, 0.3)
    0.0
    """
    if n < 0 or not 0.0 <= p <= 1.0:
        raise TracefitInputError(f"binomial_log10_tail needs n >= 0 and p in [0, 1], got n={n}, p={p}")
    return float(_log10_tails(np.array([n]), np.array([k]), p)[0])


def _binomial_sf():
    """The binomial survival function ufunc ``sf(k, n, p) = P(X > k)`` that ``scipy.stats.binom``
    uses, without importing ``scipy.stats`` (about a second); ``binom.sf`` where it is not found."""
    try:
        from scipy.special._ufuncs import _binom_sf  # what scipy.stats.binom._sf calls (scipy >= 1.9)
    except ImportError:  # pragma: no cover - another scipy layout
        from scipy.stats import binom

        return binom.sf
    return _binom_sf


def _log10_tails(n: np.ndarray, k: np.ndarray, p: float) -> np.ndarray:
    """``log10 P(X >= k)`` for X ~ Binomial(n, p), element by element (n >= 0, 0 <= p <= 1).

    The same values as ``binom.logsf(k - 1, n, p) / log(10)``: inside the support (1 <= k <= n)
    the log of the binomial survival function at ``floor(k - 1)``, 0 for k <= 0, -inf for k > n.
    """
    n = np.asarray(n, np.int64)
    k = np.asarray(k, np.int64)
    out = np.where(k <= 0, 0.0, -np.inf)
    inside = (k >= 1) & (k <= n)
    if inside.any():
        with np.errstate(divide="ignore"):
            out[inside] = np.log(_binomial_sf()(np.floor((k[inside] - 1).astype(np.float64)),
                                                n[inside].astype(np.float64), p)) / math.log(10.0)
    return out


def _aligned_hits(rp: RidgePixels, angle_deg: float) -> np.ndarray:
    """Working-copy pixels within ``HIT_PX`` of a ridge pixel whose sector is near ``angle_deg``, bool (h, w)."""
    h, w = rp.shape
    sec_angle = rp.sector.astype(np.float64) * rp.sector_deg
    near = np.abs(np.asarray(axial_difference(sec_angle, angle_deg))) < rp.sector_deg
    canvas = np.zeros((h, w), np.uint8)
    canvas[rp.row[near].astype(np.intp), rp.col[near].astype(np.intp)] = 1
    k = 2 * HIT_PX + 1
    return cv2.dilate(canvas, np.ones((k, k), np.uint8)) > 0


def _background_density(hits, region, band_ends, angle_deg, factor):
    """Density ``p`` of aligned hits in the region away from the family's own bands.

    Under H0 the aligned ridge pixels are spread evenly; their density is measured
    outside corridors of ``CORRIDOR_PX`` about the lines the bands lie on (at the family's
    angle through each band's middle, across the region). Counted with the bands, a dense
    family (spacing a few times the hit width, as slip bands in strain maps have) would
    itself set ``p`` to a large share and make its own bands look like chance. Falls back to
    the whole region when the corridors leave less than a quarter of it. The estimate is
    Laplace's rule of succession, ``(k + 1) / (n + 2)`` (from memory): where no aligned pixel
    lies away from the bands it stays a density of about one in the pixels counted, not zero.
    The corridor keeps its width on an internally enlarged image, whose bands are wider: a
    wavy band's outer pixels then count as background, which only lowers its significance
    (a corridor widened with the enlargement gave a family on a band-free grain of
    ``benchmarks/strainmap.py``).
    """
    h, w = region.shape
    d, _ = _direction_and_normal(angle_deg)
    corridor = np.zeros((h, w), np.uint8)
    reach = float(np.hypot(h, w))
    for ends in band_ends:
        pa, pb = (_to_working(np.asarray(q, float), factor) for q in ends)
        mid = 0.5 * (pa + pb)
        a, b = mid - reach * d, mid + reach * d
        cv2.line(corridor, (int(round(a[0])), int(round(a[1]))), (int(round(b[0])), int(round(b[1]))), 1,
                 thickness=2 * CORRIDOR_PX + 1)
    away = region & (corridor == 0)
    n_away = int(away.sum())
    if n_away < 0.25 * int(region.sum()):
        away, n_away = region, int(region.sum())
    return float(np.clip(((hits & away).sum() + 1.0) / (n_away + 2.0), 1e-4, 0.999))


def _band_counts(hits, region, ends_full, factor, step):
    """(samples, hits) along one band's seen segment, every ``step`` working px, inside the region."""
    h, w = region.shape
    pa, pb = (_to_working(np.asarray(p, float), factor) for p in ends_full)
    length = float(np.hypot(*(pb - pa)))
    n = max(1, int(length / step) + 1)
    t = np.linspace(0.0, 1.0, n)[:, None]
    pts = pa[None, :] * (1 - t) + pb[None, :] * t
    c = np.rint(pts[:, 0]).astype(np.intp)
    r = np.rint(pts[:, 1]).astype(np.intp)
    ok = (c >= 0) & (c < w) & (r >= 0) & (r < h)
    c, r = c[ok], r[ok]
    inside = region[r, c]
    return int(inside.sum()), int((hits[r, c] & inside).sum())


def _best_segment_tail(hits, region, ends_full, factor, step, p, direction):
    """Least log10 binomial tail of the band's seen segment or of any segment of the family's line through it.

    The NFA pays for every segment of a line (``N_lines`` counts each start and end), so
    the segment that is least likely under H0 may be chosen: a band whose fitted part is
    short (its contrast varies along it, as slip bands' does) is judged on all of the
    line through its middle at the family's angle (``direction``, unit (col, row)).
    The seen segment is tried too, so the result is never above its tail. Segments
    start and end at hits (any other end only adds misses); at most ``_MAX_ENDS``
    evenly chosen hits are tried as ends.

    Returns
    -------
    (log10_tail, samples, hits)
    """
    n0, k0 = _band_counts(hits, region, ends_full, factor, step)
    best = (float(_log10_tails(np.array([n0]), np.array([k0]), p)[0]), n0, k0)
    h, w = region.shape
    pa, pb = (_to_working(np.asarray(q, float), factor) for q in ends_full)
    mid, d = 0.5 * (pa + pb), np.asarray(direction, float)
    reach = float(np.hypot(h, w))
    t = np.arange(-reach, reach + step, step)
    c = np.rint(mid[0] + t * d[0]).astype(np.intp)
    r = np.rint(mid[1] + t * d[1]).astype(np.intp)
    ok = (c >= 0) & (c < w) & (r >= 0) & (r < h)
    c, r = c[ok], r[ok]
    inside = region[r, c]
    c, r = c[inside], r[inside]
    if len(c) < 2:
        return best
    hit = hits[r, c].astype(np.int64)
    where = np.flatnonzero(hit)
    if len(where) < 2:
        return best
    if len(where) > _MAX_ENDS:
        where = where[np.linspace(0, len(where) - 1, _MAX_ENDS).round().astype(np.intp)]
    cum = np.concatenate([[0], np.cumsum(hit)])
    i, j = np.triu_indices(len(where))
    a, b = where[i], where[j]
    n = (b - a + 1).astype(np.int64)
    k = (cum[b + 1] - cum[a]).astype(np.int64)
    tails = _log10_tails(n, k, p)
    m = int(np.argmin(tails))
    if tails[m] < best[0]:
        best = (float(tails[m]), int(n[m]), int(k[m]))
    return best


def _band_tails(hits, region, band_ends, angle_deg, factor, step, whole_lines) -> list[float]:
    """log10 binomial tail of each band (see :func:`family_log10_nfa` for ``whole_lines``)."""
    if whole_lines:
        p = _background_density(hits, region, band_ends, angle_deg, factor)
        d_fam, _ = _direction_and_normal(angle_deg)
        return [_best_segment_tail(hits, region, ends, factor, step, p, d_fam)[0] for ends in band_ends]
    p = float(np.clip((hits & region).sum() / int(region.sum()), 1e-4, 0.999))
    counts = np.array([_band_counts(hits, region, ends, factor, step) for ends in band_ends], np.int64).reshape(-1, 2)
    return [float(t) for t in _log10_tails(counts[:, 0], counts[:, 1], p)]


def family_log10_nfa(rp: RidgePixels, region: np.ndarray, band_ends: Sequence, angle_deg: float, factor: int = 1,
                     step: float = 2.0, min_bands: int = 1, *, whole_lines: bool = False) -> tuple[float, list[float]]:
    """Number of false alarms (log10) of a family of bands, and of each band.

    Parameters
    ----------
    rp : RidgePixels
        Ridge pixels of the family's polarity (working copy; see
        :func:`tracefit.image.ridges.ridge_pixels`).
    region : ndarray of bool, (h, w)
        Analysed pixels of the working copy.
    band_ends : sequence of ((col, row), (col, row))
        End points of each band's seen segment, full-resolution pixels.
    angle_deg : float
        Family angle, image-frame axial degrees.
    factor : int
        Reduction factor of the working copy (full = (working + 0.5) * factor - 0.5).
    step : float
        Sample spacing along the bands, working pixels (> 0).
    min_bands : int
        Fewest bands the family is made of (the best ``m >= min_bands`` bands count).
    whole_lines : bool
        Judge each band on the least likely segment of the family's line through it
        (not only its seen part), against the density of aligned pixels away from the
        bands (:func:`_background_density`). For families found by projection
        (:mod:`tracefit.image.projection`), whose bands are located from their pixels
        alone; the default keeps the test of the band-fit families.

    Returns
    -------
    log10_nfa : float
        log10 of the family's number of false alarms (``inf`` when it has fewer than
        ``min_bands`` bands or the region holds no aligned ridge pixel).
    band_log10_nfa : list of float
        Each band's own log10 NFA as a single line segment, in the order given.

    Raises
    ------
    TracefitInputError
        ``step`` not positive.

    Examples
    --------
    Three long, fully covered vertical lines among sparse aligned pixels are far from chance:

    >>> import numpy as np
    >>> from tracefit.image.ridges import RidgePixels
    >>> rows = np.tile(np.arange(100), 3).astype(np.int16)
    >>> cols = np.repeat([20, 50, 80], 100).astype(np.int16)
    >>> rp = RidgePixels(cols, rows, np.ones(300, np.float32), -1, (100, 100), np.full(300, 6, np.int16))
    >>> ends = [((c, 0.0), (c, 99.0)) for c in (20.0, 50.0, 80.0)]
    >>> nfa, per_band = family_log10_nfa(rp, np.ones((100, 100), bool), ends, 90.0)
    >>> nfa < -20, len(per_band)
    (True, 3)
    """
    if not step > 0:
        raise TracefitInputError(f"step must be > 0 working pixels, got {step!r}")
    hits = _aligned_hits(rp, angle_deg)
    n_region = int(region.sum())
    if n_region == 0 or len(band_ends) < min_bands:
        return math.inf, [math.inf] * len(band_ends)
    # segments per direction: every offset across and every start and end along, in samples
    n_side = max(2.0, math.hypot(*region.shape) / step)
    log_lines = 3.0 * math.log10(n_side)
    per_band = [log_lines + t for t in _band_tails(hits, region, band_ends, angle_deg, factor, step, whole_lines)]
    if not per_band:
        return math.inf, per_band
    log_angles = math.log10(2 * 180.0 / ANGLE_STEP_DEG)  # directions and the two polarities
    best = math.inf
    total = 0.0
    for m, v in enumerate(sorted(per_band), start=1):
        total += v
        if m >= min_bands:
            best = min(best, log_angles + total - math.log10(math.factorial(m)))
    return float(best), per_band
