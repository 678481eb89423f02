"""``lifecycle bench``: performance suites, each measuring its cases side by side in one run.

Each case runs in a fresh process (see `_harness.measure`). A suite compares our way with the
plain way on the same input at the same size; the table prints the ratio of their times.
"""

from __future__ import annotations

import logging
import os
import platform
from collections.abc import Callable, Sequence

from ..errors import UsageError
from ._harness import Measurement

log = logging.getLogger(__name__)


# Sizes when --customers is not given: the whole suite finishes in minutes on 2 cores.
DEFAULT_CUSTOMERS = {
    "panel": 200_000,
    "spatial": 200_000,
    "models": 10_000,
    "decisions": 100_000,
    "cycle": 20_000,
    "response": 20_000,
}
MODELS_MAX_CUSTOMERS = 100_000  # its plain case fits Cox on every row: hours beyond this
PLAIN_CUSTOMERS = 10_000  # the size at which the slow plain routes run by default


def _panel_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._panel import run_panel_bench

    n = customers or DEFAULT_CUSTOMERS["panel"]
    return run_panel_bench(
        customers=n,
        months=months,
        baseline_customers=min(n, 50_000 if customers else PLAIN_CUSTOMERS),
    )


def _spatial_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._spatial import run_spatial_bench

    n = customers or DEFAULT_CUSTOMERS["spatial"]
    return run_spatial_bench(
        customers=n,
        months=months,
        baseline_customers=min(n, 50_000 if customers else PLAIN_CUSTOMERS),
    )


def _decisions_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._decisions import run_decisions_bench
    from ._scoring import run_scoring_bench

    n = customers or DEFAULT_CUSTOMERS["decisions"]
    return run_decisions_bench(customers=n, exact_customers=min(n, 20_000)) + run_scoring_bench(
        customers=n
    )


def _models_suite(customers: int | None, months: int, seed: int | None = None) -> list[Measurement]:
    from ._models import DEMO_SEED, run_models_bench

    n = min(customers or DEFAULT_CUSTOMERS["models"], MODELS_MAX_CUSTOMERS)
    if customers and customers > n:
        log.info("models suite: %d customers (its every-row Cox fit takes hours beyond)", n)
    return run_models_bench(customers=n, seed=DEMO_SEED if seed is None else seed)


def _metrics_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._metrics import SIZES, run_metrics_bench

    return run_metrics_bench((customers,) if customers else SIZES)


def _cycle_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._cycle import run_cycle_bench

    return run_cycle_bench(customers=customers or DEFAULT_CUSTOMERS["cycle"])


def _response_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._response import run_response_bench

    return run_response_bench(customers or DEFAULT_CUSTOMERS["response"])


SUITES: dict[str, Callable[..., list[Measurement]]] = {
    "panel": _panel_suite,
    "spatial": _spatial_suite,
    "models": _models_suite,
    "decisions": _decisions_suite,
    "metrics": _metrics_suite,
    "cycle": _cycle_suite,
    "response": _response_suite,
}


def run_benchmarks(
    suites: Sequence[str] = (),
    *,
    customers: int | None = None,
    months: int = 48,
    seed: int | None = None,
) -> str:
    """Run the named suites (all when empty) and return the table of figures and ratios.
    ``seed``: the demo's seed in the models suite (default `lifecycle.bench._models.DEMO_SEED`),
    to see how its truth ratios vary between demos."""
    unknown = sorted(set(suites) - set(SUITES))
    if unknown:
        raise UsageError(f"unknown benchmark suite(s) {unknown}; choose from {sorted(SUITES)}")
    results: list[Measurement] = []
    for name in suites or list(SUITES):
        log.info("benchmark suite %s", name)
        extra = {"seed": seed} if name == "models" and seed is not None else {}
        results.extend(SUITES[name](customers, months, **extra))
    return format_table(results)


def format_table(results: Sequence[Measurement]) -> str:
    """A plain-text table; for each plain-route case, the ratio of its time to ours."""
    header = f"{'suite':<9} {'case':<40} {'size':<24} {'seconds':>9} {'peak MB':>9}  note"
    lines = [
        f"machine: {platform.machine()}, {os.cpu_count()} cores, "
        f"Python {platform.python_version()}",
        header,
        "-" * len(header),
    ]
    for m in results:
        lines.append(
            f"{m.suite:<9} {m.case:<40} {m.size:<24} {m.seconds:>9.2f} {m.peak_mb:>9.0f}  {m.note}"
        )
    ratios = []
    for plain in (m for m in results if m.role == "plain"):
        ours = [
            m
            for m in results
            if m.role == "ours" and m.suite == plain.suite and m.size == plain.size
        ]
        for m in ours:
            ratios.append(
                f"{plain.suite}: {plain.case} / {m.case} at {m.size}: "
                f"{plain.seconds / max(m.seconds, 1e-9):.1f}× the time"
            )
    if ratios:
        lines += ["", "ratios (plain route's time over ours, same input, same run):", *ratios]
    goals = _cycle_goals(results)
    if goals:
        lines += ["", "whole-cycle goals (at 1,000,000 customers × 48 months):", *goals]
    return "\n".join(lines)


def _cycle_goals(results: Sequence[Measurement]) -> list[str]:
    """The cycle suite against its goals: ≤ 15 minutes and ≤ 12 GB in one process, and the
    Dask route on local workers at most 1.3× the one-process time."""
    single = [m for m in results if m.suite == "cycle" and m.role == "plain"]
    dask = [m for m in results if m.suite == "cycle" and m.role == "ours"]
    out = []
    for one in single:
        out.append(
            f"one process at {one.size}: {one.seconds / 60:.1f} min (goal ≤ 15), "
            f"peak {one.peak_mb / 1024:.1f} GB (goal ≤ 12)"
        )
        for other in (m for m in dask if m.size == one.size):
            out.append(
                f"{other.case} / one process: {other.seconds / max(one.seconds, 1e-9):.2f}× "
                "the time (goal ≤ 1.3)"
            )
    return out
