"""Predicted-trace drawing: the drawn lines checked at their pixels, wedges, grains, CLI.

Where each line must run is worked out by hand in the test, not by tracefit: a trace at angle
a (ccw from image +x, y up) runs through the centre (c0, r0) as (c0 + t cos a, r0 - t sin a)
in (column, row) pixels, because rows run down the screen. The angles themselves are checked
against scipy's Rotation (``Rotation.from_euler("ZXZ", bunge)`` = crystal -> sample, see
../shared/conventions.md) with the trace formula atan2(n_y, n_x) + 90 deg.
"""

import math

import cv2
import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.image import FAMILY_COLOURS
from tracefit.crystal import lattice_preset
from tracefit.crystal import from_euler
from tracefit.viz.overlay import (
    CANVAS_BACKGROUND,
    WEDGE_ALPHA,
    draw_predicted,
    grain_centres,
    parse_canvas_size,
    trace_sigma_deg,
    write_overlay,
)
from tracefit.crystal import catalogue
from tracefit.predict import predict_traces

FCC = lattice_preset("fcc")
BUNGE = (20.0, 35.0, 60.0)  # {111} traces at 32.2, 53.9, 98.7 and 142.6 deg: well apart


def scipy_trace(bunge, plane):
    n_s = Rotation.from_euler("ZXZ", bunge, degrees=True).apply(FCC.plane_normal(plane))
    return (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0, math.degrees(math.acos(min(1.0, abs(n_s[2]))))


def traces(bunge=BUNGE):
    return predict_traces(FCC, from_euler(bunge), catalogue(FCC, ("slip",)))


def point(c0, r0, angle_deg, t):
    """Pixel (col, row) at distance t along the line at angle_deg through (c0, r0): rows run down."""
    a = math.radians(angle_deg)
    return c0 + t * math.cos(a), r0 - t * math.sin(a)


def pixel(rgb, c, r):
    return rgb[int(round(r)), int(round(c))].astype(int)


def fraction_with_colour(rgb, c0, r0, angle, colour, ts, tol=12):
    hits = [np.abs(pixel(rgb, *point(c0, r0, angle, t)) - np.array(colour)).max() <= tol for t in ts]
    return float(np.mean(hits))


def test_lines_on_a_blank_canvas_at_their_pixels():
    trs = traces()
    for t in trs:  # outside check of the angles that are drawn
        assert t.angle_deg == pytest.approx(scipy_trace(BUNGE, t.plane)[0], abs=1e-6)
    w, h = 501, 401
    rgb = draw_predicted(trs, canvas_size=(w, h), orientation_sigma_deg=1.0)
    c0, r0 = (w - 1) / 2, (h - 1) / 2
    ts = [t for t in np.arange(-170, 171, 5.0) if abs(t) >= 25]  # off the crossing at the centre
    for i, t in enumerate(trs):
        col = FAMILY_COLOURS[i]
        # along its own line: the line colour ...
        assert fraction_with_colour(rgb, c0, r0, t.angle_deg, col, ts) >= 0.9, t.plane
        # ... and 90 deg across it, where no trace runs: not the line colour
        assert fraction_with_colour(rgb, c0, r0, t.angle_deg + 90.0, col, ts) == 0.0
    # 76 deg lies >= 20 deg from every trace and outside every wedge: plain background
    for t in ts:
        assert tuple(pixel(rgb, *point(c0, r0, 76.0, t))) == CANVAS_BACKGROUND
    # the legend panel sits to the right; the canvas keeps its size and coordinates
    assert rgb.shape[1] > w and rgb.shape[0] >= h


def test_wedge_width_follows_orientation_sigma():
    trs = traces()
    w = h = 601
    c0 = r0 = 300.0
    k = 2.0
    for osig in (1.0, 3.0):
        rgb = draw_predicted(trs, canvas_size=(w, h), orientation_sigma_deg=osig, k_sigma=k, legend=False)
        for i, t in enumerate(trs):
            if t.angle_deg != pytest.approx(142.594, abs=0.01):  # (1-1-1): its wedge has no neighbour near it
                continue
            incl = scipy_trace(BUNGE, t.plane)[1]
            # the matcher's propagation (checked against Monte Carlo in test_matching.py): sigma / sin(incl)
            half = k * osig / math.sin(math.radians(incl))
            col = np.array(FAMILY_COLOURS[i], float)
            bg = np.array(CANVAS_BACKGROUND, float)
            blend = (1 - WEDGE_ALPHA) * bg + WEDGE_ALPHA * col
            inside = pixel(rgb, *point(c0, r0, t.angle_deg + 0.5 * half, 200))
            outside = pixel(rgb, *point(c0, r0, t.angle_deg + 1.5 * half, 200))
            assert np.abs(inside - blend).max() <= 2
            assert tuple(outside) == CANVAS_BACKGROUND
            # the other side of the centre carries the same wedge
            assert np.abs(pixel(rgb, *point(c0, r0, t.angle_deg + 180.0 - 0.5 * half, 200)) - blend).max() <= 2


def test_trace_sigma_uses_inclination():
    trs = traces()
    s = trace_sigma_deg(trs, 2.0)
    for t, si in zip(trs, s):
        assert si == pytest.approx(2.0 / math.sin(math.radians(scipy_trace(BUNGE, t.plane)[1])), rel=1e-6)


def test_lines_on_a_picture_leave_other_pixels_alone():
    rng = np.random.default_rng(3)
    img = rng.uniform(0.3, 0.7, size=(300, 400))
    trs = traces()
    plain = draw_predicted([], image=img, legend=False)
    rgb = draw_predicted(trs, image=img, legend=False, k_sigma=1.0)
    assert rgb.shape == plain.shape == (300, 400, 3)
    c0, r0 = 199.5, 149.5
    ts = [t for t in np.arange(-140, 141, 4.0) if abs(t) >= 25]
    for i, t in enumerate(trs):
        assert fraction_with_colour(rgb, c0, r0, t.angle_deg, FAMILY_COLOURS[i], ts) >= 0.9
    for t in ts:
        c, r = point(c0, r0, 76.0, t)
        if 0 <= c < 400 and 0 <= r < 300:
            assert np.array_equal(pixel(rgb, c, r), pixel(plain, c, r))


def test_per_grain_traces_as_dials_about_the_centroids():
    # Each grain's traces are a dial about its centroid: tick pairs between DIAL_INNER and 1 of the
    # ring radius (0.8 of the grain's equivalent radius), nothing over the grain's middle, so the
    # bands there stay visible (issue 16, item 11).
    from tracefit.viz.overlay import DIAL_INNER

    h, w = 200, 400
    labels = np.ones((h, w), np.int64)
    labels[:, 200:] = 2
    per = {1: traces(BUNGE), 2: traces((100.0, 50.0, 10.0))}
    picture = np.full((h, w), 0.5) + 0.1 * (labels == 2)
    rgb = draw_predicted(per, image=picture, labels=labels, legend=False)
    cents = grain_centres(labels)
    assert cents[1][:2] == pytest.approx((99.5, 99.5)) and cents[2][:2] == pytest.approx((299.5, 99.5))
    rad = cents[1][2]
    assert rad == pytest.approx(math.sqrt(200 * 200 / math.pi))
    ring = 0.8 * rad
    for gid in (1, 2):
        c0, r0, _ = cents[gid]
        on = [s for s in np.arange(DIAL_INNER * ring + 3, ring - 3, 2.0)] + [-s for s in np.arange(DIAL_INNER * ring + 3, ring - 3, 2.0)]
        for i, t in enumerate(per[gid]):
            ts_in = [s for s in on if 0 <= point(c0, r0, t.angle_deg, s)[1] <= h - 1]
            assert fraction_with_colour(rgb, c0, r0, t.angle_deg, FAMILY_COLOURS[i], ts_in) >= 0.85, (gid, t.plane)
        # the middle of the grain is left as it was
        mid = rgb[int(r0) - 5:int(r0) + 6, int(c0) - 5:int(c0) + 6]
        plain = draw_predicted({}, image=picture, labels=labels, legend=False)[int(r0) - 5:int(r0) + 6, int(c0) - 5:int(c0) + 6]
        assert np.array_equal(mid, plain)


def test_curved_grain_centre_stays_inside():
    # an L-shaped grain: its centroid falls outside, the innermost pixel is used
    lab = np.zeros((100, 100), np.int64)
    lab[:, :20] = 1
    lab[80:, :] = 1
    c, r, _ = grain_centres(lab, [1])[1]
    assert lab[int(round(r)), int(round(c))] == 1


def test_write_and_read_back(tmp_path):
    rgb = draw_predicted(traces(), canvas_size=(200, 150))
    p = write_overlay(tmp_path / "t.png", rgb)
    back = cv2.cvtColor(cv2.imread(str(p)), cv2.COLOR_BGR2RGB)
    assert np.array_equal(back, rgb)
    with pytest.raises(TracefitInputError, match=".png"):
        write_overlay(tmp_path / "t.txt", rgb)
    with pytest.raises(TracefitInputError, match="does not exist"):
        write_overlay(tmp_path / "no" / "t.png", rgb)


@pytest.mark.parametrize("text,size", [("800x600", (800, 600)), (" 64 X 32 ", (64, 32))])
def test_canvas_size(text, size):
    assert parse_canvas_size(text) == size


@pytest.mark.parametrize("text", ["800", "axb", "10x10", "800x600x3", "-5x100"])
def test_bad_canvas_size(text):
    with pytest.raises(TracefitInputError, match="WIDTHxHEIGHT"):
        parse_canvas_size(text)


def test_bad_drawing_input():
    with pytest.raises(TracefitInputError, match="label image"):
        draw_predicted({1: traces()}, canvas_size=(100, 100))
    with pytest.raises(TracefitInputError, match="sigmas"):
        draw_predicted(traces(), canvas_size=(100, 100), k_sigma=0)
    with pytest.raises(TracefitInputError, match="per grain"):
        draw_predicted(traces(), image=np.zeros((50, 50)), labels=np.ones((50, 50), int))


# ------------------------------------------------------------------ command line
def test_cli_canvas_lines_at_their_pixels(run_cli, tmp_path):
    out = tmp_path / "c.png"
    code, stdout, err = run_cli("predict", "--lattice", "fcc", "--euler", "20,35,60", "--modes", "slip",
                                "--canvas", "401x301", "--out", str(out), "--json")
    assert code == 0, err
    import json

    trs = json.loads(stdout)["traces"]
    rgb = cv2.cvtColor(cv2.imread(str(out)), cv2.COLOR_BGR2RGB)
    ts = [t for t in np.arange(-140, 141, 5.0) if abs(t) >= 25]
    for i, t in enumerate(trs):
        assert fraction_with_colour(rgb, 200, 150, t["angle_deg"], FAMILY_COLOURS[i], ts) >= 0.9


def test_cli_overlay_on_picture_and_grains(run_cli, tmp_path):
    from tracefit.demo import demo_dir

    d = demo_dir()
    out = tmp_path / "o.png"
    code, _, err = run_cli("predict", "--lattice", "fcc", "--euler", "263,50,135", "--overlay", str(d / "coupon_A.png"),
                           "--out", str(out), "--orientation-sigma", "2")
    assert code == 0, err and out.is_file()
    out2 = tmp_path / "g.png"
    code, stdout, err = run_cli("predict", "--lattice", "bcc", "--modes", "slip", "--overlay", str(d / "coupon_B.png"),
                                "--grains", str(d / "coupon_B_labels.png"), "--orientations", str(d / "coupon_B_grains.csv"),
                                "--out", str(out2), "--json")
    assert code == 0, err
    import json

    assert set(json.loads(stdout)["grains"]) == {"1", "2"}
    assert out2.is_file()


@pytest.mark.parametrize("args,words", [
    (("--canvas", "400x300"), ["--out"]),
    (("--out", "x.png"), ["--overlay", "--canvas"]),
    (("--canvas", "abc", "--out", "x.png"), ["WIDTHxHEIGHT"]),
    (("--canvas", "100x100", "--overlay", "a.png", "--out", "x.png"), ["not both"]),
    (("--canvas", "100x100", "--out", "x.png", "--grains", "l.png"), ["--grains"]),
    (("--canvas", "100x100", "--out", "x.txt"), [".png"]),
    (("--canvas", "100x100", "--out", "x.png", "--orientation-sigma", "-1"), [">= 0"]),
])
def test_cli_bad_drawing_options(run_cli, tmp_path, args, words):
    args = tuple(str(tmp_path / a) if a in ("x.png", "x.txt", "a.png", "l.png") else a for a in args)
    code, out, err = run_cli("predict", "--lattice", "fcc", "--euler", "0,0,0", *args)
    assert code == 2, (out, err)
    assert "Traceback" not in err
    for w in words:
        assert w in err


def test_wedge_sigma_equals_the_matchers_under_tilt():
    # The drawing's spread must be the one the matcher uses (same propagation, same tilt slope).
    from tracefit.conventions import FrameSettings
    from tracefit.matching import candidate_set, predict_candidates, predicted_trace_sigma

    frame = FrameSettings(tilt_deg=60.0)
    g = from_euler(BUNGE)
    systems = catalogue(FCC, ("slip",))
    trs = predict_traces(FCC, g, systems, frame=frame)
    cands = candidate_set(systems)
    ang, incl, slope = predict_candidates(cands, g, frame)
    psig = predicted_trace_sigma(incl[0], 1.5, slope[0])
    mine = trace_sigma_deg(trs, 1.5, frame)
    for t, s in zip(trs, mine):
        j = int(np.argmin(np.abs((ang[0] - t.angle_deg + 90) % 180 - 90)))
        assert s == pytest.approx(psig[j], rel=1e-3)
    assert not np.allclose(mine, trace_sigma_deg(trs, 1.5))  # the tilt does change it
