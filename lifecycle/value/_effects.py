"""Offer effects that differ between customers, learnt from a randomised campaign.

The follow-up of one offer's campaign (`campaign_follow_up`: months since the offer, the target
event, the other exits censoring it) is joined to each customer's features as they stood when
the offer was made (`campaign_covariates`). A cause-specific Cox model of the target's hazard
with the arm, the features and arm × feature interactions gives each customer its own hazard
ratio; the interactions are shrunk toward the average effect by a ridge penalty chosen on
held-out customers by the Qini coefficient, and dropped altogether when a likelihood-ratio test
finds no evidence that the effect varies.
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
import pandas as pd
from lifelines import CoxPHFitter
from scipy import stats
from sklearn.model_selection import StratifiedKFold

from .._warnings import library_warnings
from ..errors import UsageError
from ..evaluation import qini_coefficient

log = logging.getLogger(__name__)

DEFAULT_PENALIZERS = (0.0001, 0.001, 0.01, 0.1, 1.0)
#: Target events a campaign must hold per feature before the test of variation is tried:
#: common practice for Cox models is at least 10 events per coefficient (Peduzzi et al. 1995,
#: J Clin Epidemiol 48:1503; the reference from memory); with fewer, the unpenalised
#: likelihood-ratio test finds variation that is not there (a campaign of 120 customers with
#: 6 events "found" own ratios from 0.002 to 20).
EVENTS_PER_FEATURE = 10
EFFECT_COLUMNS = ["customer_id", "offer_month", "offered", "hazard_ratio", "log_hazard_ratio"]
_ARM = "offered"


@dataclass(frozen=True)
class OfferEffectModel:
    """Per-customer hazard ratios of one offer, as `customer_offer_effects` learnt them.

    Attributes
    ----------
    effects
        One row per campaign customer: ``customer_id``, ``offer_month``, ``offered``,
        ``hazard_ratio`` (the customer's predicted ratio of the target hazard if offered to it
        if not) and ``log_hazard_ratio``.
    average_hazard_ratio
        The campaign's average effect: the Cox hazard ratio of offered against held out with no
        other covariate (as `estimate_offer_effects`).
    varying
        True when the per-customer ratios differ (the test found variation and the shrunk
        interactions ranked held-out customers better than the average); False when every
        customer gets ``average_hazard_ratio``.
    lr_statistic, lr_df, lr_p_value
        The likelihood-ratio test of the interactions (no penalty): twice the gain in the Cox
        partial log-likelihood from adding every arm × feature interaction to a model of the
        arm and the features, against a chi-squared law with ``lr_df`` degrees of freedom.
    penalizer
        The chosen ridge penalty on the interactions (NaN when the average is used).
    cross_validation
        For each penalty tried (``penalizer``), the mean over held-out folds of the Cox partial
        log-likelihood per customer (``log_likelihood``, which chooses the penalty) and of the
        Qini coefficient (``qini``, with its spread ``qini_sd``).
    features
        The features used (constant ones dropped), with their ``mean`` and ``sd`` on the
        campaign customers and the ``interaction`` coefficient per standard deviation (0 when
        the average is used).
    intercept
        The log hazard ratio of a customer at the campaign's mean features.
    reason
        One sentence: why the per-customer or the average effect is used.
    covariance
        The estimated covariance of the coefficients that make the ratios, from the final
        lifelines fit's ``variance_matrix_`` (the inverse of the penalised information):
        rows and columns ``intercept`` and the features (the interactions per standard
        deviation) when ``varying``, else ``intercept`` alone (the average effect's log
        ratio). Draws of the coefficients from the normal law with this covariance carry the
        effects' uncertainty (`lifecycle.decisions.effect_draws`). ``None`` when not known.
    """

    effects: pd.DataFrame
    average_hazard_ratio: float
    varying: bool
    lr_statistic: float
    lr_df: int
    lr_p_value: float
    penalizer: float
    cross_validation: pd.DataFrame
    features: pd.DataFrame
    intercept: float
    reason: str
    covariance: pd.DataFrame | None = None

    def predict_hazard_ratio(self, covariates: pd.DataFrame) -> np.ndarray:
        """Each customer's hazard ratio from its features (the columns of ``features``).

        .. math:: \\mathrm{HR}_i = \\exp\\big(b_0 + \\textstyle\\sum_j \\gamma_j
                  (x_{ij} - \\bar x_j) / s_j\\big)

        with :math:`b_0` = ``intercept`` and :math:`\\gamma_j` the interactions; every
        customer gets ``average_hazard_ratio`` when ``varying`` is False.
        """
        if not self.varying:
            return np.full(len(covariates), self.average_hazard_ratio)
        z = _standardised(covariates, self.features)
        return np.exp(self.intercept + z @ self.features["interaction"].to_numpy())


def campaign_covariates(
    panel: pd.DataFrame, follow: pd.DataFrame, columns: Sequence[str]
) -> pd.DataFrame:
    """Each followed-up customer's features in the panel row of its offer month.

    The panel row of month m holds what was known at the end of month m − 1 (DEVELOPERS.md,
    the panel contract), so these are the features as they stood when the offer was made.

    Parameters
    ----------
    panel
        A customer-month panel (`build_panel`) covering the offer months.
    follow
        `campaign_follow_up` of one offer (``customer_id``, ``offer_month``, ...).
    columns
        Numeric panel columns to take.

    Returns
    -------
    pandas.DataFrame
        ``columns`` as float, one row per row of ``follow``, in its order and index.
    """
    missing = [c for c in columns if c not in panel.columns]
    if missing:
        raise UsageError(f"the panel has no column {missing}; it has {list(panel.columns)}")
    keys = pd.MultiIndex.from_arrays(
        [panel["customer_id"].astype(str).to_numpy(), panel["month"].astype(str).to_numpy()]
    )
    wanted = pd.MultiIndex.from_arrays(
        [follow["customer_id"].astype(str).to_numpy(), follow["offer_month"].astype(str)]
    )
    position = keys.get_indexer(wanted)
    if (position < 0).any():
        lost = follow.loc[position < 0, "customer_id"].astype(str).head(5).tolist()
        raise UsageError(
            f"{int((position < 0).sum())} campaign rows have no panel row in their offer month "
            f"(for example {lost}); build the panel over a window that includes the offer month"
        )
    values = panel[list(columns)].to_numpy(dtype=np.float64)[position]
    return pd.DataFrame(values, columns=list(columns), index=follow.index)


def customer_offer_effects(
    follow: pd.DataFrame,
    covariates: pd.DataFrame,
    *,
    penalizers: Sequence[float] = DEFAULT_PENALIZERS,
    folds: int = 5,
    alpha: float = 0.05,
    seed: int = 0,
) -> OfferEffectModel:
    """Learn each campaign customer's hazard ratio of an offer on its target cause.

    Model (cause-specific Cox on months since the offer; other exits censor, so the ratio is
    of the target's cause-specific hazard with the other causes competing):

    .. math::

        h_i(k) = h_0(k)\\exp\\big(\\beta\\,a_i + \\textstyle\\sum_j \\theta_j z_{ij}
                 + a_i \\sum_j \\gamma_j z_{ij}\\big),
        \\qquad \\log \\mathrm{HR}_i = \\beta + \\textstyle\\sum_j \\gamma_j z_{ij}

    with :math:`a_i` = 1 if offered, :math:`z_{ij}` the features standardised on the campaign
    customers, and the ridge penalty :math:`\\tfrac{\\lambda}{2}\\sum_j \\gamma_j^2` on the
    interactions only (lifelines' per-coefficient ``penalizer``; :math:`\\beta`, :math:`\\theta`
    unpenalised), which shrinks every customer's ratio toward the common one.

    Steps: (0) with fewer than `EVENTS_PER_FEATURE` target events per feature, every customer
    gets the average effect, untested (``lr_p_value`` NaN, no cross-validation rows);
    (1) a likelihood-ratio test of :math:`\\gamma = 0` without penalty (the test of
    variation); (2) cross-fitting: the customers are split into ``folds`` folds (stratified by
    arm and event); for each :math:`\\lambda` in ``penalizers`` and each fold, the model is
    fitted on the other folds and scored on the fold by its Cox partial log-likelihood per
    customer (lifelines' ``score``; the held-out form of the cross-validated partial likelihood
    of Verweij & van Houwelingen 1993) and by the Qini coefficient (`qini_coefficient`: score
    :math:`-\\log\\mathrm{HR}_i`, response = no target event in the follow-up); (3) the
    :math:`\\lambda` with the best mean held-out partial likelihood is refitted on everyone.
    Its per-customer ratios are used if the test's p-value is below ``alpha`` and its mean
    held-out Qini is above 0 (the Qini of a constant score, i.e. of the average effect);
    otherwise every customer gets the average effect. The penalty is chosen by the likelihood,
    not the Qini, because the Qini judges only the order of the customers, which hardly moves
    with :math:`\\lambda`, while the plan needs the size of each effect too. The Qini's response
    ignores when the event happened and counts a customer censored before the window's end
    (by the extract) as kept: read it on campaigns whose window has passed.

    Parameters
    ----------
    follow
        `campaign_follow_up` of one offer: ``customer_id``, ``offer_month``, ``offered``,
        ``duration``, ``event``; one row per customer (the test assumes independent rows).
    covariates
        Numeric features, one row per row of ``follow`` (`campaign_covariates`), no NaN.
    penalizers
        Ridge penalties tried on the interactions (positive).
    folds
        Held-out folds for choosing the penalty (>= 2).
    alpha
        Significance level of the test of variation.
    seed
        Seed of the fold split.

    Returns
    -------
    OfferEffectModel
    """
    data, features = _design(follow, covariates, penalizers, folds, alpha)
    z_cols = [f"z_{i}" for i in range(len(features))]
    x_cols = [f"x_{i}" for i in range(len(features))]
    events = int(data["event"].sum())
    if events < EVENTS_PER_FEATURE * len(x_cols):
        average, covariance = _average_effect(data)
        lr = p_value = float("nan")
        cv = pd.DataFrame(columns=["penalizer", "log_likelihood", "qini", "qini_sd"], dtype=float)
        best = {"qini": float("nan")}
        varying = False
    else:
        average, lr, p_value, covariance = _interaction_test(data, z_cols, x_cols)
        cv = _cross_validate(data, x_cols, penalizers, folds, seed)
        best = cv.loc[cv["log_likelihood"].idxmax()]
        varying = p_value < alpha and best["qini"] > 0
    gamma, intercept, penalizer = np.zeros(len(x_cols)), average, float("nan")
    if varying:
        penalizer = float(best["penalizer"])
        final = _fit(data, _penalty(data, x_cols, penalizer))
        gamma = final.params_[x_cols].to_numpy()
        intercept = float(final.params_[_ARM])
        covariance = _coefficient_covariance(final, x_cols, features["feature"].tolist())
    reason = _reason(varying, p_value, alpha, penalizer, float(best["qini"]), events, len(x_cols))
    log.info("offer effects: %s", reason)
    log_hr = intercept + data[z_cols].to_numpy() @ gamma
    effects = pd.DataFrame(
        {
            "customer_id": follow["customer_id"].to_numpy(),
            "offer_month": follow["offer_month"].to_numpy(),
            "offered": follow["offered"].to_numpy(),
            "hazard_ratio": np.exp(log_hr),
            "log_hazard_ratio": log_hr,
        },
        columns=EFFECT_COLUMNS,
    )
    return OfferEffectModel(
        effects=effects,
        average_hazard_ratio=float(np.exp(average)),
        varying=bool(varying),
        lr_statistic=lr,
        lr_df=len(x_cols),
        lr_p_value=p_value,
        penalizer=penalizer,
        cross_validation=cv,
        features=features.assign(interaction=gamma),
        intercept=float(intercept),
        reason=reason,
        covariance=covariance,
    )


def _average_effect(data: pd.DataFrame) -> tuple[float, pd.DataFrame]:
    """The average log hazard ratio (arm only) and its variance (as a 1 × 1 covariance
    labelled ``intercept``)."""
    arm_only = _fit(data[["duration", "event", _ARM]], 0.0)
    return float(arm_only.params_[_ARM]), _coefficient_covariance(arm_only, [], [])


def _interaction_test(
    data: pd.DataFrame, z_cols: list[str], x_cols: list[str]
) -> tuple[float, float, float, pd.DataFrame]:
    """The average log hazard ratio and its variance (`_average_effect`), and the
    likelihood-ratio statistic and p-value of the interactions (arm + features + interactions
    against arm + features, no penalty)."""
    average, covariance = _average_effect(data)
    reduced = _fit(data[["duration", "event", _ARM, *z_cols]], 0.0)
    full = _fit(data, 0.0)
    lr = max(2.0 * (full.log_likelihood_ - reduced.log_likelihood_), 0.0)
    return average, float(lr), float(stats.chi2.sf(lr, len(x_cols))), covariance


def _coefficient_covariance(
    fitter: CoxPHFitter, x_cols: list[str], names: list[str]
) -> pd.DataFrame:
    """The covariance of (arm, interactions) from a fit, labelled ``intercept`` + ``names``."""
    keep = [_ARM, *x_cols]
    matrix = fitter.variance_matrix_.loc[keep, keep].to_numpy(dtype=np.float64)
    labels = ["intercept", *names]
    return pd.DataFrame(matrix, index=labels, columns=labels)


def _reason(
    varying: bool,
    p_value: float,
    alpha: float,
    penalizer: float,
    qini: float,
    events: int,
    features: int,
) -> str:
    if events < EVENTS_PER_FEATURE * features:
        return (
            f"too few target events ({events}) to learn how the effect varies over {features} "
            f"features (at least {EVENTS_PER_FEATURE} a feature, {EVENTS_PER_FEATURE * features}): "
            "every customer gets the average effect"
        )
    if varying:
        return (
            f"the effect varies (likelihood-ratio test p = {p_value:.3g}) and the shrunk "
            f"interactions (penalizer {penalizer:g}) ranked held-out customers with a Qini "
            f"coefficient of {qini:.3f}"
        )
    if p_value >= alpha:
        return (
            f"no evidence that the effect varies (likelihood-ratio test p = {p_value:.3g} >= "
            f"{alpha:g}): every customer gets the average effect"
        )
    return (
        f"the effect varies (p = {p_value:.3g}) but the shrunk interactions ranked held-out "
        f"customers no better than the average effect (Qini {qini:.3f}): every customer gets it"
    )


def _design(
    follow: pd.DataFrame,
    covariates: pd.DataFrame,
    penalizers: Sequence[float],
    folds: int,
    alpha: float,
) -> tuple[pd.DataFrame, pd.DataFrame]:
    needed = {"customer_id", "offer_month", "offered", "duration", "event"}
    if not needed <= set(follow.columns):
        raise UsageError(
            f"follow lacks the columns {sorted(needed - set(follow.columns))}; pass the result "
            "of campaign_follow_up"
        )
    if len(covariates) != len(follow):
        raise UsageError(
            f"covariates has {len(covariates)} rows but follow has {len(follow)}; pass one row "
            "per follow-up row (campaign_covariates)"
        )
    if not penalizers or any(not (np.isfinite(p) and p > 0) for p in penalizers):
        raise UsageError(f"penalizers was {list(penalizers)!r} but must be positive numbers")
    if isinstance(folds, bool) or not isinstance(folds, int) or folds < 2:
        raise UsageError(f"folds was {folds!r} but is expected to be a whole number >= 2")
    if not 0 < alpha < 1:
        raise UsageError(f"alpha was {alpha!r} but is expected to lie between 0 and 1")
    x = covariates.to_numpy(dtype=np.float64)
    if not np.isfinite(x).all():
        bad = covariates.columns[~np.isfinite(x).all(axis=0)].tolist()
        raise UsageError(f"covariates {bad} hold missing or infinite values; fill or drop them")
    offered = follow["offered"].to_numpy(dtype=np.float64)
    event = follow["event"].to_numpy(dtype=np.float64)
    for name, values in (("offered", offered), ("event", event)):
        if not np.isin(values, (0.0, 1.0)).all():
            raise UsageError(f"follow column {name!r} must hold only 0 and 1")
    if follow["customer_id"].duplicated().any():
        log.warning(
            "offer effects: some customers have several campaign rows; the rows are treated "
            "as independent, so the test of variation is too ready to find it"
        )
    for arm in (1.0, 0.0):
        if not (event[offered == arm] == 1).any():
            raise UsageError(
                "each arm needs at least one target event to estimate an effect; the "
                f"{'offered' if arm else 'held-out'} arm has none"
            )
    mean, sd = x.mean(axis=0), x.std(axis=0)
    keep = sd > 0
    if not keep.all():
        log.info("offer effects: constant features left out: %s", covariates.columns[~keep])
    features = pd.DataFrame(
        {"feature": covariates.columns[keep], "mean": mean[keep], "sd": sd[keep]}
    )
    z = (x[:, keep] - mean[keep]) / sd[keep]
    data = pd.DataFrame(
        {"duration": follow["duration"].to_numpy(dtype=np.float64), "event": event, _ARM: offered}
    )
    for i in range(z.shape[1]):
        data[f"z_{i}"] = z[:, i]
    for i in range(z.shape[1]):
        data[f"x_{i}"] = offered * z[:, i]
    return data, features


def _cross_validate(
    data: pd.DataFrame, x_cols: list[str], penalizers: Sequence[float], folds: int, seed: int
) -> pd.DataFrame:
    strata = 2 * data[_ARM].to_numpy().astype(int) + data["event"].to_numpy().astype(int)
    split = StratifiedKFold(n_splits=folds, shuffle=True, random_state=seed)
    qini = {p: [] for p in penalizers}
    loglik = {p: [] for p in penalizers}
    with library_warnings("offer effects"):  # e.g. a stratum smaller than the folds
        splits = list(split.split(data, strata))
    for train, test in splits:
        fit_part, held = data.iloc[train], data.iloc[test]
        for p in penalizers:
            fit = _fit(fit_part, _penalty(data, x_cols, p))
            # x_cols hold offered·z; score every held-out customer as if offered
            z = held[[c.replace("x_", "z_") for c in x_cols]].to_numpy()
            log_hr = z @ fit.params_[x_cols].to_numpy()
            qini[p].append(
                qini_coefficient(-log_hr, held[_ARM].to_numpy(), 1 - held["event"].to_numpy())
            )
            loglik[p].append(fit.score(held, scoring_method="log_likelihood"))
    return pd.DataFrame(
        {
            "penalizer": list(penalizers),
            "log_likelihood": [float(np.mean(v)) for v in loglik.values()],
            "qini": [float(np.mean(v)) for v in qini.values()],
            "qini_sd": [float(np.std(v)) for v in qini.values()],
        }
    )


def _penalty(data: pd.DataFrame, x_cols: list[str], penalizer: float) -> np.ndarray:
    covariates = [c for c in data.columns if c not in ("duration", "event")]
    return np.array([penalizer if c in x_cols else 0.0 for c in covariates])


def _fit(data: pd.DataFrame, penalizer: float | np.ndarray) -> CoxPHFitter:
    fitter = CoxPHFitter(penalizer=penalizer)
    with library_warnings("offer effects"):
        fitter.fit(data, "duration", "event")
    return fitter


def _standardised(covariates: pd.DataFrame, features: pd.DataFrame) -> np.ndarray:
    names = features["feature"].tolist()
    missing = [c for c in names if c not in covariates.columns]
    if missing:
        raise UsageError(f"covariates lack the features {missing} the effects were learnt on")
    x = covariates[names].to_numpy(dtype=np.float64)
    return (x - features["mean"].to_numpy()) / features["sd"].to_numpy()
