"""Miller / Miller-Bravais notation: reading and printing (tracefit.crystal.indices)."""

import numpy as np
import pytest
from hypothesis import given, settings, strategies as st

from tracefit.errors import TracefitInputError
from tracefit.crystal import MillerIndex, format_index, parse_index
from tracefit.crystal import lattice_preset, miller_bravais_to_miller, miller_to_miller_bravais

FCC = lattice_preset("fcc")
HCP = lattice_preset("hcp", c_over_a=1.624)


@pytest.mark.parametrize(
    "text, values, kind, family",
    [
        # Trade notation (common practice, no source): brackets give kind and family, a minus
        # sign stands for the bar, one digit per index unless separated.
        ("(111)", (1, 1, 1), "plane", False),
        ("(1 -1 1)", (1, -1, 1), "plane", False),
        ("(1-11)", (1, -1, 1), "plane", False),
        ("{111}", (1, 1, 1), "plane", True),
        ("<110>", (1, 1, 0), "direction", True),
        ("[11-20]", (1, 1, -2, 0), "direction", False),
        ("(10-12)", (1, 0, -1, 2), "plane", False),
        ("{10-12}", (1, 0, -1, 2), "plane", True),
        ("<-1-123>", (-1, -1, 2, 3), "direction", True),
        ("(1,-1,1)", (1, -1, 1), "plane", False),
        ("(1 0 -1 12)", (1, 0, -1, 12), "plane", False),
        ("  [ 1, 1, -2, 0 ] ", (1, 1, -2, 0), "direction", False),
        ("(1\u0304 1 1)", (-1, 1, 1), "plane", False),  # overbar written as a combining macron
        ("(1\u221211)", (1, -1, 1), "plane", False),  # Unicode minus sign
        ("(1 \u22121 1)", (1, -1, 1), "plane", False),
    ],
)
def test_trade_notation_is_read(text, values, kind, family):
    got = parse_index(text)
    assert got == MillerIndex(values, kind, family)


@pytest.mark.parametrize(
    "values, kind, family, text",
    [
        ((1, -1, 1), "plane", False, "(1-11)"),
        ((1, 0, -1, 2), "plane", True, "{10-12}"),
        ((1, 1, -2, 0), "direction", True, "<11-20>"),
        ((-1, -1, 2, 3), "direction", False, "[-1-123]"),
        ((1, 0, -1, 12), "plane", False, "(1 0 -1 12)"),
        ((10, 0, 1), "direction", False, "[10 0 1]"),
    ],
)
def test_compact_printing(values, kind, family, text):
    # Trade style (common practice, no source): compact with minus as bar, spaces once an index has two digits.
    assert format_index(values, kind, family) == text


@pytest.mark.parametrize(
    "text, lattice, needle",
    [
        ("(000)", None, "all zero"),
        ("[0000]", None, "all zero"),
        ("(1002)", None, "h + k + i = 0"),
        ("[1-111]", None, "u + v + t = 0"),
        ("(102)", HCP, "hexagonal planes take four indices (hkil), e.g. (10-12)"),
        ("[100]", HCP, "four indices [uvtw]"),
        ("(10-12)", FCC, "only apply to hexagonal"),
        ("(1a1)", None, "only digits and minus"),
        ("hello", None, "brackets"),
        ("(111", None, "unbalanced"),
        ("111)", None, "unbalanced"),
        ("(111]", None, "unbalanced"),
        ("((111))", None, "nested"),
        ("()", None, "no indices"),
        ("(11)", None, "has 2 indices"),
        ("(1 1-1)", None, "one integer"),
        ("(1,,1,1)", None, "empty index"),
        ("", None, "empty"),
    ],
)
def test_bad_indices_are_refused_with_a_reason(text, lattice, needle):
    with pytest.raises(TracefitInputError) as exc:
        parse_index(text, lattice=lattice)
    assert needle in str(exc.value)


def test_expect_and_hexagonal_opt_in():
    with pytest.raises(TracefitInputError, match="expected a plane"):
        parse_index("[110]", expect="plane")
    with pytest.raises(TracefitInputError, match="expected a direction"):
        parse_index("{110}", expect="direction")
    # The documented opt-in: three-index Miller input on a hexagonal cell.
    assert parse_index("(102)", lattice=HCP, hex_three_index=True).values == (1, 0, 2)
    assert parse_index("(10-12)", lattice=HCP).three() == (1, 0, 2)
    assert parse_index("[11-20]", lattice=HCP).three() == (3, 3, 0)


def test_non_text_is_refused():
    with pytest.raises(TracefitInputError):
        parse_index(111)


# ------------------------------------------------------------------ property-based
small = st.integers(-12, 12)


@st.composite
def valid_index(draw):
    kind = draw(st.sampled_from(["plane", "direction"]))
    family = draw(st.booleans())
    if draw(st.booleans()):
        v = tuple(draw(st.lists(small, min_size=3, max_size=3)))
    else:
        a, b = draw(small), draw(small)
        v = (a, b, -(a + b), draw(small))
    if all(x == 0 for x in v):
        v = v[:-1] + (1,)
    return MillerIndex(v, kind, family)


@given(valid_index())
@settings(max_examples=150, deadline=None)
def test_parse_of_format_is_identity(idx):
    assert parse_index(format_index(idx.values, idx.kind, idx.family)) == idx


@given(st.text(alphabet="(){}[]<>-+,. 0123456789abx\u0304\u2212", max_size=14) | st.text(max_size=10))
@settings(max_examples=200, deadline=None)
def test_garbage_only_ever_raises_the_input_error(text):
    try:
        got = parse_index(text)
    except TracefitInputError:
        return
    assert isinstance(got, MillerIndex) and len(got.values) in (3, 4)


@given(st.tuples(small, small, small).filter(any))
@settings(max_examples=100, deadline=None)
def test_miller_bravais_round_trips(v):
    # Plane (hkl) -> (h k -(h+k) l) -> (hkl); the normal is the same either way (reciprocal basis).
    four = miller_to_miller_bravais(v, "plane")
    assert tuple(miller_bravais_to_miller(four, "plane")) == v
    np.testing.assert_allclose(HCP.plane_normal(four), HCP.plane_normal(v), atol=1e-12)
    # Direction [UVW] -> [uvtw] (thirds allowed) -> [UVW]; same Cartesian vector.
    d4 = miller_to_miller_bravais(v, "direction")
    assert abs(d4[0] + d4[1] + d4[2]) < 1e-12
    np.testing.assert_allclose(miller_bravais_to_miller(d4, "direction"), v, atol=1e-12)
    # Text round trip of the integer four-index direction 3 [uvtw].
    d4i = tuple(int(round(3 * x)) for x in d4)
    back = parse_index(format_index(d4i, "direction"), lattice=HCP)
    np.testing.assert_allclose(HCP.direction_vector(back.values), HCP.direction_vector(v), atol=1e-12)


def test_miller_bravais_direction_hand_values():
    # Hand calculation (common practice, no source): [2-1-10] = 2a1 - a2 - a3 = 3 a1, so it is [100];
    # [-1-123] is [UVW] = [u-t, v-t, w] = [-3 -3 3] ~ [-1-11].
    assert MillerIndex((2, -1, -1, 0), "direction").three() == (3, 0, 0)
    assert MillerIndex((-1, -1, 2, 3), "direction").three() == (-3, -3, 3)
    np.testing.assert_allclose(HCP.direction_vector((2, -1, -1, 0)), [1, 0, 0], atol=1e-12)


def test_huge_indices_are_an_input_error_not_an_overflow():
    # Issue 16 item 1: a fuzzed family string overflowed the integer arithmetic (OverflowError).
    from tracefit.crystal import Lattice, catalogue

    with pytest.raises(TracefitInputError, match="no slip/twin system family matches"):
        catalogue(Lattice.fcc(), families=["(-1825482714681933,-628504979075438560298,93151219425112021)"])
    with pytest.raises(TracefitInputError, match="indices above 999"):
        parse_index("(1000 0 1)")
    assert parse_index("(999 0 1)").values == (999, 0, 1)
