"""Cohort retention with the shifted-beta-geometric model (Fader & Hardie 2007)."""

from __future__ import annotations

import numpy as np
import pytest

from lifecycle.errors import UsageError
from lifecycle.forecast import fit_shifted_beta_geometric

# Fader & Hardie (2007), "How to project customer retention", J. Interactive Marketing 21(1):
# customers alive at the start of years 0..7 of two cohorts. The regular cohort's first five
# counts (1000, 631, 468, 382, 326) are confirmed by Fader & Hardie's spreadsheet guide to the
# beta-geometric model (2014, Table 1); the rest, and the high-end cohort, are from memory.
REGULAR = [1000, 631, 468, 382, 326, 289, 262, 241]
HIGH_END = [1000, 869, 743, 653, 593, 551, 517, 491]


@pytest.mark.parametrize(
    ("alive", "alpha", "beta"),
    [
        (REGULAR, 0.704, 1.182),  # the paper's estimates, from memory
        (HIGH_END, 0.668, 3.806),  # the paper's estimates, from memory
    ],
)
def test_fader_hardie_worked_example(alive, alpha, beta):
    fit = fit_shifted_beta_geometric(alive)
    assert fit.alpha == pytest.approx(alpha, abs=1e-3)
    assert fit.beta == pytest.approx(beta, abs=1e-3)
    # S(t) = B(α, β + t) / B(α, β); S(0) = 1 and the fitted curve follows the data
    surv = fit.survival(np.arange(len(alive)))
    assert surv[0] == pytest.approx(1.0)
    np.testing.assert_allclose(1000 * surv, alive, atol=20)  # within 2 % of the cohort
    # retention r(t) = (β + t − 1)/(α + β + t − 1) rises with t and is S(t)/S(t − 1)
    t = np.arange(1, 10)
    np.testing.assert_allclose(fit.retention(t), fit.survival(t) / fit.survival(t - 1))
    assert np.all(np.diff(fit.retention(t)) > 0)


def test_known_truth_cohort_is_recovered():
    # known truth: 200,000 customers with churn probability θ ~ Beta(1.5, 4), geometric lives
    rng = np.random.default_rng(8)
    theta = rng.beta(1.5, 4.0, size=200_000)
    life = rng.geometric(theta)
    alive = [(life > t).sum() for t in range(10)]
    fit = fit_shifted_beta_geometric(alive)
    assert fit.alpha == pytest.approx(1.5, rel=0.08)
    assert fit.beta == pytest.approx(4.0, rel=0.08)


@pytest.mark.parametrize("alive", [[1000], [0, 0], [100, 120, 90], [100, -1]])
def test_bad_counts_are_refused(alive):
    with pytest.raises(UsageError, match="alive"):
        fit_shifted_beta_geometric(alive)


def test_a_cohort_without_heterogeneity_reaches_the_geometric_limit():
    """Regression: a small cohort losing one customer every other month ([10, 10, 9, 9, 8, 8,
    7]) drives α and β toward infinity, where differences of log-beta functions lost every
    digit (a positive log-likelihood and a survival of 1.5e111). In that limit the sBG is the
    geometric model with θ = α/(α + β) (Fader & Hardie 2007): worked by hand, leavers at t = 2,
    4, 6 give 3·ln θ + (1 + 3 + 5)·ln(1 − θ), the 7 still alive 7·6·ln(1 − θ), so θ̂ = 3/54 and
    ℓ = 3·ln(3/54) + 51·ln(51/54) = −11.586; S(12) = (51/54)^12 = 0.5036."""
    fit = fit_shifted_beta_geometric([10, 10, 9, 9, 8, 8, 7])
    theta = 3 / 54
    assert fit.loglik == pytest.approx(3 * np.log(theta) + 51 * np.log(1 - theta), abs=1e-3)
    np.testing.assert_allclose(fit.survival([12, 24]), (1 - theta) ** np.array([12, 24]), rtol=1e-3)


def test_a_cohort_of_immediate_leavers_and_stayers_reaches_its_supremum():
    """Regression: [10, 9, 9, ..., 9] drives α and β toward 0, where the fit's parameters
    underflowed. The supremum is the mixture of customers who leave at once (share 0.1) and
    customers who never leave (worked by hand: ℓ = ln 0.1 + 9·ln 0.9 = −3.2508, S(t) = 0.9 for
    every t >= 1); the old log-beta differences reported −3.2488, above that bound."""
    fit = fit_shifted_beta_geometric([10] + [9] * 9)
    bound = np.log(0.1) + 9 * np.log(0.9)
    assert bound - 1e-3 <= fit.loglik <= bound + 1e-9
    np.testing.assert_allclose(fit.survival([1, 12, 24]), 0.9, rtol=1e-3)
