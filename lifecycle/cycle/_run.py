"""``lifecycle run``: the whole monthly cycle, resumable, writing one month folder atomically.

Settings come from the ``[run]`` section of ``lifecycle.toml`` (``lifecycle settings`` prints
every setting)::

    [run]
    families = ["cox", "boosted", "forest"]  # compared in the backtest (the tenure life
                                    # table always is); each a champion candidate per cause
    cutoffs = 2                     # past cutoffs in the backtest, 3 months apart; the champion
                                    # of each cause is chosen on all but the latest and its
                                    # score reported on the latest (held out); >= 2 for an
                                    # honest score (with 1 no held-out score is reported)
    switch_margin = 0.005           # a cause's champion changes from last month's family only
                                    # when another family's mean Uno's C is higher by more
                                    # than this (`lifecycle.evaluation.choose_champions`)
    refit_months = 1                # refit when the newest saved model is this many months old
    backtest_months = 1             # redo the backtest (and the champion choice) this often
    reports = "reports"             # month folders go to <reports>/<YYYY-MM>/ (relative to
                                    # the config file's folder)
    history = ""                    # score history; default <reports>/history.duckdb
    work = ".lifecycle-work"        # saved models and cached steps

A run first takes the reports folder's lock (`lifecycle.cycle._lock`: a second run is refused
at once) and mends what a crashed run left (`lifecycle.cycle._publish`). It then makes every
check that can fail, computes, and writes everything for month M into a staging folder inside
the reports folder; the staging folder is renamed to ``<reports>/M`` and the month written to
the history as one unit, so a month folder is complete or absent and the history matches the
published folders; an existing month is never rewritten without ``force``. Steps whose inputs
(the data files' and the config's SHA-256) have not changed are taken from the work folder
instead of being redone (`lifecycle.cycle._cache`: verified first; written only after the
month is published; ``force`` recomputes the month's own ones, while one saved in an earlier
month is still reused on the ``refit_months`` / ``backtest_months`` schedule if the panel still
has its causes and features).
"""

from __future__ import annotations

import errno
import hashlib
import json
import logging
import shutil
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .._files import write_csv_atomic, write_text_atomic
from .._months import format_month, parse_month
from ..config import Config
from ..errors import ModelFileError, OutputError, UsageError
from ._cache import candidates, entry_name, load_frames, save_entry, save_frames
from ._checks import checked_inputs, refuse_existing
from ._lock import run_lock
from ._policies import policy_tables, write_policy_tables
from ._publish import HistoryEntry, mend, publish_with_history, staging_folder

log = logging.getLogger(__name__)

_RUN_KEYS = {
    "families", "cutoffs", "refit_months", "backtest_months", "reports", "history", "work",
    "switch_margin",
}  # fmt: skip


@dataclass(frozen=True)
class RunSettings:
    """The ``[run]`` section (see the module docstring)."""

    families: tuple[str, ...] = ("cox", "boosted", "forest")
    cutoffs: int = 2
    refit_months: int = 1
    backtest_months: int = 1
    reports: Path = Path("reports")
    history: Path | None = None
    work: Path = Path(".lifecycle-work")
    switch_margin: float = 0.005

    @property
    def history_path(self) -> Path:
        return self.history or self.reports / "history.duckdb"


def run_settings(config: Config, *, reports: str | Path | None = None) -> RunSettings:
    """Read ``[run]``; relative paths are taken from the config file's folder."""
    raw = config.raw.get("run", {})
    unknown = sorted(set(raw) - _RUN_KEYS)
    if unknown:
        raise UsageError(f"[run] has unknown setting(s) {unknown}; allowed are {sorted(_RUN_KEYS)}")
    base = config.source.parent if config.source else Path.cwd()

    def path(value: object, default: str) -> Path:
        p = Path(str(value or default))
        return (p if p.is_absolute() else base / p).resolve()

    families = tuple(raw.get("families", ("cox", "boosted", "forest")))
    from ..models import FAMILY_NAMES

    bad = [f for f in families if f not in FAMILY_NAMES]
    if bad or not families:
        raise UsageError(f"[run] families was {list(families)}; choose from {list(FAMILY_NAMES)}")
    for key in ("cutoffs", "refit_months", "backtest_months"):
        value = raw.get(key, 1)
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise UsageError(f"[run] {key} was {value!r} but must be a whole number >= 1")
    margin = raw.get("switch_margin", 0.005)
    if isinstance(margin, bool) or not isinstance(margin, int | float) or not 0 <= margin < 1:
        raise UsageError(
            f"[run] switch_margin was {margin!r} but must be a number >= 0 and < 1 (in Uno's C)"
        )
    reports_path = (
        Path(reports).resolve() if reports is not None else path(raw.get("reports"), "reports")
    )
    return RunSettings(
        families=families,
        cutoffs=int(raw.get("cutoffs", 2)),
        refit_months=int(raw.get("refit_months", 1)),
        backtest_months=int(raw.get("backtest_months", 1)),
        reports=reports_path,
        history=path(raw["history"], "") if raw.get("history") else None,
        work=path(raw.get("work"), ".lifecycle-work"),
        switch_margin=float(margin),
    )


@dataclass
class RunResult:
    """What a run wrote: the month, its folder and each file in it."""

    month: str
    folder: Path
    files: dict[str, Path] = field(default_factory=dict)
    summary: dict[str, object] = field(default_factory=dict)


def data_fingerprint(source: str | Path, config: Config, outputs: Sequence[Path] = ()) -> str:
    """SHA-256 over the input files (or DuckDB file) and the config text.

    Files under ``outputs`` (the run's reports, history and work folders, which by default lie
    inside the data folder beside the config) are not inputs: hashed, they would make every
    run's fingerprint differ (the run lock's owner file holds the process and the time)."""
    digest = hashlib.sha256()
    source = Path(source)
    files = sorted(p for p in source.rglob("*") if p.is_file()) if source.is_dir() else [source]
    ours = [Path(p).resolve() for p in outputs]
    for file in files:
        hidden = any(part.startswith(".") for part in file.relative_to(source.parent).parts)
        derived = file.suffix == ".parquet" and file.stem.startswith("panel_")
        written = any(file.resolve().is_relative_to(p) for p in ours)
        if hidden or derived or written:  # our own work files are not inputs
            continue
        digest.update(file.name.encode())
        with open(file, "rb") as handle:
            for block in iter(lambda: handle.read(1 << 20), b""):
                digest.update(block)
    if config.source is not None and config.source.is_file():
        digest.update(config.source.read_bytes())
    return digest.hexdigest()


Step = Callable[[str], None]


def run_cycle(
    source: str | Path,
    config: Config,
    *,
    as_of: str | None = None,
    reports: str | Path | None = None,
    force: bool = False,
    step: Step | None = None,
    client=None,
) -> RunResult:
    """Run the monthly cycle for ``as_of`` (default: the extract month).

    Check the inputs, build the panel with context, backtest the families over past cutoffs
    and pick a champion per cause, fit (or reuse) the champion model, score every customer,
    value the offers, plan the contacts, forecast uptake, write the report, and append the
    month to the score history. ``step`` is called with the name of each step as it starts
    (for a progress display).

    With a `distributed.Client` (`lifecycle.distributed.compute_client`), scoring, offer
    values and the forecast run on its workers (`score_on_cluster`); the backtest, the fit,
    the plan's optimisation and the report stay in this process. The files written are the
    same up to floating-point rounding.
    """
    from ..history import ScoreHistory
    from ..models import keep_key_outside

    tick = step or (lambda name: None)
    settings = run_settings(config, reports=reports)
    config_dir = config.source.parent if config.source else None
    keep_key_outside([source, settings.work, settings.reports, config_dir])
    tick("check")
    checked = checked_inputs(source, config, as_of)  # reads only
    with run_lock(settings.reports):  # before any computation: one run per reports folder
        history = ScoreHistory(settings.history_path)
        mend(settings.reports, history, settings.work)
        try:
            return _locked_run(source, config, settings, checked, force, tick, client, history)
        except Exception as exc:
            if _disk_full(exc):
                where = getattr(exc, "filename", None) or "the outputs"
                raise OutputError(
                    f"no space left to write {where}; nothing of this month was published and "
                    "earlier months and the history are unchanged. Free some space and run again"
                ) from None
            raise


def _disk_full(exc: Exception) -> bool:
    """Whether ``exc`` says the disk (or the user's quota) is full; DuckDB says it in words."""
    if isinstance(exc, OSError) and exc.errno in (errno.ENOSPC, errno.EDQUOT, errno.EFBIG):
        return True
    return "No space left on device" in str(exc)


def _locked_run(source, config, settings, checked, force, tick, client, history) -> RunResult:
    """`run_cycle` once the inputs are checked and the reports folder is locked: the
    computation, then the month folder and its history rows together, then the work folder's
    saved steps."""
    from ..models import check_fittable
    from ._steps import panel_with_context

    tables, month, month_index = checked["tables"], checked["month"], checked["month_index"]
    offers, min_events = checked["offers"], checked["min_events"]
    folder = settings.reports / month
    refuse_existing(folder, month, force)  # under the lock, after `mend`
    outputs = (settings.reports, settings.history_path, settings.work)
    fingerprint = data_fingerprint(source, config, outputs)
    fingerprint = hashlib.sha256(f"{fingerprint}:{month}".encode()).hexdigest()
    keys = (month, fingerprint, _config_hash(config))
    saves = []  # saved steps, written to the work folder only once the month is published
    staging = staging_folder(settings.reports, month)
    try:
        tick("backtest")
        families, result, champions, previous = _backtest_and_choose(
            tables, config, settings, month, keys, min_events, force, saves, history
        )
        tick("fit")
        panel = panel_with_context(tables, month, config)
        check_fittable(panel, min_events=min_events)
        model = _champion_model(
            settings.work, keys, panel, families, champions, settings.refit_months, force, saves
        )
        scored, plan, forecast, policies = _score_plan_forecast(
            tables, model, month, config, offers, client, tick, panel
        )
        files = _write_tables(staging, scored, plan, forecast, result)
        files.update(write_policy_tables(staging, policies))
        summary = {
            "month": month,
            "customers_scored": len(scored.scores),
            "panel_rows": len(panel),
            "champions": champions,
            "plan": plan.summary(),
            "data_sha256": fingerprint,
        }
        files["summary"] = write_text_atomic(
            staging / "run_summary.json", json.dumps(summary, indent=2, sort_keys=True, default=str)
        )
        tick("report")
        files.update(
            _write_month_report(
                staging, tables, config, month, month_index, panel, scored, model, result,
                plan, forecast, history, previous, policies["comparison"],
            )
        )  # fmt: skip
        tick("publish")
        entry = _history_entry(
            month, month_index, scored, plan, summary, champions, config, fingerprint
        )
        publish_with_history(staging, folder, entry, history, force=force)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    _save_steps(saves)
    return RunResult(
        month=month,
        folder=folder,
        files={k: folder / v.name for k, v in files.items()},
        summary=summary,
    )


def _backtest_and_choose(tables, config, settings, month, keys, min_events, force, saves, history):
    """The families (the tenure life table among them), the (cached) backtest with the
    champion per cause chosen against last month's, the champions and last month."""
    from ..evaluation import TenureLifeTable, backtest, choose_champions
    from ..models import make_model
    from ._steps import default_cutoffs

    families = {"life_table": TenureLifeTable()}
    for name in settings.families:
        families[name] = make_model(name, config)
    result = _cached_backtest(
        settings.work, keys, settings.backtest_months, force, saves, lambda: backtest(
            tables,
            families=families,
            cutoffs=default_cutoffs(month, 12, count=settings.cutoffs),
            config=config,
            min_events=min_events,
            **_track_record_hook(tables, config),
        ),
    )  # fmt: skip
    previous = history.previous_month(month)
    choice = choose_champions(
        result["metrics"],
        previous=_previous_champions(history, previous),
        margin=settings.switch_margin,
    )
    result = {**result, "champions": choice}
    champions = dict(zip(choice["cause"], choice["family"], strict=True))
    return families, result, champions, previous


def _score_plan_forecast(tables, model, month, config, offers, client, tick, panel):
    """Scores (with each offer's effect per customer), the contact plan and the uptake
    forecast (scores, offer values and the forecast on the cluster's workers when there is a
    client)."""
    from ._effects import customer_effects, with_effect_columns
    from ._steps import (
        forecast_portfolio,
        plan_contacts,
        portfolio_offer_values,
        score_on_cluster,
        score_portfolio,
    )

    tick("score")
    effects = {}

    def own(snapshot):
        effects.update(customer_effects(tables, config, offers, snapshot, panel=panel))
        return effects

    if client is None:
        scored = score_portfolio(tables, model, month, config)
        values = portfolio_offer_values(scored, offers, config, own(scored.snapshot))
    else:
        scored, values, forecast = score_on_cluster(
            client, tables, model, month, config, offers, own_effects=own
        )
    scored.scores = with_effect_columns(scored.scores, values, offers)
    tick("plan")
    plan = plan_contacts(
        tables, model, scored, config, offers=offers, expected_values=values, effects=effects
    )
    policies = policy_tables(tables, config, scored, plan, offers, effects, panel, month)
    tick("forecast")
    if client is None:
        forecast = forecast_portfolio(tables, scored, config, model)
    return scored, plan, forecast, policies


def _write_tables(staging: Path, scored, plan, forecast, result) -> dict[str, Path]:
    """The month's CSV files, written atomically into the staging folder."""
    from ..value import round_money

    forecast_track = _forecast_track(result)
    return {
        "scores": write_csv_atomic(staging / "scores.csv", round_money(scored.scores)),
        "plan": write_csv_atomic(staging / "contact_plan.csv", round_money(plan.table)),
        "forecast": write_csv_atomic(staging / "uptake_forecast.csv", forecast),
        "backtest": write_csv_atomic(staging / "backtest_metrics.csv", result["metrics"]),
        "forecast_backtest": write_csv_atomic(staging / "forecast_backtest.csv", forecast_track),
    }


def _write_month_report(
    staging, tables, config, month, month_index, panel, scored, model, result, plan,
    forecast, history, previous, policy_comparison=None,
) -> dict[str, Path]:  # fmt: skip
    """The report's inputs gathered and the report written into the staging folder."""
    from ..report import write_report

    inputs = _report_inputs(
        tables, config, month, panel, scored, model, result, plan, forecast, history, previous
    )
    inputs.forecast_track = result["forecasts"]  # every family: shown side by side
    inputs.uptake_history = _uptake_history(tables, month_index)
    inputs.cohort_alive = _cohort_alive(panel, month_index)
    inputs.policy_comparison = policy_comparison
    return write_report(inputs, staging)


def _history_entry(month, month_index, scored, plan, summary, champions, config, fingerprint):
    """The month's rows for the score history."""
    return HistoryEntry(
        month=month,
        scores=scored.scores,
        plan=plan.table,
        metrics=_key_metrics(summary, plan),
        meta={
            "created": pd.Timestamp(month_index // 12, month_index % 12 + 1, 1),
            "families": champions,
            "config_hash": _config_hash(config),
            "data_hash": fingerprint,
        },
    )


def _previous_champions(history, previous: str | None) -> dict[str, str] | None:
    """Last month's champion family per cause, from the score history (``None``: none)."""
    if previous is None:
        return None
    families = history.run(previous).families
    return {str(k): str(v) for k, v in families.items()} if isinstance(families, dict) else None


def _save_steps(saves) -> None:
    """Write the saved steps of a published month; a failure here only costs the reuse."""
    for dest, write in saves:
        try:
            save_entry(dest, write)
        except OSError as exc:
            log.warning("could not save %s for reuse (%s); it will be recomputed", dest, exc)


def _cached_backtest(work: Path, keys, every: int, force: bool, saves, compute):
    """The backtest's tables: the saved ones for these inputs, or (``[run] backtest_months``)
    one saved in the last months with the same settings, else computed now (and saved once
    the month is published). ``force`` recomputes the month's own saved step (one saved in an
    earlier month is still taken on the schedule)."""
    names = ("metrics", "champions", "importances", "forecasts")
    folder = work / "cache"
    for cache in candidates(folder, "backtest", *keys, every)[force:]:
        frames = load_frames(cache, names)
        if frames is not None:
            log.info("backtest: reusing %s (backtest every %d months)", cache, every)
            return frames
    result = compute()
    out = {
        "metrics": result.metrics,
        "champions": result.champions,
        "importances": result.importances,
        "forecasts": result.forecasts,
    }
    saves.append((folder / entry_name("backtest", *keys), lambda tmp: save_frames(tmp, out)))
    return out


def _champion_model(work, keys, panel, families, champions, refit_months, force, saves):
    """The champion model of the month: the one saved for these inputs, else one saved less
    than ``refit_months`` months before with the same settings whose causes and features the
    panel still has (the refit schedule), else a new fit. ``force`` does not take the month's
    own saved model."""
    from ..models import ChampionModel, load_model, save_model

    folder = work / "models"
    for candidate in candidates(folder, "champion", *keys, refit_months)[force:]:
        if not candidate.is_dir():
            continue
        try:
            model = load_model(candidate)
        except ModelFileError as exc:
            log.warning("not reusing %s: %s; refitting", candidate, exc)
            continue
        missing = [c for c in [*model.features_, *model.causes_] if c not in panel.columns]
        if missing:
            log.warning("not reusing %s: the panel lacks %s; refitting", candidate, missing)
            continue
        kept = getattr(model, "cause_family_", {})
        if any(kept.get(c, f) != f for c, f in champions.items()):
            log.info(
                "model: not reusing %s: its families %s are not the champions", candidate, kept
            )
            continue
        log.info("model: reusing %s (refit every %d months)", candidate, refit_months)
        return model
    # a cause without a champion (no family had a valid backtest metric) takes the first
    # configured family
    default = next(name for name in families if name != "life_table")
    model = ChampionModel(families=families, champions=champions, default=default).fit(panel)
    window = (str(panel["month"].min()), str(panel["month"].max()))
    saves.append(
        (
            folder / entry_name("champion", *keys),
            lambda tmp: save_model(model, tmp, training_window=window, family="champion"),
        )
    )
    return model


def _track_record_hook(tables, config: Config) -> dict:
    """The backtest's ``after_fit`` that keeps each fit's uptake forecast beside what happened
    (the forecast's track record, made from the backtest's own fits)."""
    from ..forecast import forecast_settings, track_record_hook
    from ..spatial import premise_areas

    if not tables.products:
        return {}
    return {
        "after_fit": track_record_hook(tables, config, premise_areas(tables, config)),
        "after_fit_months": forecast_settings(config).horizon_months,
    }


def _uptake_history(tables, month: int, months: int = 24) -> pd.DataFrame:
    """Uptakes realised in each of the last ``months`` months up to ``month``, per product."""
    up = tables.uptakes
    up = up[(up["month"] > month - months) & (up["month"] <= month)]
    rows = [
        {"product": p, "month": format_month(m), "realised": int(((up["product"] == p)
                                                                  & (up["month"] == m)).sum())}
        for p in tables.products
        for m in range(month - months + 1, month + 1)
    ]  # fmt: skip
    return pd.DataFrame(rows, columns=["product", "month", "realised"])


def _cohort_alive(panel: pd.DataFrame, month: int) -> pd.DataFrame:
    from ..report import cohort_alive

    return cohort_alive(panel, month)


def _forecast_track(result: dict) -> pd.DataFrame:
    from ..forecast import track_record

    return track_record(result.get("forecasts"), result["champions"])


def _config_hash(config: Config) -> str:
    text = config.source.read_bytes() if config.source and config.source.is_file() else b""
    return hashlib.sha256(text).hexdigest()


def _key_metrics(summary: dict, plan) -> dict[str, float]:
    p = plan.summary()
    return {
        "customers_scored": float(summary["customers_scored"]),
        "plan_contacts": float(p["contacts"]),
        "plan_expected_value": float(p["objective"]),
        "plan_cost": float(p["budget_used"]),
        "plan_relative_gap": float(p["relative_gap"]),
    }


def _forest_importances(model, result, notes: list[str]):
    """The champion's forest importances; when the forest is a candidate but champion of no
    cause, those of its backtest fit at the latest cutoff (said in ``notes``)."""
    found = getattr(getattr(model, "fitted_", {}).get("forest"), "feature_importances_", None)
    backtested = result.get("importances")
    if found is not None or backtested is None or not len(backtested):
        return found
    forest = backtested[backtested["family"] == "forest"]
    if not len(forest):
        return None
    notes.append(f"Forest importances are from its backtest fit as of {forest['cutoff'].iloc[0]}.")
    return forest.drop(columns=["family", "cutoff"]).reset_index(drop=True)


def _report_inputs(
    tables, config, month, panel, scored, model, result, plan, forecast, history, previous
):
    """Everything the month's report shows, including how last month's predictions did."""
    from ..evaluation import observed_outcomes
    from ..history import compare_with_outcomes
    from ..report import build_report_inputs
    from ..spatial import premise_areas
    from ..value import value_settings
    from ._steps import snapshot_with_context

    decile_check = decile_summary = previous_snapshot = previous_scores = previous_plan = None
    notes = []
    if previous is not None:
        outcomes = observed_outcomes(tables, parse_month(previous))
        comparison = compare_with_outcomes(history, previous, outcomes, cause="churn", horizon=1)
        decile_check, decile_summary = comparison.deciles, comparison.summary
        previous_scores = history.scores(previous)
        previous_plan = history.plan(previous)
        previous_snapshot = snapshot_with_context(tables, previous, config)
        notes.append(f"Compared with the run of {previous} (score history).")
    importances = _forest_importances(model, result, notes)
    return build_report_inputs(
        month=month,
        panel=panel,
        scores=scored.scores,
        customer_areas=premise_areas(tables, config),
        areas=tables.areas,
        backtest_metrics=result["metrics"],
        champions=result["champions"],
        hazard_ratios=getattr(model, "coefficients_", None),
        ph_tests=getattr(model, "ph_tests_", None),
        importances=importances,
        forecast=forecast,
        plan=plan,
        snapshot=scored.snapshot if previous_snapshot is not None else None,
        previous_snapshot=previous_snapshot,
        previous_scores=previous_scores,
        decile_check=decile_check,
        decile_summary=decile_summary,
        previous_plan=previous_plan,
        currency=value_settings(config).currency,
        notes=notes,
    )
