"""Stopping a survey: Ctrl-C (SIGINT) and ``kill PID`` (SIGTERM) stop it cleanly and resumably.

After the stop no process of the run is left (workers and their fork server included), no
temporary file remains, and ``--resume`` finishes with the same results.csv as a run that was
never interrupted (the atomic-write and resume design; common practice, no source).
"""

from __future__ import annotations

import os
import signal
import subprocess
import sys
import time
import uuid
from pathlib import Path

import pytest

from tracefit.demo import demo_dir

pytestmark = pytest.mark.skipif(sys.platform != "linux", reason="reads /proc to find left-over processes")

ROOT = Path(__file__).resolve().parents[1]


def _job(tmp_path: Path, n: int = 16) -> Path:
    # enough images that the run is still going when the signal comes (one takes ~0.3 s)
    d = demo_dir()
    parts = ['title = "stop test"\n[defaults]\nlattice = "fcc"\nmodes = ["slip"]\n']
    for i in range(n):
        parts.append(f'[[image]]\nname = "a{i}"\nfile = "{d / "coupon_A.png"}"\neuler_deg = [263, 50, 135]\n')
    job = tmp_path / "job.toml"
    job.write_text("\n".join(parts), encoding="utf-8")
    return job


def _env(mark: str) -> dict:
    env = dict(os.environ, TRACEFIT_TEST_MARK=mark, MPLBACKEND="Agg")
    env["PYTHONPATH"] = str(ROOT) + os.pathsep + env.get("PYTHONPATH", "")
    return env


def _default_sigint() -> None:
    # A shell's background job (and so a test run started with '&') inherits SIGINT ignored, and a
    # program that starts with SIGINT ignored rightly keeps ignoring it (as under nohup): give the
    # survey the terminal's default, as when a person presses Ctrl-C.
    signal.signal(signal.SIGINT, signal.SIG_DFL)


def _survey(job: Path, out: Path, mark: str, *extra: str) -> subprocess.Popen:
    return subprocess.Popen([sys.executable, "-m", "tracefit", "survey", str(job), "--out", str(out), "--workers", "2",
                             "--quiet", *extra], env=_env(mark), stdout=subprocess.PIPE, stderr=subprocess.PIPE,
                            text=True, preexec_fn=_default_sigint)


def _marked_processes(mark: str) -> list[int]:
    found = []
    for p in Path("/proc").iterdir():
        if not p.name.isdigit():
            continue
        try:
            if f"TRACEFIT_TEST_MARK={mark}".encode() in (p / "environ").read_bytes().split(b"\0"):
                found.append(int(p.name))
        except OSError:
            continue
    return found


@pytest.mark.parametrize("sig", [signal.SIGINT, signal.SIGTERM], ids=["SIGINT", "SIGTERM"])
def test_a_stopped_survey_leaves_nothing_behind_and_resumes(tmp_path, sig):
    job = _job(tmp_path)
    out = tmp_path / "out"
    mark = uuid.uuid4().hex
    proc = _survey(job, out, mark)
    deadline = time.time() + 120
    while time.time() < deadline and not list((out / "images").glob("a*.json")):
        time.sleep(0.05)
    assert list((out / "images").glob("a*.json")), "no image finished in time"
    proc.send_signal(sig)
    _, err = proc.communicate(timeout=30)
    assert proc.returncode == 130, err
    assert "--resume" in err and "Traceback" not in err
    deadline = time.time() + 10
    while _marked_processes(mark) and time.time() < deadline:
        time.sleep(0.1)
    assert _marked_processes(mark) == []
    assert not list(out.rglob("*.tmp")) and not (out / ".survey.lock").exists()
    done_before = len(list((out / "images").glob("a*.json")))
    assert done_before < 8  # it really stopped early

    again = _survey(job, out, mark, "--resume")
    _, err = again.communicate(timeout=300)
    assert again.returncode == 0, err
    clean = _survey(job, tmp_path / "clean", mark)
    _, err = clean.communicate(timeout=300)
    assert clean.returncode == 0, err
    assert (out / "results.csv").read_bytes() == (tmp_path / "clean" / "results.csv").read_bytes()


def test_a_second_survey_on_the_same_folder_refuses(tmp_path, run_cli):
    out = tmp_path / "out"
    (out / "images").mkdir(parents=True)
    holder = subprocess.Popen([sys.executable, "-c", "import time; time.sleep(30)"])
    try:
        (out / ".survey.lock").write_text(f"{holder.pid}\n")
        code, _, err = run_cli("survey", str(_job(tmp_path, 1)), "--out", str(out))
        assert code == 2 and f"another survey (process {holder.pid})" in err and err.count("\n") == 1
    finally:
        holder.kill()
        holder.wait()
    # a stale lock (its process gone) is taken over; temporaries of a crashed run are removed
    (out / "images" / ".a0.json.abcd.tmp").write_text("half")
    code, _, err = run_cli("survey", str(_job(tmp_path, 1)), "--out", str(out), "--workers", "1", "--quiet")
    assert code == 0, err
    assert not list(out.rglob("*.tmp"))


def test_output_folder_faults_are_one_line(tmp_path, run_cli):
    job = _job(tmp_path, 1)
    a_file = tmp_path / "existing.png"
    a_file.write_bytes(b"x")
    code, _, err = run_cli("survey", str(job), "--out", str(a_file))
    assert code == 2 and "is an existing file" in err and err.count("\n") == 1
    if os.geteuid() != 0:  # root writes anywhere: the read-only case cannot be staged as root
        ro = tmp_path / "ro"
        ro.mkdir()
        ro.chmod(0o500)
        code, _, err = run_cli("survey", str(job), "--out", str(ro / "out"))
        assert code == 2 and err.count("\n") == 1


def test_a_full_disk_at_the_final_write_is_one_line_and_keeps_the_images(tmp_path, run_cli, monkeypatch):
    # Issue 16 item 1: a full disk during the results/report write gave a 50-80-line traceback.
    import errno

    import tracefit.survey.runner as runner

    def full(*a, **k):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(runner, "write_results_csv", full)
    out = tmp_path / "out"
    code, _, err = run_cli("survey", str(_job(tmp_path, 1)), "--out", str(out), "--workers", "1", "--quiet")
    assert code == 2 and err.count("\n") == 1 and "No space left on device" in err and "--resume" in err
    assert (out / "images" / "a0.json").is_file()  # the finished image is kept


def test_a_read_only_output_folder_is_one_line(tmp_path, run_cli, monkeypatch):
    # Issue 16 item 1 (staged with os.access, since the tests may run as root, who writes anywhere)
    import tracefit.survey.guard as guard

    real_access = os.access
    ro = tmp_path / "ro"
    monkeypatch.setattr(guard.os, "access",
                        lambda path, mode, **kw: False if str(path).startswith(str(ro)) else real_access(path, mode, **kw))
    code, _, err = run_cli("survey", str(_job(tmp_path, 1)), "--out", str(ro))
    assert code == 2 and err.count("\n") == 1 and "not writable" in err
