"""Time-to-event model families behind one interface (see `HazardModel`)."""

from ._base import HazardModel, future_rows
from ._competing import survival_and_incidence

__all__ = ["HazardModel", "future_rows", "survival_and_incidence"]
