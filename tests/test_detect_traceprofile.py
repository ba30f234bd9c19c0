"""Stage 6d: predicted traces tested on line sums of the band response (tracefit.image.traceprofile).

The maps are the independent numpy renderer of ``tests/test_detect_projection.py`` (short, wavy,
unevenly bright bands of an HR-DIC max-shear map in a small grain) with a weak second family,
as in ``tests/test_detect_guided.py``; band-free grains are the negatives there. Here: the
geometry of the line sums against drawn ridges, the edge guard, the significance bound against a
direct evaluation, the families the stage adds, and that their angle is measured, not the trace's.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.test_detect_guided import _second, _traces, grain_labels
from tracefit.conventions import axial_difference
from tracefit.image import detect_bands
from tracefit.image import detect as detect_module
from tracefit.image import traceprofile as tp


def _ridge_image(angle_deg, offset, shape=(100, 100), width=1.0, level=1.0, noise=0.0, seed=0):
    """A straight bright Gaussian ridge at image-frame ``angle_deg`` (x right, y up), ``offset`` px from the centre."""
    rng = np.random.default_rng(seed)
    rr, cc = np.mgrid[0:shape[0], 0:shape[1]].astype(float)
    t = math.radians(angle_deg)
    x, y = cc - shape[1] / 2, -(rr - shape[0] / 2)  # y up
    across = -x * math.sin(t) + y * math.cos(t)  # signed distance from the ridge's line through the centre
    img = 1.0 + level * np.exp(-0.5 * ((across - offset) / width) ** 2) + rng.normal(0, noise, shape)
    return img.astype(np.float32)


def _sums(img, valid, unit=1.0, polarity=1):
    rows, cols, edge = tp._region_points(valid, unit)
    return tp._LineSums(tp._response(img, valid, polarity, unit), rows, cols, edge, unit)


@pytest.mark.parametrize("angle, polarity, k", [(0.0, 1, 1), (35.0, 1, 1), (90.0, -1, 1), (128.0, -1, 1), (35.0, 1, 2),
                                                (128.0, -1, 2)])
def test_line_sums_peak_on_a_ridge_at_its_own_angle(angle, polarity, k):
    # a ridge drawn in the image frame (y up, counterclockwise from +x: docs/conventions.md) gives its
    # highest line sum across its own angle, on its own line; bright or dark (polarity), and the same
    # in an image enlarged k times with the unit of k px per point; common practice, no source
    img = _ridge_image(angle, 6.0 * k, shape=(100 * k, 100 * k), width=1.0 * k, level=0.3 * polarity, noise=0.02)
    img[30 * k: 33 * k, 70 * k: 74 * k] = np.nan  # a hole of failed correlation
    valid = np.zeros(img.shape, bool)
    valid[10 * k: 90 * k, 10 * k: 90 * k] = True
    sums = _sums(img, valid & np.isfinite(img), unit=float(k), polarity=polarity)
    scores = {d: sums.peaks(angle + d)[0][0][0] for d in (-10.0, -4.0, 0.0, 4.0, 10.0)}
    assert max(scores, key=scores.get) == 0.0, scores
    (z, s), *rest = sums.peaks(angle)[0]
    # the line through the ridge: the image centre moved ``offset`` along the ridge's normal (y up)
    t = math.radians(angle)
    cx, cy = 50.0 * k - 6.0 * k * math.sin(t), 50.0 * k - 6.0 * k * math.cos(t)  # (col, row)
    from tracefit.image.geometry import _direction_and_normal

    _, n = _direction_and_normal(angle)
    assert abs((cx * n[0] + cy * n[1]) - s) <= 1.0 * k
    assert z > 5.0
    # one ridge is one peak: the flanks of its response are not a second band (every other peak,
    # noise, lies a band's width away and far lower)
    assert all(abs(o - s) >= tp.PEAK_SEPARATION_POINTS * k and v < 0.3 * z for v, o in rest), (z, s, rest[:3])


def test_lines_along_the_region_edge_are_not_tried(monkeypatch):
    # a bright line 2 px inside a straight edge of the region (boundary strain, a groove) is one line
    # of the region's own shape, not a band. The guard's reach is a setting: 3 points by default
    # (chosen on benchmarks/strainmap.py), which leaves out lines grazing the edge at a slant but
    # tries this one (3 points in, just past the 2-point erosion); 5 points here, which reaches it
    monkeypatch.setattr(tp, "EDGE_POINTS", 5.0)
    img = _ridge_image(0.0, 0.0, level=0.2, noise=0.02)
    valid = np.zeros(img.shape, bool)
    valid[48:96, 10:90] = True  # the ridge (row 50; angle 0: the line sums run along rows) lies 2 px inside the top edge

    def at_ridge():
        z, ok, s0 = _sums(img, valid).at(0.0)
        k = int(math.floor(50.0 - s0))
        return z, ok, k

    z, ok, k = at_ridge()
    assert not ok[k] and not ok[k + 1]
    monkeypatch.setattr(tp, "EDGE_POINTS", 0.0)
    z, ok, k = at_ridge()
    assert ok[k] and int(np.argmax(np.where(ok, z, -np.inf))) == k  # without the guard that line stands out


@pytest.mark.parametrize("score, n_lines, n_tests", [(8.0, 40, 52), (12.0, 25, 13), (5.0, 80, 300), (20.0, 3, 1)])
def test_significance_bound_matches_a_direct_evaluation(score, n_lines, n_tests):
    # the number of false alarms bounded as in Desolneux, Moisan & Morel, "Meaningful alignments",
    # IJCV 40 (2000): tests x ways of choosing the 3 peaks x the normal tail of their sum
    # (Bonferroni's inequality), evaluated directly with math.comb and scipy.stats.norm
    from scipy.stats import norm

    direct = math.log10(n_tests * math.comb(n_lines, tp.TOP_LINES) * norm.sf(score / math.sqrt(tp.TOP_LINES)))
    assert tp._log10_nfa(score, n_lines, n_tests) == pytest.approx(direct, abs=1e-6)


def test_the_bound_asks_more_of_larger_regions_and_more_traces():
    base = tp._log10_nfa(10.0, 40, 52)
    assert tp._log10_nfa(11.0, 40, 52) < base
    assert tp._log10_nfa(10.0, 80, 52) > base
    assert tp._log10_nfa(10.0, 40, 156) > base


class _Made(list):
    """The families stage 6d built (by identity: ids of freed objects are reused)."""

    def __contains__(self, fam):
        return any(fam is f for f in self)


def _six_d(monkeypatch):
    """Record the families stage 6d builds."""
    made = _Made()
    build = tp._build

    def recording(*args, **kwargs):
        built = build(*args, **kwargs)
        if built is not None:
            made.append(built[0])
        return built

    monkeypatch.setattr(tp, "_build", recording)
    return made


def test_weak_families_are_found_by_line_sums_along_their_traces(monkeypatch):
    labels = grain_labels()
    made = _six_d(monkeypatch)
    with_6d, without, by_6d = 0, 0, []
    for seed in range(16):
        first = (23 + 37 * seed) % 180
        img, second = _second(seed, first)
        for off in (-1.5, 1.5):
            traces = _traces(first, second, off)
            monkeypatch.setattr(detect_module, "PROFILE_SHARE", math.inf)
            plain = detect_bands(img, labels=labels, grain=1, predicted_traces=traces)
            monkeypatch.setattr(detect_module, "PROFILE_SHARE", tp.PROFILE_SHARE)
            res = detect_bands(img, labels=labels, grain=1, predicted_traces=traces)
            near = lambda fams: [f for f in fams if abs(axial_difference(f.angle_deg, second)) <= 2.0]  # noqa: E731
            without += bool(near(plain.families))
            with_6d += bool(near(res.families))
            by_6d += [(f, second, (second + off) % 180.0) for f in res.families if f in made]
            # the other guided families were built from ridge pixels (stage 6c), and say so
            assert all(f.sought_on == "ridge pixels" for f in res.families if f.sought_at is not None and f not in made)
    assert with_6d >= without + 3, (without, with_6d)
    assert by_6d
    for fam, second, trace in by_6d:
        assert abs(axial_difference(fam.angle_deg, second)) <= 2.0  # every one is the drawn family
        assert fam.sought_at == pytest.approx(trace)
        assert fam.significance >= tp.PROFILE_SHARE * 16.0
        assert 0.0 < fam.angle_sigma_deg < 2.0
        assert fam.n_bands >= 2
        assert fam.sought_on == "line sums" and fam.to_dict(with_lines=True)["sought_on"] == "line sums"


def test_the_angle_is_measured_from_the_bands_not_taken_from_the_trace(monkeypatch):
    # the same bands sought at traces 3 deg apart give the same measured angle
    labels = grain_labels()
    made = _six_d(monkeypatch)
    seed = 13
    first = (23 + 37 * seed) % 180
    img, second = _second(seed, first)
    angles = []
    for off in (-1.5, 1.5):
        res = detect_bands(img, labels=labels, grain=1, predicted_traces=_traces(first, second, off))
        angles += [f.angle_deg for f in res.families if f in made]
    assert len(angles) == 2, angles
    assert abs(axial_difference(*angles)) < 0.3, angles
    assert all(abs(axial_difference(a, second)) < 1.0 for a in angles), (angles, second)


def test_band_free_grains_give_no_family_by_line_sums(monkeypatch):
    from tests.test_detect_projection import short_band_map

    labels = grain_labels()
    made = _six_d(monkeypatch)
    rng = np.random.default_rng(23)
    found = []
    for seed in range(24):
        img = short_band_map(0.0, 100 + seed, with_bands=False)
        res = detect_bands(img, labels=labels, grain=1, predicted_traces=list(rng.uniform(0.0, 180.0, 4)))
        found += [(seed, f.angle_deg, f.significance) for f in res.families if f in made]
    assert found == []


def test_a_trace_whose_best_direction_lies_at_the_window_edge_or_under_a_stronger_one_gives_nothing():
    # two ridges drawn in the image frame, below the clipping: a strong one at 47 deg and a weaker one at 40 deg
    img = _ridge_image(47.0, 12.0, level=0.2, noise=0.05) + _ridge_image(40.0, -10.0, level=0.1, seed=1) - 1.0
    valid = np.zeros(img.shape, bool)
    valid[8:92, 8:92] = True
    sums = _sums(img, valid)
    found = tp._best_near(sums, 46.2)
    assert found is not None and abs(axial_difference(found[1], 47.0)) <= 1.0
    # a trace at 43.5 deg: its window (40.5-46.5 deg) rises towards the strong ridge, the maximum is at its edge
    assert tp._best_near(sums, 43.5) is None
    # a trace at 40 deg finds its ridge inside its window, but the stronger one 7 deg away scores higher
    assert tp._best_near(sums, 40.0) is None
    assert max(sums.peaks(40.0)[0])[0] > tp.MIN_BAND_Z  # the weaker ridge is there


def test_two_bands_or_irregular_spacing_are_asked_more():
    need = tp.PROFILE_SHARE * 16.0  # the default min_significance
    assert tp._passes(True, need + 0.1, need, 80.0, 30.0)  # a regular family: the significance alone
    assert not tp._passes(False, need + 0.1, need, 10.0, 30.0)
    assert tp._passes(False, tp.NON_STRICT_FACTOR * need, need, 10.0, 30.0)
    assert not tp._passes(False, 100.0, need, 40.0, 30.0)  # two far-apart lines: edges, not a family


def _chord(angle_deg, offset, lo, hi, centre=50.0):
    """Length (points) of the line at ``angle_deg`` ``offset`` from the centre inside the square [lo, hi]^2."""
    t = math.radians(angle_deg)
    s = np.linspace(-100.0, 100.0, 200001)
    col = centre + s * math.cos(t) - offset * math.sin(t)  # as _ridge_image places it (x right, y up)
    row = centre - s * math.sin(t) - offset * math.cos(t)
    inside = (col >= lo) & (col <= hi) & (row >= lo) & (row <= hi)
    return float(np.ptp(s[inside]))


def test_the_angle_uncertainty_is_the_bands_standard_error_at_any_enlargement():
    # three straight bands at 30.0, 30.6 and 31.2 deg: the family angle's standard error is the
    # spread of the three over the root of three (Student's t for two degrees of freedom, 1.32 for
    # one sigma; common practice, no source), with what placing each line allows. The detector multiplies a region's angle uncertainties
    # by the root of its internal enlargement (tracefit.image.detect._rescaled_outcome), so what
    # _refined_angle returns times that root is what the user sees.
    from scipy.stats import t as student_t

    angles = (30.0, 30.6, 31.2)
    standard_error = float(np.std(angles, ddof=1)) / math.sqrt(3) * float(student_t.ppf(0.8413, 2))
    # combined with placing each band's line to END_ERROR_POINTS at either end: atan(sqrt(2) x that
    # / its length) a band, the bands' inverse-variance sum (lengths: the bands' chords in the summed
    # square, rows and columns 17-82 of the region 15-84 less the 2-point erosion)
    lengths = [_chord(a, off, 15 + tp.ERODE_POINTS, 84 - tp.ERODE_POINTS) for a, off in zip(angles, (-20.0, 0.0, 20.0))]
    placing = sum(math.degrees(math.atan(math.sqrt(2) * tp.END_ERROR_POINTS / n)) ** -2 for n in lengths) ** -0.5
    expected = math.hypot(standard_error, placing)
    for k in (1, 2):
        img = sum(_ridge_image(a, off * k, shape=(100 * k, 100 * k), width=1.0 * k, level=0.3, seed=i) - 1.0
                  for i, (a, off) in enumerate(zip(angles, (-20.0, 0.0, 20.0)))) + 1.0
        img += np.random.default_rng(7).normal(0, 0.01, img.shape).astype(np.float32)
        valid = np.zeros(img.shape, bool)
        valid[15 * k: 85 * k, 15 * k: 85 * k] = True
        sums = _sums(img, valid, unit=float(k))
        centres = tp._band_centres(sums, 30.6, [p[1] for p in sums.peaks(30.6)[0][:3]])
        angle, sigma = tp._refined_angle(sums, 30.6, centres)
        assert abs(axial_difference(angle, 30.6)) < 0.15, (k, angle)
        assert sigma * math.sqrt(k) == pytest.approx(expected, rel=0.25), (k, sigma)


def test_parallel_bands_keep_the_uncertainty_of_placing_their_lines():
    # two exactly parallel bands agree by chance to far better than their lines can be placed: the
    # stated uncertainty is then that of placing each band's line to END_ERROR_POINTS at either end
    # (atan(sqrt(2) x that / its length); the mean of two)
    for k in (1, 2):
        img = sum(_ridge_image(40.0, off * k, shape=(100 * k, 100 * k), width=1.0 * k, level=0.3, seed=i) - 1.0
                  for i, off in enumerate((-15.0, 15.0))) + 1.0
        valid = np.zeros(img.shape, bool)
        valid[15 * k: 85 * k, 15 * k: 85 * k] = True
        sums = _sums(img, valid, unit=float(k))
        centres = tp._band_centres(sums, 40.0, [p[1] for p in sums.peaks(40.0)[0][:2]])
        angle, sigma = tp._refined_angle(sums, 40.0, centres)
        lengths = [_chord(40.0, off, 15 + tp.ERODE_POINTS, 84 - tp.ERODE_POINTS) for off in (-15.0, 15.0)]
        placing = sum(math.degrees(math.atan(math.sqrt(2) * tp.END_ERROR_POINTS / n)) ** -2 for n in lengths) ** -0.5
        assert abs(axial_difference(angle, 40.0)) < 0.1, (k, angle)
        assert sigma * math.sqrt(k) == pytest.approx(placing, rel=0.2), (k, sigma, placing)

