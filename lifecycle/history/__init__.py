"""The score history: each month's scores, plan and key metrics in an embedded DuckDB file,
and how an earlier month's predictions compare with what happened since."""

from ._compare import DECILE_COLUMNS, Comparison, compare_with_outcomes
from ._store import META_KEYS, PLAN_COLUMNS, RunInfo, ScoreHistory

__all__ = [
    "DECILE_COLUMNS",
    "META_KEYS",
    "PLAN_COLUMNS",
    "Comparison",
    "RunInfo",
    "ScoreHistory",
    "compare_with_outcomes",
]
