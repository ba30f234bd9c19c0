"""``tracefit identify`` from hand-measured traces (no image), cracks, and bad input.

The FCC Euler (0, 0, 0) cases use the worked vectors of docs/conventions.md ((111) trace at
135 deg, (1-11) at 45 deg): those are specification, not an outside source. The outside
check is the general orientation below, whose traces are predicted with scipy's Rotation
(``Rotation.from_euler("ZXZ", bunge)`` = crystal -> sample, see ../shared/conventions.md) and
turned into pixel endpoints by hand: a direction at angle a is (cos a, -sin a) in
(column, row) pixels, rows running down.
"""

import json
import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.crystal import lattice_preset

FCC = lattice_preset("fcc")
FCC_111 = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]


def same_plane(a, b):
    a, b = np.array(a), np.array(b)
    return bool(np.all(a == b) or np.all(a == -b))


def scipy_trace(bunge, plane):
    n_s = Rotation.from_euler("ZXZ", bunge, degrees=True).apply(FCC.plane_normal(plane))
    return (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0


def planes_of(fam):
    out = []
    for c in fam["candidates"]:
        if not any(same_plane(c["plane"], p) for p in out):
            out.append(tuple(c["plane"]))
    return out


def test_angles_only_cube_orientation_worked_vectors(run_cli):
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "0,0,0", "--modes", "slip",
                             "--angle", "135", "--angle", "45+-0.3", "--json")
    assert code == 0, err
    d = json.loads(out)
    f135, f45 = d["families"]
    # On the cube orientation (111) and (11-1) share the 135 deg trace, (1-11) and (1-1-1) the 45 deg one
    # (worked vectors, docs/conventions.md): each family is ambiguous between exactly those two.
    assert sorted(planes_of(f135)) == sorted([(1, 1, 1), (1, 1, -1)])
    assert sorted(planes_of(f45)) == sorted([(1, -1, 1), (1, -1, -1)])
    assert f135["ambiguous"] and f45["ambiguous"]
    assert f45["angle_sigma_deg"] == 0.3
    assert all(f["source"] == "measured" for f in d["families"])
    # angles typed on the command line involve no pixel rows (issue 16 item 8): say y up
    assert "y up" in d["measured"]["convention"] and "pixel rows" not in d["measured"]["convention"]


def test_measured_csv_end_to_end_general_orientation(run_cli, tmp_path):
    # Outside check: endpoints drawn from scipy-predicted traces, 300 px long, about a viewer point (400, 300).
    bunge = (20.0, 35.0, 60.0)
    rows = ["grain,x0,y0,x1,y1,label"]
    truth = [(1, 1, -1), (1, -1, 1), (1, -1, -1)]
    for p in truth:
        a = math.radians(scipy_trace(bunge, p) + 0.3)
        dc, dr = math.cos(a), -math.sin(a)  # rows run down: up the screen is -row
        rows.append(f"7,{400 - 150 * dc:.4f},{300 - 150 * dr:.4f},{400 + 150 * dc:.4f},{300 + 150 * dr:.4f},band")
    csv_path = tmp_path / "lines.csv"
    csv_path.write_text("\n".join(rows) + "\n")
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", ",".join(map(str, bunge)), "--modes", "slip",
                             "--measured", str(csv_path), "--json")
    assert code == 0, err
    d = json.loads(out)
    assert len(d["families"]) == 3
    for fam, p in zip(d["families"], truth):
        assert fam["source"] == "measured" and fam["grain"] == 7 and fam["label"] == "band"
        assert fam["angle_deg"] == pytest.approx(scipy_trace(bunge, p) + 0.3, abs=1e-3)
        assert same_plane(fam["candidates"][0]["plane"], p)
        assert fam["candidates"][0]["probability"] > 0.9
    assert d["measured"]["n_families"] == 3 and d["measured"]["file"] == str(csv_path)


def test_same_json_shape_as_image_identify(run_cli):
    from tracefit.demo import demo_dir

    img = str(demo_dir() / "coupon_A.png")
    base = ("identify", "--lattice", "fcc", "--euler", "263,50,135", "--modes", "slip", "--json")
    code, out, err = run_cli(*base, img)
    assert code == 0, err
    image_only = json.loads(out)
    code, out, err = run_cli(*base, "--angle", "100")
    assert code == 0, err
    measured_only = json.loads(out)
    code, out, err = run_cli(*base, img, "--angle", "100")
    assert code == 0, err
    both = json.loads(out)
    assert set(image_only) | {"measured"} == set(measured_only) == set(both)
    assert set(image_only["families"][0]) == set(measured_only["families"][0])
    assert [f["source"] for f in both["families"]] == ["detected"] * len(image_only["families"]) + ["measured"]


def test_crack_consistency_in_json_and_text(run_cli):
    bunge = (20.0, 35.0, 60.0)
    a = scipy_trace(bunge, (1, -1, 1))
    args = ("identify", "--lattice", "fcc", "--euler", "20,35,60", "--crack", f"{a + 0.5:.3f}:0.5")
    code, out, err = run_cli(*args, "--json")
    assert code == 0, err
    d = json.loads(out)
    (fam,) = d["families"]
    assert fam["crack"] is True and fam["source"] == "measured"
    assert [c["plane"] for c in fam["consistent_planes"]] == [[1, -1, 1]]
    assert sorted(tuple(c["plane"]) for c in fam["inconsistent_planes"]) == sorted([(1, 1, 1), (1, 1, -1), (1, -1, -1)])
    assert "caution" in d and d["measured"]["n_cracks"] == 1
    code, out, err = run_cli(*args)
    assert code == 0, err
    assert "crack consistent within 2 sigma with: (1-11)" in out
    assert "not consistent with: " in out and "(111)" in out.split("not consistent with: ")[1]
    assert "never replaces" in out  # tracefit.CAUTION


def test_crack_with_no_consistent_plane(run_cli):
    # 75 deg lies far from all four {111} traces of this orientation (32.2, 53.9, 98.7, 142.6 by scipy).
    preds = [scipy_trace((20.0, 35.0, 60.0), p) for p in FCC_111]
    assert min(abs((75.0 - p + 90) % 180 - 90) for p in preds) > 20
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "20,35,60", "--crack", "75", "--json")
    assert code == 0, err
    fam = json.loads(out)["families"][0]
    assert fam["consistent_planes"] == [] and len(fam["inconsistent_planes"]) == 4
    assert fam["unexplained"]


def test_per_grain_without_image(run_cli, tmp_path):
    b1, b2 = (20.0, 35.0, 60.0), (100.0, 50.0, 10.0)
    (tmp_path / "grains.csv").write_text(f"grain,phi1,Phi,phi2\n1,{b1[0]},{b1[1]},{b1[2]}\n2,{b2[0]},{b2[1]},{b2[2]}\n")
    (tmp_path / "lines.csv").write_text(
        f"grain,angle_deg,sigma_deg\n1,{scipy_trace(b1, (1, 1, -1)):.3f},0.3\n2,{scipy_trace(b2, (1, -1, 1)):.3f},0.3\n"
    )
    code, out, err = run_cli("identify", "--lattice", "fcc", "--modes", "slip", "--orientations", str(tmp_path / "grains.csv"),
                             "--measured", str(tmp_path / "lines.csv"), "--json")
    assert code == 0, err
    f1, f2 = json.loads(out)["families"]
    assert (f1["grain"], f2["grain"]) == (1, 2)
    assert same_plane(f1["candidates"][0]["plane"], (1, 1, -1))
    assert same_plane(f2["candidates"][0]["plane"], (1, -1, 1))


def test_folded_angle_is_said(run_cli):
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "0,0,0", "--angle=-45", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["families"][0]["angle_deg"] == 135.0
    assert any("folded to 135" in n for n in d["notes"])
    assert "folded to 135" in err


@pytest.mark.parametrize("body,words", [
    ("x0,y0,x1,y1,label\n10,10,10,10,band\n", ["row 2", "x0,y0,x1,y1", "coincide"]),
    ("x0,y0,x1,y1,label\n10,10,,20,band\n", ["row 2", "'x1'"]),
    ("angle_deg,label\n,crack\n", ["row 2", "'angle_deg'"]),
    ("grain,angle_deg\nA,30\n", ["row 2", "'grain'"]),
])
def test_bad_csv_exits_2_with_row_and_field(run_cli, tmp_path, body, words):
    p = tmp_path / "bad.csv"
    p.write_text(body)
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "0,0,0", "--measured", str(p))
    assert code == 2 and out == ""
    assert err.startswith("tracefit: error: ") and len(err.strip().splitlines()) == 1
    assert "Traceback" not in err
    for w in words:
        assert w in err


@pytest.mark.parametrize("args,words", [
    (("--euler", "0,0,0"), ["no image and no measured traces"]),
    (("--euler", "0,0,0", "--angle", "12..5"), ["--angle", "12..5"]),
    (("--euler", "0,0,0", "--crack", "x"), ["--crack"]),
    (("--euler", "0,0,0", "--angle", "30", "--overlay", "o.png"), ["--overlay", "IMAGE"]),
    (("--euler", "0,0,0", "--angle", "30", "--grains", "l.png"), ["--grains"]),
    (("--euler", "0,0,0", "--measured", "missing.csv"), ["not found"]),
    (("--euler", "0,0,0", "--crack", "30", "--crack-k-sigma", "0"), ["--crack-k-sigma", "> 0"]),
])
def test_bad_options_exit_2(run_cli, args, words):
    code, out, err = run_cli("identify", "--lattice", "fcc", *args)
    assert code == 2, (out, err)
    assert "Traceback" not in err
    for w in words:
        assert w in err


def test_table_needs_grain_ids_for_angles(run_cli, tmp_path):
    (tmp_path / "grains.csv").write_text("grain,phi1,Phi,phi2\n1,0,0,0\n")
    code, out, err = run_cli("identify", "--lattice", "fcc", "--orientations", str(tmp_path / "grains.csv"), "--angle", "30")
    assert code == 2 and "grain id" in err


def test_an_unexplained_family_shows_the_nearest_planes(run_cli):
    # Issue 16 item 7: a typo in the Euler angles must be told from a scratch: the nearest
    # predicted traces are listed with their distance in sigmas. At Bunge (35, 20, 60) the fcc
    # (111) trace is at 56.24 deg (Rotation.from_euler("ZXZ") of the normal, conventions doc).
    from scipy.spatial.transform import Rotation

    n = Rotation.from_euler("ZXZ", [35, 20, 60], degrees=True).apply(np.array([1.0, 1.0, 1.0]) / np.sqrt(3))
    t111 = (np.degrees(np.arctan2(n[1], n[0])) + 90) % 180
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "35,20,60", "--angle", "71", "--json")
    assert code == 0
    fam = json.loads(out)["families"][0]
    assert fam["unexplained"] and fam["candidates"] == []
    near = fam["nearest"][0]
    assert near["plane"] == [1, 1, 1] and abs(near["predicted_deg"] - t111) < 0.01
    assert near["n_sigma"] == pytest.approx(abs(71 - t111) / (abs(71 - t111) / near["n_sigma"]), rel=1e-6) and near["n_sigma"] > 3
    code, out, err = run_cli("identify", "--lattice", "fcc", "--euler", "35,20,60", "--angle", "71")
    assert "nearest predicted traces: (111) at 56.24 deg" in out
    assert "pixel rows" not in out


def test_identify_json_states_the_hexagonal_lattice(run_cli):
    # the lattice in --json is the one summary every command uses (c/a and setting for hexagonal)
    code, out, err = run_cli("identify", "--lattice", "hcp", "--c-over-a", "1.587", "--euler", "1,2,3", "--angle", "30",
                             "--json")
    lat = json.loads(out)["lattice"]
    assert code == 0 and lat["c_over_a"] == 1.587 and lat["hex_setting"] == "x-along-a1" and lat["laue"] == "6/mmm"
