"""One chain: ``tracefit identify``, ``tracefit survey`` and ``tracefit.analyse_image`` agree.

For the same image and settings the three entry points must give the same planes with the
same probabilities (to 1e-9): they all run :func:`tracefit.pipeline.analyse_image`. Checked on
the three bundled demo coupons and on coupon B with a per-grain orientation uncertainty of
8 deg in its orientation table (the case where the survey once ignored the table's sigma).
The planes themselves are checked against the drawn truth in tests/test_demo.py.
"""

from __future__ import annotations

import json
import shutil

import numpy as np
import pytest

import tracefit as tf
from tracefit.demo import demo_dir, demo_job_path
from tracefit.survey import load_job, run_survey

# The CLI flags that say what each demo image's [[image]] table says (tracefit/data/demo/job.toml).
CLI_ARGS = {
    "coupon-A": ["--lattice", "fcc", "--modes", "slip", "--load", "y", "--euler", "263,50,135"],
    "coupon-B": ["--lattice", "bcc", "--modes", "slip", "--families", "{110}<111>,{112}<111>", "--load", "y",
                 "--grains", "{dir}/coupon_B_labels.png", "--orientations", "{dir}/coupon_B_grains.csv"],
    "coupon-C": ["--lattice", "hcp", "--c-over-a", "1.587", "--modes", "twin", "--families", "{10-12},{11-21}",
                 "--load", "x", "--compression", "--euler", "250,22,84"],
}


def _planes_and_probabilities(identifications):
    """(grain, rounded angle, plane, probability) of every listed candidate, in order."""
    out = []
    for ident in identifications:
        for c in ident["candidates"]:
            out.append((ident.get("grain"), round(ident["angle_deg"], 6), tuple(c["plane"]), c["probability"]))
        out.append((ident.get("grain"), round(ident["angle_deg"], 6), "none", ident["p_none"]))
    return out


def _assert_same(a, b):
    assert len(a) == len(b) and len(a) > 0
    for x, y in zip(a, b):
        assert x[:3] == y[:3]
        assert abs(x[3] - y[3]) <= 1e-9, (x, y)


def _cli(run_cli, name, folder):
    args = [a.replace("{dir}", str(folder)) for a in CLI_ARGS[name]]
    code, out, err = run_cli("identify", str(folder / f"{name.replace('coupon-', 'coupon_')}.png"),
                             "--pixel-size", "0.5", *args, "--json")
    assert code == 0, err
    return json.loads(out)["families"]


def _survey(job, out):
    res = run_survey(job, out, workers=1, progress=False, figures=False, report=False)
    return {r["name"]: [f["identification"] for f in r["families"]] for r in res.records}


def _api(im):
    from tracefit.survey.runner import chain_inputs

    kw = chain_inputs(im)
    res = tf.analyse_image(im.file, kw.pop("lattice"), **kw)
    return [f.to_dict() for f in res.families]


@pytest.fixture(scope="module")
def demo_survey(tmp_path_factory):
    job = load_job(demo_job_path())
    return job, _survey(job, tmp_path_factory.mktemp("survey") / "out")


@pytest.mark.parametrize("name", ["coupon-A", "coupon-B", "coupon-C"])
def test_identify_survey_and_api_agree_on_the_demo(name, demo_survey, run_cli):
    job, by_name = demo_survey
    im = next(i for i in job.images if i.name == name)
    cli = _planes_and_probabilities(_cli(run_cli, name, demo_dir()))
    survey = _planes_and_probabilities(by_name[name])
    api = _planes_and_probabilities(_api(im))
    _assert_same(cli, survey)
    _assert_same(cli, api)


def test_the_survey_honours_the_tables_per_grain_sigma(tmp_path, run_cli):
    # Coupon B again, with sigma_deg = 8 for both grains in its orientation table.
    for p in demo_dir().iterdir():
        shutil.copy(p, tmp_path / p.name)
    table = tmp_path / "coupon_B_grains.csv"
    lines = table.read_text().splitlines()
    table.write_text("\n".join([lines[0] + ",sigma_deg"] + [ln + ",8" for ln in lines[1:]]) + "\n")
    job = load_job(tmp_path / "job.toml")
    survey = _planes_and_probabilities(_survey(job, tmp_path / "out")["coupon-B"])
    cli = _planes_and_probabilities(_cli(run_cli, "coupon-B", tmp_path))
    _assert_same(cli, survey)
    # ... and the wider sigma really reached the matcher: the same families with sigma 1 deg differ.
    sharp = _planes_and_probabilities(_cli(run_cli, "coupon-B", demo_dir()))
    assert [x[:2] for x in sharp] != [] and any(
        abs(a[3] - b[3]) > 1e-3 for a, b in zip(sharp, cli) if a[:3] == b[:3])


def test_one_set_of_defaults():
    # The identify command's defaults and the job file's are the library's (tracefit.options).
    from tracefit.options import DEFAULT_MODES, defaults
    from tracefit.survey import parse_job

    job = parse_job('[[image]]\nname = "a"\nfile = "a.png"\nlattice = "fcc"\neuler_deg = [0, 0, 0]\n', "/x/job.toml")
    assert job.images[0].modes == DEFAULT_MODES == ("slip", "twin")
    assert job.images[0].match == {} and defaults("identify")["orientation_sigma_deg"] == 1.0
    res = tf.analyse_image(np.zeros((64, 64)) + np.arange(64)[None, :], "fcc", orientation=np.eye(3))
    assert res.settings["modes"] == ["slip", "twin"] and res.settings["min_grain_px"] == 300


def test_the_matchers_own_defaults_are_the_declared_ones():
    # One set of defaults: the matcher's keyword defaults equal the settings declared in tracefit.options.
    import inspect

    from tracefit.matching import identify_families, identify_grains
    from tracefit.options import defaults

    declared = {**defaults("identify")}
    for func in (identify_families, identify_grains):
        params = inspect.signature(func).parameters
        for name, value in declared.items():
            if name in params:
                assert params[name].default == value, (func.__name__, name)
