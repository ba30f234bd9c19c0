"""The survey report in a real headless browser (Chromium from the system packages).

The browser is driven over the Chrome DevTools Protocol on a pipe (``--remote-debugging-pipe``:
commands on fd 3, replies on fd 4, each JSON message ended by a NUL byte), so no websocket
package is needed. Console errors, uncaught exceptions and browser log errors (failed loads,
content-security-policy violations) are collected while the page loads; then the page is asked
whether every <img> decoded and how many rows each candidate table has.

The test skips, saying why, when no chromium binary is installed (``.ci/run`` installs it).
"""

from __future__ import annotations

import fcntl
import json
import os
import shutil
import subprocess
import threading
import time
from html.parser import HTMLParser
from pathlib import Path

import numpy as np
import pytest

CHROMIUM = next((p for p in (shutil.which("chromium"), shutil.which("chromium-browser"), shutil.which("google-chrome"))
                 if p), None)
pytestmark = pytest.mark.skipif(CHROMIUM is None, reason="chromium is not installed (apt-get install chromium); .ci/run installs it")


class Browser:
    """A headless Chromium driven over the DevTools protocol on a pipe."""

    def __init__(self, profile_dir: Path, timeout_s: float = 60.0):
        self.timeout = timeout_s
        r_cmd, w_cmd = os.pipe()  # we write commands, the browser reads them on fd 3
        r_ev, w_ev = os.pipe()  # the browser writes on fd 4, we read
        # move the child's ends above fd 10 so the dup2 onto 3 and 4 cannot clobber them
        child_in = fcntl.fcntl(r_cmd, fcntl.F_DUPFD_CLOEXEC, 10)
        child_out = fcntl.fcntl(w_ev, fcntl.F_DUPFD_CLOEXEC, 10)
        os.close(r_cmd)
        os.close(w_ev)

        def _fds():  # runs in the child before exec; dup2 makes 3 and 4 inheritable
            os.dup2(child_in, 3)
            os.dup2(child_out, 4)

        args = [
            CHROMIUM, "--headless", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
            "--disable-background-networking", "--disable-component-update", "--disable-sync",
            "--disable-dev-shm-usage", "--remote-debugging-pipe", f"--user-data-dir={profile_dir}",
            "--window-size=1280,1000", "about:blank",
        ]
        self.proc = subprocess.Popen(args, stdin=subprocess.DEVNULL, stdout=subprocess.DEVNULL,
                                     stderr=subprocess.DEVNULL, preexec_fn=_fds, close_fds=False)
        os.close(child_in)
        os.close(child_out)
        self._w = os.fdopen(w_cmd, "wb", buffering=0)
        self._r = os.fdopen(r_ev, "rb", buffering=0)
        self._next_id = 0
        self._replies: dict[int, dict] = {}
        self.events: list[dict] = []
        self._cv = threading.Condition()
        self._reader = threading.Thread(target=self._read_loop, daemon=True)
        self._reader.start()

    def _read_loop(self):
        buf = b""
        while True:
            chunk = self._r.read(65536)
            if not chunk:
                break
            buf += chunk
            while b"\0" in buf:
                raw, buf = buf.split(b"\0", 1)
                msg = json.loads(raw.decode("utf-8"))
                with self._cv:
                    if "id" in msg:
                        self._replies[msg["id"]] = msg
                    else:
                        self.events.append(msg)
                    self._cv.notify_all()

    def send(self, method: str, params: dict | None = None, session: str | None = None) -> dict:
        self._next_id += 1
        mid = self._next_id
        msg = {"id": mid, "method": method, "params": params or {}}
        if session:
            msg["sessionId"] = session
        self._w.write(json.dumps(msg).encode("utf-8") + b"\0")
        deadline = time.monotonic() + self.timeout
        with self._cv:
            while mid not in self._replies:
                left = deadline - time.monotonic()
                if left <= 0 or self.proc.poll() is not None:
                    raise RuntimeError(f"no reply from chromium to {method}")
                self._cv.wait(min(left, 0.5))
            reply = self._replies.pop(mid)
        if "error" in reply:
            raise RuntimeError(f"{method} failed: {reply['error']}")
        return reply.get("result", {})

    def wait_event(self, method: str, session: str | None = None) -> dict:
        deadline = time.monotonic() + self.timeout
        with self._cv:
            while True:
                for ev in self.events:
                    if ev.get("method") == method and (session is None or ev.get("sessionId") == session):
                        return ev
                left = deadline - time.monotonic()
                if left <= 0:
                    raise RuntimeError(f"chromium sent no {method} event")
                self._cv.wait(min(left, 0.5))

    def open(self, url: str) -> str:
        """Open ``url`` in a new page; return its session id once the load event fired."""
        target = self.send("Target.createTarget", {"url": "about:blank"})["targetId"]
        session = self.send("Target.attachToTarget", {"targetId": target, "flatten": True})["sessionId"]
        for domain in ("Runtime", "Log", "Page"):
            self.send(f"{domain}.enable", session=session)
        self.send("Page.navigate", {"url": url}, session=session)
        self.wait_event("Page.loadEventFired", session)
        return session

    def evaluate(self, session: str, expression: str):
        r = self.send("Runtime.evaluate", {"expression": expression, "returnByValue": True}, session=session)
        if "exceptionDetails" in r:
            raise RuntimeError(f"page script failed: {r['exceptionDetails']}")
        return r["result"].get("value")

    def errors(self, session: str) -> list[str]:
        """Console errors, uncaught exceptions and error-level browser log entries of a page."""
        out = []
        for ev in list(self.events):
            if ev.get("sessionId") != session:
                continue
            m, p = ev.get("method"), ev.get("params", {})
            if m == "Runtime.consoleAPICalled" and p.get("type") in ("error", "assert"):
                out.append("console: " + " ".join(str(a.get("value", a.get("description", ""))) for a in p.get("args", [])))
            elif m == "Runtime.exceptionThrown":
                out.append("exception: " + str(p.get("exceptionDetails", {}).get("text")))
            elif m == "Log.entryAdded" and p.get("entry", {}).get("level") == "error":
                e = p["entry"]
                out.append(f"log ({e.get('source')}): {e.get('text')} {e.get('url', '')}")
        return out

    def close(self):
        try:
            self.send("Browser.close")
        except Exception:
            pass
        try:
            self.proc.wait(timeout=10)
        except subprocess.TimeoutExpired:
            self.proc.kill()
            self.proc.wait()
        for f in (self._w, self._r):
            try:
                f.close()
            except OSError:
                pass


@pytest.fixture(scope="module")
def browser(tmp_path_factory):
    b = Browser(tmp_path_factory.mktemp("chromium-profile"))
    try:
        yield b
    finally:
        b.close()


_PAGE_STATE = """JSON.stringify({
  images: Array.from(document.images).map(i => ({alt: i.alt, complete: i.complete, w: i.naturalWidth, h: i.naturalHeight})),
  candidates: Array.from(document.querySelectorAll('table.candidates')).map(t => ({
      image: t.dataset.image, family: t.dataset.family, rows: t.tBodies[0].rows.length,
      planes: Array.from(t.tBodies[0].rows).map(r => r.cells[1].textContent)})),
  families: Array.from(document.querySelectorAll('table.families')).map(t => ({image: t.dataset.image, rows: t.tBodies[0].rows.length})),
  summaryRows: document.querySelector('table.summary').tBodies[0].rows.length,
  caution: (document.getElementById('caution') || {}).textContent || '',
  scripts: document.scripts.length
})"""


def _fake_survey(tmp_path):
    """A small survey with a fake analysis (two images ok, one failed) and its report."""
    from tracefit.survey import parse_job
    from tracefit.survey import run_survey
    from test_survey import fake_analyse  # the same fake the survey tests use

    text = (
        'title = "Browser check"\n[defaults]\nlattice = "fcc"\nload = "y"\n'
        '[[image]]\nname = "one"\nfile = "one.png"\neuler_deg = [0, 0, 0]\n'
        '[[image]]\nname = "two"\nfile = "two.png"\neuler_deg = [10, 20, 30]\n'
        '[[image]]\nname = "bad-three"\nfile = "three.png"\neuler_deg = [0, 0, 0]\n'
    )
    job = parse_job(text, tmp_path / "job.toml")
    return run_survey(job, tmp_path / "out", workers=1, progress=False, analyse=fake_analyse)


def test_report_loads_clean_with_every_image_and_expected_rows(browser, tmp_path):
    res = _fake_survey(tmp_path)
    session = browser.open(res.report_path.resolve().as_uri())
    state = json.loads(browser.evaluate(session, _PAGE_STATE))
    assert browser.errors(session) == []
    # every figure decoded: overlay, rose and one stereogram per ok image
    n_expected_imgs = sum(2 + len(r["figures"]["stereograms"]) for r in res.records if r["status"] == "ok")
    assert len(state["images"]) == n_expected_imgs == 6
    assert all(i["complete"] and i["w"] > 0 and i["h"] > 0 for i in state["images"]), state["images"]
    # one candidate table per family, each with one row per listed candidate
    expect = [(r["name"], f"F{f['index']}", len(f["identification"]["candidates"]))
              for r in res.records if r["status"] == "ok" for f in r["families"]]
    got = [(t["image"], t["family"], t["rows"]) for t in state["candidates"]]
    assert got == expect
    assert [t["rows"] for t in state["families"]] == [len(r["families"]) for r in res.records if r["status"] == "ok"]
    assert state["summaryRows"] == 3
    assert "never replaces" in state["caution"]
    assert state["scripts"] == 0


def test_browser_check_catches_errors_and_broken_images(browser, tmp_path):
    # Negative control: the harness must see a console error, an exception and a broken image.
    page = tmp_path / "bad.html"
    page.write_text(
        "<!DOCTYPE html><html><body><img alt='broken' src='data:image/png;base64,AAAA'>"
        "<table class='summary'><tbody></tbody></table>"
        "<script>console.error('deliberate'); undefinedFunction();</script></body></html>",
        encoding="utf-8",
    )
    session = browser.open(page.resolve().as_uri())
    state = json.loads(browser.evaluate(session, _PAGE_STATE))
    errs = browser.errors(session)
    assert any("deliberate" in e for e in errs)
    assert any(e.startswith("exception") for e in errs)
    assert state["images"][0]["w"] == 0
