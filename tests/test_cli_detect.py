"""`tracefit detect` command line: JSON output, overlay, bad input with exit code 2."""

import json

import cv2
import numpy as np
import pytest

from tracefit.conventions import axial_difference
from tracefit.image import BandFamilySpec, render_micrograph


@pytest.fixture(scope="module")
def banded(tmp_path_factory):
    d = tmp_path_factory.mktemp("detect")
    img, truth = render_micrograph((384, 448), [BandFamilySpec(33.3, 22, 3, -0.3), BandFamilySpec(118.2, 28, 3, 0.3)],
                                   databar=True, n_scratches=1, noise_sigma=0.02, seed=12)
    p = d / "banded.png"
    cv2.imwrite(str(p), img)
    return p, truth


def test_json_output(run_cli, banded):
    path, truth = banded
    code, out, err = run_cli("detect", str(path), "--json", "--pixel-size", "0.5")
    assert code == 0
    d = json.loads(out)  # exactly one JSON object on stdout
    assert d["image"]["path"] == str(path)
    assert (d["image"]["width"], d["image"]["height"]) == (448, 384)
    assert [e["kind"] for e in d["image"]["excluded"]] == ["databar"]
    fams = d["families"]
    assert len(fams) == 2
    for a in truth.family_angles:
        assert min(abs(axial_difference(f["angle_deg"], a)) for f in fams) <= 0.1
    for f in fams:
        assert set(f) == {"angle_deg", "angle_sigma_deg", "n_bands", "spacing_px", "spacing_um", "strength"}
        assert f["spacing_um"] == pytest.approx(0.5 * f["spacing_px"], rel=1e-3)
    assert fams[0]["strength"] >= fams[1]["strength"]
    assert "data bar" in err  # notes go to stderr


def test_table_and_overlay(run_cli, banded, tmp_path):
    path, truth = banded
    ov = tmp_path / "ov.png"
    code, out, err = run_cli("detect", str(path), "--overlay", str(ov))
    assert code == 0
    assert "angle deg" in out and len(out.strip().splitlines()) == 3
    pic = cv2.imread(str(ov))
    assert pic.shape == (384, 448, 3)
    # coloured pixels (the drawn bands and legend) exist; the input was grey
    b, g, r = (pic[..., k].astype(int) for k in range(3))
    assert (np.abs(r - g) + np.abs(g - b) > 60).mean() > 0.01


def test_mask_option_and_wrong_mask_size(run_cli, banded, tmp_path):
    path, _ = banded
    m = np.zeros((384, 448), np.uint8)
    m[:, :224] = 255
    cv2.imwrite(str(tmp_path / "m.png"), m)
    code, out, _ = run_cli("detect", str(path), "--mask", str(tmp_path / "m.png"), "--json")
    assert code == 0 and len(json.loads(out)["families"]) == 2
    cv2.imwrite(str(tmp_path / "small.png"), m[:100, :100])
    code, out, err = run_cli("detect", str(path), "--mask", str(tmp_path / "small.png"))
    assert code == 2 and "same size" in err and "Traceback" not in err


def test_no_bands_says_so(run_cli, tmp_path):
    img, _ = render_micrograph((256, 256), [], noise_sigma=0.03, seed=1)
    cv2.imwrite(str(tmp_path / "plain.png"), img)
    code, out, err = run_cli("detect", str(tmp_path / "plain.png"), "--json")
    assert code == 0 and json.loads(out)["families"] == []
    assert "no band families" in err


# Writing the zero-size TIFF on purpose makes tifffile warn; the warning is the point, not a fault.
@pytest.mark.filterwarnings("ignore:.*writing zero-size array:UserWarning")
@pytest.mark.parametrize("kind", ["missing", "text", "truncated", "empty", "constant", "zero"])
def test_bad_input_exit_2_one_line(run_cli, tmp_path, banded, kind):
    p = tmp_path / f"{kind}.png"
    if kind == "text":
        p.write_text("hello")
    elif kind == "truncated":
        data = banded[0].read_bytes()
        p.write_bytes(data[: len(data) // 3])
    elif kind == "empty":
        p.write_bytes(b"")
    elif kind == "constant":
        cv2.imwrite(str(p), np.full((64, 64), 100, np.uint8))
    elif kind == "zero":
        p = tmp_path / "zero.tif"
        import tifffile

        tifffile.imwrite(p, np.zeros((0, 5), np.uint8))
    code, out, err = run_cli("detect", str(p), "--json")
    assert code == 2
    assert out == ""
    assert "Traceback" not in err and len(err.strip().splitlines()) == 1 and err.startswith("tracefit: error:")


def test_bad_pixel_size(run_cli, banded):
    code, _, err = run_cli("detect", str(banded[0]), "--pixel-size", "-1")
    assert code == 2 and "pixel-size" in err


@pytest.mark.parametrize("args", [
    ("identify", "x.png", "--lattice", "fcc", "--euler", "1,2,3", "--orientation-sigma", "abc"),
    ("identify", "--bogus"),
    ("survey",),
    ("detect", "x.png", "--working-size", "many"),
])
def test_usage_errors_are_one_line_with_exit_2(run_cli, args):
    # A user's typo gets one line on stderr, like every other error (common practice, no source).
    code, out, err = run_cli(*args)
    assert code == 2
    assert err.startswith("tracefit: error: ") and err.count("\n") == 1, err
    assert "Traceback" not in err and "Usage:" not in err


def test_version(run_cli):
    import tracefit

    code, out, err = run_cli("--version")
    assert code == 0 and out.strip() == f"tracefit {tracefit.__version__}"


def test_detect_exposes_the_detector_settings(run_cli, tmp_path):
    # Issue 13 item 8: the settings a user may need on a hard image, named as in the API.
    img, _ = render_micrograph((192, 192), [BandFamilySpec(30.0, 16, 3, -0.3)], seed=3)
    p = tmp_path / "a.png"
    cv2.imwrite(str(p), np.clip(img * 255, 0, 255).astype(np.uint8))
    code, out, err = run_cli("detect", str(p), "--json", "--min-bands", "2", "--scales", "1,2", "--no-find-bar",
                             "--min-depth", "0.02", "--working-size", "512")
    assert code == 0, err
    fams = json.loads(out)["families"]
    assert len(fams) == 1 and abs(axial_difference(fams[0]["angle_deg"], 30.0)) < 0.5
    code, out, err = run_cli("detect", str(p), "--min-bands", "0")
    assert code == 2 and "--min-bands" in err and err.count("\n") == 1
    code, out, err = run_cli("detect", str(p), "--scales", "1,x")
    assert code == 2 and "--scales" in err
