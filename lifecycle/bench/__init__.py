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


def _panel_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._panel import run_panel_bench

    return run_panel_bench(customers=customers or 1_000_000, months=months)


def _spatial_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._spatial import run_spatial_bench

    return run_spatial_bench(customers=customers or 1_000_000, months=months)


def _decisions_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._decisions import run_decisions_bench
    from ._scoring import run_scoring_bench

    return run_decisions_bench(customers=customers or 1_000_000) + run_scoring_bench(
        customers=customers or 1_000_000
    )


def _models_suite(customers: int | None, months: int) -> list[Measurement]:
    from ._models import run_models_bench

    return run_models_bench(customers=customers or 100_000)


SUITES: dict[str, Callable[[int | None, int], list[Measurement]]] = {
    "panel": _panel_suite,
    "spatial": _spatial_suite,
    "models": _models_suite,
    "decisions": _decisions_suite,
}


def run_benchmarks(
    suites: Sequence[str] = (), *, customers: int | None = None, months: int = 48
) -> str:
    """Run the named suites (all when empty) and return the table of figures and ratios."""
    unknown = sorted(set(suites) - set(SUITES))
    if unknown:
        raise UsageError(f"unknown benchmark suite(s) {unknown}; choose from {sorted(SUITES)}")
    results: list[Measurement] = []
    for name in suites or list(SUITES):
        log.info("benchmark suite %s", name)
        results.extend(SUITES[name](customers, months))
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
    return "\n".join(lines)
