"""Evaluation: accuracy metrics on censored follow-up, observed outcomes and backtests;
the Qini curve and the expected maximum profit measure for campaigns."""

from ..models import TenureLifeTable  # a model family; also named here, where it was first
from ._backtest import BacktestResult, backtest, champions
from ._calibration import calibration_table, lift_and_capture
from ._campaign_metrics import (
    CampaignMetricSettings,
    campaign_metric_settings,
    cross_fitted_qini,
)
from ._choice import CHOICE_COLUMNS, DEFAULT_SWITCH_MARGIN, choose_champions
from ._metrics import CensoringCurve, brier_score, time_dependent_auc, uno_concordance
from ._outcomes import CENSORED, COMPETING, EVENT, observed_outcomes, outcome_for_cause
from ._profit import expected_maximum_profit
from ._statistics import (
    LogrankResult,
    harrell_concordance,
    integrated_brier_score,
    logrank_test,
)
from ._uplift import QINI_COLUMNS, qini_coefficient, qini_curve

__all__ = [
    "CENSORED",
    "CHOICE_COLUMNS",
    "COMPETING",
    "DEFAULT_SWITCH_MARGIN",
    "EVENT",
    "QINI_COLUMNS",
    "BacktestResult",
    "CampaignMetricSettings",
    "CensoringCurve",
    "LogrankResult",
    "TenureLifeTable",
    "backtest",
    "brier_score",
    "calibration_table",
    "campaign_metric_settings",
    "champions",
    "choose_champions",
    "cross_fitted_qini",
    "expected_maximum_profit",
    "harrell_concordance",
    "integrated_brier_score",
    "lift_and_capture",
    "logrank_test",
    "observed_outcomes",
    "outcome_for_cause",
    "qini_coefficient",
    "qini_curve",
    "time_dependent_auc",
    "uno_concordance",
]
