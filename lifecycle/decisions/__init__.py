"""From expected values to decisions: offers, the contact plan, its weeks and its reasons.

The offers and the plan's settings are read from ``lifecycle.toml`` (``lifecycle settings``
prints every setting; `lifecycle.decisions._offers` explains them); `make_plan` chooses at
most one offer per customer within the budget and capacities (exact MILP or greedy, with the
optimality gap), schedules the contacts into weeks, most urgent first, and gives each row its
top reasons in plain words.
"""

from ._exclusions import consent_mask, guard_plan, require_flag_columns
from ._offers import (
    Eligibility,
    Offer,
    PlanSettings,
    cooldown_ok,
    eligible_mask,
    excluded_mask,
    last_contact_months,
    offers_from_config,
    plan_settings_from_config,
)
from ._plan import (
    AREA_FEATURES,
    LIMITS,
    PLAN_COLUMNS,
    Plan,
    expected_value_matrix,
    make_plan,
    offer_figures,
)
from ._policies import (
    POLICIES,
    POLICY_COLUMNS,
    compare_policies,
    effect_draws,
    interval_draws,
    policy_selections,
)
from ._policy_backtest import BACKTEST_COLUMNS, backtest_policies, policy_value_ipw
from ._reasons import (
    DEFAULT_PHRASES,
    RESPONDS_REASON,
    Phrase,
    cause_words,
    join_reasons,
    phrases_from_config,
    portfolio_reference,
    reason_concept,
    risk_reason,
    top_reasons,
)
from ._schedule import schedule_weeks
from ._solve import Allocation, allocate

__all__ = [
    "AREA_FEATURES",
    "BACKTEST_COLUMNS",
    "DEFAULT_PHRASES",
    "LIMITS",
    "PLAN_COLUMNS",
    "POLICIES",
    "POLICY_COLUMNS",
    "RESPONDS_REASON",
    "Allocation",
    "Eligibility",
    "Offer",
    "Phrase",
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
