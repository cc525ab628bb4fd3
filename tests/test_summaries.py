"""Shifted-sum summaries: accuracy where the naive formula fails, exact merges."""

import math
from fractions import Fraction
from itertools import permutations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from monitor.errors import InvalidArgumentError
from monitor.stats.summaries import MomentSummary


def exact_variance(values):
    """Sample variance in exact rational arithmetic of the float values given."""
    xs = [Fraction(float(v)) for v in values]
    mean = sum(xs) / len(xs)
    return float(sum((x - mean) ** 2 for x in xs) / (len(xs) - 1))


def naive_variance(values):
    """The textbook one-pass formula Σx² − (Σx)²/n, in float64."""
    x = np.asarray(values, dtype=float)
    return float((np.sum(x * x) - np.sum(x) ** 2 / x.size) / (x.size - 1))


@pytest.mark.parametrize("offset", [1e6, 1e9, 1.7e9])  # 1.7e9: a Unix timestamp in seconds
def test_shifted_sums_keep_digits_where_naive_formula_fails(offset):
    rng = np.random.default_rng(1)
    values = offset + rng.normal(0.0, 1.0, size=2000)
    truth = exact_variance(values)
    shifted = MomentSummary.from_values(values, shift=offset).variance
    naive = naive_variance(values)
    shifted_error = abs(shifted - truth) / truth
    naive_error = abs(naive - truth) / truth
    assert shifted_error < 1e-9
    if offset >= 1e9:
        # The naive formula loses everything: its error is of the order of the variance itself or more.
        assert naive_error > 1e-2
        assert naive_error > 1e6 * max(shifted_error, 1e-16)


def test_shift_from_first_value_also_works():
    rng = np.random.default_rng(2)
    values = 1e9 + rng.normal(0.0, 0.5, size=500)
    assert MomentSummary.from_values(values).variance == pytest.approx(exact_variance(values), rel=1e-9)


def test_chunked_database_style_partials_merge_accurately():
    # Partial aggregates per bucket, each about the comparison's fixed shift, as a database returns them.
    rng = np.random.default_rng(3)
    values = 1e9 + rng.normal(0.0, 2.0, size=3000)
    parts = [MomentSummary.from_values(chunk, shift=1e9) for chunk in np.array_split(values, 37)]
    total = MomentSummary(shift=1e9)
    for p in parts:
        total = total.merge(p)
    assert total.n == 3000
    assert total.variance == pytest.approx(exact_variance(values), rel=1e-9)
    assert total.mean == pytest.approx(float(np.mean(values - 1e9)) + 1e9, rel=1e-15)


def test_basic_properties():
    s = MomentSummary.from_values([2.0, 4.0, 4.0, 4.0, 5.0, 5.0, 7.0, 9.0])
    assert s.n == 8 and s.mean == 5.0 and s.total == 40.0
    assert s.variance == pytest.approx(32 / 7) and s.sd == pytest.approx(math.sqrt(32 / 7))
    assert MomentSummary.from_dict(s.to_dict()) == s
    assert math.isnan(MomentSummary().mean)
    one = MomentSummary.from_values([3.0])
    assert math.isnan(one.variance) and math.isnan(one.sd)
    rates = MomentSummary.from_values([1, 0, 1, 1, 0])
    assert rates.total == 3 and rates.mean == pytest.approx(0.6)


def test_non_finite_values_raise():
    with pytest.raises(InvalidArgumentError, match="finite"):
        MomentSummary.from_values([1.0, float("nan")])


def test_reshift_keeps_the_values():
    s = MomentSummary.from_values([10.5, 11.0, 12.25], shift=10.0)
    r = s.reshift(12.0)
    assert r.shift == 12.0 and r.n == s.n
    assert r.mean == pytest.approx(s.mean) and r.variance == pytest.approx(s.variance)
    assert r.sum_dev == pytest.approx(10.5 + 11.0 + 12.25 - 36.0)


@settings(max_examples=200, deadline=None)
@given(values=st.lists(st.integers(-10**6, 10**6), min_size=2, max_size=60),
       cuts=st.lists(st.integers(0, 60), max_size=6), shift=st.integers(-10**6, 10**6),
       order=st.randoms(use_true_random=False))
def test_merge_is_exact_in_any_order(values, cuts, shift, order):
    # Integer data about an integer shift keeps every partial sum exact in float64,
    # so any merge order must give the very same summary as summarising all at once.
    bounds = sorted({0, len(values), *[c % (len(values) + 1) for c in cuts]})
    parts = [MomentSummary.from_values(values[a:b], shift=shift) for a, b in zip(bounds, bounds[1:])]
    order.shuffle(parts)
    merged = MomentSummary(shift=float(shift))
    for p in parts:
        merged = merged + p
    whole = MomentSummary.from_values(values, shift=shift)
    assert merged == whole
    assert merged.total == sum(values)


@settings(max_examples=100, deadline=None)
@given(values=st.lists(st.floats(-1e3, 1e3), min_size=3, max_size=40), split=st.integers(1, 39),
       shift_a=st.floats(-1e3, 1e3), shift_b=st.floats(-1e3, 1e3))
def test_merge_across_different_shifts(values, split, shift_a, shift_b):
    split = min(split, len(values) - 1)
    a = MomentSummary.from_values(values[:split], shift=shift_a)
    b = MomentSummary.from_values(values[split:], shift=shift_b)
    for merged in (a.merge(b), b.merge(a)):
        assert merged.n == len(values)
        assert merged.mean == pytest.approx(float(np.mean(values)), rel=1e-9, abs=1e-9)
        assert merged.variance == pytest.approx(exact_variance(values), rel=1e-7, abs=1e-7)


def test_three_way_merge_all_orders():
    chunks = [[1e9 + 0.5, 1e9 - 0.25], [1e9 + 1.0], [1e9 - 2.0, 1e9 + 0.75, 1e9]]
    parts = [MomentSummary.from_values(c, shift=1e9) for c in chunks]
    results = set()
    for p in permutations(parts):
        m = p[0] + p[1] + p[2]
        results.add((m.n, m.sum_dev, m.sum_dev2))
    assert len(results) == 1  # dyadic deviations: exact in any order
