"""docs/examples/orientation_map.py runs as it is and finds the grains it drew.

The script writes its scan with orix's .ang writer; here the grain orientations it prints are
compared with the ones it put in (rebuilt from the same seeded generator), by orix's
misorientation under cubic symmetry (outside check).
"""

import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]
pytest.importorskip("orix")


def test_orientation_map_example(tmp_path):
    env = dict(os.environ, PYTHONPATH=str(ROOT) + os.pathsep + os.environ.get("PYTHONPATH", ""), MPLBACKEND="Agg")
    proc = subprocess.run([sys.executable, str(ROOT / "docs" / "examples" / "orientation_map.py"), str(tmp_path)],
                          capture_output=True, text=True, env=env, cwd=str(tmp_path), timeout=300)
    assert proc.returncode == 0, proc.stderr
    assert "grains found: 7, in the micrograph: 7" in proc.stdout
    for name in ("scan.ang", "micrograph.png", "points.csv", "registration.png", "grains.csv", "labels.tif"):
        assert (tmp_path / name).stat().st_size > 0
    residuals = [float(v) for v in proc.stdout.split("residuals px: ")[1].split("\n")[0].split()]
    assert len(residuals) == 4 and max(residuals) < 0.5
    from orix.quaternion import Orientation
    from orix.quaternion.symmetry import get_point_group

    from tracefit.maps import read_orientation_table

    truth = np.random.default_rng(2026).uniform([0, 0, 0], [360, 180, 360], size=(7, 3))  # as the script draws them
    found = np.array([go.euler_deg for go in read_orientation_table(tmp_path / "grains.csv").values()])
    cubic = get_point_group(225)
    ang = np.degrees(Orientation.from_euler(np.radians(found), cubic).angle_with_outer(
        Orientation.from_euler(np.radians(truth), cubic)))
    assert np.all(ang.min(axis=1) < 0.1) and len(set(ang.argmin(axis=1))) == 7
