"""Launch forecasts with the Bass (1969) diffusion model."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate, optimize

from lifecycle.config import Config
from lifecycle.errors import UsageError
from lifecycle.forecast._bass import (
    BassFit,
    bass_cumulative,
    bass_peak_time,
    fit_bass,
    launch_forecast,
    launch_settings,
)

P, Q = 0.012, 0.35


def test_closed_form_solves_the_bass_equation():
    # Bass (1969), Management Science 15(5): dF/dt = (p + qF)(1 − F), F(0) = 0; reference:
    # scipy's ODE solver
    t = np.linspace(0.0, 40.0, 81)
    solved = integrate.solve_ivp(
        lambda _, f: (P + Q * f) * (1.0 - f), (0.0, 40.0), [0.0], t_eval=t, rtol=1e-10,
        atol=1e-12,
    )  # fmt: skip
    np.testing.assert_allclose(bass_cumulative(t, P, Q), solved.y[0], atol=1e-8)


def test_peak_time_is_where_adoptions_peak():
    # Bass (1969): t* = ln(q/p)/(p + q); reference: the maximum of f(t) = dF/dt found by
    # scipy's bounded scalar minimiser
    density = lambda t: (P + Q * bass_cumulative(t, P, Q)) * (1 - bass_cumulative(t, P, Q))  # noqa: E731
    found = optimize.minimize_scalar(lambda t: -density(t), bounds=(0, 60), method="bounded",
                                     options={"xatol": 1e-9})  # fmt: skip
    assert bass_peak_time(P, Q) == pytest.approx(math.log(Q / P) / (P + Q))
    assert bass_peak_time(P, Q) == pytest.approx(found.x, abs=1e-5)
    # F(t*) = (q − p)/(2q) at the peak (Bass 1969)
    assert bass_cumulative(bass_peak_time(P, Q), P, Q) == pytest.approx((Q - P) / (2 * Q))
    assert bass_peak_time(0.2, 0.1) == 0.0


def test_p_and_q_are_recovered_from_a_simulated_launch():
    # known truth: 100,000 eventual adopters with adoption times drawn from F (inverse of the
    # closed form), counted by month over 24 months
    rng = np.random.default_rng(9)
    u = rng.random(100_000)
    # F(t) = u  ⇔  t = ln((1 + (q/p)u)/(1 − u))/(p + q)
    times = np.log((1 + (Q / P) * u) / (1 - u)) / (P + Q)
    counts = np.bincount(np.floor(times[times < 24]).astype(int), minlength=24)
    fit = fit_bass(counts)
    assert fit.p == pytest.approx(P, rel=0.05)
    assert fit.q == pytest.approx(Q, rel=0.03)
    assert fit.m == pytest.approx(100_000, rel=0.03)
    np.testing.assert_allclose(fit.adopters(24), counts, rtol=0.1, atol=40)


def test_launch_settings_are_read_and_checked():
    config = Config(raw={"forecast": {"launch": {"innovation": 0.01, "imitation": 0.3,
                                                 "market_share": 0.2}}})  # fmt: skip
    assert launch_settings(config) == BassFit(0.01, 0.3, 0.2)
    assert launch_settings(Config(raw={})) is None
    bad = Config(raw={"forecast": {"launch": {"innovation": 0, "imitation": 0.3,
                                              "market_share": 0.2}}})  # fmt: skip
    with pytest.raises(UsageError, match="innovation"):
        launch_settings(bad)


def _launch_tables():
    """Known truth: 3,000 customers in each of two areas since 2020-01; a comparable product
    launched in 2022-01 spreads by Bass with p = 0.01, market share 0.6 and imitation q = 0.5
    in area A but 0.15 in area B; the extract ends in 2024-12."""
    from lifecycle._months import format_month, parse_month

    from ._builders import make_tables

    rng = np.random.default_rng(4)
    launch = parse_month("2022-01")
    customers, uptakes = [], []
    for area, q in (("A", 0.5), ("B", 0.15)):
        for i in range(3000):
            cid = f"{area}{i:04d}"
            customers.append({"customer_id": cid, "start_month": "2020-01"})
            u = rng.random()
            if u < 0.6:
                t = math.log((1 + (q / 0.01) * u / 0.6) / (1 - u / 0.6)) / (0.01 + q)
                if t < 36:
                    month = format_month(launch + int(t))
                    uptakes.append({"customer_id": cid, "product": "old", "month": month})
    tables = make_tables(customers, uptakes=uptakes, extract_month="2024-12")
    areas = pd.Series([c["customer_id"][0] for c in customers],
                      index=[c["customer_id"] for c in customers])  # fmt: skip
    return tables, areas


def test_launch_forecast_from_a_comparable_product_keeps_imitation_local():
    from lifecycle.forecast._bass import _from_comparable

    tables, areas = _launch_tables()
    fit, local = _from_comparable(tables, areas, "old", ["A", "B"])
    assert fit.p == pytest.approx(0.01, rel=0.25)
    assert fit.m == pytest.approx(0.6, rel=0.1)
    assert local["A"] == pytest.approx(0.5, rel=0.15)  # each area's own imitation, shrunk
    assert local["B"] == pytest.approx(0.15, rel=0.25)
    out = launch_forecast(tables, areas, launch_month=tables.extract_month + 1, horizon=12,
                          name="new", comparable="old")  # fmt: skip
    by_area = out.groupby("area_id")["expected"].sum()
    assert by_area["A"] > by_area["B"]
    assert by_area["all"] == pytest.approx(by_area["A"] + by_area["B"])
    assert list(out["month"].iloc[:2]) == ["2025-01", "2025-02"]


def test_launch_forecast_from_settings():
    tables, areas = _launch_tables()
    out = launch_forecast(
        tables, areas, launch_month=tables.extract_month + 1, horizon=12, name="new",
        settings=BassFit(0.02, 0.3, 0.5),
    )  # fmt: skip
    total = out[out["area_id"] == "all"]
    want = 6000 * 0.5 * np.diff(bass_cumulative(np.arange(13), 0.02, 0.3))
    np.testing.assert_allclose(total["expected"], want, rtol=1e-9)
    assert (total["lower_90"] <= total["expected"]).all()
    assert (total["expected"] <= total["upper_90"]).all()
    with pytest.raises(UsageError, match="comparable"):
        launch_forecast(tables, areas, launch_month=0, horizon=3, name="x")
    with pytest.raises(UsageError, match="no uptakes"):
        launch_forecast(tables, areas, launch_month=0, horizon=3, name="x", comparable="nope")
