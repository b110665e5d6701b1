"""Preferred values (IEC 60063) against the eseries package and the series' defining rule."""

from __future__ import annotations

import math

import numpy as np
import pytest

from fitkit.circuits.preferred import (SERIES, nearest_preferred, place_among_preferred,
                                       preferred_neighbours)
from fitkit.errors import CircuitError

eseries = pytest.importorskip("eseries")

NAMES = ["E3", "E6", "E12", "E24", "E48", "E96", "E192"]


@pytest.mark.parametrize("name", NAMES)
def test_tables_match_eseries(name):
    # Reference: the eseries package's IEC 60063 tables.
    assert SERIES[name] == tuple(eseries.series(getattr(eseries, name)))


@pytest.mark.parametrize("name,n", [("E48", 48), ("E96", 96), ("E192", 192)])
def test_three_figure_series_follow_the_defining_rule(name, n):
    # IEC 60063: the three-figure series are 10^(i/n) rounded to three figures; the one
    # exception is 9.20 in E192 where the rule gives 9.19 (exception from memory).
    rule = [round(100 * 10 ** (i / n)) for i in range(n)]
    if name == "E192":
        rule[rule.index(919)] = 920
    assert SERIES[name] == tuple(rule)


@pytest.mark.parametrize("name", NAMES)
def test_nearest_matches_eseries_over_random_values(name):
    # Reference: eseries.find_nearest (IEC 60063), nearest by absolute difference.
    key = getattr(eseries, name)
    rng = np.random.default_rng(60063)
    for value in 10 ** rng.uniform(-12, 7, 300):
        mine, dev = nearest_preferred(float(value), name)
        ref = eseries.find_nearest(key, float(value))
        assert mine == pytest.approx(ref, rel=1e-12), (value, mine, ref)
        assert dev == pytest.approx((value - ref) / ref, rel=1e-9, abs=1e-15)


@pytest.mark.parametrize("name", ["E6", "E24", "E96"])
def test_neighbours_bracket_the_value(name):
    # Reference: eseries.find_less_than_or_equal / find_greater_than_or_equal.
    key = getattr(eseries, name)
    rng = np.random.default_rng(7)
    for value in 10 ** rng.uniform(-11, 6, 200):
        below, above = preferred_neighbours(float(value), name)
        assert below == pytest.approx(eseries.find_less_than_or_equal(key, float(value)), rel=1e-12)
        assert above == pytest.approx(eseries.find_greater_than_or_equal(key, float(value)), rel=1e-12)


def test_exact_preferred_values_and_placement():
    assert nearest_preferred(4.7e-9, "E12") == (pytest.approx(4.7e-9, rel=1e-15), pytest.approx(0.0, abs=1e-12))
    assert preferred_neighbours(1e3, "E24") == (pytest.approx(1e3), pytest.approx(1e3))
    p = place_among_preferred(9.6e3, "e24")
    assert p.nearest == pytest.approx(10e3) and p.below == pytest.approx(9.1e3) and p.above == pytest.approx(10e3)
    assert p.to_dict()["relative_deviation"] == pytest.approx(-0.04)
    with pytest.raises(CircuitError):
        nearest_preferred(-1.0)
    with pytest.raises(CircuitError):
        nearest_preferred(1e3, "E7")
    assert math.isclose(nearest_preferred(995.0, "E192")[0], 1000.0)
