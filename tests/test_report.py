"""The monthly report: drift, its tables, and the page rendered from a small demo.

References: the population stability index by hand from its formula Σ (a − e)·ln(a / e) and
against scipy.stats.entropy (PSI is the symmetrised Kullback–Leibler divergence
KL(a‖e) + KL(e‖a) of the binned shares); Wilson's interval against
statsmodels.stats.proportion.proportion_confint(method="wilson"); the Aalen–Johansen
incidence by segment against sksurv.nonparametric.cumulative_incidence_competing_risks; the
portfolio counts against a direct count from the customers table; every embedded image is
decoded with Pillow (matplotlib's own image dependency) as an outside check that it is a PNG.
"""

from __future__ import annotations

import base64
import dataclasses
import io
import json
import os
import re
import subprocess
import sys
from html.parser import HTMLParser
from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from PIL import Image
from scipy import stats

from lifecycle._months import parse_month
from lifecycle.errors import InputError, UsageError
from lifecycle.report import (
    _html,
    area_risk,
    build_report_inputs,
    drift_table,
    incidence_by_segment,
    key_figures_json,
    load_report_inputs,
    monthly_counts,
    offer_rates_by_area,
    population_stability_index,
    render_report,
    save_report_inputs,
    tenure_hazards,
    wilson_interval,
    write_report,
)
from lifecycle.report._sections_plan import attribute_quarters

from ._builders import make_tables

FAST = settings(max_examples=25, deadline=None)
SECTIONS = [
    "portfolio",
    "tenure",
    "cohorts",
    "risk-map",
    "accuracy",
    "drivers",
    "drift",
    "forecast",
    "forecast-track",
    "plan",
    "policies",
    "cautions",
]
PLAN_CONFIG = """
[[offers]]
name = "loyalty_credit"
target = "churn"
cost = 2.0
hazard_ratio = 0.5
months = 6
weekly_capacity = 15

[[offers]]
name = "moving_kit"
target = "move_out"
cost = 1.0
hazard_ratio = 0.6
months = 3

[plan]
budget = 150.0
weeks = 4
"""


# -- the population stability index ------------------------------------------------------------
def test_psi_hand_computed_quartiles():
    # Reference 0..99 cut into quartiles (cuts at 24.5, 49.5, 74.5), e = (¼, ¼, ¼, ¼); the new
    # sample has shares a = (0.1, 0.2, 0.3, 0.4). By hand from PSI = Σ (a − e)·ln(a / e):
    #   (−0.15)·ln(0.4) + (−0.05)·ln(0.8) + 0.05·ln(1.2) + 0.15·ln(1.6)
    # = 0.137444 + 0.011157 + 0.009116 + 0.070501 = 0.228217
    expected = np.arange(100)
    actual = np.r_[
        np.arange(10), 25 + np.arange(20), 50 + np.arange(30) % 25, 75 + np.arange(40) % 25
    ]
    assert population_stability_index(expected, actual, bins=4) == pytest.approx(0.228217, abs=1e-6)
    # the same with the reference and the new sample as pandas Series, in shuffled order
    rng = np.random.default_rng(3)
    shuffled = pd.Series(rng.permutation(actual))
    assert population_stability_index(pd.Series(expected), shuffled, bins=4) == pytest.approx(
        0.228217, abs=1e-6
    )


def test_psi_hand_computed_flags_categories_and_missing():
    # A 0/1 flag: 90 % zeros last month, 50 % now. Two bins, by hand:
    # (0.5 − 0.9)·ln(0.5/0.9) + (0.5 − 0.1)·ln(0.5/0.1) = 0.235115 + 0.643775 = 0.878890
    e = np.r_[np.zeros(90), np.ones(10)]
    a = np.r_[np.zeros(50), np.ones(50)]
    assert population_stability_index(e, a) == pytest.approx(0.878890, abs=1e-6)
    # Text: e = (½, ½), a = (¾, ¼): 0.25·ln(1.5) + (−0.25)·ln(0.5) = 0.101366 + 0.173287
    assert population_stability_index(["x", "x", "y", "y"], ["x", "x", "x", "y"]) == pytest.approx(
        0.274653, abs=1e-6
    )
    # Missing values are a bin of their own: e = (½ value, ½ missing), a = (1, 0 → floor 1e-4)
    # (1 − ½)·ln(1/½) + (1e-4 − ½)·ln(1e-4/½) = 0.346574 + 0.4999·8.517193 = 4.604318
    psi = population_stability_index([1.0, 1.0, np.nan, None], [1.0, 1.0, 1.0, 1.0])
    assert psi == pytest.approx(4.604318, abs=1e-6)


def test_psi_cuts_between_values_so_a_small_shift_of_repeated_values_is_no_drift():
    # Every customer of an area shares its rate; all rates rise by 1 %, no area passes another
    reference = np.repeat([0.010, 0.012, 0.015, 0.020], 25)
    assert population_stability_index(reference, reference * 1.01) == pytest.approx(0.0, abs=1e-12)
    # ... but an area that passes another is drift
    moved = np.repeat([0.010, 0.016, 0.015, 0.020], 25)
    assert population_stability_index(reference, moved) > 0.25


@FAST
@given(st.lists(st.integers(1, 40), min_size=10, max_size=10))
def test_psi_is_the_symmetrised_kl_divergence(counts):
    # Reference 0..9999: the deciles' cuts fall at 999.5, 1999.5, …, so bin i is
    # [1000 i, 1000 i + 999] and e_i = 0.1. Draw the new sample's counts per bin (none empty,
    # so the floor plays no part and scipy's entropy sees two distributions).
    counts = np.array(counts)
    actual = np.concatenate([1000 * i + np.arange(c) for i, c in enumerate(counts)])
    e = np.full(10, 0.1)
    a = counts / counts.sum()
    reference = stats.entropy(a, e) + stats.entropy(e, a)
    psi = population_stability_index(np.arange(10_000), actual)
    assert psi == pytest.approx(reference, rel=1e-9, abs=1e-12)
    assert psi >= 0.0
    assert population_stability_index(actual, actual) == pytest.approx(0.0, abs=1e-12)


def test_psi_refuses_bad_arguments():
    with pytest.raises(UsageError, match="bins"):
        population_stability_index([1, 2], [1, 2], bins=1)
    with pytest.raises(UsageError, match="both samples"):
        population_stability_index([], [1, 2])


def test_drift_table_flags_by_threshold_and_skips_calendar_terms():
    rng = np.random.default_rng(11)
    n = 4000
    last = pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "month": "2026-09",
            "season_sin": 0.5,
            "steady": rng.normal(size=n),
            "nudged": rng.normal(size=n),
            "moved": rng.normal(size=n),
        }
    )
    now = pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "month": "2026-10",
            "season_sin": 0.87,
            "steady": rng.normal(size=n),
            "nudged": rng.normal(0.6, 1.0, size=n),
            "moved": rng.normal(1.5, 1.0, size=n),
        }
    )
    table = drift_table(last, now).set_index("variable")
    assert list(table.index) == ["steady", "nudged", "moved"]
    for variable in table.index:  # the flag follows the thresholds of common practice
        psi = population_stability_index(last[variable], now[variable])
        assert table.loc[variable, "psi"] == pytest.approx(psi)
        want = "act" if psi >= 0.25 else "watch" if psi >= 0.1 else "ok"
        assert table.loc[variable, "status"] == want
    assert table.loc["steady", "status"] == "ok"
    assert table.loc["moved", "status"] == "act"
    with pytest.raises(UsageError, match="not in both"):
        drift_table(last, now, ["absent"])


# -- the report's tables ---------------------------------------------------------------------
@FAST
@given(st.lists(st.tuples(st.integers(0, 60), st.integers(1, 200)), min_size=1, max_size=8))
def test_wilson_interval_matches_statsmodels(pairs):
    from statsmodels.stats.proportion import proportion_confint

    events = np.array([min(d, n) for d, n in pairs])
    n = np.array([n for _, n in pairs])
    lower, upper = wilson_interval(events, n)
    ref_lower, ref_upper = proportion_confint(events, n, alpha=0.05, method="wilson")
    np.testing.assert_allclose(lower, ref_lower, atol=1e-10)
    np.testing.assert_allclose(upper, ref_upper, atol=1e-10)


def _segment_tables(seed: int):
    """Customers who all start inside the panel window (no late entry), in two plans."""
    rng = np.random.default_rng(seed)
    rows = []
    for i in range(80):
        start = 2026 * 12 + int(rng.integers(0, 4))  # 2026-01 .. 2026-04
        row = {"customer_id": f"C{i:03d}", "start_month": f"2026-{start - 2026 * 12 + 1:02d}"}
        row["plan"] = "basic" if i % 2 else "plus"
        if rng.random() < 0.6:
            end = start + int(rng.integers(0, 6))
            row["end_month"] = f"2026-{end - 2026 * 12 + 1:02d}"
            row["end_reason"] = ["churn", "move_out", "other"][int(rng.integers(0, 3))]
        rows.append(row)
    return make_tables(rows, extract_month="2026-10", static_columns=("monthly_margin", "plan"))


@pytest.mark.parametrize("seed", [1, 2])
def test_incidence_by_segment_matches_scikit_survival(seed):
    from sksurv.nonparametric import cumulative_incidence_competing_risks

    from lifecycle.panel import build_panel

    tables = _segment_tables(seed)
    panel = build_panel(tables, "2026-10")
    ours = incidence_by_segment(panel, "plan", min_at_risk=1)
    codes = {"churn": 1, "move_out": 2, "other_exit": 3}
    last = panel.groupby("customer_id", observed=True).tail(1)
    for segment in ("basic", "plus"):
        rows = last[last["plan"].astype(str) == segment]
        event = np.zeros(len(rows), dtype=int)
        for cause, code in codes.items():
            event[rows[cause].to_numpy() == 1] = code
        time = rows["tenure_stop"].to_numpy(float)
        times, cif = cumulative_incidence_competing_risks(event, time)
        for cause, code in codes.items():
            mine = ours[(ours["segment"] == segment) & (ours["cause"] == cause)]
            at = np.searchsorted(times, mine["tenure"].to_numpy(float), side="right") - 1
            reference = np.where(at >= 0, cif[code][np.maximum(at, 0)], 0.0)
            np.testing.assert_allclose(mine["incidence"].to_numpy(), reference, atol=1e-12)


def test_incidence_by_segment_cuts_numeric_columns_and_stops_when_few_remain():
    tables = _segment_tables(5)
    from lifecycle.panel import build_panel

    panel = build_panel(tables, "2026-10")
    panel["score"] = np.linspace(0.0, 1.0, len(panel))
    out = incidence_by_segment(panel, "score", min_at_risk=5)
    assert out["segment"].nunique() == 4  # quartiles of a column with many values
    assert (out["at_risk"] >= 5).all()
    with pytest.raises(UsageError, match="not in the panel"):
        incidence_by_segment(panel, "absent")


def test_offer_rates_add_up_and_quarters_split_customers():
    ids = [f"C{i}" for i in range(100)]
    areas = pd.Series(["A"] * 10 + ["B"] * 30 + ["C"] * 60, index=ids)
    plan = pd.DataFrame({"customer_id": ["C0", "C1", "C2", "C10", "C50"], "offer": "x"})
    attributes = pd.DataFrame({"area_id": ["A", "B", "C"], "rental_share": [0.9, 0.5, 0.1]})
    rates = offer_rates_by_area(plan, areas, ids, areas=attributes).set_index("area_id")
    assert rates["customers"].tolist() == [10, 30, 60]
    assert rates["contacts"].tolist() == [3, 1, 1]
    assert rates["contact_rate"].tolist() == pytest.approx([0.3, 1 / 30, 1 / 60])
    # the customer-weighted mean of the rate ratios is 1 by construction
    assert np.average(rates["rate_ratio"], weights=rates["customers"]) == pytest.approx(1.0)
    assert rates.loc["A", "rental_share"] == 0.9
    quarters = attribute_quarters(rates.reset_index(), "rental_share")
    assert quarters["customers"].sum() == 100
    assert quarters["contacts"].sum() == 5
    with pytest.raises(InputError, match="not among the customers"):
        offer_rates_by_area(pd.DataFrame({"customer_id": ["Z9"]}), areas, ids)


# -- a small demo, built once ----------------------------------------------------------------
_CASES: dict[str, SimpleNamespace] = {}


def build_case(tmp_path_factory) -> SimpleNamespace:
    """The demo case, built once per test session and shared by the report's test modules."""
    if "demo" not in _CASES:
        _CASES["demo"] = _make_case(tmp_path_factory.mktemp("report_demo"))
    return _CASES["demo"]


@pytest.fixture(scope="session")
def report_case(tmp_path_factory):
    return build_case(tmp_path_factory)


def _policy_comparison(model, snapshot, scores, offers, plan) -> pd.DataFrame:
    """The case's policy_comparison table (each offer's single ratio, drawn in its interval)."""
    from lifecycle.decisions import compare_policies, interval_draws, policy_selections

    ids = snapshot["customer_id"].to_numpy()
    names = [o.name for o in offers]
    allowed = plan.allowed.reindex(index=ids, columns=names, fill_value=False).to_numpy(bool)
    risk = scores.set_index("customer_id").reindex(ids)
    risk = np.column_stack([risk[f"cif_{o.target}_12m"].to_numpy(float) for o in offers])
    selections = policy_selections(plan.table, ids, offers, allowed, risk, seed=0)
    n = len(ids)
    return compare_policies(
        model.hazard_array(snapshot, 24), model.causes_, snapshot["monthly_margin"].to_numpy(float),
        offers, selections, {o.name: np.full(n, o.hazard_ratio) for o in offers},
        {o.name: interval_draws(o, n, draws=20, seed=0) for o in offers},
        annual_discount=0.0, horizon=24,
    )  # fmt: skip


def _make_case(root: Path) -> SimpleNamespace:
    """Inputs built on a small demo: panel, boosted and Cox fits, a small forest, a backtest,
    a plan and a forecast (everything the report shows), and the page rendered from them."""
    from lifecycle._months import format_month
    from lifecycle.config import load_config
    from lifecycle.data import load_tables
    from lifecycle.decisions import make_plan, offers_from_config, plan_settings_from_config
    from lifecycle.demo import write_demo
    from lifecycle.evaluation import TenureLifeTable, backtest, observed_outcomes
    from lifecycle.forecast import forecast_uptake
    from lifecycle.forecast._track import track_record_hook
    from lifecycle.models import BoostedHazard, CauseSpecificCox, SurvivalForest, score_customers
    from lifecycle.panel import build_panel, build_snapshot
    from lifecycle.report._sections_cohorts import cohort_alive
    from lifecycle.spatial import add_spatial_context, premise_areas
    from lifecycle.value import offer_values

    files = write_demo(root / "demo", customers=600, seed=5)
    # a 25-month window: two years of trend and the same month last year, at half the rows
    text = files["config"].read_text(encoding="utf-8")
    files["config"].write_text(re.sub(r"window_months = \d+", "window_months = 25", text))
    config = load_config(files["config"])
    assert config.panel.window_months == 25
    tables = load_tables(root / "demo", config)
    plan_file = root / "plan.toml"
    plan_file.write_text(PLAN_CONFIG, encoding="utf-8")
    plan_config = load_config(plan_file)

    def context(frame):
        return add_spatial_context(frame, tables, config=config)

    panel = context(build_panel(tables, "2026-10", config=config))
    snapshot = context(build_snapshot(tables, "2026-10", config=config))
    previous = context(build_snapshot(tables, "2026-09", config=config))
    model = BoostedHazard(max_iter=30).fit(panel)
    scores = score_customers(model, snapshot)
    previous_scores = score_customers(model, previous)
    cox = CauseSpecificCox().fit(panel)
    forest = SurvivalForest(
        n_estimators=20, max_rows=3000, importance_rows=300, importance_repeats=1
    ).fit(panel)
    result = backtest(
        tables,
        families={"life_table": TenureLifeTable(), "boosted": BoostedHazard(max_iter=30)},
        cutoffs=["2026-04"],
        horizons=(3,),
        config=config,
        after_fit=track_record_hook(tables, config, premise_areas(tables, config)),
        after_fit_months=12,
    )
    hazards = model.predict_hazard(snapshot, 24)
    offers = offers_from_config(plan_config)
    values = offer_values(hazards, None, snapshot["monthly_margin"].to_numpy(float), offers)
    flags = tables.customers[["customer_id", "do_not_contact", "hardship"]]
    frame = snapshot.merge(scores, on="customer_id").merge(flags, on="customer_id")
    plan = make_plan(
        frame,
        values[["customer_id", "offer", "expected_value"]],
        offers,
        plan_settings_from_config(plan_config),
    )
    areas = premise_areas(tables, config)
    forecast = forecast_uptake(
        hazards,
        start_month="2026-11",
        areas=areas.reindex(snapshot["customer_id"].astype(str)).to_numpy(),
        horizon=12,
    )
    # last month's predictions against what happened in the month since, in the shape the
    # score history gives (decile, n, predicted_mean, realised_rate, realised_events)
    outcomes = observed_outcomes(tables, "2026-09").set_index("customer_id")
    follow = outcomes.reindex(previous["customer_id"])
    churned = ((follow["cause"] == "churn") & (follow["months"] <= 1)).to_numpy()
    risk = model.predict_cumulative_incidence(previous, 1)["churn"].to_numpy()
    decile = pd.qcut(pd.Series(risk).rank(method="first"), 10, labels=False) + 1
    deciles = (
        pd.DataFrame({"decile": decile, "p": risk, "r": churned})
        .groupby("decile")
        .agg(
            n=("p", "size"),
            predicted_mean=("p", "mean"),
            realised_rate=("r", "mean"),
            realised_events=("r", "sum"),
        )
        .reset_index()
    )
    inputs = build_report_inputs(
        month="2026-10",
        panel=panel,
        scores=scores,
        customer_areas=areas,
        areas=tables.areas,
        backtest_metrics=result.metrics,
        champions=result.champions,
        hazard_ratios=cox.coefficients_,
        importances=forest.feature_importances_,
        forecast=forecast,
        plan=plan,
        snapshot=snapshot,
        previous_snapshot=previous,
        previous_scores=previous_scores,
        decile_check=deciles,
        decile_summary={"cause": "churn", "horizon": 1},
        notes=["Invented demo data."],
    )
    inputs.forecast_track = result.forecasts
    inputs.cohort_alive = cohort_alive(panel, parse_month("2026-10"))
    inputs.policy_comparison = _policy_comparison(model, snapshot, scores, offers, plan)
    inputs.uptake_history = (
        tables.uptakes.assign(month=tables.uptakes["month"].map(format_month))
        .groupby(["product", "month"]).size().rename("realised").reset_index().tail(24)
    )  # fmt: skip
    html, key = render_report(inputs)
    return SimpleNamespace(
        inputs=inputs,
        html=html,
        key=key,
        tables=tables,
        scores=scores,
        plan=plan,
        forecast=forecast,
        backtest=result,
        root=root,
    )


class _Page(HTMLParser):
    """Sections (id → text, images, tables) and every image source of a page."""

    def __init__(self):
        super().__init__()
        self.sections: dict[str, dict] = {}
        self.current: str | None = None
        self.images: list[str] = []
        self.links: list[str] = []
        self.tags: set[str] = set()

    def handle_starttag(self, tag, attrs):
        attrs = dict(attrs)
        self.tags.add(tag)
        if tag == "section":
            self.current = attrs.get("id")
            self.sections[self.current] = {"text": "", "images": 0, "tables": 0}
        elif tag == "img":
            self.images.append(attrs.get("src", ""))
            if self.current:
                self.sections[self.current]["images"] += 1
        elif tag == "table" and self.current:
            self.sections[self.current]["tables"] += 1
        for name in ("href", "src"):
            if name in attrs and tag != "img":
                self.links.append(attrs[name])

    def handle_endtag(self, tag):
        if tag == "section":
            self.current = None

    def handle_data(self, data):
        if self.current:
            self.sections[self.current]["text"] += data


def _page(html: str) -> _Page:
    page = _Page()
    page.feed(html)
    return page


def test_every_section_is_there_and_has_content(report_case):
    page = _page(report_case.html)
    assert list(page.sections) == SECTIONS
    for name, content in page.sections.items():
        body = " ".join(content["text"].split())
        assert len(body) > 80, name  # more than the title
        if name != "cautions":
            assert content["images"] + content["tables"] > 0, name
    for name in ("portfolio", "tenure", "risk-map", "accuracy", "drivers", "drift", "plan",
                 "policies"):  # fmt: skip
        assert page.sections[name]["images"] >= 1, name
    policies = report_case.key["policies"]
    assert set(policies) == {"plan", "top_risk", "random", "none"}
    assert policies["none"]["expected_value"] == 0.0
    assert policies["plan"]["contacts"] == len(report_case.plan.table)
    assert page.sections["forecast"]["images"] == 2  # monthly and cumulative fan charts
    assert page.sections["forecast-track"]["tables"] == 2  # the record, the families


def test_young_cohorts_are_projected_with_the_shifted_beta_geometric_model(report_case):
    from lifecycle.forecast import fit_shifted_beta_geometric

    alive = report_case.inputs.cohort_alive
    cohorts = report_case.key["cohorts"]
    assert cohorts, "some cohort is projected"
    for cohort, figures in cohorts.items():
        counts = alive[alive["cohort"] == cohort].sort_values("tenure")["alive"].to_numpy()
        assert figures["size"] == counts[0] and figures["months"] == len(counts) - 1
        fit = fit_shifted_beta_geometric(counts)  # the published model, fitted directly
        assert figures["survival_12m"] == pytest.approx(float(fit.survival(12)), rel=1e-5)


def test_the_forecast_track_record_sets_past_forecasts_beside_what_happened(report_case):
    forecasts = report_case.backtest.forecasts
    # the backtest's own fits: one forecast per family at the cutoff, 6 months observed
    assert sorted(forecasts["family"].unique()) == ["boosted", "life_table"]
    assert (forecasts.groupby("family").size() == 6).all()
    assert set(forecasts["made_at"]) == {"2026-04"}
    # realised: the uptakes of the months after the cutoff, counted from the table
    tables = report_case.tables
    up = tables.uptakes
    later = up[(up["month"] > parse_month("2026-04")) & (up["month"] <= parse_month("2026-10"))]
    one = forecasts[forecasts["family"] == "boosted"]
    assert one["realised"].sum() == len(later)
    assert one["cumulative_realised"].iloc[-1] == len(later)
    assert (one["expected"] - one["expected_current"] - one["expected_joiners"]).abs().max() < 1e-9
    assert (one["cumulative_lower_90"] <= one["cumulative_expected"]).all()
    assert (one["cumulative_expected"] <= one["cumulative_upper_90"]).all()
    figures = report_case.key["forecast_track"]["backup_line"]
    assert figures["months"] == 6 and 0.0 <= figures["coverage_cumulative"] <= 1.0


def test_every_image_is_an_embedded_png_and_nothing_is_fetched(report_case):
    page = _page(report_case.html)
    assert len(page.images) >= 12
    for src in page.images:
        assert src.startswith("data:image/png;base64,")
        raw = base64.b64decode(src.split(",", 1)[1], validate=True)
        with Image.open(io.BytesIO(raw)) as image:
            assert image.format == "PNG"
            assert image.width > 100 and image.height > 100
            image.load()  # decodes every pixel; raises on a truncated file
    # only in-page links; no script, style sheet, font or frame from anywhere
    assert all(link.startswith("#") for link in page.links)
    assert not page.tags & {"script", "link", "iframe", "object", "embed"}
    assert "url(" not in report_case.html and "@import" not in report_case.html


def test_key_figures_agree_with_the_sources(report_case):
    key, tables = report_case.key, report_case.tables
    assert json.loads(json.dumps(key, allow_nan=False)) == key
    assert key["month"] == "2026-10"
    # the portfolio, counted directly from the customers table
    customers = tables.customers
    m = 2026 * 12 + 9
    start, end = customers["start"].to_numpy(), customers["end"].to_numpy()
    active = (start <= m) & (np.isnan(end) | (end >= m))
    this = key["portfolio"]["this_month"]
    assert this["customers"] == int(active.sum())
    for reason, cause in (("churn", "churn"), ("move_out", "move_out"), ("other", "other_exit")):
        assert this[cause] == int(((end == m) & (customers["end_reason"] == reason)).sum())
    last = key["portfolio"]["last_month"]
    assert last["customers"] == int(((start <= m - 1) & (np.isnan(end) | (end >= m - 1))).sum())
    assert key["portfolio"]["same_month_last_year"] is not None
    # the plan and the forecast as made
    assert key["plan"]["contacts"] == len(report_case.plan.table) > 0
    assert key["plan"]["cost"] == pytest.approx(report_case.plan.table["cost"].sum(), rel=1e-5)
    assert key["plan"]["budget_used"] <= key["plan"]["budget"] + 1e-9
    total = report_case.forecast.query("area_id == 'all'").iloc[-1]
    assert key["forecast"]["backup_line"]["expected"] == pytest.approx(
        total["cumulative_expected"], rel=1e-5
    )
    assert key["forecast"]["backup_line"]["lower_90"] <= key["forecast"]["backup_line"]["expected"]
    # champions as the backtest chose them
    champions = report_case.backtest.champions.set_index("cause")["family"].to_dict()
    assert {c: v["family"] for c, v in key["champions"].items()} == champions
    # the portfolio mean of the risk map is the mean of the scores
    assert key["risk"]["portfolio_mean"]["cif_churn_3m"] == pytest.approx(
        report_case.scores["cif_churn_3m"].mean(), rel=1e-5
    )
    # drift: the flagged variables are those at or above the thresholds
    drift = report_case.inputs.drift
    assert set(key["drift"]["act"]) == set(drift.loc[drift["psi"] >= 0.25, "variable"])
    assert key["last_month"]["churn"]["customers"] == int(
        report_case.inputs.decile_check["n"].sum()
    )
    assert len(key["offer_rates"]["contact_rate_by_rental_share_quarter"]) == 4


def test_same_inputs_same_bytes_and_nothing_partial(report_case, tmp_path):
    # the fixture rendered once; rendering again and writing gives the same bytes
    paths = write_report(report_case.inputs, tmp_path / "one")
    assert paths["html"].read_text(encoding="utf-8") == report_case.html
    text = paths["key_figures"].read_text(encoding="utf-8")
    assert text == key_figures_json(report_case.key)
    assert sorted(p.name for p in (tmp_path / "one").iterdir()) == [
        "key_figures.json",
        "report.html",
    ]
    assert text == json.dumps(json.loads(text), sort_keys=True, indent=2, ensure_ascii=False) + "\n"


def test_saved_inputs_render_the_same_bytes_in_a_fresh_process(report_case, tmp_path):
    saved = save_report_inputs(report_case.inputs, tmp_path / "inputs")
    loaded = load_report_inputs(saved)
    assert loaded.month == report_case.inputs.month and loaded.notes == report_case.inputs.notes
    assert loaded.areas.crs == report_case.inputs.areas.crs
    pd.testing.assert_frame_equal(loaded.portfolio, report_case.inputs.portfolio, check_dtype=False)
    # another process, another hash seed, the inputs read back from files: the same bytes
    script = (
        "import sys\n"
        "from lifecycle.report import load_report_inputs, write_report\n"
        "write_report(load_report_inputs(sys.argv[1]), sys.argv[2])\n"
    )
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    root = Path(__file__).resolve().parents[1]
    subprocess.run(
        [sys.executable, "-c", script, str(saved), str(tmp_path / "fresh")],
        check=True,
        cwd=root,
        env=env,
        timeout=600,
    )
    assert (tmp_path / "fresh" / "report.html").read_text(encoding="utf-8") == report_case.html
    fresh_json = (tmp_path / "fresh" / "key_figures.json").read_text(encoding="utf-8")
    assert fresh_json == key_figures_json(report_case.key)


def test_a_failure_writes_nothing_and_keeps_earlier_files(report_case, tmp_path, monkeypatch):
    folder = tmp_path / "2026-10"
    # bad inputs: refused before anything is written
    broken = dataclasses.replace(
        report_case.inputs, portfolio=report_case.inputs.portfolio.iloc[:-1]
    )
    with pytest.raises(InputError, match="report month 2026-10"):
        write_report(broken, folder)
    assert not folder.exists() or not any(folder.iterdir())
    # an earlier report, then a different one whose write fails half-way (the rendering is
    # replaced by fixed pages here: this test is about the files)
    pages = iter([(report_case.html, report_case.key), ("<html>other</html>", {"month": "x"})])
    monkeypatch.setattr(_html, "render_report", lambda inputs: next(pages))
    paths = write_report(report_case.inputs, folder)
    before = {p.name: p.read_bytes() for p in folder.iterdir()}
    real_write_text = Path.write_text

    def failing(self, *args, **kwargs):
        if self.name.startswith(".report.html"):
            raise OSError("disk full")
        return real_write_text(self, *args, **kwargs)

    monkeypatch.setattr(Path, "write_text", failing)
    with pytest.raises(OSError, match="disk full"):
        write_report(report_case.inputs, folder)
    after = {p.name: p.read_bytes() for p in folder.iterdir()}
    assert after == before  # no temporary file left, neither file replaced
    assert set(after) == {paths["html"].name, paths["key_figures"].name}


def test_first_month_and_missing_parts_still_fill_every_section(report_case):
    first = dataclasses.replace(
        report_case.inputs,
        decile_check=None,
        decile_summary=None,
        drift=None,
        hazard_ratios=None,
        importances=None,
        forecast=None,
        plan=None,
        plan_summary=None,
        offer_rates=None,
        backtest_metrics=report_case.inputs.backtest_metrics.iloc[0:0],
        champions=report_case.inputs.champions.iloc[0:0],
        notes=["<script>alert(1)</script>"],
    )
    html, key = render_report(first)
    page = _page(html)
    assert list(page.sections) == SECTIONS
    accuracy = " ".join(page.sections["accuracy"]["text"].split())
    drift = " ".join(page.sections["drift"]["text"].split())
    assert "First month: nothing to compare yet." in accuracy
    assert "First month: nothing to compare yet." in drift
    for name in ("drivers", "forecast", "plan"):
        title = len(page.sections[name]["text"].split("\n", 2)[1])
        assert len(" ".join(page.sections[name]["text"].split())) > title + 20, name
    assert key["last_month"] is None and key["drift"] is None and key["plan"] is None
    # text is escaped, never run
    assert "script" not in page.tags
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_inputs_are_checked(report_case):
    bad = dataclasses.replace(
        report_case.inputs, hazard_ratios=report_case.inputs.hazard_ratios.drop(columns="upper_95")
    )
    with pytest.raises(InputError, match=r"report input hazard_ratios.*upper_95"):
        render_report(bad)
    with pytest.raises(UsageError, match="YYYY-MM"):
        render_report(dataclasses.replace(report_case.inputs, month="October"))
    with pytest.raises(UsageError, match="ReportInputs"):
        render_report({"month": "2026-10"})


def test_the_report_tables_from_the_demo_add_up(report_case):
    inputs = report_case.inputs
    counts = inputs.portfolio
    assert (
        counts["customers_end"]
        == counts["customers"] - counts[["churn", "move_out", "other_exit"]].sum(axis=1)
    ).all()
    hazards = inputs.tenure_hazards
    churn = hazards[hazards["cause"] == "churn"]
    assert churn["at_risk"].sum() == counts["customers"].sum()  # every panel row once
    assert churn["events"].sum() == counts["churn"].sum()
    risk = inputs.area_risk
    assert risk["customers"].sum() == len(report_case.scores)
    rates = inputs.offer_rates
    assert rates["contacts"].sum() == len(report_case.plan.table)
    assert rates["customer_share"].sum() == pytest.approx(1.0)


def test_builders_refuse_what_they_cannot_use():
    tables = _segment_tables(3)
    from lifecycle.panel import build_panel

    panel = build_panel(tables, "2026-10")
    assert monthly_counts(panel)["month"].iloc[-1] == "2026-10"
    with pytest.raises(UsageError, match="causes"):
        tenure_hazards(panel, ["nothing"])
    scores = pd.DataFrame(
        {"customer_id": ["C000"], "cif_churn_3m": [0.1], "cif_move_out_3m": [0.1]}
    )
    with pytest.raises(InputError, match="without an area"):
        area_risk(scores, pd.Series({"C001": "A"}))
    with pytest.raises(UsageError, match="lack"):
        area_risk(scores.drop(columns="cif_churn_3m"), pd.Series({"C000": "A"}))
    with pytest.raises(UsageError, match="no saved report inputs"):
        load_report_inputs(Path(os.devnull).parent / "nowhere-here")


def test_public_surface_is_pinned():
    import lifecycle.report as report

    assert sorted(report.__all__) == [
        "ACT_PSI",
        "REPORT_FILES",
        "ReportInputs",
        "WATCH_PSI",
        "area_risk",
        "build_report_inputs",
        "check_inputs",
        "cohort_alive",
        "drift_table",
        "incidence_by_segment",
        "key_figures_json",
        "load_report_inputs",
        "monthly_counts",
        "offer_rates_by_area",
        "population_stability_index",
        "render_report",
        "save_report_inputs",
        "tenure_hazards",
        "wilson_interval",
        "write_report",
    ]
    assert all(hasattr(report, name) for name in report.__all__)
    assert report.WATCH_PSI == 0.1 and report.ACT_PSI == 0.25  # common practice


def test_a_plan_that_contacts_nobody_says_so(report_case):
    from lifecycle.report._sections_plan import plan_section

    inputs = report_case.inputs
    nobody = dataclasses.replace(
        inputs,
        plan=inputs.plan.iloc[0:0],
        offer_rates=inputs.offer_rates.assign(contacts=0, contact_share=0.0, contact_rate=0.0),
    )
    section, key = plan_section(nobody)
    notes = [b.text for b in section.blocks if b.kind == "note"]
    assert any("no schedule" in n for n in notes)
    assert any("no offer rates" in n for n in notes)
    assert key["plan"]["contacts"] == 0 and key["offer_rates"] == {"overall_rate": 0.0}


def test_hazard_ratios_of_measured_features_are_shown_per_standard_deviation():
    """HR per SD = exp(β·sd) = HR_unit ** sd (common practice for reporting continuous
    covariates); flags stay per unit."""
    import numpy as np
    import pandas as pd

    from lifecycle.report._inputs import per_standard_deviation

    panel = pd.DataFrame({"rate": [0.01, 0.02, 0.03, 0.04], "flag": [0, 1, 0, 1]})
    hr = pd.DataFrame(
        {
            "cause": ["churn", "churn"],
            "feature": ["rate", "flag"],
            "hazard_ratio": [np.exp(25.0), 2.0],
            "lower_95": [np.exp(20.0), 1.5],
            "upper_95": [np.exp(30.0), 2.5],
        }
    )
    out = per_standard_deviation(hr, panel)
    sd = np.std([0.01, 0.02, 0.03, 0.04])
    assert out.loc[0, "hazard_ratio"] == pytest.approx(np.exp(25.0 * sd))
    assert out.loc[0, "lower_95"] == pytest.approx(np.exp(20.0 * sd))
    assert out.loc[0, "feature"].startswith("rate (per SD")
    assert out.loc[1].tolist() == hr.loc[1].tolist()


def test_proportional_hazards_failures_at_one_percent_are_listed():
    """The drivers section lists the PH tests with p < 0.01 (the 1 % level the Cox fit logs)."""
    import pandas as pd

    from lifecycle.report._blocks import Section
    from lifecycle.report._sections_action import _ph_failures

    ph = pd.DataFrame(
        {
            "cause": ["churn", "churn", "move_out"],
            "feature": ["age", "fin", "contract_months_left"],
            "statistic": [7.8, 0.1, 12.3],
            "p_value": [0.0052, 0.75, 0.00045],
        }
    )
    section, key = Section("drivers", "x"), {}
    _ph_failures(section, ph, key)
    table = next(b for b in section.blocks if b.kind == "table")
    assert key["ph_failures"] == 2
    assert "2 of 3" in table.text
    text = str(table.rows)
    assert "contract_months_left" in text and "age" in text and "fin" not in text
    section, key = Section("drivers", "x"), {}
    _ph_failures(section, ph.iloc[[1]], key)
    assert key["ph_failures"] == 0
    assert any("passes" in b.text for b in section.blocks if b.kind == "note")


def test_key_figures_explain_each_offer(report_case):
    from lifecycle.decisions import LIMITS

    offers = report_case.key["offers"]
    plan = report_case.plan
    assert sorted(offers) == sorted(o.name for o in plan.offers)
    for offer in plan.offers:
        f = offers[offer.name]
        chosen = int((plan.table["offer"] == offer.name).sum())
        assert f["chosen"] == chosen and f["limited_by"] in LIMITS
        assert f["spend"] == pytest.approx(round(chosen * offer.cost, 2))
        assert f["chosen"] <= f["positive_value"] <= f["allowed"] <= f["eligible"]
        assert f["eligible"] <= f["candidates"] == len(report_case.scores)
    text = _page(report_case.html).sections["plan"]["text"]
    assert "Why each offer got the contacts it did" in text
