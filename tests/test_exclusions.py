"""Who is never contacted: do-not-contact and hardship flags, added flags, consent, the guard.

Each case plans the invented demo portfolio with one fitted model and checks the plan against
the flags as written in ``customers.csv``. The demo (seed 4) has 30 do-not-contact and 19
hardship customers among 1,370; without the exclusion, some of them would be planned (checked
below, so that these tests can fail). The plan holds a few dozen of some 600 customers, so
whether a flagged one would be among them depends on the seed: seed 3 stopped giving one when
the demo campaign's effect came to vary by customer, and the control below caught it.
"""

from __future__ import annotations

import shutil

import pandas as pd
import pytest

from lifecycle.cli import main
from lifecycle.config import load_config
from lifecycle.cycle import plan_contacts, score_portfolio
from lifecycle.data import load_tables
from lifecycle.demo import write_demo
from lifecycle.errors import InputError, PlanSafetyError
from lifecycle.models import load_model
from lifecycle.panel import build_panel

AS_OF = "2026-10"


@pytest.fixture(scope="module")
def demo(tmp_path_factory):
    root = tmp_path_factory.mktemp("exclusions")
    write_demo(root / "data", customers=600, seed=4)
    model = root / "model"
    assert (
        main(["fit", str(root / "data"), "--as-of", AS_OF, "--family", "cox", "--out", str(model)])
        == 0
    )
    return root / "data", load_model(model), model


def _copy(demo, tmp_path, *, plan_lines: str = "", panel_lines: str = "", customers=None):
    """The demo data in ``tmp_path`` with lines added to [plan] / [panel] and a changed
    customers table."""
    source, _, _ = demo
    data = tmp_path / "data"
    shutil.copytree(source, data)
    text = (data / "lifecycle.toml").read_text()
    text = text.replace("[plan]\n", "[plan]\n" + plan_lines, 1)
    if panel_lines:
        text = (
            "[panel]\n" + panel_lines + text
            if "[panel]" not in text
            else text.replace("[panel]\n", "[panel]\n" + panel_lines, 1)
        )
    (data / "lifecycle.toml").write_text(text)
    if customers is not None:
        customers(data / "customers.csv")
    return data


def _plan(data, model):
    config = load_config(data / "lifecycle.toml")
    tables = load_tables(data, config)
    scored = score_portfolio(tables, model, AS_OF, config)
    return plan_contacts(tables, model, scored, config).table, config


def _flagged(data) -> set[str]:
    customers = pd.read_csv(data / "customers.csv", dtype=str)
    flags = [c for c in ("do_not_contact", "hardship") if c in customers]
    return set(customers.loc[(customers[flags] == "1").any(axis=1), "customer_id"])


def test_without_the_exclusion_flagged_customers_would_be_planned(demo, tmp_path):
    """The control: with the flags cleared, flagged customers are chosen, so the tests below
    could fail."""
    flagged = _flagged(demo[0])

    def clear(path):
        c = pd.read_csv(path, dtype=str, keep_default_na=False)
        c[["do_not_contact", "hardship"]] = "0"
        c.to_csv(path, index=False)

    plan, _ = _plan(_copy(demo, tmp_path, customers=clear), demo[1])
    assert set(plan["customer_id"]) & flagged


def test_an_empty_exclude_list_still_excludes_both_flags(demo, tmp_path):
    data = _copy(demo, tmp_path, plan_lines="exclude = []\n")
    plan, _ = _plan(data, demo[1])
    assert len(plan) > 0 and not set(plan["customer_id"]) & _flagged(data)


def test_an_added_exclusion_column_adds_to_the_flags(demo, tmp_path):
    def add(path):
        c = pd.read_csv(path, dtype=str, keep_default_na=False)
        c["complaint_open"] = (c.index % 3 == 0).astype(int).astype(str)
        c.to_csv(path, index=False)

    data = _copy(demo, tmp_path, plan_lines='exclude = ["complaint_open"]\n', customers=add)
    plan, config = _plan(data, demo[1])
    customers = pd.read_csv(data / "customers.csv", dtype=str)
    added = set(customers.loc[customers["complaint_open"] == "1", "customer_id"])
    chosen = set(plan["customer_id"])
    assert len(plan) > 0 and not chosen & (_flagged(data) | added)
    assert "complaint_open" in config.panel.not_features  # an exclusion flag is no feature


def test_a_string_not_features_never_makes_the_flags_features(demo, tmp_path):
    data = _copy(demo, tmp_path, panel_lines='not_features = "hardship"\n')
    config = load_config(data / "lifecycle.toml")
    assert config.panel.not_features == ("do_not_contact", "hardship")  # not ("h", "a", ...)
    panel = build_panel(load_tables(data, config), AS_OF, config=config)
    assert not {"do_not_contact", "hardship"} & set(panel.columns)
    assert "plan_speed" in panel.columns
    plan, _ = _plan(data, demo[1])
    assert len(plan) > 0 and not set(plan["customer_id"]) & _flagged(data)


def test_a_duplicated_flag_header_is_refused(demo, tmp_path):
    """The first ``do_not_contact`` all 0, the flags in a second column of the same name."""

    def duplicate(path):
        c = pd.read_csv(path, dtype=str, keep_default_na=False)
        flags = c["do_not_contact"]
        c["do_not_contact"] = "0"
        c.insert(len(c.columns), "do_not_contact_2", flags)
        text = c.to_csv(index=False).replace("do_not_contact_2", "do_not_contact", 1)
        path.write_text(text)

    data = _copy(demo, tmp_path, customers=duplicate)
    with pytest.raises(InputError, match="do_not_contact"):
        _plan(data, demo[1])  # refused on reading, or at the latest before planning


def test_a_missing_flag_column_is_an_input_error_unless_declared_absent(demo, tmp_path):
    def drop(path):
        pd.read_csv(path, dtype=str, keep_default_na=False).drop(columns="hardship").to_csv(
            path, index=False
        )

    data = _copy(demo, tmp_path, customers=drop)
    with pytest.raises(InputError, match=r"hardship.*flags_absent"):
        _plan(data, demo[1])
    out = tmp_path / "plan.csv"
    code = main(["plan", str(data), "--model", str(demo[2]), "--as-of", AS_OF, "--out", str(out)])
    assert code == 2 and not out.exists()
    declared = _copy(
        demo, tmp_path / "b", plan_lines='flags_absent = ["hardship"]\n', customers=drop
    )
    plan, _ = _plan(declared, demo[1])
    assert len(plan) > 0 and not set(plan["customer_id"]) & _flagged(declared)


def test_only_opted_in_customers_are_planned_with_a_consent_column(demo, tmp_path):
    def consent(path):
        c = pd.read_csv(path, dtype=str, keep_default_na=False)
        c["marketing_opt_in"] = ["yes" if i % 2 else "" for i in range(len(c))]
        c.to_csv(path, index=False)

    data = _copy(
        demo, tmp_path, plan_lines='consent_column = "marketing_opt_in"\n', customers=consent
    )
    plan, config = _plan(data, demo[1])
    customers = pd.read_csv(data / "customers.csv", dtype=str, keep_default_na=False)
    opted_in = set(customers.loc[customers["marketing_opt_in"] == "yes", "customer_id"])
    assert len(plan) > 0 and set(plan["customer_id"]) <= opted_in
    assert not set(plan["customer_id"]) & _flagged(data)
    assert "marketing_opt_in" in config.panel.not_features

    missing = _copy(demo, tmp_path / "b", plan_lines='consent_column = "marketing_opt_in"\n')
    with pytest.raises(InputError, match="marketing_opt_in"):
        _plan(missing, demo[1])


def test_a_plan_that_selects_a_flagged_customer_is_never_written(demo, tmp_path, monkeypatch):
    """The final guard: a planning fault that lets a flagged customer through ends with exit
    code 1 and no file."""
    import lifecycle.decisions as decisions

    data = _copy(demo, tmp_path)
    flagged = sorted(_flagged(data))
    real = decisions.make_plan

    def faulty(frame, *args, **kwargs):
        plan = real(frame, *args, **kwargs)
        plan.table.loc[0, "customer_id"] = flagged[0]
        return plan

    monkeypatch.setattr(decisions, "make_plan", faulty)
    with pytest.raises(PlanSafetyError, match=flagged[0]):
        _plan(data, demo[1])
    out = tmp_path / "plan.csv"
    code = main(["plan", str(data), "--model", str(demo[2]), "--as-of", AS_OF, "--out", str(out)])
    assert code == 1 and not out.exists()
