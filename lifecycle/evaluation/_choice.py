"""A stable, honestly scored champion per cause.

`choose_champions` reads the tidy backtest metrics (`backtest`) and, per cause:

1. **Chooses on all cutoffs but the latest.** With cutoffs c_1 < … < c_m (m ≥ 2), each
   family's mean Uno concordance over c_1..c_{m−1} at the horizon (12 months if scored, else
   the largest) ranks the families; a family whose concordance is NaN at every one of those
   cutoffs is never champion. With one cutoff the choice is made on it.
2. **Keeps last month's champion unless another family is clearly better:** the best family
   replaces the previous champion only when its mean concordance exceeds the previous
   champion's by more than ``margin`` (default 0.005, ``[run] switch_margin``): differences
   smaller than that are within the month-to-month noise of a backtest (common practice:
   a hysteresis band against flip-flopping). Without a previous champion (or when it is no
   longer among the families, or has no score) the best family is taken.
3. **Reports the champion's score on the held-out latest cutoff** c_m, which took no part
   in the choice (``held_out_uno_c``, ``held_out_brier``). With one cutoff there is no
   held-out score (NaN), and the report says so.

The result says for each cause whether the family changed from last month and why.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from .._months import parse_month

__all__ = ["CHOICE_COLUMNS", "DEFAULT_SWITCH_MARGIN", "choose_champions"]

DEFAULT_SWITCH_MARGIN = 0.005
CHOICE_COLUMNS = [
    "cause",
    "family",
    "horizon",
    "uno_c",
    "brier",
    "chosen_on",
    "held_out_cutoff",
    "held_out_uno_c",
    "held_out_brier",
    "previous_family",
    "changed",
    "why",
]


def choose_champions(
    metrics: pd.DataFrame,
    *,
    previous: Mapping[str, str] | None = None,
    margin: float = DEFAULT_SWITCH_MARGIN,
) -> pd.DataFrame:
    """The champion family per cause, chosen on the earlier cutoffs and scored on the latest.

    Parameters
    ----------
    metrics
        `BacktestResult.metrics`: ``family``, ``cause``, ``horizon``, ``cutoff``, ``metric``,
        ``value``.
    previous
        Cause → last month's champion family (e.g. from the score history), or ``None``.
    margin
        How much higher (in Uno's C) another family's mean must be to replace the previous
        champion.

    Returns
    -------
    pandas.DataFrame
        `CHOICE_COLUMNS`: ``uno_c`` and ``brier`` are the champion's means over the cutoffs
        it was chosen on (``chosen_on``, comma-separated); ``held_out_*`` its scores on the
        latest cutoff; ``changed`` is True when the family differs from ``previous``;
        ``why`` says in words how it was chosen.
    """
    if metrics.empty:
        return pd.DataFrame(columns=CHOICE_COLUMNS)
    previous = dict(previous or {})
    out = []
    for cause, part in metrics.groupby("cause", sort=False):
        horizons = sorted(part["horizon"].unique())
        horizon = 12 if 12 in horizons else horizons[-1]
        at = part[(part["horizon"] == horizon) & part["metric"].isin(["uno_c", "brier"])]
        cutoffs = sorted(at["cutoff"].unique(), key=parse_month)
        held_out = cutoffs[-1] if len(cutoffs) >= 2 else None
        chosen_on = cutoffs[:-1] if held_out is not None else cutoffs
        means = _means(at[at["cutoff"].isin(chosen_on)])
        if means.empty:
            continue
        family, why = _pick(means, previous.get(str(cause)), margin)
        late = _means(at[at["cutoff"] == held_out]) if held_out is not None else None
        held = late.loc[family] if late is not None and family in late.index else None
        before = previous.get(str(cause))
        out.append(
            dict(
                cause=cause,
                family=family,
                horizon=int(horizon),
                uno_c=float(means.loc[family, "uno_c"]),
                brier=float(means.loc[family, "brier"]),
                chosen_on=",".join(chosen_on),
                held_out_cutoff=held_out,
                held_out_uno_c=float(held["uno_c"]) if held is not None else np.nan,
                held_out_brier=float(held["brier"]) if held is not None else np.nan,
                previous_family=before,
                changed=before is not None and before != family,
                why=why,
            )
        )
    return pd.DataFrame(out, columns=CHOICE_COLUMNS)


def _means(frame: pd.DataFrame) -> pd.DataFrame:
    """Per family, the mean ``uno_c`` and ``brier`` (NaN skipped)."""
    means = frame.pivot_table(
        index="family", columns="metric", values="value", aggfunc="mean", dropna=False
    )
    return means.reindex(columns=["uno_c", "brier"])


def _pick(means: pd.DataFrame, before: str | None, margin: float) -> tuple[str, str]:
    """The family kept or chosen, and why (in words)."""
    scored = means[means["uno_c"].notna()]
    if scored.empty:  # no concordance anywhere: the lowest Brier score, then the name
        best = means.sort_values("brier", na_position="last", kind="stable").index[0]
        return str(best), "no family had a concordance; lowest Brier score"
    # equal concordances (to 12 places) are a tie, settled by the Brier score, then the name
    ranked = scored.assign(_c=-scored["uno_c"].round(12)).sort_values(
        ["_c", "brier"], na_position="last", kind="stable"
    )
    best = str(ranked.index[0])
    best_c = float(ranked["uno_c"].iloc[0])
    if before is None:
        return best, f"highest mean Uno's C ({best_c:.3f}); no previous champion"
    if before not in scored.index:
        return best, f"highest mean Uno's C ({best_c:.3f}); last month's {before} has no score"
    before_c = float(scored.loc[before, "uno_c"])
    if best == before:
        return best, f"kept: still the highest mean Uno's C ({best_c:.3f})"
    if best_c - before_c > margin:
        return best, (
            f"changed from {before}: Uno's C {best_c:.3f} against {before_c:.3f}, more than "
            f"the switch margin {margin:g}"
        )
    return before, (
        f"kept: {best} scored {best_c:.3f} against {before_c:.3f}, within the switch margin "
        f"{margin:g}"
    )
