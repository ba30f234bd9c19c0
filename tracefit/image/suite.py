"""The standard synthetic suite: the reference images of the detector's tests and benchmarks.

:func:`standard_suite` draws ``n`` micrographs with :func:`tracefit.image.render_micrograph`,
each with 1-3 band families and the nuisances of real images at random, all determined
by one seed (``benchmarks/detect.py`` scores the detector on it).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Iterator

import numpy as np

from tracefit.conventions import axial_difference
from tracefit.image.synthetic import BandFamilySpec, SyntheticTruth, render_micrograph

__all__ = ["SuiteCase", "standard_suite"]


@dataclass
class SuiteCase:
    """One image of the standard suite.

    Parameters
    ----------
    index : int
        Position in the suite, from 0.
    seed : int
        The seed :func:`render_micrograph` was called with.
    params : dict
        Its other keywords (``shape``, ``families``, noise, blur, ...).
    image : ndarray of uint8, (rows, columns)
        The rendered image.
    truth : SyntheticTruth
        What was drawn.

    Examples
    --------
    >>> case = next(standard_suite(1, seed=3, shape=(64, 64)))
    >>> case.index, case.image.shape
    (0, (64, 64))
    """

    index: int
    seed: int
    params: dict
    image: np.ndarray
    truth: SyntheticTruth


def _suite_params(rng, shape):
    n_fam = int(rng.integers(1, 4))
    angles: list[float] = []
    while len(angles) < n_fam:
        a = float(rng.uniform(0, 180))
        if all(abs(axial_difference(a, b)) >= 15 for b in angles):
            angles.append(round(a, 3))
    fams = []
    for a in angles:
        width = float(rng.uniform(2.0, 5.0))
        fams.append(
            BandFamilySpec(
                angle_deg=a,
                spacing_px=float(rng.uniform(max(14.0, 4 * width), 45.0)),
                width_px=width,
                contrast=float(rng.choice([-1, 1]) * rng.uniform(0.2, 0.4)),
                spacing_jitter=float(rng.uniform(0.0, 0.25)),
            )
        )
    return dict(
        shape=shape,
        families=fams,
        noise_sigma=float(rng.uniform(0.01, 0.04)),
        blur_sigma=float(rng.choice([0.0, rng.uniform(0.5, 1.5)])),
        illumination=float(rng.uniform(0.0, 0.4)),
        n_scratches=int(rng.integers(0, 3)),
        databar=bool(rng.random() < 0.4),
        jpeg_quality=int(rng.integers(70, 96)) if rng.random() < 0.4 else None,
        bit_depth=8,
    )


def standard_suite(n: int = 200, seed: int = 2026, shape: tuple[int, int] = (512, 512)) -> Iterator[SuiteCase]:
    """The standard synthetic suite: ``n`` images with 1-3 band families, moderate noise.

    Each image has random family angles (at least 15 deg apart), spacings 14-45 px,
    widths 2-5 px, dark or bright bands with contrast 20-40 %, noise sigma 1-4 % of full
    scale, sometimes blur, an illumination gradient, 0-2 scratches, a data bar (40 %)
    and JPEG compression (40 %, quality 70-95).

    Parameters
    ----------
    n : int
        Number of images.
    seed : int
        Suite seed; the same (n, seed, shape) gives the same images.
    shape : (int, int)
        Image (rows, columns).

    Yields
    ------
    SuiteCase
        Image (uint8, ``shape``), truth and the render keywords of each case.

    Examples
    --------
    >>> cases = list(standard_suite(3, seed=9, shape=(64, 64)))
    >>> [c.index for c in cases], all(1 <= len(c.truth.families) <= 3 for c in cases)
    ([0, 1, 2], True)
    """
    rng = np.random.default_rng(seed)
    for i in range(int(n)):
        s = int(rng.integers(2**31))
        params = _suite_params(np.random.default_rng(s), shape)
        img, truth = render_micrograph(**params, seed=s)
        yield SuiteCase(i, s, params, img, truth)
