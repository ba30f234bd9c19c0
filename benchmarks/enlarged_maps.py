"""Benchmark: does a strain map enlarged by the user give the same families as the map itself?

Not part of the test suite; prints figures. The maps are those of ``benchmarks/strainmap.py``
(its own renderer; levels easy, typical, hard, seeds 1-2 by default). Each map is analysed
grain by grain (``tracefit.image.detect_grains``, ``min_pixels`` 300) at its own size, then
enlarged with OpenCV's ``cv2.resize`` (labels nearest-neighbour, NaN points kept NaN;
``min_pixels`` 300 counts the original's points once the factor is known, 300 k^2 is asked
for by hand when the image is taken as given) and analysed again, once with the enlargement stated
(``oversampling=k``) and once with the default (0: an enlargement in blocks is recognised,
a smooth one only noted) and, for comparison, taken as given (``oversampling=1``). A
family of the native answer is kept when the enlarged answer has one within 2 deg in the
same grain; a family of the enlarged answer with none within 2 deg is new.

Usage::

    NUMBA_CACHE_DIR=/tmp/nb_x PYTHONPATH=$PWD python benchmarks/enlarged_maps.py [--seeds 2] [--levels easy,typical,hard]

These figures support, never replace, qualified investigation.
"""

from __future__ import annotations

import argparse
import os
import sys
import time

import cv2
import numpy as np

sys.path.insert(0, os.path.dirname(os.path.abspath(__file__)))
from strainmap import render  # noqa: E402  (the benchmark's own renderer)

from tracefit.conventions import axial_difference  # noqa: E402
from tracefit.image import detect_grains  # noqa: E402

MATCH_DEG = 2.0
ENLARGEMENTS = [(2, "cubic", cv2.INTER_CUBIC), (2, "nearest", cv2.INTER_NEAREST), (3, "cubic", cv2.INTER_CUBIC),
                (2, "bilinear", cv2.INTER_LINEAR), (2, "Lanczos", cv2.INTER_LANCZOS4)]


def _enlarge(img, labels, k, kind):
    nan = np.isnan(img)
    big = cv2.resize(np.where(nan, np.float32(np.nanmedian(img)), img).astype(np.float32),
                     (img.shape[1] * k, img.shape[0] * k), interpolation=kind)
    big[cv2.resize(nan.view(np.uint8), big.shape[::-1], interpolation=cv2.INTER_NEAREST) > 0] = np.nan
    return big, cv2.resize(labels.astype(np.int32), big.shape[::-1], interpolation=cv2.INTER_NEAREST)


def _compare(native, other):
    """(kept, lost, new, angle changes) of ``other`` against ``native``, grain by grain."""
    kept = lost = new = 0
    changes = []
    for g, fams in native.items():
        got = other.get(g, [])
        for a in fams:
            d = [abs(axial_difference(a, b)) for b in got]
            if d and min(d) <= MATCH_DEG:
                kept += 1
                changes.append(min(d))
            else:
                lost += 1
        new += sum(1 for b in got if not any(abs(axial_difference(a, b)) <= MATCH_DEG for a in fams))
    return kept, lost, new, changes


def main(argv=None) -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--seeds", type=int, default=2, help="maps per level (seeds 1..N)")
    ap.add_argument("--levels", default="easy,typical,hard")
    a = ap.parse_args(argv)
    t0 = time.time()
    totals: dict = {}
    n_native = 0
    for level in a.levels.split(","):
        for seed in range(1, a.seeds + 1):
            sm = render(seed, level, True)
            angles = lambda out: {g: [f.angle_deg for f in r.families] for g, r in out.items()}  # noqa: E731
            native = angles(detect_grains(sm.image, sm.labels, min_pixels=300))
            n_native += sum(len(v) for v in native.values())
            for k, name, kind in ENLARGEMENTS:
                big, labels = _enlarge(sm.image, sm.labels, k, kind)
                for how, over in (("stated", k), ("default", 0), ("as given", 1)):
                    # grain sizes are counted in the original's points once the factor is known (stated or
                    # blocks); taken as given, the same grains are asked for by hand
                    known = over == k or (over == 0 and kind == cv2.INTER_NEAREST)
                    out = angles(detect_grains(big, labels, min_pixels=300 if known else 300 * k * k, oversampling=over))
                    acc = totals.setdefault((k, name, how), [0, 0, 0, []])
                    kept, lost, new, ch = _compare(native, out)
                    acc[0] += kept
                    acc[1] += lost
                    acc[2] += new
                    acc[3] += ch
            print(f"  {level} seed {seed}: {sum(len(v) for v in native.values())} native families", flush=True)
    print(f"enlarged strain maps: levels {a.levels}, seeds 1-{a.seeds}, {n_native} families at the maps' own size; "
          f"kept = one within {MATCH_DEG:g} deg in the same grain")
    print(f"{'enlargement':<14} {'oversampling':<10} {'kept':>5} {'lost':>5} {'new':>5}  median change")
    for (k, name, how), (kept, lost, new, ch) in totals.items():
        med = f"{np.median(ch):.3f} deg" if ch else "-"
        print(f"{k}x {name:<11} {how:<10} {kept:>5} {lost:>5} {new:>5}  {med}")
    print(f"wall {time.time() - t0:.0f} s")


if __name__ == "__main__":
    main()
