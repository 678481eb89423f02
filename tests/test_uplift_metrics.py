"""The Qini curve and coefficient, and the expected maximum profit measure for churn models.

Outside sources: hand-worked examples written out below from the definitions (Radcliffe 2007
for the Qini curve in the cumulative form of scikit-uplift; Verbraken, Verbeke & Baesens 2013,
IEEE TKDE 25(5), for EMP), scikit-uplift's ``qini_curve``/``qini_auc_score`` and empulse's
``empc_score`` on the same data, and scipy's quadrature of the defining integral.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import integrate, stats

from lifecycle.errors import UsageError
from lifecycle.evaluation import expected_maximum_profit, qini_coefficient, qini_curve

# scikit-uplift 0.5.1 calls a scikit-learn helper deprecated in scikit-learn 1.8.
SKLIFT_WARNING = "ignore:Function stable_cumsum is deprecated:FutureWarning"

# --- Qini --------------------------------------------------------------------------------------

# Six customers, scores all distinct, ranked a..f.
SCORE = [0.9, 0.8, 0.7, 0.4, 0.3, 0.1]
TREATED = [1, 0, 1, 0, 1, 0]
OUTCOME = [1, 0, 1, 1, 0, 1]


def test_qini_curve_by_hand():
    """Q(n) = R_t(n) − R_c(n)·N_t(n)/N_c(n), worked by hand (R_t(n) while N_c(n) = 0):
    n=1: R_t=1, N_t=1, N_c=0            → 1
    n=2: R_t=1, R_c=0, N_t=1, N_c=1     → 1
    n=3: R_t=2, R_c=0, N_t=2, N_c=1     → 2
    n=4: R_t=2, R_c=1, N_t=2, N_c=2     → 2 − 1·1   = 1
    n=5: R_t=2, R_c=1, N_t=3, N_c=2     → 2 − 1·1.5 = 0.5
    n=6: R_t=2, R_c=2, N_t=3, N_c=3     → 2 − 2·1   = 0
    """
    curve = qini_curve(SCORE, TREATED, OUTCOME)
    np.testing.assert_array_equal(curve["targeted"], [0, 1, 2, 3, 4, 5, 6])
    np.testing.assert_allclose(curve["share"], np.arange(7) / 6)
    np.testing.assert_allclose(curve["incremental"], [0, 1, 1, 2, 1, 0.5, 0])


def test_qini_coefficient_by_hand():
    """Area under Q by unit trapezoids: 0.5 + 1 + 1.5 + 1.5 + 0.75 + 0.25 = 5.5 customers²; the
    random line ends at Q(6) = 0, so the raw coefficient is 5.5 / 6² = 0.152777...
    The favoured ranking (score y·t − y·(1−t)): a, c (score 1) | b, e (0) | d, f (−1); cuts
    after 2 (R_t=2, N_c=0 → 2), after 4 (R_t=2, R_c=0 → 2), after 6 (→ 0): area 2·(0+2)/2 +
    2·(2+2)/2 + 2·(2+0)/2 = 8, so the normalised coefficient is 5.5 / 8 = 0.6875."""
    assert qini_coefficient(SCORE, TREATED, OUTCOME, normalize=False) == pytest.approx(5.5 / 36)
    assert qini_coefficient(SCORE, TREATED, OUTCOME) == pytest.approx(0.6875)


def test_ties_are_cut_together_and_a_constant_score_scores_zero():
    curve = qini_curve([1, 1, 0, 0], [1, 0, 1, 0], [1, 0, 0, 0])
    # cut after the tied pair: R_t=1, R_c=0, N_t=N_c=1 → 1; after all: 1 − 0 = 1
    np.testing.assert_array_equal(curve["targeted"], [0, 2, 4])
    np.testing.assert_allclose(curve["incremental"], [0, 1, 1])
    assert qini_coefficient(np.zeros(4), [1, 0, 1, 0], [1, 0, 0, 0]) == 0.0


def test_weights_count_like_repeated_customers():
    rng = np.random.default_rng(3)
    n = 60
    score, t = rng.integers(0, 8, n).astype(float), rng.integers(0, 2, n)
    y, w = rng.integers(0, 2, n), rng.integers(1, 4, n)
    rep = np.repeat(np.arange(n), w)
    weighted = qini_curve(score, t, y, weights=w)
    repeated = qini_curve(score[rep], t[rep], y[rep])
    np.testing.assert_allclose(weighted.to_numpy(), repeated.to_numpy())
    assert qini_coefficient(score, t, y, weights=w) == pytest.approx(
        qini_coefficient(score[rep], t[rep], y[rep])
    )


def _uplift_sample(seed: int, n: int = 2_000):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    t = rng.integers(0, 2, n)
    t[: n // 5] = 1  # unequal arms
    y = (rng.random(n) < 0.3 + t * 0.15 * np.tanh(x)).astype(int)
    score = np.round(x + rng.normal(scale=0.5, size=n), 1)  # rounded: many ties
    return score, t, y


@pytest.mark.filterwarnings(SKLIFT_WARNING)
@pytest.mark.parametrize("seed", [0, 1, 2])
def test_qini_agrees_with_scikit_uplift(seed):
    """scikit-uplift 0.5.1 (``sklift.metrics.qini_curve``, ``qini_auc_score`` with
    ``negative_effect=True``) on the same data, ties included."""
    metrics = pytest.importorskip("sklift.metrics")
    score, t, y = _uplift_sample(seed)
    curve = qini_curve(score, t, y)
    x_ref, q_ref = metrics.qini_curve(y, score, t)
    np.testing.assert_allclose(curve["targeted"], x_ref)
    np.testing.assert_allclose(curve["incremental"], q_ref, atol=1e-9)
    ours = qini_coefficient(score, t, y)
    assert ours == pytest.approx(metrics.qini_auc_score(y, score, t), rel=1e-10)
    assert ours > 0.05  # the score carries the effect's direction


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"treated": [1, 1, 1]}, "both arms"),
        ({"outcome": [1, 2, 0]}, "outcome has 1 values other than 0 and 1"),
        ({"effect_score": [0.1, np.nan, 0.3]}, "missing or infinite"),
        ({"weights": [1, -1, 1]}, "non-negative"),
        ({"outcome": [1, 0]}, "outcome has 2 values but effect_score has 3"),
    ],
)
def test_qini_bad_input_is_named(kwargs, match):
    args = {"effect_score": [0.1, 0.2, 0.3], "treated": [1, 0, 1], "outcome": [1, 0, 0]}
    with pytest.raises(UsageError, match=match):
        qini_curve(**{**args, **kwargs})


# --- expected maximum profit ------------------------------------------------------------------

CLV, D, F, ALPHA, BETA = 200.0, 10.0, 1.0, 6.0, 14.0
DELTA, PHI = D / CLV, F / CLV  # 0.05, 0.005
MEAN = ALPHA / (ALPHA + BETA)  # 0.3


def _beta_cdf(a, x):
    return stats.beta.cdf(x, a, BETA)


def test_emp_of_a_perfect_ranking_by_hand():
    """Two churners ranked above two non-churners (π0 = 0.5). Contacting exactly the churners
    is best whenever it pays: P = CLV·π0·(γ(1−δ) − φ) > 0 for γ > γ* = φ/(1−δ) = 0.005/0.95;
    otherwise contact nobody. So EMP = CLV·π0·[(1−δ)·E(γ; γ>γ*) − φ·P(γ>γ*)]
    = 200·0.5·[0.95·0.3·(1 − I_γ*(7,14)) − 0.005·(1 − I_γ*(6,14))], and I_γ*(·,14) < 1e-9,
    so EMP = 100·(0.285 − 0.005) = 28.0 (to 1e-6)."""
    emp = expected_maximum_profit([0.9, 0.8, 0.2, 0.1], [1, 1, 0, 0])
    assert emp == pytest.approx(28.0, abs=1e-6)
    gs = PHI / (1 - DELTA)
    exact = 100 * (0.95 * MEAN * (1 - _beta_cdf(7, gs)) - PHI * (1 - _beta_cdf(6, gs)))
    assert emp == pytest.approx(exact, rel=1e-12)


def test_emp_with_crossing_cut_offs_by_hand():
    """Scores 4, 3, 2, 1 for churned 1, 0, 1, 0 (π0 = π1 = 0.5). Profit lines a·γ + b per cut
    (a = CLV(1−δ)·π0F0, b = −CLV(φ·π0F0 + (δ+φ)·π1F1)):
      top 1: π0F0 = .25, π1F1 = 0   → a = 47.5, b = −200·(.00125)          = −0.25
      top 2: π0F0 = .25, π1F1 = .25 → a = 47.5, b = −200·(.00125 + .01375) = −3.0 (dominated)
      top 3: π0F0 = .5,  π1F1 = .25 → a = 95,   b = −200·(.0025 + .01375)  = −3.25
      top 4: π0F0 = .5,  π1F1 = .5  → a = 95,   b = −200·(.0025 + .0275)   = −6.0 (dominated)
    Envelope: nobody (0) up to γ1 = 0.25/47.5 = 1/190; top 1 up to 47.5γ − .25 = 95γ − 3.25,
    γ2 = 3/47.5 = 6/95; top 3 to 1. Each piece: a·0.3·ΔI(7,14) + b·ΔI(6,14)."""
    g1, g2 = 1 / 190, 6 / 95
    exact = (
        47.5 * MEAN * (_beta_cdf(7, g2) - _beta_cdf(7, g1))
        - 0.25 * (_beta_cdf(6, g2) - _beta_cdf(6, g1))
        + 95 * MEAN * (1 - _beta_cdf(7, g2))
        - 3.25 * (1 - _beta_cdf(6, g2))
    )
    assert expected_maximum_profit([4, 3, 2, 1], [1, 0, 1, 0]) == pytest.approx(exact, rel=1e-12)


def _brute_force(score, y, **kw):
    """∫ max over every cut-off of P(t; γ) · Beta density dγ by scipy's adaptive quadrature."""
    clv, d, f = kw.get("clv", CLV), kw.get("incentive_cost", D), kw.get("contact_cost", F)
    a, b = kw.get("alpha", ALPHA), kw.get("beta", BETA)
    n = len(y)
    cuts = [np.asarray(score) >= s for s in np.unique(score)]
    churn = np.array([0.0] + [(c & (y == 1)).sum() / n for c in cuts])
    stay = np.array([0.0] + [(c & (y == 0)).sum() / n for c in cuts])

    def best(g):
        p = (g * (clv - d) - f) * churn - (d + f) * stay
        return p.max() * stats.beta.pdf(g, a, b)

    return integrate.quad(best, 0, 1, limit=1000, epsabs=1e-8, epsrel=1e-8)[0]


@pytest.mark.parametrize("seed", [0, 1])
def test_emp_agrees_with_quadrature_and_empulse(seed):
    """scipy's quadrature of the defining integral, and empulse 0.13's ``empc_score`` (same
    defaults: α=6, β=14, CLV=200, d=10, f=1)."""
    rng = np.random.default_rng(seed)
    score = np.round(rng.random(300), 2)
    y = (rng.random(300) < 0.05 + 0.3 * score).astype(int)
    ours = expected_maximum_profit(score, y)
    assert ours == pytest.approx(_brute_force(score, y), rel=1e-6)
    other = {"clv": 150.0, "incentive_cost": 20.0, "contact_cost": 3.0, "alpha": 2.0, "beta": 5.0}
    assert expected_maximum_profit(score, y, **other) == pytest.approx(
        _brute_force(score, y, **other), rel=1e-6
    )
    metrics = pytest.importorskip("empulse.metrics")
    assert ours == pytest.approx(metrics.empc_score(y, score), rel=1e-9)


def test_emp_edge_cases_and_bad_input():
    assert expected_maximum_profit([0.3, 0.2], [0, 0]) == 0.0  # no churner: contact nobody
    assert expected_maximum_profit([0.5, 0.5], [1, 0]) >= 0.0
    with pytest.raises(UsageError, match="churned has 1 values other than 0 and 1"):
        expected_maximum_profit([0.1, 0.2], [1, 3])
    with pytest.raises(UsageError, match="clv was -1"):
        expected_maximum_profit([0.1, 0.2], [1, 0], clv=-1)


@settings(max_examples=40, deadline=None)
@given(
    data=st.lists(
        st.tuples(st.integers(0, 5), st.integers(0, 1), st.integers(0, 1)), min_size=4, max_size=40
    ),
    seed=st.integers(0, 1000),
)
def test_qini_depends_only_on_the_order_of_the_scores(data, seed):
    """Property: shuffling the customers, or any strictly increasing change of the score
    (here 3·s³ + 1), leaves the curve and the coefficient unchanged."""
    score, t, y = (np.array(v, dtype=float) for v in zip(*data, strict=True))
    if t.min() == t.max():
        t[0] = 1 - t[0]
    perm = np.random.default_rng(seed).permutation(len(score))
    base = qini_curve(score, t, y)
    pd.testing.assert_frame_equal(qini_curve(score[perm], t[perm], y[perm]), base)
    pd.testing.assert_frame_equal(qini_curve(3 * score**3 + 1, t, y), base)
    a = qini_coefficient(score, t, y, normalize=False)
    assert qini_coefficient(score[perm], t[perm], y[perm], normalize=False) == pytest.approx(a)
