"""Observed outcomes, the tenure life-table baseline and out-of-time backtests, end to end."""

from __future__ import annotations

import logging
import pickle

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
from lifelines import KaplanMeierFitter
from shapely.geometry import box
from sklearn.base import clone
from sklearn.linear_model import LogisticRegression
from sksurv.metrics import brier_score as sk_brier_score
from sksurv.metrics import concordance_index_ipcw
from sksurv.util import Surv

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, PanelSettings
from lifecycle.data import Tables
from lifecycle.errors import UsageError
from lifecycle.evaluation import (
    TenureLifeTable,
    backtest,
    champions,
    expected_maximum_profit,
    observed_outcomes,
    outcome_for_cause,
)
from lifecycle.models import CauseSpecificCox, HazardModel
from lifecycle.panel import build_panel, build_snapshot, life_table
from lifecycle.spatial import add_spatial_context
from tests._builders import make_tables

EXTRACT = parse_month("2026-10")
CONFIG = Config(panel=PanelSettings(window_months=24))


# -- a small portfolio with a known covariate effect ----------------------------------------
def _portfolio(n: int = 1500, seed: int = 0) -> Tables:
    """Customers simulated month by month: churn hazard 0.03·exp(0.9·score), move-out 0.015,
    other 0.003, uptake of ``gadget`` 0.02·exp(0.5·score); ``score`` ~ N(0, 1) is a static
    attribute, so a model that uses it must rank churners better than tenure alone. Premises lie
    in a 1 km square split into two areas, so the default builders add spatial context."""
    rng = np.random.default_rng(seed)
    score = rng.normal(size=n)
    start = rng.integers(EXTRACT - 40, EXTRACT, n)
    end = np.full(n, np.nan)
    reason = np.full(n, None, dtype=object)
    uptake = np.full(n, -1)
    h = np.column_stack([0.03 * np.exp(0.9 * score), np.full(n, 0.015), np.full(n, 0.003)])
    h_up = 0.02 * np.exp(0.5 * score)
    for month in range(EXTRACT - 40, EXTRACT + 1):
        active = (start <= month) & np.isnan(end)
        u = rng.random(n)
        taking = active & (uptake < 0) & (rng.random(n) < h_up)
        uptake[taking] = month
        cum = np.cumsum(h, axis=1)
        which = (u[:, None] < cum).argmax(axis=1)
        leaving = active & (u < cum[:, -1])
        end[leaving] = month
        reason[leaving] = np.array(["churn", "move_out", "other"])[which[leaving]]
    tables = Tables(
        customers=pd.DataFrame(
            {
                "customer_id": np.arange(1, n + 1),
                "start": start.astype(np.int32),
                "end": end,
                "end_reason": pd.Categorical(reason, categories=["churn", "move_out", "other"]),
                "x": 500_000.0 + rng.uniform(0, 1000, n),
                "y": 4_000_000.0 + rng.uniform(0, 1000, n),
                "monthly_margin": np.full(n, 20.0),
                "score": score,
            }
        ),
        uptakes=pd.DataFrame(
            {
                "customer_id": np.flatnonzero(uptake >= 0) + 1,
                "product": "gadget",
                "month": uptake[uptake >= 0].astype(np.int32),
            }
        ),
        areas=gpd.GeoDataFrame(
            {"area_id": ["west", "east"], "rental_share": [0.2, 0.6]},
            geometry=[
                box(500_000, 4_000_000, 500_500, 4_001_000),
                box(500_500, 4_000_000, 501_000, 4_001_000),
            ],
            crs="EPSG:32625",
        ),
        activity=pd.DataFrame(columns=["customer_id", "month"]).astype({"month": np.int32}),
        campaigns=pd.DataFrame(columns=["customer_id", "month", "offer", "arm"]),
        premise_crs="EPSG:32625",
        extract_month=EXTRACT,
        products=["gadget"],
        static_columns=["monthly_margin", "score"],
        activity_columns=[],
    )
    return tables


class LogisticHazard(HazardModel):
    """A small real family for the tests: discrete-time logistic hazards on tenure and the
    numeric features (multinomial over no exit / each terminal cause; binary per uptake)."""

    def __init__(self, *, features: tuple[str, ...] = ("score",), penalty_c: float = 1.0):
        self.features = features
        self.penalty_c = penalty_c

    def _design(self, frame: pd.DataFrame) -> np.ndarray:
        tenure = frame["tenure_start"].to_numpy(dtype=float)
        columns = [np.log1p(tenure)] + [frame[f].to_numpy(dtype=float) for f in self.features]
        return np.column_stack(columns)

    def _fit(self, panel: pd.DataFrame) -> None:
        x = self._design(panel)
        label = np.zeros(len(panel), dtype=int)
        for j, cause in enumerate(self.terminal_causes_):
            label[panel[cause].to_numpy() == 1] = j + 1
        self.terminal_ = LogisticRegression(C=self.penalty_c, max_iter=1000).fit(x, label)
        self.uptake_ = {}
        for cause in self.uptake_causes_:
            at_risk = panel["holds_" + cause.removeprefix("uptake_")].to_numpy() == 0
            self.uptake_[cause] = LogisticRegression(C=self.penalty_c, max_iter=1000).fit(
                x[at_risk], panel[cause].to_numpy()[at_risk]
            )

    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        x = self._design(future)
        out = np.zeros((len(future), len(self.causes_)))
        probability = self.terminal_.predict_proba(x)
        for k, cls in enumerate(self.terminal_.classes_):
            if cls > 0:
                out[:, cls - 1] = probability[:, k]
        for j, cause in enumerate(self.uptake_causes_, start=len(self.terminal_causes_)):
            out[:, j] = self.uptake_[cause].predict_proba(x)[:, 1]
        return out.reshape(n, horizon, len(self.causes_))


@pytest.fixture(scope="module")
def portfolio() -> Tables:
    return _portfolio()


@pytest.fixture(scope="module")
def result(portfolio):
    families = {"life_table": TenureLifeTable(), "logistic": LogisticHazard()}
    return backtest(
        portfolio,
        families=families,
        cutoffs=["2025-10", "2026-04"],
        horizons=(3, 6, 12),
        config=CONFIG,
    )


# -- observed outcomes -----------------------------------------------------------------------
def test_observed_outcomes_follow_the_definitions():
    tables = make_tables(
        [
            dict(customer_id="a", start_month="2026-01"),  # active: censored at the extract
            dict(customer_id="b", start_month="2026-01", end_month="2026-07", end_reason="churn"),
            dict(customer_id="c", start_month="2026-02", end_month="2026-05", end_reason="other"),
            dict(customer_id="d", start_month="2026-06"),  # starts after the cutoff: absent
            dict(
                customer_id="e", start_month="2025-01", end_month="2026-09", end_reason="move_out"
            ),
        ],
        uptakes=[
            dict(customer_id="a", product="gadget", month="2026-03"),  # held at the cutoff
            dict(customer_id="b", product="gadget", month="2026-07"),  # in the exit month
            dict(customer_id="e", product="gadget", month="2026-08"),
        ],
        extract_month="2026-10",
    )
    out = observed_outcomes(tables, "2026-05").set_index("customer_id")
    # present at the end of 2026-05: a, b, e (c ended in 2026-05, d had not started)
    assert list(out.index) == ["a", "b", "e"]
    # months after 2026-05: 2026-07 is month 2, 2026-09 month 4; a is followed 5 months
    assert out["months"].tolist() == [5, 2, 4]
    assert out["cause"].astype(object).where(out["cause"].notna(), None).tolist() == [
        None,
        "churn",
        "move_out",
    ]
    assert out["holds_gadget"].tolist() == [1, 0, 0]
    assert out["uptake_gadget"].tolist()[1:] == [2.0, 3.0]
    months, code, at_risk = outcome_for_cause(out.reset_index(), "uptake_gadget")
    assert at_risk.tolist() == [False, True, True]
    assert code.tolist()[1:] == [1, 1] and months.tolist()[1:] == [2, 3]
    months, code, _ = outcome_for_cause(out.reset_index(), "move_out")
    assert code.tolist() == [0, 2, 1]
    with pytest.raises(UsageError, match="expected to be one of"):
        outcome_for_cause(out.reset_index(), "uptake_nothing")


def test_observed_outcomes_cover_the_snapshot_and_match_the_later_panel(portfolio):
    cutoff = parse_month("2025-10")
    out = observed_outcomes(portfolio, cutoff)
    snapshot = build_snapshot(portfolio, cutoff, config=CONFIG)
    assert out["customer_id"].tolist() == snapshot["customer_id"].tolist()
    # the panel at the extract month holds one row per month observed after the cutoff, and the
    # exit flag in the last of them (the panel is another module's view of the same tables)
    panel = build_panel(portfolio, EXTRACT, config=Config(panel=PanelSettings(window_months=12)))
    after = panel[panel["month"].astype(str) > format_month(cutoff)]
    counts = after.groupby("customer_id", observed=True).size()
    assert counts.reindex(out["customer_id"]).tolist() == out["months"].tolist()
    churned = after.groupby("customer_id", observed=True)["churn"].max()
    assert (churned.reindex(out["customer_id"]).to_numpy() == 1).tolist() == (
        out["cause"] == "churn"
    ).tolist()


# -- the baseline ----------------------------------------------------------------------------
def test_tenure_life_table_survival_equals_lifelines_kaplan_meier(portfolio):
    panel = build_panel(portfolio, EXTRACT, config=CONFIG)
    model = TenureLifeTable(min_events=0).fit(panel)  # the raw life table, not smoothed
    # one subject per customer: entry at its first tenure in the window, exit at its last
    first = panel.groupby("customer_id", observed=True).agg(
        entry=("tenure_start", "min"),
        exit=("tenure_stop", "max"),
        churn=("churn", "max"),
        move=("move_out", "max"),
        other=("other_exit", "max"),
    )
    event = (first[["churn", "move", "other"]].sum(axis=1) > 0).to_numpy()
    km = KaplanMeierFitter().fit(first["exit"], event, entry=first["entry"])
    # reference: lifelines KaplanMeierFitter with left truncation (entry), product-limit
    # S(t) over tenure; the baseline's all-cause survival from tenure a to a + 6 is S(a+6)/S(a)
    snapshot = build_snapshot(portfolio, EXTRACT - 6, config=CONFIG)
    survival = model.predict_survival(snapshot, 6)
    for row in range(0, len(snapshot), 97):
        a = int(snapshot["tenure_start"].iloc[row])  # tenure_stop of month 1 ahead is a + 1
        if a + 6 > first["exit"].max():
            continue
        expected = km.predict(a + 6) / km.predict(a)
        assert survival.iloc[row][6] == pytest.approx(expected, rel=1e-9)


def test_tenure_life_table_tail_and_estimator_contract(portfolio):
    panel = build_panel(portfolio, EXTRACT, config=CONFIG)
    model = TenureLifeTable(tail_months=6)
    fitted = clone(model).fit(panel)
    # past the longest tenure: Σ d / Σ n over the trailing months, at least 6 of them and at
    # least min_events (20) events (the definition), from the life table itself
    longest = fitted.hazard_.shape[0] - 1
    for j, cause in enumerate(fitted.causes_):
        table = life_table(panel, cause).iloc[::-1]
        events, at_risk = table["events"].cumsum(), table["at_risk"].cumsum()
        span = longest + 1 - table.index.to_numpy()
        first = np.flatnonzero((span >= 6) & (events.to_numpy() >= 20))[0]
        expected = events.iloc[first] / at_risk.iloc[first]
        assert fitted.tail_hazard_[j] == pytest.approx(expected, rel=1e-12), cause
    snapshot = build_snapshot(portfolio, EXTRACT, config=CONFIG).head(3).copy()
    snapshot["tenure_start"] = np.int16(longest + 5)
    hazard = fitted.predict_hazard(snapshot, 2)
    np.testing.assert_allclose(hazard.to_numpy()[:, :3], np.tile(fitted.tail_hazard_[:3], (6, 1)))
    # sklearn's contract: clone round trip, fit keeps hyperparameters, no training data kept
    assert clone(model).get_params() == {"tail_months": 6, "min_events": 20}
    assert fitted.get_params() == {"tail_months": 6, "min_events": 20}
    assert len(pickle.dumps(fitted)) < 20_000 < panel.memory_usage(deep=True).sum()
    again = TenureLifeTable(tail_months=6).fit(panel)
    np.testing.assert_array_equal(again.hazard_, fitted.hazard_)
    with pytest.raises(UsageError, match="tail_months"):
        TenureLifeTable(tail_months=0).fit(panel)
    with pytest.raises(UsageError, match="min_events"):
        TenureLifeTable(min_events=-1).fit(panel)


# -- backtest end to end ---------------------------------------------------------------------
def test_backtest_table_has_every_family_cause_horizon_and_metric(result):
    metrics = result.metrics
    assert list(metrics.columns) == [
        "family", "cause", "horizon", "cutoff", "metric", "value", "n", "events",
    ]  # fmt: skip
    # 2025-10 has 12 months of follow-up (3, 6, 12); 2026-04 only 6 (3, 6)
    scored = metrics.groupby("cutoff")["horizon"].unique().apply(sorted).to_dict()
    assert scored == {"2025-10": [3, 6, 12], "2026-04": [3, 6]}
    assert set(metrics["cause"]) == {"churn", "move_out", "other_exit", "uptake_gadget"}
    per_cell = metrics.groupby(["family", "cause", "horizon", "cutoff"]).size()
    # seven metrics per cell, and the expected maximum profit (emp) for churn
    churn_cell = per_cell.index.get_level_values("cause") == "churn"
    assert (per_cell[~churn_cell] == 7).all() and (per_cell[churn_cell] == 8).all()
    assert len(per_cell) == 2 * 4 * 5
    churn = metrics[(metrics["cause"] == "churn") & (metrics["metric"] == "uno_c")]
    assert churn["value"].notna().all()


def test_backtest_ranks_the_model_with_the_true_covariate_first(result):
    m = result.metrics
    c = m[(m["metric"] == "uno_c") & (m["horizon"] == 12) & (m["cause"] == "churn")]
    by_family = c.set_index("family")["value"]
    # the true log hazard ratio of score is 0.9: concordance well above tenure alone
    assert by_family["logistic"] > by_family["life_table"] + 0.1
    champions = result.champions.set_index("cause")
    assert champions.loc["churn", "family"] == "logistic"
    assert champions.loc["churn", "horizon"] == 12
    brier = m[(m["metric"] == "brier") & (m["horizon"] == 12) & (m["cause"] == "churn")]
    b = brier.set_index("family")["value"]
    assert b["logistic"] < b["life_table"]
    lift = m[(m["metric"] == "lift_top_decile") & (m["cause"] == "churn") & (m["horizon"] == 12)]
    assert lift.set_index("family")["value"]["logistic"] > 1.5


def test_backtest_values_agree_with_sksurv_on_the_same_predictions(portfolio, result):
    """Rebuild one cell by hand: the logistic family fitted as of 2025-10, churn at 12 months."""
    cutoff = parse_month("2025-10")
    panel = build_panel(portfolio, cutoff, config=CONFIG)
    snapshot = build_snapshot(portfolio, cutoff, config=CONFIG)
    model = LogisticHazard().fit(panel)
    risk = model.predict_cumulative_incidence(snapshot, 12).xs(12, level="month_ahead")["churn"]
    months, code, _ = outcome_for_cause(observed_outcomes(portfolio, cutoff), "churn")
    # censored and competing exits sit half a month after their month (see backtest)
    y = Surv.from_arrays(code == 1, months + 0.5 * (code != 1))
    expected = concordance_index_ipcw(y, y, risk.to_numpy(), tau=12.25)[0]
    m = result.metrics.set_index(["family", "cause", "horizon", "cutoff", "metric"])["value"]
    # reference: sksurv.metrics.concordance_index_ipcw
    assert m[("logistic", "churn", 12, "2025-10", "uno_c")] == pytest.approx(expected, rel=1e-9)
    # Nobody is censored before month 12 here (G = 1 up to 12), so the competing-risks Brier
    # score equals sksurv's single-cause one with competing exits moved past 12 as survivors:
    # both score (0 − F)² for them (reference: sksurv.metrics.brier_score, Graf et al. 1999).
    assert np.all((code > 0) | (months >= 12))
    churn_only = Surv.from_arrays(code == 1, np.where(code == 2, 99.0, months + 0.5 * (code == 0)))
    _, sk = sk_brier_score(churn_only, churn_only, 1.0 - risk.to_numpy()[:, None], [12.0])
    assert m[("logistic", "churn", 12, "2025-10", "brier")] == pytest.approx(sk[0], rel=1e-9)
    # emp: the churners are the churn exits within 12 months, the measure that of
    # expected_maximum_profit (checked against empulse's empc_score in test_uplift_metrics.py)
    # with Verbraken et al. (2013)'s setting: CLV 200, d 10, f 1, Beta(6, 14)
    churned = ((code == 1) & (months <= 12)).astype(float)
    emp = expected_maximum_profit(risk.to_numpy(), churned, clv=200, incentive_cost=10,
                                  contact_cost=1, alpha=6, beta=14)  # fmt: skip
    assert m[("logistic", "churn", 12, "2025-10", "emp")] == pytest.approx(emp, rel=1e-12)


def test_backtest_calibration_tables_and_baseline_calibration(result):
    cal = result.calibration
    assert list(cal.columns[:4]) == ["family", "cause", "horizon", "cutoff"]
    cell = cal[
        (cal["family"] == "life_table")
        & (cal["cause"] == "churn")
        & (cal["horizon"] == 12)
        & (cal["cutoff"] == "2025-10")
    ]
    assert len(cell) == 10 and cell["n"].sum() == pytest.approx(
        result.metrics.query("cutoff == '2025-10' and cause == 'churn'")["n"].iloc[0]
    )
    # the baseline has no covariate, so its deciles barely separate, but overall it is
    # calibrated: the mean prediction lies within the overall observed incidence ± 0.04
    m = result.metrics.set_index(["family", "cause", "horizon", "cutoff", "metric"])["value"]
    predicted = m[("life_table", "churn", 12, "2025-10", "mean_predicted")]
    observed = m[("life_table", "churn", 12, "2025-10", "observed")]
    assert abs(predicted - observed) < 0.04


def test_backtest_leaves_the_given_families_unfitted_and_logs_progress(portfolio, caplog):
    family = TenureLifeTable()
    with caplog.at_level(logging.INFO, logger="lifecycle.evaluation"):
        out = backtest(
            portfolio,
            families={"base": family},
            cutoffs=["2026-07"],
            horizons=(3, 6),
            config=CONFIG,
        )
    assert not hasattr(family, "hazard_")
    assert "skipped" in caplog.text and "fitting base" in caplog.text
    assert sorted(out.metrics["horizon"].unique()) == [3]


def test_backtest_refuses_cutoffs_without_follow_up_and_bad_families(portfolio):
    with pytest.raises(UsageError, match="latest usable cutoff is 2026-07"):
        backtest(portfolio, families={"b": TenureLifeTable()}, cutoffs=["2026-09"], config=CONFIG)
    with pytest.raises(UsageError, match="HazardModel"):
        backtest(portfolio, families={"b": object()}, cutoffs=["2025-10"], config=CONFIG)


def test_backtest_with_a_custom_panel_builder_derives_the_same_snapshot(portfolio):
    calls = []

    def builder(tables, as_of, config):
        calls.append(as_of)
        return add_spatial_context(build_panel(tables, as_of, config=config), tables, config=config)

    # the spatial features enter the model, so equal metrics need equal snapshot features
    families = {"spatial": LogisticHazard(features=("score", "rental_share", "local_move_rate"))}
    custom = backtest(
        portfolio, families=families, cutoffs=["2026-01"], horizons=(6,), config=CONFIG,
        build_panel_fn=builder,
    )  # fmt: skip
    default = backtest(
        portfolio, families=families, cutoffs=["2026-01"], horizons=(6,), config=CONFIG
    )
    assert calls == [parse_month("2026-01"), parse_month("2026-02")]
    pd.testing.assert_frame_equal(custom.metrics, default.metrics)
    assert custom.metrics["value"].notna().any()


def test_champion_is_the_best_mean_concordance_with_ties_settled_by_brier():
    rows = []
    for family, c, brier in (("a", 0.70, 0.20), ("b", 0.70, 0.18), ("c", 0.65, 0.10)):
        for cutoff, shift in (("2025-01", 0.01), ("2025-02", -0.01)):
            for horizon in (6, 12):
                rows += [
                    dict(family=family, cause="churn", horizon=horizon, cutoff=cutoff,
                         metric="uno_c", value=c + shift, n=10, events=2),
                    dict(family=family, cause="churn", horizon=horizon, cutoff=cutoff,
                         metric="brier", value=brier, n=10, events=2),
                ]  # fmt: skip
    # a 6-month-only cause: the largest scored horizon is used, and a NaN mean loses
    rows += [
        dict(family="a", cause="move_out", horizon=6, cutoff="2025-01", metric="uno_c",
             value=float("nan"), n=10, events=0),
        dict(family="c", cause="move_out", horizon=6, cutoff="2025-01", metric="uno_c",
             value=0.55, n=10, events=1),
    ]  # fmt: skip
    out = champions(pd.DataFrame(rows)).set_index("cause")
    # a and b both average 0.70 at 12 months; b has the lower Brier score
    assert out.loc["churn", "family"] == "b" and out.loc["churn", "horizon"] == 12
    assert out.loc["churn", "uno_c"] == pytest.approx(0.70)
    assert out.loc["move_out", "family"] == "c" and out.loc["move_out", "horizon"] == 6


def test_backtest_with_the_cause_specific_cox_family(portfolio):
    """The project's Cox family (all panel features, spatial context included) in the same
    backtest: it must find the true churn effect of ``score`` and beat the baseline."""
    out = backtest(
        portfolio,
        families={"life_table": TenureLifeTable(), "cox": CauseSpecificCox()},
        cutoffs=["2025-10"],
        horizons=(12,),
        config=CONFIG,
    )
    m = out.metrics.set_index(["family", "cause", "metric"])["value"]
    assert m[("cox", "churn", "uno_c")] > m[("life_table", "churn", "uno_c")] + 0.1
    assert m[("cox", "churn", "brier")] < m[("life_table", "churn", "brier")]
    assert out.champions.set_index("cause").loc["churn", "family"] == "cox"


def test_backtest_keeps_the_forest_importances_of_its_latest_cutoff(portfolio, result):
    """The forest's permutation importances from its fit at the latest cutoff are kept (the
    cycle shows them when the forest is a candidate but champion of no cause); families
    without importances leave the table empty."""
    from lifecycle.cycle._run import _forest_importances
    from lifecycle.models import SurvivalForest

    assert result.importances.empty
    forest = SurvivalForest(n_estimators=5, max_rows=2_000, importance_rows=300)
    out = backtest(
        portfolio,
        families={"forest": forest},
        cutoffs=["2025-07", "2025-10"],
        horizons=(12,),
        config=CONFIG,
    )
    imp = out.importances
    assert list(imp.columns[:2]) == ["family", "cutoff"]
    assert set(imp["family"]) == {"forest"} and set(imp["cutoff"]) == {"2025-10"}
    assert {"cause", "feature", "importance", "importance_sd"} <= set(imp.columns)

    notes: list[str] = []
    shown = _forest_importances(object(), {"importances": imp}, notes)
    assert list(shown.columns) == ["cause", "feature", "importance", "importance_sd"]
    assert len(shown) == len(imp) and notes == [
        "Forest importances are from its backtest fit as of 2025-10."
    ]
    assert _forest_importances(object(), {"importances": result.importances}, []) is None
