"""``tracefit map-grains``: the map summary, the check figure, the label-image route's files, bad input.

The map is written by orix's .ang writer (outside check: orix's writer and reader); the grain
orientations written to the table are compared with the truth by orix's misorientation.
"""

from __future__ import annotations

import numpy as np
import pytest

import tracefit.cli.maps  # noqa: F401  (registers the command until the lead lists the module)
from tracefit.cli import main
from tracefit.maps import grain_quaternions, read_label_image, read_orientation_table, synthetic_crystal_map, voronoi_labels

orix_io = pytest.importorskip("orix.io")


@pytest.fixture()
def scan(tmp_path):
    lab = voronoi_labels((30, 40), 4, seed=6)
    euler = np.random.default_rng(6).uniform([0, 0, 0], [360, 180, 360], size=(4, 3))
    path = tmp_path / "scan.ang"
    orix_io.save(str(path), synthetic_crystal_map(grain_quaternions(lab, euler, noise_deg=0.3, seed=6), step=1.0))
    import cv2

    picture = (np.random.default_rng(0).random((150, 200)) * 255).astype(np.uint8)
    cv2.imwrite(str(tmp_path / "micro.png"), picture)
    cp = tmp_path / "points.csv"
    # map scaled 5x onto the picture: map (c, r) -> image (5c + 2, 5r + 2)
    cp.write_text("image_x,image_y,map_x,map_y\n2,2,0,0\n197,2,39,0\n2,147,0,29\n102,77,20,15\n")
    return path, euler, lab


def test_summary_of_the_map_alone(scan, capsys):
    path, _, _ = scan
    assert main(["map-grains", str(path)]) == 0
    out = capsys.readouterr().out
    assert "40 x 30 points, step 1 x 1 um" in out and "grains found: 4" in out and "'ni'" in out


def test_registration_figure_table_and_labels(scan, tmp_path, capsys):
    path, euler, lab = scan
    fig, tab, labs = tmp_path / "check.png", tmp_path / "grains.csv", tmp_path / "labels.tif"
    code = main(["map-grains", str(path), "--image", str(tmp_path / "micro.png"), "--control-points",
                 str(tmp_path / "points.csv"), "--figure", str(fig), "--table-out", str(tab), "--labels-out", str(labs),
                 "--json"])
    assert code == 0
    import json

    out = json.loads(capsys.readouterr().out)
    assert out["map"]["grains_in_image"] == 4 and max(out["residuals_px"]) < 0.5
    assert fig.read_bytes()[:4] == b"\x89PNG"
    warped = read_label_image(labs)
    assert warped.shape == (150, 200)
    # label image at a map point's centre pixel (5c + 2, 5r + 2) carries that point's grain
    table = read_orientation_table(tab)
    from orix.quaternion import Orientation as OrixOrientation
    from orix.quaternion.symmetry import get_point_group

    for gid, go in table.items():
        rr, cc = np.nonzero(warped == gid)
        truth = np.bincount(lab[(rr - 2) // 5, (cc - 2) // 5].ravel()).argmax()
        ang = OrixOrientation.from_euler(np.radians(go.euler_deg), get_point_group(225)).angle_with(
            OrixOrientation.from_euler(np.radians(euler[truth]), get_point_group(225)))
        assert np.degrees(ang[0]) < 0.1 and go.sigma_deg == pytest.approx(0.3, abs=0.08)


@pytest.mark.parametrize("extra, match", [
    (["--phase", "ferrite"], "phase 'ferrite' is not in orientation map"),
    (["--registration", "projective"], "needs at least 4 control points, got 3"),
])
def test_bad_input_one_line_exit_2(scan, tmp_path, capsys, extra, match):
    path, _, _ = scan
    (tmp_path / "three.csv").write_text("image_x,image_y,map_x,map_y\n2,2,0,0\n197,2,39,0\n2,147,0,29\n")
    code = main(["map-grains", str(path), "--image", str(tmp_path / "micro.png"), "--control-points",
                 str(tmp_path / "three.csv"), "--figure", str(tmp_path / "c.png")] + extra)
    err = capsys.readouterr().err.strip().splitlines()
    assert code == 2 and err[-1].startswith("tracefit: error: ") and match in err[-1]


def test_options_needing_the_picture(scan, capsys):
    path, _, _ = scan
    assert main(["map-grains", str(path), "--control-points", "p.csv"]) == 2
    assert "need the micrograph" in capsys.readouterr().err
