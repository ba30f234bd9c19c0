"""Throughput of trace prediction: vectorised table versus the per-orientation path.

Prints orientations x planes per second for ``predicted_trace_table`` and for a loop over
``predict_traces`` (one orientation at a time, grouped, with Schmid factors), and their ratio
measured in the same run. No pass/fail: figures only.

    python benchmarks/bench_traces.py [N]
"""

from __future__ import annotations

import sys
import time
import warnings

import numpy as np
from scipy.spatial.transform import Rotation

from tracefit.conventions import FrameSettings
from tracefit.crystal import lattice_preset
from tracefit.crystal import from_euler
from tracefit.crystal import catalogue
from tracefit.predict import parse_load, predict_traces, predicted_trace_table


def main(n: int = 20000) -> None:
    warnings.simplefilter("ignore")
    lat = lattice_preset("hcp", 1.624)
    systems = catalogue(lat)
    normals = np.unique(np.round([s.normal for s in systems], 9), axis=0)
    g = from_euler(Rotation.random(n, random_state=1).as_euler("ZXZ", degrees=True))
    frame = FrameSettings(rotation_deg=12.0, flip_y=True, tilt_deg=70.0)

    t0 = time.perf_counter()
    tab = predicted_trace_table(lat, g, normals, frame)
    t_vec = time.perf_counter() - t0
    rate_vec = n * len(normals) / t_vec

    m = max(50, n // 200)
    load = parse_load("z", lat)
    t0 = time.perf_counter()
    for k in range(m):
        predict_traces(lat, g[k], systems, frame, load=load)
    t_loop = time.perf_counter() - t0
    rate_loop = m * len(normals) / t_loop

    print(f"hcp, {len(systems)} systems on {len(normals)} distinct plane normals")
    print(f"predicted_trace_table: {n} orientations in {t_vec * 1e3:.1f} ms -> {rate_vec:,.0f} orientation-planes/s")
    print(f"predict_traces loop:   {m} orientations in {t_loop * 1e3:.1f} ms -> {rate_loop:,.0f} orientation-planes/s")
    print(f"ratio (vectorised / loop): {rate_vec / rate_loop:.0f}x; table shape {tab.angle_deg.shape}")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 20000)
