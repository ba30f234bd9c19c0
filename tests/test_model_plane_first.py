"""Plane first, mode second (issue 11, item 5).

Reference for the predicted trace: the trace formula atan2(n_y, n_x) + 90 deg with the normal
turned by scipy's Rotation (docs/conventions.md, section 7), independent of tracefit.predict.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy.spatial.transform import Rotation

from tracefit.crystal import catalogue, from_euler, lattice_preset
from tracefit.matching import ObservedFamily, identifications_to_json, identify_families

FCC = lattice_preset("fcc")
BUNGE = (23.0, 41.0, 67.0)


def _trace(bunge, hkl):
    n = Rotation.from_euler("ZXZ", bunge, degrees=True).apply(np.asarray(hkl, float) / np.linalg.norm(hkl))
    return (math.degrees(math.atan2(n[1], n[0])) + 90.0) % 180.0


def test_a_clear_plane_is_one_row_with_a_split_between_modes():
    obs = [ObservedFamily(_trace(BUNGE, (1, 1, -1)) + 0.1, 0.3)]
    r = identify_families(obs, FCC, from_euler(BUNGE), catalogue(FCC))[0]  # slip and twin
    best = r.best
    assert sorted(best.plane) == sorted((1, 1, -1)) or sorted(best.plane) == sorted((-1, -1, 1))
    assert best.probability > 0.9
    assert [c.plane for c in r.candidates].count(best.plane) == 1  # one row for the plane
    assert {m.mode for m in best.modes} == {"slip", "twin"}
    np.testing.assert_allclose([m.share for m in best.modes], [0.5, 0.5], atol=1e-9)  # equal family priors
    assert sum(m.probability for m in best.modes) == pytest.approx(best.probability, abs=1e-12)
    assert not r.ambiguous


def test_json_keeps_the_old_keys_and_adds_the_split():
    obs = [ObservedFamily(_trace(BUNGE, (1, 1, 1)) - 0.2, 0.3)]
    r = identify_families(obs, FCC, from_euler(BUNGE), catalogue(FCC), load="x")
    c = identifications_to_json(r)["families"][0]["candidates"][0]
    assert {"plane", "family", "mode", "probability", "best_system", "systems", "modes"} <= set(c)
    assert c["mode"] == c["modes"][0]["mode"]
    assert sum(m["probability"] for m in c["modes"]) == pytest.approx(c["probability"], abs=1e-5)
    assert {m["mode"] for m in c["modes"]} == {"slip", "twin"}
    for m in c["modes"]:
        assert set(m) >= {"mode", "family", "share", "probability", "best_system", "systems"}


def test_twin_polarity_moves_the_split_under_the_schmid_prior():
    # With the Schmid prior on, a twin sheared against its sense gets the floor weight 0.02^k, so
    # the split within the plane moves to slip; the plane's probability stays the headline.
    obs = [ObservedFamily(_trace(BUNGE, (1, 1, 1)), 0.3)]
    g = from_euler(BUNGE)
    shares = {}
    for sense in ("tension", "compression"):
        from tracefit.predict import parse_load

        r = identify_families(obs, FCC, g, catalogue(FCC), load=parse_load("x", sense=sense), schmid_weight=1.0)[0]
        shares[sense] = {m.mode: m.share for m in r.best.modes}
        twin = next(m for m in r.best.modes if m.mode == "twin")
        slip = next(m for m in r.best.modes if m.mode == "slip")
        m_twin = twin.systems[0].schmid_factor
        expected = max(m_twin, 0.02) / (max(m_twin, 0.02) + slip.systems[0].schmid_factor)
        assert twin.share == pytest.approx(expected, rel=1e-6)
    assert shares["tension"]["twin"] != pytest.approx(shares["compression"]["twin"], abs=0.01)
