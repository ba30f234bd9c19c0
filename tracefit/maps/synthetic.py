"""Synthetic orientation maps of known grains, for tests, benchmarks, examples and the demo.

A Voronoi tessellation gives the grains; each grain gets one orientation, optionally scattered
point by point by small random rotations. :func:`synthetic_crystal_map` wraps the result as an
``orix.crystal_map.CrystalMap`` so that orix's own writers (``orix.io.save``) can put it in a
file.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike

from tracefit.crystal import from_euler, to_quaternion
from tracefit.errors import TracefitInputError

__all__ = ["voronoi_labels", "grain_quaternions", "synthetic_crystal_map"]


def voronoi_labels(shape: tuple[int, int], n_grains: int, seed: int = 0) -> np.ndarray:
    """Grain ids 0..n-1 of a random Voronoi tessellation of a grid.

    Parameters
    ----------
    shape : (int, int)
        Grid (rows, cols).
    n_grains : int
        Number of seeds (>= 1).
    seed : int
        Random seed.

    Returns
    -------
    ndarray of int64, shape (rows, cols)

    Examples
    --------
    >>> lab = voronoi_labels((20, 30), 4, seed=1)
    >>> lab.shape, sorted(np.unique(lab).tolist())
    ((20, 30), [0, 1, 2, 3])
    """
    from scipy.spatial import cKDTree

    if n_grains < 1:
        raise TracefitInputError(f"n_grains must be >= 1, got {n_grains!r}")
    rng = np.random.default_rng(seed)
    rows, cols = shape
    seeds = rng.uniform([0, 0], [rows, cols], size=(n_grains, 2))
    rr, cc = np.mgrid[0:rows, 0:cols]
    _, lab = cKDTree(seeds).query(np.column_stack([rr.ravel(), cc.ravel()]))
    return lab.reshape(rows, cols).astype(np.int64)


def grain_quaternions(labels: np.ndarray, euler_deg: ArrayLike, noise_deg: float = 0.0, seed: int = 0) -> np.ndarray:
    """Quaternion of g at every grid point: its grain's orientation, scattered by small rotations.

    Parameters
    ----------
    labels : ndarray of int, shape (rows, cols)
        Grain index 0..n-1 per point.
    euler_deg : array_like, shape (n, 3)
        Bunge Euler angles (degrees) of each grain.
    noise_deg : float
        Each point is turned by a rotation about a random axis through an angle drawn from a
        normal distribution of this standard deviation (degrees).
    seed : int
        Random seed.

    Returns
    -------
    ndarray, shape (rows, cols, 4)
        Unit quaternions (scalar first, q0 >= 0).

    Examples
    --------
    >>> q = grain_quaternions(np.array([[0, 1]]), [[0, 0, 0], [90, 0, 0]])
    >>> (np.round(q[0, 1], 4) + 0.0).tolist()
    [0.7071, 0.0, 0.0, -0.7071]
    """
    lab = np.asarray(labels)
    qg = to_quaternion(from_euler(np.atleast_2d(np.asarray(euler_deg, float)), warn_radians=False))
    q = qg[lab.ravel()]
    if noise_deg > 0:
        rng = np.random.default_rng(seed)
        axis = rng.normal(size=(len(q), 3))
        axis /= np.linalg.norm(axis, axis=1, keepdims=True)
        half = np.radians(rng.normal(0.0, noise_deg, size=len(q))) / 2
        dq = np.column_stack([np.cos(half), axis * np.sin(half)[:, None]])
        from tracefit.maps.segment import _qmul

        q = _qmul(dq, q)
    q = q * np.where(q[:, :1] < 0, -1.0, 1.0)
    return q.reshape(lab.shape + (4,))


def synthetic_crystal_map(quaternions: np.ndarray, valid: np.ndarray | None = None, step: float = 1.0,
                          phase_name: str = "ni", point_group: str = "m-3m",
                          cell: tuple = (3.52, 3.52, 3.52, 90, 90, 90)):
    """An ``orix.crystal_map.CrystalMap`` of one phase from quaternions on a grid.

    Parameters
    ----------
    quaternions : ndarray, shape (rows, cols, 4)
        Quaternion of g (sample -> crystal) per point.
    valid : ndarray of bool, shape (rows, cols), optional
        Indexed points (others are written as not indexed). Default: all.
    step : float
        Grid step in micrometres (x and y).
    phase_name, point_group : str
        The phase's name and point group (orix notation, e.g. ``"m-3m"``, ``"6/mmm"``).
    cell : tuple of 6 float
        a, b, c (angstrom), alpha, beta, gamma (degrees).

    Returns
    -------
    orix.crystal_map.CrystalMap
        With an ``iq`` property of ones and a ``ci`` property (1 indexed, -1 not), so that
        the .ang writer marks unindexed points as such.

    Examples
    --------
    >>> q = np.zeros((2, 3, 4)); q[..., 0] = 1.0
    >>> xm = synthetic_crystal_map(q, step=0.5)
    >>> xm.shape, float(xm.dx)
    ((2, 3), 0.5)
    """
    from tracefit.maps.orix_import import import_orix

    import_orix()
    from diffpy.structure import Lattice as DiffpyLattice
    from diffpy.structure import Structure
    from orix.crystal_map import CrystalMap, PhaseList
    from orix.quaternion import Rotation

    q = np.asarray(quaternions, float)
    rows, cols = q.shape[:2]
    ok = np.ones((rows, cols), bool) if valid is None else np.asarray(valid, bool)
    rr, cc = np.mgrid[0:rows, 0:cols]
    phases = PhaseList(names=[phase_name], point_groups=[point_group],
                       structures=[Structure(title=phase_name, lattice=DiffpyLattice(*cell))])
    return CrystalMap(
        rotations=Rotation(q.reshape(-1, 4)), phase_id=np.where(ok.ravel(), 0, -1),
        x=cc.ravel() * float(step), y=rr.ravel() * float(step), phase_list=phases,
        prop={"iq": np.ones(rows * cols), "ci": np.where(ok.ravel(), 1.0, -1.0)}, scan_unit="um",
    )
