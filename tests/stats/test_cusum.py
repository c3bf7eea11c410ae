"""Tabular CUSUM: Montgomery's worked example and the one-step recursion as the reference."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra import numpy as hnp

from monitor.stats.cusum import CusumState, tabular_cusum

# Montgomery, Introduction to Statistical Quality Control, Example 9.1 / Tables 9.1-9.2
# (6th/7th ed.; edition and page from memory): mu0 = 10, sigma = 1, K = 0.5, H = 5. The data and
# the C+ column were read as quoted in public test suites that cite the book; see
# docs/references.md, "Montgomery's tabular CUSUM example".
MONTGOMERY_9_1 = [9.45, 7.99, 9.29, 11.66, 12.16, 10.18, 8.04, 11.46, 9.20, 10.34,
                  9.03, 11.47, 10.51, 9.40, 10.08, 9.37, 10.62, 10.31, 8.52, 10.84,
                  10.90, 9.33, 12.29, 11.50, 10.60, 11.08, 10.38, 11.62, 11.31, 10.52]
C_PLUS = [0.0, 0.0, 0.0, 1.16, 2.82, 2.50, 0.04, 1.00, 0.0, 0.0,
          0.0, 0.97, 0.98, 0.0, 0.0, 0.0, 0.12, 0.0, 0.0, 0.34,
          0.74, 0.0, 1.79, 2.79, 2.89, 3.47, 3.35, 4.47, 5.28, 5.30]
N_PLUS = [0, 0, 0, 1, 2, 3, 4, 5, 0, 0, 0, 1, 2, 0, 0, 0, 1, 0, 0, 1,
          2, 0, 1, 2, 3, 4, 5, 6, 7, 8]
# C- and N- columns: recomputed by hand from the data with the recursion of Page (1954); the
# book's own columns were not read (from memory that they agree).
C_MINUS = [0.05, 1.56, 1.77, 0.0, 0.0, 0.0, 1.46, 0.0, 0.30, 0.0,
           0.47, 0.0, 0.0, 0.10, 0.0, 0.13, 0.0, 0.0, 0.98, 0.0,
           0.0, 0.17, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0]
N_MINUS = [1, 2, 3, 0, 0, 0, 1, 0, 1, 0, 1, 0, 0, 1, 0, 1, 0, 0, 1, 0,
           0, 1, 0, 0, 0, 0, 0, 0, 0, 0]


@pytest.fixture
def montgomery():
    return tabular_cusum(np.array(MONTGOMERY_9_1) - 10.0, k=0.5, h=5.0)


def test_montgomery_example_9_1_paths(montgomery):
    np.testing.assert_array_equal(np.round(montgomery.upper, 2), C_PLUS)
    np.testing.assert_array_equal(np.round(montgomery.lower, 2), C_MINUS)
    np.testing.assert_array_equal(montgomery.upper_run, N_PLUS)
    np.testing.assert_array_equal(montgomery.lower_run, N_MINUS)
    assert montgomery.lower.max() < 5.0  # C- never signals; max 1.77 at period 3


def test_montgomery_example_9_1_signal_onset_and_new_mean(montgomery):
    i = montgomery.first_signal
    assert i == 28  # period 29 (1-based)
    assert not montgomery.signal[:28].any()
    assert montgomery.upper_run[i] == 7
    assert round(float(montgomery.upper[i]), 2) == 5.28
    assert montgomery.side(i) == 1
    assert montgomery.onset(i) == 22  # 0-based 22 = period 23, "after period 22"
    new_mean = 10.0 + 1.0 * montgomery.shift(i)  # mu0 + sigma * (K + C+/N+)
    assert new_mean == pytest.approx(10.0 + 0.5 + 5.28 / 7, abs=0.005)
    assert round(new_mean, 2) == 11.25


def test_montgomery_no_reset_after_signal(montgomery):
    # Table 9.2 continues past the signal: C+_30 = 5.30, N+_30 = 8, still signalling.
    assert round(float(montgomery.upper[29]), 2) == 5.30
    assert montgomery.signal[29]
    assert montgomery.state.upper == montgomery.upper[29]
    assert montgomery.state.upper_run == 8


def test_lower_signal_has_negative_shift_estimate():
    # Mirror image of Montgomery's data: the lower side signals at the same period.
    path = tabular_cusum(10.0 - np.array(MONTGOMERY_9_1), k=0.5, h=5.0)
    assert path.first_signal == 28
    assert path.side(28) == -1
    assert path.shift(28) == pytest.approx(-(0.5 + 5.28 / 7), abs=0.005)
    assert path.onset(28) == 22


def test_onset_before_the_chunk_is_a_negative_index():
    u = np.array(MONTGOMERY_9_1) - 10.0
    head = tabular_cusum(u[:25], 0.5, 5.0)
    tail = tabular_cusum(u[25:], 0.5, 5.0, head.state)
    assert tail.first_signal == 3  # period 29 = index 28 = 25 + 3
    assert tail.onset(3) == 22 - 25  # the run began three periods before this chunk
    assert tail.shift(3) == pytest.approx(0.5 + 5.28 / 7, abs=0.005)


def test_no_run_under_way_has_no_onset(montgomery):
    with pytest.raises(ValueError, match="no run"):
        montgomery.onset(9)  # both sides at zero at period 10


def test_empty_series_keeps_the_state():
    state = CusumState(1.5, 0.0, 3, 0)
    path = tabular_cusum([], 0.5, 5.0, state)
    assert len(path) == 0 and path.state == state and path.first_signal is None


def test_bad_arguments():
    with pytest.raises(ValueError):
        tabular_cusum([0.0, np.nan], 0.5, 5.0)
    with pytest.raises(ValueError, match="1-D"):
        tabular_cusum(np.zeros((2, 3)), 0.5, 5.0)
    with pytest.raises(ValueError):
        tabular_cusum([0.0], -0.1, 5.0)
    with pytest.raises(ValueError):
        tabular_cusum([0.0], 0.5, 0.0)
    with pytest.raises(ValueError):
        CusumState(-1.0, 0.0, 0, 0)
    with pytest.raises(ValueError):
        CusumState(0.0, 0.0, 2, 0)  # at zero, yet a run of two periods


# the one-step recursion (Page 1954) as a plain loop, the reference for the vectorized form ------
def reference_loop(u, k, h, state):
    up, lo, nu, nl = state.upper, state.lower, state.upper_run, state.lower_run
    out = []
    for v in u:
        up = max(0.0, up + (v - k))
        lo = max(0.0, lo + (-v - k))
        nu = nu + 1 if up > 0.0 else 0
        nl = nl + 1 if lo > 0.0 else 0
        out.append((up, lo, nu, nl, up > h or lo > h))
    return out


def _state(upper, lower, ru, rl):
    return CusumState(upper, lower, ru if upper > 0 else 0, rl if lower > 0 else 0)


finite = st.floats(min_value=-1e6, max_value=1e6, allow_nan=False, allow_subnormal=False)
values = hnp.arrays(np.float64, st.integers(0, 80), elements=finite)
states = st.builds(_state, st.floats(0, 50), st.floats(0, 50), st.integers(1, 1000),
                   st.integers(1, 1000))


def assert_path_matches(path, ref, scale):
    """Equal to the recursion up to rounding of the cumulative walk (``scale`` = its size)."""
    up, lo, nu, nl, sig = (np.array(c) for c in zip(*ref, strict=True))
    tol = 1e-12 * scale
    np.testing.assert_allclose(path.upper, up, rtol=0, atol=tol)
    np.testing.assert_allclose(path.lower, lo, rtol=0, atol=tol)
    return up, lo, nu, nl, sig


def _scale(u, state):
    return max(1.0, float(np.abs(u).sum()) + state.upper + state.lower + 10.0)


@settings(max_examples=300, deadline=None)
@given(u=values, k=st.floats(0, 10), h=st.floats(1e-3, 60), state=states)
def test_vectorized_equals_the_recursion(u, k, h, state):
    path = tabular_cusum(u, k, h, state)
    ref = reference_loop(u, k, h, state)
    if not ref:
        assert path.state == state
        return
    scale = _scale(u, state) * (1 + k)
    up, lo, nu, nl, sig = assert_path_matches(path, ref, scale)
    exact = (np.abs(up) > 1e-12 * scale) | (up == 0)
    exact &= (np.abs(lo) > 1e-12 * scale) | (lo == 0)
    if exact.all():
        np.testing.assert_array_equal(path.upper_run, nu)
        np.testing.assert_array_equal(path.lower_run, nl)
    far = (np.abs(up - h) > 1e-12 * scale) & (np.abs(lo - h) > 1e-12 * scale)
    np.testing.assert_array_equal(path.signal[far], sig[far])


@settings(max_examples=200, deadline=None)
@given(u=values, k=st.floats(0, 10), h=st.floats(1e-3, 60), state=states,
       cuts=st.lists(st.integers(0, 80), max_size=6))
def test_chunks_with_carried_state_equal_one_pass(u, k, h, state, cuts):
    whole = tabular_cusum(u, k, h, state)
    bounds = sorted({min(c, len(u)) for c in cuts})
    pieces, carried = [], state
    for lo, hi in zip([0, *bounds], [*bounds, len(u)], strict=True):
        part = tabular_cusum(u[lo:hi], k, h, carried)
        carried = part.state
        pieces.append(part)
    scale = _scale(u, state) * (1 + k)
    for name in ("upper", "lower"):
        joined = np.concatenate([getattr(p, name) for p in pieces])
        np.testing.assert_allclose(joined, getattr(whole, name), rtol=0, atol=1e-12 * scale)


def test_long_series_matches_the_recursion():
    # Long runs (an upward drift) and many short ones.
    rng = np.random.default_rng(11)
    u = np.concatenate([rng.normal(0.0, 1.0, 3000), rng.normal(0.7, 1.0, 3000),
                        rng.normal(-2.0, 1.0, 500)])
    state = CusumState(0.3, 2.0, 4, 9)
    path = tabular_cusum(u, 0.5, 5.0, state)
    ref = reference_loop(u, 0.5, 5.0, state)
    up, lo, nu, nl, sig = (np.array(c) for c in zip(*ref, strict=True))
    np.testing.assert_allclose(path.upper, up, rtol=0, atol=1e-9)
    np.testing.assert_allclose(path.lower, lo, rtol=0, atol=1e-9)
    np.testing.assert_array_equal(path.upper_run, nu)
    np.testing.assert_array_equal(path.lower_run, nl)
    np.testing.assert_array_equal(path.signal, sig)
    assert path.upper_run.max() > 1000  # the drift produced one very long run
