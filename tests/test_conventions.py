"""Image-frame angle convention (docs/conventions.md; worked cases from ../shared/conventions.md)."""

import numpy as np
import pytest
from hypothesis import given, strategies as st

from tracefit.conventions import (
    angle_to_pixel_direction,
    axial_difference,
    axial_mean,
    fold_axial,
    pixel_direction_angle,
    pixel_endpoints_angle,
)


def test_lower_left_to_upper_right_is_45_degrees():
    # Convention spec: a line from the lower-left to the upper-right corner of a square image is 45 deg.
    # In a 100x100 image the lower-left pixel is (col 0, row 99), the upper-right (col 99, row 0).
    assert pixel_endpoints_angle(0, 99, 99, 0) == pytest.approx(45.0)


def test_hand_calculated_endpoint_angles():
    # Hand calculation: (10,50)->(60,50) is horizontal; (20,80)->(20,10) vertical;
    # (0,0)->(30,30) runs down-right on screen: atan2(-30, 30) = -45 -> 135 deg.
    assert pixel_endpoints_angle(10, 50, 60, 50) == pytest.approx(0.0)
    assert pixel_endpoints_angle(20, 80, 20, 10) == pytest.approx(90.0)
    assert pixel_endpoints_angle(0, 0, 30, 30) == pytest.approx(135.0)
    # atan(1/2) = 26.565 deg, up and to the right.
    assert pixel_endpoints_angle(0, 10, 20, 0) == pytest.approx(np.degrees(np.arctan(0.5)))


def test_coincident_endpoints_rejected():
    with pytest.raises(ValueError, match="coincide"):
        pixel_endpoints_angle(3, 4, 3, 4)


@given(st.floats(-1e4, 1e4, allow_nan=False))
def test_fold_axial_range_and_equivalence(a):
    f = fold_axial(a)
    assert 0.0 <= f < 180.0
    assert abs(axial_difference(f, a)) < 1e-6


@given(st.floats(0, 179.999), st.floats(-89.9, 89.9))
def test_axial_difference_inverts_shift(a, d):
    assert axial_difference(fold_axial(a + d), a) == pytest.approx(d, abs=1e-7)


@given(st.floats(0, 179.999))
def test_pixel_direction_round_trip(a):
    dc, dr = angle_to_pixel_direction(a)
    assert abs(axial_difference(pixel_direction_angle(dc, dr), a)) < 1e-9


def test_axial_mean_wraps_across_zero():
    assert abs(axial_difference(axial_mean([178.0, 2.0]), 0.0)) < 1e-9
    assert axial_mean([10.0, 20.0], weights=[1, 3]) == pytest.approx(17.5, abs=0.05)
