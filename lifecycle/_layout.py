"""Which columns of a panel are ids, causes and features (read from the names alone)."""

from __future__ import annotations

from dataclasses import dataclass

import pandas as pd

from .errors import UsageError

ID_COLUMNS = ("customer_id", "month", "tenure_start", "tenure_stop")
TERMINAL_CAUSES = ("churn", "move_out", "other_exit")
REASON_TO_CAUSE = {"churn": "churn", "move_out": "move_out", "other": "other_exit"}
UPTAKE_PREFIX = "uptake_"
HOLDS_PREFIX = "holds_"


@dataclass(frozen=True)
class PanelLayout:
    """The roles of a panel's columns.

    Attributes
    ----------
    terminal_causes
        ``churn``, ``move_out``, ``other_exit``: competing, terminal.
    uptake_causes
        ``uptake_<product>``: not terminal; at risk only where ``holds_<product>`` is 0.
    features
        Every column after the cause columns, in panel order.
    """

    terminal_causes: tuple[str, ...]
    uptake_causes: tuple[str, ...]
    features: tuple[str, ...]

    @property
    def causes(self) -> tuple[str, ...]:
        return self.terminal_causes + self.uptake_causes

    @property
    def products(self) -> tuple[str, ...]:
        return tuple(c.removeprefix(UPTAKE_PREFIX) for c in self.uptake_causes)

    @staticmethod
    def at_risk_column(cause: str) -> str | None:
        """The column whose 0 marks rows at risk of ``cause`` (``None``: every row is)."""
        if cause.startswith(UPTAKE_PREFIX):
            return HOLDS_PREFIX + cause.removeprefix(UPTAKE_PREFIX)
        return None


def panel_layout(panel: pd.DataFrame) -> PanelLayout:
    """Read a panel's layout from its column names (see DEVELOPERS.md, the panel contract)."""
    columns = list(panel.columns)
    missing = [c for c in (*ID_COLUMNS, *TERMINAL_CAUSES) if c not in columns]
    if missing:
        raise UsageError(f"this is not a panel: columns {missing} are missing")
    uptakes = tuple(c for c in columns if c.startswith(UPTAKE_PREFIX))
    last_cause = max(columns.index(c) for c in (*TERMINAL_CAUSES, *uptakes))
    return PanelLayout(
        terminal_causes=TERMINAL_CAUSES,
        uptake_causes=uptakes,
        features=tuple(columns[last_cause + 1 :]),
    )
