"""Who may never be contacted: the exclusion flags, the consent column and the final guard.

``do_not_contact`` and ``hardship`` are always exclusion flags; ``[plan] exclude`` can only add
columns to them. Each flag column must be present in the customers table unless
``[plan] flags_absent`` declares that the portfolio keeps no such flag. With
``[plan] consent_column`` set, only customers whose consent value is set (1, true, yes, ...)
may be planned. `guard_plan` checks a finished plan against the flags once more, from the
customers table itself, before it is written: a planned excluded customer is an internal
fault (`PlanSafetyError`, exit code 1), never a file.
"""

from __future__ import annotations

import re
from collections.abc import Sequence

import numpy as np
import pandas as pd

from ..config import DECISION_FLAGS
from ..errors import InputError, PlanSafetyError

__all__ = ["ALWAYS_EXCLUDED", "PlanSafetyError", "guard_plan", "require_flag_columns"]

#: Flags that exclude a customer from every plan, whatever the settings say.
ALWAYS_EXCLUDED = DECISION_FLAGS


def exclusion_columns(extra: Sequence[str] = ()) -> tuple[str, ...]:
    """``do_not_contact``, ``hardship`` and then the extra columns, without repeats."""
    return tuple(dict.fromkeys([*ALWAYS_EXCLUDED, *extra]))


def require_flag_columns(
    customers: pd.DataFrame,
    flags: Sequence[str],
    absent: Sequence[str] = (),
    consent: str | None = None,
    table: str = "customers",
) -> None:
    """Raise `InputError` when a flag (or the consent column) is missing or its header is
    repeated.

    A flag named in ``absent`` may be missing (the settings declare the portfolio has no such
    flag). A repeated header shows up as ``<flag>.1`` (pandas renames repeats): the flags in a
    second copy would be lost, so it is refused.
    """
    columns = [str(c) for c in customers.columns]
    for name in [*flags, *([consent] if consent else [])]:
        repeats = [c for c in columns if re.fullmatch(rf"{re.escape(name)}\.\d+", c)]
        if repeats:
            raise InputError(
                table=table,
                column=name,
                problem=f"the header {name!r} appears more than once ({[name, *repeats]})",
                fix="Keep one column of that name, holding every customer's flag",
            )
    for name in flags:
        if name not in columns and name not in absent:
            raise InputError(
                table=table,
                column=name,
                problem=(
                    f"the exclusion flag {name!r} is missing, so flagged customers could be "
                    "contacted"
                ),
                fix=(
                    f"Add a 0/1 column {name!r}, map yours in [columns.customers], or, if the "
                    f'portfolio keeps no such flag, set [plan] flags_absent = ["{name}"]'
                ),
            )
    if consent and consent not in columns:
        raise InputError(
            table=table,
            column=consent,
            problem=f"[plan] consent_column names {consent!r}, which the table lacks",
            fix="Add the opt-in column (1 = may be contacted) or remove [plan] consent_column",
        )


def guard_plan(
    plan: pd.DataFrame,
    customers: pd.DataFrame,
    flags: Sequence[str],
    consent: str | None = None,
) -> None:
    """Check the plan against the customers' own flags and consent; raise `PlanSafetyError`
    if any planned customer is flagged, not opted in, or unknown."""
    from ._offers import excluded_mask

    if plan.empty:
        return
    present = [f for f in flags if f in customers.columns]
    columns = ["customer_id", *present, *([consent] if consent else [])]
    known = customers[list(dict.fromkeys(columns))].drop_duplicates("customer_id")
    planned = pd.DataFrame({"customer_id": plan["customer_id"].to_numpy()})
    merged = planned.merge(known, on="customer_id", how="left", indicator=True)
    bad = (merged["_merge"] != "both").to_numpy()
    bad |= excluded_mask(merged, present)
    if consent:
        bad |= ~excluded_mask(merged, [consent])
    if bad.any():
        ids = merged.loc[bad, "customer_id"].head(5).tolist()
        raise PlanSafetyError(
            f"internal fault: the plan selects {int(bad.sum())} customer(s) who are flagged "
            f"({', '.join(present) or 'no flag'}"
            f"{', or not opted in to ' + consent if consent else ''}) or unknown, e.g. {ids}; "
            "no plan was written. Please report this"
        )


def consent_mask(frame: pd.DataFrame, consent: str | None) -> np.ndarray:
    """Rows that may be contacted under the consent column (all rows without one)."""
    from ._offers import excluded_mask

    if not consent:
        return np.ones(len(frame), dtype=bool)
    return excluded_mask(frame, [consent])


def exclusion_counts(
    frame: pd.DataFrame, flags: Sequence[str], consent: str | None = None
) -> dict[str, int]:
    """Why customers were left out of the plan: per flag column present, the customers it
    flags, and under ``"not opted in (<consent>)"`` those without consent. A customer may be
    counted under several reasons (so the counts may add up to more than the customers left
    out)."""
    from ._offers import excluded_mask

    out = {name: int(excluded_mask(frame, [name]).sum()) for name in flags if name in frame}
    if consent:
        out[f"not opted in ({consent})"] = int((~consent_mask(frame, consent)).sum())
    return out
