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
3. ``demo``: ``python -m tracefit survey JOB --out TMP --workers 1 --quiet`` as a subprocess
   (interpreter start, imports and writing the report included), with JOB the base revision's
   own demo job file in both trees (the same three coupons: the current demo job has a fourth
   image, with an orientation map, that the base revision cannot read).

Two clocks: the CPU time of the measured process (``time.process_time`` in the worker, all
its threads; the rusage of the waited-for child for the demo) and the wall time
(``time.perf_counter``). The machine is shared (2 cores, other jobs running): wall times
there swing by a factor of two or more with the load, CPU times far less, so the CPU-time
ratio is the figure that counts. Before the timed repeats each tree runs once untimed (both
trees byte-compile, into a ``.pyc`` cache in the scratch folder, with byte-code writing on even
where the shell sets ``PYTHONDONTWRITEBYTECODE``; and orix fills its numba cache, kept per tree
in the scratch folder so that no other job's import can corrupt it).

Printed: per workload and clock the median time of each tree over the repeats, the ratio of
the medians new/old (target <= 1.0 within noise), the spread and the median of the
per-repeat ratios. Only ratios measured within one run count.

With ``--same-as REV`` the detect and identify results of the working tree are also compared
(untimed, exactly) with those of revision REV, e.g. ``--same-as HEAD`` to show that
uncommitted speed work changes no result.

Usage::

    python benchmarks/compare_revision.py                    # base d3fba99, 5 repeats, all workloads
    python benchmarks/compare_revision.py --repeats 9 --same-as HEAD --raw-out times.json
    python benchmarks/compare_revision.py --repeats 3 --base HEAD~1 --workloads detect
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
import resource
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
_SCRATCH = Path(tempfile.gettempdir())  # the driver's scratch folder (set by compare)


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
    t0, c0 = time.perf_counter(), time.process_time()
    results = [api["detect_bands"](im) for im in images]
    seconds = {"wall": time.perf_counter() - t0, "cpu": time.process_time() - c0}
    families = [[[float(f.angle_deg), int(f.n_bands)] for f in r.families] for r in results]
    # every field of every family and band line, to the last bit (for --same-as)
    full = [[repr(sorted((k, repr(v) if not isinstance(v, list) else [repr(vars(x)) for x in v])
                         for k, v in vars(f).items())) for f in r.families] for r in results]
    return {"timings": {"detect": seconds}, "input_digest": input_digest, "families": families,
            "families_digest": _digest(full)}


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


def _timed_median(call) -> tuple[dict, object]:
    """Median wall and CPU seconds of ``INNER_LOOPS`` calls (a sub-second workload: one call is too noisy),
    and the last result.

    The median also leaves out first-call costs such as lazy imports.
    """
    wall, cpu = [], []
    for _ in range(INNER_LOOPS):
        t0, c0 = time.perf_counter(), time.process_time()
        result = call()
        wall.append(time.perf_counter() - t0)
        cpu.append(time.process_time() - c0)
    return {"wall": statistics.median(wall), "cpu": statistics.median(cpu)}, result


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
    full = [repr(vars(r)) for res in map_results + single_results for r in res]
    return {
        "timings": {"identify_grains": t_grains, "identify_families": t_families},
        "input_digest": input_digest,
        "results_digest": _digest(full),
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
    # orix compiles with numba on import; a cache of our own per tree (next to the temporary
    # worktree) keeps other jobs' imports from corrupting it, and theirs from ours
    env["NUMBA_CACHE_DIR"] = str(_SCRATCH / f"numba-{hashlib.sha1(str(tree).encode()).hexdigest()[:8]}")
    # byte-code caching on, as in an installed copy: a PYTHONDONTWRITEBYTECODE=1 inherited from the
    # shell would make every measured start-up compile the tree's modules from source again (the new
    # tree has nearly three times as many). The .pyc files go to the scratch folder, so neither tree
    # gets __pycache__ folders; the untimed warm-up run writes them.
    env.pop("PYTHONDONTWRITEBYTECODE", None)
    env["PYTHONPYCACHEPREFIX"] = str(_SCRATCH / "pycache")
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


def _children_cpu() -> float:
    """User + system CPU seconds of all finished (waited-for) child processes so far."""
    ru = resource.getrusage(resource.RUSAGE_CHILDREN)
    return ru.ru_utime + ru.ru_stime


def _run_demo(tree: Path, scratch: Path, job: Path) -> dict:
    """Wall and CPU seconds of one demo survey subprocess (CPU from the rusage of waited-for children)."""
    out = Path(tempfile.mkdtemp(prefix="demo-", dir=scratch)) / "out"
    cmd = [sys.executable, "-m", "tracefit", "survey", str(job), "--out", str(out), "--workers", "1", "--quiet"]
    c0 = _children_cpu()
    t0 = time.perf_counter()
    proc = subprocess.run(cmd, cwd=tree, env=_tree_env(tree), capture_output=True, text=True,
                          timeout=SUBPROCESS_TIMEOUT_S)
    seconds = {"wall": time.perf_counter() - t0, "cpu": _children_cpu() - c0}
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


def _report(times: dict, order: list[str], measure: str) -> list[str]:
    """Table of one measure ("cpu" or "wall"): medians per tree, ratio of the medians, per-repeat ratio spread."""
    lines = [f"{'workload':<20}{'old median s':>14}{'new median s':>14}{'new/old':>10}{'per-repeat new/old':>22}"
             f"{'median of ratios':>18}"]
    for name in order:
        if name not in times:
            continue
        old = [t[measure] for t in times[name]["old"]]
        new = [t[measure] for t in times[name]["new"]]
        ratio = statistics.median(new) / statistics.median(old)
        per_repeat = [b / a for a, b in zip(old, new)]
        lines.append(f"{name:<20}{statistics.median(old):>14.3f}{statistics.median(new):>14.3f}{ratio:>10.3f}"
                     f"{_fmt_ratio_spread(per_repeat):>22}{statistics.median(per_repeat):>18.3f}")
    return lines


def _same_results(repo: Path, scratch: Path, rev: str, first: dict, workloads) -> list[str]:
    """Lines saying whether the working tree's results equal those of revision ``rev`` (untimed runs)."""
    sha = _git(repo, "rev-parse", "--short", rev + "^{commit}")
    tree = scratch / f"same-{sha}"
    _git(repo, "worktree", "add", "--detach", str(tree), sha)
    lines = []
    try:
        for workload, key in (("detect", "families_digest"), ("identify", "results_digest")):
            if workload not in workloads:
                continue
            ref, new = _run_worker(tree, workload), first[(workload, "new")]
            same = ref.get(key) == new.get(key) and ref["input_digest"] == new["input_digest"]
            what = ("every field of every family and band line" if workload == "detect"
                    else "every field of every identification (probabilities, candidates, notes)")
            lines.append(f"{workload} results of the working tree against {rev} = {sha}: "
                         f"{'IDENTICAL' if same else 'DIFFERENT'} ({what}, compared by digest: "
                         f"{ref.get(key)} vs {new.get(key)})")
    finally:
        try:
            _git(repo, "worktree", "remove", "--force", str(tree))
        except subprocess.CalledProcessError:
            shutil.rmtree(tree, ignore_errors=True)
            _git(repo, "worktree", "prune")
    return lines


def compare(base: str, repeats: int, workloads: tuple[str, ...] = ("detect", "identify", "demo"),
            raw_out: Path | None = None, same_as: str | None = None) -> int:
    repo = Path(_git(HERE, "rev-parse", "--show-toplevel"))
    base_sha = _git(repo, "rev-parse", "--short", base + "^{commit}")
    head_sha = _git(repo, "rev-parse", "--short", "HEAD")
    dirty = bool(_git(repo, "status", "--porcelain", "--untracked-files=no", "--", "tracefit"))
    global _SCRATCH
    scratch = _SCRATCH = Path(tempfile.mkdtemp(prefix="tracefit-compare-"))
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
        # the same demo job in both trees: the base revision's own (the current demo has more images)
        demo_job = base_tree / "tracefit" / "data" / "demo" / "job.toml"
        # untimed warm-up in each tree: byte-compiles the fresh worktree and fills each tree's numba cache,
        # so that no first-run cost lands on one side of a timed pair
        for label in ("old", "new"):
            if "demo" in workloads:
                _run_demo(trees[label], scratch, demo_job)
            if "identify" in workloads or "detect" in workloads:
                _run_worker(trees[label], "identify")
        if "demo" in workloads:
            print(f"demo job (both trees): {demo_job.relative_to(base_tree)} of the base revision")
        print("one untimed warm-up run per tree before the timed repeats")

        times: dict = {}
        first: dict = {}
        order = [n for n in ("detect", "identify_grains", "identify_families", "demo")
                 if n.split("_")[0] in workloads]
        for rep in range(repeats):
            for workload in [w for w in ("detect", "identify") if w in workloads]:
                for label in ("old", "new"):
                    res = _run_worker(trees[label], workload)
                    if rep == 0:
                        first[(workload, label)] = res
                        if workload == "detect":
                            print(f"{label} tree imports tracefit from {res['tracefit_file']}")
                    for name, sec in res["timings"].items():
                        times.setdefault(name, {"old": [], "new": []})[label].append(sec)
            if "demo" in workloads:
                for label in ("old", "new"):
                    times.setdefault("demo", {"old": [], "new": []})[label].append(_run_demo(trees[label], scratch, demo_job))
            done = ", ".join(f"{n} {times[n]['old'][-1]['cpu']:.2f}/{times[n]['new'][-1]['cpu']:.2f}" for n in order)
            print(f"repeat {rep + 1}/{repeats} CPU s (old/new): {done}", flush=True)

        print()
        if "detect" in workloads:
            det_old, det_new = first[("detect", "old")], first[("detect", "new")]
            same_images = det_old["input_digest"] == det_new["input_digest"]
            print(f"detect inputs: {'same images' if same_images else 'DIFFERENT images'} in both trees "
                  f"(digest {det_new['input_digest']}); " + _compare_families(det_old["families"], det_new["families"]))
        if "identify" in workloads:
            idf_old, idf_new = first[("identify", "old")], first[("identify", "new")]
            print(f"identify inputs: {'same' if idf_old['input_digest'] == idf_new['input_digest'] else 'DIFFERENT'}"
                  f" observed angles in both trees (digest {idf_new['input_digest']}); "
                  + _compare_verdicts(idf_old["verdicts"], idf_new["verdicts"]))
        if same_as:
            for line in _same_results(repo, scratch, same_as, first, workloads):
                print(line)
        for measure, title in (("cpu", "CPU time (process_time of the measured process; the figure that counts)"),
                               ("wall", "wall time (perf_counter; noisier on a shared machine)")):
            print()
            print(f"{title}: median over {repeats} repeats; new/old = median(new) / median(old), "
                  f"target <= 1.0 within noise")
            for line in _report(times, order, measure):
                print(line)
        print()
        print("detect: 20 suite images, one process, after a warm-up call; identify_grains: 2 maps x 100 grains "
              "(fcc, bcc); identify_families: 500 single grains (both: median of 5 calls in the process); demo: "
              "whole survey subprocess (CPU from the child's rusage, interpreter start and imports included).")
        print("CPU time counts the work of the measured process (all its threads) and is much less disturbed by "
              "other jobs on the machine than wall time; only ratios measured within one run count.")
        if raw_out is not None:
            raw_out.write_text(json.dumps({"base": base_sha, "head": head_sha, "dirty": dirty, "times": times}, indent=1))
            print(f"raw times written to {raw_out}")
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
    parser.add_argument("--workloads", default="detect,identify,demo",
                        help="comma-separated subset of detect, identify, demo (default all three)")
    parser.add_argument("--raw-out", type=Path, help="also write every measurement to this JSON file")
    parser.add_argument("--same-as", metavar="REV",
                        help="also check that the working tree's detect and identify results equal those of REV")
    parser.add_argument("--worker", choices=sorted(WORKERS), help=argparse.SUPPRESS)
    args = parser.parse_args(argv)
    if args.worker:
        worker_main(args.worker)
        return 0
    if args.repeats < 1:
        parser.error("--repeats must be >= 1")
    workloads = tuple(w.strip() for w in args.workloads.split(",") if w.strip())
    if not workloads or any(w not in ("detect", "identify", "demo") for w in workloads):
        parser.error("--workloads takes a comma-separated subset of detect, identify, demo")
    signal.signal(signal.SIGTERM, _stop_on_sigterm)  # so that the worktree is removed on SIGTERM too
    try:
        return compare(args.base, args.repeats, workloads, args.raw_out, args.same_as)
    except KeyboardInterrupt:
        print("stopped; the temporary worktree was removed", file=sys.stderr)
        return 130


if __name__ == "__main__":
    sys.exit(main())
