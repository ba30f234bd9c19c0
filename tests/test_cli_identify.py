"""End to end on generated micrographs with known truth: identify, align-frame, find-orientation, two-face.

Truth traces come from scipy's Rotation (crystal -> sample = Rotation.from_euler("ZXZ", bunge),
../shared/conventions.md) and atan2(n_y, n_x) + 90 deg, not from tracefit.predict.traces.
"""

import json
import math

import cv2
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.crystal import lattice_preset
from tracefit.image import BandFamilySpec, render_micrograph, voronoi_labels

FCC = lattice_preset("fcc")
PLANES = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]
RHO = 8.0  # frame rotation between the orientation table and the grain-map image


def same_plane(a, b):
    a, b = np.array(a), np.array(b)
    return bool(np.all(a == b) or np.all(a == -b))


def truth_traces(R, rho=0.0):
    n = (Rotation.from_euler("z", rho, degrees=True) * R).apply(FCC.plane_normal(np.array(PLANES)))
    ang = [(math.degrees(math.atan2(v[1], v[0])) + 90.0) % 180.0 for v in n]
    return ang, np.degrees(np.arccos(np.abs(n[:, 2])))


@pytest.fixture(scope="module")
def single(tmp_path_factory):
    d = tmp_path_factory.mktemp("single")
    bunge = (20.0, 40.0, 10.0)
    ang, incl = truth_traces(Rotation.from_euler("ZXZ", bunge, degrees=True))
    use = [int(i) for i in np.argsort(-incl)[:2]]
    # a third family of parallel polishing marks, far from every {111} trace
    preds = sorted(ang)
    gaps = [((preds[(i + 1) % 4] - preds[i]) % 180.0, i) for i in range(4)]
    gap, i = max(gaps)
    scratch = (preds[i] + gap / 2.0) % 180.0
    specs = [BandFamilySpec(ang[k], spacing_px=20) for k in use] + [BandFamilySpec(scratch, spacing_px=31, width_px=2)]
    img, _ = render_micrograph((224, 224), specs, seed=2)
    p = d / "single.png"
    cv2.imwrite(str(p), img)
    return p, bunge, [PLANES[k] for k in use], [ang[k] for k in use], scratch


@pytest.fixture(scope="module")
def grain_map(tmp_path_factory):
    d = tmp_path_factory.mktemp("map")
    lab = voronoi_labels((320, 320), 6, seed=3)
    gf, truth, rows = {}, {}, ["grain,phi1,Phi,phi2"]
    for gid in range(6):
        R = Rotation.random(random_state=gid + 10)
        ang, incl = truth_traces(R, RHO)
        use = [int(i) for i in np.argsort(-incl)[:2]]
        gf[gid] = [BandFamilySpec(ang[k], spacing_px=18) for k in use]
        truth[gid] = [(ang[k], PLANES[k]) for k in use]
        e = R.as_euler("ZXZ", degrees=True)
        rows.append(f"{gid},{e[0]:.5f},{e[1]:.5f},{e[2]:.5f}")
    img, _ = render_micrograph((320, 320), labels=lab, grain_families=gf, seed=1)
    ip, lp, cp = d / "map.png", d / "labels.png", d / "grains.csv"
    cv2.imwrite(str(ip), img)
    cv2.imwrite(str(lp), lab.astype(np.uint16))
    cp.write_text("\n".join(rows) + "\n")
    return ip, lp, cp, truth


def test_identify_single_grain_json(run_cli, single, tmp_path):
    p, bunge, planes, angles, scratch = single
    ov = tmp_path / "ov.png"
    code, out, err = run_cli("identify", str(p), "--lattice", "fcc", "--euler", ",".join(map(str, bunge)),
                             "--load", "x", "--overlay", str(ov), "--json")
    assert code == 0, err
    d = json.loads(out)
    fams = d["families"]
    for plane, a in zip(planes, angles):
        f = min(fams, key=lambda f: abs((f["angle_deg"] - a + 90) % 180 - 90))
        assert abs((f["angle_deg"] - a + 90) % 180 - 90) < 1.0
        assert not f["unexplained"]
        assert same_plane(f["candidates"][0]["plane"], plane)
        bs = f["candidates"][0]["best_system"]
        assert bs is not None and 0 <= bs["schmid_factor"] <= 0.5
        probs = [c["probability"] for c in f["candidates"]]
        assert probs == sorted(probs, reverse=True)
    s = min(fams, key=lambda f: abs((f["angle_deg"] - scratch + 90) % 180 - 90))
    assert abs((s["angle_deg"] - scratch + 90) % 180 - 90) < 1.0
    assert s["unexplained"]
    assert ov.is_file() and cv2.imread(str(ov)) is not None


def test_identify_text_output(run_cli, single):
    p, bunge, *_ = single
    code, out, err = run_cli("identify", str(p), "--lattice", "fcc", "--euler", ",".join(map(str, bunge)))
    assert code == 0, err
    assert "UNEXPLAINED" in out and "(1" in out


def test_identify_grain_map_with_frame_rotation(run_cli, grain_map):
    ip, lp, cp, truth = grain_map
    code, out, err = run_cli("identify", str(ip), "--lattice", "fcc", "--grains", str(lp), "--orientations", str(cp),
                             "--frame-rotation", str(RHO), "--modes", "slip", "--json")
    assert code == 0, err
    d = json.loads(out)
    # the automatic frame check agrees with the given frame
    assert not d["frame_check"]["misaligned"] and "frame check" not in err
    fams = d["families"]
    n_ok = 0
    for gid, tr in truth.items():
        mine = [f for f in fams if f["grain"] == gid]
        for a, plane in tr:
            f = min(mine, key=lambda f: abs((f["angle_deg"] - a + 90) % 180 - 90))
            if abs((f["angle_deg"] - a + 90) % 180 - 90) < 1.0 and not f["unexplained"]:
                n_ok += any(same_plane(c["plane"], plane) for c in f["candidates"])
    assert n_ok >= 11  # of 12 families


def test_wrong_frame_leaves_families_unexplained_and_align_frame_finds_it(run_cli, grain_map):
    ip, lp, cp, truth = grain_map
    code, out, err = run_cli("identify", str(ip), "--lattice", "fcc", "--grains", str(lp), "--orientations", str(cp),
                             "--modes", "slip", "--json")
    assert code == 0, err
    d = json.loads(out)
    fams = d["families"]
    assert sum(f["unexplained"] for f in fams) >= len(fams) // 2
    # the automatic frame check on the grain map notices, and says which rotation fits
    assert d["frame_check"]["misaligned"] and abs(d["frame_check"]["rotation_deg"] - RHO) < 1.0
    assert "frame check" in err
    code, out, err = run_cli("align-frame", str(ip), "--lattice", "fcc", "--grains", str(lp), "--orientations", str(cp),
                             "--modes", "slip", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert abs(d["rotation_deg"] - RHO) < max(3 * d["rotation_sigma_deg"], 0.5)
    assert d["misaligned"] and not d["flip_x"]


def test_find_orientation_and_two_face_commands(run_cli):
    R = Rotation.from_euler("ZXZ", (35.0, 52.0, 18.0), degrees=True)
    ang, incl = truth_traces(R)
    args = []
    for i in np.argsort(-incl)[:3]:
        args += ["--angle", f"{ang[i]:.4f}"]
    code, out, err = run_cli("find-orientation", *args, "--lattice", "fcc", "--sigma", "0.2", "--samples", "20000", "--json")
    assert code == 0, err
    d = json.loads(out)
    assert d["free_parameters"] == 0 and d["candidates"]
    # cube edge: (111)-type traces along the face diagonals of two {100} faces (Cullity, interplanar angles)
    code, out, err = run_cli("two-face", "--pair", "45:135", "--lattice", "fcc", "--euler", "0,0,0", "--modes", "slip", "--json")
    assert code == 0, err
    d = json.loads(out)
    c = d["planes"][0]["candidates"][0]
    assert c["probability"] > 0.95 and c["angle_deg"] < 0.01


@pytest.mark.parametrize(
    "args",
    [
        ("identify", "{img}", "--lattice", "fcc"),  # no orientation
        ("identify", "/nonexistent/x.png", "--lattice", "fcc", "--euler", "0,0,0"),
        ("identify", "{img}", "--lattice", "fcc", "--euler", "0,0,0", "--grains", "{img}", "--orientations", "{csv}"),
        ("identify", "{img}", "--lattice", "fcc", "--grains", "{img}"),
        ("identify", "{img}", "--lattice", "fcc", "--euler", "0,0,0", "--orientation-sigma", "-1"),
        ("identify", "{img}", "--lattice", "fcc", "--grains", "{small}", "--orientations", "{csv}"),
        ("identify", "{img}", "--lattice", "fcc", "--grains", "{small}", "--orientations", "{badcsv}"),
        ("two-face", "--pair", "abc"),
        ("find-orientation", "--angle", "10", "--lattice", "fcc"),
    ],
)
def test_bad_input_exits_2_without_traceback(run_cli, single, tmp_path, args):
    img = single[0]
    csv = tmp_path / "g.csv"
    csv.write_text("grain,phi1,Phi,phi2\n0,10,20,30\n")
    badcsv = tmp_path / "bad.csv"
    badcsv.write_text("grain,phi1,Phi\n0,10,20\n")
    small = tmp_path / "small.png"
    cv2.imwrite(str(small), np.zeros((10, 10), np.uint16))
    a = [x.format(img=img, csv=csv, badcsv=badcsv, small=small) for x in args]
    code, out, err = run_cli(*a)
    assert code == 2
    assert "Traceback" not in err and err.strip().startswith("tracefit: error:")
    assert len(err.strip().splitlines()) == 1

