"""Grains from orientation maps: segmentation, symmetry-aware means and spreads.

Round trips through orix's own writers (CrystalMap -> .ang / HDF5 -> tracefit). Outside checks:
orix's misorientation under crystal symmetry (``Orientation.angle_with``), which the means are
measured with, and orix's file writers and readers.
"""

from __future__ import annotations

import numpy as np
import pytest

from tracefit.crystal import Lattice, Orientation, to_quaternion
from tracefit.errors import TracefitInputError
from tracefit.maps import (grain_quaternions, neighbour_misorientation_deg, read_orientation_map, segment_grains,
                           symmetry_quaternions, synthetic_crystal_map, voronoi_labels)

orix_io = pytest.importorskip("orix.io")

SHAPE = (60, 80)
N_GRAINS = 7


def _truth(seed=2):
    rng = np.random.default_rng(seed)
    lab = voronoi_labels(SHAPE, N_GRAINS, seed=seed)
    euler = rng.uniform([0, 0, 0], [360, 180, 360], size=(N_GRAINS, 3))
    return lab, euler


def _orix_angle_deg(q_a, euler_b_deg, point_group):
    """Misorientation angles (deg) by orix under the point group's symmetry (outside check)."""
    from orix.quaternion import Orientation as OrixOrientation
    from orix.quaternion.symmetry import get_point_group

    sym = {"m-3m": get_point_group(225), "6/mmm": get_point_group(194)}[point_group]
    a = OrixOrientation(np.asarray(q_a), symmetry=sym)
    b = OrixOrientation.from_euler(np.radians(euler_b_deg), symmetry=sym)
    return np.degrees(a.angle_with(b))


def _partition_matches(found, truth, valid):
    """Every found grain lies inside one true grain, and vice versa (ids may differ).

    A discrete Voronoi cell may leave a point or two touching its grain only diagonally
    (4-connectivity drops them): at most 0.2 % of the points may be without a grain.
    """
    kept = valid & (found >= 0)
    assert np.count_nonzero(valid & ~kept) <= 0.002 * np.count_nonzero(valid)
    f, t = found[kept], truth[kept]
    pairs = np.unique(np.column_stack([f, t]), axis=0)
    return len(pairs) == len(np.unique(f)) == len(np.unique(t))


@pytest.mark.parametrize("suffix", [".ang", ".h5"])
def test_round_trip_grains_and_means(tmp_path, suffix):
    lab, euler = _truth()
    q = grain_quaternions(lab, euler, noise_deg=0.5, seed=4)
    orix_io.save(str(tmp_path / f"scan{suffix}"), synthetic_crystal_map(q, step=0.2))
    m = read_orientation_map(tmp_path / f"scan{suffix}")
    seg = segment_grains(m.quaternions, m.valid, m.lattice, threshold_deg=5.0)
    assert seg.n_grains == N_GRAINS
    assert _partition_matches(seg.labels, lab, m.valid)
    # each found grain's mean against the truth of the true grain it covers, by orix: < 0.1 deg
    true_of = {int(f): int(lab[seg.labels == f][0]) for f in range(1, N_GRAINS + 1)}
    ang = _orix_angle_deg(seg.mean_quaternions, euler[[true_of[f] for f in range(1, N_GRAINS + 1)]], "m-3m")
    assert np.all(ang < 0.1), ang
    # spread: the scatter put in was 0.5 deg RMS (normal angles about random axes)
    assert np.all(np.abs(seg.spread_deg - 0.5) < 0.05), seg.spread_deg


def test_mean_is_symmetry_aware_when_points_are_stored_as_equivalents():
    # Each point's quaternion replaced by a random symmetric equivalent S q: the same crystal.
    # A mean without symmetry would average unrelated quaternions; the grain must stay one
    # and keep its orientation (checked by orix).
    lab, euler = _truth(seed=8)
    lat = Lattice.hcp(c_over_a=1.587)
    q = grain_quaternions(lab, euler, noise_deg=0.3, seed=9).reshape(-1, 4)
    sym = symmetry_quaternions(lat)
    pick = np.random.default_rng(1).integers(0, len(sym), len(q))
    from tracefit.maps.segment import _qmul

    q_eq = _qmul(sym[pick], q)
    seg = segment_grains(q_eq.reshape(SHAPE + (4,)), np.ones(SHAPE, bool), lat)
    assert seg.n_grains == N_GRAINS
    assert _partition_matches(seg.labels, lab, np.ones(SHAPE, bool))
    true_of = [int(lab[seg.labels == f][0]) for f in range(1, N_GRAINS + 1)]
    assert np.all(_orix_angle_deg(seg.mean_quaternions, euler[true_of], "6/mmm") < 0.1)
    assert np.all(seg.spread_deg < 0.4)


def test_neighbour_misorientation_agrees_with_orix_and_orientation_class():
    rng = np.random.default_rng(5)
    ea = rng.uniform([0, 0, 0], [360, 180, 360], size=(200, 3))
    eb = rng.uniform([0, 0, 0], [360, 180, 360], size=(200, 3))
    qa, qb = to_quaternion(Orientation.from_euler(ea).as_matrix()), to_quaternion(Orientation.from_euler(eb).as_matrix())
    for name, lat in (("m-3m", Lattice.fcc()), ("6/mmm", Lattice.hcp(c_over_a=1.587))):
        ours = neighbour_misorientation_deg(qa, qb, symmetry_quaternions(lat))
        assert np.allclose(ours, _orix_angle_deg(qa, eb, name), atol=1e-6)  # outside check: orix
        assert np.allclose(ours, Orientation.from_euler(ea).misorientation(Orientation.from_euler(eb), lat), atol=1e-6)


def test_threshold_splits_or_joins_two_grains():
    e = np.zeros(SHAPE + (3,))
    e[:, 40:, 0] = 8.0  # 8 deg about z between the halves (not a cubic symmetry)
    q = to_quaternion(Orientation.from_euler(e.reshape(-1, 3)).as_matrix()).reshape(SHAPE + (4,))
    ok = np.ones(SHAPE, bool)
    assert segment_grains(q, ok, Lattice.fcc(), threshold_deg=5.0).n_grains == 2
    assert segment_grains(q, ok, Lattice.fcc(), threshold_deg=10.0).n_grains == 1


def test_small_regions_and_unindexed_points_get_no_grain():
    lab = np.zeros(SHAPE, int)
    lab[10:13, 10:13] = 1  # a 9-point island, well misoriented
    q = grain_quaternions(lab, [[0, 0, 0], [45, 30, 0]])
    valid = np.ones(SHAPE, bool)
    valid[50, 20:30] = False  # a scratch of unindexed points
    seg = segment_grains(q, valid, Lattice.fcc(), min_grain_points=10)
    assert seg.n_grains == 1 and seg.n_dropped_regions == 1
    assert np.all(seg.labels[10:13, 10:13] == -1) and np.all(seg.labels[50, 20:30] == -1)
    assert seg.n_points[0] == SHAPE[0] * SHAPE[1] - 9 - 10
    assert segment_grains(q, valid, Lattice.fcc(), min_grain_points=9).n_grains == 2


@pytest.mark.parametrize("kwargs, match", [
    ({"threshold_deg": 0.0}, "threshold_deg"),
    ({"min_grain_points": 0}, "min_grain_points"),
])
def test_bad_settings(kwargs, match):
    q = grain_quaternions(np.zeros((3, 3), int), [[0, 0, 0]])
    with pytest.raises(TracefitInputError, match=match):
        segment_grains(q, np.ones((3, 3), bool), Lattice.fcc(), **kwargs)
    with pytest.raises(TracefitInputError, match="no indexed points"):
        segment_grains(q, np.zeros((3, 3), bool), Lattice.fcc())
