"""The one number formatter: one style per column, enough digits to tell values apart, no float noise."""

from __future__ import annotations

import math

from hypothesis import given
from hypothesis import strategies as st

from stages.report.numbers import (
    column_text,
    count_text,
    number_text,
    pair_text,
    seconds_text,
    share_text,
    style_of,
)


def decimals(text: str) -> int:
    return len(text.split(".")[1]) if "." in text and "e" not in text else 0


def test_float_noise_is_rounded_to_four_significant_digits():
    assert number_text(0.69279158285248099) == "0.6928"
    assert number_text(28.78386) == "28.78" and number_text(1234.5) == "1234" and number_text(0.5) == "0.5000"
    assert number_text(None) == "-" and number_text(math.nan, missing="") == ""
    assert number_text(1.5, signed=True) == "+1.500" and number_text(math.inf) == "inf"


def test_a_column_keeps_one_number_of_decimals():
    # the friction seen: 7.48 beside 7.506, and -3.25e-04 beside -0.004
    assert column_text([7.48, 7.506, 7.5]) == ["7.480", "7.506", "7.500"]
    change = column_text([-0.004, -0.000325], signed=True)
    assert change == ["-0.004000", "-0.000325"] and "e" not in "".join(change)


def test_a_column_of_mixed_sizes_stays_fixed_and_shows_a_tiny_change_with_its_sign():
    texts = column_text([math.nan, -24.6689, 0.28, -7.488e-05], signed=True)
    assert texts == ["", "-24.67", "+0.28", "-0.00"]
    # an R² column whose start row is almost zero keeps the four digits of its largest value
    assert column_text([-7.5e-05, 0.689126, 0.740569]) == ["-0.0001", "0.6891", "0.7406"]


def test_close_values_get_the_decimals_that_tell_them_apart():
    assert column_text([7.4903, 7.4901]) == ["7.4903", "7.4901"]
    # at most two decimals more than the largest value needs: a near tie stays a tie
    assert column_text([7.4900001, 7.4900002]) == ["7.49000", "7.49000"]
    assert pair_text(58.234, 58.229) == ("58.234", "58.229")
    # a list of rows, not of stages: the largest value's digits are enough
    assert column_text([65.7962, 43.4038], distinguish=False) == ["65.80", "43.40"]


def test_huge_or_tiny_columns_are_scientific_throughout():
    assert column_text([2.5e8, 3.1e7]) == ["2.500e+08", "3.100e+07"]
    assert column_text([-3.2e-6, 1.5e-5]) == ["-3.200e-06", "1.500e-05"]


def test_axis_ticks_drop_the_zeros_every_tick_ends_with():
    assert column_text([0.1, 0.35, 0.6], digits=3, trim=True) == ["0.10", "0.35", "0.60"]
    assert column_text([-120.0, 0.0, 120.0], digits=3, trim=True) == ["-120", "0", "120"]


def test_counts_durations_and_shares():
    assert count_text(1234567) == "1,234,567"
    assert [seconds_text(v) for v in (0.421, 12.34, 125)] == ["0.42 s", "12.3 s", "2 min 05 s"]
    assert [share_text(v) for v in (0.41, 0.041, 0.0004, 0.0)] == ["41%", "4.1%", "0.040%", "0%"]


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_infinity=False)


@given(st.lists(finite, min_size=1, max_size=30))
def test_every_value_reads_back_within_half_a_unit_of_its_last_decimal(values):
    # reference: Python's own float parsing reads each text back within half a unit of its last decimal
    texts = column_text(values)
    style = style_of(values)
    assert len({decimals(t) for t in texts}) == 1
    for value, text in zip(values, texts, strict=True):
        if style.decimals is None:
            assert math.isclose(float(text), value, rel_tol=1e-3, abs_tol=1e-300)
        else:
            assert abs(float(text) - value) <= 0.5 * 10.0 ** -style.decimals + 1e-9 * abs(value)


@given(st.lists(st.floats(min_value=0.5, max_value=1000, allow_nan=False), min_size=2, max_size=10, unique=True))
def test_distinct_values_with_a_visible_gap_never_print_the_same(values):
    style = style_of(values)
    gap = min(abs(a - b) for i, a in enumerate(values) for b in values[i + 1:])
    if style.decimals is not None and gap >= 10.0 ** -style.decimals:
        texts = column_text(values)
        assert len(set(texts)) == len(texts)
