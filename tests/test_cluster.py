"""Surveys on a Dask cluster (issue 15): same answers as the local run, resume, clear errors.

The reference for "same answers" is the embedded local run of the same job: the demo's
results.csv must come out byte for byte the same from a LocalCluster of two loopback workers
(results.csv has no time stamp field). The failure cases follow Dask's documented behaviour: a task
whose worker dies is retried up to ``distributed.scheduler.allowed-failures`` times and then fails
with ``KilledWorker`` (Dask documentation, "Worker failures"); the rest is common practice, no
source (atomic writes, resume, one clear line and exit code 2 for an unusable setting).

Most tests share one LocalCluster started here and reach it by its tcp:// address (the route of a
cluster a lab already runs); the demo test starts its own with ``--scheduler local:2``.
"""

from __future__ import annotations

import csv
import io
import json
import os
import re
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest

from tracefit.demo import demo_job_path
from tracefit.errors import TracefitInputError
from tracefit.survey import parse_job, run_survey
from tracefit.survey.scheduler import choose_scheduler, parse_scheduler

ROOT = Path(__file__).resolve().parents[1]
HAVE_DASK = True
try:
    import distributed  # noqa: F401
except ImportError:  # the local route needs no Dask; these tests do
    HAVE_DASK = False
needs_dask = pytest.mark.skipif(not HAVE_DASK, reason="dask.distributed not installed (pip install 'tracefit[cluster]')")


# --------------------------------------------------------------------------- fakes run on the workers
def _log(im, what: str = "") -> None:
    with open(im.file.parent / "calls.log", "a", encoding="utf-8") as f:
        f.write(im.name + what + "\n")


def raising_analyse(im):
    """The survey tests' fake analysis, with one image that raises an ordinary bug."""
    from test_survey import fake_analyse

    if im.name.startswith("boom"):
        _log(im)
        raise RuntimeError("deliberate bug in this image")
    return fake_analyse(im)


def dying_analyse(im):
    """Kills its worker process outright on the image named 'die' (as an out-of-memory kill would)."""
    from test_survey import fake_analyse

    if im.name == "die":
        _log(im)
        os._exit(3)
    return fake_analyse(im)


_REAL_OPEN = None


def _deny_reads(prefix: str) -> None:
    """On a worker: reading files under ``prefix`` fails, as on a node that does not mount that disk."""
    import builtins

    global _REAL_OPEN
    _REAL_OPEN = _REAL_OPEN or builtins.open

    def guarded(file, *a, **k):
        if str(file).startswith(prefix):
            raise PermissionError(13, "Permission denied", str(file))
        return _REAL_OPEN(file, *a, **k)

    builtins.open = guarded


def _allow_reads() -> None:
    import builtins

    if _REAL_OPEN is not None:
        builtins.open = _REAL_OPEN


# --------------------------------------------------------------------------- helpers
JOB = """title = "Cluster test"
[defaults]
lattice = "fcc"
modes = ["slip"]
"""


def _fake_job(tmp_path: Path, names: list[str]) -> Path:
    body = JOB + "".join(f'\n[[image]]\nname = "{n}"\nfile = "{n}.png"\neuler_deg = [{7 * i}, {5 * i}, {3 * i}]\n'
                         for i, n in enumerate(names))
    p = tmp_path / "job.toml"
    p.write_text(body, encoding="utf-8")
    for n in names:
        (tmp_path / f"{n}.png").write_bytes(b"not read by the fake analysis")
    return p


def _calls(tmp_path: Path) -> list[str]:
    p = tmp_path / "calls.log"
    return p.read_text().split() if p.exists() else []


@pytest.fixture(scope="module")
def cluster_address():
    """A LocalCluster of two one-thread workers on loopback, reached by address like any scheduler."""
    if not HAVE_DASK:
        pytest.skip("dask.distributed not installed")
    import logging

    import dask
    from distributed import LocalCluster

    # one task per one-thread worker at a time, as tracefit's own local:N does; the retry limit is
    # deliberately left at Dask's default (3): the survey sets it to 2 on the scheduler it is given
    with dask.config.set({"distributed.scheduler.worker-saturation": 1.0}):
        cluster = LocalCluster(n_workers=2, threads_per_worker=1, processes=True, host="127.0.0.1",
                               dashboard_address=None, silence_logs=logging.CRITICAL)
    try:
        yield cluster.scheduler_address
    finally:
        cluster.close()


# --------------------------------------------------------------------------- where it runs (no Dask needed)
def test_scheduler_choice_order_and_bad_values():
    env = {"TRACEFIT_SCHEDULER": "tcp://from-env:8786"}
    assert choose_scheduler("local:3", "tcp://from-job:8786", env).local_workers == 3
    assert choose_scheduler(None, "tcp://from-job:8786", env).address == "tcp://from-job:8786"
    assert choose_scheduler(None, None, env).address == "tcp://from-env:8786"
    assert not choose_scheduler(None, None, {}).uses_dask
    assert not choose_scheduler("none", "tcp://from-job:8786", env).uses_dask
    assert not choose_scheduler(None, "tcp://from-job:8786", env, workers_given=True).uses_dask
    for bad in ("localhost", "local:", "local:x", "http://x:1", ""):
        with pytest.raises(TracefitInputError, match="scheduler address|at least one"):
            parse_scheduler(bad)


def test_job_file_run_table_is_checked_with_its_line():
    base = 'title = "t"\n[run]\nscheduler = "SCHED"\n[[image]]\nname = "a"\nfile = "a.png"\nlattice = "fcc"\neuler_deg = [0, 0, 0]\n'
    assert parse_job(base.replace("SCHED", " tcp://lab-head:8786 ")).scheduler == "tcp://lab-head:8786"
    assert parse_job(base.replace("SCHED", "local:4")).scheduler == "local:4"
    with pytest.raises(TracefitInputError, match=r"line 3: field 'run.scheduler' is not valid"):
        parse_job(base.replace("SCHED", "lab-head:8786"))
    with pytest.raises(TracefitInputError, match=r"line 3: field 'run.schedular' is not a known field; did you mean 'scheduler'"):
        parse_job(base.replace("scheduler =", "schedular ="))


def test_workers_and_a_scheduler_together_are_one_line(tmp_path, run_cli):
    job = _fake_job(tmp_path, ["one"])
    code, _, err = run_cli("survey", str(job), "--out", str(tmp_path / "out"), "--workers", "2", "--scheduler", "local:2")
    assert code == 2 and err.count("\n") == 1 and "--workers" in err and "--scheduler" in err
    code, _, err = run_cli("survey", str(job), "--out", str(tmp_path / "out"), "--scheduler", "dask-head")
    assert code == 2 and err.count("\n") == 1 and "not a scheduler address" in err


@pytest.mark.parametrize("how", ["option", "environment"])
def test_without_dask_a_scheduler_says_what_to_install(tmp_path, run_cli, monkeypatch, how):
    monkeypatch.setitem(sys.modules, "distributed", None)  # import distributed now raises ImportError
    job = _fake_job(tmp_path, ["one"])
    args = ["survey", str(job), "--out", str(tmp_path / "out")]
    if how == "option":
        args += ["--scheduler", "local:2"]
    else:
        monkeypatch.setenv("TRACEFIT_SCHEDULER", "tcp://127.0.0.1:8786")
    code, out, err = run_cli(*args)
    assert code == 2 and out == "" and err.count("\n") == 1
    assert "pip install 'tracefit[cluster]'" in err and "Traceback" not in err
    assert not (tmp_path / "out").exists()  # checked before anything is written


# --------------------------------------------------------------------------- on a cluster
def _marked(mark: str) -> list[int]:
    """Processes started with TRACEFIT_TEST_MARK=mark (the stop tests' finder)."""
    from test_survey_stop import _marked_processes

    return _marked_processes(mark)


@needs_dask
@pytest.mark.skipif(sys.platform != "linux", reason="reads /proc to find left-over processes")
def test_demo_on_a_local_cluster_matches_the_local_run_even_when_the_client_is_killed(tmp_path, run_cli):
    # The local reference: the embedded default, in this process.
    code, _, err = run_cli("survey", str(demo_job_path()), "--out", str(tmp_path / "local"), "--workers", "1", "--quiet")
    assert code == 0, err
    reference = (tmp_path / "local" / "results.csv").read_bytes()

    # The same job on two loopback Dask workers, the client killed (SIGKILL) after its first record.
    out = tmp_path / "cluster"
    mark = uuid.uuid4().hex
    env = dict(os.environ, TRACEFIT_TEST_MARK=mark, MPLBACKEND="Agg",
               PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""))
    client = subprocess.Popen([sys.executable, "-m", "tracefit", "survey", str(demo_job_path()), "--out", str(out),
                               "--scheduler", "local:2", "--quiet"], env=env, stdout=subprocess.DEVNULL,
                              stderr=subprocess.PIPE, text=True)
    deadline = time.monotonic() + 240
    while time.monotonic() < deadline and client.poll() is None and not list((out / "images").glob("*.json")):
        time.sleep(0.05)
    assert client.poll() is None, client.stderr.read()
    client.send_signal(signal.SIGKILL)
    client.wait()
    client.stderr.close()
    done_before = {p.stem: p.stat().st_mtime_ns for p in (out / "images").glob("*.json")}
    assert 1 <= len(done_before) < 4
    deadline = time.monotonic() + 30  # the workers notice their parent is gone and end
    while _marked(mark) and time.monotonic() < deadline:
        time.sleep(0.2)
    assert not _marked(mark), "Dask worker processes outlived the killed client"

    code, stdout, err = run_cli("survey", str(demo_job_path()), "--out", str(out), "--scheduler", "local:2", "--resume")
    assert code == 0, err
    assert f"({len(done_before)} resumed)" in stdout
    assert {p: (out / "images" / f"{p}.json").stat().st_mtime_ns for p in done_before} == done_before
    assert (out / "results.csv").read_bytes() == reference
    assert re.search(r"survey \[[#-]+\] [234]/4  \d+\.\d\d img/s, \d+s left", err), err  # the bar: rate, time left
    run = json.loads((out / "results.json").read_text())["run"]
    assert run["where"] == "dask" and run["local_cluster"] and run["workers"] == 2
    assert run["scheduler"].startswith("tcp://127.0.0.1:")
    page = (out / "report.html").read_text(encoding="utf-8")
    assert "Dask scheduler" in page and "2 worker(s)" in page
    # every figure the records name came back from the workers
    for rec in json.loads((out / "results.json").read_text())["images"]:
        assert (out / "images" / rec["figures"]["overlay"]).stat().st_size > 1000


@needs_dask
def test_a_task_that_raises_is_a_failed_image_as_in_the_local_run(tmp_path, cluster_address):
    job = parse_job(_fake_job(tmp_path, ["one", "boom-two", "three"]).read_text(), tmp_path / "job.toml")
    local = run_survey(job, tmp_path / "local", workers=1, progress=False, analyse=raising_analyse, figures=False)
    res = run_survey(job, tmp_path / "out", scheduler=cluster_address, progress=False, analyse=raising_analyse,
                     figures=False)
    assert [r["status"] for r in res.records] == ["ok", "failed", "ok"] and res.exit_code == 1
    assert "RuntimeError: deliberate bug in this image" in res.records[1]["error"]
    assert (tmp_path / "out" / "results.csv").read_bytes() == (tmp_path / "local" / "results.csv").read_bytes()
    assert local.run["where"] == "local processes" and res.run["scheduler"] == cluster_address
    rows = list(csv.DictReader(io.StringIO((tmp_path / "out" / "results.csv").read_text())))
    assert [r["status"] for r in rows if r["image"] == "boom-two"] == ["failed"]


@needs_dask
def test_a_dying_worker_is_retried_twice_then_the_image_fails(tmp_path, cluster_address):
    job = parse_job(_fake_job(tmp_path, ["one", "die", "three"]).read_text(), tmp_path / "job.toml")
    res = run_survey(job, tmp_path / "out", scheduler=cluster_address, progress=False, analyse=dying_analyse,
                     figures=False)
    assert [r["status"] for r in res.records] == ["ok", "failed", "ok"]
    assert "worker died" in res.records[1]["error"] and "3 times" in res.records[1]["error"]
    assert _calls(tmp_path).count("die") == 3  # the first attempt and two retries, no more
    assert json.loads((tmp_path / "out" / "images" / "die.json").read_text())["status"] == "failed"
    # the scheduler's own setting is put back after the run
    from distributed import Client

    with Client(cluster_address) as c:
        assert c.run_on_scheduler(lambda dask_scheduler: dask_scheduler.allowed_failures) == 3


@needs_dask
def test_resume_through_the_cluster_redoes_only_what_is_missing(tmp_path, cluster_address):
    names = ["one", "boom-two", "three", "four"]
    job = parse_job(_fake_job(tmp_path, names).read_text(), tmp_path / "job.toml")
    first = parse_job(_fake_job(tmp_path, names[:3]).read_text(), tmp_path / "job.toml")  # a partial run
    out = tmp_path / "out"
    run_survey(first, out, scheduler=cluster_address, progress=False, analyse=raising_analyse, figures=False)
    stamps = {n: (out / "images" / f"{n}.json").stat().st_mtime_ns for n in ("one", "three")}
    (tmp_path / "calls.log").unlink(missing_ok=True)
    res = run_survey(job, out, scheduler=cluster_address, progress=False, analyse=raising_analyse, figures=False,
                     resume=True)
    assert sorted(res.reused) == ["one", "three"]
    assert sorted(_calls(tmp_path)) == ["boom-two", "four"]  # the failed image and the new one, nothing else
    assert res.records[3]["status"] == "ok" and res.run["images_run"] == 2
    assert {n: (out / "images" / f"{n}.json").stat().st_mtime_ns for n in stamps} == stamps


@needs_dask
def test_a_worker_that_cannot_read_an_input_is_one_line_before_any_work(tmp_path, cluster_address, run_cli):
    from distributed import Client

    img_dir = tmp_path / "mounted-here-only"
    img_dir.mkdir()
    job = _fake_job(img_dir, ["one", "three"])
    with Client(cluster_address) as c:
        c.run(_deny_reads, str(img_dir))
        try:
            code, out, err = run_cli("survey", str(job), "--out", str(tmp_path / "out"), "--scheduler", cluster_address)
        finally:
            c.run(_allow_reads)
    assert code == 2 and out == "" and err.count("\n") == 1, err
    assert "cannot read" in err and str(img_dir / "one.png") in err and "same paths" in err
    assert not list((tmp_path / "out" / "images").glob("*.json"))  # nothing ran


@needs_dask
def test_an_unreachable_scheduler_is_one_line(tmp_path, run_cli, monkeypatch):
    import socket

    import tracefit.survey.cluster as cluster

    monkeypatch.setattr(cluster, "CONNECT_TIMEOUT_S", 2.0)

    with socket.socket() as s:  # a loopback port nobody listens on
        s.bind(("127.0.0.1", 0))
        port = s.getsockname()[1]
    job = _fake_job(tmp_path, ["one"])
    code, _, err = run_cli("survey", str(job), "--out", str(tmp_path / "out"), "--scheduler", f"tcp://127.0.0.1:{port}")
    assert code == 2 and err.count("\n") == 1 and "cannot reach the Dask scheduler" in err


def _free_port() -> int:
    import socket

    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _start_scheduler_and_worker(port: int, log_dir: Path) -> list[subprocess.Popen]:
    """A real `dask scheduler` and one `dask worker` on loopback, as a lab would run them."""
    env = dict(os.environ, PYTHONPATH=os.pathsep.join([str(ROOT), str(ROOT / "tests"), os.environ.get("PYTHONPATH", "")]))
    addr = f"tcp://127.0.0.1:{port}"
    log = open(log_dir / f"dask-{time.time_ns()}.log", "w")
    sched = subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_scheduler", "--host", "127.0.0.1",
                              "--port", str(port), "--dashboard-address", ":0", "--no-show"],
                             stdout=log, stderr=log, env=env, start_new_session=True)
    deadline = time.monotonic() + 60
    import socket

    while time.monotonic() < deadline:
        try:
            socket.create_connection(("127.0.0.1", port), timeout=0.5).close()
            break
        except OSError:
            time.sleep(0.2)
    worker = subprocess.Popen([sys.executable, "-m", "distributed.cli.dask_worker", addr, "--nthreads", "1",
                               "--nworkers", "1", "--dashboard-address", ":0", "--no-dashboard"],
                              stdout=log, stderr=log, env=env, start_new_session=True)
    return [sched, worker]


def _stop(procs: list[subprocess.Popen], sig=signal.SIGKILL) -> None:
    for p in procs:
        try:
            os.killpg(p.pid, sig)
        except (ProcessLookupError, PermissionError):
            pass
    for p in procs:
        try:
            p.wait(timeout=30)
        except subprocess.TimeoutExpired:  # pragma: no cover
            pass


@needs_dask
def test_a_restarted_scheduler_loses_and_repeats_nothing(tmp_path):
    # the scheduler dies mid-run (SIGKILL, it and its worker); the survey stops with one line; a new
    # scheduler on the same address and --resume finish the job with the local run's results.csv
    names = [f"img{i}" for i in range(8)]
    job = parse_job(_fake_job(tmp_path, names).read_text(), tmp_path / "job.toml")
    reference = run_survey(job, tmp_path / "local", workers=1, progress=False, analyse=slow_analyse, figures=False)
    assert reference.exit_code == 0
    port = _free_port()
    addr = f"tcp://127.0.0.1:{port}"
    out = tmp_path / "out"
    code = ("import sys; sys.path[:0] = [{root!r}, {tests!r}]\n"
            "from tracefit.survey import parse_job, run_survey\n"
            "from test_cluster import slow_analyse\n"
            "from pathlib import Path\n"
            "job = parse_job(Path({job!r}).read_text(), Path({job!r}))\n"
            "res = run_survey(job, {out!r}, scheduler={addr!r}, progress=False, analyse=slow_analyse, figures=False,"
            " resume=len(sys.argv) > 1)\n"
            "sys.exit(res.exit_code)\n").format(root=str(ROOT), tests=str(ROOT / "tests"), job=str(tmp_path / "job.toml"),
                                                 out=str(out), addr=addr)
    procs = _start_scheduler_and_worker(port, tmp_path)
    try:
        client = subprocess.Popen([sys.executable, "-c", code], stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                                  text=True)
        deadline = time.monotonic() + 120
        while time.monotonic() < deadline and client.poll() is None and len(list((out / "images").glob("*.json"))) < 2:
            time.sleep(0.05)
        assert client.poll() is None, client.stderr.read()
        _stop(procs)  # the scheduler and its worker are gone
        _, err = client.communicate(timeout=120)
        assert client.returncode != 0
        # the library raises its input error (the command line prints it as one line, exit 2)
        assert err.strip().splitlines()[-1].startswith("tracefit.errors.TracefitInputError: lost the Dask scheduler"), err
        assert "--resume" in err
        done_before = {p.stem: p.stat().st_mtime_ns for p in (out / "images").glob("*.json")}
        assert 2 <= len(done_before) < len(names)
        procs = _start_scheduler_and_worker(port, tmp_path)  # restarted, same address
        again = subprocess.run([sys.executable, "-c", code, "resume"], capture_output=True, text=True, timeout=240)
        assert again.returncode == 0, again.stderr
    finally:
        _stop(procs)
    # nothing lost (every image), nothing repeated (records finished before are untouched)
    assert {p: (out / "images" / f"{p}.json").stat().st_mtime_ns for p in done_before} == done_before
    assert (out / "results.csv").read_bytes() == (tmp_path / "local" / "results.csv").read_bytes()


def slow_analyse(im):
    """The survey tests' fake analysis, a quarter of a second per image (time to stop the scheduler mid-run)."""
    from test_survey import fake_analyse

    time.sleep(0.25)
    return fake_analyse(im)
