"""Survey throughput on local processes and on a Dask LocalCluster, and what an image costs by size.

Prints figures; asserts nothing about speed (the machine is shared). Run from the repository root::

    python benchmarks/cluster.py                 # 200 demo-sized images, 4 routes, then the size table
    python benchmarks/cluster.py --images 60 --no-sizes
    python benchmarks/cluster.py --figures       # draw the overlay/rose/stereogram PNGs too

1. Throughput: ``--images`` synthetic micrographs of the demo's size (384 x 512 px), drawn by
   :func:`tracefit.image.render_micrograph` with the two slip-line families of the demo's coupon A
   (new noise per image), surveyed in one run by the local pool at 1 and 2 workers and by a
   LocalCluster (``scheduler="local:N"``) at 1 and 2 workers. For each: wall time, images per
   second, and the speed-up of 2 workers over 1 (target >= 1.7 on a 2-core machine). For the
   cluster the start-up (cluster, worker check, imports) is shown apart from the steady state.
2. Scheduling overhead of the cluster route: per image, the time from the first task submitted to
   the last record written x workers / images, minus the analysis time measured inside the task
   (``elapsed_s``), as a share of that analysis time; and the same route with an analysis that
   does nothing against the local run of it (target < 5 % of the analysis of a demo-sized image).
3. Cost by image size (unless ``--no-sizes``): per-image time and peak memory (VmHWM of a fresh
   process that analyses 2 images) at 0.2, 1, 4 and 16 megapixels, the size of a record (what the
   client holds per image), and the extrapolation to 10,000 frames of 16 MP.

Targets from issue 15.
"""

from __future__ import annotations

import argparse
import json
import os
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

# The demo's coupon A: fcc, Euler (263, 50, 135) deg, tension along y; its two drawn families
# lie on the predicted traces of (11-1) and (111) (tracefit/data/demo/truth.json).
EULER = (263.0, 50.0, 135.0)
ANGLES = (21.45, 144.56)
DEMO_SHAPE = (384, 512)


def make_images(folder: Path, n: int, shape=DEMO_SHAPE, name="img") -> Path:
    """Draw ``n`` micrographs of ``shape`` into ``folder`` and write a job file listing them."""
    import cv2
    import numpy as np

    from tracefit.image import BandFamilySpec, render_micrograph

    folder.mkdir(parents=True, exist_ok=True)
    fams = [BandFamilySpec(a, spacing_px=34.0, width_px=2.6, contrast=-0.32) for a in ANGLES]
    parts = ['title = "benchmark"\n[defaults]\nlattice = "fcc"\nmodes = ["slip"]\npixel_size_um = 0.5\n'
             'load = { axis = "y", sense = "tension" }\n']
    for i in range(n):
        img, _ = render_micrograph(shape, fams, illumination=0.25, noise_sigma=0.025, blur_sigma=0.7, seed=1000 + i)
        f = folder / f"{name}{i:04d}.png"
        cv2.imwrite(str(f), np.asarray(img))
        parts.append(f'[[image]]\nname = "{name}{i:04d}"\nfile = "{f.name}"\neuler_deg = [{EULER[0]}, {EULER[1]}, {EULER[2]}]\n')
    job = folder / "job.toml"
    job.write_text("\n".join(parts), encoding="utf-8")
    return job


def no_analysis(im):
    """A stand-in analysis that does nothing: what is left of a task is the route's own cost."""
    import numpy as np

    from tracefit.survey import ImageAnalysis

    return ImageAnalysis(image=np.zeros((4, 4)), families=[], identifications=[], grains=[])


def run_route(job_path: Path, out: Path, figures: bool, workers: int | None = None, scheduler: str | None = None,
              analyse=None):
    from tracefit.survey import load_job, run_survey

    job = load_job(job_path)
    t0 = time.perf_counter()
    res = run_survey(job, out, workers=workers, scheduler=scheduler, progress=False, figures=figures, report=False,
                     analyse=analyse)
    wall = time.perf_counter() - t0
    assert res.exit_code == 0, [r.get("error") for r in res.records if r["status"] != "ok"][:3]
    work = [r["elapsed_s"] for r in res.records]
    return {"wall": wall, "work_sum": sum(work), "work_mean": sum(work) / len(work),
            "startup": res.run.get("startup_s", 0.0), "tasks": res.run.get("tasks_s"),
            "csv": (out / "results.csv").read_bytes()}


def throughput(n: int, figures: bool, repeat: int = 1) -> float:
    with tempfile.TemporaryDirectory(prefix="tracefit-bench-") as tmp:
        tmp = Path(tmp)
        t0 = time.perf_counter()
        job = make_images(tmp / "images", n)
        print(f"{n} synthetic images of {DEMO_SHAPE[1]} x {DEMO_SHAPE[0]} px drawn in {time.perf_counter() - t0:.1f} s; "
              f"figures {'on' if figures else 'off'}")
        routes = [("local pool, 1 worker", {"workers": 1}), ("local pool, 2 workers", {"workers": 2}),
                  ("LocalCluster, 2 workers", {"scheduler": "local:2"}), ("LocalCluster, 1 worker", {"scheduler": "local:1"})]
        rows, csvs = {}, set()
        for rep in range(repeat):  # there and back (ABCD DCBA ...), so a drifting load hits every route alike
            for k, (label, kw) in enumerate(routes if rep % 2 == 0 else routes[::-1]):
                r = run_route(job, tmp / f"out-{rep}-{k}", figures, **kw)
                csvs.add(r.pop("csv"))
                if label not in rows or r["wall"] < rows[label]["wall"]:
                    rows[label] = r
                extra = (f"  (start-up {r['startup']:.1f} s, tasks {r['tasks']:.1f} s = {n / r['tasks']:.2f} img/s, "
                         f"close and tables {r['wall'] - r['startup'] - r['tasks']:.1f} s)" if r["tasks"] else "")
                print(f"  {label:24s} {r['wall']:7.1f} s wall  {n / r['wall']:6.2f} img/s  "
                      f"analysis {r['work_mean'] * 1000:.0f} ms/img{extra}  [load average now "
                      f"{os.getloadavg()[0]:.1f}]", flush=True)
        if repeat > 1:
            print(f"  (best of {repeat} per route below)")
        same = len(csvs) == 1
        print(f"  results.csv identical across all {4 * repeat} runs: {same}")
        lp1, lp2 = rows["local pool, 1 worker"], rows["local pool, 2 workers"]
        lc1, lc2 = rows["LocalCluster, 1 worker"], rows["LocalCluster, 2 workers"]
        print(f"speed-up 2 workers over 1 (target >= 1.7): local pool {lp1['wall'] / lp2['wall']:.2f}x; "
              f"LocalCluster {lc1['wall'] / lc2['wall']:.2f}x overall, "
              f"{lc1['tasks'] / lc2['tasks']:.2f}x on the tasks alone")
        for label, r, k in (("1 worker", lc1, 1), ("2 workers", lc2, 2)):
            per = r["tasks"] * k / n
            over = per - r["work_mean"]
            print(f"cluster scheduling overhead, {label}: {over * 1000:.1f} ms per image = "
                  f"{100 * over / r['work_mean']:.1f} % of the {r['work_mean'] * 1000:.0f} ms analysis (target < 5 %)")
        per_local = lp1["wall"] / n - lp1["work_mean"]
        print(f"(the local pool's own per-image overhead at 1 worker, for comparison: {per_local * 1000:.1f} ms = "
              f"{100 * per_local / lp1['work_mean']:.1f} %)")
        # The route's cost alone: the same images with an analysis that does nothing, 1 worker each.
        noop_l = run_route(job, tmp / "noop-local", False, workers=1, analyse=no_analysis)
        noop_c = run_route(job, tmp / "noop-cluster", False, scheduler="local:1", analyse=no_analysis)
        per_l = noop_l["wall"] / n
        per_c = noop_c["tasks"] / n
        print(f"with an analysis that does nothing: {per_c * 1000:.1f} ms per image on the cluster route "
              f"(its tasks alone), {per_l * 1000:.1f} ms in this process (all of it); the difference, "
              f"{(per_c - per_l) * 1000:.1f} ms, is {100 * (per_c - per_l) / lp1['work_mean']:.1f} % of the "
              f"{lp1['work_mean'] * 1000:.0f} ms demo-sized analysis (target < 5 %)")
        return lc1["tasks"] / lc2["tasks"] / 2  # parallel efficiency of the cluster route at 2 workers


_SIZE_CHILD = r"""
import json, resource, sys, time
from pathlib import Path
from tracefit.survey import load_job, run_survey
job = load_job(sys.argv[1])
bare = run_survey(job, sys.argv[2] + "-bare", workers=1, progress=False, figures=False, report=False)
res = run_survey(job, sys.argv[2], workers=1, progress=False, figures=True, report=False)
hwm = 0
for line in open("/proc/self/status"):
    if line.startswith("VmHWM:"):
        hwm = int(line.split()[1]) * 1024
if not hwm:
    hwm = resource.getrusage(resource.RUSAGE_SELF).ru_maxrss * 1024
rec_bytes = [len(json.dumps(r)) for r in res.records]
import tracemalloc  # what one record costs the client in memory, as Python objects
text = json.dumps(res.records[-1])
tracemalloc.start()
held = [json.loads(text) for _ in range(50)]
py_bytes = tracemalloc.get_traced_memory()[0] / 50
tracemalloc.stop()
print(json.dumps({"bare": [r["elapsed_s"] for r in bare.records], "elapsed": [r["elapsed_s"] for r in res.records],
                  "status": [r["status"] for r in res.records],
                  "hwm": hwm, "record_bytes": sum(rec_bytes) / len(rec_bytes), "record_py_bytes": py_bytes}))
"""


def sizes(efficiency: float | None = None, n_images: int = 3) -> None:
    print(f"\ncost by image size (one fresh process per size; {n_images} images analysed without figures, then again "
          f"with them; per-image time is the median, so the first image's one-off imports do not count):")
    rows = []
    with tempfile.TemporaryDirectory(prefix="tracefit-bench-") as tmp:
        for shape in ((384, 512), (1024, 1024), (2048, 2048), (4096, 4096)):
            mp = shape[0] * shape[1] / 1e6
            folder = Path(tmp) / f"s{shape[0]}"
            t0 = time.perf_counter()
            job = make_images(folder, n_images, shape, name="s")
            draw = time.perf_counter() - t0
            env = dict(os.environ, MPLBACKEND="Agg")
            out = subprocess.run([sys.executable, "-c", _SIZE_CHILD, str(job), str(folder / "out")],
                                 capture_output=True, text=True, env=env)
            if out.returncode:
                print(f"  {mp:5.1f} MP: failed: {out.stderr.strip().splitlines()[-1:]}")
                continue
            d = json.loads(out.stdout.strip().splitlines()[-1])
            t_bare, t_fig = statistics.median(d["bare"]), statistics.median(d["elapsed"])
            rows.append((mp, t_bare, t_fig, d["hwm"], d["record_py_bytes"]))
            print(f"  {mp:5.2f} MP ({shape[1]} x {shape[0]}): {t_bare:6.2f} s per image without figures, "
                  f"{t_fig:6.2f} s with them; peak memory {d['hwm'] / 1e6:5.0f} MB; record {d['record_bytes'] / 1e3:.0f} kB as JSON, "
                  f"{d['record_py_bytes'] / 1e3:.0f} kB in memory "
                  f"[{d['bare']} / {d['elapsed']}]", flush=True)
    if len(rows) >= 2 and rows[-1][0] >= 16:
        mp, t16, t16f, hwm, rec_py = rows[-1]
        (mp0, t0_, *_), (mp1, t1_, *_) = rows[-2], rows[-1]
        slope = (t1_ - t0_) / (mp1 - mp0)
        print(f"\nper-image time grows by {slope:.2f} s per megapixel between {mp0:.0f} and {mp1:.0f} MP "
              f"(fixed costs: {t1_ - slope * mp1:.2f} s)")
        effs = [(0.9, "assumed for cores of its own")]
        if efficiency:
            effs.append((efficiency, "the cluster route's, measured above at 2 workers on this machine"))
        for label, t in (("without figures", t16), ("with figures", t16f)):
            total = 10_000 * t
            print(f"10,000 frames of 16 MP {label}, at {t:.2f} s each: {total / 3600:.1f} core-hours")
            for eff, how in effs:
                print(f"  wall time at {eff:.0%} parallel efficiency ({how}): " + ", ".join(
                      f"{w} workers {total / (w * eff) / 3600:.2f} h" for w in (2, 16, 64, 256)))
        print(f"memory: {hwm / 1e9:.2f} GB peak per worker process at 16 MP, so 16 workers need about "
              f"{16 * hwm / 1e9:.0f} GB and 64 about {64 * hwm / 1e9:.0f} GB; the client holds one record per image "
              f"({rec_py / 1e3:.0f} kB at 16 MP): about {10_000 * rec_py / 1e6:.0f} MB for 10,000 frames")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--images", type=int, default=200, help="images in the throughput runs (default 200)")
    ap.add_argument("--figures", action="store_true", help="draw each image's PNG figures in the throughput runs")
    ap.add_argument("--repeat", type=int, default=1, help="runs per route, in there-and-back order; best counts")
    ap.add_argument("--no-sizes", action="store_true", help="skip the cost-by-size table")
    ap.add_argument("--sizes-only", action="store_true", help="only the cost-by-size table")
    args = ap.parse_args()
    import platform

    from tracefit.survey import available_cores

    print(f"tracefit cluster benchmark, {time.strftime('%Y-%m-%d %H:%M', time.gmtime())} UTC, {platform.platform(terse=True)}, "
          f"Python {platform.python_version()}, {available_cores()} cores, load average "
          f"{' '.join(f'{x:.1f}' for x in os.getloadavg())}")
    eff = None
    if not args.sizes_only:
        eff = throughput(args.images, args.figures, args.repeat)
    if not args.no_sizes:
        sizes(eff)


if __name__ == "__main__":
    main()
