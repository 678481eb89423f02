"""The plan in a backtest: customers it picks for the churn offer churn more than the rest."""

from __future__ import annotations

import numpy as np
from scipy import stats

from lifecycle._months import parse_month
from lifecycle.config import load_config
from lifecycle.cycle import panel_with_context, plan_contacts, score_portfolio
from lifecycle.data import load_tables, tables_as_of
from lifecycle.demo import write_demo
from lifecycle.evaluation import observed_outcomes
from lifecycle.models import BoostedHazard


def test_planned_customers_churn_clearly_more_than_the_rest(tmp_path):
    """Plan as of 2025-10 from what was known then; compare realised 3-month churn of the
    customers given the churn offer with everyone else (one-sided exact binomial test against
    the rest's rate, scipy.stats.binomtest)."""
    paths = write_demo(tmp_path / "data", customers=3000, seed=7)
    config = load_config(paths["config"])
    tables = load_tables(tmp_path / "data", config)
    cutoff = parse_month("2025-10")
    past = tables_as_of(tables, cutoff)
    model = BoostedHazard(max_iter=100, n_threads=1).fit(panel_with_context(past, cutoff, config))
    scored = score_portfolio(past, model, cutoff, config)
    plan = plan_contacts(past, model, scored, config)

    outcomes = observed_outcomes(tables, cutoff).set_index("customer_id")
    churned = ((outcomes["cause"] == "churn") & (outcomes["months"] <= 3)).reindex(
        scored.scores["customer_id"]
    )
    planned = scored.scores["customer_id"].isin(
        plan.table.loc[plan.table["offer"] == "loyalty_credit", "customer_id"]
    )
    y = churned.to_numpy(dtype=bool)
    chosen = planned.to_numpy()
    rate_planned, rate_rest = y[chosen].mean(), y[~chosen].mean()
    lift = rate_planned / rate_rest
    assert chosen.sum() >= 100
    assert lift > 1.3, lift
    test = stats.binomtest(
        int(y[chosen].sum()), int(chosen.sum()), rate_rest, alternative="greater"
    )
    assert test.pvalue < 0.05, (lift, test.pvalue)
    assert np.isfinite(lift)
