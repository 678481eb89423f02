"""Each customer's own offer effect in the monthly cycle.

For every offer tried in a past randomised campaign (both arms, ``offered`` and ``held_out``,
in the campaigns table), `customer_effects` learns `lifecycle.value.customer_offer_effects`
from the campaign's follow-up and the customers' features in the offer month, then predicts
each scored customer's hazard ratio from the snapshot's features. The plan values each
customer's offer with that ratio (`lifecycle.value.offer_values` with ``hazard_ratios``), and
``scores.csv`` shows the resulting change in the target's cumulative incidence per offer
(`effect_columns`).

Settings: ``[value] customer_effects`` (default true; false: every customer gets the offer's
single ratio, as before) and ``[value] effect_features`` (panel columns; default: the automatic
choice of `default_effect_features`).
"""

from __future__ import annotations

import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from lifelines.exceptions import ConvergenceError

from .._layout import TERMINAL_CAUSES, UPTAKE_PREFIX, panel_layout
from ..config import Config
from ..data import Tables
from ..errors import UsageError

log = logging.getLogger(__name__)

HARM_TOLERANCE = 1e-9
"""A retention offer harms a customer when the own ratio exceeds 1 by more than this."""

STRONGER_BY = 0.1
"""An own effect is 'clearly stronger' than the average when its log hazard ratio lies at
least this far beyond the average's (about 10 % more change in the hazard; common practice
for a difference worth telling staff, not a statistical test)."""

_NOT_EFFECT_FEATURES = ("season_sin", "season_cos", "tenure_stop")
_NOT_EFFECT_PREFIXES = ("nearby_", "offer_")


@dataclass(frozen=True)
class CustomerEffects:
    """One offer's effect on each scored customer.

    Attributes
    ----------
    offer
        The offer's name.
    model
        The `lifecycle.value.OfferEffectModel` learnt from the offer's randomised campaign.
    hazard_ratio
        Each scored customer's predicted hazard ratio of the offer's target cause if offered
        (a Series indexed by ``customer_id``, in the snapshot's order); every customer gets the
        campaign's average ratio when ``model.varying`` is False.
    features
        The features the effects were learnt on (before constant ones were dropped).
    covariates
        The scored customers' features the ratios were predicted from (missing values at the
        campaign's mean, each held within the campaign's range), in the snapshot's order; the
        policy comparison draws the ratios' uncertainty on exactly these.
    """

    offer: str
    model: object
    hazard_ratio: pd.Series
    features: tuple[str, ...]
    covariates: pd.DataFrame | None = None

    @property
    def varying(self) -> bool:
        """Whether customers get their own ratios (else every one gets the average)."""
        return bool(getattr(self.model, "varying", False))

    @property
    def average_hazard_ratio(self) -> float:
        """The campaign's average hazard ratio (offered against held out)."""
        return float(getattr(self.model, "average_hazard_ratio", np.nan))


def default_effect_features(
    panel: pd.DataFrame, snapshot: pd.DataFrame, area_features: Sequence[str] = ()
) -> list[str]:
    """The features effects are learnt on when ``[value] effect_features`` is empty.

    ``tenure_start`` and every numeric feature of the panel (`panel_layout`) that the snapshot
    also has, except:
    area-level features (``area_features``: the areas table's attributes and the local move
    rate, which can act as proxies for protected characteristics), nearby adoption and
    past-offer features (``nearby_*``, ``offer_*``: the campaign itself changes them), season
    and ``tenure_stop`` (season is one value in a campaign month; tenure is ``tenure_start``).
    """
    skip = set(area_features) | set(_NOT_EFFECT_FEATURES)
    out = []
    for column in ("tenure_start", *panel_layout(panel).features):
        if column in skip or column.startswith(_NOT_EFFECT_PREFIXES):
            continue
        if column not in snapshot.columns or not pd.api.types.is_numeric_dtype(panel[column]):
            continue
        out.append(column)
    return out


def customer_effects(
    tables: Tables,
    config: Config,
    offers: Sequence[object],
    snapshot: pd.DataFrame,
    *,
    panel: pd.DataFrame | None = None,
) -> dict[str, CustomerEffects]:
    """Each scored customer's own effect of every offer with a past randomised campaign.

    For each offer of ``offers`` whose name has both arms in ``tables.campaigns``: the follow-up
    of its campaign (`lifecycle.value.campaign_follow_up`, on the offer's target over its effect
    months), the customers' features in their offer month (`lifecycle.value.campaign_covariates`
    from ``panel``), `lifecycle.value.customer_offer_effects` on them, and its
    ``predict_hazard_ratio`` on the ``snapshot`` (the features at the end of the scoring month).
    A customer whose feature is missing in the snapshot gets the campaign's mean of it. Which
    offers got own effects, and why (the model's ``reason``), is logged.

    Parameters
    ----------
    tables, config
        The checked tables and the settings (``[value] customer_effects``, ``effect_features``).
    offers
        The offers (`lifecycle.decisions.Offer`: ``name``, ``target``, ``months``).
    snapshot
        The scoring snapshot with its spatial context (`snapshot_with_context`).
    panel
        A panel with context covering the campaign months (default: the panel of the extract
        month, built here).

    Returns
    -------
    dict
        Offer name → `CustomerEffects`; empty when the setting is off or no offer has a
        randomised campaign. An offer whose campaign cannot give an effect (no target event in
        an arm, or a fit that does not converge, as on a small campaign) is left out with a
        warning: it keeps its single hazard ratio.
    """
    from ..value import value_settings

    settings = value_settings(config)
    tried = _randomised_offers(tables, offers)
    if not settings.customer_effects or not tried:
        if tried:
            log.info("own offer effects are off ([value] customer_effects = false)")
        return {}
    if panel is None:
        from ._steps import panel_with_context

        panel = panel_with_context(tables, tables.extract_month, config)
    if settings.effect_features:
        features = list(settings.effect_features)
        _check_features(features, panel, snapshot)
    else:
        from ._steps import area_feature_names

        features = default_effect_features(panel, snapshot, area_feature_names(tables))
    out = {}
    for offer in tried:
        effect = _offer_effect(tables, offer, panel, snapshot, features)
        if effect is not None:
            out[offer.name] = effect
    return out


def _offer_effect(tables, offer, panel, snapshot, features) -> CustomerEffects | None:
    from ..value import campaign_covariates, campaign_follow_up, customer_offer_effects

    follow = campaign_follow_up(tables, offer.name, target=offer.target, months=offer.months)
    covariates = campaign_covariates(panel, follow, features)
    means = covariates.mean()
    try:
        model = customer_offer_effects(follow, covariates.fillna(means).fillna(0.0))
    except (UsageError, ConvergenceError, np.linalg.LinAlgError) as exc:
        # e.g. a campaign too small for every interaction: the offer keeps its single ratio
        log.warning(
            "offer %s: no effect per customer from its campaign, so its single hazard ratio is "
            "used (%s: %s)", offer.name, type(exc).__name__, str(exc).split(". ")[0],
        )  # fmt: skip
        return None
    current = _within_campaign_range(
        snapshot[features].astype(np.float64).fillna(means).fillna(0.0), covariates, offer.name
    )
    ratio = pd.Series(
        model.predict_hazard_ratio(current),
        index=pd.Index(snapshot["customer_id"].to_numpy(), name="customer_id"),
        name=offer.name,
    )
    if model.varying:
        log.info(
            "offer %s: own effects for %d customers (hazard ratio %.3f to %.3f, average %.3f): "
            "%s", offer.name, len(ratio), ratio.min(), ratio.max(),
            model.average_hazard_ratio, model.reason,
        )  # fmt: skip
    else:
        log.info(
            "offer %s: every customer gets the average effect (hazard ratio %.3f): %s",
            offer.name, model.average_hazard_ratio, model.reason,
        )  # fmt: skip
    return CustomerEffects(offer.name, model, ratio, tuple(features), current)


def _within_campaign_range(
    current: pd.DataFrame, covariates: pd.DataFrame, offer: str
) -> pd.DataFrame:
    """The snapshot's features held within the range the campaign's customers spanned.

    The interactions are linear in the features, so a customer far outside the campaign's range
    (say 20 contract months left where the campaign only reached customers with at most 1) would
    get an effect extrapolated without limit; each feature is clipped to the campaign's minimum
    and maximum instead, and how many customers that touched is logged.
    """
    low, high = covariates.min(), covariates.max()
    outside = ((current < low) | (current > high)).any(axis=1)
    if outside.any():
        log.info(
            "offer %s: %d of %d customers lie outside the campaign's range of some feature; "
            "their effect is predicted at the nearest edge of that range",
            offer, int(outside.sum()), len(current),
        )  # fmt: skip
    return current.clip(lower=low, upper=high, axis=1)


def _randomised_offers(tables: Tables, offers: Sequence[object]) -> list[object]:
    campaigns = getattr(tables, "campaigns", None)
    if campaigns is None or campaigns.empty:
        return []
    arms = campaigns.groupby("offer", observed=True)["arm"].agg(lambda a: set(a.astype(str)))
    return [o for o in offers if o.name in arms.index and {"offered", "held_out"} <= arms[o.name]]


def _check_features(features: list[str], panel: pd.DataFrame, snapshot: pd.DataFrame) -> None:
    for frame, what in ((panel, "panel"), (snapshot, "snapshot")):
        missing = [c for c in features if c not in frame.columns]
        if missing:
            raise UsageError(
                f"[value] effect_features names {missing}, which the {what} does not have; "
                f"its numeric features are {list(panel_layout(panel).features)}"
            )
    text = [c for c in features if not pd.api.types.is_numeric_dtype(panel[c])]
    if text:
        raise UsageError(f"[value] effect_features must be numeric columns; {text} are not")


def own_hazard_ratios(effects: Mapping[str, CustomerEffects]) -> dict[str, pd.Series]:
    """The ``hazard_ratios`` argument of `lifecycle.value.offer_values`: offer → own ratios,
    for the offers whose effect varies (the others keep their single, average ratio)."""
    return {name: e.hazard_ratio for name, e in effects.items() if e.varying}


def effect_flags(
    effects: Mapping[str, CustomerEffects], offers: Sequence[object]
) -> tuple[pd.DataFrame | None, pd.DataFrame | None]:
    """The plan's ``harmed`` and ``responsive`` customer × offer frames (`make_plan`) from the
    own effects (``None``, ``None`` without any)."""
    if not effects:
        return None, None
    harmed, responsive = {}, {}
    for offer in offers:
        effect = effects.get(offer.name)
        if effect is None:
            continue
        ratio = effect.hazard_ratio
        harmed[offer.name] = pd.Series(harmful(offer, ratio.to_numpy()), index=ratio.index)
        responsive[offer.name] = stronger_than_average(effect, ratio.index)
    return pd.DataFrame(harmed), pd.DataFrame(responsive)


def harmful(offer: object, ratios: np.ndarray) -> np.ndarray:
    """Whether the offer is predicted to harm each customer: a retention offer (target a
    terminal cause) that raises the hazard (ratio > 1), or an uptake offer that lowers it."""
    ratios = np.asarray(ratios, dtype=np.float64)
    if str(offer.target).startswith(UPTAKE_PREFIX):
        return ratios < 1.0 - HARM_TOLERANCE
    if offer.target in TERMINAL_CAUSES:
        return ratios > 1.0 + HARM_TOLERANCE
    return np.zeros(len(ratios), dtype=bool)


def effect_columns(values: pd.DataFrame, offers: Sequence[object]) -> pd.DataFrame:
    """``customer_id`` and ``effect_<offer>`` for every offer: the change in the offer's target
    cumulative incidence over the value horizon if offered (``cif_change_<target>`` of
    `lifecycle.value.offer_values`; negative where a retention offer lowers the risk)."""
    ids = pd.unique(values["customer_id"])
    out = pd.DataFrame({"customer_id": ids})
    for offer in offers:
        rows = values.loc[values["offer"] == offer.name]
        column = f"cif_change_{offer.target}"
        change = rows.set_index("customer_id")[column] if column in rows else None
        out[f"effect_{offer.name}"] = (
            np.nan if change is None else change.reindex(ids).to_numpy(dtype=np.float64)
        )
    return out


def with_effect_columns(
    scores: pd.DataFrame, values: pd.DataFrame, offers: Sequence[object]
) -> pd.DataFrame:
    """``scores`` with `effect_columns` of the offer ``values`` appended, row for row."""
    effects = effect_columns(values, offers).set_index("customer_id")
    effects = effects.reindex(pd.Index(scores["customer_id"].to_numpy()))
    return scores.assign(**{c: effects[c].to_numpy() for c in effects.columns})


def effect_summary(effects: Mapping[str, CustomerEffects]) -> dict[str, dict[str, object]]:
    """Per offer with own effects: ``per_customer``, ``average_hazard_ratio``, ``reason``."""
    return {
        name: {
            "per_customer": e.varying,
            "average_hazard_ratio": e.average_hazard_ratio,
            "reason": str(getattr(e.model, "reason", "")),
        }
        for name, e in effects.items()
    }


def stronger_than_average(effect: CustomerEffects, customer_ids) -> pd.Series:
    """Whether each customer responds to the offer more than most: its own effect is among the
    strongest quarter of the scored customers' (common practice: the top quartile) and its log
    hazard ratio at least `STRONGER_BY` further from 0 than the average's, on the same side."""
    everyone = np.log(effect.hazard_ratio.to_numpy(dtype=np.float64))
    ratio = effect.hazard_ratio.reindex(pd.Index(customer_ids)).to_numpy(dtype=np.float64)
    own, average = np.log(ratio), np.log(effect.average_hazard_ratio)
    stronger = effect.varying & (np.sign(own) == np.sign(average))
    stronger &= np.abs(own) >= np.abs(average) + STRONGER_BY
    if average < 0:
        stronger &= own <= np.quantile(everyone, 0.25)
    else:
        stronger &= own >= np.quantile(everyone, 0.75)
    return pd.Series(stronger, index=pd.Index(customer_ids))
