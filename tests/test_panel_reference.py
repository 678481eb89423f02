"""The panel's life table against published Kaplan–Meier values."""

from __future__ import annotations

from pathlib import Path

import numpy as np
import pytest

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, PanelSettings
from lifecycle.panel import build_panel, life_table
from tests._builders import make_tables

DATA = Path(__file__).parent / "data"
# Freireich et al. (1963) 6-MP remission times, treatment arm, and their Kaplan–Meier estimate
# as textbooks print it: sources in tests/data/README.md.
GEHAN_6MP = [
    (int(weeks), bool(relapse))
    for weeks, relapse in np.loadtxt(DATA / "gehan_6mp.csv", delimiter=",", skiprows=1)
]
GEHAN_KM = {
    int(week): float(survival)
    for week, survival in np.loadtxt(DATA / "gehan_6mp_kaplan_meier.csv", delimiter=",", skiprows=1)
}


def _panel_from_times(times, as_of="2026-10"):
    """One customer per subject; a week of follow-up becomes a month of tenure.

    An event at t: start at as_of − 40, end t − 1 months later. A censored time t: the
    customer starts t − 1 months before as_of and is still active at as_of.
    """
    end_of_data = parse_month(as_of)
    rows = []
    for i, (t, event) in enumerate(times):
        if event:
            start = end_of_data - 40
            rows.append(
                dict(
                    customer_id=i,
                    start_month=format_month(start),
                    end_month=format_month(start + t - 1),
                    end_reason="churn",
                )
            )
        else:
            rows.append(dict(customer_id=i, start_month=format_month(end_of_data - t + 1)))
    tables = make_tables(rows, extract_month=as_of)
    return build_panel(tables, as_of, config=Config(panel=PanelSettings(window_months=60)))


def test_life_table_reproduces_gehan_6mp_kaplan_meier():
    panel = _panel_from_times(GEHAN_6MP)
    table = life_table(panel, "churn")
    for week, published in GEHAN_KM.items():
        # Published values are rounded to three decimals.
        assert table.loc[week, "survival"] == pytest.approx(published, abs=5e-4), week
    assert table.loc[6, "at_risk"] == 21  # all 21 subjects are at risk in week 6 (Gehan 1965)


def test_life_table_matches_lifelines_with_late_entry():
    """Left-truncated exits against lifelines' KaplanMeierFitter with ``entry`` (reference
    library). Random but seeded staggered data; the product-limit at each tenure must agree."""
    from lifelines import KaplanMeierFitter

    rng = np.random.default_rng(3)
    as_of = parse_month("2026-10")
    rows = []
    for i in range(400):
        start = as_of - int(rng.integers(0, 70))
        duration = int(rng.geometric(0.04))
        row = dict(customer_id=i, start_month=format_month(start))
        if start + duration - 1 <= as_of:
            row.update(end_month=format_month(start + duration - 1), end_reason="move_out")
        rows.append(row)
    panel = build_panel(
        make_tables(rows), "2026-10", config=Config(panel=PanelSettings(window_months=24))
    )
    table = life_table(panel, "move_out")
    per_customer = panel.groupby("customer_id", observed=True).agg(
        entry=("tenure_start", "first"), stop=("tenure_stop", "last"), event=("move_out", "max")
    )
    kmf = KaplanMeierFitter().fit(
        per_customer["stop"], per_customer["event"], entry=per_customer["entry"]
    )
    expected = kmf.survival_function_at_times(table.index.to_numpy()).to_numpy()
    np.testing.assert_allclose(table["survival"].to_numpy(), expected, rtol=1e-10)


def test_life_table_of_the_demo_matches_lifelines_kaplan_meier():
    """On the demo (left-truncated customers, three exit causes), the panel's life table of
    any exit equals lifelines' KaplanMeierFitter with entry times (reference library)."""
    import tempfile

    from lifelines import KaplanMeierFitter

    from lifecycle.config import load_config
    from lifecycle.data import load_tables
    from lifecycle.demo import write_demo

    with tempfile.TemporaryDirectory() as folder:
        paths = write_demo(folder, customers=800, seed=3)
        config = load_config(paths["config"])
        panel = build_panel(load_tables(folder, config), "2026-10", config=config)
    table = life_table(panel)
    exits = panel[["churn", "move_out", "other_exit"]].sum(axis=1)
    per_customer = (
        panel.assign(exit=exits)
        .groupby("customer_id", observed=True)
        .agg(entry=("tenure_start", "first"), stop=("tenure_stop", "last"), event=("exit", "max"))
    )
    kmf = KaplanMeierFitter().fit(
        per_customer["stop"], per_customer["event"], entry=per_customer["entry"]
    )
    expected = kmf.survival_function_at_times(table.index.to_numpy()).to_numpy()
    np.testing.assert_allclose(table["survival"].to_numpy(), expected, rtol=1e-10)
    assert per_customer["entry"].max() > 12  # the demo has customers who entered late
