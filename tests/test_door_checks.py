"""Regression tests for inputs the fuzz (benchmarks/fuzz.py, issue 16 item 1) found crashing.

Each call gave a raw TypeError/ValueError/OverflowError/AttributeError before; the rule is
tracefit's own (common practice, no source): bad input raises TracefitInputError whose message
names the library parameter.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

import tracefit as tf
from tracefit.errors import TracefitInputError, real_array, real_number
from tracefit.options import check_options

NAN, INF = float("nan"), float("inf")


@pytest.mark.parametrize("call, name", [
    (lambda: tf.Lattice(6.6, 7.0, 2.7, 87.0, "", 103.0), "beta"),
    (lambda: tf.Lattice(5.6, 2.7, {}, 53.0, 39.0, 36.0), "c"),
    (lambda: tf.Lattice(7.4, (), 9.5, 113.0, 99.0, 143.0), "b"),
    (lambda: tf.Lattice(3.0, 337.65, 1e300, 120, 90, 120, laue="6/mmm"), "a, b, c"),
    (lambda: tf.Lattice(3.0, 3.0, 3.0, laue=3), "Laue"),
    (lambda: tf.Lattice(3.0, 3.0, 3.0, hex_setting=None), "hexagonal setting"),
    (lambda: tf.Lattice.hcp(1.6, a=()), "a"),
    (lambda: tf.Orientation.from_euler("1,2,3"), "euler"),
    (lambda: tf.Orientation.from_quaternion([1.0, 0.0, 0.0, "x"]), "q"),
    (lambda: tf.Orientation.from_quaternion([1.0, {}, 0.0, 0.0]), "q"),
    (lambda: tf.Orientation.from_matrix("eye"), "matrix"),
    (lambda: tf.Orientation.from_matrix(np.eye(3) * 2, tol=NAN), "tol"),
    (lambda: tf.Load.stress("100,0,0,0,0,0"), "stress_mpa"),
    (lambda: tf.Load.stress([1, 2, 3, {}, 5, 6]), "stress_mpa"),
    (lambda: tf.ObservedFamily([1.0]), "angle_deg"),
    (lambda: tf.ObservedFamily(30.0, angle_sigma_deg="x"), "angle_sigma_deg"),
    (lambda: tf.plane_from_two_traces(51.9, "1"), "face2_deg"),
    (lambda: tf.plane_from_two_traces(90, 10, sigma1_deg=1e300), "sigma1_deg"),
    (lambda: tf.plane_from_two_traces(INF, 10), "face1_deg"),
    (lambda: tf.catalogue(tf.Lattice.fcc(), modes=3), "modes"),
    (lambda: tf.catalogue(tf.Lattice.fcc(), modes=None), "modes"),
    (lambda: tf.catalogue(tf.Lattice.fcc(), families=[{}, "{111}"]), "families"),
    (lambda: tf.catalogue(tf.Lattice.fcc(), families=5), "families"),
    (lambda: check_options(None, "detect"), "values"),
    (lambda: check_options({"p_none": 0.1}, None), "group"),
    (lambda: check_options({"p_none": 0.1}, "bogus"), "group"),
    (lambda: check_options({"max_families": 10**400}, "detect"), "max_families"),
    (lambda: check_options({"orientation_sigma_deg": 10**400}, "identify"), "orientation_sigma_deg"),
])
def test_bad_input_raises_input_error_naming_the_parameter(call, name):
    with pytest.raises(TracefitInputError, match=name):
        call()


@pytest.mark.parametrize("values", [None, "111", [1.5, 1, 1], [float("nan"), 1, 1], [1, 2], [True, 1, 0]])
def test_format_index_refuses_what_is_not_whole_numbers(values):
    # [1.5, 1, 1] printed "(111)" before (silent truncation); None and NaN raised raw errors.
    with pytest.raises(TracefitInputError, match="values"):
        tf.format_index(values, "plane")


def test_format_index_keeps_whole_floats_and_numpy_ints():
    assert tf.format_index([1.0, -1.0, 0.0], "plane") == tf.format_index(np.array([1, -1, 0]), "plane")


def test_identify_grain_table_must_be_a_mapping_and_frame_a_frame_settings():
    lat = tf.Lattice.fcc()
    with pytest.raises(TracefitInputError, match="orientations"):
        tf.identify([30.0], lat, orientations=[1, 2, 3])
    with pytest.raises(TracefitInputError, match="frame"):
        tf.identify([30.0], lat, orientation=tf.Orientation.from_euler([1, 2, 3]), frame="image")
    with pytest.raises(TracefitInputError, match="frame"):
        tf.analyse_image(np.zeros((32, 32), np.uint8), lat, orientation=tf.Orientation.from_euler([1, 2, 3]), frame=0.0)


def test_identify_grain_table_with_bare_angles():
    # The frame check of a grain map read .grain of every item: bare angles crashed there.
    g = tf.Orientation.from_euler([1, 2, 3])
    res = tf.identify([30.0, tf.ObservedFamily(60.0, grain=1)], tf.Lattice.fcc(), orientations={1: g})
    assert len(res.families) == 2 and res.families[1].grain == 1


def test_matrix_tolerance_nan_does_not_accept_a_non_rotation():
    # NaN compared false against every deviation, so any matrix passed before.
    with pytest.raises(TracefitInputError):
        tf.Orientation.from_matrix(np.eye(3) * 2, tol=NAN)


@pytest.mark.parametrize("value", ["x", (), object(), [1.0]])
def test_predict_traces_near_surface_must_be_a_number(value):
    lat = tf.Lattice.fcc()
    with pytest.raises(TracefitInputError, match="near_surface_deg"):
        tf.predict_traces(lat, tf.Orientation.from_euler([10, 20, 30]), tf.catalogue(lat), near_surface_deg=value)


def _identify(observed, **kw):
    return tf.identify(observed, tf.Lattice.fcc(), orientation=tf.Orientation.from_euler([35, 20, 60]), **kw)


def test_identify_takes_a_mix_of_families_and_bare_angles():
    # A bare number is a measured angle (documented in as_observed); mixed lists crashed with
    # AttributeError before.
    res = _identify([tf.ObservedFamily(12.0), 71.0])
    assert [f.source for f in res.families] == ["detected", "measured"]
    assert res.families[1].angle_deg == pytest.approx(71.0)


def test_identify_refuses_a_non_angle_in_the_list():
    with pytest.raises(TracefitInputError, match="observed family"):
        _identify([tf.ObservedFamily(12.0), object()])


def test_identify_single_mode_string_is_one_mode():
    # list("twin") made four one-letter modes before; twin-only candidates must remain.
    res = _identify([71.0], modes="twin")
    modes = {m.mode for c in res.families[0].candidates for m in c.modes} | {n["mode"] for n in res.families[0].nearest}
    assert modes == {"twin"}
    with pytest.raises(TracefitInputError, match="modes"):
        _identify([71.0], modes=None)


def test_identify_p_none_zero_gives_finite_probabilities():
    # issue 16 item 2: p_none = 0 with two families gave NaN probabilities.
    res = _identify([12.0, 71.0], p_none=0.0)
    probs = [c.probability for f in res.families for c in f.candidates] + [f.p_none for f in res.families]
    assert probs and all(np.isfinite(p) for p in probs)
    assert all(f.p_none == 0.0 for f in res.families)


def test_plane_from_two_traces_folds_axial_angles():
    # A trace angle is axial: 30 and 210 deg are one line, so the plane is the same.
    n1, s1 = tf.plane_from_two_traces(30.0, 60.0)
    n2, s2 = tf.plane_from_two_traces(210.0, 60.0 - 180.0)
    np.testing.assert_allclose(n1, n2, atol=1e-12)
    assert s1 == pytest.approx(s2)


def test_real_number_and_real_array_helpers():
    assert real_number(np.float32(2.5), "x") == 2.5
    for bad in (True, "1", None, [1.0], complex(1, 1), NAN, INF):
        with pytest.raises(TracefitInputError, match="^x must"):
            real_number(bad, "x")
    assert real_number(INF, "x", finite=False) == INF
    assert real_array([[1, 2], [3, 4]], "m").shape == (2, 2)
    for bad in ("1,2", [1, "a"], [1, {}], [NAN]):
        with pytest.raises(TracefitInputError, match="^m must"):
            real_array(bad, "m")


# ------------------------------------------------------------------ command line

def test_cli_predict_with_stress_prints_resolved_shear(run_cli):
    # Was a TypeError traceback: the table formatted the (absent) Schmid factor of a stress load.
    code, out, err = run_cli("predict", "-l", "fcc", "-e", "35,20,60", "--stress", "100,0,0,0,0,0")
    assert code == 0, err
    assert "tau MPa" in out
    # Uniaxial 100 MPa: every resolved shear is at most half of it (Schmid factor <= 0.5).
    rows = [ln.split() for ln in out.splitlines() if ln[:7].strip().replace(".", "").isdigit()]
    taus = [float(r[5]) for r in rows]
    assert taus and all(abs(t) <= 50.0 + 1e-6 for t in taus) and max(abs(t) for t in taus) > 10.0


@pytest.mark.parametrize("args, what", [
    (["detect", "{img}", "--overlay", "{tmp}/x.xyz"], "unknown picture type"),
    (["detect", "{img}", "--overlay", "{tmp}"], "is a folder"),
    (["detect", "{img}", "--overlay", "{tmp}/no/such/x.png"], "does not exist"),
    (["identify", "{img}", "-l", "fcc", "-e", "1,2,3", "--overlay", "{tmp}/x.xyz"], "unknown picture type"),
    (["predict", "-l", "fcc", "-e", "1,2,3", "--canvas", "32x32", "--out", "{tmp}/x.xyz"], "unknown picture type"),
])
def test_cli_output_picture_checked_before_any_work(run_cli, tmp_path, args, what):
    # Before, detection ran (progress lines on stderr) and then cv2 raised or an error line followed.
    img = Path(__file__).resolve().parents[1] / "demo_images" / "coupon_A.png"
    argv = [a.format(img=img, tmp=tmp_path) for a in args]
    code, _out, err = run_cli(*argv)
    assert code == 2
    lines = [ln for ln in err.splitlines() if ln.strip()]
    assert len(lines) == 1 and lines[0].startswith("tracefit: error:") and what in lines[0], err


def test_cli_bad_input_error_is_not_buried_under_warnings(run_cli):
    # hcp without c/a warns; with bad Euler angles the run is refused, and the error is the only line.
    code, _out, err = run_cli("predict", "-l", "hcp", "-e", "a,b,c")
    assert code == 2
    assert err.strip().splitlines() == [err.strip()] and err.startswith("tracefit: error:"), err
    code, _out, err = run_cli("predict", "-l", "hcp", "-e", "1,2,3")
    assert code == 0 and "tracefit: warning: no c/a given" in err


@pytest.mark.parametrize("direction, axis, name", [
    ([1, 1, 0], [0, 0, 0], "known_axis"),      # zero axis: scipy's 'zero norm quaternions' before
    ([1, 1, 0], [float("nan"), 0, 1], "known_axis"),
    ("110", [0, 0, 1], "direction"),            # a bare string: IndexError before
])
def test_search_orientations_known_direction_checked(direction, axis, name):
    lat = tf.Lattice.fcc()
    with pytest.raises(TracefitInputError, match=name):
        tf.search_orientations([10.0, 50.0, 120.0], lat, tf.catalogue(lat), known_direction=direction, known_axis=axis,
                               n_samples=100, n_seeds=2)
