"""``tracefit predict`` and ``tracefit systems`` on the command line.

Expected angles are the worked vectors of ../shared/conventions.md (specification); Schmid
factors are the fcc textbook values (Hosford, Mechanical Behavior of Materials; Dieter,
Mechanical Metallurgy; from memory).
"""

import json
import math

import pytest

from tracefit.conventions import axial_difference


def _traces_by_plane(out):
    data = json.loads(out)
    return data, {tuple(t["plane"]): t for t in data["traces"]}


def _find(traces, plane):
    # a plane and its negative are one trace
    neg = tuple(-x for x in plane)
    return traces.get(tuple(plane)) or traces.get(neg)


def test_predict_json_worked_vector(run_cli):
    code, out, err = run_cli("predict", "--lattice", "fcc", "--euler", "0,45,0", "--json")
    assert code == 0, err
    data, traces = _traces_by_plane(out)
    assert len(data["traces"]) == 4
    t = _find(traces, (1, -1, 1))
    assert abs(axial_difference(t["angle_deg"], 35.264)) < 1e-3  # spec
    assert t["inclination_deg"] == pytest.approx(90.0, abs=1e-3)
    t = _find(traces, (1, 1, 1))
    assert abs(axial_difference(t["angle_deg"], 90.0)) < 1e-3 and t["inclination_deg"] == pytest.approx(35.264, abs=1e-3)
    for t in data["traces"]:
        assert t["family"] == "{111}" and t["modes"] == ["slip", "twin"]
        assert all(set(s) >= {"direction", "mode"} and "schmid_factor" not in s for s in t["systems"])
        assert all(isinstance(x, int) for x in t["plane"])


def test_predict_json_hexagonal_with_frame_rotation(run_cli):
    # Spec: hcp c/a 1.587, Euler (40, 60, 10): (10-12) at 90.844 deg; frame rotation adds rho.
    code, out, err = run_cli(
        "predict", "--lattice", "hcp", "--c-over-a", "1.587", "--euler", "40,60,10", "--modes", "twin", "--families", "{10-12}",
        "--frame-rotation", "12.5", "--json",
    )
    assert code == 0, err
    data, traces = _traces_by_plane(out)
    t = _find(traces, (1, 0, -1, 2))
    assert abs(axial_difference(t["angle_deg"], 90.844 + 12.5)) < 1e-3
    assert t["inclination_deg"] == pytest.approx(41.865, abs=1e-3)
    assert len(t["plane"]) == 4 and t["modes"] == ["twin"]


def test_predict_tilt_in_json(run_cli):
    # fcc identity: (1-11) trace at 45 deg; 60 deg tilt about x -> 26.565 deg apparent (spec).
    code, out, err = run_cli("predict", "-l", "fcc", "-e", "0,0,0", "--tilt", "60", "--json")
    assert code == 0, err
    _, traces = _traces_by_plane(out)
    t = _find(traces, (1, -1, 1))
    assert t["true_angle_deg"] == pytest.approx(45.0, abs=1e-9)
    assert t["angle_deg"] == pytest.approx(26.565, abs=1e-3)


@pytest.mark.parametrize(
    "orient",
    [
        ("--euler", "0,0,0"),
        ("--quaternion", "1,0,0,0"),
        ("--matrix", "1,0,0,0,1,0,0,0,1"),
        ("--axis-angle", "0,0,1,0"),
        ("--align", "[001]:z,[100]:x"),
    ],
)
def test_orientation_inputs_agree(run_cli, orient):
    code, out, err = run_cli("predict", "--lattice", "fcc", *orient, "--json")
    assert code == 0, err
    _, traces = _traces_by_plane(out)
    assert _find(traces, (1, 1, 1))["angle_deg"] == pytest.approx(135.0)  # spec
    assert _find(traces, (1, -1, 1))["angle_deg"] == pytest.approx(45.0)


def test_axis_angle_equals_euler_convention(run_cli):
    # Rowenhorst P = +1: Bunge (30, 0, 0) is the axis-angle pair ([00-1], 30); (111) -> 165 deg (spec).
    code, out, _ = run_cli("predict", "-l", "fcc", "--axis-angle", "0,0,-1,30", "--json")
    _, traces = _traces_by_plane(out)
    assert _find(traces, (1, 1, 1))["angle_deg"] == pytest.approx(165.0)


def test_predict_with_load_json_schmid(run_cli):
    # Identity orientation, tension along sample z = crystal [001]: max m 0.408 (textbook).
    code, out, err = run_cli("predict", "-l", "fcc", "-e", "0,0,0", "--load", "z", "--modes", "slip", "--json")
    assert code == 0, err
    data = json.loads(out)
    ms = [s["schmid_factor"] for t in data["traces"] for s in t["systems"]]
    assert max(ms) == pytest.approx(1 / math.sqrt(6), abs=1e-9)
    assert sum(abs(m - 1 / math.sqrt(6)) < 1e-9 for m in ms) == 8


def test_predict_human_table(run_cli):
    code, out, err = run_cli("predict", "-l", "bcc", "-e", "10,20,30", "--modes", "slip", "--families", "{110}<111>")
    assert code == 0, err
    assert "174.08" in out or "174.09" in out  # (110) trace, spec 174.085
    assert "(110)" in out


def test_systems_with_crystal_load(run_cli):
    code, out, err = run_cli("systems", "--lattice", "fcc", "--modes", "slip", "--load", "[111]", "--json")
    assert code == 0, err
    rows = json.loads(out)["systems"]
    assert len(rows) == 12
    assert rows[0]["schmid_factor"] == pytest.approx(0.272, abs=5e-4)  # textbook, [111] tension
    assert sum(abs(r["schmid_factor"] - rows[0]["schmid_factor"]) < 1e-9 for r in rows) == 6
    assert [r["schmid_factor"] for r in rows] == sorted((r["schmid_factor"] for r in rows), reverse=True)


def test_systems_table_and_sample_load(run_cli):
    code, out, err = run_cli("systems", "-l", "fcc", "--modes", "slip", "--load", "z", "--euler", "0,0,0")
    assert code == 0, err
    assert "0.408" in out and "{111}<110>" in out
    code, out, err = run_cli("systems", "-l", "hcp", "--c-over-a", "1.624", "--modes", "twin", "--families", "{10-12}", "--load", "[0001]", "--compression", "--json")
    assert code == 0, err
    assert all(r["schmid_factor"] < 0 for r in json.loads(out)["systems"])  # c-axis compression: no extension twins


def test_systems_sample_load_needs_orientation(run_cli):
    code, out, err = run_cli("systems", "-l", "fcc", "--load", "x")
    assert code == 2 and out == ""
    assert len(err.strip().splitlines()) == 1 and "orientation" in err


def test_warnings_become_stderr_lines(run_cli):
    code, out, err = run_cli("predict", "-l", "hcp", "-e", "0.5,0.7,0.1", "--json")
    assert code == 0
    json.loads(out)  # stdout stays one clean JSON object
    lines = err.strip().splitlines()
    assert any("radians" in x for x in lines) and any("c/a" in x for x in lines)
    assert all(x.startswith("tracefit: warning:") for x in lines)


@pytest.mark.parametrize(
    "args, needle",
    [
        (("predict", "-l", "fcc", "--euler", "10,abc,30"), "Euler"),
        (("predict", "-l", "fcc", "--euler", "10,20"), "Euler"),
        (("predict", "-l", "fcc", "--matrix", "1,0,0,0,1,0,0,0.5,1"), "orthonormal"),
        (("predict", "-l", "fcc", "--matrix", "1,0,0,0,1,0,0,0,-1"), "improper"),
        (("predict", "-l", "diamondish", "--euler", "0,0,0"), "lattice"),
        (("predict", "-l", "fcc", "--euler", "0,0,0", "--load", "sideways"), "load"),
        (("predict", "-l", "fcc", "--euler", "0,0,0", "--quaternion", "1,0,0,0"), "exactly one"),
        (("predict", "-l", "fcc"), "exactly one"),
        (("predict", "-l", "fcc", "--quaternion", "0,0,0,0"), "zero"),
        (("predict", "-l", "fcc", "--align", "[001]:z,[002]:x"), "parallel"),
        (("predict", "-l", "fcc", "--euler", "0,0,0", "--tilt", "95"), "tilt"),
        (("predict", "-l", "fcc", "--euler", "0,0,0", "--modes", "glide"), "mode"),
        (("systems", "-l", "fcc", "--load", "[1-1"), "load axis"),
        (("systems",), "lattice"),
    ],
)
def test_bad_input_one_line_exit_2(run_cli, args, needle):
    code, out, err = run_cli(*args)
    assert code == 2
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith("tracefit: error:") and needle.lower() in lines[0].lower()
    assert "Traceback" not in err


def test_predict_crss_activation_stress(run_cli):
    # sigma = CRSS / m for the best system; identity orientation, z = [001]: m = 1/sqrt(6) (textbook).
    code, out, err = run_cli("predict", "-l", "fcc", "-e", "0,0,0", "--load", "z", "--modes", "slip", "--crss", "{111}=10", "--json")
    assert code == 0, err
    s = json.loads(out)["traces"][0]["systems"][0]
    assert s["activation_stress"] == pytest.approx(10.0 * math.sqrt(6), rel=1e-9)
    code, out, err = run_cli("predict", "-l", "fcc", "-e", "0,0,0", "--crss", "{111}=10")
    assert code == 2 and "--load" in err


def test_predict_with_systems_file(run_cli):
    # docs/examples/tin_systems.toml: beta-tin, tetragonal. Identity orientation: (001) lies in the
    # surface (inclination 0, flagged); (100) stands upright with its trace along y (90 deg) --
    # direct consequences of the trace definition (docs/conventions.md, section 7).
    from pathlib import Path

    f = Path(__file__).resolve().parents[1] / "docs" / "examples" / "tin_systems.toml"
    code, out, err = run_cli("predict", "--systems-file", str(f), "--euler", "0,0,0", "--json")
    assert code == 0, err
    data, traces = _traces_by_plane(out)
    assert data["lattice"]["name"] == "beta-tin"
    t001 = _find(traces, (0, 0, 1))
    assert t001["near_surface"] and t001["inclination_deg"] == pytest.approx(0.0, abs=1e-9)
    t100 = _find(traces, (1, 0, 0))
    assert t100["angle_deg"] == pytest.approx(90.0) and t100["inclination_deg"] == pytest.approx(90.0)
    code, out, err = run_cli("predict", "--systems-file", str(f), "--lattice", "fcc", "--euler", "0,0,0")
    assert code == 2 and "[lattice]" in err
