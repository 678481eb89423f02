"""Features whose future is known: how a snapshot's value moves on month by month.

When a model predicts months 1..H after a snapshot, tenure and season advance by themselves;
every other feature is held at its snapshot value unless ``[panel] known_future`` gives it a
schedule::

    [panel]
    known_future = { contract_months_left = "countdown",
                     contract_ending = "within:contract_months_left:1",
                     on_promo = "until:promo_months_left" }

Schedules, for the row ``s`` months after the snapshot row (``s = 0`` is the snapshot row
itself, which is never changed) with ``v`` the feature's snapshot value and ``L`` the
snapshot value of the named countdown column:

``countdown``
    ``max(v − s, 0)``: months left of something, one fewer each month, floored at 0.
``within:<column>:<k>``
    ``1`` while the countdown ``L − s`` lies in ``[0, k]`` and ``L ≥ 1``, else ``0``: a flag
    such as "the contract ends within k months" that switches on as the countdown nears 0
    and off once it is past (``L = 0`` at the snapshot means the term is already over or
    rolling: the flag is 0 from the next month on).
``until:<column>``
    ``v`` while ``L − s > 0``, then ``0``: a status that stays until the countdown in
    ``<column>`` runs out (a promotion until its last month, say).
``countup``
    ``v + s``: months since something, one more each month (past offers' months since).
``upto:<column>:<k>``
    ``1`` while the count-up ``C + s`` of ``<column>`` is at most ``k``, else ``0`` (``C`` its
    snapshot value; 0 when C is missing): an offer's effect window.

A missing value (NaN) stays missing. The column named by ``within`` and ``until`` must itself
be a ``countdown``, the one named by ``upto`` a ``countup``. The schedules of the past-offer
features (`lifecycle.panel._offers`) are added by themselves.
"""

from __future__ import annotations

from collections.abc import Mapping

import numpy as np
import pandas as pd

from ..errors import UsageError

__all__ = ["check_known_future", "project_known_future"]

_KINDS = ("countdown", "within:<column>:<k>", "until:<column>", "countup", "upto:<column>:<k>")
_NEEDS = {"within": "countdown", "until": "countdown", "upto": "countup"}


def check_known_future(schedule: Mapping[str, object] | None) -> dict[str, str]:
    """The schedule as ``{column: spec}`` after checking every spec (see the module docstring).

    Raises `UsageError` naming the bad entry, what is allowed and the fix.
    """
    out: dict[str, str] = {}
    for column, spec in dict(schedule or {}).items():
        text = spec if isinstance(spec, str) else repr(spec)
        parts = text.split(":")
        ok = isinstance(spec, str) and (
            (parts in (["countdown"], ["countup"]))
            or (parts[0] in ("within", "upto") and len(parts) == 3 and _whole(parts[2]))
            or (parts[0] == "until" and len(parts) == 2)
        )
        if not ok:
            raise UsageError(
                f"[panel] known_future: {column} = {text!r} is not a schedule; allowed are "
                f"{list(_KINDS)} (k a whole number of months), e.g. "
                '{ contract_months_left = "countdown" }'
            )
        out[str(column)] = spec
    for column, spec in out.items():
        kind, *rest = spec.split(":")
        if rest and out.get(rest[0]) != _NEEDS[kind]:
            raise UsageError(
                f"[panel] known_future: {column} = {spec!r} counts on {rest[0]!r}, which must "
                f'itself be declared "{_NEEDS[kind]}"; add it to known_future'
            )
    return out


def project_known_future(
    frame: pd.DataFrame, steps: np.ndarray, schedule: Mapping[str, str] | None
) -> None:
    """Move the scheduled columns of ``frame`` (rows of snapshot values) ``steps`` months on.

    ``frame`` holds, on each row, the snapshot's features; ``steps`` (one per row) the months
    after the snapshot row. Columns not in ``frame`` are skipped. Changes ``frame`` in place.
    """
    if not schedule:
        return
    steps = np.asarray(steps, dtype=np.float64)
    ahead = steps > 0
    snapshot = {
        c: frame[c].to_numpy(dtype=np.float64, na_value=np.nan) for c in schedule if c in frame
    }
    for column, spec in schedule.items():
        if column not in snapshot:
            continue
        v = snapshot[column]
        parts = spec.split(":")
        if parts[0] == "countdown":
            new = np.maximum(v - steps, 0.0)
        elif parts[0] == "countup":
            new = v + steps
        elif parts[0] == "upto":
            if parts[1] not in snapshot:
                continue
            count = snapshot[parts[1]] + steps
            on = ~np.isnan(count) & (count <= int(parts[2]))
            new = np.where(ahead, on.astype(np.float64), v)
        else:
            if parts[1] not in snapshot:
                continue
            left = snapshot[parts[1]] - steps
            if parts[0] == "within":
                on = (left >= 0) & (left <= int(parts[2])) & (snapshot[parts[1]] >= 1)
                new = np.where(ahead, on.astype(np.float64), v)
            else:
                new = np.where(ahead & (left <= 0), 0.0, v)
            new = np.where(np.isnan(snapshot[parts[1]]), v, new)
        new = np.where(np.isnan(v), np.nan, new)
        frame[column] = new.astype(frame[column].dtype if _is_float(frame[column]) else np.float32)


def _whole(text: str) -> bool:
    return text.isdigit()


def _is_float(values: pd.Series) -> bool:
    return pd.api.types.is_float_dtype(values)
