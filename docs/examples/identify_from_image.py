"""Identify the slip planes behind the band families of a micrograph (tracefit as a library).

Uses the bundled demo picture of a fictional FCC coupon (Harrow Lane Instruments, coupon A:
Bunge 263, 50, 135, tension along the image vertical). Run:

    python docs/examples/identify_from_image.py [OUT_DIR]

Writes identify.json into OUT_DIR (default: a new temporary folder) and prints a summary.
"""

import json
import sys
import tempfile
from pathlib import Path

from tracefit.demo import demo_dir
from tracefit.image import detect_bands, read_image
from tracefit.crystal import format_index
from tracefit.crystal import lattice_preset
from tracefit.matching import identifications_to_json, identify_families, observed_from_detection
from tracefit.crystal import from_euler
from tracefit.crystal import catalogue
from tracefit.predict import parse_load

out_dir = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="tracefit-example-"))
out_dir.mkdir(parents=True, exist_ok=True)

lattice = lattice_preset("fcc")
g = from_euler([263.0, 50.0, 135.0])  # v_crystal = g v_sample
image, notes = read_image(demo_dir() / "coupon_A.png")
observed = observed_from_detection(detect_bands(image, pixel_size_um=0.5))
results = identify_families(observed, lattice, g, catalogue(lattice, ["slip"]), load=parse_load("y", lattice))

for r in results:
    best = r.best
    verdict = "unexplained" if r.unexplained or best is None else f"{format_index(best.plane, 'plane')} p={best.probability:.3f}"
    print(f"family at {r.angle_deg:6.2f} deg ({r.source}): {verdict}")
path = out_dir / "identify.json"
path.write_text(json.dumps(identifications_to_json(results), indent=1))
print(f"written {path}")
