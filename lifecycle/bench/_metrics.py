"""``lifecycle bench metrics``: our time-dependent AUC against scikit-survival's, side by side.

Both compute the cumulative/dynamic AUC with inverse-probability-of-censoring weights (Uno et
al. 2007) at the months 1..12 on the same outcomes and the same per-month risks:

* ours: `lifecycle.evaluation.time_dependent_auc` (competing causes as codes; the events of
  other causes censor);
* plain: `sksurv.metrics.cumulative_dynamic_auc`, given the cause's events as its event flag
  (the same censoring: the other causes' events censor).

The outcomes are invented (seeded): monthly follow-up up to 24 months, three causes, a risk
score that raises the first cause's hazard; the per-month risk is the cumulative incidence a
constant hazard gives, so it ties within a month's customers of equal score. Building them is
not timed; each case times its own call. The plain case's note gives the largest difference
between the two AUCs over the months (the values must agree; `tests/test_metrics.py` holds
the same check at a test's size).
"""

from __future__ import annotations

import dataclasses
import json
import time

import numpy as np

from ._harness import Measurement, measure

SIZES = (10_000, 100_000)
TIMES = np.arange(1.0, 13.0)
SEED = 11


def auc_input(rows: int, seed: int = SEED) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Invented outcomes: follow-up months, cause codes (0 censored; 1, 2, 3) and per-month
    risks ``(rows, len(TIMES))`` of cause 1."""
    rng = np.random.default_rng(seed)
    score = np.round(rng.normal(size=rows), 2)  # two decimals: ties in risk
    hazard = 0.03 * np.exp(0.5 * score)
    months = np.minimum(rng.geometric(hazard), 24).astype(np.float64)
    cause = rng.choice([1, 2, 3], size=rows, p=[0.6, 0.3, 0.1])
    event = np.where(months < 24, cause, 0)
    risk = 1.0 - np.exp(-np.outer(0.6 * hazard, TIMES))
    return months, event, risk


def auc_case(rows: int, library: bool) -> dict:
    """One case in its own process: the AUC at months 1..12, timed around the call."""
    from sksurv.metrics import cumulative_dynamic_auc
    from sksurv.util import Surv

    from ..evaluation import time_dependent_auc

    months, event, risk = auc_input(rows)  # input and imports are not timed
    start = time.perf_counter()
    if library:
        outcomes = Surv.from_arrays(event == 1, months)
        auc, mean = cumulative_dynamic_auc(outcomes, outcomes, risk, TIMES)
    else:
        auc, mean = time_dependent_auc(months, event, risk, TIMES, cause=1)
    seconds = time.perf_counter() - start
    return {"seconds": seconds, "note": json.dumps([*map(float, auc), float(mean)])}


def run_metrics_bench(sizes: tuple[int, ...] = SIZES) -> list[Measurement]:
    """Both cases at each size; the notes give the mean AUC and the largest difference."""
    out: list[Measurement] = []
    for rows in sizes:
        size = f"{rows:,} rows × {TIMES.size} months"
        ours = measure("metrics", "time_dependent_auc", size, auc_case, rows=rows, library=False)
        plain = measure(
            "metrics",
            "sksurv cumulative_dynamic_auc",
            size,
            auc_case,
            role="plain",
            rows=rows,
            library=True,
        )
        a, b = np.array(json.loads(ours.note)), np.array(json.loads(plain.note))
        gap = float(np.nanmax(np.abs(a - b)))
        out.append(dataclasses.replace(ours, note=f"mean AUC {a[-1]:.6f}"))
        out.append(
            dataclasses.replace(plain, note=f"mean AUC {b[-1]:.6f}; largest |ΔAUC| {gap:.1e}")
        )
    return out
