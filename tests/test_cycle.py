"""The monthly cycle end to end on a small demo: outputs, refusals, replays of past months."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from lifecycle._months import format_month
from lifecycle.config import load_config
from lifecycle.cycle import run_cycle
from lifecycle.data import load_tables, tables_as_of
from lifecycle.demo import write_demo
from lifecycle.errors import UsageError
from lifecycle.panel import build_panel, build_snapshot


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    folder = tmp_path_factory.mktemp("demo") / "data"
    paths = write_demo(folder, customers=800, seed=11)
    text = (
        paths["config"]
        .read_text()
        .replace('families = ["cox", "boosted", "forest"]', 'families = ["boosted"]')
    )
    paths["config"].write_text(text)
    return folder, load_config(paths["config"])


@pytest.fixture(scope="module")
def two_months(demo, tmp_path_factory):
    folder, config = demo
    reports = tmp_path_factory.mktemp("reports")
    first = run_cycle(folder, config, as_of="2026-09", reports=reports)
    second = run_cycle(folder, config, as_of="2026-10", reports=reports)
    return reports, first, second


def test_a_run_writes_its_month_folder_whole(demo, two_months):
    folder, _ = demo
    reports, _, second = two_months
    assert {"2026-09", "2026-10"} <= {p.name for p in reports.iterdir()}
    assert not any(p.name.startswith(".") for p in reports.rglob("*"))  # no temporary left
    scores = pd.read_csv(second.files["scores"])
    plan = pd.read_csv(second.files["plan"])
    assert list(plan.columns) == [
        "customer_id",
        "offer",
        "week",
        "expected_value",
        "cost",
        "reasons",
    ]
    assert scores["customer_id"].is_unique and (scores["lifetime_value"] > 0).all()
    summary = json.loads(second.files["summary"].read_text())
    assert summary["plan"]["budget_used"] <= summary["plan"]["budget"] + 1e-6
    # the plan never selects flagged customers (the demo's do_not_contact / hardship)
    customers = pd.read_csv(folder / "customers.csv", dtype=str)
    flagged = customers.loc[
        (customers["do_not_contact"] == "1") | (customers["hardship"] == "1"), "customer_id"
    ]
    assert not set(plan["customer_id"]) & set(flagged)


def test_the_policy_comparison_values_the_plan_as_the_plan_does(two_months):
    """policy_comparison.csv: the plan's row is the sum of the plan's expected values (each to
    cents), nobody contacted is worth 0, every interval holds its point; policy_backtest.csv
    holds the campaign's rows (the inverse-propensity estimator is checked against outside
    sources in test_policies.py)."""
    from lifecycle.decisions import BACKTEST_COLUMNS, POLICY_COLUMNS

    _, _, second = two_months
    table = pd.read_csv(second.files["policy_comparison"]).set_index("policy")
    assert list(table.reset_index().columns) == POLICY_COLUMNS
    assert list(table.index) == ["plan", "top_risk", "random", "none"]
    plan = pd.read_csv(second.files["plan"])
    assert table.loc["plan", "contacts"] == len(plan)
    assert table.loc["plan", "cost"] == pytest.approx(plan["cost"].sum(), abs=0.01)
    assert table.loc["plan", "expected_value"] == pytest.approx(
        plan["expected_value"].sum(), abs=0.005 * len(plan) + 0.01
    )
    assert (table.loc["none"] == 0).all()
    assert (table["lower_90"] <= table["expected_value"]).all()
    assert (table["expected_value"] <= table["upper_90"]).all()
    backtest = pd.read_csv(second.files["policy_backtest"])
    assert list(backtest.columns) == ["offer", "offer_month", *BACKTEST_COLUMNS]


def test_every_planned_contact_has_a_reason_and_none_names_an_area(demo, two_months):
    _, _, second = two_months
    plan = pd.read_csv(second.files["plan"], keep_default_na=False)
    assert len(plan) > 0
    assert (plan["reasons"].str.strip() != "").all()
    # the area features' built-in phrases and names (rental share, local move rate)
    area_words = r"renters|move-outs nearby|rental_share|local_move_rate"
    assert not plan["reasons"].str.contains(area_words).any()


def test_an_earlier_month_is_not_rewritten_without_force(demo, two_months):
    folder, config = demo
    reports, first, _ = two_months
    before = {p.name: p.read_bytes() for p in first.folder.iterdir()}
    with pytest.raises(UsageError, match="pass --force"):
        run_cycle(folder, config, as_of="2026-09", reports=reports)
    assert {p.name: p.read_bytes() for p in first.folder.iterdir()} == before


def test_forced_rerun_gives_the_same_bytes(demo, two_months):
    """Same data, same seed: byte-identical plan, forecast and scores (steps reused or not)."""
    folder, config = demo
    reports, _, second = two_months
    before = {k: p.read_bytes() for k, p in second.files.items() if k != "summary"}
    again = run_cycle(folder, config, as_of="2026-10", reports=reports, force=True)
    assert {k: p.read_bytes() for k, p in again.files.items() if k != "summary"} == before


def test_a_month_after_the_extract_is_refused(demo, tmp_path):
    folder, config = demo
    with pytest.raises(UsageError, match="only covers months up to 2026-10"):
        run_cycle(folder, config, as_of="2026-11", reports=tmp_path)
    assert list(tmp_path.iterdir()) == []


@settings(max_examples=15, deadline=None)
@given(st.integers(0, 20))
def test_replaying_a_past_month_sees_only_what_it_knew(demo, back):
    """The panel and snapshot of month m are the same from today's extract and from the
    extract cut at m (what `run_cycle` uses for a past month)."""
    folder, config = demo
    tables = load_tables(folder, config)
    month = tables.extract_month - back
    cut = tables_as_of(tables, month)
    assert cut.extract_month == month
    for build in (build_panel, build_snapshot):
        full = build(tables, month, config=config)
        past = build(cut, month, config=config)
        pd.testing.assert_frame_equal(
            full.astype({"month": str}), past.astype({"month": str}), check_categorical=False
        )
    assert (cut.customers["end"].fillna(-np.inf) <= month).all()
    assert format_month(month) >= "2025-02"


def test_second_month_reuses_the_model_and_backtest_on_schedule(demo, two_months):
    """The demo config redoes the backtest and the fit every third month: the 2026-10 run
    reuses what 2026-09 saved, and says so in its summary's champions."""
    folder, _ = demo
    work = folder.parent / ".lifecycle-work"
    assert [p.name.split("-")[1:3] for p in (work / "models").iterdir()] == [["2026", "09"]]
    assert len(list((work / "cache").glob("backtest-*"))) == 1
    _, first, second = two_months
    one = json.loads(first.files["summary"].read_text())
    two = json.loads(second.files["summary"].read_text())
    assert one["champions"] == two["champions"]


def test_same_seed_fresh_runs_give_byte_identical_outputs(tmp_path):
    """Two demos written with the same seed and run from empty work folders: the key figures,
    the plan and the forecast are the same bytes (nothing is reused between them)."""
    outputs = []
    for name in ("one", "two"):
        base = tmp_path / name
        paths = write_demo(base / "data", customers=600, seed=21)
        text = (
            paths["config"]
            .read_text()
            .replace('families = ["cox", "boosted", "forest"]', 'families = ["boosted"]')
        )
        paths["config"].write_text(text)
        result = run_cycle(base / "data", load_config(paths["config"]), as_of="2026-10")
        outputs.append(
            {
                k: result.files[k].read_bytes()
                for k in ("key_figures", "plan", "forecast", "scores", "policy_comparison",
                          "policy_backtest")
            }
        )  # fmt: skip
    assert outputs[0] == outputs[1]


# -- lifecycle explain -----------------------------------------------------------------------
def test_explain_agrees_with_the_run_for_a_planned_customer(demo, two_months, capsys):
    """One customer taken apart: the same scores, expected value and reasons as the run's
    files (the run and `explain_customer` share the scoring, valuing and reasons)."""
    from lifecycle.cli import main
    from lifecycle.cycle import explain_customer
    from lifecycle.models import load_model

    folder, config = demo
    reports, _, second = two_months
    model_dir = next((folder.parent / ".lifecycle-work" / "models").iterdir())
    plan = pd.read_csv(second.files["plan"], dtype={"customer_id": str})
    scores = pd.read_csv(second.files["scores"], dtype={"customer_id": str})
    row = plan.iloc[0]
    found = explain_customer(
        load_tables(folder, config),
        load_model(model_dir),
        "2026-10",
        row["customer_id"],
        config,
        history=reports / "history.duckdb",
    )
    assert found["customer_id"] == row["customer_id"]
    mine = scores.set_index("customer_id").loc[row["customer_id"]]
    assert found["incidence"]["churn"][2] == pytest.approx(mine["cif_churn_3m"], rel=1e-5)
    assert found["survival"][11] == pytest.approx(mine["survival_12m"], rel=1e-5)
    assert found["lifetime_value"] == pytest.approx(mine["lifetime_value"], abs=0.006)
    offers = {o["offer"]: o for o in found["offers"]}
    assert set(offers) == {"loyalty_credit", "moving_home_transfer", "backup_line_trial"}
    chosen = offers[row["offer"]]
    assert chosen["eligible"] and chosen["exclusions"] == []
    assert chosen["expected_value"] == pytest.approx(row["expected_value"], abs=0.006)
    assert "; ".join(chosen["reasons"]) == row["reasons"]
    for o in offers.values():
        terms = o["value_saved"] + o["uptake_value"] - o["cost"]
        assert o["expected_value"] == pytest.approx(terms, abs=0.011)  # each term to cents
        # the customer's own effect (or the offer's), as the run wrote it into scores.csv
        assert o["effect"] == pytest.approx(mine[f"effect_{o['offer']}"], rel=1e-6, abs=1e-12)
        assert o["hazard_ratio"] > 0 and isinstance(o["own_effect"], bool)
    assert [h["month"] for h in found["history"]] == ["2026-09", "2026-10"]
    assert found["history"][-1]["planned_offer"] == row["offer"]

    args = ["explain", str(folder), "--model", str(model_dir), "--as-of", "2026-10"]
    assert main([*args, "--customer", row["customer_id"], "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed["customer_id"] == row["customer_id"] and len(printed["offers"]) == 3
    assert main([*args, "--customer", row["customer_id"]]) == 0
    assert "expected value" in capsys.readouterr().out
    assert main([*args, "--customer", "NO-SUCH-ID"]) == 2
    err = capsys.readouterr().err
    assert "'NO-SUCH-ID' is not in the customers table" in err


def test_champions_are_scored_on_a_held_out_cutoff_and_repeats_are_counted(two_months):
    _, first, second = two_months
    key = json.loads((second.folder / "key_figures.json").read_text())
    for cause, champion in key["champions"].items():
        # the demo backtests two cutoffs: chosen on the earlier, scored on the later
        assert champion["held_out_cutoff"] is not None, cause
        assert "why" in champion and champion["previous_family"] == champion["family"]
        assert champion["changed"] is False
    again = key["plan"]["planned_again"]
    previous = pd.read_csv(first.files["plan"])
    assert again["previous_contacts"] == previous["customer_id"].nunique()
    assert again["planned_again"] <= again["still_eligible"] <= again["previous_contacts"]
    now = set(pd.read_csv(second.files["plan"])["customer_id"])
    assert again["planned_again"] <= len(now & set(previous["customer_id"]))


def test_scores_carry_each_offers_effect_and_the_plan_no_harmed_customer(two_months):
    """scores.csv has effect_<offer> for every offer (the change in the target's cumulative
    incidence over the value horizon if offered; a retention offer with a ratio below 1 lowers
    it), and the key figures count the customers each offer is predicted to harm."""
    _, _, second = two_months
    scores = pd.read_csv(second.files["scores"])
    key = json.loads((second.folder / "key_figures.json").read_text())
    offers = key["offers"]
    for name in offers:
        assert f"effect_{name}" in scores.columns and scores[f"effect_{name}"].notna().all()
    assert (scores["effect_moving_home_transfer"] <= 0).all()  # configured ratio 0.7
    assert (scores["effect_backup_line_trial"] >= 0).all()  # an uptake offer raises uptake
    for figures in offers.values():
        assert figures["harmed_planned"] == 0 <= figures["predicted_harmed"]
    effects = json.loads(second.files["summary"].read_text())["plan"]["effects"]
    assert "per_customer" in effects["loyalty_credit"] and effects["loyalty_credit"]["reason"]


def test_backtest_metrics_hold_the_campaign_metrics(two_months):
    """emp for every churn cell. qini for the demo's campaign (2025-09, in the follow-up of
    the 2025-06 cutoff) only where its effects can be learnt: on this 800-customer demo the
    campaign holds too few churn events for nine effect features (logged, no row); the row itself
    is tested in test_campaign_metrics.py and at 20,000 customers by `lifecycle bench
    response`."""
    _, first, _ = two_months
    metrics = pd.read_csv(first.files["backtest"])
    churn = metrics[metrics["cause"] == "churn"]
    cells = churn.groupby(["family", "horizon", "cutoff"])["metric"].apply(set)
    assert all("emp" in found for found in cells)
    assert metrics.loc[metrics["cause"] != "churn", "metric"].ne("emp").all()
    qini = metrics[metrics["metric"] == "qini"]
    assert set(qini["family"]) <= {"offer_effect:loyalty_credit"}
    assert set(qini["cutoff"]) <= {"2025-06"} and set(qini["horizon"]) <= {6}
    assert qini["value"].between(-1, 1).all() and (qini["n"] >= 200).all()
