"""Coverage of the relative-CRSS intervals on populations simulated with known ratios.

hcp (c/a 1.587) with basal : prismatic : pyramidal <c+a> (2nd order) CRSS = 1.5 : 1 : 3, 200 grains of
random orientation under uniaxial tension along the image y axis, one active system per grain drawn
from the model (scatter beta = 0.03 Schmid-factor units). For each seed the ratios are fitted with
prismatic as the reference and the 95 % intervals checked against the truth. Prints the coverage per
family and for all families at once; the target is at least 90 of 100 seeds per family. No pass/fail.

    python benchmarks/crss_coverage.py [N_SEEDS] [profile|bootstrap]
"""

from __future__ import annotations

import sys
import time

from tracefit.stats import fit_crss, simulate_population

TRUTH = {"basal": 1.5, "prismatic": 1.0, "pyramidal-ca-2": 3.0}
LABELS = {"basal": "{0001}", "prismatic": "{10-10}", "pyramidal-ca-2": "{11-22}"}


def main(n_seeds: int = 100, method: str = "profile") -> None:
    covered = {k: 0 for k in TRUTH if k != "prismatic"}
    all_covered = 0
    t0 = time.perf_counter()
    for seed in range(n_seeds):
        fit = fit_crss(simulate_population(TRUTH, 200, seed=seed), reference="prismatic", method=method)
        r = fit.ratios()
        ok_all = True
        for k in covered:
            e = r[LABELS[k]]
            ok = (e["low"] or 0.0) <= TRUTH[k] <= (e["high"] if e["high"] is not None else float("inf"))
            covered[k] += ok
            ok_all &= ok
        all_covered += ok_all
    el = time.perf_counter() - t0
    print(f"{n_seeds} seeds, 200 grains each, {method} intervals, {el:.0f} s ({el / n_seeds:.2f} s per seed)")
    for k, n in covered.items():
        print(f"  {LABELS[k]:8s} true ratio {TRUTH[k]:.2f}: 95 % interval covers it in {n}/{n_seeds} seeds")
    print(f"  both at once: {all_covered}/{n_seeds} seeds")


if __name__ == "__main__":
    main(int(sys.argv[1]) if len(sys.argv) > 1 else 100, sys.argv[2] if len(sys.argv) > 2 else "profile")
