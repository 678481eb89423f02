"""Offers, the [plan] settings and the reason phrases from lifecycle.toml; who may be contacted.

The rules checked are those documented in lifecycle/decisions/_offers.py and _reasons.py;
the TOML itself is read by Python's tomllib (TOML 1.0: an [offers.eligible] table after an
[[offers]] entry belongs to that entry).
"""

from __future__ import annotations

import textwrap

import numpy as np
import pandas as pd
import pytest

from lifecycle.config import load_config
from lifecycle.decisions import (
    Eligibility,
    Offer,
    PlanSettings,
    cooldown_ok,
    eligible_mask,
    excluded_mask,
    last_contact_months,
    offers_from_config,
    phrases_from_config,
    plan_settings_from_config,
)
from lifecycle.errors import InputError, UsageError

FULL = """
[[offers]]
name = "loyalty_credit"
target = "churn"
cost = 25.0
hazard_ratio = 0.7
months = 6
cooldown_months = 2
weekly_capacity = 400

[offers.eligible]
min_tenure = 6
max_tenure = 120
min_cif_churn_3m = 0.02
not_holding = "backup_line"

[offers.eligible.segments]
plan_speed = [100, 300]

[[offers]]
name = "backup_trial"
target = "uptake_backup_line"
cost = 4
hazard_ratio = 1.5
months = 3
value_per_uptake = 180.0

[plan]
budget = 20000.0
weeks = 4
solver = "greedy"
max_exact_customers = 5000
time_limit_s = 30
exclude = ["do_not_contact"]

[reason_phrases]
"discount_(?P<kind>.+)" = { high = "a large {kind} discount", low = "a small {kind} discount" }
"contract_ending" = "the contract is about to end"
"""


def config_from(tmp_path, text):
    path = tmp_path / "lifecycle.toml"
    path.write_text(textwrap.dedent(text), encoding="utf-8")
    return load_config(path)


def test_full_config_is_read(tmp_path):
    config = config_from(tmp_path, FULL)
    credit, trial = offers_from_config(config)
    assert (credit.name, credit.target, credit.cost, credit.hazard_ratio) == (
        "loyalty_credit",
        "churn",
        25.0,
        0.7,
    )
    assert (credit.months, credit.cooldown_months, credit.weekly_capacity) == (6, 2, 400)
    assert credit.eligible.minimum == {"tenure": 6.0, "cif_churn_3m": 0.02}
    assert credit.eligible.maximum == {"tenure": 120.0}
    assert credit.eligible.not_holding == ("backup_line",)
    assert credit.eligible.segments == {"plan_speed": (100, 300)}
    assert not credit.is_uptake and credit.product is None
    assert trial.is_uptake and trial.product == "backup_line"
    assert trial.value_per_uptake == 180.0 and trial.cooldown_months == 3
    assert trial.weekly_capacity is None and trial.capacity(4) == np.inf
    assert credit.capacity(4) == 1600
    plan = plan_settings_from_config(config)
    assert plan == PlanSettings(
        budget=20000.0,
        weeks=4,
        solver="greedy",
        max_exact_customers=5000,
        time_limit_s=30.0,
        exclude=("do_not_contact",),
    )
    assert plan.urgency_column(credit) == "cif_churn_3m"
    phrases = phrases_from_config(config)
    assert phrases[0].words("discount_loyal_bonus", 9.0, 1.0, high=True) == (
        "a large loyal bonus discount"
    )
    assert phrases[1].words("contract_ending", 1.0, 0.0, high=True) == (
        "the contract is about to end"
    )
    assert phrases[1].words("contract_ending", 0.0, 1.0, high=False) is None


@pytest.mark.parametrize(
    ("offer_lines", "message"),
    [
        ('target = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2', r"lacks.*\['name'\]"),
        ('name = "a"\ntarget = "leave"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2', "target was"),
        ('name = "a"\ntarget = "churn"\ncost = -1\nhazard_ratio = 0.9\nmonths = 2', "cost was -1"),
        ('name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 1.3\nmonths = 2', "lowers"),
        ('name = "a"\ntarget = "uptake_x"\ncost = 1\nhazard_ratio = 0.5\nmonths = 2', "raises"),
        ('name = "a"\ntarget = "uptake_x"\ncost = 1\nhazard_ratio = 2\nmonths = 2', "value_per"),
        (
            'name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\n'
            "value_per_uptake = 5",
            "uptake offers only",
        ),
        ('name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 0', "months was 0"),
        ('name = "a"\ntarget = "churn"\ncost = "x"\nhazard_ratio = 0.9\nmonths = 2', "a number"),
        ('name = "a b"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2', "letter"),
        (
            'name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\nspeed = 1',
            "unknown",
        ),
        (
            'name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\n'
            "weekly_capacity = 2.5",
            "weekly_capacity was 2.5",
        ),
        (
            'name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\n'
            "[offers.eligible]\noldest = 3",
            "unknown setting 'oldest'",
        ),
        (
            'name = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\n'
            "[offers.eligible.segments]\nregion = []",
            "non-empty list",
        ),
    ],
)
def test_bad_offers_are_refused_with_the_setting_named(tmp_path, offer_lines, message):
    # refused when the file is read, before any work
    with pytest.raises(UsageError, match=message):
        config_from(tmp_path, "[[offers]]\n" + offer_lines + "\n")


def test_offer_names_are_unique(tmp_path):
    one = '[[offers]]\nname = "a"\ntarget = "churn"\ncost = 1\nhazard_ratio = 0.9\nmonths = 2\n'
    with pytest.raises(UsageError, match=r"repeated: \['a'\]"):
        offers_from_config(config_from(tmp_path, one + one))
    assert offers_from_config(config_from(tmp_path, "")) == ()


@pytest.mark.parametrize(
    ("plan_lines", "message"),
    [
        ("weeks = 4", "budget is missing"),
        ("budget = 10\nsolver = 'fast'", r"solver was .fast..*\['auto', 'exact', 'greedy'\]"),
        ("budget = 10\nweeks = 0", "weeks was 0"),
        ("budget = -3", "budget was -3"),
        ("budget = 10\nurgency = 'cif_{cause}_3m'", "only placeholder"),
        ("budget = 10\nhorizon = 3", "unknown setting"),
        ("budget = 10\nexclude = 'hardship'\nreasons = -1", "reasons was -1"),
    ],
)
def test_bad_plan_settings_are_refused(tmp_path, plan_lines, message):
    with pytest.raises(UsageError, match=message):  # when read, or when a plan is made
        plan_settings_from_config(config_from(tmp_path, "[plan]\n" + plan_lines + "\n"))
    with pytest.raises(UsageError, match=r"\[plan\] section"):
        plan_settings_from_config(config_from(tmp_path, ""))


@pytest.mark.parametrize(
    ("phrases", "message"),
    [
        ('"complaints_(" = "x"', "not a regular expression"),
        ('"complaints" = "{count} complaints"', r"uses \['count'\]"),
        ('"complaints" = { often = "x" }', "a text, or a table"),
        ('"complaints" = "{value:.0f"', "malformed"),
    ],
)
def test_bad_reason_phrases_are_refused(tmp_path, phrases, message):
    # refused when the file is read, before any work
    with pytest.raises(UsageError, match=message):
        config_from(tmp_path, "[reason_phrases]\n" + phrases + "\n")


# -- eligibility, exclusions, cooldown -----------------------------------------------------------
def frame():
    return pd.DataFrame(
        {
            "customer_id": ["a", "b", "c", "d", "e", "f"],
            "tenure_start": [5, 6, 120, 121, 30, 40],
            "cif_churn_3m": [0.5, 0.02, 0.019, 0.3, np.nan, 0.1],
            "holds_backup_line": [0, 0, 0, 0, 0, 1],
            "plan_speed": pd.Categorical(["100", "300", "100", "100", "1000", "100"]),
        }
    )


def test_eligibility_rules_are_inclusive_and_missing_values_never_eligible(tmp_path):
    config = config_from(tmp_path, FULL)
    credit, trial = offers_from_config(config)
    # a: tenure 5 < 6; b: boundaries 6 and 0.02 included; c: cif 0.019 < 0.02; d: tenure 121
    # > 120; e: cif missing (and speed 1000 not allowed); f: holds the product
    assert eligible_mask(frame(), credit).tolist() == [False, True, False, False, False, False]
    assert eligible_mask(frame(), trial).all()
    offer = Offer("x", "churn", 1.0, 0.9, 1, eligible=Eligibility(holding=("backup_line",)))
    assert eligible_mask(frame(), offer).tolist() == [False] * 5 + [True]
    with pytest.raises(UsageError, match="needs the column 'plan_speed'"):
        eligible_mask(frame().drop(columns="plan_speed"), credit)


def test_exclusion_flags_read_every_common_spelling():
    flags = pd.DataFrame(
        {
            "customer_id": range(8),
            "do_not_contact": ["yes", "No", "TRUE", "0", "", None, "1", "y"],
            "hardship": [0, 0, 0, 0, 0, 0, 0, np.nan],
        }
    )
    assert excluded_mask(flags, ["do_not_contact", "hardship"]).tolist() == [
        True,
        False,
        True,
        False,
        False,
        False,
        True,
        True,
    ]
    flags["hardship"] = [False, True, False, False, False, False, False, False]
    assert excluded_mask(flags, ["hardship", "not_there"]).tolist() == [False, True] + [False] * 6
    flags["do_not_contact"] = ["maybe"] * 8
    with pytest.raises(InputError, match=r"'maybe'.*8 rows"):
        excluded_mask(flags, ["do_not_contact"])


def test_last_contacts_count_offered_arms_only():
    campaigns = pd.DataFrame(
        {
            "customer_id": [1, 1, 2, 3],
            "month": [24300, 24304, 24306, 24290],
            "offer": "loyalty_credit",
            "arm": ["offered", "offered", "held_out", "offered"],
        }
    )
    previous_plan = pd.DataFrame({"customer_id": [3, 4], "month": ["2025-05", "2025-03"]})
    last = last_contact_months(campaigns, previous_plan)
    # 2025-05 is month index 2025*12 + 4 = 24304; 2025-03 is 24302
    assert last.to_dict() == {1: 24304.0, 3: 24304.0, 4: 24302.0}
    assert len(last_contact_months()) == 0


def test_cooldown_blocks_the_months_after_a_contact():
    last = np.array([np.nan, 10, 11, 12, 13, 14])
    # plan month 14 with a 3-month cooldown: contacts in 11, 12, 13 (and 14) block, 10 does not
    assert cooldown_ok(last, 14, 3).tolist() == [True, True, False, False, False, False]
    assert cooldown_ok(last, 14, 0).tolist() == [True, True, True, True, True, False]


def test_public_surface_is_pinned():
    import lifecycle.decisions as decisions

    assert sorted(decisions.__all__) == sorted(
        [
            "AREA_FEATURES",
            "Allocation",
            "BACKTEST_COLUMNS",
            "DEFAULT_PHRASES",
            "Eligibility",
            "LIMITS",
            "Offer",
            "PLAN_COLUMNS",
            "POLICIES",
            "POLICY_COLUMNS",
            "Phrase",
            "RESPONDS_REASON",
            "Plan",
            "PlanSettings",
            "allocate",
            "backtest_policies",
            "cause_words",
            "compare_policies",
            "consent_mask",
            "cooldown_ok",
            "effect_draws",
            "eligible_mask",
            "excluded_mask",
            "expected_value_matrix",
            "guard_plan",
            "interval_draws",
            "join_reasons",
            "last_contact_months",
            "make_plan",
            "offer_figures",
            "offers_from_config",
            "phrases_from_config",
            "plan_settings_from_config",
            "policy_selections",
            "policy_value_ipw",
            "portfolio_reference",
            "reason_concept",
            "require_flag_columns",
            "risk_reason",
            "schedule_weeks",
            "top_reasons",
        ]
    )
    assert all(hasattr(decisions, name) for name in decisions.__all__)
