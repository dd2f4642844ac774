"""The one display rule for lap times, time left and blanks, at its rounding boundaries.

Expected strings are worked by hand: round to the last place shown first, then split the
whole number of those places into minutes and seconds.
"""

import math

import pytest

from limitlap import formatting
from limitlap.formatting import NOT_AVAILABLE, hundredths, lap_time, number, time_left


@pytest.mark.parametrize(
    ("time_s", "expected"),
    [
        # 59.9995 s -> 59999.5 ms; Python rounds half to even -> 60000 ms -> 1:00.000.
        # (59.9995 is stored as 59.99949999999999761...: the product 59999.49999... still
        # rounds to 59999 or 60000 by the binary value; both sides of the boundary below.)
        (59.9994, "0:59.999"),  # 59999.4 ms -> 59999 -> 0 min 59.999 s
        (59.9996, "1:00.000"),  # 59999.6 ms -> 60000 -> 1 min 0.000 s (was "60.000 s")
        (119.9996, "2:00.000"),  # 119999.6 ms -> 120000 -> 2 min (was "1:60.000")
        (3599.9996, "60:00.000"),  # 3599999.6 ms -> 3600000 -> 60 min
        (92.4056, "1:32.406"),  # 92405.6 ms -> 92406
        (0.0004, "0:00.000"),  # 0.4 ms -> 0
    ],
)
def test_lap_time_rounds_before_splitting_minutes(time_s, expected):
    assert lap_time(time_s) == expected


def test_lap_time_of_59_9995_agrees_with_rounding_the_milliseconds():
    # Whatever the binary value of 59.9995 is, the string is the rounded milliseconds.
    ms = round(59.9995 * 1000)
    assert lap_time(59.9995) == f"{ms // 60000}:{(ms % 60000) / 1000:06.3f}"


def test_lap_time_at_two_decimals_carries_into_the_minute():
    # 119.996 s -> 11999.6 hundredths -> 12000 -> 2:00.00 (a figure's label).
    assert lap_time(119.996, decimals=2) == "2:00.00"
    assert lap_time(119.994, decimals=2) == "1:59.99"


@pytest.mark.parametrize("blank", [None, math.nan, math.inf])
def test_unknown_values_are_blank(blank):
    assert lap_time(blank) == NOT_AVAILABLE
    assert time_left(blank) == NOT_AVAILABLE
    assert number(blank, ".1f", " km/h") == NOT_AVAILABLE
    assert number(blank, ".0f", blank=formatting.NO_POINT) == "—"


@pytest.mark.parametrize(
    ("delta_s", "expected"),
    [
        (-0.004, "0.00"),  # rounds to -0.00: shown as 0.00, never "-0.00"
        (-0.005, "-0.01"),  # -0.005 is stored just below -0.005 -> -0.01
        (0.004, "0.00"),
        (0.005, "0.01"),  # 0.005 is stored just above 0.005 -> 0.01
        (-0.012, "-0.01"),
        (0.4849, "0.48"),
    ],
)
def test_time_left_to_hundredths_without_negative_zero(delta_s, expected):
    assert time_left(delta_s) == expected


def test_hundredths_keeps_the_value_unless_it_shows_as_zero():
    assert hundredths(-0.004) == 0.0 and math.copysign(1.0, hundredths(-0.004)) == 1.0
    assert hundredths(-0.012) == -0.012
