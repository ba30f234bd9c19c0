"""Resolved shear stress and the CRSS check in the matcher's results (issue 11, item 2).

Reference: tau = n . sigma . d with n and d in the sample frame (Cauchy's traction resolved on the
plane along the shear direction; the formula, not a table value), written out with numpy, and
scipy's Rotation for the Bunge matrix.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.crystal import catalogue, lattice_preset
from tracefit.matching import ObservedFamily, identify_families
from tracefit.predict import Load, predict_traces

FCC = lattice_preset("fcc")
SLIP = catalogue(FCC, ["slip"])
VOIGT = [150.0, -30.0, 0.0, 0.0, 0.0, 40.0]  # MPa, s11, s22, s33, s23, s13, s12
SIGMA = np.array([[150.0, 40.0, 0.0], [40.0, -30.0, 0.0], [0.0, 0.0, 0.0]])
CRSS = {"{111}<110> slip": 45.0}


def _g():
    return Rotation.from_euler("ZXZ", (20.0, 40.0, 10.0), degrees=True).as_matrix().T


def _tau(g, s):
    n = np.asarray(s.normal, float) / np.linalg.norm(s.normal)
    d = np.asarray(s.dir_unit, float) / np.linalg.norm(s.dir_unit)
    return float((g.T @ n) @ SIGMA @ (g.T @ d))


def test_matcher_systems_carry_resolved_shear_and_the_crss_check():
    g = _g()
    tr = predict_traces(FCC, g, SLIP, load=Load.stress(VOIGT))
    obs = [ObservedFamily(t.angle_deg + 0.1, 0.2) for t in tr[:2]]
    res = identify_families(obs, FCC, g, SLIP, load=Load.stress(VOIGT), crss=CRSS)
    checked = 0
    for r in res:
        for c in r.candidates:
            for sc in c.systems:
                s = next(x for x in SLIP if x.plane == c.plane and tuple(x.direction) == tuple(sc.direction))
                assert sc.schmid_factor is None
                assert sc.resolved_shear == pytest.approx(abs(_tau(g, s)), abs=1e-9)
                assert sc.crss == 45.0 and sc.exceeds_crss == (abs(_tau(g, s)) >= 45.0)
                d = sc.to_dict()
                assert d["crss"] == 45.0 and d["exceeds_crss"] == sc.exceeds_crss
                checked += 1
    assert checked >= 6
    flags = [sc.exceeds_crss for r in res for c in r.candidates for sc in c.systems]
    assert any(flags) and not all(flags)  # this stress drives some systems past 45 MPa, not all


def test_predict_traces_gives_the_same_check():
    g = _g()
    for t in predict_traces(FCC, g, SLIP, load=Load.stress(VOIGT), crss=CRSS):
        for sr in t.systems:
            s = next(x for x in SLIP if x.plane == t.plane and tuple(x.direction) == tuple(sr.direction))
            assert sr.resolved_shear == pytest.approx(abs(_tau(g, s)), abs=1e-9)
            assert sr.exceeds_crss == (sr.resolved_shear >= 45.0) and sr.to_dict()["crss"] == 45.0


def test_no_crss_no_check():
    g = _g()
    res = identify_families([ObservedFamily(predict_traces(FCC, g, SLIP)[0].angle_deg, 0.2)], FCC, g, SLIP,
                            load=Load.stress(VOIGT))
    sc = res[0].best.systems[0]
    assert sc.resolved_shear is not None and sc.crss is None and "exceeds_crss" not in sc.to_dict()
