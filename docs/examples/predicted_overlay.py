"""Draw every candidate plane's predicted trace, with its uncertainty wedge, on a picture and on a blank canvas.

Uses the bundled demo picture of a fictional FCC coupon (Harrow Lane Instruments, coupon A,
Bunge 263, 50, 135). Run:

    python docs/examples/predicted_overlay.py [OUT_DIR]

Writes predicted_on_image.png and predicted_on_canvas.png into OUT_DIR (default: a new
temporary folder).
"""

import sys
import tempfile
from pathlib import Path

from tracefit.demo import demo_dir
from tracefit.image import read_image
from tracefit.crystal import lattice_preset
from tracefit.crystal import from_euler
from tracefit.viz.overlay import draw_predicted, write_overlay
from tracefit.crystal import catalogue
from tracefit.predict import predict_traces

out_dir = Path(sys.argv[1]) if len(sys.argv) > 1 else Path(tempfile.mkdtemp(prefix="tracefit-example-"))
out_dir.mkdir(parents=True, exist_ok=True)

lattice = lattice_preset("fcc")
traces = predict_traces(lattice, from_euler([263.0, 50.0, 135.0]), catalogue(lattice, ["slip"]))
image, _ = read_image(demo_dir() / "coupon_A.png")
for name, rgb in (
    ("predicted_on_image.png", draw_predicted(traces, image=image, orientation_sigma_deg=1.0)),
    ("predicted_on_canvas.png", draw_predicted(traces, canvas_size=(640, 480), orientation_sigma_deg=1.0)),
):
    print(f"written {write_overlay(out_dir / name, rgb)}")
