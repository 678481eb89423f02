"""Poisson-binomial intervals, uptake forecasts and the fan chart.

References: exact convolution of the Bernoulli generating functions with numpy.convolve (the
definition of the Poisson-binomial pmf); scipy.stats.binom where every p is equal; seeded Monte
Carlo draws of the Bernoulli sums; and for constant hazards the geometric closed form of the
uptake incidence competing with exits, F_u(t) = h_u(1 − b^t)/(1 − b), b = 1 − h_u − Σ h_k.
"""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from matplotlib.figure import Figure
from scipy import stats

import lifecycle.forecast
from lifecycle.config import Config
from lifecycle.errors import UsageError
from lifecycle.forecast import (
    ForecastSettings,
    fan_chart,
    forecast_settings,
    forecast_uptake,
    mixture_quantiles,
    poisson_binomial_cdf,
    poisson_binomial_pmf,
    poisson_binomial_quantiles,
    save_fan_chart,
)
from lifecycle.forecast._poisson_binomial import _cf_pmf

CAUSES = ["churn", "move_out", "other_exit", "uptake_backup_line"]
FAST = settings(max_examples=30, deadline=None)


def convolved_pmf(p) -> np.ndarray:
    """The pmf by definition: coefficients of Π (1 − p_i + p_i z), one factor at a time."""
    pmf = np.array([1.0])
    for x in p:
        pmf = np.convolve(pmf, [1.0 - x, x])
    return pmf


def quantile_from_pmf(pmf: np.ndarray, q: float) -> int:
    """min{k : F(k) ≥ q} (with the same 1e-12 slack for rounding as the code under test)."""
    return int(np.argmax(np.cumsum(pmf) >= q - 1e-12))


probabilities = st.lists(st.floats(0.0, 1.0), min_size=0, max_size=80)


# --- the distribution ---------------------------------------------------------------------------


@FAST
@given(p=probabilities)
def test_pmf_equals_the_convolution_of_the_bernoulli_factors(p):
    np.testing.assert_allclose(poisson_binomial_pmf(p), convolved_pmf(p), atol=1e-14)


@FAST
@given(p=st.lists(st.floats(0.0, 1.0), min_size=1, max_size=120))
def test_interval_agrees_with_exact_convolution_on_small_portfolios(p):
    pmf = convolved_pmf(p)
    levels = [0.05, 0.95, 0.25, 0.75]
    got = poisson_binomial_quantiles(p, levels)
    assert got.tolist() == [quantile_from_pmf(pmf, q) for q in levels]


@pytest.mark.parametrize(("n", "prob"), [(1, 0.3), (40, 0.5), (400, 0.02), (2000, 0.35)])
def test_equal_probabilities_give_the_binomial(n, prob):
    # scipy.stats.binom is the reference where every p is equal
    p = np.full(n, prob)
    np.testing.assert_allclose(poisson_binomial_pmf(p), stats.binom.pmf(np.arange(n + 1), n, prob),
                               atol=1e-13)  # fmt: skip
    q = [0.05, 0.5, 0.95]
    assert poisson_binomial_quantiles(p, q).tolist() == stats.binom.ppf(q, n, prob).tolist()
    np.testing.assert_allclose(
        poisson_binomial_cdf([0, n // 3, n], p), stats.binom.cdf([0, n // 3, n], n, prob),
        atol=1e-12,
    )  # fmt: skip


def test_large_group_with_small_probabilities_is_exact_by_characteristic_function():
    # 60 000 trials with p = 0.001 (σ² ≈ 60): auto takes the DFT-CF route; binomial reference
    n, prob = 60_000, 0.001
    p = np.full(n, prob)
    q = [0.005, 0.05, 0.5, 0.95, 0.995]
    assert poisson_binomial_quantiles(p, q).tolist() == stats.binom.ppf(q, n, prob).tolist()
    ks = np.array([30, 50, 60, 75, 95])
    np.testing.assert_allclose(
        poisson_binomial_cdf(ks, p), stats.binom.cdf(ks, n, prob), atol=1e-12
    )


def test_characteristic_function_route_matches_convolution_with_mixed_probabilities():
    rng = np.random.default_rng(5)
    p = np.concatenate(
        [rng.uniform(0, 0.02, 1500), rng.uniform(0.9, 1.0, 200), [0.0, 1.0, 0.5, 0.3, 0.7, 0.26]]
    )
    ref = convolved_pmf(p)
    mu, sd = p.sum(), np.sqrt((p * (1 - p)).sum())
    lo, hi = int(mu - 12 * sd - 30), int(mu + 12 * sd + 30)
    np.testing.assert_allclose(_cf_pmf(p, lo, hi), ref[lo : hi + 1], atol=1e-14)


def test_refined_normal_approximation_agrees_with_monte_carlo_on_a_large_portfolio():
    rng = np.random.default_rng(2024)
    n = 40_000
    p = rng.uniform(0.0, 0.03, n)  # mean 600, σ ≈ 24: auto uses the approximation
    draws = 4000
    sums = np.concatenate([(rng.random((200, n)) < p).sum(axis=1) for _ in range(draws // 200)])
    levels = [0.05, 0.5, 0.95]
    for method in ("auto", "rna", "exact"):
        got = poisson_binomial_quantiles(p, levels, method=method)
        for q, k in zip(levels, got, strict=True):
            # Q(q) = k means F(k − 1) < q ≤ F(k); check both against the empirical CDF
            se = np.sqrt(q * (1 - q) / draws)
            assert (sums <= k).mean() >= q - 4 * se, (method, q, k)
            assert (sums <= k - 1).mean() <= q + 4 * se, (method, q, k)
    exact = poisson_binomial_quantiles(p, levels, method="exact")
    assert np.abs(poisson_binomial_quantiles(p, levels, method="rna") - exact).max() <= 1


def test_mixture_quantiles_average_the_distribution_functions():
    rng = np.random.default_rng(9)
    a, b = rng.uniform(0, 0.1, 300), rng.uniform(0.1, 0.3, 300)
    cdf = (np.cumsum(convolved_pmf(a)) + np.cumsum(convolved_pmf(b))) / 2.0
    levels = [0.05, 0.5, 0.95]
    expected = [int(np.argmax(cdf >= q - 1e-12)) for q in levels]
    got = mixture_quantiles(iter([a[None, :], b[None, :]]), levels)
    assert got.tolist() == [expected]
    same = mixture_quantiles([a[None, :], a[None, :]], levels)
    assert same.tolist() == [poisson_binomial_quantiles(a, levels).tolist()]


def test_distribution_arguments_are_checked():
    with pytest.raises(UsageError, match="not in \\[0, 1\\]"):
        poisson_binomial_pmf([0.2, 1.2])
    with pytest.raises(UsageError, match="strictly in"):
        poisson_binomial_quantiles([0.2], [0.0])
    with pytest.raises(UsageError, match="method was 'normal'"):
        poisson_binomial_quantiles([0.2], [0.5], method="normal")


# --- the uptake forecast -------------------------------------------------------------------------


def constant_hazards(n, horizon, rates):
    return np.broadcast_to(np.asarray(rates, float), (n, horizon, len(rates))).copy()


def test_expected_adopters_follow_the_competing_risk_closed_form():
    hc, hm, ho, hu, n, horizon = 0.02, 0.01, 0.001, 0.015, 50, 18
    h = constant_hazards(n, horizon, [hc, hm, ho, hu])
    out = forecast_uptake(h, CAUSES, start_month="2026-11")
    b = 1.0 - hu - hc - hm - ho
    t = np.arange(1, horizon + 1)
    np.testing.assert_allclose(out["expected"], n * hu * b ** (t - 1), rtol=1e-12)
    np.testing.assert_allclose(
        out["cumulative_expected"], n * hu * (1 - b**t) / (1 - b), rtol=1e-12
    )
    assert out["month"].iloc[[0, 2, -1]].tolist() == ["2026-11", "2027-01", "2028-04"]
    assert set(out["area_id"]) == {"all"} and set(out["product"]) == {"backup_line"}
    # all p equal within a month: the interval is the binomial one (scipy.stats.binom)
    p = hu * b ** (t - 1)
    np.testing.assert_array_equal(out["lower_90"], stats.binom.ppf(0.05, n, p))
    np.testing.assert_array_equal(out["upper_90"], stats.binom.ppf(0.95, n, p))
    cum = hu * (1 - b**t) / (1 - b)
    np.testing.assert_array_equal(out["cumulative_upper_90"], stats.binom.ppf(0.95, n, cum))


@pytest.fixture(scope="module")
def portfolio():
    rng = np.random.default_rng(17)
    n, horizon = 600, 12
    h = np.empty((n, horizon, 4))
    h[..., 0] = rng.uniform(0.005, 0.04, (n, 1))
    h[..., 1] = rng.uniform(0.0, 0.02, (n, 1))
    h[..., 2] = 0.001
    h[..., 3] = rng.gamma(0.8, 0.01, (n, 1)) * np.linspace(1.2, 0.8, horizon)
    h[rng.random(n) < 0.2, :, 3] = 0.0  # holding the product already
    areas = rng.choice(["N1", "N2", "S1", "S2"], n, p=[0.1, 0.2, 0.3, 0.4])
    return h, areas


def _incidence(h):
    """F_u(t) by the recursion itself, written out in the test."""
    n, horizon, _ = h.shape
    surv, cum, out = np.ones(n), np.zeros(n), np.empty((n, horizon))
    for t in range(horizon):
        cum = cum + surv * h[:, t, 3]
        surv = surv * (1.0 - h[:, t, :].sum(axis=1))
        out[:, t] = cum
    return out


def test_groups_get_exact_intervals_and_add_up_to_the_total(portfolio):
    h, areas = portfolio
    out = forecast_uptake(h, CAUSES, start_month="2026-11", areas=areas, levels=(0.5, 0.9))
    assert out["area_id"].drop_duplicates().tolist() == ["all", "N1", "N2", "S1", "S2"]
    cum = _incidence(h)
    monthly = np.diff(cum, axis=1, prepend=0.0)
    for area, rows in [("all", np.ones(len(areas), bool)), ("S1", areas == "S1")]:
        part = out[out["area_id"] == area]
        np.testing.assert_allclose(part["expected"], monthly[rows].sum(axis=0), rtol=1e-12)
        for t in (0, 5, 11):
            pmf = convolved_pmf(monthly[rows, t])
            row = part.iloc[t]
            assert row["lower_90"] == quantile_from_pmf(pmf, 0.05)
            assert row["upper_90"] == quantile_from_pmf(pmf, 0.95)
            assert row["lower_50"] == quantile_from_pmf(pmf, 0.25)
            assert row["upper_50"] == quantile_from_pmf(pmf, 0.75)
            pmf = convolved_pmf(cum[rows, t])
            assert row["cumulative_lower_90"] == quantile_from_pmf(pmf, 0.05)
            assert row["cumulative_upper_90"] == quantile_from_pmf(pmf, 0.95)
    by_area = out[out["area_id"] != "all"].groupby("month")["expected"].sum()
    total = out[out["area_id"] == "all"].set_index("month")["expected"]
    np.testing.assert_allclose(by_area.to_numpy(), total.to_numpy(), rtol=1e-12)


def test_simulated_uptakes_fall_in_the_intervals_as_often_as_promised(portfolio):
    # Monte Carlo: draw each customer's exit and uptake month by month from the hazards
    # (uptake and exits competing as in the forecast) and count adopters per month
    h, _ = portfolio
    out = forecast_uptake(h, CAUSES, start_month="2026-11")
    rng = np.random.default_rng(99)
    reps, (n, horizon, _) = 3000, h.shape
    counts = np.zeros((reps, horizon), dtype=int)
    alive = np.ones((reps, n), bool)
    for t in range(horizon):
        u = rng.random((reps, n))
        took = alive & (u < h[:, t, 3])
        left = alive & ~took & (u < h[:, t, :].sum(axis=1))
        counts[:, t] = took.sum(axis=1)
        alive &= ~took & ~left
    inside = (counts >= out["lower_90"].to_numpy()) & (counts <= out["upper_90"].to_numpy())
    coverage = inside.mean(axis=0)
    assert (coverage >= 0.90 - 4 * np.sqrt(0.09 / reps)).all()  # at least 90 %, to MC error
    np.testing.assert_allclose(counts.mean(axis=0), out["expected"], rtol=0.05)


def test_bootstrap_refits_widen_the_intervals(portfolio):
    h, _ = portfolio
    rng = np.random.default_rng(4)
    refits = [h * np.r_[1.0, 1.0, 1.0, f] for f in rng.lognormal(0.0, 0.3, 30)]
    plain = forecast_uptake(h, CAUSES, start_month="2026-11")
    wide = forecast_uptake(h, CAUSES, start_month="2026-11", bootstrap=refits)
    np.testing.assert_array_equal(wide["expected"], plain["expected"])
    assert (wide["lower_90"] <= plain["lower_90"]).all()
    assert (wide["upper_90"] >= plain["upper_90"]).all()
    assert (wide["cumulative_upper_90"] - wide["cumulative_lower_90"]).iloc[-1] > (
        plain["cumulative_upper_90"] - plain["cumulative_lower_90"]
    ).iloc[-1]
    # identical refits change nothing
    same = forecast_uptake(h, CAUSES, start_month="2026-11", bootstrap=[h, h])
    pd.testing.assert_frame_equal(same, plain)


def test_frame_input_and_areas_by_customer_id(portfolio, caplog):
    h, areas = portfolio
    ids = [f"BM{i:04d}" for i in range(len(areas))]
    index = pd.MultiIndex.from_product([ids, range(1, 13)], names=["customer_id", "month_ahead"])
    frame = pd.DataFrame(h.reshape(-1, 4), index=index, columns=CAUSES)
    by_id = pd.Series(areas, index=ids)[::-1]  # order does not matter, the ids do
    with caplog.at_level(logging.INFO, logger="lifecycle.forecast"):
        a = forecast_uptake(frame, start_month="2026-11", areas=by_id, horizon=6)
    b = forecast_uptake(h[:, :6], CAUSES, start_month="2026-11", areas=areas)
    pd.testing.assert_frame_equal(a, b)
    assert "uptake forecast for backup_line" in caplog.text


def test_forecast_arguments_are_checked(portfolio):
    h, areas = portfolio
    with pytest.raises(UsageError, match="600 customers"):
        forecast_uptake(h, CAUSES, start_month="2026-11", areas=areas[:10])
    with pytest.raises(UsageError, match="'all' is reserved"):
        forecast_uptake(
            h, CAUSES, start_month="2026-11", areas=np.where(areas == "N1", "all", areas)
        )
    with pytest.raises(UsageError, match="no uptake_<product> cause"):
        forecast_uptake(h[..., :3], CAUSES[:3], start_month="2026-11")
    with pytest.raises(UsageError, match="start_month was '2026-13'"):
        forecast_uptake(h, CAUSES, start_month="2026-13")
    with pytest.raises(UsageError, match="levels"):
        forecast_uptake(h, CAUSES, start_month="2026-11", levels=(0.9, 1.2))
    with pytest.raises(UsageError, match="bootstrap\\[0\\]"):
        forecast_uptake(h, CAUSES, start_month="2026-11", bootstrap=[h[:5]])


def test_forecast_settings_from_the_config():
    assert forecast_settings(Config()) == ForecastSettings()
    config = Config(raw={"forecast": {"horizon_months": 24, "levels": [0.5, 0.9]}})
    assert forecast_settings(config) == ForecastSettings(horizon_months=24, levels=(0.5, 0.9))
    with pytest.raises(UsageError, match="horizon_months was 0"):
        forecast_settings(Config(raw={"forecast": {"horizon_months": 0}}))
    with pytest.raises(UsageError, match="method was 'fast'"):
        forecast_settings(Config(raw={"forecast": {"method": "fast"}}))
    with pytest.raises(UsageError, match="levels was"):
        forecast_settings(Config(raw={"forecast": {"levels": "0.9"}}))


# --- the fan chart -------------------------------------------------------------------------------


def test_fan_chart_draws_the_expected_line_and_one_band_per_level(portfolio):
    h, areas = portfolio
    out = forecast_uptake(h, CAUSES, start_month="2026-11", areas=areas, levels=(0.5, 0.8, 0.9))
    fig = fan_chart(out, area_id="S2")
    assert isinstance(fig, Figure)
    ax = fig.axes[0]
    part = out[out["area_id"] == "S2"]
    np.testing.assert_allclose(ax.lines[0].get_ydata(), part["expected"])
    assert len(ax.collections) == 3
    assert [t.get_text() for t in ax.get_legend().get_texts()][:3] == [
        "90 % prediction interval", "80 % prediction interval", "50 % prediction interval",
    ]  # fmt: skip
    assert "area S2" in ax.get_title(loc="left")
    cumulative = fan_chart(out, cumulative=True)
    np.testing.assert_allclose(
        cumulative.axes[0].lines[0].get_ydata(),
        out.loc[out["area_id"] == "all", "cumulative_expected"],
    )


def test_save_fan_chart_writes_a_png_atomically_and_reproducibly(portfolio, tmp_path):
    h, _ = portfolio
    out = forecast_uptake(h, CAUSES, start_month="2026-11")
    first = save_fan_chart(out, tmp_path / "charts" / "uptake.png")
    data = first.read_bytes()
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert [p.name for p in (tmp_path / "charts").iterdir()] == ["uptake.png"]
    save_fan_chart(out, tmp_path / "again.png")
    assert (tmp_path / "again.png").read_bytes() == data


def test_fan_chart_refuses_unknown_products_and_areas(portfolio):
    h, _ = portfolio
    out = forecast_uptake(h, CAUSES, start_month="2026-11")
    with pytest.raises(UsageError, match="product was 'tv'"):
        fan_chart(out, product="tv")
    with pytest.raises(UsageError, match="area_id was 'Z9'"):
        fan_chart(out, area_id="Z9")
    two = pd.concat([out, out.assign(product="tv")])
    with pytest.raises(UsageError, match="pick one"):
        fan_chart(two)


def test_the_public_surface_of_forecast():
    assert sorted(lifecycle.forecast.__all__) == [
        "ALL_AREAS",
        "ForecastSettings",
        "ShiftedBetaGeometric",
        "fan_chart",
        "fit_shifted_beta_geometric",
        "forecast_coverage",
        "forecast_extras",
        "forecast_settings",
        "forecast_uptake",
        "launch_forecast",
        "launch_settings",
        "mixture_quantiles",
        "poisson_binomial_cdf",
        "poisson_binomial_pmf",
        "poisson_binomial_quantiles",
        "save_fan_chart",
        "track_record",
        "track_record_hook",
    ]
