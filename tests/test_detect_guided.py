"""Band families looked for along a grain's predicted traces (stage 6c, ``predicted_traces``).

When the grain's orientation is known, the chain asks the detector to look along each
candidate plane's predicted trace as well as over every direction. Few directions are tested
there, so a weaker family passes at the same rate of false families on band-free grains.
The maps are the independent numpy renderer of ``tests/test_detect_projection.py`` (short,
wavy, unevenly bright bands of an HR-DIC max-shear map in a small grain); band-free grains
and scikit-image's textures (``skimage.data``: grass, gravel, brick) are the negatives.
"""

from __future__ import annotations

import numpy as np
import pytest

import tracefit as tf
from tests.test_detect_projection import ANGLES, grain_labels, short_band_map
from tracefit.conventions import axial_difference
from tracefit.errors import TracefitInputError
from tracefit.image import detect_bands, detect_grains
from tracefit.image.projection import GUIDED_TOL_DEG

WEAK = 0.01  # level of the second family (the first is 0.05): the open search finds it in about half the grains
SEP = 50.0  # degrees between the two families


def _second(seed, angle):
    second = (angle + SEP) % 180.0
    return short_band_map(angle, seed, crossing=(second, WEAK)), second


def _traces(first, second, off=1.0):
    """Four predicted traces (fcc's {111}): both drawn families a little off, two planes that did not slip."""
    return [(first - 0.8) % 180.0, (second + off) % 180.0, (first + 100.0) % 180.0, (first + 140.0) % 180.0]


def _near(fams, angle, tol=2.0):
    return [f for f in fams if abs(axial_difference(f.angle_deg, angle)) <= tol]


def test_weak_second_families_are_found_along_their_predicted_traces():
    labels = grain_labels()
    open_found, guided_found, guided = 0, 0, []
    for seed, first in ANGLES:
        img, second = _second(seed, first)
        plain = detect_bands(img, labels=labels, grain=1)
        res = detect_bands(img, labels=labels, grain=1, predicted_traces=_traces(first, second))
        open_found += bool(_near(plain.families, second))
        guided_found += bool(_near(res.families, second))
        guided += [(f, second) for f in res.families if f.sought_at is not None]
        # the open search's families are kept as they were
        assert [round(f.angle_deg, 6) for f in plain.families] == \
            [round(f.angle_deg, 6) for f in res.families if f.sought_at is None]
    assert guided_found >= open_found + 2, (open_found, guided_found)
    assert guided, "no family was found along a predicted trace"
    for fam, second in guided:
        # sought at the second family's trace (drawn + 1 deg) and measured from its bands: nearer the
        # drawn angle than the trace it was looked for at
        assert fam.sought_at == pytest.approx((second + 1.0) % 180.0)
        assert abs(axial_difference(fam.angle_deg, second)) < 1.0
        assert fam.significance > 0
        assert fam.to_dict(with_lines=True)["sought_at_deg"] == pytest.approx(fam.sought_at, abs=1e-4)
        assert "predicted trace" in _summary(fam)
        assert fam.sought_on in ("ridge pixels", "line sums")


def _summary(fam):
    from tracefit.image.detect import _summary_note

    return _summary_note([fam])


def test_traces_far_from_every_band_find_nothing_more():
    labels = grain_labels()
    for seed, first in ANGLES[:4]:
        img, second = _second(seed, first)
        away = [(first + 25.0) % 180.0, (first + 90.0) % 180.0, (second + 25.0) % 180.0, (first + 155.0) % 180.0]
        res = detect_bands(img, labels=labels, grain=1, predicted_traces=away)
        assert [f for f in res.families if f.sought_at is not None] == [], seed


def test_band_free_grains_give_no_family_along_any_traces():
    labels = grain_labels()
    rng = np.random.default_rng(11)
    for seed, _ in ANGLES:
        img = short_band_map(0.0, seed, with_bands=False)
        for n in (4, 12):
            traces = list(rng.uniform(0.0, 180.0, n))
            res = detect_bands(img, labels=labels, grain=1, predicted_traces=traces)
            assert res.families == [], (seed, n, [(f.angle_deg, f.significance) for f in res.families])


def test_textures_left_without_families_mostly_stay_so():
    # scikit-image's sample textures (skimage.data). In small crops their stones and blades can line
    # up, and the open search then reports a family itself; where it reports none, a search along
    # four random traces (fcc's {111}) should add one rarely (3 of 108 random crops of nine sample
    # images when the thresholds were chosen; this test's crops are its own draw: 18 of its 32 crops
    # are left empty by the open search, 3 of them turn by stage 6c and 1 more by 6d). Not brick: its crops hold long straight parallel joints, a true
    # family of lines (../shared/realdata/README.md lists brick as a positive that is not a metal),
    # which the searches along traces rightly find
    from skimage import data

    labels = grain_labels()
    rng = np.random.default_rng(5)
    empty, turned = 0, []
    for name in ("grass", "gravel"):
        img = getattr(data, name)().astype(np.float32)
        for _ in range(16):
            r0 = int(rng.integers(0, img.shape[0] - labels.shape[0]))
            c0 = int(rng.integers(0, img.shape[1] - labels.shape[1]))
            crop = img[r0:r0 + labels.shape[0], c0:c0 + labels.shape[1]]
            traces = list(rng.uniform(0.0, 180.0, 4))
            res = detect_bands(crop, labels=labels, grain=1, predicted_traces=traces)
            if not any(f.sought_at is None for f in res.families):
                empty += 1
                turned += [(name, r0, c0, round(f.significance, 1)) for f in res.families]
    assert empty >= 14, empty  # of 32
    assert len(turned) <= 4, turned


def test_more_traces_ask_more_of_each_family():
    from tracefit.image.projection import _guided_share

    for strict in (True, False):
        shares = [_guided_share(strict, n) for n in (1, 4, 8, 24)]
        assert shares[0] == shares[1] < shares[2] < shares[3] < 1.0


def test_predicted_traces_are_checked():
    img = short_band_map(30.0, 0)
    labels = grain_labels()
    for bad in (["a"], [float("nan")], 5.0, "45", {1: [30.0]}, [[30.0, 40.0]]):
        with pytest.raises(TracefitInputError, match="predicted_traces"):
            detect_bands(img, predicted_traces=bad)
    with pytest.raises(TracefitInputError, match="predicted_traces"):
        detect_grains(img, labels, predicted_traces=[30.0])  # per grain: a dict


def test_detect_grains_gives_each_grain_its_own_traces():
    seed, first = ANGLES[4]  # a map whose second family only the guided search finds
    img, second = _second(seed, first)
    labels = grain_labels()
    by_grains = detect_grains(img, labels, grains=[1], predicted_traces={1: _traces(first, second)})[1]
    one = detect_bands(img, labels=labels, grain=1, predicted_traces=_traces(first, second))
    assert any(f.sought_at is not None for f in by_grains.families)
    assert [f.angle_deg for f in by_grains.families] == [f.angle_deg for f in one.families]
    other = detect_grains(img, labels, grains=[1], predicted_traces={0: _traces(first, second)})[1]
    assert all(f.sought_at is None for f in other.families)
    assert len(other.families) < len(by_grains.families)


def test_a_map_enlarged_in_blocks_gives_the_same_guided_family():
    # a map enlarged 2x by repeating each point (nearest neighbour) is analysed at its own sampling
    seed, first = ANGLES[4]
    img, second = _second(seed, first)
    labels = grain_labels()
    native = detect_bands(img, labels=labels, grain=1, predicted_traces=_traces(first, second))
    big = detect_bands(np.repeat(np.repeat(img, 2, 0), 2, 1), labels=np.repeat(np.repeat(labels, 2, 0), 2, 1),
                       grain=1, predicted_traces=_traces(first, second))
    want = [(round(f.angle_deg, 3), f.sought_at) for f in native.families]
    assert any(s is not None for _, s in want)
    assert [(round(f.angle_deg, 3), f.sought_at) for f in big.families] == want


def test_bad_traces_per_grain_are_refused_with_the_grain_named():
    img, _ = _second(*ANGLES[0])
    labels = grain_labels()
    for bad, words in (({"a": [30.0]}, "integer grain ids"), ({None: [30.0]}, "integer grain ids"),
                       ({1.5: [30.0]}, "integer grain ids"), ({0: "x"}, "of grain 0"), ({1: [[1.0, 2.0]]}, "of grain 1")):
        with pytest.raises(TracefitInputError, match=words):
            detect_grains(img, labels, grains=[1], predicted_traces=bad)


# --------------------------------------------------------------------------- the chain
def test_fcc_traces_on_a_cube_surface_lie_along_the_face_diagonals():
    # {111} planes meet a (001) surface along <110>: at 45 and 135 deg (common practice, no source)
    from tracefit.crystal import Lattice, catalogue
    from tracefit.conventions import FrameSettings
    from tracefit.pipeline.grainmap import _traces_to_seek

    lat = Lattice.fcc()
    got = _traces_to_seek(lat, catalogue(lat, modes=["slip"]), FrameSettings(), None, np.eye(3))
    assert got == pytest.approx([45.0, 135.0])


def _scipy_traces(euler_deg):
    """{111} trace angles for Bunge angles, computed with scipy's Rotation (an outside reference): the
    active rotation Rz(phi1) Rx(Phi) Rz(phi2) takes crystal to sample axes (g = its transpose), and a
    plane with sample normal n meets the surface along atan2(n_y, n_x) + 90 deg."""
    from scipy.spatial.transform import Rotation

    rot = Rotation.from_euler("ZXZ", euler_deg, degrees=True).as_matrix()
    n = np.array([[1, 1, 1], [-1, 1, 1], [1, -1, 1], [1, 1, -1]], float) @ rot.T
    return sorted(float(a) for a in (np.degrees(np.arctan2(n[:, 1], n[:, 0])) + 90.0) % 180.0)


EULER = (10.0, 20.0, 30.0)


def test_the_traces_sought_are_the_predicted_ones():
    from tracefit.crystal import Lattice, catalogue
    from tracefit.conventions import FrameSettings
    from tracefit.pipeline.grainmap import _traces_to_seek

    lat = Lattice.fcc()
    g = tf.Orientation.from_euler(list(EULER))
    table = {7: type("Row", (), {"g": g.as_matrix()})()}
    got = _traces_to_seek(lat, catalogue(lat, modes=["slip"]), FrameSettings(), table, None)
    assert got[7] == pytest.approx(_scipy_traces(EULER), abs=1e-6)


def test_the_chain_looks_along_the_predicted_traces_and_says_so():
    # Bunge (10, 20, 30): {111} traces at 73.3, 99.9, 168.8 and 177.3 deg (no mirror symmetry, so a sign
    # or y-direction error would send the search elsewhere); a strong family on the first, a weak one on the third
    strong, weak = _scipy_traces(EULER)[0], _scipy_traces(EULER)[2]
    g = tf.Orientation.from_euler(list(EULER))
    labels = grain_labels()
    guided_runs, plain_runs = [], []
    for seed in range(12):
        img = short_band_map(strong, seed, crossing=(weak, 0.015))
        res = tf.analyse_image(img, "fcc", orientation=g, mask=labels == 1, modes=["slip"])
        off = tf.analyse_image(img, "fcc", orientation=g, mask=labels == 1, modes=["slip"], guided_search=False)
        guided_runs.append(res)
        plain_runs.append(off)
        assert all(o.source == "detected" for o in off.observed)
    found = sum(bool(_near(r.observed, weak)) for r in guided_runs)
    found_plain = sum(bool(_near(r.observed, weak)) for r in plain_runs)
    assert found >= found_plain + 2, (found_plain, found)
    marked = [(r, o, fid) for r in guided_runs for o, fid in zip(r.observed, r.families) if o.source == "guided"]
    assert marked
    for r, o, fid in marked:
        assert abs(axial_difference(o.angle_deg, weak)) < 2.0
        assert fid.source == "guided"
        assert o.search_width_deg == 2 * GUIDED_TOL_DEG and abs(axial_difference(o.sought_at_deg, weak)) < 0.5
        assert any(f"{o.sought_at_deg:.2f} deg" in n for n in fid.notes)  # the window is in the JSON's notes
        assert abs(axial_difference(fid.best.predicted_deg, weak)) < 1e-3  # the plane whose trace it lies on
        rec = [x for x in r.family_records() if x["source"] == "guided"]
        assert rec and all(abs(axial_difference(x["angle_deg"], weak)) < 2.0 for x in rec)
        rows = [row for row in r.to_frame().to_dict("records") if row["source"] == "guided"]
        assert len(rows) == len(rec)


def test_an_orientation_table_without_labels_gives_no_traces(monkeypatch):
    # a table of grains without a label image has no grains to search (its ids are not angles)
    from tracefit.pipeline import chain

    seen = []
    real = chain.detect_families

    def spy(*a, **k):
        seen.append(k.get("predicted_traces"))
        return real(*a, **k)

    monkeypatch.setattr(chain, "detect_families", spy)
    img = short_band_map(30.0, 0)
    tf.analyse_image(img, "fcc", orientations={7: tf.Orientation.from_euler([0, 0, 0]),
                                               150: tf.Orientation.from_euler([10, 20, 30])}, modes=["slip"])
    tf.analyse_image(img, "fcc", orientation=np.eye(3), modes=["slip"])
    assert seen[0] is None
    assert seen[1] == pytest.approx([45.0, 135.0])


def test_the_frame_check_leaves_guided_families_out(monkeypatch):
    import tracefit.matching as matching
    from tracefit.matching import ObservedFamily
    from tracefit.pipeline import chain

    seen = {}

    class _Fit:
        warnings: list = []

        def to_dict(self):
            return {}

    def fake_fit(use, *a, **k):
        seen["use"] = list(use)
        return _Fit()

    monkeypatch.setattr(matching, "fit_frame", fake_fit)
    obs = [ObservedFamily(10.0 * i, 0.2, grain=i % 6, source="detected" if i % 2 else "guided") for i in range(12)]
    chain._frame_check(obs, tf.Lattice.fcc(), {g: np.eye(3) for g in range(6)}, [], None,
                       {"orientation_sigma_deg": 1.0, "p_none": 0.05}, [])
    assert seen["use"] and all(o.source == "detected" for o in seen["use"])
    assert len(seen["use"]) == 6


def test_identify_marks_guided_families_and_can_leave_them_out(tmp_path, run_cli):
    import json

    import tifffile
    from PIL import Image

    labels = grain_labels()
    img = short_band_map(45.0, 3, crossing=(135.0, 0.008))  # the weak 135-deg family only the guided search finds
    tifffile.imwrite(tmp_path / "map.tif", img)
    Image.fromarray((labels * 255).astype(np.uint8)).save(tmp_path / "grains.png")
    (tmp_path / "ori.csv").write_text("grain,phi1,Phi,phi2\n255,0,0,0\n", encoding="utf-8")
    args = ["identify", str(tmp_path / "map.tif"), "--lattice", "fcc", "--modes", "slip",
            "--grains", str(tmp_path / "grains.png"), "--orientations", str(tmp_path / "ori.csv")]
    code, out, err = run_cli(*args)
    assert code == 0, err
    assert "[guided: found along a predicted trace]" in out
    code, js, err = run_cli(*args, "--json")
    assert code == 0, err
    fams = json.loads(js)["families"]
    guided = [f for f in fams if f["source"] == "guided"]
    assert guided and all(abs(axial_difference(f["angle_deg"], 135.0)) < 2.0 for f in guided)
    code, out_off, err = run_cli(*args, "--no-guided-search")
    assert code == 0, err
    assert "guided" not in out_off
