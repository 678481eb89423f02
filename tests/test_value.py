"""Lifetime value and offer expected values.

References:
- Gupta & Lehmann (2003), "Customers as assets", Journal of Interactive Marketing 17(1), 9–24:
  with margin m received at the end of each period while the customer is retained (retention
  r per period, discount rate i), CLV = Σ_{t≥1} m·r^t/(1+i)^t = m·r/(1+i−r), and the finite
  sum it comes from, m·(r/(1+i))·(1 − (r/(1+i))^H)/(1 − r/(1+i)) (geometric series).
- The present value of an ordinary annuity (payments at the end of each period),
  m·(1 − (1+i)^−H)/i (any corporate-finance text; from memory).
- Constant monthly hazards: the discrete-time competing-risks recursion
  S(t) = S(t−1)(1 − Σh), F_k(t) = Σ S(s−1)h_k has the geometric closed forms
  S(t) = a^t, F_k(t) = h_k(1 − a^t)/(1 − a) with a = 1 − Σh (geometric series).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

import lifecycle.value
from lifecycle.config import Config, load_config
from lifecycle.errors import UsageError
from lifecycle.models import HazardModel
from lifecycle.panel import build_panel, build_snapshot
from lifecycle.value import (
    ValueSettings,
    _offer_value,
    discount_factors,
    lifetime_value,
    monthly_discount_rate,
    offer_values,
    value_settings,
)
from tests._builders import make_tables

CAUSES = ["churn", "move_out", "other_exit", "uptake_backup_line"]
FAST = settings(max_examples=40, deadline=None)


@dataclass(frozen=True)
class Offer:
    """Any object with these attributes is an offer to `offer_values`."""

    name: str
    target: str
    cost: float
    hazard_ratio: float
    months: int
    value_per_uptake: float = 0.0


def constant_hazards(n: int, horizon: int, rates: list[float]) -> np.ndarray:
    return np.broadcast_to(np.asarray(rates, dtype=float), (n, horizon, len(rates))).copy()


def geometric_pv(m: float, a: float, delta: float, months: int) -> float:
    """Σ_{t=1..months} m·(a·δ)^t in closed form (geometric series)."""
    x = a * delta
    if months == 0:
        return 0.0
    return m * x * (1.0 - x**months) / (1.0 - x)


# --- lifetime value ------------------------------------------------------------------------------


def test_monthly_rate_compounds_to_the_annual_rate():
    for annual in (0.0, 0.05, 0.08, 0.25):
        d = monthly_discount_rate(annual)
        assert (1.0 + d) ** 12 == pytest.approx(1.0 + annual, rel=1e-14)
    np.testing.assert_allclose(discount_factors(3, 0.08), (1.08 ** (1 / 12)) ** -np.arange(1, 4))


@pytest.mark.parametrize(("r", "annual"), [(0.98, 0.08), (0.9, 0.12), (0.995, 0.03)])
def test_long_horizon_reproduces_gupta_lehmann_infinite_horizon(r, annual):
    # Gupta & Lehmann (2003): CLV = m·r/(1+i−r), margin at the end of each period; here the
    # period is a month and i the monthly rate from the annual one.
    i = monthly_discount_rate(annual)
    horizon = 6000  # (r/(1+i))^6000 < 1e-13 for these r
    survival = r ** np.arange(1, horizon + 1)[None, :]
    got = lifetime_value(survival, 30.0, annual_discount=annual)
    assert got[0] == pytest.approx(30.0 * r / (1.0 + i - r), rel=1e-10)


def test_gupta_lehmann_margin_multiple_per_year():
    # Gupta & Lehmann (2003) margin multiple r/(1+i−r) for annual r = 0.9, i = 0.1: 4.5; with
    # yearly periods our monthly conversion of 0.1 applied to 12-month steps is (1.1)^−1 per
    # step, so a curve with S = 0.9^(t/12) at t = 12, 24, ... (margin only in those months)
    # must give 4.5 per unit margin.
    years = 500
    months = 12 * years
    survival = np.zeros((1, months))
    margin = np.zeros((1, months))
    survival[0, 11::12] = 0.9 ** np.arange(1, years + 1)
    margin[0, 11::12] = 1.0
    got = lifetime_value(survival, margin, annual_discount=0.1)
    assert got[0] == pytest.approx(0.9 / (1.1 - 0.9), rel=1e-12)


@FAST
@given(
    r=st.floats(0.5, 0.999),
    annual=st.floats(0.0, 0.4),
    horizon=st.integers(1, 240),
    m=st.floats(0.5, 100.0),
)
def test_finite_horizon_equals_the_present_value_sum(r, annual, horizon, m):
    # the finite-horizon sum behind Gupta & Lehmann's formula, in closed form
    i = monthly_discount_rate(annual)
    x = r / (1.0 + i)
    expected = m * x * (1.0 - x**horizon) / (1.0 - x)
    survival = r ** np.arange(1, horizon + 1)[None, :]
    assert lifetime_value(survival, m, annual_discount=annual)[0] == pytest.approx(
        expected, rel=1e-10
    )


@pytest.mark.parametrize(("annual", "horizon"), [(0.08, 12), (0.08, 60), (0.2, 240), (0.01, 1)])
def test_full_retention_is_an_annuity(annual, horizon):
    # r = 1: the present value of an ordinary annuity, m·(1 − (1+i)^−H)/i
    i = monthly_discount_rate(annual)
    got = lifetime_value(np.ones(horizon), 25.0, annual_discount=annual)
    assert got == pytest.approx(25.0 * (1.0 - (1.0 + i) ** -horizon) / i, rel=1e-12)
    assert lifetime_value(np.ones(horizon), 25.0, annual_discount=0.0) == pytest.approx(
        25.0 * horizon
    )


def test_margin_per_customer_and_per_month():
    rng = np.random.default_rng(3)
    survival = np.cumprod(1.0 - rng.uniform(0.0, 0.05, (5, 24)), axis=1)
    per_customer = rng.uniform(5, 40, 5)
    by_month = np.repeat(per_customer[:, None], 30, axis=1)  # longer than the horizon
    a = lifetime_value(survival, per_customer, horizon=18)
    b = lifetime_value(survival, by_month, horizon=18)
    np.testing.assert_allclose(a, b, rtol=1e-14)
    # a margin that stops after month 6 is the 6-month value
    stopped = by_month.copy()
    stopped[:, 6:] = 0.0
    np.testing.assert_allclose(
        lifetime_value(survival, stopped, horizon=18),
        lifetime_value(survival, per_customer, horizon=6),
        rtol=1e-14,
    )


def test_survival_frame_gives_a_series_with_its_index():
    frame = pd.DataFrame(
        [[0.9, 0.8], [1.0, 1.0]],
        index=pd.Index(["BM1", "BM2"], name="customer_id"),
        columns=pd.RangeIndex(1, 3, name="month_ahead"),
    )
    out = lifetime_value(frame, 10.0, annual_discount=0.0)
    assert out.name == "lifetime_value"
    assert out.index.tolist() == ["BM1", "BM2"]
    np.testing.assert_allclose(out.to_numpy(), [17.0, 20.0])


def test_lifetime_value_refuses_bad_arguments():
    s = np.full((2, 6), 0.9)
    with pytest.raises(UsageError, match="horizon was 7 months"):
        lifetime_value(s, 1.0, horizon=7)
    with pytest.raises(UsageError, match="3 values but there are 2"):
        lifetime_value(s, [1.0, 2.0, 3.0])
    with pytest.raises(UsageError, match="outside"):
        lifetime_value(s * 1.5, 1.0)
    with pytest.raises(UsageError, match=r"annual_discount was 1\.5"):
        lifetime_value(s, 1.0, annual_discount=1.5)
    with pytest.raises(UsageError, match="missing"):
        lifetime_value(s, [1.0, np.nan])


def test_value_settings_from_the_config():
    assert value_settings(Config()) == ValueSettings(0.08, 36)
    config = Config(raw={"value": {"annual_discount": 0.1, "horizon_months": 24}})
    assert value_settings(config) == ValueSettings(0.1, 24)
    with pytest.raises(UsageError, match=r"annual_discount was -0.1"):
        value_settings(Config(raw={"value": {"annual_discount": -0.1}}))
    with pytest.raises(UsageError, match="horizon_months was 0"):
        value_settings(Config(raw={"value": {"horizon_months": 0}}))
    with pytest.raises(UsageError, match=r"unknown setting 'rate'"):
        value_settings(Config(raw={"value": {"rate": 0.1}}))


# --- offer values --------------------------------------------------------------------------------


hazard_arrays = st.integers(1, 6).flatmap(
    lambda n: st.integers(1, 18).flatmap(
        lambda horizon: st.builds(
            lambda seed: _random_hazards(n, horizon, seed), st.integers(0, 2**31 - 1)
        )
    )
)


def _random_hazards(n: int, horizon: int, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    h = rng.uniform(0.0, 0.25, (n, horizon, 4))
    h[..., 3] = rng.uniform(0.0, 0.2, (n, horizon))
    return h


@FAST
@given(h=hazard_arrays, cost=st.floats(0.0, 100.0), months=st.integers(1, 30))
def test_an_offer_without_effect_is_worth_minus_its_cost_exactly(h, cost, months):
    offers = [
        Offer("save", "churn", cost, 1.0, months),
        Offer("stay", "move_out", cost, 1.0, months),
        Offer("add", "uptake_backup_line", cost, 1.0, months, value_per_uptake=150.0),
    ]
    out = offer_values(h, CAUSES, 20.0, offers, annual_discount=0.08)
    assert (out["expected_value"] == -cost).all()
    assert (out.filter(like="change") == 0.0).all().all()


@FAST
@given(h=hazard_arrays, ratio=st.floats(0.05, 0.99), months=st.integers(1, 30))
def test_a_churn_offer_raises_survival_and_the_competing_incidences(h, ratio, months):
    out = offer_values(h, CAUSES, 20.0, [Offer("save", "churn", 5.0, ratio, months)])
    tol = 1e-12
    assert (out["survival_change"] >= -tol).all()
    assert (out["cif_change_churn"] <= tol).all()
    assert (out["cif_change_move_out"] >= -tol).all()
    assert (out["cif_change_other_exit"] >= -tol).all()
    assert (out["cif_change_uptake_backup_line"] >= -tol).all()
    assert (out["value_with"] >= out["value_without"] - 1e-9).all()
    # S + Σ F over the terminal causes stays 1, so the changes cancel
    total = out[["survival_change", "cif_change_churn", "cif_change_move_out"]].sum(axis=1)
    np.testing.assert_allclose(total + out["cif_change_other_exit"], 0.0, atol=1e-12)


@pytest.mark.parametrize(("months", "horizon"), [(6, 24), (24, 24), (30, 12), (1, 5)])
def test_churn_offer_against_the_constant_hazard_closed_form(months, horizon):
    hc, hm, ho, hu = 0.03, 0.01, 0.002, 0.02
    theta, margin, annual = 0.6, 25.0, 0.08
    h = constant_hazards(3, horizon, [hc, hm, ho, hu])
    out = offer_values(
        h, CAUSES, margin, [Offer("save", "churn", 10.0, theta, months)], annual_discount=annual
    )
    k = min(months, horizon)
    a0 = 1.0 - hc - hm - ho  # monthly survival without the offer
    a1 = 1.0 - theta * hc - hm - ho  # with it, in its months
    s0, s1 = a0**horizon, a1**k * a0 ** (horizon - k)
    f0 = hm * (1 - a0**horizon) / (1 - a0)
    f1 = hm * (1 - a1**k) / (1 - a1) + a1**k * hm * (1 - a0 ** (horizon - k)) / (1 - a0)
    delta = 1.0 / (1.0 + monthly_discount_rate(annual))
    v0 = geometric_pv(margin, a0, delta, horizon)
    v1 = geometric_pv(margin, a1, delta, k) + (a1 * delta) ** k * geometric_pv(
        margin, a0, delta, horizon - k
    )
    # uptake competes with the exits: b = 1 − h_u − Σ h_k
    b0, b1 = a0 - hu, a1 - hu
    u0 = hu * (1 - b0**horizon) / (1 - b0)
    u1 = hu * (1 - b1**k) / (1 - b1) + b1**k * hu * (1 - b0 ** (horizon - k)) / (1 - b0)
    np.testing.assert_allclose(out["survival_change"], s1 - s0, rtol=1e-10)
    np.testing.assert_allclose(out["cif_change_move_out"], f1 - f0, rtol=1e-10)
    np.testing.assert_allclose(out["cif_change_uptake_backup_line"], u1 - u0, rtol=1e-10)
    np.testing.assert_allclose(out["value_without"], v0, rtol=1e-12)
    np.testing.assert_allclose(out["value_with"], v1, rtol=1e-12)
    np.testing.assert_allclose(out["expected_value"], v1 - v0 - 10.0, rtol=1e-10)
    assert (out["survival_change"] > 0).all() and (out["cif_change_move_out"] > 0).all()


def test_uptake_offer_values_the_extra_uptakes_in_their_months():
    hc, hm, ho, hu = 0.02, 0.01, 0.0, 0.01
    theta, vpu, months, horizon = 2.5, 120.0, 3, 12
    h = constant_hazards(2, horizon, [hc, hm, ho, hu])
    offer = Offer("add", "uptake_backup_line", 4.0, theta, months, value_per_uptake=vpu)
    flat = offer_values(h, CAUSES, 20.0, [offer], annual_discount=0.0).iloc[0]
    a = 1.0 - hc - hm - ho
    b0, b1 = a - hu, a - theta * hu
    u0 = hu * (1 - b0**horizon) / (1 - b0)
    u1 = theta * hu * (1 - b1**months) / (1 - b1) + b1**months * hu * (
        1 - b0 ** (horizon - months)
    ) / (1 - b0)
    # undiscounted: the value is value_per_uptake times the change in F_u(H)
    assert flat["cif_change_uptake_backup_line"] == pytest.approx(u1 - u0, rel=1e-10)
    assert flat["expected_value"] == pytest.approx(vpu * (u1 - u0) - 4.0, rel=1e-10)
    assert flat["survival_change"] == 0.0  # taking a product up is not an exit
    # discounted: each month's extra uptakes at (1 + d)^−t
    delta = 1.0 / (1.0 + monthly_discount_rate(0.08))
    monthly0 = hu * b0 ** np.arange(horizon)
    monthly1 = np.concatenate(
        [theta * hu * b1 ** np.arange(months), b1**months * hu * b0 ** np.arange(horizon - months)]
    )
    pv = vpu * ((monthly1 - monthly0) * delta ** np.arange(1, horizon + 1)).sum()
    disc = offer_values(h, CAUSES, 20.0, [offer], annual_discount=0.08).iloc[0]
    assert disc["expected_value"] == pytest.approx(pv - 4.0, rel=1e-10)


def test_uptake_values_credit_a_retention_offer_with_the_uptakes_it_keeps():
    h = constant_hazards(1, 12, [0.04, 0.01, 0.0, 0.02])
    offer = Offer("save", "churn", 0.0, 0.5, 12)
    plain = offer_values(h, CAUSES, 10.0, [offer], annual_discount=0.0).iloc[0]
    valued = offer_values(
        h, CAUSES, 10.0, [offer], annual_discount=0.0, uptake_values={"backup_line": 100.0}
    ).iloc[0]
    extra = 100.0 * plain["cif_change_uptake_backup_line"]
    assert extra > 0
    assert valued["expected_value"] == pytest.approx(plain["expected_value"] + extra, rel=1e-12)


def test_rows_are_customer_major_and_chunks_do_not_matter(monkeypatch):
    h = _random_hazards(7, 10, seed=11)
    offers = [
        Offer("save", "churn", 3.0, 0.7, 4),
        Offer("add", "uptake_backup_line", 2.0, 1.8, 2, value_per_uptake=90.0),
    ]
    ids = [f"C{i}" for i in range(7)]
    whole = offer_values(h, CAUSES, np.arange(7.0), offers, customer_ids=ids)
    assert whole["customer_id"].tolist() == [c for c in ids for _ in offers]
    assert whole["offer"].tolist() == ["save", "add"] * 7
    monkeypatch.setattr(_offer_value, "CHUNK_CUSTOMERS", 3)
    chunked = offer_values(h, CAUSES, np.arange(7.0), offers, customer_ids=ids)
    pd.testing.assert_frame_equal(whole, chunked)


def test_predict_hazard_frame_is_accepted():
    h = _random_hazards(3, 5, seed=2)
    index = pd.MultiIndex.from_product(
        [["a", "b", "c"], range(1, 6)], names=["customer_id", "month_ahead"]
    )
    frame = pd.DataFrame(h.reshape(-1, 4), index=index, columns=CAUSES)
    offers = [Offer("save", "churn", 3.0, 0.7, 4)]
    from_frame = offer_values(frame, None, 12.0, offers)
    from_array = offer_values(h, CAUSES, 12.0, offers, customer_ids=["a", "b", "c"])
    pd.testing.assert_frame_equal(from_frame, from_array)


def test_the_decisions_offer_class_is_accepted():
    offers_module = pytest.importorskip("lifecycle.decisions._offers")
    offer = offers_module.Offer(
        name="loyalty_credit", target="churn", cost=25.0, hazard_ratio=0.7, months=6
    )
    h = constant_hazards(2, 12, [0.03, 0.01, 0.001, 0.0])
    out = offer_values(h, CAUSES, 20.0, [offer])
    assert out["offer"].tolist() == ["loyalty_credit"] * 2
    assert (out["expected_value"] > -25.0).all()


def test_a_raised_hazard_is_capped_so_each_month_stays_a_probability():
    h = constant_hazards(1, 3, [0.5, 0.3, 0.1, 0.05])
    out = offer_values(h, CAUSES, 1.0, [Offer("push", "uptake_backup_line", 0.0, 100.0, 3)])
    # capped at 1 − Σ terminal = 0.1 per month, so F_u(3) = 0.1: after month 1 everyone has
    # left or taken it up. Without the offer b = 1 − 0.05 − 0.9 and F_u(3) = 0.05·(1 + b + b²).
    b = 0.05
    expected = 0.1 - 0.05 * (1 + b + b**2)
    assert out["cif_change_uptake_backup_line"].iloc[0] == pytest.approx(expected, rel=1e-12)


def test_offer_values_refuses_bad_offers_and_hazards(caplog):
    h = constant_hazards(2, 4, [0.03, 0.01, 0.0, 0.01])
    with pytest.raises(UsageError, match="target was 'uptake_tv'"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "uptake_tv", 1.0, 1.5, 2)])
    with pytest.raises(UsageError, match="months was 0"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "churn", 1.0, 0.5, 0)])
    with pytest.raises(UsageError, match=r"cost was -1\.0"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "churn", -1.0, 0.5, 2)])
    with pytest.raises(UsageError, match="unique"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "churn", 1.0, 0.5, 2)] * 2)
    with pytest.raises(UsageError, match="lacks"):
        offer_values(h, CAUSES, 1.0, [object()])
    bad = h.copy()
    bad[0, 1, 0] = 0.995
    with pytest.raises(UsageError, match="terminal hazards of a month add up to more than 1"):
        offer_values(bad, CAUSES, 1.0, [Offer("x", "churn", 1.0, 0.5, 2)])
    with pytest.raises(UsageError, match="4 causes on its last axis but 3 names"):
        offer_values(h, CAUSES[:3], 1.0, [Offer("x", "churn", 1.0, 0.5, 2)])
    with pytest.raises(UsageError, match="horizon was 9 months"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "churn", 1.0, 0.5, 2)], horizon=9)
    with caplog.at_level(logging.INFO, logger="lifecycle.value"):
        offer_values(h, CAUSES, 1.0, [Offer("x", "churn", 1.0, 0.5, 2)])
    assert "valued 1 offer(s) for 2 customers over 4 months" in caplog.text


# --- with a fitted model, and the public surface --------------------------------------------------


class MonthlyRates(HazardModel):
    """A test family: each cause's hazard is its monthly rate in the panel, for everyone."""

    def _fit(self, panel):
        self.rates_ = np.array([panel[c].mean() for c in self.causes_])

    def _hazard_array(self, future, n, horizon):
        return np.broadcast_to(self.rates_, (n, horizon, len(self.rates_))).copy()


def test_a_fitted_model_feeds_lifetime_value_and_offer_values_consistently():
    rows = []
    for i in range(60):
        row = {"customer_id": f"K{i:02d}", "start_month": "2025-01", "monthly_margin": 10.0 + i}
        if i % 5 == 0:
            row.update(end_month=f"2026-0{1 + i % 9}", end_reason=["churn", "move_out"][i % 2])
        rows.append(row)
    tables = make_tables(
        rows, uptakes=[{"customer_id": "K01", "product": "tv", "month": "2025-06"}]
    )
    model = MonthlyRates().fit(build_panel(tables, "2026-10"))
    snapshot = build_snapshot(tables, "2026-10")
    margin = snapshot["monthly_margin"].to_numpy(dtype=float)
    ltv = lifetime_value(model.predict_survival(snapshot, 24), margin, annual_discount=0.08)
    values = offer_values(
        model.predict_hazard(snapshot, 24),
        None,
        margin,
        [Offer("save", "churn", 5.0, 0.5, 6), Offer("tv", "uptake_tv", 1.0, 2.0, 3, 40.0)],
        annual_discount=0.08,
    )
    saved = values[values["offer"] == "save"].set_index("customer_id")
    np.testing.assert_allclose(saved["value_without"], ltv.loc[saved.index], rtol=1e-12)
    assert (saved["expected_value"] > -5.0).all()
    # K01 holds the product already: the uptake offer cannot work on it
    tv = values[values["offer"] == "tv"].set_index("customer_id")
    assert tv.loc["K01", "expected_value"] == -1.0
    assert (tv.drop(index="K01")["expected_value"] > -1.0).all()


def test_the_public_surface_of_value():
    assert sorted(lifecycle.value.__all__) == [
        "EVENTS_PER_FEATURE",
        "HazardInput",
        "MONEY_COLUMNS",
        "OfferEffectModel",
        "ValueSettings",
        "campaign_covariates",
        "campaign_follow_up",
        "check_horizon",
        "customer_offer_effects",
        "discount_factors",
        "estimate_offer_effects",
        "lifetime_value",
        "monthly_discount_rate",
        "offer_values",
        "read_hazards",
        "round_money",
        "value_settings",
    ]


def test_money_is_written_to_cents_and_the_currency_is_read(tmp_path):
    frame = pd.DataFrame(
        {
            "customer_id": ["A", "B"],
            "expected_value": [14.602410109760967, -0.005001],
            "week": [1, 2],
        }
    )
    rounded = lifecycle.value.round_money(frame)
    assert rounded["expected_value"].tolist() == [14.6, -0.01]  # two decimals (common practice)
    assert rounded["week"].tolist() == [1, 2] and frame["expected_value"][0] != 14.6
    path = tmp_path / "lifecycle.toml"
    path.write_text('[value]\ncurrency = "EUR"\n')
    assert value_settings(load_config(path)).currency == "EUR"
    assert value_settings(Config()).currency == ""
    path.write_text("[value]\ncurrency = 978\n")
    with pytest.raises(UsageError, match="currency was 978"):
        value_settings(load_config(path))
