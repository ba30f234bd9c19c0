"""Hand-measured traces: angle options, the measured-lines CSV, crack plane consistency.

Outside references: endpoint angles are checked against hand calculation (plane trigonometry
done on paper, stated beside each case); crack consistency against trace angles predicted
with scipy's Rotation (``Rotation.from_euler("ZXZ", bunge)`` is the crystal -> sample rotation,
see ../shared/conventions.md) and the trace formula atan2(n_y, n_x) + 90 deg, independent of
tracefit.predict.traces.
"""

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.matching import ObservedFamily
from tracefit.matching import (
    MEASURED_CONVENTION,
    CrackIdentification,
    identify_observed,
    is_crack,
    parse_angle_option,
    read_measured_csv,
)
from tracefit.crystal import from_euler
from tracefit.crystal import catalogue

FCC = lattice_preset("fcc")
FCC_111 = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]


def scipy_trace(bunge, plane):
    """(trace angle, inclination) via scipy's rotation, independent of tracefit.predict.traces."""
    n_s = Rotation.from_euler("ZXZ", bunge, degrees=True).apply(FCC.plane_normal(plane))
    return (math.degrees(math.atan2(n_s[1], n_s[0])) + 90.0) % 180.0, math.degrees(math.acos(min(1.0, abs(n_s[2]))))


def same_plane(a, b):
    a, b = np.array(a), np.array(b)
    return bool(np.all(a == b) or np.all(a == -b))


def write_csv(tmp_path, text, name="lines.csv"):
    p = tmp_path / name
    p.write_text(text)
    return p


# ------------------------------------------------------------------ endpoints -> angle
# Checked against hand calculation. Pixel (x, y) = (column, row), rows run DOWN the screen,
# angles counterclockwise from +x with y UP, axial.
HAND_CASES = [
    # lower left (0, 100) to upper right (100, 0) on screen: the 45 deg diagonal.
    ((0, 100, 100, 0), 45.0),
    # the same line read the other way round: a line has no sense.
    ((100, 0, 0, 100), 45.0),
    # 3-4-5 triangle: 40 px right, 30 px DOWN, so 30 px below the horizontal:
    # -atan(30/40) = -36.8699 deg (atan(3/4) = 36.8699 deg by hand), axial 180 - 36.8699 = 143.1301.
    ((10, 20, 50, 50), 143.1301),
    # straight down the screen (row grows): vertical, 90 deg.
    ((50, 0, 50, 100), 90.0),
    # along a row: horizontal, 0 deg.
    ((0, 7, 100, 7), 0.0),
    # 30 px right, 52 px UP: atan(52/30) = 60.018 deg by hand.
    ((0, 52, 30, 0), 60.018),
]


@pytest.mark.parametrize("ends,angle", HAND_CASES)
def test_csv_endpoints_match_hand_calculation(tmp_path, ends, angle):
    p = write_csv(tmp_path, "x0,y0,x1,y1\n" + ",".join(str(v) for v in ends) + "\n")
    (fam,) = read_measured_csv(p)
    assert fam.angle_deg == pytest.approx(angle, abs=1e-3)
    assert fam.source == "measured"


def test_endpoint_sigma_grows_for_short_lines(tmp_path):
    # 1 px reading error at each end of a 10 px line: sqrt(2) * 1 / 10 rad = 8.10 deg (hand calculation);
    # a 1000 px line stays at the 0.5 deg floor.
    p = write_csv(tmp_path, "x0,y0,x1,y1\n0,0,10,0\n0,0,1000,0\n")
    short, long_ = read_measured_csv(p)
    assert short.angle_sigma_deg == pytest.approx(math.degrees(math.sqrt(2) / 10), rel=1e-6)
    assert long_.angle_sigma_deg == pytest.approx(0.5)


def test_csv_all_columns_any_order_comments_and_labels(tmp_path):
    p = write_csv(tmp_path, (
        "# an invented audit\n"
        "Label,grain,angle_deg,sigma_deg,x0,y0,x1,y1,notes\n"
        "crack,4,30,1.5,,,,,main crack\n"
        "band,4,,,0,100,100,0,\n"
        "\n"
        ",4,200,,,,,,folded\n"
    ))
    notes = []
    a, b, c = read_measured_csv(p, notes=notes)
    assert (a.angle_deg, a.angle_sigma_deg, a.grain, a.label) == (30.0, 1.5, 4, "crack")
    assert is_crack(a) and not is_crack(b) and not is_crack(c)
    assert b.angle_deg == pytest.approx(45.0) and b.label == "band"
    assert c.angle_deg == pytest.approx(20.0)
    # the fold is said, naming the row (line 6 of the file, comments counted)
    assert len(notes) == 1 and "row 6" in notes[0] and "folded to 20" in notes[0]


# ------------------------------------------------------------------ angle options
@pytest.mark.parametrize("text,angle,sigma", [
    ("37.5", 37.5, 0.5),
    ("37.5+-0.3", 37.5, 0.3),
    ("37.5 +/- 0.3", 37.5, 0.3),
    ("37.5:0.3", 37.5, 0.3),
    ("37.5\u00b10.3", 37.5, 0.3),
    ("1e1", 10.0, 0.5),
])
def test_parse_angle_option(text, angle, sigma):
    f = parse_angle_option(text)
    assert isinstance(f, ObservedFamily)
    assert (f.angle_deg, f.angle_sigma_deg, f.source) == (pytest.approx(angle), pytest.approx(sigma), "measured")


@pytest.mark.parametrize("text,folded", [("190", 10.0), ("-20", 160.0), ("180", 0.0), ("540.5:1", 0.5)])
def test_angles_outside_range_are_folded_and_said(text, folded):
    notes = []
    f = parse_angle_option(text, notes=notes)
    assert f.angle_deg == pytest.approx(folded)
    assert len(notes) == 1 and "folded" in notes[0] and text in notes[0]


def test_angle_inside_range_gives_no_note():
    notes = []
    parse_angle_option("179.9", notes=notes)
    assert notes == []


@pytest.mark.parametrize("text", ["abc", "37.5+-", "37.5:-1", "", "37,5", "nan"])
def test_bad_angle_option(text):
    with pytest.raises(TracefitInputError, match="--angle"):
        parse_angle_option(text)


# ------------------------------------------------------------------ bad CSV input
@pytest.mark.parametrize("body,words", [
    ("x0,y0,x1,y1\n1,2,3\n", ["row 2", "'y1'", "empty"]),
    ("x0,y0,x1,y1\n120,80,120,80\n", ["row 2", "x0,y0,x1,y1", "coincide"]),
    ("angle_deg,sigma_deg\n30,abc\n", ["row 2", "'sigma_deg'", "not a number"]),
    ("angle_deg,sigma_deg\n30,-1\n", ["row 2", "'sigma_deg'", "negative"]),
    ("angle_deg,x0,y0,x1,y1\n30,0,0,1,1\n", ["row 2", "both angle_deg and endpoints"]),
    ("angle_deg,label\n,crack\n", ["row 2", "'angle_deg'", "missing"]),
    ("grain,angle_deg\n1.5,30\n", ["row 2", "'grain'", "integer"]),
    ("angle_deg\n30,40\n", ["row 2", "2 fields"]),
    ("angle_dg\n30\n", ["header", "'angle_dg'"]),
    ("x0,y0,x1\n1,2,3\n", ["header", "y1"]),
    ("grain,label\n1,crack\n", ["header", "angle_deg"]),
    ("# only a comment\n", ["empty"]),
    ("angle_deg\n", ["no measured lines"]),
])
def test_bad_csv_names_row_and_field(tmp_path, body, words):
    p = write_csv(tmp_path, body)
    with pytest.raises(TracefitInputError) as e:
        read_measured_csv(p)
    for w in words:
        assert w in str(e.value)


def test_row_number_counts_comment_lines(tmp_path):
    p = write_csv(tmp_path, "# c\n# c\nangle_deg\n10\n\n# c\nxx\n")
    with pytest.raises(TracefitInputError, match="row 7, field 'angle_deg'"):
        read_measured_csv(p)


def test_missing_file(tmp_path):
    with pytest.raises(TracefitInputError, match="not found"):
        read_measured_csv(tmp_path / "nope.csv")


# ------------------------------------------------------------------ identification and cracks
def test_measured_families_identified_against_scipy_predictions():
    bunge = (20.0, 35.0, 60.0)
    fams = [ObservedFamily(scipy_trace(bunge, p)[0] + 0.2, 0.5, None, "measured") for p in [(1, 1, -1), (1, -1, -1)]]
    res = identify_observed(fams, FCC, catalogue(FCC, ("slip",)), g=from_euler(bunge))
    assert same_plane(res[0].best.plane, (1, 1, -1)) and same_plane(res[1].best.plane, (1, -1, -1))
    assert all(r.source == "measured" and r.best.probability > 0.9 for r in res)


def test_crack_consistency_against_scipy_traces():
    bunge = (20.0, 35.0, 60.0)
    traces = {p: scipy_trace(bunge, p) for p in FCC_111}
    crack = ObservedFamily(traces[(1, -1, 1)][0] + 0.4, 0.5, None, "measured", "crack")
    (r,) = identify_observed([crack], FCC, catalogue(FCC), g=from_euler(bunge))
    assert isinstance(r, CrackIdentification)
    assert [tuple(q.plane) for q in r.consistent_planes] == [(1, -1, 1)]
    assert r.consistent_planes[0].modes == ["slip", "twin"]
    assert r.consistent_planes[0].predicted_deg == pytest.approx(traces[(1, -1, 1)][0], abs=1e-6)
    assert r.consistent_planes[0].residual_deg == pytest.approx(0.4, abs=1e-6)
    assert len(r.inconsistent_planes) == 3
    for q in r.inconsistent_planes:
        key = next(p for p in FCC_111 if same_plane(p, q.plane))
        assert q.predicted_deg == pytest.approx(traces[key][0], abs=1e-6)
        assert abs(q.residual_deg) > 2 * q.sigma_deg
    d = r.to_dict()
    assert d["crack"] is True and d["consistency_k_sigma"] == 2.0
    assert [c["plane"] for c in d["consistent_planes"]] == [[1, -1, 1]]
    assert len(d["inconsistent_planes"]) == 3


def test_crack_consistency_boundary_follows_k_sigma():
    # residual of exactly 1.5 total sigma: consistent at k = 2, not at k = 1
    bunge = (20.0, 35.0, 60.0)
    ang, incl = scipy_trace(bunge, (1, -1, 1))
    # total sigma = sqrt(meas^2 + (1 deg / sin i)^2 + frame 0.5^2), the matcher's model
    s = math.sqrt(0.5**2 + (1.0 / math.sin(math.radians(incl))) ** 2 + 0.5**2)
    crack = ObservedFamily(ang + 1.5 * s, 0.5, None, "measured", "crack")
    g = from_euler(bunge)
    (r2,) = identify_observed([crack], FCC, catalogue(FCC), g=g, crack_k_sigma=2.0)
    (r1,) = identify_observed([crack], FCC, catalogue(FCC), g=g, crack_k_sigma=1.0)
    assert [tuple(q.plane) for q in r2.consistent_planes] == [(1, -1, 1)]
    assert r1.consistent_planes == [] and any("not consistent with any" in n for n in r1.notes)


def test_crack_is_matched_on_its_own_not_against_the_bands():
    # A crack along the plane of a band family: both keep that plane (no exclusion between them).
    bunge = (20.0, 35.0, 60.0)
    a = scipy_trace(bunge, (1, 1, -1))[0]
    band = ObservedFamily(a, 0.4, None, "measured", "band")
    crack = ObservedFamily(a + 0.3, 0.5, None, "measured", "crack")
    rb, rc = identify_observed([band, crack], FCC, catalogue(FCC, ("slip",)), g=from_euler(bunge))
    assert same_plane(rb.best.plane, (1, 1, -1)) and rb.best.probability > 0.9
    assert same_plane(rc.best.plane, (1, 1, -1)) and rc.best.probability > 0.9


def test_one_orientation_with_several_grains_is_an_error():
    fams = [ObservedFamily(10, 0.5, 1, "measured"), ObservedFamily(20, 0.5, 2, "measured")]
    with pytest.raises(TracefitInputError, match="grains 1, 2"):
        identify_observed(fams, FCC, catalogue(FCC), g=from_euler((0, 0, 0)))


def test_per_grain_orientations_and_missing_grain():
    b1, b2 = (20.0, 35.0, 60.0), (100.0, 50.0, 10.0)
    fams = [
        ObservedFamily(scipy_trace(b1, (1, 1, -1))[0], 0.4, 1, "measured"),
        ObservedFamily(scipy_trace(b2, (1, 1, 1))[0], 0.4, 2, "measured", "crack"),
        ObservedFamily(50.0, 0.4, 9, "measured"),
    ]
    res = identify_observed(fams, FCC, catalogue(FCC, ("slip",)), orientations={1: from_euler(b1), 2: from_euler(b2)})
    assert same_plane(res[0].best.plane, (1, 1, -1))
    assert isinstance(res[1], CrackIdentification)
    assert any(same_plane(q.plane, (1, 1, 1)) for q in res[1].consistent_planes)
    assert res[2].unexplained and "no orientation" in res[2].notes[0]


def test_convention_string():
    assert MEASURED_CONVENTION == "pixel rows down; angle ccw from +x, axial"
