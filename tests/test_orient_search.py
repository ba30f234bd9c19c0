"""Orientation search: recovers a known orientation up to crystal symmetry.

Truth is checked with orix (test-only reference): the misorientation angle under the cubic
point group Oh (orix ``Orientation.angle_with``), independent of tracefit.crystal.symmetry.
"""

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.matching import ObservedFamily
from tracefit.matching import search_orientations
from tracefit.crystal import catalogue

FCC = lattice_preset("fcc")
PLANES = [(1, 1, 1), (-1, 1, 1), (1, -1, 1), (1, 1, -1)]


def orix_angle(g1, g2):
    orix_q = pytest.importorskip("orix.quaternion")
    Orientation, symmetry = orix_q.Orientation, orix_q.symmetry
    o1 = Orientation.from_matrix(np.asarray(g1), symmetry=symmetry.Oh)
    o2 = Orientation.from_matrix(np.asarray(g2), symmetry=symmetry.Oh)
    return float(np.ravel(o1.angle_with(o2, degrees=True))[0])


def traces(R, planes):
    n = R.apply(FCC.plane_normal(np.array(planes)))
    return [(math.degrees(math.atan2(v[1], v[0])) + 90.0) % 180.0 for v in n], np.degrees(np.arccos(np.abs(n[:, 2])))


def test_three_families_recover_the_orientation_up_to_symmetry():
    R = Rotation.from_euler("ZXZ", (35.0, 52.0, 18.0), degrees=True)
    ang, incl = traces(R, PLANES)
    use = [i for i in np.argsort(-incl)[:3]]
    obs = [ObservedFamily(ang[i], 0.2) for i in use]
    res = search_orientations(obs, FCC, catalogue(FCC, ("slip",)), n_samples=20000, n_seeds=24)
    g_true = R.as_matrix().T
    # truth, or its indistinguishable partner turned 180 deg about the surface normal, is listed
    rz = Rotation.from_euler("z", 180, degrees=True).as_matrix()
    best = min(min(orix_angle(c.g, g_true), orix_angle(c.g @ rz, g_true)) for c in res.candidates)
    assert best < 1.0
    assert all(c.rms_residual_deg < 0.5 for c in res.candidates)
    assert res.free_parameters == 0


def test_known_growth_axis_and_two_families():
    # A single crystal grown along [001], which lies along the sample x axis (the load axis).
    R0, _ = Rotation.align_vectors([[1, 0, 0]], [[0, 0, 1]])
    R = Rotation.from_euler("x", 33.0, degrees=True) * R0
    ang, incl = traces(R, PLANES)
    use = [int(i) for i in np.argsort(-incl)[:2]]
    obs = [ObservedFamily(ang[i], 0.2) for i in use]
    res = search_orientations(obs, FCC, catalogue(FCC, ("slip",)), known_direction=(0, 0, 1), known_axis=(1, 0, 0))
    g_true = R.as_matrix().T
    rz = Rotation.from_euler("z", 180, degrees=True).as_matrix()
    # a 180 deg turn about the surface normal keeps an in-surface axis, so the partner is as good
    angles = [min(orix_angle(c.g, g_true), orix_angle(c.g @ rz, g_true)) for c in res.candidates]
    assert min(angles) < 1.0
    assert any("180 deg" in n for n in res.notes)
    for c in res.candidates:
        assert c.constraint_deviation_deg < 3.0


def test_two_families_alone_are_reported_as_underdetermined():
    R = Rotation.from_euler("ZXZ", (10.0, 40.0, 70.0), degrees=True)
    ang, incl = traces(R, PLANES)
    obs = [ObservedFamily(a, 0.3) for a in ang[:2]]
    res = search_orientations(obs, FCC, catalogue(FCC, ("slip",)), n_samples=8000, n_seeds=10)
    assert res.free_parameters == 1
    assert any("1-parameter family" in n for n in res.notes)
    assert len(res.candidates) > 1


def test_one_family_is_an_input_error():
    with pytest.raises(TracefitInputError):
        search_orientations([ObservedFamily(10.0)], FCC, catalogue(FCC))


def test_hcp_four_families_truth_among_the_reported_solutions():
    # hcp (c/a 1.587) with basal, prismatic and {10-12} twin candidates: four families give a
    # handful of exact solutions; the truth must be one of them (orix D6h, test reference).
    from tracefit.matching import candidate_set

    hcp = lattice_preset("hcp", 1.587)
    cs = candidate_set(catalogue(hcp, families=["basal", "prismatic", "{10-12}"]))
    R = Rotation.from_euler("ZXZ", (10.0, 30.0, 50.0), degrees=True)
    n = R.apply(cs.normals)
    ang = (np.degrees(np.arctan2(n[:, 1], n[:, 0])) + 90.0) % 180.0
    incl = np.degrees(np.arccos(np.abs(n[:, 2])))
    obs = [ObservedFamily(ang[i], 0.2) for i in np.argsort(-incl)[:4]]
    res = search_orientations(obs, hcp, cs, max_solutions=100)
    g_true = R.as_matrix().T
    rz = Rotation.from_euler("z", 180, degrees=True).as_matrix()

    orix_q = pytest.importorskip("orix.quaternion")
    Orientation, symmetry = orix_q.Orientation, orix_q.symmetry

    def d6h(g1, g2):
        o1 = Orientation.from_matrix(np.asarray(g1), symmetry=symmetry.D6h)
        o2 = Orientation.from_matrix(np.asarray(g2), symmetry=symmetry.D6h)
        return float(np.ravel(o1.angle_with(o2, degrees=True))[0])

    assert min(min(d6h(c.g, g_true), d6h(c.g @ rz, g_true)) for c in res.candidates) < 0.5
    assert all(math.isfinite(c.uncertainty_deg) for c in res.candidates[:1])
    if len(res.candidates) > 1:
        assert any("distinct orientations" in n for n in res.notes)
