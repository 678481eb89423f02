"""The customer-month panel: one row per customer per active month, features lagged."""

from ._build import build_panel, build_snapshot
from ._layout import PanelLayout, panel_layout
from ._life_table import life_table

__all__ = ["PanelLayout", "build_panel", "build_snapshot", "life_table", "panel_layout"]
