"""Counting neighbours within a radius: `neighbour_pairs` and `nearby_counts` against brute force.

The reference is the all-pairs matrix of squared distances of scipy
(``scipy.spatial.distance.cdist(..., "sqeuclidean")``), with the boundary inclusive
(Δx² + Δy² ≤ r²; the same float64 test the package states). Integer coordinates make ties at
exactly the radius common (3-4-5 and 5-12-13 triangles), and they are exact in floating point.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.spatial.distance import cdist

import lifecycle.spatial._sweep as sweep
from lifecycle.spatial import nearby_counts, neighbour_pairs


def brute_force_counts(x, y, radius, intervals, n_months):
    """counts[i, q, m] = #{j ≠ i : dist ≤ r, lo_q[j] ≤ m ≤ hi_q[j]}, from the full matrix."""
    close = cdist(np.c_[x, y], np.c_[x, y], "sqeuclidean") <= radius * radius  # scipy
    np.fill_diagonal(close, False)
    months = np.arange(n_months)
    out = np.empty((len(x), len(intervals), n_months), dtype=np.int64)
    for q, (lo, hi) in enumerate(intervals):
        qualifies = (months[None, :] >= np.asarray(lo)[:, None]) & (
            months[None, :] <= np.asarray(hi)[:, None]
        )
        out[:, q, :] = close.astype(np.int64) @ qualifies.astype(np.int64)
    return out


@st.composite
def scenes(draw, *, integer: bool):
    n = draw(st.integers(0, 60))
    n_months = draw(st.integers(1, 7))
    if integer:
        # a small grid, so that many pairs are exactly 5, 10 or 13 apart
        coord = st.integers(0, 24)
        radius = draw(st.sampled_from([0.0, 1.0, 5.0, 10.0, 13.0]))
        offset = draw(st.sampled_from([0.0, 500_000.0, 6_200_000.0]))  # UTM-sized values
    else:
        coord = st.floats(0, 300, allow_nan=False, allow_infinity=False)
        radius = draw(st.floats(0, 150, allow_nan=False))
        offset = 0.0
    x = np.array(draw(st.lists(coord, min_size=n, max_size=n)), dtype=float) + offset
    y = np.array(draw(st.lists(coord, min_size=n, max_size=n)), dtype=float) + offset
    n_q = draw(st.integers(1, 3))
    month = st.integers(-3, n_months + 3)
    intervals = []
    for _ in range(n_q):
        lo = np.array(draw(st.lists(month, min_size=n, max_size=n)), dtype=np.int64)
        hi = np.array(draw(st.lists(month, min_size=n, max_size=n)), dtype=np.int64)
        intervals.append((lo, hi))
    return x, y, radius, intervals, n_months


@settings(max_examples=150, deadline=None)
@given(scenes(integer=True))
def test_counts_equal_brute_force_with_ties(scene):
    x, y, radius, intervals, n_months = scene
    got = nearby_counts(x, y, radius, intervals, n_months)
    assert got.dtype == np.int32 and got.shape == (len(x), len(intervals), n_months)
    np.testing.assert_array_equal(got, brute_force_counts(x, y, radius, intervals, n_months))


@settings(max_examples=100, deadline=None)
@given(scenes(integer=False))
def test_counts_equal_brute_force_real_coordinates(scene):
    x, y, radius, intervals, n_months = scene
    got = nearby_counts(x, y, radius, intervals, n_months)
    np.testing.assert_array_equal(got, brute_force_counts(x, y, radius, intervals, n_months))


def test_boundary_is_inclusive():
    # (3, 4) is exactly 5 from the origin (Pythagoras); 5 + 1e-9 apart is not within 5.
    x = np.array([0.0, 3.0, 0.0])
    y = np.array([0.0, 4.0, -5.0 - 1e-9])
    always = (np.zeros(3, dtype=int), np.zeros(3, dtype=int))
    counts = nearby_counts(x, y, 5.0, [always], 1)[:, 0, 0]
    assert counts.tolist() == [1, 1, 0]
    assert neighbour_pairs(x, y, 5.0).tolist() == [[0, 1]]


def test_same_place_counts_but_not_oneself():
    x = np.zeros(4)
    y = np.zeros(4)
    always = (np.zeros(4, dtype=int), np.zeros(4, dtype=int))
    assert nearby_counts(x, y, 0.0, [always], 1)[:, 0, 0].tolist() == [3, 3, 3, 3]
    assert nearby_counts(x, y, 10.0, [always], 1)[:, 0, 0].tolist() == [3, 3, 3, 3]


@settings(max_examples=100, deadline=None)
@given(scenes(integer=True))
def test_neighbour_pairs_equal_brute_force(scene):
    x, y, radius, _, _ = scene
    close = np.triu(cdist(np.c_[x, y], np.c_[x, y], "sqeuclidean") <= radius * radius, k=1)
    expected = np.argwhere(close)  # row-major: sorted by i then j
    got = neighbour_pairs(x, y, radius)
    np.testing.assert_array_equal(got.reshape(-1, 2), expected.reshape(-1, 2))


def test_counts_over_months_follow_the_intervals():
    # Three points in a row 300 m apart, radius 400: 0–1 and 1–2 are neighbours, 0–2 not.
    x = np.array([0.0, 300.0, 600.0])
    y = np.zeros(3)
    lo = np.array([0, 2, 1])
    hi = np.array([3, 2, 9])
    counts = nearby_counts(x, y, 400.0, [(lo, hi)], 5)[:, 0, :]
    # point 0 sees point 1 in month 2 only; point 2 the same; point 1 sees 0 in 0..3, 2 in 1..4
    assert counts.tolist() == [[0, 0, 1, 0, 0], [1, 2, 2, 2, 1], [0, 0, 1, 0, 0]]


def test_sparse_points_over_a_huge_extent():
    # Far-apart clusters (1,000 km): the strips and bins adapt, the counts stay exact.
    rng = np.random.default_rng(3)
    centres = rng.uniform(0, 1e6, size=(6, 2))
    xy = np.repeat(centres, 40, axis=0) + rng.integers(0, 30, size=(240, 2))
    lo = rng.integers(0, 4, 240)
    hi = lo + rng.integers(0, 4, 240)
    for radius in (12.0, 25.0):
        got = nearby_counts(xy[:, 0], xy[:, 1], radius, [(lo, hi)], 6)
        np.testing.assert_array_equal(
            got, brute_force_counts(xy[:, 0], xy[:, 1], radius, [(lo, hi)], 6)
        )


def test_sixteen_bit_and_thirty_two_bit_prefixes_agree(monkeypatch):
    rng = np.random.default_rng(8)
    x, y = rng.uniform(0, 2_000, 3_000), rng.uniform(0, 2_000, 3_000)
    lo = rng.integers(-2, 10, 3_000)
    hi = lo + rng.integers(0, 8, 3_000)
    narrow = nearby_counts(x, y, 150.0, [(lo, hi)], 8)
    monkeypatch.setattr(sweep, "_prefix_dtype", lambda x, y, r: np.int32)
    wide = nearby_counts(x, y, 150.0, [(lo, hi)], 8)
    np.testing.assert_array_equal(narrow, wide)
    np.testing.assert_array_equal(wide, brute_force_counts(x, y, 150.0, [(lo, hi)], 8))


def test_more_than_65535_neighbours():
    # 70,000 points at one place: each has 69,999 neighbours, beyond 16 bits.
    n = 70_000
    x = np.full(n, 10.0)
    y = np.full(n, 20.0)
    counts = nearby_counts(x, y, 1.0, [(np.zeros(n, dtype=int), np.ones(n, dtype=int))], 3)
    assert (counts[:, 0, :2] == n - 1).all() and (counts[:, 0, 2] == 0).all()


@settings(max_examples=60, deadline=None)
@given(scenes(integer=True))
def test_neighbour_bound_is_an_upper_bound(scene):
    x, y, radius, _, _ = scene
    if len(x) == 0:
        return
    within = (cdist(np.c_[x, y], np.c_[x, y], "sqeuclidean") <= radius * radius).sum(axis=1)
    assert sweep._neighbour_bound(x, y, radius) >= within.max()


def test_bad_arguments():
    x = np.zeros(2)
    iv = [(np.zeros(2, dtype=int), np.zeros(2, dtype=int))]
    with pytest.raises(ValueError, match="radius"):
        nearby_counts(x, x, -1.0, iv, 1)
    with pytest.raises(ValueError, match="finite"):
        nearby_counts(np.array([0.0, np.nan]), x, 1.0, iv, 1)
    with pytest.raises(ValueError, match="interval 0"):
        nearby_counts(x, x, 1.0, [(np.zeros(3, dtype=int), np.zeros(3, dtype=int))], 1)
    assert nearby_counts(x[:0], x[:0], 1.0, [], 4).shape == (0, 0, 4)


def test_rim_in_small_batches(monkeypatch):
    # Two blocks of flats 400 m apart (each block at one place, one just inside the radius and
    # one just outside), so whole blocks fall in each other's rim; expand it 5 at a time.
    monkeypatch.setattr(sweep, "_RIM_BATCH", 5)
    x = np.r_[np.zeros(30), np.full(30, 399.99), np.full(30, -400.01), [150.0, 260.0]]
    y = np.r_[np.zeros(90), [-300.0, 280.0]]
    lo = np.arange(92) % 4
    hi = lo + 2
    got = nearby_counts(x, y, 400.0, [(lo, hi)], 6)
    np.testing.assert_array_equal(got, brute_force_counts(x, y, 400.0, [(lo, hi)], 6))
