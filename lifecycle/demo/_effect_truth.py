"""The true effect of the campaign offer on each customer, from the demo's own process.

Forward simulation, not a closed form: a customer's churn hazard over the next year depends on
features that move (contract ends, complaints, bill shocks, taking the product up), so the
change the offer makes to its 12-month churn incidence is computed by simulating the same
futures twice, once with the offer and once without.
"""

from __future__ import annotations

import dataclasses
import logging

import numpy as np
import pandas as pd

from .._months import format_month, parse_month
from ..errors import UsageError
from . import _params as P
from ._simulate import calendar_for, random_streams, simulate_month, start_world
from ._tables import customer_ids
from ._yardstick import _one_future

log = logging.getLogger(__name__)

TRUE_EFFECT_COLUMNS = [
    "customer_id",
    "hazard_ratio",
    "churn_offered",
    "churn_not_offered",
    "effect",
]


def true_offer_effect(
    customer_id: object,
    month: str | int = P.CAMPAIGN_MONTH,
    *,
    customers: int = 20_000,
    seed: int = 7,
    months: int = 48,
    horizon: int = 12,
    paths: int = 20,
) -> pd.DataFrame:
    """The true change in each customer's churn incidence if offered the campaign's offer.

    The demo of (``customers``, ``seed``, ``months``) is simulated exactly as `simulate_demo`
    does up to the end of ``month`` (the offer month m). Each customer's true hazard ratio is
    that of its segment (`_params.campaign_hazard_ratios` on its features of month m, the
    rules in ``truth.json``). Then ``paths`` futures of ``horizon`` months are simulated twice
    from that state with the same random streams (``SeedSequence([seed, m, path])``, common
    random numbers): once with every given customer offered in month m (its churn hazard
    times its ratio in months m+1..m+``effect_months``), once with none of them offered; both
    leave out every other offer (the past campaign included). With the month's exit
    probability in place of its draw, as `true_incidence` does,

    .. math::

        \\Delta_i = \\hat F^{\\text{offered}}_{i,\\text{churn}}(H)
                    - \\hat F^{\\text{not}}_{i,\\text{churn}}(H)

    averaged over the futures: negative where the offer lowers the churn incidence over
    months m+1..m+H. Offering the given customers together changes the others' futures only
    through who is left in the district, which does not enter any churn hazard.

    Parameters
    ----------
    customer_id
        Ids of customers still a customer at the end of ``month``.
    month
        The offer month (``YYYY-MM`` or month index); default the demo's campaign month.
    customers, seed, months
        The demo scenario (as given to `simulate_demo` / `write_demo`).
    horizon
        Months of churn incidence (12: the ``effect_<offer>`` of the scores).
    paths
        Simulated futures.

    Returns
    -------
    pandas.DataFrame
        `TRUE_EFFECT_COLUMNS`, one row per given id in its order: ``hazard_ratio`` (the true
        ratio of the customer's segment), ``churn_offered`` and ``churn_not_offered`` (the
        churn incidence by month m + ``horizon`` either way) and ``effect`` (their difference).
    """
    m = parse_month(month, what="month") if isinstance(month, str) else int(month)
    cal = calendar_for(months)
    if not cal.first <= m <= cal.as_of:
        raise UsageError(
            f"month was {format_month(m)} but the demo is simulated from {format_month(cal.first)}"
            f" to {format_month(cal.as_of)}"
        )
    if horizon < 1 or paths < 1:
        raise UsageError(f"horizon ({horizon}) and paths ({paths}) must be at least 1")
    rng = random_streams(seed)
    world = start_world(customers, months, rng, extra_months=max(0, m + horizon - cal.as_of))
    for t in range(cal.first, m + 1):
        last = simulate_month(world, t, rng)
    cohort = _cohort(world, customer_id, m)
    at = np.searchsorted(last.active, cohort)
    frame = pd.DataFrame({name: np.asarray(values)[at] for name, values in last.x.items()})
    frame["tenure_start"] = frame["tenure"]
    ratio = P.campaign_hazard_ratios(frame)
    world = dataclasses.replace(world, cal=dataclasses.replace(world.cal, campaign=m))
    world.pop.offered[:] = False
    log.info("true offer effect: %d customers at %s, %d futures", cohort.size, format_month(m),
             paths)  # fmt: skip
    churn = P.CAUSES.index("churn")
    with_offer = np.zeros(cohort.size)
    without = np.zeros(cohort.size)
    for path in range(paths):
        for offered, total in ((True, with_offer), (False, without)):
            future = world.branch()
            future.pop.offered[cohort] = offered
            future.pop.offer_hr[cohort] = ratio
            streams = random_streams([seed, m, path])
            total += _one_future(future, streams, cohort, m, horizon)[:, horizon - 1, churn]
    with_offer, without = with_offer / paths, without / paths
    return pd.DataFrame(
        {
            "customer_id": customer_ids(world.pop.n)[cohort],
            "hazard_ratio": ratio,
            "churn_offered": with_offer,
            "churn_not_offered": without,
            "effect": with_offer - without,
        },
        columns=TRUE_EFFECT_COLUMNS,
    )


def _cohort(world, customer_id: object, m: int) -> np.ndarray:
    """Population indices of the given ids, each a customer at the end of month m."""
    pop = world.pop
    wanted = pd.Index(pd.Series(np.asarray(customer_id, dtype=object).ravel()).astype(str))
    ids = pd.Index(customer_ids(pop.n))
    where = ids.get_indexer(wanted)
    present = np.zeros(where.size, dtype=bool)
    known = where >= 0
    present[known] = (pop.start[where[known]] <= m) & (
        (pop.end[where[known]] < 0) | (pop.end[where[known]] > m)
    )
    if wanted.empty or not present.all():
        raise UsageError(
            f"{int((~present).sum())} of {wanted.size} customer ids are not customers of the demo "
            f"at the end of {format_month(m)} (for example {list(wanted[~present][:5])}); give "
            "ids of customers present then"
        )
    return where
