"""The champion per cause: chosen on the earlier cutoffs, scored on the latest, stable.

The rule is documented in lifecycle/evaluation/_choice.py; the metrics here are made up so
that each branch of the rule holds by construction (worked by hand).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lifecycle.evaluation import CHOICE_COLUMNS, choose_champions


def metrics(values: dict[tuple[str, str], list[float]], cause: str = "churn") -> pd.DataFrame:
    """Tidy metrics: (family, metric) → one value per cutoff 2025-04, 2025-07, 2025-10."""
    cutoffs = ["2025-04", "2025-07", "2025-10"]
    rows = []
    for (family, metric), per_cutoff in values.items():
        for cutoff, value in zip(cutoffs, per_cutoff, strict=True):
            rows.append(
                dict(
                    family=family,
                    cause=cause,
                    horizon=12,
                    cutoff=cutoff,
                    metric=metric,
                    value=value,
                )
            )
    return pd.DataFrame(rows)


BRIER = [0.1, 0.1, 0.1]


def test_chosen_on_the_earlier_cutoffs_and_scored_on_the_latest():
    m = metrics(
        {
            ("cox", "uno_c"): [0.70, 0.72, 0.60],
            ("cox", "brier"): BRIER,
            ("boosted", "uno_c"): [0.68, 0.69, 0.80],  # best only on the held-out cutoff
            ("boosted", "brier"): BRIER,
        }
    )
    out = choose_champions(m)
    assert list(out.columns) == CHOICE_COLUMNS
    row = out.iloc[0]
    assert row.family == "cox" and row.chosen_on == "2025-04,2025-07"
    assert row.uno_c == pytest.approx(0.71)  # mean over the two cutoffs that chose it
    assert row.held_out_cutoff == "2025-10" and row.held_out_uno_c == pytest.approx(0.60)
    assert not row.changed and row.previous_family is None


def test_last_months_champion_is_kept_within_the_margin_and_replaced_beyond_it():
    m = metrics(
        {
            ("cox", "uno_c"): [0.700, 0.704, 0.7],
            ("cox", "brier"): BRIER,
            ("boosted", "uno_c"): [0.700, 0.700, 0.7],
            ("boosted", "brier"): BRIER,
        }
    )
    # cox leads by 0.002 < 0.005: boosted, last month's champion, stays
    kept = choose_champions(m, previous={"churn": "boosted"}).iloc[0]
    assert kept.family == "boosted" and not kept.changed
    assert "within the switch margin" in kept.why
    # with a margin of 0.001 the lead is enough
    moved = choose_champions(m, previous={"churn": "boosted"}, margin=0.001).iloc[0]
    assert moved.family == "cox" and moved.changed and moved.previous_family == "boosted"
    assert moved.why.startswith("changed from boosted")


def test_a_family_without_any_concordance_is_never_champion():
    m = metrics(
        {
            ("forest", "uno_c"): [np.nan, np.nan, np.nan],
            ("forest", "brier"): [0.01, 0.01, 0.01],
            ("cox", "uno_c"): [0.6, 0.6, 0.6],
            ("cox", "brier"): BRIER,
        }
    )
    assert choose_champions(m).iloc[0].family == "cox"
    # last month's champion without a score is replaced whatever the margin
    out = choose_champions(m, previous={"churn": "forest"}, margin=0.9).iloc[0]
    assert out.family == "cox" and out.changed


def test_one_cutoff_has_no_held_out_score():
    m = metrics({("cox", "uno_c"): [0.7, 0.7, 0.7], ("cox", "brier"): BRIER})
    m = m[m.cutoff == "2025-04"]
    row = choose_champions(m).iloc[0]
    assert row.family == "cox" and row.held_out_cutoff is None and np.isnan(row.held_out_uno_c)
