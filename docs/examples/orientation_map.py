"""From an EBSD orientation map to grains in a micrograph's pixels (tracefit as a library).

Invented scenario: a nickel tensile coupon from the fictional Brackwater Foundry was mapped by
EBSD (60 x 80 points, 0.5 um step) and photographed afterwards at a slightly different scale
and angle. Four features visible in both were picked as control points. This script makes
the scan with orix's writer (scan.ang), draws the micrograph from the same grains under a
known affine transform (micrograph.png), then reads the map back, finds its grains,
registers it from the control points and writes the check figure. Run:

    python docs/examples/orientation_map.py [OUT_DIR]

Writes scan.ang, micrograph.png, points.csv, registration.png, grains.csv and labels.tif into
OUT_DIR (default: a new temporary folder) and prints the grains with their centroids.
"""

import sys
import tempfile
from pathlib import Path

import numpy as np

from tracefit.viz import grain_boundaries, write_registration_figure
from tracefit.maps import (Registration, grain_map_from_orientation_map, grain_quaternions, synthetic_crystal_map,
                           voronoi_labels, warp_labels, write_orientation_table)

out_dir = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="tracefit-example-"))
out_dir.mkdir(parents=True, exist_ok=True)

# 1. The scan: 7 grains, random orientations, 0.4 deg scatter, a scratch of unindexed points.
rng = np.random.default_rng(2026)
true_labels = voronoi_labels((60, 80), 7, seed=2026)
euler = rng.uniform([0, 0, 0], [360, 180, 360], size=(7, 3))
indexed = np.ones((60, 80), bool)
indexed[30, 10:25] = False
crystal_map = synthetic_crystal_map(grain_quaternions(true_labels, euler, noise_deg=0.4, seed=1), valid=indexed,
                                    step=0.5, phase_name="nickel")
from orix import io as orix_io  # noqa: E402  (orix compiles on first import: only now that it is needed)

orix_io.save(str(out_dir / "scan.ang"), crystal_map)

# 2. The micrograph: each grain its own grey, the map turned 4 deg and scaled 5.2x onto it.
truth = np.array([[5.2 * np.cos(np.radians(4)), -5.2 * np.sin(np.radians(4)), 30.0],
                  [5.2 * np.sin(np.radians(4)), 5.2 * np.cos(np.radians(4)), 12.0], [0.0, 0.0, 1.0]])
shape = (340, 460)
pixels = warp_labels(true_labels, Registration(truth, "affine"), shape)
grey = np.where(pixels >= 0, 70 + 25 * (pixels % 5), 20) + rng.normal(0, 6, shape)
import cv2  # noqa: E402

cv2.imwrite(str(out_dir / "micrograph.png"), np.clip(grey, 0, 255).astype(np.uint8))

# 3. Control points: map (column, row) -> where a person clicked in the picture (0.3 px off).
map_xy = np.array([[4.0, 5.0], [75.0, 3.0], [6.0, 55.0], [70.0, 52.0]])
h = np.column_stack([map_xy, np.ones(4)]) @ truth.T
image_xy = h[:, :2] + rng.uniform(-0.3, 0.3, (4, 2))
rows = ["image_x,image_y,map_x,map_y"] + [f"{a:.2f},{b:.2f},{c:g},{d:g}" for (a, b), (c, d) in zip(image_xy, map_xy)]
(out_dir / "points.csv").write_text("\n".join(rows) + "\n")

# 4. tracefit: read, segment, register, warp.
gm = grain_map_from_orientation_map(out_dir / "scan.ang", shape, control_points=out_dir / "points.csv",
                                    phase="nickel", threshold_deg=5.0)
s = gm.summary()
print(f"map {s['cols']} x {s['rows']} points, step {s['step_x']:g} {s['scan_unit']}; phase {s['phase']!r} ({s['laue']})")
print(f"grains found: {s['grains_found']}, in the micrograph: {s['grains_in_image']}")
print("residuals px: " + " ".join(f"{r:.2f}" for r in gm.residuals_px))
for gid, go in sorted(gm.table.items()):
    x, y = gm.centroids_px[gid]
    print(f"grain {gid}: Euler {go.euler_deg[0]:7.2f} {go.euler_deg[1]:7.2f} {go.euler_deg[2]:7.2f}  "
          f"spread {go.sigma_deg:.2f} deg  centroid x {x:6.1f} px, y {y:6.1f} px")
for w in gm.warnings:
    print(f"warning: {w}")

# 5. The check figure, and the label-image route's two files.
write_registration_figure(out_dir / "registration.png", grey, gm)
write_orientation_table(out_dir / "grains.csv", {k: v.g for k, v in gm.table.items()},
                        sigma_deg={k: v.sigma_deg for k, v in gm.table.items()})
import tifffile  # noqa: E402

tifffile.imwrite(out_dir / "labels.tif", gm.labels.astype(np.int32))
print(f"written to {out_dir}")
