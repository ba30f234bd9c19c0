"""Grains of an orientation map: misorientation between neighbours, connected regions, means.

Two neighbouring points (4-connectivity) belong to one grain when their misorientation under
the phase's proper rotations is below a threshold; grains are the connected regions of that
graph (common practice, no source). Regions smaller than a minimum number of points are not
kept (label -1), like unindexed points.

A grain's mean orientation is the normalised sum of its points' quaternions, each first
replaced by the symmetric equivalent nearest a reference (the grain's first point, then the
mean itself), the usual small-spread mean. Its spread is the root-mean-square misorientation
angle of its points from the mean, in degrees.

Quaternions follow docs/conventions.md (scalar first, P = +1): ``q(S g) = q(S) q(g)``.
Everything is vectorised over points, in chunks that bound the memory.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from tracefit.crystal import Lattice, proper_rotations, to_quaternion
from tracefit.errors import TracefitInputError

__all__ = ["GrainSegmentation", "segment_grains", "neighbour_misorientation_deg", "symmetry_quaternions",
           "mean_orientations", "DEFAULT_MIN_GRAIN_POINTS"]

DEFAULT_MIN_GRAIN_POINTS = 10  # a few scan steps across; smaller regions are mostly noise (common practice, no source)
_CHUNK = 200_000  # points per vectorised block (x symmetry count x 4 floats)


@dataclass
class GrainSegmentation:
    """Grains found on a map grid.

    Parameters
    ----------
    labels : ndarray of int64, shape (rows, cols)
        Grain id 1..n of each map point; -1 for points in no grain (unindexed, other phases,
        regions under the minimum size).
    mean_quaternions : ndarray, shape (n, 4)
        Mean orientation of grain ``i + 1`` (quaternion of g, q0 >= 0).
    spread_deg : ndarray, shape (n,)
        Root-mean-square misorientation of a grain's points from its mean, degrees.
    n_points : ndarray of int, shape (n,)
        Map points per grain.
    n_dropped_regions : int
        Connected regions not kept for being smaller than the minimum.

    Examples
    --------
    >>> s = GrainSegmentation(np.array([[1, -1]]), np.array([[1.0, 0, 0, 0]]), np.zeros(1), np.array([1]))
    >>> s.n_grains
    1
    """

    labels: np.ndarray
    mean_quaternions: np.ndarray
    spread_deg: np.ndarray
    n_points: np.ndarray
    n_dropped_regions: int = 0

    @property
    def n_grains(self) -> int:
        """Number of grains kept."""
        return int(len(self.n_points))


def symmetry_quaternions(lattice: Lattice) -> np.ndarray:
    """Quaternions of the lattice's proper rotations, shape (K, 4), identity first.

    Examples
    --------
    >>> from tracefit.crystal import Lattice
    >>> symmetry_quaternions(Lattice.fcc()).shape
    (24, 4)
    """
    return to_quaternion(np.asarray(proper_rotations(lattice), float))


def _qmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Hamilton product a b of quaternion arrays (..., 4), broadcasting."""
    a0, a1, a2, a3 = np.moveaxis(a, -1, 0)
    b0, b1, b2, b3 = np.moveaxis(b, -1, 0)
    return np.stack([
        a0 * b0 - a1 * b1 - a2 * b2 - a3 * b3,
        a0 * b1 + a1 * b0 + a2 * b3 - a3 * b2,
        a0 * b2 - a1 * b3 + a2 * b0 + a3 * b1,
        a0 * b3 + a1 * b2 - a2 * b1 + a3 * b0,
    ], axis=-1)


def _conj(q: np.ndarray) -> np.ndarray:
    return q * np.array([1.0, -1.0, -1.0, -1.0])


def _angle_deg(w: np.ndarray) -> np.ndarray:
    """Rotation angle (deg) from |scalar part| of a unit quaternion."""
    return np.degrees(2.0 * np.arccos(np.clip(w, 0.0, 1.0)))


def neighbour_misorientation_deg(qa: np.ndarray, qb: np.ndarray, sym_q: np.ndarray) -> np.ndarray:
    """Misorientation angles between orientation pairs under a symmetry group.

    The angle of ``S g_b g_a^T`` minimised over the group's rotations S, as
    :meth:`tracefit.crystal.Orientation.misorientation`; vectorised over pairs.

    Parameters
    ----------
    qa, qb : ndarray, shape (N, 4)
        Quaternions of g (sample -> crystal) of the two points of each pair.
    sym_q : ndarray, shape (K, 4)
        Quaternions of the proper rotations (:func:`symmetry_quaternions`).

    Returns
    -------
    ndarray, shape (N,)
        Angles in degrees, 0 to 180 (62.8 at most for cubic symmetry).

    Examples
    --------
    >>> from tracefit.crystal import Lattice, from_euler
    >>> qa = to_quaternion(from_euler([[0, 0, 0]])); qb = to_quaternion(from_euler([[100, 0, 0]]))
    >>> np.round(neighbour_misorientation_deg(qa, qb, symmetry_quaternions(Lattice.fcc())), 6).tolist()
    [10.0]
    """
    qa = np.asarray(qa, float)
    qb = np.asarray(qb, float)
    # scalar part of S d is s0 d0 - s . d, so one matrix product covers the whole group
    cols = (sym_q * np.array([1.0, -1.0, -1.0, -1.0])).T  # (4, K)
    out = np.empty(len(qa))
    for s in range(0, len(qa), _CHUNK):
        d = _qmul(qb[s:s + _CHUNK], _conj(qa[s:s + _CHUNK]))
        out[s:s + _CHUNK] = _angle_deg(np.max(np.abs(d @ cols), axis=1))
    return out


def _align(q: np.ndarray, ref: np.ndarray, sym_q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Symmetric equivalents ``S q`` nearest ``ref``, signed to a positive dot product; and their |dot|."""
    out = np.empty_like(q)
    dot = np.empty(len(q))
    for s in range(0, len(q), _CHUNK):
        qc, rc = q[s:s + _CHUNK], ref[s:s + _CHUNK]
        eq = _qmul(sym_q[None, :, :], qc[:, None, :])  # (n, K, 4)
        d = np.einsum("nki,ni->nk", eq, rc)
        k = np.argmax(np.abs(d), axis=1)
        i = np.arange(len(qc))
        sign = np.where(d[i, k] < 0, -1.0, 1.0)
        out[s:s + _CHUNK] = eq[i, k] * sign[:, None]
        dot[s:s + _CHUNK] = np.abs(d[i, k])
    return out, dot


def mean_orientations(q: np.ndarray, grain: np.ndarray, n: int, sym_q: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Symmetry-aware mean orientation and spread of each grain.

    Parameters
    ----------
    q : ndarray, shape (N, 4)
        Quaternions of the points.
    grain : ndarray of int, shape (N,)
        Grain index 0..n-1 of each point.
    n : int
        Number of grains.
    sym_q : ndarray, shape (K, 4)
        Quaternions of the proper rotations.

    Returns
    -------
    means : ndarray, shape (n, 4)
        Unit quaternions, q0 >= 0.
    spread_deg : ndarray, shape (n,)
        Root-mean-square misorientation angle from the mean, degrees.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, from_euler
    >>> # 1 and 91 deg about z are 1 deg apart for a cube: the mean is 0 or 90 deg, not 46
    >>> q = to_quaternion(from_euler([[1, 0, 0], [91, 0, 0]]))
    >>> m, s = mean_orientations(q, np.array([0, 0]), 1, symmetry_quaternions(Lattice.fcc()))
    >>> round(float(s[0]), 3), round(float(np.degrees(2 * np.arctan2(abs(m[0, 3]), m[0, 0]))) % 90, 3)
    (0.0, 1.0)
    """
    first = np.full(n, len(grain), dtype=np.int64)
    np.minimum.at(first, grain, np.arange(len(grain)))
    ref = q[first]
    for _ in range(2):  # reference: first point, then the mean (robust to an odd first point)
        aligned, _ = _align(q, ref[grain], sym_q)
        sums = np.stack([np.bincount(grain, aligned[:, j], minlength=n) for j in range(4)], axis=1)
        ref = sums / np.linalg.norm(sums, axis=1, keepdims=True)
    ref *= np.where(ref[:, :1] < 0, -1.0, 1.0)
    _, dot = _align(q, ref[grain], sym_q)
    ang = _angle_deg(dot)
    counts = np.bincount(grain, minlength=n)
    spread = np.sqrt(np.bincount(grain, ang ** 2, minlength=n) / np.maximum(counts, 1))
    return ref, spread


def _components(q: np.ndarray, valid: np.ndarray, sym_q: np.ndarray, threshold_deg: float) -> np.ndarray:
    """Connected-region index of every grid point (unindexed points are regions of their own)."""
    from scipy.sparse import coo_matrix
    from scipy.sparse.csgraph import connected_components

    rows, cols = valid.shape
    idx = np.arange(rows * cols).reshape(rows, cols)
    qf = q.reshape(-1, 4)
    heads, tails = [], []
    for a, b in ((idx[:, :-1], idx[:, 1:]), (idx[:-1, :], idx[1:, :])):  # right and down neighbours
        a, b = a.ravel(), b.ravel()
        both = valid.ravel()[a] & valid.ravel()[b]
        a, b = a[both], b[both]
        keep = neighbour_misorientation_deg(qf[a], qf[b], sym_q) < threshold_deg
        heads.append(a[keep])
        tails.append(b[keep])
    h, t = np.concatenate(heads), np.concatenate(tails)
    graph = coo_matrix((np.ones(len(h), np.int8), (h, t)), shape=(rows * cols, rows * cols))
    _, comp = connected_components(graph, directed=False)
    return comp


def segment_grains(quaternions: np.ndarray, valid: np.ndarray, lattice: Lattice, threshold_deg: float = 5.0,
                   min_grain_points: int = DEFAULT_MIN_GRAIN_POINTS) -> GrainSegmentation:
    """Segment a map grid into grains by neighbour misorientation, with mean orientations.

    Parameters
    ----------
    quaternions : ndarray, shape (rows, cols, 4)
        Quaternion of g (sample -> crystal) per point.
    valid : ndarray of bool, shape (rows, cols)
        Points to use (indexed, of the phase).
    lattice : tracefit.crystal.Lattice
        Its Laue class gives the symmetry.
    threshold_deg : float
        Neighbours misoriented by less than this are one grain (degrees, > 0).
    min_grain_points : int
        Regions with fewer points are not kept (>= 1).

    Returns
    -------
    GrainSegmentation
        Grain ids 1..n in raster order of each grain's first point.

    Raises
    ------
    TracefitInputError
        Bad shapes, a threshold outside (0, 180) deg, min_grain_points < 1, or no valid point.

    Examples
    --------
    >>> from tracefit.crystal import Lattice, from_euler
    >>> e = np.zeros((4, 6, 3)); e[:, 3:, 0] = 30.0       # two grains, 30 deg apart about z
    >>> q = to_quaternion(from_euler(e.reshape(-1, 3))).reshape(4, 6, 4)
    >>> s = segment_grains(q, np.ones((4, 6), bool), Lattice.fcc(), min_grain_points=3)
    >>> s.labels[0].tolist(), s.n_points.tolist()
    ([1, 1, 1, 2, 2, 2], [12, 12])
    """
    q = np.asarray(quaternions, float)
    valid = np.asarray(valid, bool)
    if valid.ndim != 2 or q.shape != valid.shape + (4,):
        raise TracefitInputError(f"quaternions must have shape (rows, cols, 4) matching valid (rows, cols); got {q.shape} and {valid.shape}")
    if not (0.0 < float(threshold_deg) < 180.0):
        raise TracefitInputError(f"threshold_deg must lie between 0 and 180 deg, got {threshold_deg!r}")
    if int(min_grain_points) != min_grain_points or min_grain_points < 1:
        raise TracefitInputError(f"min_grain_points must be a whole number >= 1, got {min_grain_points!r}")
    if not valid.any():
        raise TracefitInputError("the orientation map has no indexed points of the phase")
    sym_q = symmetry_quaternions(lattice)
    comp = _components(q, valid, sym_q, float(threshold_deg))
    vflat = valid.ravel()
    sizes = np.bincount(comp[vflat], minlength=comp.max() + 1)
    keep = sizes >= min_grain_points
    n_dropped = int(np.count_nonzero((sizes > 0) & ~keep))
    # renumber kept regions 1..n in raster order of their first point
    order = np.unique(comp[vflat], return_index=True)[1]
    first_seen = comp[vflat][np.sort(order)]
    kept = first_seen[keep[first_seen]]
    new_id = np.full(comp.max() + 1, -1, np.int64)
    new_id[kept] = np.arange(1, len(kept) + 1)
    labels = np.where(vflat, new_id[comp], -1).reshape(valid.shape)
    n = len(kept)
    if n == 0:
        return GrainSegmentation(labels, np.zeros((0, 4)), np.zeros(0), np.zeros(0, np.int64), n_dropped)
    inside = labels.ravel() >= 0
    grain = labels.ravel()[inside] - 1
    means, spread = mean_orientations(q.reshape(-1, 4)[inside], grain, n, sym_q)
    return GrainSegmentation(labels, means, spread, np.bincount(grain, minlength=n), n_dropped)
