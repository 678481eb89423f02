"""The monthly cycle on a Dask cluster, with the results of the single-process run.

Panel building, spatial context, landmark snapshots, scoring, lifetime and offer values and the
uptake forecast run partition by partition on the workers of a `distributed` cluster: a local
one (``compute_client(workers=N)``) or a running scheduler (``address=`` or ``[compute]
scheduler`` in the config). Input tables may be folders of Parquet parts too large for one
process (`distribute_tables`). Each step runs, on each partition, the function the
single-process cycle runs (`build_panel`, `build_snapshot`, `landmark_snapshots`,
`lifecycle.cycle.score_snapshot`, `lifecycle.value.offer_values`, `forecast_uptake`), one task
per partition submitted with the arguments it needs. Results are `dask.dataframe.DataFrame`
collections whose partitions, concatenated in order (``frame.compute().reset_index(drop=True)``),
equal the single-process result: the same rows in the same order, the same columns and dtypes,
values equal up to floating-point rounding. What needs every customer
(the spatial context, the forecast's intervals) is computed from small per-customer summaries
or gathered by area, as each function's docstring says.

Fitting stays in one process (`sample_customers` draws the customers to fit on; see
``lifecycle.distributed._score``).

Example::

    from lifecycle import load_config
    from lifecycle.distributed import compute_client, distribute_tables, panel_with_context

    config = load_config("data/lifecycle.toml")
    with compute_client(workers=4) as client:
        data = distribute_tables(client, "data", config=config)
        panel = panel_with_context(data, "2026-10")
        panel.to_parquet("panel_parts")  # dask's own writer, one file per partition
"""

from ._client import ComputeSettings, compute_client, compute_settings
from ._forecast import forecast_portfolio
from ._panel import landmark_snapshots, panel_with_context, snapshot_with_context
from ._score import (
    DistributedScored,
    offer_values,
    sample_customers,
    score_portfolio,
)
from ._sources import distribute_tables
from ._tables import PartitionedTables

__all__ = [
    "ComputeSettings",
    "DistributedScored",
    "PartitionedTables",
    "compute_client",
    "compute_settings",
    "distribute_tables",
    "forecast_portfolio",
    "landmark_snapshots",
    "offer_values",
    "panel_with_context",
    "sample_customers",
    "score_portfolio",
    "snapshot_with_context",
]
