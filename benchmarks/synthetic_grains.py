"""Benchmark: band families per grain on synthetic micrographs with a grain map.

Not part of the test suite; prints figures. Twelve 384 x 384 micrographs drawn by
``tracefit.image.render_micrograph`` with 12-30 Voronoi grains each; every grain holds one or
two families of dark bands (spacing 8-16 px, width 1.5-3 px, depth 20-40 %, a second family
25-155 deg from the first). ``tracefit.image.detect_grains`` runs on every grain of the label
image (``min_pixels`` 300); grains of at least 1500 px are scored. A drawn family counts as
found when a detected family lies within 2 deg; a detected family further than 2 deg from
every drawn one of its grain is spurious.

Usage::

    NUMBA_CACHE_DIR=/tmp/nb_x python benchmarks/synthetic_grains.py [--misses] [--guided SIGMA]

``--guided SIGMA`` hands the detector simulated predicted traces per grain (what ``tracefit
identify`` does with each grain's orientation): the drawn families' angles off by N(0, SIGMA)
deg plus random angles for the planes that did not slip, four in all (fcc's {111}).

These figures support, never replace, qualified investigation.
"""

from __future__ import annotations

import argparse
import time

import numpy as np

from tracefit.conventions import axial_difference
from tracefit.image import BandFamilySpec, detect_grains, render_micrograph, voronoi_labels

MIN_SCORED_PX = 1500


def _maps(seed: int = 7, n: int = 12):
    """(image, labels, families per grain) of each micrograph."""
    rng = np.random.default_rng(seed)
    for i in range(n):
        shape = (384, 384)
        labels = voronoi_labels(shape, int(rng.integers(12, 30)), seed=100 + i) + 1
        fams = {}
        for g in np.unique(labels):
            a0 = rng.uniform(0, 180)
            angles = [a0] + ([(a0 + rng.uniform(25, 155)) % 180] if int(rng.integers(1, 3)) == 2 else [])
            fams[int(g)] = [BandFamilySpec(float(a), spacing_px=float(rng.uniform(8, 16)),
                                           width_px=float(rng.uniform(1.5, 3)), contrast=float(rng.uniform(-0.4, -0.2)))
                            for a in angles]
        img, _ = render_micrograph(shape, labels=labels, grain_families=fams, noise_sigma=0.02, seed=i)
        yield i, img, labels, fams


def _traces(i: int, g: int, drawn, sigma: float, n: int = 4) -> list[float]:
    """Simulated predicted traces of one grain (as benchmarks/strainmap.py draws them)."""
    rng = np.random.default_rng([i, g, 7])
    tr = [float(t + rng.normal(0.0, sigma)) % 180.0 for t in drawn][:n]
    return [float(t) for t in rng.permutation(tr + list(rng.uniform(0.0, 180.0, n - len(tr))))]


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--misses", action="store_true", help="list the missed and spurious families")
    ap.add_argument("--guided", type=float, default=None, metavar="SIGMA",
                    help="give the detector simulated predicted traces, four per grain: the drawn families' angles "
                         "off by N(0, SIGMA) deg and random angles for the planes that did not slip")
    a = ap.parse_args(argv)
    total = found = spurious = 0
    errors: list[float] = []
    cpu = 0.0
    for i, img, labels, fams in _maps():
        t0 = time.process_time()
        traces = None if a.guided is None else {g: _traces(i, g, [s.angle_deg for s in fs], a.guided)
                                                for g, fs in fams.items()}
        res = detect_grains(img, labels, min_pixels=300, predicted_traces=traces)
        cpu += time.process_time() - t0
        for g, r in res.items():
            if (labels == g).sum() < MIN_SCORED_PX:
                continue
            drawn = [s.angle_deg for s in fams.get(int(g), [])]
            got = [f.angle_deg for f in r.families]
            for t in drawn:
                total += 1
                d = min((abs(axial_difference(x, t)) for x in got), default=99.0)
                if d <= 2.0:
                    found += 1
                    errors.append(d)
                elif a.misses:
                    print(f"  miss  map {i} grain {g}: drawn {t:.1f}, found {[round(x, 1) for x in got]} ({r.verdict})")
            for x in got:
                if min(abs(axial_difference(x, t)) for t in drawn) > 2.0:
                    spurious += 1
                    if a.misses:
                        print(f"  extra map {i} grain {g}: {x:.1f} (drawn {[round(t, 1) for t in drawn]})")
    print(f"synthetic grain maps: {total} drawn families in grains of >= {MIN_SCORED_PX} px; "
          f"found within 2 deg {found} (recall {found / total:.3f}); spurious {spurious}; "
          f"median angle error {np.median(errors):.4f} deg; detector CPU {cpu:.1f} s")


if __name__ == "__main__":
    main()
