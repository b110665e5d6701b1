"""Engineering notation in and out (fitkit.units)."""

import math

import pytest
from hypothesis import given, settings, strategies as st

from fitkit.errors import FitkitError
from fitkit.units import format_interval, format_value, parse_value, unit_scale


@pytest.mark.parametrize("text, expected", [
    ("4.7k", 4.7e3), ("10n", 10e-9), ("2.2u", 2.2e-6), ("2.2µ", 2.2e-6), ("1M", 1e6),
    ("10kOhm", 10e3), ("100nF", 100e-9), ("1.5 ms", 1.5e-3), ("-3.3", -3.3), ("1e-3", 1e-3),
    ("+2.5E+02", 250.0), ("47p", 47e-12),
    # RKM code as printed on parts: IEC 60062 (letter replaces the decimal point)
    ("4k7", 4.7e3), ("2n2", 2.2e-9), ("4R7", 4.7), ("1M5", 1.5e6),
])
def test_parse_value(text, expected):
    assert parse_value(text) == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("bad", ["", "abc", "1.2.3", "nan", "inf", "--1"])
def test_parse_value_rejects_garbage_with_our_error(bad):
    with pytest.raises(FitkitError):
        parse_value(bad)


def test_parse_value_checks_unit():
    assert parse_value("10nF", "F") == pytest.approx(1e-8)
    with pytest.raises(FitkitError, match="expected"):
        parse_value("10nH", "F")


@pytest.mark.parametrize("unit, factor, si", [
    ("s", 1.0, "s"), ("ms", 1e-3, "s"), ("us", 1e-6, "s"), ("µs", 1e-6, "s"), ("μs", 1e-6, "s"),
    ("ns", 1e-9, "s"), ("V", 1.0, "V"), ("mV", 1e-3, "V"), ("kV", 1e3, "V"), ("counts", 1.0, "counts"),
])
def test_unit_scale(unit, factor, si):
    got_factor, got_si = unit_scale(unit)
    assert got_factor == pytest.approx(factor) and got_si == si


def test_format_value_engineering_notation():
    assert format_value(4.7e-9, "F") == "4.7 nF"
    assert format_value(1e-3, "s") == "1 ms"
    assert format_value(0.33333, "") == "0.3333"
    assert format_value(None) == "n/a" and format_value(float("nan")) == "n/a"
    assert format_interval(1e-3, 1.2e-3, "s") == "[1 ms, 1.2 ms]"


@settings(max_examples=300, deadline=None)
@given(st.floats(min_value=1e-14, max_value=1e11, allow_nan=False))
def test_format_then_parse_round_trip(x):
    # 4 significant digits are kept, so the round trip holds to 5e-4 relative.
    text = format_value(x, "F", digits=4)
    assert math.isclose(parse_value(text, "F"), x, rel_tol=5e-4)
