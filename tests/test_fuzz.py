"""Short seeded fuzz of the public API and the command line (issue 16, "Checks").

The generators are those of ``benchmarks/fuzz.py`` (run there with 10,000+ library calls and 400+
command lines); here about 500 library calls and 60 command lines, each seed fixed. The rules are
tracefit's own (common practice, no source): a library call returns or raises TracefitInputError,
never a NaN/None probability; a bad command line exits 2 with one ``tracefit: error:`` line.
"""

from __future__ import annotations

import importlib.util
import sys
from pathlib import Path

import pytest

_FUZZ = Path(__file__).resolve().parents[1] / "benchmarks" / "fuzz.py"


@pytest.fixture(scope="module")
def fuzz():
    spec = importlib.util.spec_from_file_location("tracefit_fuzz", _FUZZ)
    module = importlib.util.module_from_spec(spec)
    sys.modules[spec.name] = module  # dataclasses look their module up while the file runs
    spec.loader.exec_module(module)
    return module


@pytest.mark.parametrize("seed", [11, 12])
def test_library_fuzz_has_no_failures(fuzz, seed):
    tally = fuzz.run_library(250, seed)
    assert tally.calls == 250
    assert not tally.failures, fuzz.summary("library", tally)


def test_cli_fuzz_has_no_failures(fuzz):
    tally = fuzz.run_cli(60, 21)
    assert tally.calls == 60
    assert not tally.failures, fuzz.summary("command line", tally)


@pytest.mark.parametrize("name", ["bad_tif", "corrupt"])
def test_damaged_picture_gives_one_error_line(fuzz, tmp_path, name, caplog):
    # Outside pytest, a library's logged warning reaches stderr; pytest's log capture takes it
    # instead, so it is counted from caplog here.
    files = fuzz.make_files(tmp_path)
    code, _out, err, exc = fuzz.run_cli_call(["detect", str(files[name])] if name == "bad_tif"
                                             else ["identify", str(files[name]), "-l", "fcc", "-e", "35,20,60"])
    assert exc is None and code == 2
    logged = [r.getMessage() for r in caplog.records if not r.name.startswith("tracefit")]
    assert len([ln for ln in err.splitlines() if ln.strip()]) + len(logged) == 1, (err, logged)


def test_fuzz_judge_catches_a_traceback_and_noise(fuzz):
    # The checker itself must be able to fail: a raised exception and a native message are findings.
    assert fuzz.judge_cli(["detect"], "bad", None, "", "TypeError: x")[0] == "cli detect: traceback"
    assert fuzz.judge_cli(["detect"], "bad", 2, "libpng warning: x\ntracefit: error: y\n", None) is not None
    assert fuzz.judge_cli(["detect"], "any", 0, "[ WARN:0@1.0] global grfmt_png.cpp:1 x\n", None) is not None
    assert fuzz.judge_cli(["detect"], "bad", 2, "tracefit: error: y\n", None) is None
    assert fuzz.check_result(type("R", (), {"families": [type("F", (), {"p_none": float("nan"), "candidates": []})()]})())
