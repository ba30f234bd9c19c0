"""The prior per system family (issue 11, item 4).

The numbers of planes per family are counted here from the indices (all signed permutations of
(hkl), a plane and its negative one: 6, 12 and 24 for {110}, {112}, {123}), independently of the
catalogue, and the prior is checked against that count.
"""

from __future__ import annotations

import itertools

import numpy as np
import pytest

from tracefit.crystal import catalogue, from_euler, lattice_preset
from tracefit.errors import TracefitInputError
from tracefit.matching import ObservedFamily, candidate_prior, candidate_set, identify_families, system_family_prior
from tracefit.matching.candidates import plane_key

BCC = lattice_preset("bcc")


def _distinct_planes(hkl):
    """Distinct planes of a cubic family {hkl}: all signed permutations, a plane and its negative one."""
    out = set()
    for p in itertools.permutations(hkl):
        for s in itertools.product((1, -1), repeat=3):
            out.add(plane_key(tuple(a * b for a, b in zip(p, s))))
    return out


def test_each_system_family_gets_the_same_mass_spread_over_its_planes():
    cs = candidate_set(catalogue(BCC, ["slip"]))
    w = system_family_prior(cs)
    fam = np.array(cs.families)
    counts = {f: len(_distinct_planes(h)) for f, h in (("{110}", (1, 1, 0)), ("{112}", (1, 1, 2)), ("{123}", (1, 2, 3)))}
    assert counts == {"{110}": 6, "{112}": 12, "{123}": 24}
    for f, n in counts.items():
        assert int((fam == f).sum()) == n
        np.testing.assert_allclose(w[fam == f], 1.0 / 3.0 / n, rtol=1e-12)
    # the former per-plane prior gave {123} 24/42 = 57 % of the mass
    old = candidate_prior(cs.plane_ids, 0.0)
    assert old[fam == "{123}"].sum() == pytest.approx(24 / 42)


def test_a_plane_shared_by_slip_and_twin_sums_both_families():
    cs = candidate_set(catalogue(BCC))  # {112} is a slip and a twin plane
    w = system_family_prior(cs)
    fam, mode = np.array(cs.families), np.array(cs.modes)
    # four system families ({110} slip, {112} slip, {112} twin, {123} slip), 12 {112} planes each
    np.testing.assert_allclose(w[(fam == "{112}") & (mode == "slip")], 0.25 / 12, rtol=1e-12)
    np.testing.assert_allclose(w[(fam == "{112}") & (mode == "twin")], 0.25 / 12, rtol=1e-12)
    assert w.sum() == pytest.approx(1.0)


def test_user_weights_by_name_family_or_mode():
    cs = candidate_set(catalogue(BCC, ["slip"]))
    fam = np.array(cs.families)
    for key in ("{110}<111>", "{110}<111> slip", "{110} < 111 >  SLIP", "{110}"):
        w = system_family_prior(cs, {key: 2})
        assert w[fam == "{110}"].sum() == pytest.approx(0.5)
    w = system_family_prior(candidate_set(catalogue(BCC)), {"twin": 0})
    assert w[np.array(candidate_set(catalogue(BCC)).modes) == "twin"].sum() == 0.0
    for bad in ({"{111}<110>": 1}, {"{110}": -1}, {"{110}": "many"}, {"{110}": float("inf")}, "{110}"):
        with pytest.raises(TracefitInputError, match="prior"):
            system_family_prior(cs, bad)
    with pytest.raises(TracefitInputError, match="weight 0"):
        system_family_prior(cs, {"slip": 0})


def test_hcp_basal_plane_weighs_as_much_as_a_whole_family():
    hcp = lattice_preset("hcp", 1.587)
    cs = candidate_set(catalogue(hcp))
    names = {s.name for ss in cs.systems for s in ss}
    w = system_family_prior(cs)
    basal = np.array([f == "{0001}" for f in cs.families])
    assert basal.sum() == 1 and w[basal][0] == pytest.approx(1.0 / len(names))


def test_the_matcher_uses_the_family_prior():
    # A weight of 0 removes a family from the answer; a family weighed up gains probability.
    g = from_euler((10.0, 30.0, 50.0))
    cat = catalogue(BCC, ["slip"])
    obs = [ObservedFamily(a, 0.5) for a in (12.0, 77.0, 140.0)]
    base = identify_families(obs, BCC, g, cat)
    no110 = identify_families(obs, BCC, g, cat, prior={"{110}<111>": 0})
    up110 = identify_families(obs, BCC, g, cat, prior={"{110}<111>": 5})
    for b, n, u in zip(base, no110, up110):
        assert all(c.family != "{110}" for c in n.candidates)
        p = lambda r: sum(c.probability for c in r.candidates if c.family == "{110}")  # noqa: E731
        assert p(u) >= p(b) - 1e-12
    assert sum(sum(c.probability for c in r.candidates if c.family == "{110}") for r in up110) > \
        sum(sum(c.probability for c in r.candidates if c.family == "{110}") for r in base) + 0.05
