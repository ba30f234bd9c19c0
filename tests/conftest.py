"""Shared test helpers."""

from __future__ import annotations

import pytest


@pytest.fixture
def run_cli(capsys):
    """Run the tracefit command line in-process: returns (exit_code, stdout, stderr)."""
    from tracefit.cli import main

    def _run(*args: str):
        code = main(list(args))
        out, err = capsys.readouterr()
        return code, out, err

    return _run
