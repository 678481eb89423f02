"""The models and scoring benchmarks at a tiny size: they run, and their own checks hold.

Speed is never asserted (speed and memory goals live in ``lifecycle bench``); what is checked
is that each bench function measures what it says: its concordance is the backtest's, its
comparisons are computed from the figures it prints, the scoring pipeline's hazards,
probabilities and plan are consistent, and the plan's bound is a true bound.
"""

from __future__ import annotations

import re

import numpy as np
import pandas as pd
import pytest

from lifecycle.bench import SUITES
from lifecycle.bench._models import (
    HORIZON,
    compare_coefficients,
    compare_concordance,
    fit_and_score,
    run_models_bench,
    write_demo_folder,
)
from lifecycle.bench._scoring import (
    SCORE_MONTHS,
    consistency,
    hazards_in_blocks,
    plan_settings,
    run_scoring_bench,
    score_value_plan,
    scoring_offers,
    synthetic_scoring_input,
)
from lifecycle.config import load_config
from lifecycle.data import load_tables
from lifecycle.decisions import allocate, cooldown_ok, eligible_mask, excluded_mask
from lifecycle.evaluation import backtest
from lifecycle.models import survival_and_incidence
from lifecycle.models._families import make_model

TINY_BOOSTED = {"max_iter": 20}
TINY = {"forest": {"n_estimators": 8, "importance_rows": 0}, "boosted": TINY_BOOSTED}
C_NUMBER = r"([a-z_]+) ([01]\.\d{4})"


def test_suites_are_registered():
    assert {"panel", "spatial", "models", "decisions", "metrics", "cycle", "response"} == set(
        SUITES
    )


def test_seed_reaches_the_models_suite(monkeypatch):
    import lifecycle.bench._models as models_bench
    from lifecycle.bench import run_benchmarks

    seen: dict = {}
    monkeypatch.setattr(models_bench, "run_models_bench", lambda **kw: seen.update(kw) or [])
    run_benchmarks(["models"], seed=3)
    assert seen == {"customers": 10_000, "seed": 3}
    run_benchmarks(["models"])
    assert seen["seed"] == models_bench.DEMO_SEED


# -- models ----------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    return write_demo_folder(tmp_path_factory.mktemp("demo"), 500)


def test_concordance_is_the_backtests(demo):
    """The bench's 12-month Uno C per cause equals `lifecycle.evaluation.backtest`'s for the
    same family, cutoff and horizon (both fit the same seeded model on the same panel)."""
    ours = fit_and_score(demo, "boosted", TINY_BOOSTED)
    config = load_config(demo / "lifecycle.toml")
    tables = load_tables(demo, config)
    model = make_model("boosted", config).set_params(**TINY_BOOSTED)
    result = backtest(
        tables,
        families={"boosted": model},
        cutoffs=[ours["cutoff"]],
        horizons=(HORIZON,),
        config=config,
    )
    metrics = result.metrics
    theirs = metrics[metrics["metric"] == "uno_c"].set_index("cause")["value"]
    assert set(theirs.index) == set(ours["concordance"])
    for cause, value in ours["concordance"].items():
        assert value == pytest.approx(theirs[cause], abs=1e-12)
    assert ours["rows"] > 10_000 and ours["customers"] > 400


def test_coefficient_comparison():
    full = pd.DataFrame(
        {
            "cause": ["churn", "churn", "move_out"],
            "feature": ["a", "b", "a"],
            "coef": [0.5, -1.0, 0.2],
            "se": [0.1, 0.5, 0.05],
        }
    )
    same = compare_coefficients(full, full)
    assert same["max_z"] == 0.0 and same["within"] == same["total"] == 3
    moved = full.assign(coef=[0.58, -1.0, 0.3])  # 0.8 se and 2 se away
    gap = compare_coefficients(full, moved)
    assert gap["max_z"] == pytest.approx(2.0)
    assert gap["where"] == "move_out:a" and gap["within"] == 2
    # a covariate the weighted fit lacks is never "within"
    lacking = compare_coefficients(full, moved.iloc[:2])
    assert lacking["within"] == 2 and lacking["max_z"] == np.inf
    assert lacking["where"] == "move_out:a"


def test_concordance_comparison():
    cmp = compare_concordance({"churn": 0.70, "move_out": 0.61}, {"churn": 0.69, "move_out": 0.62})
    assert cmp["worst_cause"] == "move_out"
    assert cmp["worst"] == pytest.approx(-0.01)
    assert cmp["diffs"]["churn"] == pytest.approx(0.01)


def _concordances(note: str) -> dict[str, float]:
    part = note.split("12-month Uno C: ")[1].split(";")[0]
    return {cause: float(value) for cause, value in re.findall(C_NUMBER, part)}


def test_models_bench_runs_and_its_notes_add_up(demo):
    results = run_models_bench(500, family_params=TINY, demo=demo)
    assert [m.role for m in results] == ["ours", "plain", "ours", "ours", "plain"]
    by_case = {m.case: m for m in results}
    c = {case: _concordances(m.note) for case, m in by_case.items()}
    for values in c.values():
        assert set(values) == {"churn", "move_out", "other_exit", "up_backup_line"}
        assert all(0.0 <= v <= 1.0 for v in values.values())
    forest = c["survival forest"]
    for case in ("boosted, every row", "boosted, weighted sample f=0.05"):
        note = by_case[case].note
        diffs = dict(re.findall(r"([a-z_]+) ([+-]\d\.\d{4})", note.split("ΔC ")[1]))
        for cause, diff in diffs.items():
            # the printed difference is the difference of the printed concordances
            assert float(diff) == pytest.approx(c[case][cause] - forest[cause], abs=2e-4)
        ratio = float(re.search(r"(\d+\.\d+)× less time", note).group(1))
        expected = by_case["survival forest"].seconds / by_case[case].seconds
        assert ratio == pytest.approx(expected, rel=0.01, abs=0.01)
    cox = by_case["Cox, weighted sample f=0.15"].note
    z = float(re.search(r"max \|Δcoef\|/se (\d+\.\d+)", cox).group(1))
    within, total = map(int, re.search(r"(\d+)/(\d+) within 1 se", cox).groups())
    assert 0 < total and within <= total and z >= 0
    # z is printed to 2 decimals: all within one se exactly when the largest is ≤ 1
    assert z <= 1.005 if within == total else z >= 0.995
    # every case is compared with the demo's true process on the same customers
    # (the exact truth, and the truth knowable at the cutoff: the campaign effect averaged)
    for case, m in by_case.items():
        for heading in ("vs truth (", "vs truth knowable at the cutoff"):
            truth = m.note.split(heading)[1].split("): ", 1)[1].split("; vs ")[0]
            found = re.findall(r"([a-z_]+) C (\d\.\d{3})/(\d\.\d{3}) ratio (-?\d+\.\d{2})", truth)
            assert len(found) == 4, m.note
            for cause, mine, true, ratio in found:
                assert float(mine) == pytest.approx(c[case][cause], abs=6e-4)
                if abs(float(true) - 0.5) > 0.02:  # the printed ratio is of unrounded values
                    expected = (float(mine) - 0.5) / (float(true) - 0.5)
                    assert float(ratio) == pytest.approx(expected, abs=0.06)
    forest = by_case["survival forest"].note
    assert "best family vs truth: churn " in forest
    assert "best family vs truth knowable at the cutoff (campaign effect averaged): churn" in forest


# -- scoring to plan ------------------------------------------------------------------------
@pytest.fixture(scope="module")
def scored():
    customers = 3_000
    data = synthetic_scoring_input(
        customers, train_customers=2_000, model_params={"max_iter": 30}, seed=3
    )
    return customers, data, score_value_plan(data, customers)


def test_blocks_equal_one_call(scored):
    _, data, result = scored
    blocked = hazards_in_blocks(data.model, data.snapshot, SCORE_MONTHS, block=700)
    once = data.model.hazard_array(data.snapshot, SCORE_MONTHS)
    np.testing.assert_array_equal(blocked, once)
    np.testing.assert_array_equal(result.hazards, once)


def test_scores_value_and_plan_are_consistent(scored):
    customers, data, result = scored
    checks = consistency(data, result, customers)
    assert checks["total_error"] < 1e-9
    assert checks["block_error"] == 0.0
    assert checks["over_budget"] <= 1e-6
    assert checks["over_capacity"] <= 0
    assert checks["excluded_selected"] == 0
    # lifetime value: Σ_t m S(t) (1 + d)^−t with d = 1.08^(1/12) − 1 (the definition in
    # DESIGN.md, "Value and decisions"), computed here by hand from the same hazards
    k = len(data.model.terminal_causes_)
    survival, _ = survival_and_incidence(result.hazards[..., :k])
    d = 1.08 ** (1 / 12) - 1
    by_hand = (survival * (1 + d) ** -np.arange(1, SCORE_MONTHS + 1)).sum(axis=1)
    by_hand *= data.snapshot["monthly_margin"].to_numpy(dtype=float)
    np.testing.assert_allclose(result.lifetime_value, by_hand, rtol=1e-10)
    assert len(result.offer_values) == 3 * customers
    assert len(result.plan.table) > 0


def test_greedy_bound_holds_against_the_exact_plan(scored):
    """The greedy plan's Lagrangian bound must lie above the exact optimum (scipy's HiGHS MILP),
    and the greedy value below it: the printed gap is then a true gap."""
    customers, data, result = scored
    offers = scoring_offers(customers)
    settings = plan_settings(customers)
    greedy = result.plan.allocation
    ev = result.offer_values["expected_value"].to_numpy().reshape(customers, len(offers))
    # the pairs the plan allowed: eligibility, flags and cooldown, as make_plan derives them
    frame = data.snapshot.merge(result.scores, on="customer_id").merge(data.flags, on="customer_id")
    allowed = np.column_stack([eligible_mask(frame, o) for o in offers])
    allowed &= ~excluded_mask(frame, settings.exclude)[:, None]
    last = data.last_contact.reindex(frame["customer_id"].to_numpy()).to_numpy(dtype=float)
    month = _month_index(frame)
    for j, offer in enumerate(offers):
        allowed[:, j] &= cooldown_ok(last, month, offer.cooldown_months)
    exact = allocate(
        ev,
        np.array([o.cost for o in offers]),
        np.array([o.capacity(settings.weeks) for o in offers]),
        settings.budget,
        allowed=allowed,
        solver="exact",
        max_exact_customers=10**9,
        time_limit_s=60.0,
        mip_gap=0.0,
    )
    assert exact.objective <= greedy.bound + 1e-6
    assert greedy.objective <= exact.objective + 1e-6


def _month_index(frame: pd.DataFrame) -> int:
    from lifecycle._months import categorical_to_index

    return int(categorical_to_index(frame["month"])[0])


def test_scoring_bench_runs():
    (m,) = run_scoring_bench(
        2_000, train_customers=2_000, n_threads=1, model_params={"max_iter": 30}
    )
    assert m.suite == "decisions" and m.role == "ours"
    assert "checks hold" in m.note
    assert m.seconds > 0 and m.peak_mb > 0


# -- the whole cycle ---------------------------------------------------------------------------
def test_cycle_bench_routes_agree():
    """The cycle suite at a tiny size: both routes run the whole cycle, and the checksums of
    the scores, plan and forecast they wrote agree (rounded as printed); the goal lines are
    computed from the two measured times."""
    from lifecycle.bench import _cycle_goals, format_table
    from lifecycle.bench._cycle import run_cycle_bench

    prepared, single, dask = run_cycle_bench(customers=1500, workers=2)
    assert (prepared.role, single.role, dask.role) == ("setup", "plain", "ours")
    listed = int(re.search(r"([\d,]+) customers listed", prepared.note).group(1).replace(",", ""))
    assert 1200 < listed < 1800  # about the customers asked for

    def sums(note: str) -> list[str]:
        return note.split("; ")[:5]

    assert sums(single.note) == sums(dask.note)
    assert "largest worker" in dask.note
    goals = _cycle_goals([single, dask])
    ratio = float(re.search(r"([\d.]+)× the time", goals[1]).group(1))
    assert ratio == pytest.approx(dask.seconds / single.seconds, abs=0.006)
    assert "whole-cycle goals" in format_table([single, dask])


def test_metrics_bench_runs_and_the_two_aucs_agree():
    """The metrics suite at a small size: ours and scikit-survival's cumulative_dynamic_auc
    (the reference library) side by side, their AUCs equal (its note's largest difference)."""
    from lifecycle.bench import format_table
    from lifecycle.bench._metrics import run_metrics_bench

    ours, plain = run_metrics_bench((3_000,))
    assert (ours.role, plain.role) == ("ours", "plain") and ours.size == plain.size
    gap = float(plain.note.rsplit("|ΔAUC| ", 1)[1])
    assert gap <= 1e-12
    assert ours.note.split(";")[0] == plain.note.split(";")[0]  # the same mean AUC
    assert "sksurv cumulative_dynamic_auc / time_dependent_auc" in format_table([ours, plain])
