"""The empirical Bayes area rates (`gamma_poisson_rates`) and the local move rate built on them.

Reference for the estimator: Marshall, R. J. (1991), "Mapping disease and mortality rates using
empirical Bayes estimators", Applied Statistics 40, 283–294 (global moment estimator), with the
gamma–Poisson model of Clayton & Kaldor (1987), Biometrics 43, 671–681. The worked example below
is computed by hand from those formulas, in exact fractions.
"""

from __future__ import annotations

from fractions import Fraction as F

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle.spatial import gamma_poisson_rates, local_move_rates


def test_worked_example_from_the_published_formula():
    y = [0, 2, 18, 8]
    n = [10, 20, 40, 10]
    # Marshall (1991): m = Σy/Σn = 28/80 = 7/20
    m = F(sum(y), sum(n))
    assert m == F(7, 20)
    # raw rates r = 0, 1/10, 9/20, 4/5;  s² = Σ n (r − m)² / Σn = 4.9/80 = 49/800
    r = [F(a, b) for a, b in zip(y, n, strict=True)]
    s2 = sum(b * (ri - m) ** 2 for b, ri in zip(n, r, strict=True)) / sum(n)
    assert s2 == F(49, 800)
    # n̄ = 80/4 = 20;  A = s² − m/n̄ = 49/800 − 7/400 = 7/160
    a = s2 - m / F(sum(n), 4)
    assert a == F(7, 160)
    # C = A / (A + m/n) = 5/9, 5/7, 5/6, 5/9;  θ = m + C (r − m)
    c = [a / (a + m / b) for b in n]
    assert c == [F(5, 9), F(5, 7), F(5, 6), F(5, 9)]
    theta = [m + ci * (ri - m) for ci, ri in zip(c, r, strict=True)]
    assert theta == [F(7, 45), F(6, 35), F(13, 30), F(3, 5)]
    # the same as the gamma posterior mean (y + α)/(n + β), α = m²/A = 14/5, β = m/A = 8
    alpha, beta = m * m / a, m / a
    assert [(yi + alpha) / (ni + beta) for yi, ni in zip(y, n, strict=True)] == theta
    np.testing.assert_allclose(
        gamma_poisson_rates(np.array(y), np.array(n)), [float(t) for t in theta], rtol=1e-12
    )


@settings(max_examples=200, deadline=None)
@given(st.lists(st.tuples(st.integers(0, 40), st.integers(0, 400)), min_size=1, max_size=25))
def test_between_the_raw_and_the_overall_rate(areas):
    y = np.array([min(a, b) for a, b in areas], dtype=float)  # at most one event per month
    n = np.array([b for _, b in areas], dtype=float)
    rates = gamma_poisson_rates(y, n)
    if n.sum() == 0:
        assert np.isnan(rates).all()
        return
    m = y.sum() / n.sum()
    raw = np.divide(y, n, out=np.full_like(y, m), where=n > 0)
    lo, hi = np.minimum(raw, m), np.maximum(raw, m)
    tol = 1e-12 * max(1.0, m)
    assert ((rates >= lo - tol) & (rates <= hi + tol)).all()
    # an area with no exposure gets the overall rate; a tiny area is never 0 unless all are
    assert np.allclose(rates[n == 0], m)
    if m > 0:
        assert (rates[n > 0] > 0).all()


def test_known_truth_shrinkage_beats_raw_rates():
    # Simulated from the model itself: θ ~ Gamma(4, 0.005) (mean 0.02), y ~ Poisson(n θ).
    rng = np.random.default_rng(12)
    theta = rng.gamma(4.0, 0.005, 500)
    n = rng.integers(10, 400, 500).astype(float)
    y = rng.poisson(n * theta).astype(float)
    shrunk = gamma_poisson_rates(y, n)
    raw = y / n
    assert np.mean((shrunk - theta) ** 2) < 0.6 * np.mean((raw - theta) ** 2)
    # the small areas gain most
    small = n < 60
    assert np.mean((shrunk[small] - theta[small]) ** 2) < 0.4 * np.mean(
        (raw[small] - theta[small]) ** 2
    )


def test_degenerate_inputs():
    assert np.isnan(gamma_poisson_rates(np.zeros(3), np.zeros(3))).all()
    # identical raw rates: no between-area variance, everyone gets the overall rate
    np.testing.assert_allclose(
        gamma_poisson_rates(np.array([1.0, 2, 4]), np.array([10.0, 20, 40])), 0.1
    )
    with pytest.raises(ValueError, match="shape"):
        gamma_poisson_rates(np.zeros(2), np.zeros(3))


def test_local_move_rate_by_hand():
    # Two areas, window W = 2 months, rates wanted for months 10, 11, 12.
    #   a (area 0): months 5–9, moved out in 9      b (area 0): from 8, active
    #   c (area 1): months 9–10, churned in 10       d (area 1): months 7–11, moved out in 11
    # Month 10 (window 8–9):   area 0: y=1 (a), n = 2 (a) + 2 (b) = 4;  area 1: y=0, n = 1 + 2 = 3
    # Month 11 (window 9–10):  area 0: y=1, n = 1 + 2 = 3;            area 1: y=0, n = 2 + 2 = 4
    # Month 12 (window 10–11): area 0: y=0, n = 2;                    area 1: y=1 (d), n = 1 + 2 = 3
    # In each month Marshall's A = max(0, s² − m/n̄) is 0 (e.g. month 10: s² = 3/196 < 2/49),
    # so both areas get the overall rate: 1/7, 1/7, 1/5.
    rates = local_move_rates(
        area=np.array([0, 0, 1, 1]),
        start=np.array([5, 8, 9, 7]),
        end=np.array([9, np.nan, 10, 11]),
        moved_out=np.array([True, False, False, True]),
        n_areas=2,
        first_month=10,
        last_month=12,
        window=2,
    )
    np.testing.assert_allclose(rates, [[1 / 7, 1 / 7, 1 / 5], [1 / 7, 1 / 7, 1 / 5]])


@settings(max_examples=40, deadline=None)
@given(st.data())
def test_local_move_rate_matches_the_definition(data):
    n = data.draw(st.integers(1, 40))
    n_areas = data.draw(st.integers(1, 4))
    window = data.draw(st.integers(1, 6))
    start = np.array(data.draw(st.lists(st.integers(0, 30), min_size=n, max_size=n)))
    length = np.array(data.draw(st.lists(st.integers(0, 20), min_size=n, max_size=n)))
    ended = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n)))
    end = np.where(ended, start + length, np.nan)
    moved = np.array(data.draw(st.lists(st.booleans(), min_size=n, max_size=n))) & ended
    area = np.array(data.draw(st.lists(st.integers(0, n_areas - 1), min_size=n, max_size=n)))
    first, last = 12, 30
    got = local_move_rates(
        area, start, end, moved, n_areas=n_areas, first_month=first, last_month=last, window=window
    )
    end_or_never = np.where(ended, end, 10**6)
    for k, m in enumerate(range(first, last + 1)):
        y = np.zeros(n_areas)
        exposure = np.zeros(n_areas)
        for j in range(n):  # the definition, customer by customer and month by month
            for t in range(m - window, m):
                if start[j] <= t <= end_or_never[j]:
                    exposure[area[j]] += 1
                if moved[j] and end_or_never[j] == t:
                    y[area[j]] += 1
        np.testing.assert_allclose(got[:, k], gamma_poisson_rates(y, exposure), equal_nan=True)
