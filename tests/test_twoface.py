"""Two-surface analysis: plane normal from traces on two faces, indexed against the candidates."""

import math

import numpy as np
import pytest

from tracefit.errors import TracefitInputError
from tracefit.crystal import lattice_preset
from tracefit.crystal import catalogue
from tracefit.matching import FaceGeometry, index_two_face, interplanar_pairs, plane_from_two_traces, trace_on_face

FCC = lattice_preset("fcc")


def same_plane(a, b):
    a, b = np.array(a), np.array(b)
    return bool(np.all(a == b) or np.all(a == -b))


@pytest.mark.parametrize("a1,a2", [(45, 45), (45, 135), (135, 45), (135, 135)])
def test_face_diagonal_traces_on_a_cube_give_the_four_111_planes(a1, a2):
    # A cube-oriented crystal (crystal axes = sample axes) cut as a block: top face (001), front
    # face (0-10). {111} planes meet both {100} faces along <110> face diagonals, and make
    # 54.74 deg with {100}: cos = (h1 h2 + k1 k2 + l1 l2) / (|h1 k1 l1| |h2 k2 l2|) = 1 / sqrt3, the
    # cubic interplanar-angle formula (tabulated in Cullity, Elements of X-ray Diffraction; table
    # location from memory). Each pair of diagonals picks one {111} plane.
    n, sig = plane_from_two_traces(a1, a2, FaceGeometry(0.0, 90.0), 0.3, 0.3)
    assert math.degrees(math.acos(abs(n[2]))) == pytest.approx(math.degrees(math.acos(1 / math.sqrt(3))), abs=1e-9)
    assert sig < 1.0
    res = index_two_face([(a1, a2)], FaceGeometry(), FCC, np.eye(3), catalogue(FCC, ("slip",)))[0]
    best = res.matches[0]
    assert best.probability > 0.95 and best.angle_deg < 1e-6
    # the plane whose normal is parallel to the measured one
    assert abs(abs(FCC.plane_normal(best.plane) @ n) - 1) < 1e-9
    assert not res.unexplained


def test_the_four_diagonal_pairs_are_four_different_planes():
    planes = []
    for a1, a2 in [(45, 45), (45, 135), (135, 45), (135, 135)]:
        planes.append(index_two_face([(a1, a2)], FaceGeometry(), FCC, np.eye(3), catalogue(FCC, ("slip",)))[0].matches[0].plane)
    for i in range(4):
        for j in range(i + 1, 4):
            assert not same_plane(planes[i], planes[j])


@pytest.mark.parametrize("geom", [FaceGeometry(0, 90), FaceGeometry(30, 90), FaceGeometry(-50, 70), FaceGeometry(100, 120)])
def test_reconstruction_inverts_the_forward_traces(geom):
    rng = np.random.default_rng(2)
    for _ in range(5):
        n = rng.normal(size=3)
        n /= np.linalg.norm(n)
        a1, a2 = trace_on_face(n, geom)
        try:
            m, _ = plane_from_two_traces(a1, a2, geom)
        except TracefitInputError:
            continue
        assert abs(abs(m @ n) - 1) < 1e-9


def test_interplanar_angle_without_an_orientation():
    # Two {111} normals of FCC: 70.53 deg apart, cos = 1/3 by the cubic interplanar-angle formula
    # (tabulated in Cullity, Elements of X-ray Diffraction, {111}^{111}; table location from memory).
    n1, _ = plane_from_two_traces(45, 45)
    n2, _ = plane_from_two_traces(135, 45)
    meas, rows = interplanar_pairs([n1, n2], FCC, [(1, 1, 1), (1, 1, 0), (1, 0, 0)])
    assert meas == pytest.approx(math.degrees(math.acos(1.0 / 3.0)), abs=1e-9)
    assert rows and rows[0][0] == (1, 1, 1) and rows[0][1] == (1, 1, 1)


def test_unindexable_normal_is_unexplained_and_edge_traces_are_rejected():
    # (100)-type normal: no {111} plane lies near it (54.7 deg away).
    res = index_two_face([(90.0, 90.0)], FaceGeometry(), FCC, np.eye(3), catalogue(FCC, ("slip",)))[0]
    assert res.unexplained
    with pytest.raises(TracefitInputError):
        plane_from_two_traces(0.0, 0.0)  # both along the common edge
