"""Time-to-event model families behind one interface (see `HazardModel`)."""

from ._base import HazardModel, future_rows, incidence_from_hazards, survival_from_hazards
from ._boosted import BoostedHazard
from ._champion import ChampionModel
from ._competing import survival_and_incidence, uptake_incidence, valid_hazards
from ._cox import CauseSpecificCox
from ._families import FAMILY_NAMES, make_model
from ._fittable import check_fittable, min_events_setting
from ._forest import SurvivalForest
from ._landmarks import landmark_months, landmark_snapshots, observed_incidence
from ._life_table import TenureLifeTable
from ._persist import load_model, read_manifest, save_model
from ._score import score_customers
from ._signing import keep_key_outside, sign, signature_matches, signing_key
from ._smooth import smoothed_rates

__all__ = [
    "FAMILY_NAMES",
    "BoostedHazard",
    "CauseSpecificCox",
    "ChampionModel",
    "HazardModel",
    "SurvivalForest",
    "TenureLifeTable",
    "check_fittable",
    "future_rows",
    "incidence_from_hazards",
    "keep_key_outside",
    "landmark_months",
    "landmark_snapshots",
    "load_model",
    "make_model",
    "min_events_setting",
    "observed_incidence",
    "read_manifest",
    "save_model",
    "score_customers",
    "sign",
    "signature_matches",
    "signing_key",
    "smoothed_rates",
    "survival_and_incidence",
    "survival_from_hazards",
    "uptake_incidence",
    "valid_hazards",
]
