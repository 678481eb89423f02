"""Joiners in the uptake forecast: the negative-binomial counts, the joiners' uptakes, and the
intervals of current plus joiners with model uncertainty."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from lifecycle.config import Config
from lifecycle.errors import UsageError
from lifecycle.forecast import forecast_settings, forecast_uptake, poisson_binomial_quantiles
from lifecycle.forecast._counts import fit_negative_binomial
from lifecycle.forecast._intervals import combined_quantiles
from lifecycle.forecast._joiners import JoinerPart, fit_joiner_counts, joiner_uptake
from lifecycle.forecast._poisson_binomial import grid_cdf

sm = pytest.importorskip("statsmodels.api")


def _design(n_areas: int, months: np.ndarray) -> np.ndarray:
    area = np.repeat(np.arange(n_areas), months.size)
    moy = np.tile(months, n_areas) % 12
    x = np.zeros((area.size, n_areas + 11))
    x[np.arange(area.size), area] = 1.0
    rows = np.flatnonzero(moy > 0)
    x[rows, n_areas + moy[rows] - 1] = 1.0
    return x


def _counts(seed: int = 3, n_areas: int = 8, n_months: int = 36, alpha: float = 0.15):
    rng = np.random.default_rng(seed)
    months = np.arange(n_months)
    x = _design(n_areas, months)
    beta = np.concatenate([rng.uniform(0.5, 2.5, n_areas), 0.3 * np.sin(np.arange(1, 12))])
    mu = np.exp(x @ beta)
    y = rng.negative_binomial(1.0 / alpha, 1.0 / (1.0 + alpha * mu))
    return x, y, beta


def test_negative_binomial_matches_statsmodels():
    # reference: statsmodels' discrete NegativeBinomial (NB2, maximum likelihood) for the
    # coefficients, dispersion and log-likelihood, and GLM(NegativeBinomial(alpha)) for the
    # standard errors from the expected information
    x, y, _ = _counts()
    ours = fit_negative_binomial(x, y)
    theirs = sm.NegativeBinomial(y, x, loglike_method="nb2").fit(disp=0, maxiter=500)
    np.testing.assert_allclose(ours.params, theirs.params[:-1], atol=1e-4)
    assert ours.alpha == pytest.approx(theirs.params[-1], rel=1e-4)
    assert ours.loglik == pytest.approx(theirs.llf, abs=1e-6)
    glm = sm.GLM(y, x, family=sm.families.NegativeBinomial(alpha=ours.alpha)).fit()
    np.testing.assert_allclose(np.sqrt(np.diag(ours.cov)), glm.bse, rtol=1e-5)
    np.testing.assert_allclose(ours.params, glm.params, atol=1e-6)


def test_joiner_counts_recover_known_area_and_season_effects():
    # known truth: 20 areas x 48 months of NB2 counts with known levels and season
    rng = np.random.default_rng(11)
    n_areas, n_months = 20, 48
    level = rng.uniform(1.0, 3.0, n_areas)
    season = np.concatenate([[0.0], 0.4 * np.cos(np.arange(1, 12))])
    starts, areas = [], []
    for a in range(n_areas):
        for m in range(n_months):
            mu = np.exp(level[a] + season[m % 12])
            k = rng.negative_binomial(1 / 0.1, 1 / (1 + 0.1 * mu))
            starts += [m] * k
            areas += [f"Z{a:02d}"] * k
    model = fit_joiner_counts(np.array(starts), np.array(areas), n_months - 1, months=n_months)
    assert model.season and all(model.fitted)
    # every coefficient within 4 of its standard errors of the truth
    truth = np.concatenate([level, season[1:], [0.0]])  # no trend
    z = (model.fit.params - truth) / np.sqrt(np.diag(model.fit.cov))
    assert np.abs(z).max() < 4.0
    assert model.fit.alpha == pytest.approx(0.1, abs=0.04)
    expected = model.expected(np.arange(n_months, n_months + 12))
    assert expected.shape == (n_areas, 12)
    draws = model.expected_draws(np.arange(n_months, n_months + 12), 400, seed=1)
    np.testing.assert_allclose(draws.mean(axis=0), expected, rtol=0.05)


def test_joiner_uptake_mean_and_variance_match_a_simulation():
    # known truth: joiners NB2(mu_s, alpha) each month, each taking the product up k months
    # after joining with probability m(k); Monte Carlo against the closed-form moments
    horizon, alpha = 6, 0.3
    mu = np.array([5.0, 6.0, 7.0, 5.0, 4.0, 6.0])
    curve = np.array([0.05, 0.04, 0.03, 0.03, 0.02, 0.02])

    class Counts:
        areas = ("A",)
        fit = type("F", (), {"alpha": alpha})()

        def expected(self, months):
            return mu[None, : len(months)]

    parts = joiner_uptake(Counts(), {"p": {"all": curve}}, 0, horizon)
    rng = np.random.default_rng(5)
    sims = 200_000
    joined = rng.negative_binomial(1 / alpha, 1 / (1 + alpha * mu), size=(sims, horizon))
    # month of uptake after joining (0..horizon-1) or never within the horizon
    probs = np.append(curve, 1.0 - curve.sum())
    monthly = np.zeros((sims, horizon))
    for s in range(horizon):
        split = rng.multinomial(joined[:, s], probs)
        for k in range(horizon - s):
            monthly[:, s + k] += split[:, k]
    cumulative = monthly.cumsum(axis=1)
    part = parts[("p", "A")]
    np.testing.assert_allclose(part.mean[0], monthly.mean(axis=0), rtol=0.03)
    np.testing.assert_allclose(part.mean[1], cumulative.mean(axis=0), rtol=0.02)
    np.testing.assert_allclose(part.var[0], monthly.var(axis=0), rtol=0.05)
    np.testing.assert_allclose(part.var[1], cumulative.var(axis=0), rtol=0.05)
    np.testing.assert_allclose(parts[("p", "all")].mean, part.mean)


def test_combined_quantiles_reduce_to_the_parts():
    rng = np.random.default_rng(2)
    probs = rng.uniform(0.0, 0.2, size=(3, 400))
    qs = np.array([0.05, 0.5, 0.95])
    lo, cdf = grid_cdf(probs, "exact")
    # no joiners, no draws: the Poisson-binomial quantiles themselves
    np.testing.assert_array_equal(
        combined_quantiles(lo, cdf, qs), poisson_binomial_quantiles(probs, qs)
    )
    # equal probabilities plus negative-binomial joiners: reference, scipy's binom and nbinom
    # mass functions convolved
    same = np.full((1, 300), 0.1)
    lo, cdf = grid_cdf(same, "exact")
    mean, var = 12.0, 30.0
    got = combined_quantiles(lo, cdf, qs, add_mean=np.array([mean]), add_var=np.array([var]))
    r = mean**2 / (var - mean)
    ks = np.arange(400)
    pmf = np.convolve(stats.binom.pmf(ks, 300, 0.1), stats.nbinom.pmf(ks, r, r / (r + mean)))
    want = np.searchsorted(np.cumsum(pmf), qs - 1e-12)
    np.testing.assert_array_equal(got[0], want)
    # draws of the mean widen the interval and zero shifts change nothing
    zero = combined_quantiles(lo, cdf, qs, shifts=np.zeros((1, 50)))
    np.testing.assert_array_equal(zero, combined_quantiles(lo, cdf, qs))
    wide = combined_quantiles(lo, cdf, qs, shifts=rng.normal(0.0, 8.0, size=(1, 200)))
    assert wide[0, 0] < zero[0, 0] and wide[0, 2] > zero[0, 2]


def test_forecast_uptake_adds_joiners_and_keeps_the_current_part():
    rng = np.random.default_rng(4)
    hazards = np.zeros((50, 6, 2))
    hazards[..., 0] = 0.01
    hazards[..., 1] = rng.uniform(0.0, 0.05, size=(50, 6))
    causes = ["churn", "uptake_x"]
    areas = np.array(["A"] * 30 + ["B"] * 20, dtype=object)
    plain = forecast_uptake(hazards, causes, start_month="2026-01", areas=areas)
    part = JoinerPart(np.ones((2, 6)), np.full((2, 6), 2.0), None)
    joiners = {("x", "all"): part, ("x", "A"): part}
    got = forecast_uptake(hazards, causes, start_month="2026-01", areas=areas, joiners=joiners)
    np.testing.assert_allclose(got["expected_current"], plain["expected"])
    np.testing.assert_allclose(got["expected"], got["expected_current"] + got["expected_joiners"])
    in_b = got["area_id"] == "B"
    assert (got.loc[in_b, "expected_joiners"] == 0).all()
    assert (got.loc[~in_b, "expected_joiners"] == 1).all()
    assert (got["upper_90"] >= plain["upper_90"]).all()
    draws = {"x": np.random.default_rng(0).normal(0.0, 0.3, 100)}
    drawn = forecast_uptake(hazards, causes, start_month="2026-01", level_draws=draws)
    total = plain[plain["area_id"] == "all"].reset_index(drop=True)
    assert (drawn["cumulative_upper_90"] >= total["cumulative_upper_90"]).all()
    assert drawn["cumulative_upper_90"].iloc[-1] > total["cumulative_upper_90"].iloc[-1]


@pytest.mark.parametrize(
    ("setting", "value"),
    [("joiners", "yes"), ("joiner_months", 0), ("draws", -1), ("seed", 1.5), ("level_trend", 1)],
)
def test_forecast_settings_refuse_bad_values(setting, value):
    config = Config(raw={"forecast": {setting: value}})
    with pytest.raises(UsageError, match=setting):
        forecast_settings(config)


def test_forecast_settings_defaults():
    s = forecast_settings(Config(raw={}))
    assert (s.joiners, s.joiner_months, s.joiner_trend, s.draws, s.seed) == (True, 36, True, 200, 0)
    assert s.level_trend is True
    assert forecast_settings(Config(raw={"forecast": {"level_trend": False}})).level_trend is False


def test_joiner_counts_without_joiners_expect_none():
    model = fit_joiner_counts(np.array([0, 1]), np.array(["A", "A"]), 30, all_areas=["A", "B"],
                              months=12)  # fmt: skip
    assert model.fit is None
    assert model.expected(np.arange(31, 34)).sum() == 0.0
    assert pd.Series(model.areas).tolist() == ["A", "B"]


def test_uptake_rate_drift_matches_a_poisson_regression_with_offset():
    # reference: statsmodels' GLM(Poisson) of the monthly uptakes on the month with the log of
    # the customers at risk as offset, over the same 24 months
    from lifecycle.forecast._joiners import level_draws, uptake_rate_drift

    rng = np.random.default_rng(12)
    n, as_of = 4000, 60
    starts = rng.integers(0, 50, n)
    ends = np.where(rng.random(n) < 0.3, starts + rng.integers(1, 30, n), np.nan)
    taken = np.where(rng.random(n) < 0.4, starts + rng.integers(0, 40, n), np.nan)
    slope, se = uptake_rate_drift(starts, ends, taken, as_of)
    m = np.arange(as_of - 23, as_of + 1)
    end_ = np.nan_to_num(ends, nan=np.inf)[:, None]
    take_ = np.nan_to_num(taken, nan=np.inf)[:, None]
    active = (starts[:, None] <= m) & (end_ >= m)
    at_risk = (active & (take_ >= m)).sum(axis=0)
    events = (active & (take_ == m)).sum(axis=0)
    x = sm.add_constant((m - as_of).astype(float))
    glm = sm.GLM(events, x, family=sm.families.Poisson(), offset=np.log(at_risk)).fit()
    assert slope == pytest.approx(glm.params[1], abs=1e-8)
    assert se == pytest.approx(glm.bse[1], rel=1e-6)
    # the draws: level sd 1/sqrt(D), and a drift that grows with the month
    draws = level_draws({"p": 400.0}, 4000, 0, drift={"p": (0.01, 0.0)}, horizon=12)["p"]
    assert draws.shape == (4000, 12)
    assert np.std(draws[:, 0]) == pytest.approx(np.hypot(0.05, 0.01), rel=0.05)
    assert np.std(draws[:, -1]) == pytest.approx(np.hypot(0.05, 0.12), rel=0.05)
