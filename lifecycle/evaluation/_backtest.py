"""Out-of-time backtests: fit as of past cutoffs, score what happened next."""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np
import pandas as pd
from sklearn.base import clone

from .._months import format_month, parse_month
from .._progress import progress
from ..config import Config
from ..data import Tables
from ..errors import UsageError
from ..models import HazardModel, check_fittable, incidence_from_hazards
from ..panel import build_panel, build_snapshot, panel_layout
from ._calibration import calibration_table, lift_from_tables
from ._campaign_metrics import (
    CampaignMetricSettings,
    CampaignQini,
    campaign_metric_settings,
    churn_emp,
)
from ._metrics import brier_score, time_dependent_auc, uno_concordance
from ._outcomes import EVENT, observed_outcomes, outcome_for_cause

log = logging.getLogger(__name__)

PanelBuilder = Callable[[Tables, int, Config], pd.DataFrame]
AfterFit = Callable[[str, int, HazardModel, pd.DataFrame, np.ndarray], "pd.DataFrame | None"]
"""``(family, cutoff, fitted model, snapshot, hazards (n, T, K)) -> frame or None``."""
METRICS = (
    "uno_c",
    "auc",
    "brier",
    "lift_top_decile",
    "capture_top_decile",
    "mean_predicted",
    "observed",
)


@dataclass
class BacktestResult:
    """What `backtest` found.

    Attributes
    ----------
    metrics
        Tidy: ``family``, ``cause``, ``horizon``, ``cutoff`` (``YYYY-MM``), ``metric``, ``value``,
        ``n`` (customers evaluated), ``events`` (events of the cause within the horizon). The
        metrics are ``uno_c``, ``auc``, ``brier``, ``lift_top_decile``, ``capture_top_decile``,
        ``mean_predicted`` and ``observed`` (mean predicted and Aalen–Johansen observed
        cumulative incidence at the horizon); for the ``churn`` cause also ``emp``, the
        expected maximum profit per customer of the churn scores (`expected_maximum_profit`
        with the ``[evaluation]`` money settings). A past randomised campaign whose offer
        month lies in a cutoff's outcome window adds a ``qini`` row for the family
        ``offer_effect:<offer>`` (the offer's target cause, the horizon of its effect window):
        the cross-fitted Qini coefficient of the per-customer effects learnt from the
        ``[evaluation] effect_features`` (`lifecycle.evaluation._campaign_metrics`).
    champions
        Per cause: the ``family`` with the best mean ``uno_c`` over the cutoffs at the
        ``horizon`` used (12 months, else the largest evaluated), ties broken by the lower mean
        ``brier``; with both means.
    calibration
        Per family, cause, horizon and cutoff, the risk-decile table of `calibration_table`.
    importances
        ``family``, ``cutoff`` and the family's ``feature_importances_`` (``cause``,
        ``feature``, ``importance``, ``importance_sd``) from its fit at the latest cutoff, for
        the families that measure them (the survival forest); empty when none does.
    forecasts
        What ``after_fit`` returned for each family and cutoff, stacked (e.g. the uptake
        forecast each fit would have made; empty without ``after_fit``).
    """

    metrics: pd.DataFrame
    champions: pd.DataFrame
    calibration: pd.DataFrame
    importances: pd.DataFrame = field(default_factory=pd.DataFrame)
    forecasts: pd.DataFrame = field(default_factory=pd.DataFrame)


def backtest(
    tables: Tables,
    *,
    families: Mapping[str, HazardModel],
    cutoffs: Iterable[str | int],
    horizons: Sequence[int] = (3, 6, 12),
    config: Config | None = None,
    build_panel_fn: PanelBuilder | None = None,
    build_snapshot_fn: PanelBuilder | None = None,
    min_events: int | None = None,
    after_fit: AfterFit | None = None,
    after_fit_months: int = 0,
) -> BacktestResult:
    """Fit every family as of each past cutoff and score its predictions against what happened.

    For each cutoff c: the panel as of c (``build_panel_fn``; default `build_panel` plus the
    spatial context when `lifecycle.spatial.add_spatial_context` exists), a clone of each family
    fitted on it, the snapshot of the customers present at the end of c (``build_snapshot_fn``),
    their predicted cumulative incidence for months 1..max(horizons), and their observed
    follow-up (`observed_outcomes`) up to the extract month E. A horizon h is scored at c when
    ``c + h ≤ E`` (the status of every customer at h is then known); longer horizons of a late
    cutoff are skipped with a log line.

    Per family, cause and horizon h, with ``r_i = F̂_k(h | x_i)`` as the risk: Uno's
    concordance truncated after month h, the cumulative/dynamic AUC at h and the Brier score at
    h (`uno_concordance`, `time_dependent_auc`, `brier_score`), calibration by risk decile and
    lift and capture of the top decile (`calibration_table`, `lift_and_capture`). An uptake is
    scored on the customers not holding the product at c. Times on the metrics' axis: an event
    in month t is at t; a customer whose follow-up ends after month t without the event
    (censored, or for the concordance and AUC an exit by a competing cause, which those treat
    as censoring) is at ``t + ½``, after the events of month t as the monthly data says. The
    censoring distribution is estimated from the evaluated customers' own follow-up.

    Parameters
    ----------
    tables
        Checked input tables.
    families
        Name → unfitted model; each is cloned per cutoff, the given objects are not changed.
    cutoffs
        Past months (``YYYY-MM`` or month index), each before the extract month.
    horizons
        Months ahead to score.
    config
        Settings passed to the panel and snapshot builders.
    build_panel_fn
        ``(tables, as_of, config) -> panel``.
    build_snapshot_fn
        ``(tables, as_of, config) -> snapshot`` (the features for month as_of + 1). Default:
        `build_snapshot` plus spatial context if ``build_panel_fn`` is the default too, else the
        month-(c + 1) rows of ``build_panel_fn(tables, c + 1, config)`` with tenure ≥ 1, which
        hold exactly the features known at the end of c.
    min_events
        When given, each cutoff's panel must pass `lifecycle.models._fittable.check_fittable`
        with this many events of every cause (``[models] min_events``), else `InputError`
        before its fits; ``None`` fits whatever the panel holds.
    after_fit
        Called with each fitted family, its cutoff, the snapshot and its hazards for months
        1..max(max usable horizon, ``after_fit_months``), the ones the metrics come from; what
        it returns is stacked into ``forecasts``, so that a track record needs no fit of its
        own.
    """
    config = config or Config()
    families = _checked_families(families)
    horizons, cutoffs = _checked_times(tables, horizons, cutoffs)
    build_panel_fn, build_snapshot_fn = _builders(build_panel_fn, build_snapshot_fn)
    found = _Collected(settings=campaign_metric_settings(config))
    campaigns = CampaignQini(tables, config, found.settings, build_snapshot_fn)
    for cutoff in cutoffs:
        usable, panel, snapshot, outcomes = _cutoff_data(
            tables, cutoff, horizons, config, build_panel_fn, build_snapshot_fn, min_events
        )
        for j, (name, family) in enumerate(families.items()):
            step = cutoffs.index(cutoff) * len(families) + j
            what = f"cutoff {format_month(cutoff)}, family {name}"
            progress("backtest", step, len(cutoffs) * len(families), what)
            found.fit_family(
                name, family, cutoff, usable, panel, snapshot, outcomes, after_fit,
                after_fit_months,
            )  # fmt: skip
        found.rows.extend(campaigns.rows(cutoff, usable))
    return found.result()


def _checked_times(
    tables: Tables, horizons: Sequence[int], cutoffs: Iterable[str | int]
) -> tuple[list[int], list[int]]:
    """The horizons (whole months ≥ 1, ascending) and the checked cutoffs."""
    horizons = sorted({int(h) for h in horizons})
    if not horizons or horizons[0] < 1:
        raise UsageError(f"horizons were {list(horizons)} but must be whole months ≥ 1")
    return horizons, _checked_cutoffs(tables, cutoffs, horizons)


def _builders(
    build_panel_fn: PanelBuilder | None, build_snapshot_fn: PanelBuilder | None
) -> tuple[PanelBuilder, PanelBuilder]:
    """The panel and snapshot builders, with their defaults (see `backtest`)."""
    if build_snapshot_fn is None:
        build_snapshot_fn = (
            _default_snapshot if build_panel_fn is None else _snapshot_from(build_panel_fn)
        )
    return build_panel_fn or _default_panel, build_snapshot_fn


def _cutoff_data(
    tables: Tables,
    cutoff: int,
    horizons: list[int],
    config: Config,
    build_panel_fn: PanelBuilder,
    build_snapshot_fn: PanelBuilder,
    min_events: int | None,
) -> tuple[list[int], pd.DataFrame, pd.DataFrame, pd.DataFrame]:
    """At one cutoff: the horizons that can be scored, the panel to fit on, the snapshot to
    predict and its observed outcomes."""
    usable = [h for h in horizons if cutoff + h <= tables.extract_month]
    skipped = [h for h in horizons if h not in usable]
    if skipped:
        log.info(
            "backtest %s: horizons %s reach past the extract month %s; skipped",
            format_month(cutoff),
            skipped,
            format_month(tables.extract_month),
        )
    panel = build_panel_fn(tables, cutoff, config)
    if min_events is not None:
        where = f"backtest cutoff {format_month(cutoff)}: "
        check_fittable(panel, min_events=min_events, where=where)
    snapshot = build_snapshot_fn(tables, cutoff, config)
    outcomes = _aligned_outcomes(tables, cutoff, snapshot)
    log.info(
        "backtest %s: panel of %d rows, %d customers to predict",
        format_month(cutoff),
        len(panel),
        len(snapshot),
    )
    return usable, panel, snapshot, outcomes


@dataclass
class _Collected:
    """What the backtest gathers over cutoffs and families, until `result` stacks it."""

    rows: list[dict] = field(default_factory=list)
    calibrations: list[pd.DataFrame] = field(default_factory=list)
    importances: dict[str, pd.DataFrame] = field(default_factory=dict)
    forecasts: list[pd.DataFrame] = field(default_factory=list)
    settings: CampaignMetricSettings = field(default_factory=CampaignMetricSettings)

    def fit_family(
        self,
        name: str,
        family: HazardModel,
        cutoff: int,
        usable: list[int],
        panel: pd.DataFrame,
        snapshot: pd.DataFrame,
        outcomes: pd.DataFrame,
        after_fit: AfterFit | None,
        after_fit_months: int,
    ) -> None:
        """Fit a clone of one family at one cutoff, keep its importances and what
        ``after_fit`` makes of it, and score its predictions."""
        log.info("backtest %s: fitting %s", format_month(cutoff), name)
        model = clone(family).fit(panel)
        importance = getattr(model, "feature_importances_", None)
        if importance is not None and len(importance):  # cutoffs ascend: the latest stays
            self.importances[name] = importance.assign(family=name, cutoff=format_month(cutoff))
        hazards = model.hazard_array(snapshot, max(max(usable), after_fit_months))
        array = incidence_from_hazards(hazards[:, : max(usable)], len(model.terminal_causes_))
        if after_fit is not None:
            made = after_fit(name, cutoff, model, snapshot, hazards)
            if made is not None and len(made):
                self.forecasts.append(made.assign(family=name))
        self.score_family(name, model.causes_, array, cutoff, usable, outcomes)

    def score_family(
        self,
        name: str,
        causes: Sequence[str],
        array: np.ndarray,
        cutoff: int,
        usable: list[int],
        outcomes: pd.DataFrame,
    ) -> None:
        """The metrics and calibration of one fitted family at one cutoff, per cause and
        usable horizon, from its cumulative incidence ``array`` (customer, month, cause)."""
        for j, cause in enumerate(causes):
            months, code, at_risk = outcome_for_cause(outcomes, cause)
            if not at_risk.any():
                log.info("backtest %s: nobody at risk of %s", format_month(cutoff), cause)
                continue
            for h in usable:
                label = dict(family=name, cause=cause, horizon=h, cutoff=format_month(cutoff))
                values, calibration = _score(
                    months[at_risk], code[at_risk], array[at_risk, h - 1, j], h
                )
                if cause == "churn":
                    values["emp"] = churn_emp(
                        array[at_risk, h - 1, j], code[at_risk], months[at_risk], h, self.settings
                    )
                n = int(at_risk.sum())
                events = int(np.sum((code[at_risk] == EVENT) & (months[at_risk] <= h)))
                for metric, value in values.items():
                    self.rows.append(
                        {**label, "metric": metric, "value": value, "n": n, "events": events}
                    )
                self.calibrations.append(calibration.assign(**label))

    def result(self) -> BacktestResult:
        metrics = pd.DataFrame(
            self.rows,
            columns=["family", "cause", "horizon", "cutoff", "metric", "value", "n", "events"],
        )
        calibration = pd.concat(self.calibrations, ignore_index=True) if self.calibrations else None
        calibration = pd.DataFrame() if calibration is None else calibration
        if not calibration.empty:
            front = ["family", "cause", "horizon", "cutoff"]
            calibration = calibration[front + [c for c in calibration if c not in front]]
        found = (
            pd.concat(list(self.importances.values()), ignore_index=True)
            if self.importances
            else None
        )
        if found is not None:
            front = ["family", "cutoff"]
            found = found[front + [c for c in found if c not in front]]
        return BacktestResult(
            metrics=metrics,
            champions=champions(metrics),
            calibration=calibration,
            importances=found if found is not None else pd.DataFrame(),
            forecasts=(
                pd.concat(self.forecasts, ignore_index=True) if self.forecasts else pd.DataFrame()
            ),
        )


def champions(metrics: pd.DataFrame) -> pd.DataFrame:
    """Per cause, the family with the best mean Uno concordance, ties by the lower Brier score.

    The horizon is 12 months if it was scored, else the largest scored. Means are over
    cutoffs; a NaN concordance (no comparable pair) is left out of the mean.

    Returns
    -------
    pandas.DataFrame
        ``cause``, ``family``, ``horizon``, ``uno_c``, ``brier``.
    """
    columns = ["cause", "family", "horizon", "uno_c", "brier"]
    metrics = metrics[metrics["metric"].isin(METRICS)]  # the offer-effect rows hold no family
    if metrics.empty:
        return pd.DataFrame(columns=columns)
    out = []
    for cause, part in metrics.groupby("cause", sort=False):
        horizons = sorted(part["horizon"].unique())
        horizon = 12 if 12 in horizons else horizons[-1]
        at = part[part["horizon"] == horizon]
        means = at.pivot_table(index="family", columns="metric", values="value", aggfunc="mean")
        means = means.reindex(columns=["uno_c", "brier"])
        means = _with_valid_metric(means, cause)
        if means.empty:
            continue
        # equal concordances (to 12 places) are a tie, settled by the Brier score, then the name
        means["_c"] = -means["uno_c"].round(12)
        best = means.sort_values(["_c", "brier"], na_position="last", kind="stable")
        winner = best.index[0]
        out.append(
            dict(
                cause=cause,
                family=winner,
                horizon=int(horizon),
                uno_c=float(means.loc[winner, "uno_c"]),
                brier=float(means.loc[winner, "brier"]),
            )
        )
    return pd.DataFrame(out, columns=columns)


def _with_valid_metric(means: pd.DataFrame, cause: str) -> pd.DataFrame:
    """The families with a finite mean concordance or Brier score for ``cause``: a family
    whose metrics are all NaN (nothing could be scored) can never be the champion. A cause
    with no such family gets no champion (logged)."""
    valid = means[["uno_c", "brier"]].notna().any(axis=1)
    if not valid.all():
        log.warning(
            "backtest: %s: %s scored no valid concordance or Brier score, so cannot be its "
            "champion%s",
            cause, ", ".join(sorted(means.index[~valid])),
            "; it has no champion" if not valid.any() else "",
        )  # fmt: skip
    return means[valid]


# -- pieces ----------------------------------------------------------------------------------
def _score(
    months: np.ndarray, code: np.ndarray, risk: np.ndarray, h: int
) -> tuple[dict[str, float], pd.DataFrame]:
    """Every metric of one family, cause, horizon and cutoff."""
    is_event = code == EVENT
    values = dict.fromkeys(METRICS, float("nan"))
    calibration = calibration_table(months, code, risk, h)
    values["mean_predicted"] = float(np.mean(risk)) if risk.size else float("nan")
    overall = calibration_table(months, code, risk, h, groups=1)
    values["observed"] = float(overall["observed"].iloc[0])
    if risk.size < 2:
        return values, calibration
    values["lift_top_decile"], values["capture_top_decile"] = lift_from_tables(calibration, overall)
    # cause-specific time axis: anything but the event sits half a month after its month
    specific = months + 0.5 * (~is_event)
    if is_event.any():
        values["uno_c"] = uno_concordance(specific, is_event, risk, tau=h + 0.25)
    has_cases = np.any(is_event & (months <= h))
    if has_cases and specific.max() > h:
        values["auc"] = float(time_dependent_auc(specific, is_event, risk, [h])[0][0])
    # competing-risks time axis: only censoring moves
    graf = months + 0.5 * (code == 0)
    if graf.min() <= h < graf.max():
        values["brier"] = float(brier_score(graf, code, risk, [h], cause=EVENT)[0])
    return values, calibration


def _aligned_outcomes(tables: Tables, cutoff: int, snapshot: pd.DataFrame) -> pd.DataFrame:
    outcomes = observed_outcomes(tables, cutoff)
    ids = pd.Index(outcomes["customer_id"].astype(str))
    wanted = pd.Index(pd.Series(snapshot["customer_id"]).astype(str))
    where = ids.get_indexer(wanted)
    if np.any(where < 0):
        missing = wanted[where < 0]
        raise UsageError(
            f"the snapshot at {format_month(cutoff)} has {missing.size} customer(s) that were not "
            f"present at the end of that month (e.g. {list(missing[:5])}); the snapshot builder "
            "must return the customers present at the cutoff"
        )
    return outcomes.iloc[where].reset_index(drop=True)


def _checked_families(families: Mapping[str, HazardModel]) -> dict[str, HazardModel]:
    if not isinstance(families, Mapping) or not families:
        raise UsageError("families must be a non-empty dict of name → model")
    bad = {k: type(v).__name__ for k, v in families.items() if not isinstance(v, HazardModel)}
    if bad:
        raise UsageError(f"families {bad} are not HazardModel instances")
    return dict(families)


def _checked_cutoffs(
    tables: Tables, cutoffs: Iterable[str | int], horizons: list[int]
) -> list[int]:
    if isinstance(cutoffs, str | int):
        cutoffs = [cutoffs]
    out = sorted({parse_month(c, what="cutoff") if isinstance(c, str) else int(c) for c in cutoffs})
    if not out:
        raise UsageError("cutoffs is empty; give at least one past month")
    latest = tables.extract_month - horizons[0]
    late = [c for c in out if c > latest]
    if late:
        raise UsageError(
            f"cutoffs {[format_month(c) for c in late]} leave less than {horizons[0]} month(s) of "
            f"follow-up before the extract month {format_month(tables.extract_month)}; the "
            f"latest usable cutoff is {format_month(latest)}"
        )
    return out


def _with_context(frame: pd.DataFrame, tables: Tables, config: Config) -> pd.DataFrame:
    try:
        from ..spatial import add_spatial_context
    except ImportError:
        log.debug("no spatial context available; backtest panels go without it")
        return frame
    return add_spatial_context(frame, tables, config=config)


def _default_panel(tables: Tables, as_of: int, config: Config) -> pd.DataFrame:
    return _with_context(build_panel(tables, as_of, config=config), tables, config)


def _default_snapshot(tables: Tables, as_of: int, config: Config) -> pd.DataFrame:
    return _with_context(build_snapshot(tables, as_of, config=config), tables, config)


def _snapshot_from(build_panel_fn: PanelBuilder) -> PanelBuilder:
    def snapshot(tables: Tables, as_of: int, config: Config) -> pd.DataFrame:
        panel = build_panel_fn(tables, as_of + 1, config)
        layout = panel_layout(panel)
        month = panel["month"].astype(str).to_numpy() == format_month(as_of + 1)
        keep = month & (panel["tenure_start"].to_numpy() >= 1)
        return panel.loc[keep].drop(columns=list(layout.causes)).reset_index(drop=True)

    return snapshot
