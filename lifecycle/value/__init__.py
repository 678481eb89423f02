"""Value: lifetime value, the expected value of offers, and offer effects from past campaigns
(the average effect, and each customer's own)."""

from ._campaigns import campaign_follow_up, estimate_offer_effects
from ._effects import (
    EVENTS_PER_FEATURE,
    OfferEffectModel,
    campaign_covariates,
    customer_offer_effects,
)
from ._hazards import HazardInput, read_hazards
from ._lifetime import (
    ValueSettings,
    check_horizon,
    discount_factors,
    lifetime_value,
    monthly_discount_rate,
    value_settings,
)
from ._money import MONEY_COLUMNS, round_money
from ._offer_value import offer_values

__all__ = [
    "EVENTS_PER_FEATURE",
    "MONEY_COLUMNS",
    "HazardInput",
    "OfferEffectModel",
    "ValueSettings",
    "campaign_covariates",
    "campaign_follow_up",
    "check_horizon",
    "customer_offer_effects",
    "discount_factors",
    "estimate_offer_effects",
    "lifetime_value",
    "monthly_discount_rate",
    "offer_values",
    "read_hazards",
    "round_money",
    "value_settings",
]
