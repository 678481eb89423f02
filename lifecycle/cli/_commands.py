"""One small class per subcommand: its arguments and what it runs."""

from __future__ import annotations

import argparse
import logging
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path

from .._months import format_month, parse_month
from ..config import Config, load_config
from ..errors import UsageError
from ._arguments import MAX_HORIZON_MONTHS, horizons_argument, output_file, output_folder
from ._progress import task_progress

log = logging.getLogger("lifecycle")


@dataclass(frozen=True)
class Command:
    name: str
    help: str
    arguments: Callable[[argparse.ArgumentParser], None]
    run: Callable[[argparse.Namespace], None]


def _config_for(data: Path, given: str | None) -> Config:
    """The config given with ``--config``, else ``lifecycle.toml`` beside or in the data."""
    if given:
        return load_config(given)
    folder = data if data.is_dir() else data.parent
    default = folder / "lifecycle.toml"
    return load_config(default) if default.is_file() else Config()


def _data_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("data", type=Path, help="folder of CSV/Parquet tables, or a DuckDB file")
    p.add_argument("--config", help="lifecycle.toml (default: the one in the data folder)")


def _keep_key_outside(args: argparse.Namespace, *folders: Path) -> None:
    """Refuse a model signing key kept inside the data, config or model folders."""
    from ..models import keep_key_outside

    config = Path(args.config).parent if getattr(args, "config", None) else None
    keep_key_outside([args.data, config, *folders])


def _load(args: argparse.Namespace):
    """The checked tables and config; ``--as-of`` (when the command has one) is then checked
    against the data's first month."""
    from ..cycle import check_as_of
    from ..data import load_tables

    config = _config_for(args.data, args.config)
    tables = load_tables(args.data, config)
    if getattr(args, "as_of", None):
        check_as_of(tables, args.as_of)
    return tables, config


# check ---------------------------------------------------------------------------------------
def _check_run(args: argparse.Namespace) -> None:
    from ..data import describe_tables
    from ..spatial import premise_areas

    tables, config = _load(args)
    premise_areas(tables, config)  # every premise must lie in an area (or near one, if allowed)
    print(describe_tables(tables))


CHECK = Command(
    "check", "validate the input tables and print what they hold", _data_arguments, _check_run
)


# panel ---------------------------------------------------------------------------------------
def _panel_arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--as-of", required=True, help="last month of the panel, YYYY-MM")
    p.add_argument("--out", required=True, type=Path, help="Parquet file to write")
    p.add_argument(
        "--no-spatial", action="store_true", help="leave out the spatial context columns"
    )


def _panel_run(args: argparse.Namespace) -> None:
    from .._files import write_parquet_atomic

    parse_month(args.as_of, what="--as-of")
    if args.out.suffix.lower() != ".parquet":
        raise UsageError(f"--out was {str(args.out)!r} but must be a .parquet file")
    output_file(args.out, example="panel.parquet")
    tables, config = _load(args)
    from ..cycle import panel_with_context

    panel = panel_with_context(tables, args.as_of, config, spatial=not args.no_spatial)
    write_parquet_atomic(args.out, panel)
    print(f"wrote {args.out}: {len(panel):,} customer-months, {panel.shape[1]} columns")


PANEL = Command(
    "panel", "build the customer-month panel with spatial context", _panel_arguments, _panel_run
)


# demo ----------------------------------------------------------------------------------------
def _demo_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--customers", type=int, default=20_000, help="customers (default 20,000)")
    p.add_argument("--seed", type=int, default=7, help="random seed (default 7)")
    p.add_argument("--out", type=Path, default=Path("demo_panels"), help="where the data goes")
    _workers_argument(p)


def _workers_argument(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--workers",
        type=int,
        help="score and forecast on a local Dask cluster of this many worker processes "
        "(default: [compute] in the config, else one process)",
    )


def _cluster(config: Config, workers: int | None):
    """A Dask client when ``--workers`` or the config's ``[compute]`` asks for one, else a
    context giving ``None`` (everything in this process)."""
    import contextlib

    from ..distributed import compute_client, compute_settings

    settings = compute_settings(config)
    if workers is None and settings.scheduler is None and settings.workers is None:
        return contextlib.nullcontext(None)
    if workers is not None and workers < 1:
        raise UsageError(f"--workers was {workers} but must be a whole number >= 1")
    return compute_client(workers=workers, config=config)


def _demo_run(args: argparse.Namespace) -> None:
    from ..demo import write_demo

    if args.customers < 500:
        raise UsageError(f"--customers was {args.customers} but must be at least 500")
    output_folder(args.out)
    paths = write_demo(args.out, customers=args.customers, seed=args.seed)
    config = load_config(paths["config"])
    print(f"demo data in {args.out}/ (true parameters in {paths['truth']})")
    last = parse_month(config.extract_month)
    # Two monthly runs, so that the second month's report judges the first month's predictions.
    with _cluster(config, args.workers) as client:
        for month in (format_month(last - 1), format_month(last)):
            _run_and_report(args.out, config, month, force=True, client=client)


def _run_and_report(
    data: Path, config: Config, month: str | None, *, force: bool, client=None
) -> None:
    from ..cycle import run_cycle
    from ._progress import steps_progress

    with steps_progress(f"month {month or 'latest'}") as step:
        result = run_cycle(data, config, as_of=month, force=force, step=step, client=client)
    print(f"month {result.month}: wrote {_shown(result.folder)}/")
    for name, path in result.files.items():
        print(f"  {name:<10} {_shown(path)}")


def _shown(path: Path) -> str:
    """A path relative to the working folder when it lies below it."""
    try:
        return str(path.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(path)


DEMO = Command(
    "demo",
    "write the invented demo scenario and run the monthly cycle on it",
    _demo_arguments,
    _demo_run,
)


# fit -----------------------------------------------------------------------------------------
def _fit_arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--as-of", required=True, help="last month of the training panel, YYYY-MM")
    p.add_argument("--family", required=True, choices=["cox", "forest", "boosted"])
    p.add_argument("--out", required=True, type=Path, help="folder for the model and manifest")


def _fit_run(args: argparse.Namespace) -> None:
    from ..cycle import fit_model
    from ..models import save_model

    parse_month(args.as_of, what="--as-of")
    _keep_key_outside(args, args.out)
    output_folder(args.out)
    tables, config = _load(args)
    with task_progress():
        model, window = fit_model(tables, args.as_of, args.family, config)
    save_model(model, args.out, training_window=window, family=args.family)
    print(f"wrote {args.out}/ ({args.family}; trained on {window[0]} to {window[1]})")


FIT = Command("fit", "fit one model family over every cause", _fit_arguments, _fit_run)


# score ---------------------------------------------------------------------------------------
def _score_arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--model", required=True, type=Path, help="folder written by lifecycle fit")
    p.add_argument("--as-of", required=True, help="score the customers present at its end")
    p.add_argument("--out", required=True, type=Path, help="CSV or Parquet file to write")
    p.add_argument("--horizons", default="3,6,12", help=_HORIZONS_HELP)


_HORIZONS_HELP = f"months, comma-separated, each 1 to {MAX_HORIZON_MONTHS} (default 3,6,12)"


def _scored(args: argparse.Namespace, **kwargs):
    """Tables, config, model and the scored portfolio at ``--as-of`` (score, plan, forecast)."""
    from ..cycle import score_portfolio
    from ..models import load_model

    parse_month(args.as_of, what="--as-of")
    _keep_key_outside(args, args.model)
    model = load_model(args.model)
    tables, config = _load(args)
    with task_progress():
        scored = score_portfolio(tables, model, args.as_of, config, **kwargs)
    return tables, config, model, scored


def _score_run(args: argparse.Namespace) -> None:
    horizons = horizons_argument(args.horizons)
    _check_table_path(args.out)
    _, _, _, scored = _scored(args, horizons=horizons)
    _write_table(args.out, scored.scores)
    print(f"wrote {args.out}: {len(scored.scores):,} customers")


SCORE = Command(
    "score", "survival, cumulative incidence and lifetime value per customer", _score_arguments,
    _score_run,
)  # fmt: skip


# backtest ------------------------------------------------------------------------------------
def _backtest_arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--as-of", required=True, help="the latest month of data to use, YYYY-MM")
    p.add_argument(
        "--families", default="cox,boosted,forest", help="comma-separated (cox,boosted,forest)"
    )
    p.add_argument("--cutoffs", help="comma-separated YYYY-MM (default: two with full follow-up)")
    p.add_argument("--horizons", default="3,6,12", help=_HORIZONS_HELP)
    p.add_argument("--out", required=True, type=Path, help="CSV of the metrics table")


def _backtest_run(args: argparse.Namespace) -> None:
    from ..cycle import check_as_of, default_cutoffs
    from ..evaluation import TenureLifeTable, backtest, choose_champions
    from ..models import make_model, min_events_setting

    parse_month(args.as_of, what="--as-of")
    horizons = horizons_argument(args.horizons)
    _check_table_path(args.out, csv_only=True)
    cutoffs = [c.strip() for c in (args.cutoffs or "").split(",") if c.strip()]
    for c in cutoffs:
        parse_month(c, what="--cutoffs")
    tables, config = _load(args)
    families = {"life_table": TenureLifeTable()}
    for name in [f.strip() for f in args.families.split(",") if f.strip()]:
        families[name] = make_model(name, config, horizon=max(horizons))
    given = bool(cutoffs)
    cutoffs = cutoffs or default_cutoffs(args.as_of, max(horizons))
    for c in cutoffs:
        check_as_of(tables, c, what="--cutoffs" if given else "the default cutoff")
    with task_progress():
        result = backtest(
            tables, families=families, cutoffs=cutoffs, horizons=horizons, config=config,
            min_events=min_events_setting(config),
        )  # fmt: skip
    _write_table(args.out, result.metrics)
    print(f"wrote {args.out}: {len(result.metrics):,} rows; champions:")
    for row in choose_champions(result.metrics).itertuples():
        held = (
            f"held-out Uno C {row.held_out_uno_c:.3f} at {row.held_out_cutoff}"
            if row.held_out_cutoff
            else f"Uno C {row.uno_c:.3f} on the only cutoff, no held-out score"
        )
        print(f"  {row.cause}: {row.family} ({held}, {row.horizon} months)")


BACKTEST = Command(
    "backtest", "out-of-time metrics of each family at past cutoffs", _backtest_arguments,
    _backtest_run,
)  # fmt: skip


# plan and forecast ---------------------------------------------------------------------------
def _decision_arguments(p: argparse.ArgumentParser) -> None:
    _data_arguments(p)
    p.add_argument("--model", required=True, type=Path, help="folder written by lifecycle fit")
    p.add_argument("--as-of", required=True, help="plan for the month after it, YYYY-MM")
    p.add_argument("--out", required=True, type=Path, help="CSV file to write")


def _plan_run(args: argparse.Namespace) -> None:
    from ..cycle import plan_contacts

    _check_table_path(args.out, csv_only=True)
    tables, config, model, scored = _scored(args)
    plan = plan_contacts(tables, model, scored, config)
    _write_table(args.out, plan.table)
    summary = plan.summary()
    print(
        f"wrote {args.out}: {summary['contacts']:,} contacts, expected value "
        f"{summary['objective']:,.0f}, cost {summary['budget_used']:,.0f} of "
        f"{summary['budget']:,.0f} ({summary['solver']}, gap {summary['relative_gap']:.2%})"
    )


PLAN = Command(
    "plan", "the contact plan: offers within budget and capacity, by week, with reasons",
    _decision_arguments, _plan_run,
)  # fmt: skip


def _forecast_arguments(p: argparse.ArgumentParser) -> None:
    _decision_arguments(p)
    p.add_argument(
        "--launch-month",
        help="forecast a product launched in this month (YYYY-MM, after --as-of) by the Bass "
        "diffusion model instead of the products in the data",
    )
    p.add_argument(
        "--comparable",
        help="with --launch-month: a past product in the data whose uptake curve sets the "
        "launch's innovation, imitation (by area) and market share (default: [forecast.launch])",
    )
    p.add_argument("--launch-name", default="launch", help="product name of the launch")


def _forecast_run(args: argparse.Namespace) -> None:
    from ..cycle import forecast_portfolio

    _check_table_path(args.out, csv_only=True)
    if args.launch_month is None:
        if args.comparable is not None:
            raise UsageError("--comparable needs --launch-month (the month the product launches)")
        tables, config, model, scored = _scored(args)
        forecast = forecast_portfolio(tables, scored, config, model)
    else:
        forecast = _launch(args)
    _write_table(args.out, forecast)
    print(f"wrote {args.out}: {len(forecast):,} rows")


def _launch(args: argparse.Namespace):
    from ..data import tables_as_of
    from ..forecast import forecast_settings, launch_forecast, launch_settings
    from ..spatial import premise_areas

    as_of = parse_month(args.as_of, what="--as-of")
    launch = parse_month(args.launch_month, what="--launch-month")
    if launch <= as_of:
        raise UsageError(
            f"--launch-month was {args.launch_month} but must come after --as-of {args.as_of}"
        )
    tables, config = _load(args)
    tables = tables_as_of(tables, as_of)
    settings = forecast_settings(config)
    return launch_forecast(
        tables, premise_areas(tables, config), launch_month=launch,
        horizon=settings.horizon_months, name=args.launch_name, comparable=args.comparable,
        settings=launch_settings(config), levels=settings.levels,
    )  # fmt: skip


FORECAST = Command(
    "forecast", "expected uptakes by month and area with 90%% intervals (or of a launch)",
    _forecast_arguments, _forecast_run,
)  # fmt: skip


def _check_table_path(path: Path, *, csv_only: bool = False) -> None:
    allowed = (".csv",) if csv_only else (".csv", ".parquet")
    if path.suffix.lower() not in allowed:
        raise UsageError(f"--out was {str(path)!r} but must end in {' or '.join(allowed)}")
    output_file(path, example="out" + allowed[0])


def _write_table(path: Path, frame) -> None:
    from .._files import write_csv_atomic, write_parquet_atomic
    from ..value import round_money

    frame = round_money(frame)  # money to cents
    if path.suffix.lower() == ".parquet":
        write_parquet_atomic(path, frame)
    else:
        write_csv_atomic(path, frame)


# run -----------------------------------------------------------------------------------------
def _run_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--config", required=True, type=Path, help="lifecycle.toml of the data")
    p.add_argument("--data", type=Path, help="the data (default: the config's folder)")
    p.add_argument("--as-of", help="the month to run (default: the extract month)")
    p.add_argument("--force", action="store_true", help="rewrite a month that was run already")
    _workers_argument(p)


def _run_run(args: argparse.Namespace) -> None:
    if args.as_of:
        parse_month(args.as_of, what="--as-of")
    config = load_config(args.config)
    data = args.data or args.config.parent
    with _cluster(config, args.workers) as client:
        _run_and_report(data, config, args.as_of, force=args.force, client=client)


RUN = Command("run", "the whole monthly cycle into reports/<YYYY-MM>/", _run_arguments, _run_run)


# bench ---------------------------------------------------------------------------------------
def _bench_arguments(p: argparse.ArgumentParser) -> None:
    from ..bench import SUITES

    p.add_argument("suites", nargs="*", help=f"any of {', '.join(SUITES)} (default: all)")
    p.add_argument("--customers", type=int, default=None, help="customers in the large case")
    p.add_argument("--months", type=int, default=48, help="months of history (default 48)")
    p.add_argument(
        "--seed", type=int, default=None, help="the demo's seed in the models suite (default 7)"
    )


def _bench_run(args: argparse.Namespace) -> None:
    from ..bench import run_benchmarks

    print(run_benchmarks(args.suites, customers=args.customers, months=args.months, seed=args.seed))


BENCH = Command(
    "bench",
    "performance benchmarks, measured side by side in one run",
    _bench_arguments,
    _bench_run,
)


# settings ------------------------------------------------------------------------------------
def _settings_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--examples",
        action="store_true",
        help="write the settings without a default with example values, not commented out",
    )


def _settings_run(args: argparse.Namespace) -> None:
    from ..config import settings_template

    print(settings_template(examples=args.examples), end="")


SETTINGS = Command(
    "settings",
    "print every setting of lifecycle.toml: its kind, default and meaning (a valid file)",
    _settings_arguments,
    _settings_run,
)

COMMANDS = (CHECK, PANEL, FIT, BACKTEST, SCORE, PLAN, FORECAST, RUN, DEMO, BENCH, SETTINGS)
