"""Lan–DeMets spending functions: formulas, contract at the ends, parsing."""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from monitor.errors import InvalidArgumentError, UnknownSpendingError
from monitor.stats.spending import (
    HwangShihDeCaniSpending,
    OBrienFlemingSpending,
    PocockSpending,
    PowerSpending,
    SpendingFunction,
    parse_spending,
)

SPECS = ["obrien-fleming", "pocock", "hsd:-4", "hsd:0", "hsd:1.5", "hsd:-0.000001", "power:1", "power:3", "power:0.5"]


@pytest.mark.parametrize("spec", SPECS)
def test_ends_of_the_fraction_range(spec):
    f = parse_spending(spec)
    assert f.cumulative(0.0, 0.025) == 0.0
    assert f.cumulative(1.0, 0.025) == 0.025
    assert f.cumulative(3.7, 0.025) == 0.025


@settings(max_examples=60, deadline=None)
@given(
    st.sampled_from(SPECS),
    st.lists(st.floats(0.0, 1.5), min_size=2, max_size=30),
    st.floats(1e-6, 0.99),
)
def test_non_decreasing_and_bounded(spec, fractions, level):
    t = np.sort(np.asarray(fractions))
    a = parse_spending(spec).cumulative(t, level)
    assert a.shape == t.shape
    assert np.all(np.diff(a) >= -1e-16)
    assert np.all((a >= 0) & (a <= level))


# Each row: (spec, t, level, expected, source of expected).
FORMULA_VALUES = [
    ("obrien-fleming", 0.5, 0.025, 2 - 2 * stats.norm.cdf(stats.norm.isf(0.0125) / math.sqrt(0.5)), "scipy.stats.norm"),
    ("obrien-fleming", 0.2, 0.025, 2 * stats.norm.sf(stats.norm.isf(0.0125) / math.sqrt(0.2)), "scipy.stats.norm"),
    ("pocock", 0.3, 0.05, 0.05 * math.log(1 + (math.e - 1) * 0.3), "formula"),
    ("hsd:-4", 0.5, 0.025, 0.025 * (1 - math.exp(2.0)) / (1 - math.exp(4.0)), "formula"),
    ("hsd:2", 0.25, 0.1, 0.1 * (1 - math.exp(-0.5)) / (1 - math.exp(-2.0)), "formula"),
    ("hsd:0", 0.37, 0.05, 0.05 * 0.37, "linear limit"),
    ("power:3", 0.6, 0.05, 0.05 * 0.6**3, "formula"),
]


@pytest.mark.parametrize("spec, t, level, expected, source", FORMULA_VALUES,
                         ids=[f"{r[0]}@{r[1]}" for r in FORMULA_VALUES])
def test_formula_values(spec, t, level, expected, source):
    assert parse_spending(spec).cumulative(t, level) == pytest.approx(expected, rel=1e-12)


def test_obrien_fleming_published_cumulative_spend():
    # Two-sided 0.05 as 0.025 per side: the total spent at t = 0.2 is the
    # well-known ~5.7e-7 behind the first Lan-DeMets boundary of 4.877.
    spent = 2 * OBrienFlemingSpending().cumulative(0.2, 0.025)
    assert 2 * stats.norm.sf(4.877) == pytest.approx(spent, rel=2e-3)


def test_hsd_gamma_near_zero_is_continuous_with_linear():
    t = np.linspace(0.05, 0.95, 7)
    near = HwangShihDeCaniSpending(1e-9).cumulative(t, 0.05)
    np.testing.assert_allclose(near, 0.05 * t, rtol=1e-8)


def test_two_sided_convention_matters_only_for_obrien_fleming():
    t = np.array([0.25, 0.5, 0.75])
    obf = OBrienFlemingSpending()
    assert not np.allclose(2 * obf.cumulative(t, 0.025), obf.cumulative(t, 0.05), rtol=1e-3)
    for f in (PocockSpending(), HwangShihDeCaniSpending(-4.0), PowerSpending(2.0)):
        np.testing.assert_allclose(2 * f.cumulative(t, 0.025), f.cumulative(t, 0.05), rtol=1e-12)


def test_scalar_in_scalar_out_and_vector_in_vector_out():
    f = parse_spending("pocock")
    assert isinstance(f.cumulative(0.5, 0.05), float)
    assert isinstance(f.cumulative([0.5], 0.05), np.ndarray)


@pytest.mark.parametrize("spec", SPECS)
def test_spec_round_trips(spec):
    f = parse_spending(spec)
    assert isinstance(f, SpendingFunction)
    assert parse_spending(f.spec) == f
    assert str(f) == f.spec


def test_parse_is_forgiving_about_case_and_spaces_and_passes_objects_through():
    assert parse_spending("  O'Brien-Fleming ".replace("'", "")) == OBrienFlemingSpending()
    f = PowerSpending(2.0)
    assert parse_spending(f) is f
    assert parse_spending("HSD:-4").spec == "hsd:-4"


@pytest.mark.parametrize("spec", ["haybittle", "obf", "", "linear:1"])
def test_unknown_names_list_the_valid_ones(spec):
    with pytest.raises(UnknownSpendingError) as info:
        parse_spending(spec)
    message = str(info.value)
    assert repr(spec) in message
    for valid in ("obrien-fleming", "pocock", "hsd:GAMMA", "power:RHO"):
        assert valid in message


@pytest.mark.parametrize("spec", ["hsd:", "hsd:abc", "power:0", "power:-1", "power:inf", "hsd:nan", "pocock:2"])
def test_bad_parameters(spec):
    with pytest.raises(InvalidArgumentError) as info:
        parse_spending(spec)
    assert spec in str(info.value)


def test_non_text_spec_is_rejected():
    with pytest.raises(UnknownSpendingError):
        parse_spending(3)


@pytest.mark.parametrize("level", [0.0, 1.0, -0.1, float("nan"), "x"])
def test_level_must_be_in_open_unit_interval(level):
    with pytest.raises(InvalidArgumentError, match="level"):
        PocockSpending().cumulative(0.5, level)


@pytest.mark.parametrize("t", [-0.1, float("nan"), [0.2, -1.0]])
def test_negative_or_nan_fraction_is_rejected(t):
    with pytest.raises(InvalidArgumentError, match="t:"):
        PocockSpending().cumulative(t, 0.05)


def test_power_rho_must_be_positive_on_direct_construction():
    with pytest.raises(InvalidArgumentError, match="rho"):
        PowerSpending(0.0)
    with pytest.raises(InvalidArgumentError, match="gamma"):
        HwangShihDeCaniSpending(float("inf"))
