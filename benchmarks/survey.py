"""Survey throughput: copies of the bundled demo with 1 worker and with all cores, in one run.

Prints wall times and the speed-up ratio (a ratio measured in one run says more than an
absolute time, which depends on the machine). Run from the repository root::

    python benchmarks/survey.py [--repeat N]
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path


def main() -> None:
    from tracefit.demo import demo_job_path
    from tracefit.survey import available_cores, run_survey

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--repeat", type=int, default=2, help="runs per setting (best is reported)")
    ap.add_argument("--copies", type=int, default=4, help="copies of each demo image in the job")
    args = ap.parse_args()
    from tracefit.survey import parse_job

    # the demo job with each image listed several times under different names
    text = demo_job_path().read_text(encoding="utf-8")
    head, *imgs = text.split("[[image]]")
    body = head + "".join("[[image]]" + b.replace('name = "', f'name = "copy{k}-', 1)
                          for k in range(args.copies) for b in imgs)
    job = parse_job(body, demo_job_path())
    cores = available_cores()
    best = {}
    for workers in sorted({1, cores}):
        times = []
        for _ in range(args.repeat):
            with tempfile.TemporaryDirectory() as tmp:
                t0 = time.perf_counter()
                res = run_survey(job, Path(tmp) / "out", workers=workers, progress=False)
                wall = time.perf_counter() - t0
                assert res.exit_code == 0
                busy = sum(r["elapsed_s"] for r in res.records)  # per-image time inside the workers
                times.append((wall, busy))
        wall, busy = min(times)
        best[workers] = wall
        print(f"workers={workers}: {len(job.images)} images in {wall:.2f} s wall, {busy:.2f} s inside the "
              f"workers; parallel efficiency {busy / (workers * wall):.0%} (best of {args.repeat})")
    if cores > 1:
        print(f"speed-up with {cores} workers: {best[1] / best[cores]:.2f}x")


if __name__ == "__main__":
    main()
