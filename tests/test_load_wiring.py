"""Loads from the command line and the job file: the frame they are given in, stress tensors, CRSS.

Outside checks: Schmid's law m = (l . n)(l . d) and tau = n . sigma . d, with the plane normal
and direction turned into the sample frame by scipy's Rotation (R = from_euler("ZXZ", Bunge)
is crystal -> sample, ../shared/conventions.md); the frame rotation rho turns data axes into
image axes (v_image = Rz(rho) v_data).
"""

from __future__ import annotations

import csv
import json
import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.survey import parse_job

EULER = (10.0, 20.0, 30.0)


def _best(run_cli, *args):
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", ",".join(map(str, EULER)), "--modes", "slip",
                             "--angle", "73.2", *args, "--json")
    assert code == 0, err
    d = json.loads(out)
    return d, d["families"][0]["candidates"][0]


def test_an_image_frame_load_follows_the_picture_not_the_data(run_cli):
    # With the data frame turned 90 deg on the picture, the picture's vertical (image y) is the
    # data's x axis: "y in the image frame" and "x in the sample frame" are the same load.
    d_img, c_img = _best(run_cli, "--frame-rotation", "90", "--angle", "163.3", "--load", "y")
    d_smp, c_smp = _best(run_cli, "--frame-rotation", "90", "--angle", "163.3", "--load", "x", "--load-frame", "sample")
    assert d_img["load"]["frame"] == "image" and d_smp["load"]["frame"] == "sample"
    assert c_img["plane"] == c_smp["plane"]
    assert c_img["best_system"]["schmid_factor"] == pytest.approx(c_smp["best_system"]["schmid_factor"], abs=1e-9)
    # and the value is Schmid's law for the data's x axis
    R = Rotation.from_euler("ZXZ", EULER, degrees=True)
    n = R.apply(np.array(c_img["plane"], float) / np.linalg.norm(c_img["plane"]))
    dvec = R.apply(np.array(c_img["best_system"]["direction"], float) / np.linalg.norm(c_img["best_system"]["direction"]))
    m = abs(n[0] * dvec[0])
    assert c_img["best_system"]["schmid_factor"] == pytest.approx(m, abs=1e-3)


def test_a_stress_tensor_gives_resolved_shear_and_the_crss_check(run_cli):
    d, c = _best(run_cli, "--stress", "0,100,0,0,0,0", "--crss", "{111}=20")
    assert d["load"]["voigt_mpa"] == [0, 100, 0, 0, 0, 0]
    bs = c["best_system"]
    R = Rotation.from_euler("ZXZ", EULER, degrees=True)
    n = R.apply(np.array(c["plane"], float) / np.linalg.norm(c["plane"]))
    dv = R.apply(np.array(bs["direction"], float) / np.linalg.norm(bs["direction"]))
    sigma = np.diag([0.0, 100.0, 0.0])
    assert abs(bs["resolved_shear"]) == pytest.approx(abs(n @ sigma @ dv), abs=1e-3)
    assert bs["crss"] == 20.0 and bs["exceeds_crss"] == (abs(bs["resolved_shear"]) >= 20.0)


def test_the_text_output_states_the_load_and_its_frame(run_cli):
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "10,20,30", "--angle", "73.2", "--load", "y")
    assert code == 0 and "load: y tension (image frame)" in out


@pytest.mark.parametrize("load,expect", [
    ('load = { axis = "y", frame = "sample" }', ("y", "tension", "sample", None)),
    ('load = { stress = [0, 100, 0, 0, 0, 0] }', (None, "tension", "image", (0.0, 100.0, 0.0, 0.0, 0.0, 0.0))),
    ('load = "x"', ("x", "tension", "image", None)),
])
def test_job_file_loads(load, expect):
    job = parse_job(f'[[image]]\nname = "a"\nfile = "a.png"\nlattice = "fcc"\neuler_deg = [0, 0, 0]\n{load}\n', "/x/j.toml")
    im = job.images[0]
    assert (im.load, im.load_sense, im.load_frame, im.load_stress) == expect


@pytest.mark.parametrize("load,words", [
    ('load = { axis = "y", frame = "lab" }', ["load.frame", '"image"']),
    ('load = { stress = [1, 2, 3] }', ["load.stress", "six numbers"]),
    ('load = { stress = [1, 2, 3, 4, 5, 6], axis = "y" }', ["load.stress", "not both"]),
])
def test_bad_job_file_loads_name_the_field_and_line(load, words):
    with pytest.raises(TracefitInputError) as ei:
        parse_job(f'[[image]]\nname = "a"\nfile = "a.png"\nlattice = "fcc"\neuler_deg = [0, 0, 0]\n{load}\n', "/x/j.toml")
    msg = str(ei.value)
    assert "line 6" in msg
    for w in words:
        assert w in msg


def test_results_csv_states_the_load_and_the_resolved_shear(tmp_path):
    from tracefit.demo import demo_dir
    from tracefit.survey import run_survey

    job = parse_job(f'[[image]]\nname = "a"\nfile = "{demo_dir() / "coupon_A.png"}"\nlattice = "fcc"\nmodes = ["slip"]\n'
                    f'euler_deg = [263, 50, 135]\nload = {{ stress = [0, 150, 0, 0, 0, 0] }}\n'
                    f'match = {{ p_none = 0.05 }}\n', tmp_path / "j.toml")
    res = run_survey(job, tmp_path / "out", workers=1, progress=False, figures=False, report=False)
    rows = list(csv.DictReader(open(res.csv_path, newline="")))
    assert len(rows) == 2
    for r in rows:
        assert r["load"] == "stress s22 = 150 MPa (image frame)"
        assert float(r["resolved_shear_mpa"]) != 0 and math.isfinite(float(r["resolved_shear_mpa"]))
        assert r["modes"].startswith("slip")


def test_the_report_shows_resolved_shear_the_crss_check_and_the_mode_split(tmp_path):
    from tracefit.demo import demo_dir
    from tracefit.survey import run_survey

    job = parse_job(f'[[image]]\nname = "a"\nfile = "{demo_dir() / "coupon_A.png"}"\nlattice = "fcc"\n'
                    f'euler_deg = [263, 50, 135]\nload = {{ stress = [0, 150, 0, 0, 0, 0] }}\n', tmp_path / "j.toml")
    res = run_survey(job, tmp_path / "out", workers=1, progress=False, figures=False, report=True)
    html = res.report_path.read_text(encoding="utf-8")
    assert "resolved shear (MPa) / CRSS" in html and "stress s22 = 150 MPa (image frame)" in html
    import re

    # fcc {111} planes carry both slip and twinning: the row is the plane, the split is shown inside it
    assert re.search(r"(slip|twin) [01]\.\d\d / (twin|slip) [01]\.\d\d", html)
