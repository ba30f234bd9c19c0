"""Populations with known truth: grains of random orientation whose active systems are drawn from
the CRSS model (:mod:`tracefit.stats.crss`), and the Schmid-factor distribution of a random texture.

Random orientations are uniform on SO(3) (``scipy.spatial.transform.Rotation.random``).
"""

from __future__ import annotations

import warnings
from typing import Mapping

import numpy as np

from tracefit.errors import TracefitInputError
from tracefit.stats.data import GrainCase, Observation

__all__ = ["random_orientations", "simulate_population", "random_texture_schmid", "sachs_factor"]


def random_orientations(n: int, seed: int = 0) -> np.ndarray:
    """``n`` orientation matrices uniform on SO(3).

    Parameters
    ----------
    n : int
    seed : int

    Returns
    -------
    ndarray (n, 3, 3)

    Examples
    --------
    >>> g = random_orientations(4, seed=1)
    >>> g.shape, bool(np.allclose(g @ g.transpose(0, 2, 1), np.eye(3)))
    ((4, 3, 3), True)
    """
    from scipy.spatial.transform import Rotation

    if int(n) < 1:
        raise TracefitInputError(f"n must be at least 1, got {n}")
    return Rotation.random(int(n), random_state=int(seed)).as_matrix().reshape(-1, 3, 3)


def _systems_and_ratios(lattice, ratios: Mapping[str, float]):
    from tracefit.crystal import catalogue

    systems, r_of = [], {}
    for key, r in ratios.items():
        if not float(r) > 0:
            raise TracefitInputError(f"the ratio of {key!r} must be positive, got {r!r}")
        fam = catalogue(lattice, families=[key])
        for s in fam:
            if s not in systems:
                systems.append(s)
            r_of[s.name] = float(r)
    return systems, r_of


def simulate_population(ratios: Mapping[str, float], n_grains: int = 200, *, lattice: str = "hcp",
                        c_over_a: float | None = 1.587, load: str = "y", sense: str = "tension",
                        scale: float = 0.03, n_active: int = 1, seed: int = 0) -> list[GrainCase]:
    """Grains of random orientation under a uniaxial load, each with its active systems drawn from
    the CRSS model with known ratios (each drawn system shows its plane, identified with certainty).

    Parameters
    ----------
    ratios : mapping
        Family (label, system name or trade name, as the ``families`` filter reads it) -> its CRSS
        relative to any common unit, e.g. ``{"basal": 1.5, "prismatic": 1, "pyramidal-ca-2": 3}``.
    n_grains : int
    lattice : str
        Lattice preset name.
    c_over_a : float, optional
        For hcp.
    load, sense : str
        The uniaxial load axis (image frame) and its sense.
    scale : float
        The scatter ``beta`` of the model, in Schmid-factor units.
    n_active : int
        Families drawn per grain (without replacement of planes).
    seed : int

    Returns
    -------
    list of GrainCase
        With ``image`` ``"simulated"`` and grain ids 1..n.

    Examples
    --------
    >>> cases = simulate_population({"basal": 1.5, "prismatic": 1.0, "pyramidal-ca-2": 3.0}, 50, seed=3)
    >>> len(cases), len(cases[0].systems), len(cases[0].observations)
    (50, 12, 1)
    """
    from tracefit.crystal import lattice_preset, to_euler
    from tracefit.predict import Load, reported_drive, resolved_drive

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lat = lattice_preset(lattice, c_over_a)
    systems, r_of = _systems_and_ratios(lat, ratios)
    g = random_orientations(n_grains, seed)
    rng = np.random.default_rng(seed + 7919)
    drive = reported_drive(resolved_drive(Load.axis(load, sense), g, [s.normal for s in systems],
                                          [s.dir_unit for s in systems]), [s.mode for s in systems])
    r = np.array([r_of[s.name] for s in systems])
    normals = np.array([s.normal for s in systems])
    same_plane = np.abs(normals @ normals.T) > 1 - 1e-6
    key = lat.name + (f" c/a={lat.c_over_a:.4g}" if lat.is_hexagonal else "")
    euler = to_euler(g)
    cases = []
    for i in range(len(g)):
        case = GrainCase("simulated", i + 1, key, systems, drive[i], "Schmid factor", euler[i].tolist())
        u = drive[i] / (r * scale)
        avail = np.ones(len(systems), bool)
        for k in range(int(n_active)):
            if not avail.any():
                break
            p = np.where(avail, np.exp(u - u[avail].max()), 0.0)
            s = int(rng.choice(len(systems), p=p / p.sum()))
            on = same_plane[s]
            best = int(np.flatnonzero(on)[np.argmax(drive[i][on])])
            case.observations.append(Observation("simulated", f"F{k + 1}", 1.0, on.astype(float), best, 1.0, True,
                                                 list(systems[s].plane), 0.0, 0.5))
            avail &= ~on
        cases.append(case)
    return cases


def random_texture_schmid(lattice: str = "fcc", families=None, modes=("slip",), n: int = 100_000, seed: int = 0,
                          c_over_a: float | None = None) -> np.ndarray:
    """The largest Schmid factor of each of ``n`` randomly oriented grains under uniaxial tension.

    Parameters
    ----------
    lattice : str
        Lattice preset name.
    families, modes
        Which systems (as :func:`tracefit.crystal.catalogue` reads them).
    n : int
        Grains.
    seed : int
    c_over_a : float, optional

    Returns
    -------
    ndarray (n,)
        ``m_max`` per grain (slip: ``|m|``; twins: the positive drive).

    Examples
    --------
    >>> m = random_texture_schmid("fcc", n=2000, seed=2)
    >>> bool(0.27 < m.min() and m.max() <= 0.5), round(float(m.mean()), 2)
    (True, 0.45)
    """
    from tracefit.crystal import catalogue, lattice_preset
    from tracefit.predict import Load, reported_drive, resolved_drive

    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        lat = lattice_preset(lattice, c_over_a)
    systems = catalogue(lat, modes=list(modes), families=families)
    out = []
    for start in range(0, int(n), 20_000):  # in chunks: (n, S) arrays stay small
        g = random_orientations(min(20_000, int(n) - start), seed + start)
        d = reported_drive(resolved_drive(Load.axis("z"), g, [s.normal for s in systems],
                                          [s.dir_unit for s in systems]), [s.mode for s in systems])
        out.append(d.max(axis=1))
    return np.concatenate(out)


def sachs_factor(m_max: np.ndarray) -> float:
    """The Sachs factor: the mean of ``1 / m_max`` over the grains (Sachs 1928, Z. VDI 72, 734; from memory).

    Parameters
    ----------
    m_max : array_like
        Largest Schmid factor per grain (:func:`random_texture_schmid`).

    Returns
    -------
    float

    Examples
    --------
    >>> sachs_factor([0.5, 0.25])
    3.0
    """
    m = np.asarray(m_max, float)
    if m.size == 0 or np.any(m <= 0):
        raise TracefitInputError("m_max must be positive Schmid factors")
    return float(np.mean(1.0 / m))
