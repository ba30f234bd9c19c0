"""Speed of grain segmentation on a large orientation map (target: 1000 x 1000 points under 30 s).

Builds a synthetic 1000 x 1000 point cubic map (Voronoi grains, random orientations, 0.3 deg
point scatter, 2 % unindexed points), then times :func:`tracefit.maps.segment_grains`
(neighbour misorientations, connected regions, symmetry-aware means and spreads). Prints the
time and the grains found; no pass/fail.

    python benchmarks/segment.py [SIZE] [N_GRAINS]
"""

from __future__ import annotations

import os
import sys
import time

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):  # one core, as the target says
    os.environ.setdefault(_var, "1")

import numpy as np  # noqa: E402

from tracefit.crystal import Lattice  # noqa: E402
from tracefit.maps import grain_quaternions, segment_grains, voronoi_labels  # noqa: E402


def main(size: int = 1000, n_grains: int = 400) -> None:
    rng = np.random.default_rng(7)
    lab = voronoi_labels((size, size), n_grains, seed=7)
    euler = rng.uniform([0, 0, 0], [360, 180, 360], size=(n_grains, 3))
    q = grain_quaternions(lab, euler, noise_deg=0.3, seed=7)
    valid = rng.random((size, size)) > 0.02
    t0 = time.perf_counter()
    seg = segment_grains(q, valid, Lattice.fcc(), threshold_deg=5.0)
    dt = time.perf_counter() - t0
    print(f"map {size} x {size} points, {n_grains} seeded grains, cubic symmetry (24 rotations)")
    print(f"segment_grains: {dt:.2f} s (target < 30 s on one core)")
    print(f"grains found: {seg.n_grains}; median spread {np.median(seg.spread_deg):.3f} deg; "
          f"regions dropped under the minimum size: {seg.n_dropped_regions}")


if __name__ == "__main__":
    args = [int(a) for a in sys.argv[1:3]]
    main(*args)
