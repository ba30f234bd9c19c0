"""Benchmark: the band detector on synthetic micrographs drawn by an independent renderer.

Not part of the test suite; prints figures. ``benchmarks/independent_renderer.py`` draws the
images (its own code, sharing nothing with ``tracefit.image.synthetic``): 150 images of
clearly visible band families ("main": 1-3 families, 256-2048 px, widths 1-8 px, contrast
8-40 % raised or noise lowered until every family is clearly visible: effective depth >= 6 %,
>= 3x the pixel noise and >= 2x the background texture), 40 of faint families (contrast
3-7 %, pixel SNR >= 1.5) and 30 band-free images (texture, pores, a scratch, grain patches).
``tracefit.image.detect_bands`` runs at its defaults on each. A drawn family is found when a
reported family lies within 2 deg (axial); a reported family within 2 deg of no drawn family
is spurious.

Usage::

    NUMBA_CACHE_DIR=/tmp/nb_x PYTHONPATH=$PWD python benchmarks/independent_micrographs.py [--sets main,faint,neg] [--misses]

These figures support, never replace, qualified investigation.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))
from independent_renderer import draw_params, render  # noqa: E402

from tracefit.conventions import axial_difference  # noqa: E402
from tracefit.image import detect_bands  # noqa: E402

SIZES = {"main": 150, "faint": 40, "neg": 30}
MATCH_DEG = 2.0


def _run(kind: str, n: int, misses: bool) -> None:
    found = total = spurious = images_with_families = 0
    errors, times, lines = [], [], []
    for i in range(n):
        p = draw_params(kind, i)
        img, truth = render(p)
        t0 = time.perf_counter()
        fams = detect_bands(img).families
        times.append(time.perf_counter() - t0)
        images_with_families += bool(fams)
        used = set()
        for t in truth:
            total += 1
            near = sorted((abs(axial_difference(f.angle_deg, t["angle"])), j) for j, f in enumerate(fams))
            near = [c for c in near if c[0] <= MATCH_DEG]
            if near:
                found += 1
                errors.append(near[0][0])
                used.add(near[0][1])
            elif misses:
                lines.append(f"  miss  {kind}#{i}: {t['angle']:.2f} deg, {t['n_bands']} bands, {t['width']:.1f} px "
                             f"{t['profile']} {t['polarity']}, contrast {t['contrast']:.2f}, partial {t['partial']}, "
                             f"{p['H']} x {p['W']}; reported {[round(f.angle_deg, 2) for f in fams]}")
        for j, f in enumerate(fams):
            if j not in used and not any(abs(axial_difference(f.angle_deg, t["angle"])) <= MATCH_DEG for t in truth):
                spurious += 1
                if misses:
                    lines.append(f"  spurious  {kind}#{i}: {f.angle_deg:.2f} deg, {f.n_bands} bands, {f.polarity}, "
                                 f"significance {f.significance:.1f}")
        if (i + 1) % 10 == 0:
            print(f"  ... {kind} {i + 1}/{n}", file=sys.stderr, flush=True)
    t = f"time per image {np.mean(times):.2f} s (largest {np.max(times):.2f} s)"
    if kind == "neg":
        print(f"{kind:6s} {n} band-free images: families reported on {images_with_families}, spurious families "
              f"{spurious}; {t}")
    else:
        e = np.array(errors)
        print(f"{kind:6s} {n} images, {total} families: found {found} (recall {found / max(total, 1):.3f}), spurious "
              f"{spurious}; angle error median {np.median(e):.4f} deg, 90th percentile {np.percentile(e, 90):.4f}, "
              f"largest {e.max():.3f}; {t}")
    for ln in lines:
        print(ln)


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sets", default="main,faint,neg", help="comma-separated: main, faint, neg")
    ap.add_argument("--misses", action="store_true", help="list every miss and spurious family")
    args = ap.parse_args()
    kinds = [k.strip() for k in args.sets.split(",") if k.strip()]
    bad = [k for k in kinds if k not in SIZES]
    if bad:
        ap.error(f"unknown set(s) {bad}; choose from {sorted(SIZES)}")
    for kind in kinds:
        _run(kind, SIZES[kind], args.misses)


if __name__ == "__main__":
    main()
