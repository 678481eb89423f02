"""Time-to-event model families behind one interface (see `HazardModel`)."""

from ._base import HazardModel, future_rows
from ._boosted import BoostedHazard
from ._competing import survival_and_incidence
from ._cox import CauseSpecificCox
from ._forest import SurvivalForest
from ._landmarks import landmark_months, landmark_snapshots, observed_incidence
from ._persist import load_model, read_manifest, save_model
from ._score import score_customers

__all__ = [
    "BoostedHazard",
    "CauseSpecificCox",
    "HazardModel",
    "SurvivalForest",
    "future_rows",
    "landmark_months",
    "landmark_snapshots",
    "load_model",
    "observed_incidence",
    "read_manifest",
    "save_model",
    "score_customers",
    "survival_and_incidence",
]
