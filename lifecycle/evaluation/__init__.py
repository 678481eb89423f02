"""Evaluation: accuracy metrics on censored follow-up, observed outcomes and backtests."""

from ._backtest import BacktestResult, backtest, champions
from ._baseline import TenureLifeTable
from ._calibration import calibration_table, lift_and_capture
from ._choice import CHOICE_COLUMNS, DEFAULT_SWITCH_MARGIN, choose_champions
from ._metrics import CensoringCurve, brier_score, time_dependent_auc, uno_concordance
from ._outcomes import CENSORED, COMPETING, EVENT, observed_outcomes, outcome_for_cause
from ._statistics import (
    LogrankResult,
    harrell_concordance,
    integrated_brier_score,
    logrank_test,
)

__all__ = [
    "CENSORED",
    "CHOICE_COLUMNS",
    "COMPETING",
    "DEFAULT_SWITCH_MARGIN",
    "EVENT",
    "BacktestResult",
    "CensoringCurve",
    "LogrankResult",
    "TenureLifeTable",
    "backtest",
    "brier_score",
    "calibration_table",
    "champions",
    "choose_champions",
    "harrell_concordance",
    "integrated_brier_score",
    "lift_and_capture",
    "logrank_test",
    "observed_outcomes",
    "outcome_for_cause",
    "time_dependent_auc",
    "uno_concordance",
]
