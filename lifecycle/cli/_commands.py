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


def _load(args: argparse.Namespace):
    from ..data import load_tables

    config = _config_for(args.data, args.config)
    return load_tables(args.data, config), config


# check ---------------------------------------------------------------------------------------
def _check_run(args: argparse.Namespace) -> None:
    from ..data import describe_tables

    tables, _ = _load(args)
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


def build_panel_with_context(tables, as_of: str, config: Config, *, spatial: bool = True):
    """The panel of ``as_of`` with its spatial context (what ``lifecycle panel`` writes)."""
    from ..panel import build_panel

    panel = build_panel(tables, as_of, config=config)
    if not spatial:
        return panel
    from ..spatial import add_spatial_context

    return add_spatial_context(panel, tables, config=config)


def _panel_run(args: argparse.Namespace) -> None:
    from .._files import write_parquet_atomic

    parse_month(args.as_of, what="--as-of")
    if args.out.suffix.lower() != ".parquet":
        raise UsageError(f"--out was {str(args.out)!r} but must be a .parquet file")
    tables, config = _load(args)
    panel = build_panel_with_context(tables, args.as_of, config, spatial=not args.no_spatial)
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


def _demo_run(args: argparse.Namespace) -> None:
    from .._files import write_parquet_atomic
    from ..data import load_tables
    from ..demo import write_demo

    if args.customers < 100:
        raise UsageError(f"--customers was {args.customers} but must be at least 100")
    paths = write_demo(args.out, customers=args.customers, seed=args.seed)
    config = load_config(paths["config"])
    tables = load_tables(args.out, config)
    as_of = format_month(tables.extract_month)
    panel = build_panel_with_context(tables, as_of, config)
    panel_path = args.out / f"panel_{as_of}.parquet"
    write_parquet_atomic(panel_path, panel)
    print(f"demo data in {args.out}/ (truth in {paths['truth']})")
    print(f"panel {panel_path}: {len(panel):,} customer-months, {panel.shape[1]} columns")


DEMO = Command(
    "demo",
    "write the invented demo scenario and run the monthly cycle on it",
    _demo_arguments,
    _demo_run,
)


# bench ---------------------------------------------------------------------------------------
def _bench_arguments(p: argparse.ArgumentParser) -> None:
    from ..bench import SUITES

    p.add_argument("suites", nargs="*", help=f"any of {', '.join(SUITES)} (default: all)")
    p.add_argument("--customers", type=int, default=None, help="customers in the large case")
    p.add_argument("--months", type=int, default=48, help="months of history (default 48)")


def _bench_run(args: argparse.Namespace) -> None:
    from ..bench import run_benchmarks

    print(run_benchmarks(args.suites, customers=args.customers, months=args.months))


BENCH = Command(
    "bench",
    "performance benchmarks, measured side by side in one run",
    _bench_arguments,
    _bench_run,
)

COMMANDS = (CHECK, PANEL, DEMO, BENCH)
