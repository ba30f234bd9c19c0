"""Identify planes from hand-measured trace angles and a CSV of measured lines, cracks included.

A fictional test house audits a photo of a cracked nickel-alloy vane (one grain, Bunge
20, 35, 60): two angles typed in, and the lines of docs/examples/measured_traces.csv
(pixel endpoints read off an image viewer, two of them cracks). Run:

    python docs/examples/identify_from_angles.py [OUT_DIR]

Writes measured.json into OUT_DIR (default: a new temporary folder) and prints a summary.
"""

import json
import sys
import tempfile
from pathlib import Path

from tracefit import CAUTION
from tracefit.crystal import format_index
from tracefit.crystal import lattice_preset
from tracefit.matching import identifications_to_json
from tracefit.matching import MEASURED_CONVENTION, identify_observed, parse_angle_option, read_measured_csv
from tracefit.crystal import from_euler
from tracefit.crystal import catalogue

out_dir = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="tracefit-example-"))
out_dir.mkdir(parents=True, exist_ok=True)

lattice = lattice_preset("fcc")
g = from_euler([20.0, 35.0, 60.0])
notes: list = []
systems = catalogue(lattice)

# 1. Two angles typed in (322.6 folds to 142.6, with a note).
typed = [parse_angle_option("32.2+-0.5", notes=notes), parse_angle_option("322.6", notes=notes)]
for r in identify_observed(typed, lattice, systems, g=g):
    print(f"typed {r.angle_deg:6.2f} deg: {format_index(r.best.plane, 'plane') if r.best else 'unexplained'}")

# 2. The CSV of the same photo: the same two bands by endpoints, a third by angle, two cracks.
# (A separate run: the same band typed twice in one run would compete for its own plane.)
measured = read_measured_csv(Path(__file__).with_name("measured_traces.csv"), notes=notes)
results = identify_observed(measured, lattice, systems, g=g)
for r in results:
    if hasattr(r, "consistent_planes"):
        ok = ", ".join(format_index(q.plane, "plane") for q in r.consistent_planes) or "no candidate plane"
        print(f"crack at {r.angle_deg:6.2f} deg: consistent with {ok}")
    else:
        best = "unexplained" if r.unexplained or r.best is None else format_index(r.best.plane, "plane")
        print(f"{r.label or 'family'} at {r.angle_deg:6.2f} deg: {best}")
for n in notes:
    print("note:", n)
path = out_dir / "measured.json"
path.write_text(json.dumps(identifications_to_json(results, convention=MEASURED_CONVENTION, notes=notes, caution=CAUTION), indent=1))
print(f"written {path}")
