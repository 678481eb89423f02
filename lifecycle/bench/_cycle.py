"""``lifecycle bench cycle``: the whole monthly cycle, in one process and on a local Dask cluster.

The input is the invented demo scenario (`lifecycle.demo.write_demo`), written once to a
temporary folder (not timed). ``customers`` counts the rows of its customers table: everyone
who was a customer at some time in the 48 months, as in the panel and spatial suites. The demo
is sized by the customers active in a month; it lists about `CUSTOMERS_PER_ACTIVE` customers
per active one (458,002 for 200,000 active, seed 7), so it is written with
``customers / CUSTOMERS_PER_ACTIVE`` active customers and the note gives the counts obtained.

Its ``lifecycle.toml`` is the demo's, less the two settings the demo pins for a small shared
machine (``[models.cox] sample_fraction`` and ``[models.boosted] n_threads``, so that the
families' defaults apply: ``max_rows`` row samples and every core), with ``[run]`` set for a
monthly cycle from scratch: families ``cox`` and ``boosted``, one backtest cutoff, a new fit;
reports and work folders inside the temporary folder, one pair per route, so that neither
route reuses anything of the other.

- "one process": `lifecycle.cycle.run_cycle` — check, backtest, panel with spatial context,
  fit, scoring, offer values, plan, forecast, report, score history, publish.
- "Dask, N local workers": the same `run_cycle` with a client of `compute_client(workers=N)`
  (its start-up counted: a user waits for it too); scoring, offer values and the forecast run
  on the workers (see `run_cycle`).

Each note carries checksums of the scores, the plan and the forecast written by the run, which
must agree between the routes, and the CPU seconds spent (for the Dask route, the driver's and
the workers' together). Peak memory is the driving process's; the Dask note adds the largest
worker's peak resident set size.
"""

from __future__ import annotations

import logging
import os
import resource
import tempfile
import time
from pathlib import Path

from ._harness import Measurement, measure

log = logging.getLogger(__name__)

__all__ = ["run_cycle_bench"]

CUSTOMERS_PER_ACTIVE = 2.29
RUN_SECTION = """
[run]
families = ["cox", "boosted"]
cutoffs = 1
refit_months = 1
backtest_months = 1
reports = "reports"
work = "work"
"""


def _prepare(folder: str, customers: int) -> dict:
    """Write the demo at ``customers`` into ``<folder>/data`` and give each route its own
    config (the demo's settings, with `RUN_SECTION` pointing into ``<folder>/<route>``)."""
    from ..demo import write_demo

    start = time.perf_counter()
    data = Path(folder) / "data"
    active = max(500, round(customers / CUSTOMERS_PER_ACTIVE))
    paths = write_demo(data, customers=active, seed=7)
    text = paths["config"].read_text(encoding="utf-8")
    pinned = ("sample_fraction =", "n_threads =")
    kept = [
        line for line in text[: text.index("[run]")].splitlines() if not line.startswith(pinned)
    ]
    settings = "\n".join(kept).rstrip() + "\n" + RUN_SECTION
    for route in ("single", "dask"):
        (Path(folder) / route).mkdir()
        (Path(folder) / route / "lifecycle.toml").write_text(settings, encoding="utf-8")
    listed = sum(1 for _ in open(paths["customers"], encoding="utf-8")) - 1
    return {
        "seconds": time.perf_counter() - start,
        "note": f"demo of {active:,} active customers a month: {listed:,} customers listed",
    }


def _cpu() -> float:
    """CPU seconds (user + system) of this process so far."""
    times = os.times()
    return times.user + times.system


def _note(result, cpu: float) -> str:
    import pandas as pd

    scores = pd.read_csv(result.files["scores"])
    plan = pd.read_csv(result.files["plan"])
    forecast = pd.read_csv(result.files["forecast"])
    return (
        f"{result.summary['panel_rows']:,} panel rows; {len(scores):,} scored; "
        f"Σ LTV {scores['lifetime_value'].sum():,.2f}; "
        f"plan {len(plan):,} contacts, Σ value {plan['expected_value'].sum():,.2f}; "
        f"Σ expected uptakes {forecast['expected'].sum():,.4f}; {cpu:,.0f} CPU s"
    )


def _route(folder: str, workers: int | None) -> dict:
    import contextlib

    from ..config import load_config
    from ..cycle import run_cycle

    route = "single" if workers is None else "dask"
    config = load_config(Path(folder) / route / "lifecycle.toml")
    data = Path(folder) / "data"
    start, cpu = time.perf_counter(), _cpu()
    if workers is None:
        cluster = contextlib.nullcontext(None)
    else:
        from ..distributed import compute_client

        cluster = compute_client(workers=workers)
    with cluster as client:
        before = sum(client.run(_cpu).values()) if client else 0.0
        result = run_cycle(data, config, client=client)
        seconds = time.perf_counter() - start
        cpu = _cpu() - cpu
        if client:
            cpu += sum(client.run(_cpu).values()) - before
    note = _note(result, cpu)
    if workers is not None:
        worker_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
        note += f"; largest worker {worker_mb:,.0f} MB"
    return {"seconds": seconds, "note": note}


def run_cycle_bench(customers: int = 20_000, workers: int = 2) -> list[Measurement]:
    """Writing the demo, then the whole monthly cycle in one process and with ``workers``
    local Dask workers (three measurements).

    ``customers`` is the number of customers listed (see the module docstring). Writing the
    demo is measured apart; at 1,000,000 customers it needs about 6 GB.
    """
    size = f"{customers:,} customers × 48 months"
    with tempfile.TemporaryDirectory(prefix="lifecycle-bench-cycle-") as tmp:
        prepared = measure("cycle", "write the demo (not part of the cycle)", size, _prepare,
                           role="setup", folder=tmp, customers=customers)  # fmt: skip
        log.info("cycle bench: %s in %.1f s", prepared.note, prepared.seconds)
        single = measure(
            "cycle", "whole cycle, one process", size, _route, role="plain", folder=tmp,
            workers=None,
        )  # fmt: skip
        dask = measure(
            "cycle", f"whole cycle, Dask {workers} local workers", size, _route, folder=tmp,
            workers=workers,
        )  # fmt: skip
        return [prepared, single, dask]
