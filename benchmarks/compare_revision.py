"""Speed of this working tree against an earlier revision, measured side by side in one run.

Issue 10 asks that detection and identification be no slower than on d3fba99. This script
checks that: it makes a temporary ``git worktree`` of the base revision (removed at the end,
also on an error, Ctrl-C or SIGTERM) and times the same workloads on the base tree ("old")
and on the current working tree ("new", uncommitted edits included), interleaved
(old, new, old, new, ...) in fresh subprocesses. Each subprocess runs with
``PYTHONPATH=<tree>`` and ``cwd=<tree>`` so that it imports its own tree's ``tracefit``;
the ``tracefit.__file__`` of each tree is printed once as proof.

Workloads (the same inputs in both trees; the import path of the restructured package is
tried first, then the one of the old layout):

1. ``detect``: ``detect_bands`` on the first 20 images of the standard synthetic suite
   (seed 2026, 512 x 512), after one untimed warm-up call. The families found are compared
   between the trees (count, angles, band counts).
2. ``identify_grains``: one 100-grain map per lattice (fcc, then bcc), random orientations
   (uniform, Bunge angles from a seeded generator), slip and twin candidates, one family per
   grain at its first candidate's predicted trace plus 0.3 deg Gaussian noise (sigma 0.3 deg);
   the two ``identify_grains`` calls are timed together (defaults: map-level artefact test on).
   ``identify_families``: 500 single grains built the same way (alternately fcc and bcc), one
   call per grain. Each of the two is timed 5 times in its process and the median kept (one
   pass takes a fraction of a second). The inputs and the most probable plane of every
   family are compared between the trees.
3. ``demo``: wall time of ``python -m tracefit survey <tree>/tracefit/data/demo/job.toml
   --out TMP --workers 1 --quiet`` (interpreter start, imports and writing the report included).

Printed: per workload the median time of each tree over the repeats, the ratio new/old
(target <= 1.0 within noise) and the spread of the per-repeat ratios. The machine is shared
with other jobs, so absolute times drift between runs; only ratios measured within one run
count.

Usage::

    python benchmarks/compare_revision.py                    # base d3fba99, 5 repeats
    python benchmarks/compare_revision.py --repeats 3 --base HEAD~1
"""

from __future__ import annotations

import argparse
import hashlib
import json
import os
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

HERE = Path(__file__).resolve().parent
SUITE_SEED = 2026  # the standard suite's own default seed
N_SUITE = 20
GRAIN_SEED = 10  # generator of the synthetic grain cases
N_MAP_GRAINS = 100
N_SINGLE_GRAINS = 500
NOISE_DEG = 0.3  # detection-like noise on the observed angle, and the sigma handed to the matcher
LATTICES = ("fcc", "bcc")
MODES = ("slip", "twin")
INNER_LOOPS = 5  # timed calls of each identification workload per process (median kept)
SUBPROCESS_TIMEOUT_S = 1800
RESULT_TAG = "COMPARE_REVISION_RESULT "  # prefix of the worker's one JSON line on stdout


# ----------------------------------------------------------------------------- worker side
# These functions run inside a subprocess of one tree and import that tree's tracefit.

def _import_first(*paths: str):
    """The first importable ``module.attribute`` of ``paths`` (new layout first, then the old one)."""
    import importlib

    errors = []
    for path in paths:
        module_name, attr = path.rsplit(".", 1)
        try:
            return getattr(importlib.import_module(module_name), attr)
        except (ImportError, AttributeError) as exc:
            errors.append(f"{path}: {exc}")
    raise ImportError("none of these imports worked: " + "; ".join(errors))


def _api() -> dict:
    """The functions the workloads call, from whichever layout this tree has."""
    return {
        "detect_bands": _import_first("tracefit.image.detect_bands", "tracefit.image.detect.detect_bands"),
        "standard_suite": _import_first("tracefit.image.standard_suite", "tracefit.synthetic.standard_suite"),
        "lattice_preset": _import_first("tracefit.crystal.lattice_preset", "tracefit.lattice.lattice_preset"),
        "catalogue": _import_first("tracefit.crystal.catalogue", "tracefit.systems.catalogue"),
        "from_euler": _import_first("tracefit.crystal.from_euler", "tracefit.orientation.from_euler"),
        "identify_families": _import_first("tracefit.matching.identify_families"),
        "identify_grains": _import_first("tracefit.matching.identify_grains"),
        "ObservedFamily": _import_first("tracefit.matching.ObservedFamily"),
        "candidate_set": _import_first("tracefit.matching.candidate_set"),
        "predict_candidates": _import_first("tracefit.matching.predict_candidates"),
    }


def _digest(values) -> str:
    """Short SHA-1 of a JSON-able value (floats by repr, so any change of the last bit shows)."""
    return hashlib.sha1(json.dumps(values, sort_keys=True).encode()).hexdigest()[:12]


def _work_detect(api: dict) -> dict:
    import numpy as np

    cases = list(api["standard_suite"](N_SUITE, seed=SUITE_SEED))
    images = [np.ascontiguousarray(c.image) for c in cases]
    input_digest = hashlib.sha1(b"".join(im.tobytes() for im in images)).hexdigest()[:12]
    api["detect_bands"](images[0])  # warm-up: first-call costs (lazy imports, OpenCV set-up) off the clock
    t0 = time.perf_counter()
    results = [api["detect_bands"](im) for im in images]
    seconds = time.perf_counter() - t0
    families = [[[float(f.angle_deg), int(f.n_bands)] for f in r.families] for r in results]
    return {"timings": {"detect": seconds}, "input_digest": input_digest, "families": families}


def _grain_cases(api: dict, lattice_names, rng) -> tuple[list, list]:
    """One grain per lattice name: orientation matrices and one observed angle at the first candidate's trace.

    Euler angles are drawn uniformly on the orientation space (phi1, phi2 uniform, cos Phi uniform).
    """
    import numpy as np

    n = len(lattice_names)
    euler = np.column_stack([
        rng.uniform(0.0, 360.0, n),
        np.degrees(np.arccos(rng.uniform(-1.0, 1.0, n))),
        rng.uniform(0.0, 360.0, n),
    ])
    noise = rng.normal(0.0, NOISE_DEG, n)
    first = {}
    for name in set(lattice_names):
        lat = api["lattice_preset"](name)
        first[name] = api["candidate_set"](api["catalogue"](lat, modes=MODES))
    gs, angles = [], []
    for name, e, dn in zip(lattice_names, euler, noise):
        g = np.asarray(api["from_euler"](e), float)
        ang, _incl, _slope = api["predict_candidates"](first[name], g)
        gs.append(g)
        angles.append(float((ang[0, 0] + dn) % 180.0))
    return gs, angles


def _timed_median(call) -> tuple[float, object]:
    """Median seconds of ``INNER_LOOPS`` calls (a sub-second workload: one call is too noisy), and the last result.

    The median also leaves out first-call costs such as lazy imports.
    """
    seconds = []
    for _ in range(INNER_LOOPS):
        t0 = time.perf_counter()
        result = call()
        seconds.append(time.perf_counter() - t0)
    return statistics.median(seconds), result


def _verdicts(results) -> list:
    """Most probable (plane, mode) and its probability of each family, for the cross-tree comparison."""
    out = []
    for r in results:
        best = r.best
        out.append([str(r.grain), None if best is None else [list(best.plane), best.mode, float(best.probability)]])
    return out


def _work_identify(api: dict) -> dict:
    import numpy as np

    rng = np.random.default_rng(GRAIN_SEED)
    lattices = {name: api["lattice_preset"](name) for name in LATTICES}
    systems = {name: api["catalogue"](lat, modes=MODES) for name, lat in lattices.items()}
    Obs = api["ObservedFamily"]

    maps = []  # one identify_grains call per lattice
    for name in LATTICES:
        gs, angles = _grain_cases(api, [name] * N_MAP_GRAINS, rng)
        observed = [Obs(a, NOISE_DEG, grain=i) for i, a in enumerate(angles)]
        maps.append((name, observed, dict(enumerate(gs)), angles))
    single_names = [LATTICES[i % len(LATTICES)] for i in range(N_SINGLE_GRAINS)]
    gs, angles = _grain_cases(api, single_names, rng)
    singles = [(name, [Obs(a, NOISE_DEG)], g) for name, g, a in zip(single_names, gs, angles)]
    input_digest = _digest([[m[0], m[3]] for m in maps] + [[n, a] for n, a in zip(single_names, angles)])

    def run_maps():
        return [api["identify_grains"](obs, lattices[name], ors, systems[name]) for name, obs, ors, _ in maps]

    def run_singles():
        return [api["identify_families"](obs, lattices[name], g, systems[name]) for name, obs, g in singles]

    t_grains, map_results = _timed_median(run_maps)
    t_families, single_results = _timed_median(run_singles)
    return {
        "timings": {"identify_grains": t_grains, "identify_families": t_families},
        "input_digest": input_digest,
        "verdicts": [v for res in map_results for v in _verdicts(res)]
        + [v for res in single_results for v in _verdicts(res)],
    }


WORKERS = {"detect": _work_detect, "identify": _work_identify}


def worker_main(workload: str) -> None:
    """Run one workload in this process and print its one result line."""
    # The script's own folder (benchmarks/ of the new tree) must not shadow anything.
    sys.path[:] = [p for p in sys.path if Path(p or ".").resolve() != HERE]
    import tracefit

    out = WORKERS[workload](_api())
    out["tracefit_file"] = str(Path(tracefit.__file__).resolve())
    print(RESULT_TAG + json.dumps(out), flush=True)


# ----------------------------------------------------------------------------- driver side

def _git(repo: Path, *args: str) -> str:
    return subprocess.run(["git", "-C", str(repo), *args], check=True, capture_output=True, text=True).stdout.strip()


def _tree_env(tree: Path) -> dict:
    env = dict(os.environ)
    env["PYTHONPATH"] = str(tree)
    return env


def _run_worker(tree: Path, workload: str) -> dict:
    proc = subprocess.run(
        [sys.executable, str(Path(__file__).resolve()), "--worker", workload],
        cwd=tree, env=_tree_env(tree), capture_output=True, text=True, timeout=SUBPROCESS_TIMEOUT_S,
    )
    lines = [ln for ln in proc.stdout.splitlines() if ln.startswith(RESULT_TAG)]
    if proc.returncode != 0 or not lines:
        raise RuntimeError(f"{workload} on {tree} failed (exit {proc.returncode}):\n{proc.stderr[-3000:]}")
    return json.loads(lines[-1][len(RESULT_TAG):])


def _run_demo(tree: Path, scratch: Path) -> float:
    out = Path(tempfile.mkdtemp(prefix="demo-", dir=scratch)) / "out"
    cmd = [sys.executable, "-m", "tracefit", "survey", str(tree / "tracefit" / "data" / "demo" / "job.toml"),
           "--out", str(out), "--workers", "1", "--quiet"]
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=tree, env=_tree_env(tree), capture_output=True, text=True,
                          timeout=SUBPROCESS_TIMEOUT_S)
    seconds = time.perf_counter() - t0
    if proc.returncode != 0:
        raise RuntimeError(f"demo survey on {tree} failed (exit {proc.returncode}):\n{proc.stderr[-3000:]}")
    shutil.rmtree(out.parent, ignore_errors=True)
    return seconds


def _compare_families(old: list, new: list) -> str:
    """One line: are the detected families of the two trees the same?"""
    n_fam_old = sum(len(f) for f in old)
    n_fam_new = sum(len(f) for f in new)
    same_count = [len(a) == len(b) for a, b in zip(old, new)]
    if len(old) != len(new) or not all(same_count):
        return (f"families DIFFER: {n_fam_old} (old) vs {n_fam_new} (new) families; "
                f"{same_count.count(False)} image(s) with another family count")
    d_ang = [abs(fa[0] - fb[0]) for a, b in zip(old, new) for fa, fb in zip(a, b)]
    d_bands = sum(fa[1] != fb[1] for a, b in zip(old, new) for fa, fb in zip(a, b))
    if max(d_ang, default=0.0) == 0.0 and d_bands == 0:
        return f"families identical in both trees: {n_fam_new} families in {len(new)} images, same angles and band counts"
    return (f"families DIFFER: same counts ({n_fam_new}), max angle difference {max(d_ang):.2e} deg, "
            f"{d_bands} families with another band count")


def _compare_verdicts(old: list, new: list) -> str:
    """One line: does the most probable plane of every family agree between the trees?"""
    if len(old) != len(new):
        return f"verdicts DIFFER: {len(old)} (old) vs {len(new)} (new) families"
    other_plane = sum((a[1] is None) != (b[1] is None) or (a[1] is not None and a[1][:2] != b[1][:2])
                      for a, b in zip(old, new))
    dp = [abs(a[1][2] - b[1][2]) for a, b in zip(old, new) if a[1] is not None and b[1] is not None]
    return (f"most probable plane and mode: the same for {len(new) - other_plane}/{len(new)} families, different for "
            f"{other_plane}; max probability difference {max(dp, default=0.0):.2e} (a model change between the trees, "
            f"such as the per-family prior or the shared orientation error, moves these)")


def _fmt_ratio_spread(ratios: list[float]) -> str:
    return f"{min(ratios):.3f}-{max(ratios):.3f}" if ratios else "-"


def _report(times: dict, order: list[str]) -> list[str]:
    lines = [f"{'workload':<20}{'old median s':>14}{'new median s':>14}{'new/old':>10}{'per-repeat new/old':>22}"]
    for name in order:
        old, new = times[name]["old"], times[name]["new"]
        ratio = statistics.median(new) / statistics.median(old)
        per_repeat = [b / a for a, b in zip(old, new)]
        lines.append(f"{name:<20}{statistics.median(old):>14.3f}{statistics.median(new):>14.3f}{ratio:>10.3f}"
                     f"{_fmt_ratio_spread(per_repeat):>22}")
    return lines


def compare(base: str, repeats: int) -> int:
    repo = Path(_git(HERE, "rev-parse", "--show-toplevel"))
    base_sha = _git(repo, "rev-parse", "--short", base + "^{commit}")
    head_sha = _git(repo, "rev-parse", "--short", "HEAD")
    dirty = bool(_git(repo, "status", "--porcelain", "--untracked-files=no", "--", "tracefit"))
    scratch = Path(tempfile.mkdtemp(prefix="tracefit-compare-"))
    base_tree = scratch / f"base-{base_sha}"
    added = False
    try:
        _git(repo, "worktree", "add", "--detach", str(base_tree), base_sha)
        added = True
        trees = {"old": base_tree, "new": repo}
        print(f"old: {base} = {base_sha}, temporary worktree {base_tree}")
        print(f"new: working tree {repo} (HEAD {head_sha}{', with uncommitted changes under tracefit/' if dirty else ''})")
        print(f"python {sys.version.split()[0]}, {os.cpu_count()} cores (shared machine), {repeats} repeats, "
              f"interleaved old/new, one fresh subprocess per measurement")

        times: dict = {}
        first: dict = {}
        order = ["detect", "identify_grains", "identify_families", "demo"]
        for rep in range(repeats):
            for workload in ("detect", "identify"):
                for label in ("old", "new"):
                    res = _run_worker(trees[label], workload)
                    if rep == 0:
                        first[(workload, label)] = res
                        if workload == "detect":
                            print(f"{label} tree imports tracefit from {res['tracefit_file']}")
                    for name, sec in res["timings"].items():
                        times.setdefault(name, {"old": [], "new": []})[label].append(sec)
            for label in ("old", "new"):
                times.setdefault("demo", {"old": [], "new": []})[label].append(_run_demo(trees[label], scratch))
            done = ", ".join(f"{n} {times[n]['old'][-1]:.2f}/{times[n]['new'][-1]:.2f} s" for n in order)
            print(f"repeat {rep + 1}/{repeats} (old/new): {done}", flush=True)

        det_old, det_new = first[("detect", "old")], first[("detect", "new")]
        idf_old, idf_new = first[("identify", "old")], first[("identify", "new")]
        print()
        print(f"detect inputs: {'same images' if det_old['input_digest'] == det_new['input_digest'] else 'DIFFERENT images'}"
              f" in both trees (digest {det_new['input_digest']}); " + _compare_families(det_old["families"], det_new["families"]))
        print(f"identify inputs: {'same' if idf_old['input_digest'] == idf_new['input_digest'] else 'DIFFERENT'}"
              f" observed angles in both trees (digest {idf_new['input_digest']}); "
              + _compare_verdicts(idf_old["verdicts"], idf_new["verdicts"]))
        print()
        print(f"median over {repeats} repeats; ratio = median(new) / median(old), target <= 1.0 within noise")
        for line in _report(times, order):
            print(line)
        print()
        print("detect: 20 suite images, one process, after a warm-up call; identify_grains: 2 maps x 100 grains "
              "(fcc, bcc); identify_families: 500 single grains; demo: whole survey subprocess (wall time).")
        print("The machine is shared with other jobs: absolute times drift from run to run; only the ratios "
              "measured within one run count. The per-repeat ratios show the noise.")
        return 0
    finally:
        if added:
            try:
                _git(repo, "worktree", "remove", "--force", str(base_tree))
            except subprocess.CalledProcessError:
                shutil.rmtree(base_tree, ignore_errors=True)
                _git(repo, "worktree", "prune")
        shutil.rmtree(scratch, ignore_errors=True)


def _stop_on_sigterm(signum, frame):
    raise KeyboardInterrupt(f"signal {signum}")


def main(argv: list[str] | None = None) -> int:
    parser = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    parser.add_argument("--base", default="d3fba99", help="revision to compare against (default d3fba99)")
    parser.add_argument("--repeats", type=int, default=5, help="measurements per tree and workload (default 5)")
    parser.add_argument("--worker", choices=sorted(WORKERS), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.worker:
        worker_main(args.worker)
        return 0
    if args.repeats < 1:
        parser.error("--repeats must be >= 1")
    signal.signal(signal.SIGTERM, _stop_on_sigterm)  # so that the worktree is removed on SIGTERM too
    try:
        return compare(args.base, args.repeats)
    except KeyboardInterrupt:
        print("stopped; the temporary worktree was removed", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
