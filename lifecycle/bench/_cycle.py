"""``lifecycle bench cycle``: the monthly cycle in one process, and on a local Dask cluster.

Both routes run on the same input, the invented demo scenario written once to a temporary
folder (`lifecycle.demo.write_demo`), with the same model: a cause-specific Cox model fitted
in one process on a smaller demo of the same scenario and saved with joblib (fitting stays in
one process on either route, so it is not part of the comparison). Each route then does what
the monthly cycle does with the data: the panel with spatial context, the scoring snapshot with
its context, hazards, scores and lifetime values, and the uptake forecast by area.

- "one process": `lifecycle.load_tables`, `build_panel` + `add_spatial_context`,
  `build_snapshot` + `add_spatial_context`, `HazardModel.hazard_array`, `score_customers`,
  `lifetime_value`, `forecast_uptake`.
- "Dask, N local workers": `compute_client(workers=N)` (its start-up counted: a user waits
  for it too), `distribute_tables` reading the customers and activity as folders of Parquet
  parts (the same rows, written beside the demo files in `_prepare`, 2N parts each),
  `panel_with_context` (kept on the workers), `score_portfolio`, `forecast_portfolio`,
  scores gathered.

Each note carries the panel's row count and checksums of the scores and the forecast, which
must agree between the routes, and the CPU seconds spent (the Dask route's: driver and
workers together), a figure that other load on the machine does not inflate. The Dask route's
peak memory is the driver's; the note adds the largest worker's peak resident set size.
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

AS_OF = "2026-10"
_FIT_CUSTOMERS = 5_000


def _prepare(folder: str, model_path: str, customers: int, parts: int) -> dict:
    """Write the demo at ``customers`` (also as Parquet parts) and fit the model on a smaller
    demo of the same scenario."""
    import shutil

    import joblib
    import numpy as np
    import pandas as pd

    from ..config import load_config
    from ..data import load_tables, read_raw_tables
    from ..demo import write_demo
    from ..models import CauseSpecificCox
    from ..panel import build_panel
    from ..spatial import add_spatial_context

    start = time.perf_counter()
    data = Path(folder) / "data"
    write_demo(data, customers=customers, seed=7)
    split = Path(folder) / "parts"
    split.mkdir()
    for name in ("uptakes.csv", "campaigns.csv", "areas.geojson", "lifecycle.toml"):
        shutil.copy(data / name, split / name)
    raw = read_raw_tables(data, load_config(data / "lifecycle.toml"))
    cuts = np.linspace(0, len(raw.customers), parts + 1).round().astype(int)
    owner = pd.Index(raw.customers["customer_id"]).get_indexer(raw.activity["customer_id"])
    part = np.searchsorted(cuts, owner, "right") - 1
    for name in ("customers", "activity"):
        (split / name).mkdir()
    for i in range(parts):
        path = f"part-{i:03d}.parquet"
        rows = raw.customers.iloc[cuts[i] : cuts[i + 1]]
        rows.to_parquet(split / "customers" / path, index=False)
        raw.activity[part == i].to_parquet(split / "activity" / path, index=False)
    fit_folder = Path(folder) / "fit"
    write_demo(fit_folder, customers=min(customers, _FIT_CUSTOMERS), seed=8)
    config = load_config(fit_folder / "lifecycle.toml")
    tables = load_tables(fit_folder, config)
    panel = add_spatial_context(build_panel(tables, AS_OF, config=config), tables, config=config)
    joblib.dump(CauseSpecificCox(sample_fraction=0.25).fit(panel), model_path)
    return {"seconds": time.perf_counter() - start, "note": "demo written, model fitted"}


def _cpu() -> float:
    """CPU seconds (user + system) of this process so far."""
    times = os.times()
    return times.user + times.system


def _note(panel_rows: int, scores, forecast) -> str:
    return (
        f"{panel_rows:,} panel rows; Σ LTV {scores['lifetime_value'].sum():,.2f}; "
        f"Σ expected uptakes {forecast['expected'].sum():,.4f}"
    )


def _single_route(folder: str, model_path: str) -> dict:
    import joblib
    import numpy as np

    from ..config import load_config
    from ..data import load_tables
    from ..forecast import forecast_settings, forecast_uptake
    from ..models import score_customers
    from ..models._base import survival_from_hazards
    from ..panel import build_panel, build_snapshot
    from ..spatial import add_spatial_context, premise_areas
    from ..value import lifetime_value, value_settings

    model = joblib.load(model_path)
    data = Path(folder) / "data"
    start, cpu = time.perf_counter(), _cpu()
    config = load_config(data / "lifecycle.toml")
    tables = load_tables(data, config)
    panel = add_spatial_context(build_panel(tables, AS_OF, config=config), tables, config=config)
    snapshot = build_snapshot(tables, AS_OF, config=config)
    snapshot = add_spatial_context(snapshot, tables, config=config)
    value, fc = value_settings(config), forecast_settings(config)
    months = max(12, value.horizon_months, fc.horizon_months)
    hazards = model.hazard_array(snapshot, months)
    scores = score_customers(model, snapshot, (3, 6, 12), hazards=hazards)
    scores["lifetime_value"] = lifetime_value(
        survival_from_hazards(hazards, len(model.terminal_causes_))[:, : value.horizon_months],
        snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        annual_discount=value.annual_discount,
    )
    ids = snapshot["customer_id"].to_numpy()
    forecast = forecast_uptake(
        hazards[:, : fc.horizon_months],
        model.causes_,
        start_month="2026-11",
        areas=premise_areas(tables, config).reindex(ids).to_numpy(),
        levels=fc.levels,
        method=fc.method,
        exact_max=fc.exact_max,
        customer_ids=ids,
    )
    seconds = time.perf_counter() - start
    note = f"{_note(len(panel), scores, forecast)}; {_cpu() - cpu:,.1f} CPU s"
    return {"seconds": seconds, "note": note}


def _dask_route(folder: str, model_path: str, workers: int) -> dict:
    import joblib
    from distributed import wait

    from ..config import load_config
    from ..distributed import (
        compute_client,
        distribute_tables,
        forecast_portfolio,
        panel_with_context,
        score_portfolio,
    )

    model = joblib.load(model_path)
    data = Path(folder) / "parts"
    start, cpu = time.perf_counter(), _cpu()
    config = load_config(data / "lifecycle.toml")
    with compute_client(workers=workers) as client:
        before = sum(client.run(_cpu).values())
        tables = distribute_tables(client, data, config=config)
        panel = panel_with_context(tables, AS_OF)
        wait(panel.parts)
        rows = len(panel)
        scored = score_portfolio(tables, model, AS_OF)
        forecast = forecast_portfolio(tables, scored)
        scores = scored.scores.gather()
        seconds = time.perf_counter() - start
        cpu = _cpu() - cpu + sum(client.run(_cpu).values()) - before
    worker_mb = resource.getrusage(resource.RUSAGE_CHILDREN).ru_maxrss / 1024.0
    note = f"{_note(rows, scores, forecast)}; {cpu:,.1f} CPU s; largest worker {worker_mb:,.0f} MB"
    return {"seconds": seconds, "note": note}


def run_cycle_bench(customers: int = 20_000, workers: int = 2) -> list[Measurement]:
    """The cycle's partitionable steps, in one process and on ``workers`` local Dask workers.

    ``customers`` is the demo's portfolio size (about that many active in any month, 48
    months); the demo simulation itself needs memory (about 2 GB per 100,000 customers).
    """
    size = f"{customers:,} customers × 48 months"
    with tempfile.TemporaryDirectory(prefix="lifecycle-bench-cycle-") as tmp:
        model_path = str(Path(tmp) / "model.joblib")
        prepared = measure(
            "cycle", "prepare", size, _prepare, folder=tmp, model_path=model_path,
            customers=customers, parts=2 * workers,
        )  # fmt: skip
        log.info("cycle bench: input prepared in %.1f s", prepared.seconds)
        single = measure(
            "cycle", "one process", size, _single_route, role="plain", folder=tmp,
            model_path=model_path,
        )  # fmt: skip
        dask = measure(
            "cycle", f"Dask, {workers} local workers", size, _dask_route, folder=tmp,
            model_path=model_path, workers=workers,
        )  # fmt: skip
        return [single, dask]
