"""``lifecycle run``: the whole monthly cycle, resumable, writing one month folder atomically.

Settings come from the ``[run]`` section of ``lifecycle.toml``::

    [run]
    families = ["cox", "boosted"]   # compared in the backtest (the tenure life table always is)
    cutoffs = 2                     # past cutoffs in the backtest, 3 months apart
    refit_months = 1                # refit when the newest saved model is this many months old
    backtest_months = 1             # redo the backtest (and the champion choice) this often
    reports = "reports"             # month folders go to <reports>/<YYYY-MM>/ (relative to
                                    # the config file's folder)
    history = ""                    # score history; default <reports>/history.duckdb
    work = ".lifecycle-work"        # saved models, cached steps and the staging folder

A run writes everything for month M into a staging folder first and renames it to
``<reports>/M`` at the end, so a month folder is complete or absent; an existing month is
never rewritten without ``force``. Steps whose inputs (the data files' and the config's
SHA-256) have not changed are taken from the work folder instead of being redone.
"""

from __future__ import annotations

import hashlib
import json
import logging
import os
import shutil
from collections.abc import Callable
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

from .._files import write_csv_atomic, write_text_atomic
from .._months import format_month, parse_month
from ..config import Config
from ..errors import ModelFileError, UsageError

log = logging.getLogger(__name__)

_RUN_KEYS = {
    "families", "cutoffs", "refit_months", "backtest_months", "reports", "history", "work",
}  # fmt: skip


@dataclass(frozen=True)
class RunSettings:
    """The ``[run]`` section (see the module docstring)."""

    families: tuple[str, ...] = ("cox", "boosted")
    cutoffs: int = 2
    refit_months: int = 1
    backtest_months: int = 1
    reports: Path = Path("reports")
    history: Path | None = None
    work: Path = Path(".lifecycle-work")

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

    families = tuple(raw.get("families", ("cox", "boosted")))
    from ..models._families import FAMILY_NAMES

    bad = [f for f in families if f not in FAMILY_NAMES]
    if bad or not families:
        raise UsageError(f"[run] families was {list(families)}; choose from {list(FAMILY_NAMES)}")
    for key in ("cutoffs", "refit_months", "backtest_months"):
        value = raw.get(key, 1)
        if isinstance(value, bool) or not isinstance(value, int) or value < 1:
            raise UsageError(f"[run] {key} was {value!r} but must be a whole number >= 1")
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
    )


@dataclass
class RunResult:
    """What a run wrote: the month, its folder and each file in it."""

    month: str
    folder: Path
    files: dict[str, Path] = field(default_factory=dict)
    summary: dict[str, object] = field(default_factory=dict)


def data_fingerprint(source: str | Path, config: Config) -> str:
    """SHA-256 over the input files (or DuckDB file) and the config text."""
    digest = hashlib.sha256()
    source = Path(source)
    files = sorted(p for p in source.rglob("*") if p.is_file()) if source.is_dir() else [source]
    for file in files:
        hidden = any(part.startswith(".") for part in file.relative_to(source.parent).parts)
        derived = file.suffix == ".parquet" and file.stem.startswith("panel_")
        if hidden or derived:  # our own work files are not inputs
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
    from ..data import load_tables, tables_as_of
    from ..evaluation import TenureLifeTable, backtest
    from ..history import ScoreHistory
    from ..models._families import make_model
    from ..report import write_report
    from ._steps import (
        default_cutoffs,
        forecast_portfolio,
        panel_with_context,
        plan_contacts,
        plan_offers,
        score_on_cluster,
        score_portfolio,
    )

    tick = step or (lambda name: None)
    settings = run_settings(config, reports=reports)
    tick("check")
    tables = load_tables(source, config)
    month = as_of or format_month(tables.extract_month)
    month_index = parse_month(month, what="as_of")
    if month_index > tables.extract_month:
        raise UsageError(
            f"as_of was {month} but the data only covers months up to "
            f"{format_month(tables.extract_month)}"
        )
    tables = tables_as_of(tables, month_index)  # a past month sees only what it knew
    folder = settings.reports / month
    if folder.exists() and not force:
        raise UsageError(
            f"{folder} exists: month {month} was run already; pass --force to rewrite it"
        )
    fingerprint = hashlib.sha256(f"{data_fingerprint(source, config)}:{month}".encode()).hexdigest()
    work = settings.work
    staging = work / f"staging-{month}-{os.getpid()}"
    shutil.rmtree(staging, ignore_errors=True)
    staging.mkdir(parents=True)
    try:
        tick("backtest")
        families = {"life_table": TenureLifeTable()}
        for name in settings.families:
            families[name] = make_model(name, config)
        result = _cached_backtest(
            work, fingerprint, month, settings.backtest_months, lambda: backtest(
                tables,
                families=families,
                cutoffs=default_cutoffs(month, 12, count=settings.cutoffs),
                config=config,
                **_track_record_hook(tables, config),
            ),
        )  # fmt: skip
        champions = dict(
            zip(result["champions"]["cause"], result["champions"]["family"], strict=True)
        )
        tick("fit")
        panel = panel_with_context(tables, month, config)
        model = _champion_model(
            work, fingerprint, month, panel, families, champions, settings.refit_months
        )
        tick("score")
        offers = plan_offers(tables, config)
        if client is None:
            scored = score_portfolio(tables, model, month, config)
            values = None
        else:
            scored, values, forecast = score_on_cluster(
                client, tables, model, month, config, offers
            )
        tick("plan")
        plan = plan_contacts(tables, model, scored, config, offers=offers, expected_values=values)
        tick("forecast")
        if client is None:
            forecast = forecast_portfolio(tables, scored, config, model)
        forecast_track = _forecast_track(result)
        files = {
            "scores": write_csv_atomic(staging / "scores.csv", scored.scores),
            "plan": write_csv_atomic(staging / "contact_plan.csv", plan.table),
            "forecast": write_csv_atomic(staging / "uptake_forecast.csv", forecast),
            "backtest": write_csv_atomic(staging / "backtest_metrics.csv", result["metrics"]),
            "forecast_backtest": write_csv_atomic(
                staging / "forecast_backtest.csv", forecast_track
            ),
        }
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
        history = ScoreHistory(settings.history_path)
        previous = history.previous_month(month)
        inputs = _report_inputs(
            tables, config, month, panel, scored, model, result, plan, forecast, history, previous
        )
        inputs.forecast_track = result["forecasts"]  # every family: shown side by side
        inputs.uptake_history = _uptake_history(tables, month_index)
        inputs.cohort_alive = _cohort_alive(panel, month_index)
        files.update(write_report(inputs, staging))
        tick("history")
        # The month folder does not exist (checked above), so a stored month without one is
        # an earlier attempt that stopped before publishing: replace it.
        history.append_run(
            month,
            scores=scored.scores,
            plan=plan.table,
            metrics=_key_metrics(summary, plan),
            meta={
                "created": pd.Timestamp(parse_month(month) // 12, parse_month(month) % 12 + 1, 1),
                "families": champions,
                "config_hash": _config_hash(config),
                "data_hash": fingerprint,
            },
            force=True,
        )
        tick("publish")
        _publish(staging, folder, force=force)
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return RunResult(
        month=month,
        folder=folder,
        files={k: folder / v.name for k, v in files.items()},
        summary=summary,
    )


def _scheduled(folder: Path, prefix: str, month: str, fingerprint: str, every: int) -> list[Path]:
    """Where a saved step may be taken from: first the one saved for exactly these inputs, then
    (when the step is redone only every ``every`` months) those saved in the months before,
    newest first."""
    candidates = [folder / f"{prefix}-{month}-{fingerprint[:16]}"]
    if every > 1 and folder.is_dir():
        now = parse_month(month)
        older = []
        for path in folder.glob(f"{prefix}-*"):
            parts = path.name.removeprefix(f"{prefix}-").split("-")
            try:
                saved = parse_month("-".join(parts[:2]))
            except UsageError:
                continue
            if now - every < saved < now:
                older.append((saved, path))
        candidates += [path for _, path in sorted(older, reverse=True)]
    return candidates


def _cached_backtest(
    work: Path, fingerprint: str, month: str, every: int, compute
) -> dict[str, pd.DataFrame]:
    """The backtest's tables: the saved ones for these inputs, or (``[run] backtest_months``)
    one saved in the last months, else computed now and saved."""
    from .._files import write_parquet_atomic

    names = ("metrics", "champions", "forecasts")
    for cache in _scheduled(work / "cache", "backtest", month, fingerprint, every):
        if all((cache / f"{n}.parquet").is_file() for n in names):
            log.info("backtest: reusing %s (backtest every %d months)", cache, every)
            return {n: pd.read_parquet(cache / f"{n}.parquet") for n in names}
    result = compute()
    out = {"metrics": result.metrics, "champions": result.champions, "forecasts": result.forecasts}
    cache = work / "cache" / f"backtest-{month}-{fingerprint[:16]}"
    for name, frame in out.items():
        write_parquet_atomic(cache / f"{name}.parquet", frame)
    return out


def _champion_model(work, fingerprint, month, panel, families, champions, refit_months):
    """The champion model of ``month``: the one saved for these inputs, else one saved less
    than ``refit_months`` months before (the refit schedule), else a new fit."""
    from ..models import load_model, save_model
    from ..models._champion import ChampionModel

    folder = work / "models" / f"champion-{month}-{fingerprint[:16]}"
    candidates = _scheduled(work / "models", "champion", month, fingerprint, refit_months)
    for candidate in candidates:
        if (candidate / "manifest.json").is_file():
            try:
                model = load_model(candidate)
            except ModelFileError as exc:
                log.warning("not reusing %s: %s", candidate, exc)
                continue
            log.info("model: reusing %s (refit every %d months)", candidate, refit_months)
            return model
    model = ChampionModel(families=families, champions=champions).fit(panel)
    window = (str(panel["month"].min()), str(panel["month"].max()))
    save_model(model, folder, training_window=window, family="champion")
    return model


def _track_record_hook(tables, config: Config) -> dict:
    """The backtest's ``after_fit`` that keeps each fit's uptake forecast beside what happened
    (the forecast's track record, made from the backtest's own fits)."""
    from ..forecast import forecast_settings
    from ..forecast._track import track_record_hook
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
    from ..report._sections_cohorts import cohort_alive

    return cohort_alive(panel, month)


def _forecast_track(result: dict) -> pd.DataFrame:
    from ..forecast._track import track_record

    return track_record(result.get("forecasts"), result["champions"])


def _publish(staging: Path, folder: Path, *, force: bool) -> None:
    """Move the staging folder to ``folder`` in one rename; with ``force`` the old folder is
    moved aside first and removed only after the new one is in place."""
    folder.parent.mkdir(parents=True, exist_ok=True)
    if folder.exists():
        if not force:
            raise UsageError(f"{folder} appeared while running; not overwriting it")
        aside = staging.parent / f"replaced-{folder.name}-{os.getpid()}"
        os.replace(folder, aside)
        os.replace(staging, folder)
        shutil.rmtree(aside, ignore_errors=True)
    else:
        os.replace(staging, folder)


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


def _report_inputs(
    tables, config, month, panel, scored, model, result, plan, forecast, history, previous
):
    """Everything the month's report shows, including how last month's predictions did."""
    from ..evaluation import observed_outcomes
    from ..history import compare_with_outcomes
    from ..report import build_report_inputs
    from ..spatial import premise_areas
    from ._steps import snapshot_with_context

    decile_check = decile_summary = previous_snapshot = previous_scores = None
    notes = []
    if previous is not None:
        outcomes = observed_outcomes(tables, parse_month(previous))
        comparison = compare_with_outcomes(history, previous, outcomes, cause="churn", horizon=1)
        decile_check, decile_summary = comparison.deciles, comparison.summary
        previous_scores = history.scores(previous)
        previous_snapshot = snapshot_with_context(tables, previous, config)
        notes.append(f"Compared with the run of {previous} (score history).")
    fitted = getattr(model, "fitted_", {})
    importances = getattr(fitted.get("forest"), "feature_importances_", None)
    return build_report_inputs(
        month=month,
        panel=panel,
        scores=scored.scores,
        customer_areas=premise_areas(tables, config),
        areas=tables.areas,
        backtest_metrics=result["metrics"],
        champions=result["champions"],
        hazard_ratios=getattr(model, "coefficients_", None),
        importances=importances,
        forecast=forecast,
        plan=plan,
        snapshot=scored.snapshot if previous_snapshot is not None else None,
        previous_snapshot=previous_snapshot,
        previous_scores=previous_scores,
        decile_check=decile_check,
        decile_summary=decile_summary,
        notes=notes,
    )
