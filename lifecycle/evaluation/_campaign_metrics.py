"""Campaign metrics in the backtest: the expected maximum profit of the churn scores (``emp``)
and the Qini coefficient of per-customer offer effects on a randomised campaign (``qini``).

``emp`` judges a churn ranking as a retention campaign would use it (`expected_maximum_profit`,
Verbraken, Verbeke & Baesens 2013): one value per family, horizon and cutoff of the ``churn``
cause, with the money settings of ``[evaluation]``.

``qini`` judges the per-customer offer effects (`lifecycle.value.customer_offer_effects`) on a
past campaign with a random hold-out whose offer month lies in a cutoff's outcome window
(after the cutoff, up to its longest scored horizon) and whose effect window has passed by the
extract month. The campaign's customers are split into folds (stratified by arm and target
event); the effect model is fitted on the other folds (the customers not held out of the fit)
and ranks the fold's customers by predicted effect (``−log HR``: most helped first); the Qini
coefficient (`qini_coefficient`, response = no target event in the effect window) of each fold
is averaged over the folds. The row goes to the family ``offer_effect:<offer>``, the offer's
target cause and the horizon of its effect window.
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass

import numpy as np
import pandas as pd
from lifelines.exceptions import ConvergenceError
from sklearn.model_selection import StratifiedKFold

from .._months import format_month
from .._warnings import library_warnings
from ..config import Config, section
from ..data import Tables
from ..errors import UsageError
from ._profit import expected_maximum_profit
from ._uplift import qini_coefficient

log = logging.getLogger(__name__)

CAMPAIGN_METRICS = ("emp", "qini")
EFFECT_FAMILY_PREFIX = "offer_effect:"
QINI_FOLDS = 5


@dataclass(frozen=True)
class CampaignMetricSettings:
    """The ``[evaluation]`` settings (defaults: Verbraken et al. 2013's worked setting)."""

    emp_clv: float = 200.0
    emp_incentive_cost: float = 10.0
    emp_contact_cost: float = 1.0
    emp_alpha: float = 6.0
    emp_beta: float = 14.0
    qini_min_rows: int = 200
    effect_features: tuple[str, ...] = ()


def campaign_metric_settings(config: Config | None) -> CampaignMetricSettings:
    """Read the ``[evaluation]`` section of a config (defaults where it is silent)."""
    raw = section(config, "evaluation")  # checked against the settings schema
    base = CampaignMetricSettings()
    numbers = {
        name: float(raw.get(name, getattr(base, name)))
        for name in ("emp_clv", "emp_incentive_cost", "emp_contact_cost", "emp_alpha", "emp_beta")
    }
    return CampaignMetricSettings(
        **numbers,
        qini_min_rows=int(raw.get("qini_min_rows", base.qini_min_rows)),
        effect_features=tuple(raw.get("effect_features", base.effect_features)),
    )


def churn_emp(
    risk: np.ndarray, code: np.ndarray, months: np.ndarray, h: int, settings: CampaignMetricSettings
) -> float:
    """EMP of one churn ranking at horizon ``h``: churners are the customers whose follow-up
    ended with churn (``code == EVENT``) within ``h`` months; everyone else (kept, exited by
    another cause, or censored first) counts as a non-churner."""
    from ._outcomes import EVENT

    churned = (code == EVENT) & (months <= h)
    return expected_maximum_profit(
        risk,
        churned.astype(np.float64),
        clv=settings.emp_clv,
        incentive_cost=settings.emp_incentive_cost,
        contact_cost=settings.emp_contact_cost,
        alpha=settings.emp_alpha,
        beta=settings.emp_beta,
    )


def cross_fitted_qini(
    follow: pd.DataFrame, covariates: pd.DataFrame, *, folds: int = QINI_FOLDS, seed: int = 0
) -> float:
    """Mean over ``folds`` held-out folds of the Qini coefficient of effects fitted on the
    other folds (`lifecycle.value.customer_offer_effects`), ranked by ``−log HR``.

    A fold whose fit falls back to the average effect ranks every customer alike: its Qini is
    0, the value of a constant score.
    """
    from ..value import customer_offer_effects  # value imports evaluation: no import at load

    follow = follow.reset_index(drop=True)
    covariates = covariates.reset_index(drop=True)
    offered = follow["offered"].to_numpy(dtype=np.float64)
    event = follow["event"].to_numpy(dtype=np.float64)
    strata = 2 * offered.astype(int) + event.astype(int)
    split = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    with library_warnings("campaign metrics"):  # e.g. a stratum smaller than the folds
        splits = list(split.split(follow, strata))
    values = []
    for train, test in splits:
        model = customer_offer_effects(
            follow.iloc[train].reset_index(drop=True),
            covariates.iloc[train].reset_index(drop=True),
            seed=seed,
        )
        score = -np.log(model.predict_hazard_ratio(covariates.iloc[test]))
        values.append(qini_coefficient(score, offered[test], 1.0 - event[test]))
    return float(np.mean(values))


PanelBuilder = Callable[[Tables, int, Config], pd.DataFrame]


@dataclass
class CampaignQini:
    """The ``qini`` rows of a backtest; each campaign is scored once and reused at every
    cutoff whose outcome window holds it."""

    tables: Tables
    config: Config
    settings: CampaignMetricSettings
    build_snapshot_fn: PanelBuilder

    def __post_init__(self) -> None:
        self._done: dict[tuple[str, int], dict | None] = {}

    def rows(self, cutoff: int, usable: list[int]) -> list[dict]:
        """The ``qini`` rows of the campaigns in the outcome window of ``cutoff``."""
        campaigns = self.tables.campaigns
        if campaigns is None or len(campaigns) == 0 or not usable:
            return []
        from ..decisions import offers_from_config  # decisions import value, which imports us

        offers = {o.name: o for o in offers_from_config(self.config)}
        out = []
        pairs = campaigns[["offer", "month"]].drop_duplicates()
        for name, month in pairs.itertuples(index=False):
            month = int(month)
            if not cutoff < month <= cutoff + max(usable):
                continue
            if str(name) not in offers:
                log.info("qini: campaign %r has no [[offers]] entry (target, months)", name)
                continue
            key = (str(name), month)
            if key not in self._done:
                self._done[key] = self._score(offers[str(name)], month)
            if self._done[key] is not None:
                out.append({**self._done[key], "cutoff": format_month(cutoff)})
        return out

    def _score(self, offer, month: int) -> dict | None:
        from ..value import campaign_follow_up

        where = f"qini: campaign {offer.name!r} of {format_month(month)}"
        if not self.settings.effect_features:
            log.info("%s: no [evaluation] effect_features to learn effects from: no row", where)
            return None
        if month + offer.months > self.tables.extract_month:
            log.info("%s: its %d-month effect window has not passed: no row", where, offer.months)
            return None
        follow = campaign_follow_up(
            self.tables, offer.name, target=offer.target, months=offer.months
        )
        follow = follow[follow["offer_month"] == format_month(month)].reset_index(drop=True)
        follow, covariates = self._with_features(follow, month, where)
        if len(follow) < self.settings.qini_min_rows or follow["offered"].nunique() < 2:
            log.info(
                "%s: %d customers followed up (both arms needed, at least %d): no row",
                where, len(follow), self.settings.qini_min_rows,
            )  # fmt: skip
            return None
        if self._too_few_events(follow, covariates, where):
            return None
        try:
            value = cross_fitted_qini(follow, covariates)
        except (UsageError, ConvergenceError) as exc:  # e.g. a fold's arm without an event
            log.warning("%s: the effects could not be learnt (%s): no row", where, exc)
            return None
        log.info("%s: cross-fitted Qini %.3f on %d customers", where, value, len(follow))
        return dict(
            family=f"{EFFECT_FAMILY_PREFIX}{offer.name}",
            cause=offer.target,
            horizon=int(offer.months),
            metric="qini",
            value=value,
            n=len(follow),
            events=int(follow["event"].sum()),
        )

    @staticmethod
    def _too_few_events(follow: pd.DataFrame, covariates: pd.DataFrame, where: str) -> bool:
        """Whether each fold's fit would hold too few target events per feature to learn
        effects at all (`lifecycle.value.EVENTS_PER_FEATURE`): every fold would fall back to
        the average, a Qini of 0 that says nothing of the effects; no row then."""
        from ..value import EVENTS_PER_FEATURE

        events = int(follow["event"].sum())
        needed = EVENTS_PER_FEATURE * covariates.shape[1]
        if events * (QINI_FOLDS - 1) / QINI_FOLDS >= needed:
            return False
        log.info(
            "%s: %d target events, too few to learn effects over %d features (each fold's fit "
            "needs %d): no row", where, events, covariates.shape[1], needed,
        )  # fmt: skip
        return True

    def _with_features(
        self, follow: pd.DataFrame, month: int, where: str
    ) -> tuple[pd.DataFrame, pd.DataFrame]:
        """The followed-up customers with their features of the offer month (the snapshot at
        its previous month: what was known when the offer was made); rows without them are
        dropped (logged)."""
        snapshot = self.build_snapshot_fn(self.tables, month - 1, self.config)
        features = list(self.settings.effect_features)
        missing = [c for c in features if c not in snapshot.columns]
        if missing:
            raise UsageError(
                f"[evaluation] effect_features names {missing}, which the panel does not have; "
                f"numeric panel columns are e.g. {list(snapshot.columns[:12])}"
            )
        ids = pd.Index(snapshot["customer_id"].astype(str))
        position = ids.get_indexer(follow["customer_id"].astype(str))
        values = snapshot[features].to_numpy(dtype=np.float64)
        found = position >= 0
        found[found] &= np.isfinite(values[position[found]]).all(axis=1)
        if not found.all():
            log.info("%s: %d customers without every effect feature: left out", where,
                     int((~found).sum()))  # fmt: skip
        covariates = pd.DataFrame(values[position[found]], columns=features)
        return follow.loc[found].reset_index(drop=True), covariates
