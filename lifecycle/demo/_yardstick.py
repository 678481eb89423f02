"""The true process as a yardstick: each customer's cumulative incidence as of any month, by
forward simulation of the demo's own process from the exact simulated state at that month.

A model fitted on the demo can do no better, on average, than the probabilities the process
itself gives from what is known at the cutoff; scoring those probabilities with the same
metrics on the same customers gives the ceiling a model's concordance and Brier score are
measured against (`lifecycle bench models`).
"""

from __future__ import annotations

import logging
from dataclasses import dataclass

import numpy as np
import pandas as pd

from .._months import format_month, parse_month
from ..errors import UsageError
from . import _params as P
from ._simulate import calendar_for, random_streams, simulate_month, start_world
from ._tables import customer_ids
from ._truth import EVENT_OF

log = logging.getLogger(__name__)

#: The causes in the order of `TrueIncidence.incidence`: the panel's event columns.
CAUSE_COLUMNS = (*(EVENT_OF[k] for k in P.CAUSES), EVENT_OF[P.PRODUCT])


@dataclass(frozen=True)
class TrueIncidence:
    """True cumulative incidence of the customers present at the end of ``cutoff``.

    ``incidence[i, t − 1, k]`` is the probability that customer ``customer_id[i]`` has the
    event ``causes[k]`` in months ``cutoff + 1 .. cutoff + t`` (for the uptake: takes the
    product up by then, an uptake in its exit month counting, as in
    `lifecycle.evaluation.observed_outcomes`), estimated over ``paths`` simulated futures.
    """

    cutoff: str
    customer_id: np.ndarray
    causes: tuple[str, ...]
    incidence: np.ndarray  # (n, horizon, K)
    paths: int
    campaign_effect: str = "own"
    campaign_ratio: float | None = None  # the averaged ratio, with campaign_effect "average"

    def frame(self, month: int) -> pd.DataFrame:
        """``customer_id`` and one column per cause: the incidence by ``month`` months ahead."""
        out = pd.DataFrame({"customer_id": self.customer_id})
        for k, cause in enumerate(self.causes):
            out[cause] = self.incidence[:, month - 1, k]
        return out


def _one_future(future, streams, cohort: np.ndarray, c: int, horizon: int) -> np.ndarray:
    """The cohort's expected cumulative incidence ``(customers, horizon, exits + uptake)`` in
    one simulated future: each month adds, for every customer still present, the month's
    probability of each exit (split by the causes' shares) and of the uptake."""
    k_exit = len(P.CAUSES)
    total = np.zeros((cohort.size, horizon, k_exit + 1))
    running = np.zeros((cohort.size, k_exit + 1))
    for h in range(horizon):
        month = simulate_month(future, c + 1 + h, streams)
        if month.active.size:
            where = np.minimum(np.searchsorted(month.active, cohort), month.active.size - 1)
            present = month.active[where] == cohort  # still a customer in this future
        else:
            where, present = np.zeros(cohort.size, dtype=np.int64), np.zeros(cohort.size, bool)
        rows, cols = np.flatnonzero(present), where[present]
        lam = np.column_stack([month.lam[k][cols] for k in P.CAUSES])
        everything = lam.sum(axis=1)
        p_exit = -np.expm1(-everything)
        share = np.divide(lam, everything[:, None], out=np.zeros_like(lam),
                          where=everything[:, None] > 0)  # fmt: skip
        running[rows, :k_exit] += p_exit[:, None] * share
        running[rows, k_exit] += -np.expm1(-np.nan_to_num(month.lam_u[cols]))
        total[:, h] = running
    return total


def true_incidence(
    cutoff: str | int,
    *,
    customers: int = 20_000,
    seed: int = 7,
    months: int = 48,
    horizon: int = 12,
    paths: int = 40,
    campaign_effect: str = "own",
) -> TrueIncidence:
    """Score every customer present at the end of ``cutoff`` with the demo's true process.

    The demo of (``customers``, ``seed``, ``months``) is simulated up to the end of the cutoff
    month exactly as `simulate_demo` does (same draws), so the state is the one its tables
    were written from. From there ``paths`` futures of ``horizon`` months are simulated with
    the same process (arrivals, activity, contract renewals, neighbours taking the product up,
    local move rates, the campaign's effect), each with its own random streams
    (``SeedSequence([seed, cutoff, path])``). Within a future, customer i still active in
    month t has exit hazards ``λ_k`` and uptake hazard ``λ_u`` given that future's state, and

        F̂_k(t) = (1/R) Σ_paths Σ_{s ≤ t} I(i active in s) · (1 − e^{−Λ}) λ_k / Λ,
        F̂_u(t) = (1/R) Σ_paths Σ_{s ≤ t} I(i active in s, not holding) · (1 − e^{−λ_u}),

    with ``Λ = Σ_k λ_k``: the month's event probability in place of its draw (a conditional
    expectation, so the estimate stays unbiased with less Monte Carlo noise).

    Parameters
    ----------
    cutoff
        ``YYYY-MM`` or a month index; at least the first simulated month.
    customers, seed, months
        The demo scenario (as given to `simulate_demo` / `write_demo`).
    horizon
        Months ahead.
    paths
        Simulated futures (R).
    campaign_effect
        ``"own"``: each customer offered by the cutoff keeps its own true hazard ratio (its
        segment's, `lifecycle.demo.campaign_hazard_ratios`): the exact state. ``"average"``:
        every customer offered by the cutoff gets the same ratio, the campaign's average so
        far, ``Σ λ_i·hr_i / Σ λ_i`` over the offered customer-months of the effect window
        simulated up to the cutoff (λ the churn hazard without the offer; 1 when no such
        month has passed, as nothing of the effect could be seen). That is what the data up to
        the cutoff can tell of the effect: its outcomes after the cutoff are what reveal how
        it differs between customers. A campaign after the cutoff runs as in ``"own"``.

    Returns
    -------
    TrueIncidence
    """
    c = parse_month(cutoff, what="cutoff") if isinstance(cutoff, str) else int(cutoff)
    cal = calendar_for(months)
    if c < cal.first:
        raise UsageError(
            f"cutoff was {format_month(c)} but the demo is simulated from {format_month(cal.first)}"
        )
    if campaign_effect not in ("own", "average"):
        raise UsageError(f'campaign_effect was {campaign_effect!r}; use "own" or "average"')
    if horizon < 1 or paths < 1:
        raise UsageError(f"horizon ({horizon}) and paths ({paths}) must be at least 1")
    rng = random_streams(seed)
    extra = max(0, c + horizon - cal.as_of)
    world = start_world(customers, months, rng, extra_months=extra)
    for m in range(cal.first, c + 1):
        simulate_month(world, m, rng)
    pop = world.pop
    ratio = None
    if campaign_effect == "average":
        seen, without = world.effect_sums
        ratio = float(seen / without) if without > 0 else 1.0
        pop.offer_hr[: pop.n][pop.offered[: pop.n]] = ratio
    cohort = np.flatnonzero((pop.start[: pop.n] <= c) & (pop.end[: pop.n] < 0))
    k_exit = len(P.CAUSES)
    total = np.zeros((cohort.size, horizon, k_exit + 1))
    log.info(
        "true incidence: %d customers at %s, %d futures of %d months",
        cohort.size,
        format_month(c),
        paths,
        horizon,
    )
    for path in range(paths):
        total += _one_future(world.branch(), random_streams([seed, c, path]), cohort, c, horizon)
    return TrueIncidence(
        cutoff=format_month(c),
        customer_id=customer_ids(pop.n)[cohort],
        causes=CAUSE_COLUMNS,
        incidence=total / paths,
        paths=paths,
        campaign_effect=campaign_effect,
        campaign_ratio=ratio,
    )
