"""The customer-month panel: one row per customer per active month, features lagged."""

from .._layout import PanelLayout, panel_layout
from ._build import build_panel, build_snapshot
from ._future import check_known_future, project_known_future
from ._life_table import life_table
from ._offers import offer_schedules

__all__ = [
    "PanelLayout",
    "build_panel",
    "build_snapshot",
    "check_known_future",
    "life_table",
    "offer_schedules",
    "panel_layout",
    "project_known_future",
]
