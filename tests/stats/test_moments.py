"""Mergeable day statistics: invariants (hypothesis) and the pairwise update."""

from __future__ import annotations

import itertools

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from monitor.stats.moments import DayMoments, Moments

finite = st.floats(-1e4, 1e4, allow_nan=False, allow_infinity=False)


def rows_strategy(max_rows=40, dim=3):
    return arrays(np.float64, st.tuples(st.integers(0, max_rows), st.just(dim)), elements=finite)


def assert_same(a: Moments, b: Moments, tol=1e-9):
    assert a.n == b.n
    if a.n == 0:
        return
    scale = max(1.0, np.abs(b.mean).max())
    assert np.allclose(a.mean, b.mean, rtol=tol, atol=tol * scale)
    cscale = max(1.0, np.abs(b.comoment).max())
    assert np.allclose(a.comoment, b.comoment, rtol=tol, atol=tol * cscale)


# Chan, Golub & LeVeque (1979): merging in any grouping and order equals one pass over all rows.
@settings(max_examples=80, deadline=None)
@given(data=rows_strategy(), cuts=st.lists(st.integers(0, 40), max_size=5), seed=st.integers(0, 99))
def test_merge_in_any_grouping_and_order_equals_one_pass(data, cuts, seed):
    whole = Moments.of(data)
    bounds = sorted({min(c, len(data)) for c in cuts} | {0, len(data)})
    parts = [Moments.of(data[a:b]) for a, b in itertools.pairwise(bounds)]
    np.random.default_rng(seed).shuffle(parts)
    merged = Moments.merge_all(parts, dim=3)
    assert_same(merged, whole)
    if len(data):
        assert np.array_equal(merged.minimum, data.min(axis=0))
        assert np.array_equal(merged.maximum, data.max(axis=0))


@settings(max_examples=60, deadline=None)
@given(data=rows_strategy(max_rows=60), groups=st.integers(1, 8), window=st.integers(1, 5),
       seed=st.integers(0, 99))
def test_vectorized_windows_equal_sequential_merges(data, groups, window, seed):
    labels = np.random.default_rng(seed).integers(0, groups, len(data))
    table = DayMoments.from_rows(labels, data)
    for i in range(len(table)):
        assert_same(table.day(i), Moments.of(data[labels == table.days[i]]))
    prefix, suffix, rolling = table.prefix(), table.suffix(), table.rolling(window)
    for i in range(len(table)):
        seq = Moments.merge_all((table.day(j) for j in range(i + 1)), dim=3)
        assert_same(prefix.day(i), seq)
        assert np.array_equal(prefix.minimum[i], seq.minimum)
        after = Moments.merge_all((table.day(j) for j in range(i, len(table))), dim=3)
        assert_same(suffix.day(i), after)
        lo = max(0, i - window + 1)
        assert_same(rolling.day(i), Moments.merge_all((table.day(j) for j in range(lo, i + 1)), 3))
    assert_same(table.total(), Moments.of(data))


def test_days_far_from_zero_keep_precision():
    # Large offsets (a timestamp-like predictor) would ruin raw sums of squares; the shifted
    # cumulative form keeps the within-day spread exact to ~1e-9 relative.
    rng = np.random.default_rng(3)
    data = np.column_stack([1e6 + rng.normal(0, 1, 3000), rng.normal(0, 1, 3000)])
    labels = np.repeat(np.arange(30), 100)
    table = DayMoments.from_rows(labels, data)
    assert_same(table.total(), Moments.of(data), tol=1e-9)
    assert_same(table.prefix().day(29), Moments.of(data), tol=1e-9)


def test_round_trip_through_json_form_is_exact():
    m = Moments.of(np.random.default_rng(1).normal(size=(50, 3)))
    back = Moments.from_dict(m.to_dict())
    assert back.n == m.n
    assert np.array_equal(back.mean, m.mean) and np.array_equal(back.comoment, m.comoment)
    assert np.array_equal(back.minimum, m.minimum)
    empty = Moments.from_dict(Moments.empty(3).to_dict())
    assert empty.n == 0 and np.all(empty.minimum == np.inf)


def test_results_are_immutable():
    m = Moments.of(np.ones((3, 2)))
    with pytest.raises(ValueError):
        m.mean[0] = 5.0
