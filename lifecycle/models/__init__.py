"""Time-to-event model families behind one interface (see `HazardModel`)."""

from ._base import HazardModel, future_rows
from ._competing import survival_and_incidence
from ._persist import load_model, read_manifest, save_model
from ._score import score_customers

__all__ = [
    "HazardModel",
    "future_rows",
    "load_model",
    "read_manifest",
    "save_model",
    "score_customers",
    "survival_and_incidence",
]
