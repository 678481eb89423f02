"""The report's section on young start-month cohorts: their survival projected with the
shifted-beta-geometric model (`lifecycle.forecast.fit_shifted_beta_geometric`), beside the
life table of the tenure section."""

from __future__ import annotations

from typing import Any

import numpy as np
import pandas as pd

from .._months import format_month
from ..errors import UsageError
from ..forecast import fit_shifted_beta_geometric
from ._blocks import Cell, Section, count, number, pct_text
from ._inputs import ReportInputs

MIN_PERIODS = 3
"""A cohort is projected once it has been observed for this many months."""
MIN_SIZE = 10
PROJECT = (12, 24)


def cohort_alive(panel: pd.DataFrame, month: int, *, youngest: int = 12) -> pd.DataFrame:
    """Customers alive at the start of each tenure month, per start-month cohort, for the
    cohorts that started in the last ``youngest`` months up to ``month``: ``cohort``
    (``YYYY-MM``), ``tenure`` (0 = the start month), ``alive``."""
    from .._months import categorical_to_index

    months = categorical_to_index(panel["month"])
    tenure = panel["tenure_start"].to_numpy().astype(np.int64)
    cohort = months - tenure
    keep = cohort > month - youngest
    frame = pd.DataFrame({"cohort": cohort[keep], "tenure": tenure[keep]})
    out = frame.groupby(["cohort", "tenure"]).size().rename("alive").reset_index()
    out["cohort"] = out["cohort"].map(format_month)
    return out


def cohort_section(inputs: ReportInputs) -> tuple[Section, dict[str, Any]]:
    """Young cohorts' survival so far and projected (sBG), one row per cohort."""
    section = Section("cohorts", "Young cohorts: retention projected")
    alive = inputs.cohort_alive
    if alive is None or len(alive) == 0:
        section.note("No cohort started in the last twelve months, so none is projected.")
        return section, {"cohorts": None}
    section.text(
        "Each start-month cohort's survival projected from its first months with the "
        "shifted-beta-geometric model (Fader & Hardie 2007): every customer leaves in a month "
        "with a constant probability that varies across customers as Beta(α, β), so the "
        "cohort's retention rises as the likeliest leavers go first. Cohorts observed for "
        f"fewer than {MIN_PERIODS} months or with fewer than {MIN_SIZE} customers are left out."
    )
    rows, key = [], {}
    for cohort, part in alive.groupby("cohort", sort=True):
        counts = part.sort_values("tenure")["alive"].to_numpy(dtype=float)
        if counts.size < MIN_PERIODS + 1 or counts[0] < MIN_SIZE:
            continue
        try:
            fit = fit_shifted_beta_geometric(np.minimum.accumulate(counts))
        except UsageError:
            continue
        projected = fit.survival(np.array(PROJECT))
        key[str(cohort)] = {
            "size": float(counts[0]), "months": int(counts.size - 1),
            "alpha": fit.alpha, "beta": fit.beta,
            **{f"survival_{t}m": float(s) for t, s in zip(PROJECT, projected, strict=True)},
        }  # fmt: skip
        rows.append(
            [
                Cell(str(cohort)), count(counts[0]), count(counts.size - 1),
                Cell(pct_text(counts[-1] / counts[0], 1), number=True),
                number(fit.alpha, 2), number(fit.beta, 2),
                *[Cell(pct_text(s, 1), number=True) for s in projected],
            ]
        )  # fmt: skip
    if not rows:
        section.note("No young cohort is large and old enough to project yet.")
        return section, {"cohorts": None}
    section.table(
        ["cohort", "customers", "months seen", "still customers", "α", "β",
         *[f"projected at {t} months" for t in PROJECT]],
        rows,
        caption="Share of each cohort still a customer, so far and projected",
    )  # fmt: skip
    return section, {"cohorts": key}
