"""Where the tests find the real micrographs of ``../shared/realdata`` (never copied into the repository).

``TRACEFIT_REALDATA`` names another folder; a test that needs an absent image skips, naming it
and its origin (a fresh clone has no such folder).
"""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pytest

REALDATA = Path(os.environ.get("TRACEFIT_REALDATA", Path(__file__).resolve().parents[2] / "shared" / "realdata"))


def real_image(name: str, origin: str) -> np.ndarray:
    """The grey image of ``name`` (a path under the folder), or a skip naming it and its ``origin``."""
    from tracefit.image import read_image

    if not (REALDATA / name).is_file():
        pytest.skip(f"real image {name} ({origin}) not available")
    return read_image(str(REALDATA / name))[0]
