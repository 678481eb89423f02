"""The score history: each month's scores, contact plan and key metrics in one DuckDB file.

The database is embedded (a single file, no server). It is opened for each call and closed
after it, so no connection outlives a call and other processes may use the file between calls;
a call that finds the file locked by another process waits for it (up to ``lock_timeout``).

Layout, every table keyed by the run month ``run_month`` (``YYYY-MM``):

- ``runs``: one row per month: ``created`` (the caller's timestamp, UTC), ``families`` (model
  family per cause, JSON), ``config_hash``, ``data_hash``, ``n_scores``, ``n_plan``;
- ``scores``: one row per customer scored: ``row_order`` (0, 1, … as written), ``customer_id``
  (text), then one column per score column (``survival_<h>m``, ``cif_<cause>_<h>m``,
  ``lifetime_value``, ``area_id``, …), wide; a column first seen in a later month is added
  then, and is empty for earlier months;
- ``plan``: the contact plan, laid out the same way (``customer_id``, ``offer``, ``week``,
  ``expected_value``, ``cost``, ``reasons``, and any further columns);
- ``metrics``: ``position``, ``name``, ``value`` (a number);
- ``frame_columns``: for each month and frame, the written columns in order with their pandas
  dtype (and categories), so that reading a month back gives the frame that was written.

A month is appended in one transaction: either all of it is in the file or none of it is,
whatever happens to the writing process (DuckDB keeps a write-ahead log and replays only
committed transactions).
"""

from __future__ import annotations

import contextlib
import json
import logging
import numbers
import os
import time
from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd

from .._months import format_month, parse_month
from ..errors import InputError, LifecycleError, UsageError
from ._columns import Column, prepared, restored

log = logging.getLogger(__name__)

#: The columns every contact plan has (as `lifecycle.decisions.make_plan` writes them).
PLAN_COLUMNS = ("customer_id", "offer", "week", "expected_value", "cost", "reasons")
#: The keys `ScoreHistory.append_run` needs in ``meta``.
META_KEYS = ("created", "families", "config_hash", "data_hash")
_SCHEMA = (
    """CREATE TABLE IF NOT EXISTS runs (
        run_month VARCHAR NOT NULL, created TIMESTAMP NOT NULL, families VARCHAR NOT NULL,
        config_hash VARCHAR NOT NULL, data_hash VARCHAR NOT NULL,
        n_scores BIGINT NOT NULL, n_plan BIGINT NOT NULL)""",
    """CREATE TABLE IF NOT EXISTS frame_columns (
        run_month VARCHAR NOT NULL, frame VARCHAR NOT NULL, position INTEGER NOT NULL,
        name VARCHAR NOT NULL, dtype VARCHAR NOT NULL, categories VARCHAR, ordered BOOLEAN)""",
    """CREATE TABLE IF NOT EXISTS scores (
        run_month VARCHAR NOT NULL, row_order BIGINT NOT NULL, customer_id VARCHAR NOT NULL)""",
    """CREATE TABLE IF NOT EXISTS plan (
        run_month VARCHAR NOT NULL, row_order BIGINT NOT NULL, customer_id VARCHAR NOT NULL)""",
    """CREATE TABLE IF NOT EXISTS metrics (
        run_month VARCHAR NOT NULL, position INTEGER NOT NULL, name VARCHAR NOT NULL,
        value DOUBLE)""",
)
_TABLES = ("runs", "frame_columns", "scores", "plan", "metrics")
_BUSY = ("could not set lock", "different configuration")


@dataclass(frozen=True)
class RunInfo:
    """What `ScoreHistory` records about one monthly run.

    Attributes
    ----------
    month
        The run month, ``YYYY-MM``.
    created
        When the run was made, as the caller gave it (UTC, without a time zone).
    families
        Model family per cause, e.g. ``{"churn": "cox", "move_out": "boosted"}``.
    config_hash, data_hash
        Content hashes of the configuration and of the input data.
    n_scores, n_plan
        Rows of the month's scores and plan.
    """

    month: str
    created: pd.Timestamp
    families: dict[str, str]
    config_hash: str
    data_hash: str
    n_scores: int
    n_plan: int


class ScoreHistory:
    """Monthly scores, plans and key metrics, kept in an embedded DuckDB file.

    Parameters
    ----------
    path
        The database file. It is created (with its folder) by the first `append_run`; reading
        a history that does not exist yet finds no months.
    lock_timeout
        Seconds to wait for another process that holds the file before giving up.

    Examples
    --------
    >>> history = ScoreHistory("reports/history.duckdb")  # doctest: +SKIP
    >>> history.append_run("2026-03", scores=scores, plan=plan, metrics={"active": 12040},
    ...                    meta=dict(created=now, families={"churn": "cox"},
    ...                              config_hash=h1, data_hash=h2))  # doctest: +SKIP
    >>> history.previous_month("2026-04")  # doctest: +SKIP
    '2026-03'
    """

    def __init__(self, path: str | Path, *, lock_timeout: float = 30.0) -> None:
        self.path = Path(path)
        self.lock_timeout = float(lock_timeout)

    def __repr__(self) -> str:
        return f"ScoreHistory({str(self.path)!r})"

    # -- writing ---------------------------------------------------------------------------
    def append_run(
        self,
        month: str | int,
        *,
        scores: pd.DataFrame,
        plan: pd.DataFrame | None = None,
        metrics: Mapping[str, float] | None = None,
        meta: Mapping[str, object],
        force: bool = False,
    ) -> RunInfo:
        """Append one month's run, atomically.

        Everything of the month is written in one transaction: after a failure or a crash at
        any point the file holds the month completely or not at all, and every other month
        as it was.

        Parameters
        ----------
        month
            The run month (``YYYY-MM`` or a month index): the month the scores are as of.
        scores
            One row per customer: ``customer_id`` (unique; text or integer ids) and the score
            columns (`lifecycle.models.score_customers`: ``survival_<h>m``,
            ``cif_<cause>_<h>m``; and ``lifetime_value``, ``area_id`` or others if present).
            Columns may hold numbers, booleans or text (plain or categorical).
        plan
            The contact plan (columns `PLAN_COLUMNS`, plus any others); ``None``: no plan
            this month (read back as an empty plan).
        metrics
            Key figures by name, each a number.
        meta
            ``created`` (a timestamp or ISO text), ``families`` (cause → model family),
            ``config_hash`` and ``data_hash`` (text).
        force
            Replace the month if it is already stored; without it, a stored month is refused.

        Returns
        -------
        RunInfo
            What was recorded.

        Raises
        ------
        UsageError
            The month is already stored and ``force`` is false, or an argument is malformed.
        InputError
            A frame cannot be stored as given (duplicate or missing ids, an unsupported column
            type, a column whose type differs from earlier months).
        """
        label = _month_label(month)
        score_frame, score_columns = prepared(scores, "scores", required=("customer_id",))
        if plan is None:
            plan = _empty_plan()
        plan_frame, plan_columns = prepared(plan, "plan", required=PLAN_COLUMNS, unique=False)
        metric_rows = _checked_metrics(metrics)
        info = _checked_meta(meta, label, len(score_frame), len(plan_frame))
        self.path.parent.mkdir(parents=True, exist_ok=True)
        _remove_if_empty(self.path)
        with self._connect(write=True) as con:
            con.execute("BEGIN TRANSACTION")
            try:
                present = _clear_month(con, self.path, label, force)
                _insert_run(con, info)
                _insert_frame(con, "scores", label, score_frame, score_columns)
                _insert_frame(con, "plan", label, plan_frame, plan_columns)
                _insert_metrics(con, label, metric_rows)
                con.execute("COMMIT")
            except BaseException:
                with contextlib.suppress(duckdb.Error):  # closing uncommitted rolls back too
                    con.execute("ROLLBACK")
                raise
        log.info(
            "history %s: %s month %s (%d scores, %d plan rows, %d metrics)",
            self.path, "replaced" if present else "appended", label, info.n_scores,
            info.n_plan, len(metric_rows),
        )  # fmt: skip
        return info

    # -- reading ---------------------------------------------------------------------------
    def months(self) -> list[str]:
        """The stored run months, oldest first."""
        with self._connect(write=False) as con:
            if con is None or not _has_runs(con):
                return []
            rows = con.execute("SELECT run_month FROM runs").fetchall()
        return sorted((r[0] for r in rows), key=parse_month)

    def previous_month(self, month: str | int) -> str | None:
        """The latest stored month before ``month`` (which need not be stored), or ``None``."""
        index = parse_month(_month_label(month))
        earlier = [m for m in self.months() if parse_month(m) < index]
        return earlier[-1] if earlier else None

    def run(self, month: str | int) -> RunInfo:
        """What was recorded about the run of ``month`` (`RunInfo`)."""
        label = _month_label(month)
        with self._connect(write=False) as con:
            row = None
            if con is not None and _has_runs(con):
                row = con.execute(
                    "SELECT created, families, config_hash, data_hash, n_scores, n_plan "
                    "FROM runs WHERE run_month = ?",
                    [label],
                ).fetchone()
        if row is None:
            raise self._missing(label)
        created, families, config_hash, data_hash, n_scores, n_plan = row
        return RunInfo(
            month=label,
            created=pd.Timestamp(created),
            families=json.loads(families),
            config_hash=config_hash,
            data_hash=data_hash,
            n_scores=int(n_scores),
            n_plan=int(n_plan),
        )

    def runs(self) -> pd.DataFrame:
        """Every stored run, oldest first: ``month``, ``created``, ``families`` (JSON text),
        ``config_hash``, ``data_hash``, ``n_scores``, ``n_plan``."""
        columns = ["month", "created", "families", "config_hash", "data_hash", "n_scores"]
        columns.append("n_plan")
        with self._connect(write=False) as con:
            if con is None or not _has_runs(con):
                return pd.DataFrame(columns=columns)
            frame = con.execute(
                "SELECT run_month AS month, created, families, config_hash, data_hash, "
                "n_scores, n_plan FROM runs"
            ).df()
        order = np.argsort([parse_month(m) for m in frame["month"]], kind="stable")
        return frame.iloc[order].reset_index(drop=True)

    def scores(self, month: str | int) -> pd.DataFrame:
        """The scores written for ``month``, as written: the same columns in the same order
        with the same dtypes and rows in the same order (under a fresh ``RangeIndex``)."""
        return self._frame("scores", month)

    def plan(self, month: str | int) -> pd.DataFrame:
        """The contact plan written for ``month``, as written (see `scores`); empty, with the
        plan's columns, if none was given."""
        return self._frame("plan", month)

    def metrics(self, month: str | int) -> dict[str, float]:
        """The key metrics written for ``month``, in the order written, as floats."""
        label = _month_label(month)
        rows = None
        with self._connect(write=False) as con:
            if con is not None and _has_month(con, label):
                rows = con.execute(
                    "SELECT name, value FROM metrics WHERE run_month = ? ORDER BY position",
                    [label],
                ).fetchall()
        if rows is None:
            raise self._missing(label)
        return {name: float("nan") if value is None else float(value) for name, value in rows}

    # -- pieces ----------------------------------------------------------------------------
    def _frame(self, table: str, month: str | int) -> pd.DataFrame:
        label = _month_label(month)
        frame = None
        with self._connect(write=False) as con:
            if con is not None and _has_month(con, label):
                frame = _read_frame(con, table, label)
        if frame is None:
            raise self._missing(label)
        return frame

    def _missing(self, label: str) -> UsageError:
        stored = self.months()
        return UsageError(
            f"the score history {self.path} has no run for month {label}; stored months are "
            f"{stored if stored else 'none'}"
        )

    @contextlib.contextmanager
    def _connect(self, *, write: bool) -> Iterator[duckdb.DuckDBPyConnection | None]:
        """A connection for one call (``None`` when reading a history that does not exist).

        Waits, with growing pauses, while another process holds the file.
        """
        if not write and (not self.path.exists() or self.path.stat().st_size == 0):
            yield None
            return
        deadline = time.monotonic() + self.lock_timeout
        pause = 0.02
        while True:
            try:
                con = duckdb.connect(str(self.path), read_only=not write)
                break
            except duckdb.Error as exc:
                text = str(exc)
                if not any(b in text.lower() for b in _BUSY):
                    raise UsageError(
                        f"the score history {self.path} could not be opened as a DuckDB "
                        f"database ({text}); point the history path at a DuckDB file or at a "
                        "new file"
                    ) from exc
                if time.monotonic() >= deadline:
                    raise LifecycleError(
                        f"the score history {self.path} is held by another process and was "
                        f"not released within {self.lock_timeout:g} s ({text}); try again when "
                        "that process has finished"
                    ) from exc
                time.sleep(pause)
                pause = min(2 * pause, 0.5)
        try:
            yield con
        finally:
            con.close()


def _empty_plan() -> pd.DataFrame:
    """A plan without rows, typed as `lifecycle.decisions.make_plan` types its columns."""
    dtypes = dict(customer_id=object, offer=object, week=np.int64, expected_value=np.float64)
    dtypes.update(cost=np.float64, reasons=object)
    return pd.DataFrame({c: pd.Series(dtype=dtypes[c]) for c in PLAN_COLUMNS})


def _remove_if_empty(path: Path) -> None:
    """Remove an empty file at ``path`` that no process holds.

    A crash of the very first append between DuckDB creating the file and writing its header
    leaves an empty file, which holds nothing but which DuckDB refuses to open. It is removed
    only under a POSIX lock of our own (the kind DuckDB takes), so a file that another process
    is creating right now is left alone.
    """
    if not path.exists() or path.stat().st_size:
        return
    try:
        import fcntl
    except ImportError:  # not POSIX: DuckDB's message then names the file
        return
    with open(path, "rb+") as handle:
        try:
            fcntl.lockf(handle, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError:
            return
        if os.fstat(handle.fileno()).st_size == 0:
            path.unlink()


# -- checking what is written --------------------------------------------------------------
def _month_label(month: str | int) -> str:
    if isinstance(month, bool) or not isinstance(month, str | int | np.integer):
        raise UsageError(f"month was {month!r} but is expected as YYYY-MM, e.g. 2026-03")
    index = parse_month(month, what="month") if isinstance(month, str) else int(month)
    return format_month(index)


def _checked_metrics(metrics: Mapping[str, float] | None) -> list[tuple[str, float]]:
    if metrics is None:
        return []
    if not isinstance(metrics, Mapping):
        raise UsageError(f"metrics must be a mapping of name → number; got {type(metrics)}")
    rows = []
    for name, value in metrics.items():
        if not isinstance(name, str) or not name:
            raise UsageError(f"metric names must be non-empty text; got {name!r}")
        if isinstance(value, bool) or not isinstance(value, numbers.Real):
            raise UsageError(f"metric {name!r} was {value!r} but must be a number")
        rows.append((name, float(value)))
    return rows


def _checked_meta(meta: Mapping[str, object], label: str, n_scores: int, n_plan: int) -> RunInfo:
    if not isinstance(meta, Mapping):
        raise UsageError(f"meta must be a mapping with keys {list(META_KEYS)}")
    missing = [k for k in META_KEYS if k not in meta]
    if missing:
        raise UsageError(f"meta lacks {missing}; it needs {list(META_KEYS)}")
    try:
        created = pd.Timestamp(meta["created"])
    except (TypeError, ValueError) as exc:
        raise UsageError(f"meta created was {meta['created']!r}, not a timestamp") from exc
    if created is pd.NaT or pd.isna(created):
        raise UsageError("meta created is missing (NaT); give the run's timestamp")
    if created.tzinfo is not None:
        created = created.tz_convert("UTC").tz_localize(None)
    families = meta["families"]
    if not isinstance(families, Mapping) or not all(
        isinstance(k, str) and isinstance(v, str) for k, v in families.items()
    ):
        raise UsageError(f"meta families must map cause → family name (text); got {families!r}")
    for key in ("config_hash", "data_hash"):
        if not isinstance(meta[key], str) or not meta[key]:
            raise UsageError(f"meta {key} was {meta[key]!r} but must be non-empty text")
    return RunInfo(
        month=label,
        created=created,
        families=dict(families),
        config_hash=str(meta["config_hash"]),
        data_hash=str(meta["data_hash"]),
        n_scores=n_scores,
        n_plan=n_plan,
    )


# -- SQL -----------------------------------------------------------------------------------
def _quoted(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _has_runs(con: duckdb.DuckDBPyConnection) -> bool:
    """Whether the file has the history's tables (a file whose first append failed has none)."""
    query = "SELECT count(*) FROM duckdb_tables() WHERE table_name = 'runs'"
    return bool(con.execute(query).fetchone()[0])


def _has_month(con: duckdb.DuckDBPyConnection, label: str) -> bool:
    if not _has_runs(con):
        return False
    return bool(con.execute("SELECT count(*) FROM runs WHERE run_month = ?", [label]).fetchone()[0])


def _clear_month(con, path: Path, label: str, force: bool) -> bool:
    """Create the tables if new and delete the rows of month ``label`` if it is stored and
    ``force`` (else a `UsageError`); whether it was stored."""
    for statement in _SCHEMA:
        con.execute(statement)
    present = con.execute("SELECT count(*) FROM runs WHERE run_month = ?", [label]).fetchone()[0]
    if present and not force:
        raise UsageError(
            f"the score history {path} already holds month {label}; an earlier "
            "month is never overwritten unless asked: pass force=True (--force) to "
            "replace it"
        )
    if present:
        for table in _TABLES:
            con.execute(f"DELETE FROM {table} WHERE run_month = ?", [label])
    return bool(present)


def _insert_run(con: duckdb.DuckDBPyConnection, info: RunInfo) -> None:
    con.execute(
        "INSERT INTO runs VALUES (?, ?, ?, ?, ?, ?, ?)",
        [
            info.month,
            info.created.to_pydatetime(),
            json.dumps(info.families),
            info.config_hash,
            info.data_hash,
            info.n_scores,
            info.n_plan,
        ],
    )


def _insert_frame(
    con: duckdb.DuckDBPyConnection,
    table: str,
    label: str,
    frame: pd.DataFrame,
    columns: list[Column],
) -> None:
    """Insert one month's frame into ``table``, adding the columns it lacks."""
    existing = {
        name.lower(): (name, kind)
        for name, kind in con.execute(
            "SELECT column_name, data_type FROM duckdb_columns() WHERE table_name = ?", [table]
        ).fetchall()
    }
    for column in columns:
        if column.name == "customer_id":
            continue
        found = existing.get(column.name.lower())
        if found is None:
            con.execute(f"ALTER TABLE {table} ADD COLUMN {_quoted(column.name)} {column.sql_type}")
        elif found[1] != column.sql_type and frame[column.name].notna().any():
            # (a column without values fits any stored type)
            raise InputError(
                table=table,
                column=column.name,
                problem=(
                    f"column is stored as {found[1]} by earlier months but this month's "
                    f"values ({column.dtype}) need {column.sql_type}"
                ),
                fix="convert the column to the stored type, or give it a new name",
            )
    con.executemany(
        "INSERT INTO frame_columns VALUES (?, ?, ?, ?, ?, ?, ?)",
        [
            [
                label,
                table,
                position,
                c.name,
                c.dtype,
                None if c.categories is None else json.dumps(c.categories),
                c.ordered,
            ]
            for position, c in enumerate(columns)
        ],
    )
    incoming = frame.copy(deep=False)
    incoming.insert(0, "row_order", np.arange(len(frame), dtype=np.int64))
    incoming.insert(0, "run_month", label)
    names = ", ".join(_quoted(n) for n in incoming.columns)
    con.register("incoming_frame", incoming)
    try:
        con.execute(f"INSERT INTO {table} ({names}) SELECT {names} FROM incoming_frame")
    finally:
        con.unregister("incoming_frame")


def _insert_metrics(con: duckdb.DuckDBPyConnection, label: str, rows: list) -> None:
    if rows:
        con.executemany(
            "INSERT INTO metrics VALUES (?, ?, ?, ?)",
            [[label, i, name, value] for i, (name, value) in enumerate(rows)],
        )


def _read_frame(con: duckdb.DuckDBPyConnection, table: str, label: str) -> pd.DataFrame:
    spec = con.execute(
        "SELECT name, dtype, categories, ordered FROM frame_columns "
        "WHERE run_month = ? AND frame = ? ORDER BY position",
        [label, table],
    ).fetchall()
    columns = [
        Column(name, dtype, "", None if cats is None else json.loads(cats), ordered)
        for name, dtype, cats, ordered in spec
    ]
    selected = ", ".join(_quoted(c.name) for c in columns)
    raw = con.execute(
        f"SELECT {selected} FROM {table} WHERE run_month = ? ORDER BY row_order", [label]
    ).df()
    return restored(raw, columns)
