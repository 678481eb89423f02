"""Connecting to a Dask cluster: a local one on this machine, or a running scheduler.

Settings in ``lifecycle.toml`` (all optional; ``lifecycle settings`` prints every setting)::

    [compute]
    scheduler = "tcp://10.0.0.5:8786"   # a running Dask scheduler; its workers need lifecycle
                                        # installed and must see the data folder at the same path
    workers = 4                         # without a scheduler: a local cluster of this many
                                        # worker processes (one thread each)
    partition_customers = 100000        # customers per partition (default 100,000)
"""

from __future__ import annotations

import contextlib
import logging
import numbers
from collections.abc import Iterator
from dataclasses import dataclass
from typing import TYPE_CHECKING

from ..config import Config, section
from ..errors import UsageError

if TYPE_CHECKING:
    from distributed import Client

log = logging.getLogger(__name__)

DEFAULT_PARTITION_CUSTOMERS = 100_000


@dataclass(frozen=True)
class ComputeSettings:
    """The ``[compute]`` section (see the module docstring)."""

    scheduler: str | None = None
    workers: int | None = None
    partition_customers: int = DEFAULT_PARTITION_CUSTOMERS


def compute_settings(config: Config | None) -> ComputeSettings:
    """Read and check the ``[compute]`` section of a config (defaults where it is silent)."""
    raw = section(config or Config(), "compute")  # checked against the settings schema
    scheduler = raw.get("scheduler") or None
    workers = raw.get("workers")
    size = raw.get("partition_customers", DEFAULT_PARTITION_CUSTOMERS)
    return ComputeSettings(scheduler, None if workers is None else int(workers), int(size))


@contextlib.contextmanager
def compute_client(
    workers: int | None = None,
    address: str | None = None,
    *,
    config: Config | None = None,
) -> Iterator[Client]:
    """A `distributed.Client`, closed (with its local cluster) when the block ends.

    - ``workers=N``: a `distributed.LocalCluster` of N worker processes with one thread each,
      listening on loopback (127.0.0.1) only, without a dashboard;
    - ``address="tcp://host:port"``: the running scheduler at that address;
    - neither: ``[compute] scheduler`` from the config, else ``[compute] workers``.

    Workers of a remote scheduler must have this package installed (the same version) and
    see the input files at the same paths as this process.

    Raises
    ------
    UsageError
        If both or neither of a worker count and an address are given (here or in the config),
        or the worker count is not a whole number ≥ 1.
    """
    settings = compute_settings(config)
    if workers is not None and address is not None:
        raise UsageError(
            f"workers was {workers!r} and address was {address!r}; give one of them: a worker "
            "count for a local cluster, or the address of a running scheduler"
        )
    if workers is None and address is None:
        address = settings.scheduler
        workers = None if address else settings.workers
    if workers is None and not address:
        raise UsageError(
            "no cluster was named: give workers=N for a local cluster (--workers N), an "
            'address, or set [compute] scheduler = "tcp://host:port" or workers = N'
        )
    try:
        from distributed import Client, LocalCluster
    except ImportError:  # an optional dependency
        raise UsageError(
            "running on a Dask cluster needs dask and distributed: "
            "pip install 'lifecycle[distributed]'"
        ) from None
    if address:
        log.info("connecting to the Dask scheduler at %s", address)
        with Client(address) as client:
            _quiet_data_errors(client)
            yield client
        return
    _check_whole(workers, "workers")
    log.info("starting a local Dask cluster of %d worker process(es)", workers)
    cluster = LocalCluster(
        n_workers=int(workers),
        threads_per_worker=1,
        processes=True,
        host="127.0.0.1",
        dashboard_address=None,
        # The scheduler always serves a few HTTP routes; port 0 on loopback (not the default
        # 8787) so that a busy port never matters and nothing listens beyond this machine.
        scheduler_kwargs={"dashboard_address": "127.0.0.1:0"},
    )
    with cluster, Client(cluster) as client:
        _quiet_data_errors(client)
        yield client


def _quiet_data_errors(client: Client) -> None:
    from ._plugin import QuietDataErrors

    client.register_plugin(QuietDataErrors())


def _check_whole(value: object, what: str) -> None:
    if isinstance(value, bool) or not isinstance(value, numbers.Integral) or value < 1:
        raise UsageError(f"{what} was {value!r} but is expected to be a whole number >= 1")
