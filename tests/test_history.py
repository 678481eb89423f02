"""The score history (DuckDB): round trips, month order, force, atomicity under failures and
SIGKILL, waiting for a held file; and the comparison of a stored month with what happened."""

from __future__ import annotations

import functools
import os
import shutil
import signal
import subprocess
import sys
import tempfile
import time
from pathlib import Path

import duckdb
import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sksurv.metrics import brier_score as sk_brier_score
from sksurv.metrics import concordance_index_ipcw
from sksurv.util import Surv

import lifecycle.history as history_module
from lifecycle._months import format_month, parse_month
from lifecycle.errors import InputError, LifecycleError, UsageError
from lifecycle.evaluation import (
    TenureLifeTable,
    calibration_table,
    observed_outcomes,
    outcome_for_cause,
)
from lifecycle.history import ScoreHistory, compare_with_outcomes
from lifecycle.history import _store as store
from lifecycle.history._compare import _predicted_at
from lifecycle.models import score_customers
from lifecycle.panel import build_panel, build_snapshot
from tests._builders import make_tables

ROOT = Path(__file__).resolve().parents[1]
META = dict(
    created="2026-04-02T09:30:00",
    families={"churn": "cox", "move_out": "boosted", "other_exit": "cox"},
    config_hash="c0ffee",
    data_hash="d00dad",
)


def _scores(n: int = 40, seed: int = 0, ids: str = "text") -> pd.DataFrame:
    """Scores shaped as `score_customers` gives them, plus lifetime value and area (random
    numbers: only the storage is under test here)."""
    rng = np.random.default_rng(seed)
    out = {
        "customer_id": (
            [f"K{seed}-{i:04d}" for i in range(n)] if ids == "text" else np.arange(n) * 3 + 7
        )
    }
    for h in (3, 6, 12):
        out[f"survival_{h}m"] = rng.uniform(0.5, 1.0, n)
    for cause in ("churn", "move_out", "other_exit", "uptake_mesh"):
        for h in (3, 6, 12):
            out[f"cif_{cause}_{h}m"] = rng.uniform(0.0, 0.2, n)
    out["lifetime_value"] = rng.gamma(2.0, 150.0, n)
    out["area_id"] = pd.Categorical(rng.choice(["NORTHFIELD", "SOUTHMERE", "EASTBROOK"], n))
    return pd.DataFrame(out)


def _plan(scores: pd.DataFrame, seed: int = 0) -> pd.DataFrame:
    rng = np.random.default_rng(seed)
    chosen = scores["customer_id"].iloc[: len(scores) // 4].to_numpy()
    return pd.DataFrame(
        {
            "customer_id": chosen,
            "offer": rng.choice(["loyalty_discount", "speed_boost"], chosen.size).astype(object),
            "week": rng.integers(1, 5, chosen.size).astype(np.int64),
            "expected_value": rng.normal(20.0, 5.0, chosen.size),
            "cost": np.full(chosen.size, 12.5),
            "reasons": np.array(["short tenure; price rise"] * chosen.size, dtype=object),
        }
    )


def _dump(path: Path) -> dict[str, pd.DataFrame]:
    """Every table of the database, rows sorted, plus its column list: 'exactly as before'."""
    with duckdb.connect(str(path), read_only=True) as con:
        names = [r[0] for r in con.execute("SELECT table_name FROM duckdb_tables()").fetchall()]
        out = {
            "__columns__": con.execute(
                "SELECT table_name, column_name, data_type FROM duckdb_columns() "
                "ORDER BY table_name, column_index"
            ).df()
        }
        for name in names:
            out[name] = con.execute(f"SELECT * FROM {name} ORDER BY ALL").df()
    return out


def _assert_same_dump(before: dict, after: dict) -> None:
    assert before.keys() == after.keys()
    for name in before:
        pd.testing.assert_frame_equal(before[name], after[name], obj=name)


# -- writing and reading back ----------------------------------------------------------------
def test_round_trip_scores_plan_metrics_and_run(tmp_path):
    history = ScoreHistory(tmp_path / "history.duckdb")
    scores, plan = _scores(), _plan(_scores())
    metrics = {"active_customers": 12040, "churn_3m_mean": 0.0321, "brier_churn_3m": float("nan")}
    info = history.append_run("2026-03", scores=scores, plan=plan, metrics=metrics, meta=META)
    pd.testing.assert_frame_equal(history.scores("2026-03"), scores)
    pd.testing.assert_frame_equal(history.plan("2026-03"), plan)
    back = history.metrics("2026-03")
    assert list(back) == list(metrics)
    assert back["active_customers"] == 12040.0 and back["churn_3m_mean"] == 0.0321
    assert np.isnan(back["brier_churn_3m"])
    run = history.run("2026-03")
    assert run == info
    assert run.created == pd.Timestamp("2026-04-02 09:30:00")
    assert run.families == META["families"] and (run.n_scores, run.n_plan) == (40, 10)


def test_round_trip_keeps_every_supported_dtype(tmp_path):
    history = ScoreHistory(tmp_path / "history.duckdb")
    scores = pd.DataFrame(
        {
            "customer_id": np.array([10, 2, 33, 4], dtype=np.int64),  # integer ids come back
            "survival_3m": np.array([0.9, np.nan, 1.0, -0.0]),
            "cif_churn_3m": np.array([0.1, np.inf, 0.0, 1e-300]),
            "score32": np.array([0.25, 1.5, -3.0, 7.0], dtype=np.float32),
            "segment": pd.array(["a", None, "c", "d"], dtype="string"),
            "area_id": pd.Categorical(["X", "Y", None, "X"], categories=["Y", "X", "Z"]),
            "band": pd.Categorical(["lo", "hi", "lo", "hi"], categories=["lo", "hi"], ordered=True),
            "contacts": pd.array([1, None, 3, 0], dtype="Int64"),
            "flag": np.array([True, False, True, True]),
            "tenure": np.array([1, 2, 3, 4], dtype=np.int16),
            "note": np.array(["x", None, "ä ünïcode", ""], dtype=object),
        }
    )
    history.append_run("2026-03", scores=scores, meta=META)
    pd.testing.assert_frame_equal(history.scores("2026-03"), scores)
    # no plan given: an empty plan with the plan's columns
    assert list(history.plan("2026-03").columns) == list(history_module.PLAN_COLUMNS)
    assert history.plan("2026-03").empty and history.metrics("2026-03") == {}


@settings(max_examples=10, deadline=None)
@given(
    values=st.lists(
        st.tuples(
            st.text(min_size=1, max_size=6),
            st.floats(allow_nan=True, allow_infinity=True),
            st.one_of(st.none(), st.text(max_size=4)),
        ),
        min_size=0,
        max_size=30,
        unique_by=lambda t: t[0],
    )
)
def test_round_trip_property(values):
    """Any text ids, any doubles (NaN, ±inf, −0.0), any text with blanks come back as written."""
    frame = pd.DataFrame(
        {
            "customer_id": pd.Series([v[0] for v in values], dtype=object),
            "cif_churn_3m": pd.Series([v[1] for v in values], dtype=np.float64),
            "area_id": pd.Series([v[2] for v in values], dtype=object),
        }
    )
    with tempfile.TemporaryDirectory() as folder:
        history = ScoreHistory(Path(folder) / "h.duckdb")
        history.append_run("2026-01", scores=frame, meta=META)
        back = history.scores("2026-01")
    pd.testing.assert_frame_equal(back, frame)
    number = frame["cif_churn_3m"].notna().to_numpy()  # −0.0 keeps its sign
    assert np.array_equal(
        np.signbit(back["cif_churn_3m"].to_numpy()[number]),
        np.signbit(frame["cif_churn_3m"].to_numpy()[number]),
    )


def test_months_are_ordered_and_previous_month_is_the_latest_before(tmp_path):
    path = tmp_path / "sub" / "history.duckdb"
    history = ScoreHistory(path)
    assert history.months() == [] and history.previous_month("2026-03") is None
    assert not path.exists()  # reading never creates the file
    for month in ("2026-03", "2025-12", "2026-1"):
        history.append_run(month, scores=_scores(seed=len(month)), meta=META)
    assert history.months() == ["2025-12", "2026-01", "2026-03"]
    assert history.previous_month("2026-03") == "2026-01"
    assert history.previous_month("2026-02") == "2026-01"  # need not be stored itself
    assert history.previous_month("2026-01") == "2025-12"
    assert history.previous_month("2025-12") is None
    assert history.previous_month("2027-01") == "2026-03"
    assert history.runs()["month"].tolist() == ["2025-12", "2026-01", "2026-03"]


def test_a_stored_month_is_refused_without_force_and_replaced_exactly_with_it(tmp_path):
    path = tmp_path / "history.duckdb"
    history = ScoreHistory(path)
    first = {m: _scores(seed=i) for i, m in enumerate(("2026-01", "2026-02", "2026-03"))}
    for month, scores in first.items():
        history.append_run(month, scores=scores, plan=_plan(scores), metrics={"n": 1}, meta=META)
    before = _dump(path)
    with pytest.raises(UsageError, match=r"already holds month 2026-02.*force=True"):
        history.append_run("2026-02", scores=_scores(seed=9), meta=META)
    _assert_same_dump(before, _dump(path))

    # the replacement has other customers, fewer columns and a new one
    new = _scores(n=7, seed=9, ids="integer").drop(columns=["lifetime_value"])
    new["rank_in_area"] = np.arange(7, dtype=np.int64)
    history.append_run(
        "2026-02", scores=new, metrics={"m": 2.5}, meta={**META, "data_hash": "beef"}, force=True
    )
    assert history.months() == ["2026-01", "2026-02", "2026-03"]
    pd.testing.assert_frame_equal(history.scores("2026-02"), new)
    assert history.plan("2026-02").empty and history.metrics("2026-02") == {"m": 2.5}
    assert history.run("2026-02").data_hash == "beef"
    for month in ("2026-01", "2026-03"):  # the other months are untouched
        pd.testing.assert_frame_equal(history.scores(month), first[month])
        pd.testing.assert_frame_equal(history.plan(month), _plan(first[month]))
        assert history.metrics(month) == {"n": 1.0}


# -- atomicity -------------------------------------------------------------------------------
@pytest.mark.parametrize("force", [False, True])
def test_a_failure_after_the_scores_insert_leaves_the_database_as_before(
    tmp_path, monkeypatch, force
):
    path = tmp_path / "history.duckdb"
    history = ScoreHistory(path)
    history.append_run("2026-01", scores=_scores(seed=1), plan=_plan(_scores(seed=1)), meta=META)
    history.append_run("2026-02", scores=_scores(seed=2), metrics={"a": 1.0}, meta=META)
    before = _dump(path)
    original = store._insert_frame
    calls = []

    def failing(con, table, *args):
        original(con, table, *args)
        calls.append(table)
        if table == "scores":
            raise RuntimeError("injected failure after the scores insert")

    monkeypatch.setattr(store, "_insert_frame", failing)
    extra = _scores(seed=3)
    extra["brand_new_column"] = 1.0  # its ALTER TABLE must be undone too
    month = "2026-02" if force else "2026-03"
    with pytest.raises(RuntimeError, match="injected"):
        history.append_run(month, scores=extra, plan=_plan(extra), meta=META, force=force)
    assert calls == ["scores"]
    _assert_same_dump(before, _dump(path))
    monkeypatch.setattr(store, "_insert_frame", original)
    # and the database stays usable
    history.append_run("2026-03", scores=extra, meta=META)
    pd.testing.assert_frame_equal(history.scores("2026-03"), extra)


def test_a_failed_first_append_leaves_no_month(tmp_path, monkeypatch):
    path = tmp_path / "history.duckdb"

    def failing(*args):
        raise RuntimeError("injected")

    monkeypatch.setattr(store, "_insert_metrics", failing)
    with pytest.raises(RuntimeError):
        ScoreHistory(path).append_run("2026-01", scores=_scores(), meta=META)
    assert ScoreHistory(path).months() == []


def test_an_empty_file_left_by_a_crash_while_creating_is_an_empty_history(tmp_path):
    path = tmp_path / "history.duckdb"
    path.touch()
    history = ScoreHistory(path)
    assert history.months() == []
    history.append_run("2026-01", scores=_scores(), meta=META)
    assert history.months() == ["2026-01"]


def test_a_type_clash_with_earlier_months_is_refused_and_changes_nothing(tmp_path):
    path = tmp_path / "history.duckdb"
    history = ScoreHistory(path)
    history.append_run("2026-01", scores=_scores(seed=1), meta=META)
    before = _dump(path)
    clash = _scores(seed=2).assign(lifetime_value=lambda f: f["area_id"].astype(str))
    with pytest.raises(InputError, match=r"'lifetime_value'.*stored as DOUBLE"):
        history.append_run("2026-02", scores=clash, meta=META)
    _assert_same_dump(before, _dump(path))


_CHILD = """
import sys, time
import pandas as pd
from lifecycle.history import ScoreHistory
from lifecycle.history import _store

path, frame_path, mode = sys.argv[1:4]
scores = pd.read_parquet(frame_path)
meta = dict(created="2026-03-01", families={"churn": "cox"}, config_hash="a", data_hash="b")
if mode == "pause":
    original = _store._insert_frame
    def paused(con, table, *args):
        original(con, table, *args)
        if table == "scores":
            print("scores-written", flush=True)
            time.sleep(600)
    _store._insert_frame = paused
print("ready", flush=True)
ScoreHistory(path).append_run(
    "2026-02", scores=scores, metrics={"n": float(len(scores))}, meta=meta
)
print("done", flush=True)
"""


def _start_child(db: Path, frame_path: Path, mode: str) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen(
        [sys.executable, "-c", _CHILD, str(db), str(frame_path), mode],
        stdout=subprocess.PIPE,
        stderr=subprocess.PIPE,
        text=True,
        env=env,
        cwd=ROOT,
    )
    line = proc.stdout.readline().strip()
    assert line == "ready", proc.stderr.read()
    return proc


def _kill(proc: subprocess.Popen) -> None:
    proc.send_signal(signal.SIGKILL)
    proc.communicate()  # reaps it and closes the pipes


def _check_after_kill(db: Path, base_scores: pd.DataFrame, big: pd.DataFrame) -> bool:
    """The file opens, 2026-01 is intact and 2026-02 is whole or absent; True if present."""
    history = ScoreHistory(db)
    months = history.months()
    assert months in (["2026-01"], ["2026-01", "2026-02"])
    pd.testing.assert_frame_equal(history.scores("2026-01"), base_scores)
    present = months[-1] == "2026-02"
    if present:
        pd.testing.assert_frame_equal(history.scores("2026-02"), big)
        assert history.metrics("2026-02") == {"n": float(len(big))}
    # and it takes the month afterwards
    history.append_run("2026-02", scores=big.head(5), meta=META, force=True)
    pd.testing.assert_frame_equal(history.scores("2026-02"), big.head(5))
    return present


def test_sigkill_in_the_middle_of_a_large_append_leaves_no_partial_month(tmp_path):
    base_scores = _scores(seed=1)
    base = tmp_path / "base.duckdb"
    ScoreHistory(base).append_run("2026-01", scores=base_scores, meta=META)
    big = _scores(n=80_000, seed=2)
    frame_path = tmp_path / "big.parquet"
    big.to_parquet(frame_path)
    big = pd.read_parquet(frame_path)  # what the child appends

    # killed for certain inside the transaction: after the scores insert, before the commit
    db = tmp_path / "paused.duckdb"
    shutil.copy(base, db)
    proc = _start_child(db, frame_path, "pause")
    assert proc.stdout.readline().strip() == "scores-written", proc.stderr.read()
    _kill(proc)
    assert _check_after_kill(db, base_scores, big) is False

    # an unkilled append here shows how long one takes, to spread the kills over it
    db = tmp_path / "timed.duckdb"
    shutil.copy(base, db)
    started = time.monotonic()
    ScoreHistory(db).append_run("2026-02", scores=big, metrics={"n": float(len(big))}, meta=META)
    span = time.monotonic() - started
    assert _check_after_kill(db, base_scores, big) is True

    rng = np.random.default_rng(20260)
    for trial, delay in enumerate(rng.uniform(0.0, 1.1 * span, size=4)):
        db = tmp_path / f"trial{trial}.duckdb"
        shutil.copy(base, db)
        proc = _start_child(db, frame_path, "plain")
        time.sleep(delay)
        _kill(proc)
        _check_after_kill(db, base_scores, big)


_HOLDER = """
import sys, duckdb
con = duckdb.connect(sys.argv[1])
print("held", flush=True)
sys.stdin.readline()
con.close()
"""


def test_a_held_file_is_waited_for_and_a_timeout_says_so(tmp_path):
    path = tmp_path / "history.duckdb"
    ScoreHistory(path).append_run("2026-01", scores=_scores(), meta=META)
    proc = subprocess.Popen(
        [sys.executable, "-c", _HOLDER, str(path)],
        stdin=subprocess.PIPE,
        stdout=subprocess.PIPE,
        text=True,
    )
    try:
        assert proc.stdout.readline().strip() == "held"
        with pytest.raises(LifecycleError, match="held by another process"):
            ScoreHistory(path, lock_timeout=0).months()
        proc.stdin.write("release\n")
        proc.stdin.flush()
        # waits while the other process closes, then writes
        ScoreHistory(path, lock_timeout=120).append_run("2026-02", scores=_scores(), meta=META)
    finally:
        proc.communicate()
    assert ScoreHistory(path).months() == ["2026-01", "2026-02"]


# -- refusals --------------------------------------------------------------------------------
def test_bad_frames_months_and_meta_are_refused_with_clear_messages(tmp_path):
    history = ScoreHistory(tmp_path / "history.duckdb")
    twice = _scores(n=5)
    twice.loc[3, "customer_id"] = twice.loc[1, "customer_id"]
    with pytest.raises(InputError, match=r"customer_id repeats \(2 rows, e.g. K0-0001"):
        history.append_run("2026-01", scores=twice, meta=META)
    mixed = _scores(n=3).assign(area_id=pd.Series(["a", 3, "b"], dtype=object))
    with pytest.raises(InputError, match="values that are not text"):
        history.append_run("2026-01", scores=mixed, meta=META)
    dated = _scores(n=3).assign(when=pd.Timestamp("2026-01-01"))
    with pytest.raises(InputError, match="cannot store"):
        history.append_run("2026-01", scores=dated, meta=META)
    with pytest.raises(UsageError, match="lacks the columns"):
        history.append_run("2026-01", scores=_scores().drop(columns="customer_id"), meta=META)
    with pytest.raises(UsageError, match="history keeps for itself"):
        history.append_run("2026-01", scores=_scores().assign(run_month="x"), meta=META)
    with pytest.raises(UsageError, match="differ only in case"):
        history.append_run("2026-01", scores=_scores().assign(Area_ID="x"), meta=META)
    with pytest.raises(UsageError, match="expected as YYYY-MM"):
        history.append_run("2026-13", scores=_scores(), meta=META)
    with pytest.raises(UsageError, match=r"meta lacks \['data_hash'\]"):
        no_hash = {k: v for k, v in META.items() if k != "data_hash"}
        history.append_run("2026-01", scores=_scores(), meta=no_hash)
    with pytest.raises(UsageError, match="must be a number"):
        history.append_run("2026-01", scores=_scores(), metrics={"a": "high"}, meta=META)
    assert history.months() == []
    history.append_run("2026-01", scores=_scores(), meta=META)
    with pytest.raises(UsageError, match=r"no run for month 2026-02; stored months are \['2026"):
        history.scores("2026-02")
    not_a_db = tmp_path / "notes.duckdb"
    not_a_db.write_text("not a database\n" * 50)
    with pytest.raises(UsageError, match="could not be opened as a DuckDB database"):
        ScoreHistory(not_a_db).months()


def test_meta_needs_every_key():
    with pytest.raises(UsageError, match=r"meta lacks \['data_hash'\]"):
        store._checked_meta({k: v for k, v in META.items() if k != "data_hash"}, "2026-01", 0, 0)
    with pytest.raises(UsageError, match="config_hash"):
        store._checked_meta({**META, "config_hash": ""}, "2026-01", 0, 0)
    aware = store._checked_meta({**META, "created": "2026-04-02T11:30:00+02:00"}, "x", 0, 0)
    assert aware.created == pd.Timestamp("2026-04-02 09:30:00")  # stored in UTC


def test_public_surface_and_plan_columns_agree_with_the_planner():
    from lifecycle.decisions._plan import PLAN_COLUMNS

    assert list(history_module.PLAN_COLUMNS) == PLAN_COLUMNS
    assert sorted(history_module.__all__) == [
        "Comparison",
        "DECILE_COLUMNS",
        "META_KEYS",
        "PLAN_COLUMNS",
        "RunInfo",
        "ScoreHistory",
        "compare_with_outcomes",
    ]


# -- comparing a stored month with what happened ---------------------------------------------
def _twenty_customers():
    """20 customers present at the end of 2026-08, data to 2026-09 (one month elapsed): c05,
    c12, c17 and c19 churn in 2026-09, c08 moves out then, c15 left earlier (absent)."""
    rows = [dict(customer_id=f"c{i:02d}", start_month="2025-01") for i in range(1, 21)]
    for i in (5, 12, 17, 19):
        rows[i - 1].update(end_month="2026-09", end_reason="churn")
    rows[7].update(end_month="2026-09", end_reason="move_out")
    rows.append(
        dict(customer_id="c21", start_month="2025-01", end_month="2026-05", end_reason="churn")
    )
    return make_tables(rows, extract_month="2026-09")


def _stored(tmp_path, scores: pd.DataFrame, month: str = "2026-08") -> ScoreHistory:
    history = ScoreHistory(tmp_path / "history.duckdb")
    history.append_run(month, scores=scores, meta=META)
    return history


def test_decile_comparison_against_a_hand_computation(tmp_path):
    # predictions 0.01·i for customer c{i}, listed in reverse so that row order is not rank order
    ids = [f"c{i:02d}" for i in range(20, 0, -1)]
    scores = pd.DataFrame({"customer_id": ids, "cif_churn_1m": [int(c[1:]) / 100 for c in ids]})
    outcomes = observed_outcomes(_twenty_customers(), "2026-08")
    result = compare_with_outcomes(_stored(tmp_path, scores), "2026-08", outcomes, horizon=1)
    table = result.deciles
    # hand computation: decile d holds c{2d−1}, c{2d}; churners c05 (d3), c12 (d6), c17 (d9),
    # c19 (d10); c08's move-out is not churn
    assert table.columns.tolist() == history_module.DECILE_COLUMNS
    assert table["decile"].tolist() == list(range(1, 11))
    assert table["n"].tolist() == [2] * 10
    np.testing.assert_allclose(table["predicted_mean"], [(4 * d - 1) / 200 for d in range(1, 11)])
    assert table["realised_events"].tolist() == [0, 0, 1, 0, 0, 1, 0, 0, 1, 1]
    np.testing.assert_allclose(table["realised_rate"], [0, 0, 0.5, 0, 0, 0.5, 0, 0, 0.5, 0.5])
    s = result.summary
    assert (s["n"], s["events"], s["horizon_used"], s["months_elapsed"]) == (20, 4, 1, 1)
    # hand computation: Σ F̂ = 0.01·(1 + … + 20) = 2.10; O/E = 4 / 2.10
    assert s["expected_events"] == pytest.approx(2.10)
    assert s["observed_expected"] == pytest.approx(4 / 2.10)
    churners = {5, 12, 17, 19}
    brier = np.mean([((i in churners) - i / 100) ** 2 for i in range(1, 21)])
    assert s["brier"] == pytest.approx(brier, rel=1e-12)
    # hand computation of Uno's C: no censoring before the events (G = 1), so C is the share of
    # concordant pairs (a churner, a later non-churner predicted lower). Each churner has the 16
    # non-churners as pairs (churners tied at month 1 are not comparable); non-churners below
    # c05: c01..c04 = 4; below c12: 11 − 1 = 10; below c17: 16 − 2 = 14; below c19: 18 − 3 = 15
    assert s["uno_c"] == pytest.approx(43 / 64, rel=1e-12)
    assert s["notes"] == [] and not s["interpolated"]


def test_longer_horizon_than_elapsed_uses_the_elapsed_months_and_interpolates(tmp_path):
    """Scores with only 3-month columns, from constant monthly hazards (churn h_c, move-out
    h_m, other 0): S(3) = (1 − h_c − h_m)³, F_c(3) = h_c/(h_c + h_m)·(1 − S(3)); the 1-month
    churn probability is then exactly h_c (closed form of the discrete Aalen–Johansen steps)."""
    outcomes = observed_outcomes(_twenty_customers(), "2026-08")
    rng = np.random.default_rng(4)
    h_c, h_m = rng.uniform(0.0, 0.1, 20), rng.uniform(0.0, 0.05, 20)
    s3 = (1 - h_c - h_m) ** 3
    scores = pd.DataFrame(
        {
            "customer_id": outcomes["customer_id"].to_numpy(),
            "survival_3m": s3,
            "cif_churn_3m": h_c / (h_c + h_m) * (1 - s3),
            "cif_move_out_3m": h_m / (h_c + h_m) * (1 - s3),
        }
    )
    history = _stored(tmp_path, scores)
    result = compare_with_outcomes(history, "2026-08", outcomes, horizon=3)
    s = result.summary
    assert (s["horizon_requested"], s["horizon_used"], s["interpolated"]) == (3, 1, True)
    assert any("3-month outcomes are not observable yet" in n for n in s["notes"])
    assert s["expected_events"] == pytest.approx(h_c.sum(), rel=1e-12)
    # the same between two stored horizons: 6 and 12 months from 3 → 12 with a = 3 for h = 6
    predicted, _, interpolated = _predicted_at(
        scores.assign(
            survival_12m=(1 - h_c - h_m) ** 12,
            cif_churn_12m=h_c / (h_c + h_m) * (1 - (1 - h_c - h_m) ** 12),
        ).drop(columns="cif_move_out_3m"),
        "churn",
        6,
    )
    assert interpolated
    np.testing.assert_allclose(predicted, h_c / (h_c + h_m) * (1 - (1 - h_c - h_m) ** 6))
    with pytest.raises(UsageError, match="no cif_other_exit_<h>m column"):
        compare_with_outcomes(history, "2026-08", outcomes, cause="other_exit", horizon=1)
    # an uptake's incidence is not tied to the survival columns: never interpolated
    uptake = scores.assign(cif_uptake_mesh_3m=0.1)
    with pytest.raises(UsageError, match="cannot be interpolated"):
        _predicted_at(uptake, "uptake_mesh", 1)


def _simulated(n: int = 1500, seed: int = 11, extract: str = "2026-09"):
    """Customers starting between 2024-01 and 2026-06, simulated month by month from the month
    after their start to ``extract`` with constant monthly hazards: churn 0.03·exp(0.8 z),
    z ~ N(0, 1), move-out 0.02, other 0.005. Returns the tables and each customer's true
    3-month churn incidence (closed form for constant hazards, as in the interpolation test)."""
    rng = np.random.default_rng(seed)
    z = rng.normal(size=n)
    h_c = 0.03 * np.exp(0.8 * z)
    cum = np.cumsum(np.column_stack([h_c, np.full(n, 0.02), np.full(n, 0.005)]), axis=1)
    start = rng.integers(parse_month("2024-01"), parse_month("2026-06") + 1, n)
    rows = []
    for i in range(n):
        row = dict(customer_id=f"s{i:04d}", start_month=format_month(start[i]))
        for month in range(start[i] + 1, parse_month(extract) + 1):
            u = rng.random()
            if u < cum[i, -1]:
                reason = ["churn", "move_out", "other"][int(np.argmax(u < cum[i]))]
                row.update(end_month=format_month(month), end_reason=reason)
                break
        rows.append(row)
    total = cum[:, -1]
    truth = pd.Series(h_c / total * (1 - (1 - total) ** 3), index=[r["customer_id"] for r in rows])
    return make_tables(rows, extract_month=extract), truth


def test_decile_comparison_agrees_with_calibration_table_and_sksurv(tmp_path):
    tables, truth = _simulated()
    outcomes = observed_outcomes(tables, "2026-06")
    # a multiple of 10 customers: calibration_table then cuts whole customers into deciles too
    # (otherwise it shares the customer on a boundary between two deciles)
    outcomes = outcomes.iloc[: len(outcomes) - len(outcomes) % 10].reset_index(drop=True)
    f3 = truth.reindex(outcomes["customer_id"]).to_numpy()
    scores = pd.DataFrame({"customer_id": outcomes["customer_id"].to_numpy(), "cif_churn_3m": f3})
    history = _stored(tmp_path, scores, month="2026-06")
    result = compare_with_outcomes(history, "2026-06", outcomes, horizon=3)
    months, code, _ = outcome_for_cause(outcomes, "churn")
    # no tied predictions: calibration_table's groups are the same deciles, and with no
    # censoring before month 3 its Aalen–Johansen incidence is the plain proportion
    reference = calibration_table(months, code, f3, 3)
    table = result.deciles
    np.testing.assert_array_equal(table["n"], reference["n"])
    np.testing.assert_allclose(table["predicted_mean"], reference["mean_predicted"], rtol=1e-12)
    np.testing.assert_allclose(table["realised_rate"], reference["observed"], rtol=1e-12)
    np.testing.assert_allclose(table["realised_events"], reference["events"])
    s = result.summary
    assert s["n"] == len(outcomes) and s["events"] == int(np.sum((code == 1) & (months <= 3)))
    # reference: sksurv.metrics.concordance_index_ipcw on the backtest's time axis
    y = Surv.from_arrays(code == 1, months + 0.5 * (code != 1))
    assert s["uno_c"] == pytest.approx(concordance_index_ipcw(y, y, f3, tau=3.25)[0], rel=1e-9)
    assert s["uno_c"] > 0.55  # the simulated risk ranks churners (z has a real effect)
    # reference: sksurv.metrics.brier_score, competing exits moved past 3 months as survivors
    # (both score (0 − F)² for them; nobody is censored before 3, so G = 1 there)
    churn_only = Surv.from_arrays(code == 1, np.where(code == 2, 99.0, months + 0.5 * (code == 0)))
    _, sk = sk_brier_score(churn_only, churn_only, 1.0 - f3[:, None], [3.0])
    assert s["brier"] == pytest.approx(sk[0], rel=1e-9)
    # the true risks are calibrated: O/E near 1 (binomial spread of ~60 events: ± 0.3)
    assert 0.7 < s["observed_expected"] < 1.3


@functools.cache
def _small_simulated() -> tuple[pd.DataFrame, np.ndarray]:
    tables, truth = _simulated(n=200, seed=3)
    outcomes = observed_outcomes(tables, "2026-06")
    return outcomes, truth.reindex(outcomes["customer_id"]).to_numpy()


@settings(max_examples=10, deadline=None)
@given(seed=st.integers(0, 10_000))
def test_comparison_does_not_depend_on_row_order_even_with_ties(seed):
    outcomes, f3 = _small_simulated()
    rounded = np.round(f3, 2)  # many ties, some straddling decile boundaries
    scores = pd.DataFrame(
        {"customer_id": outcomes["customer_id"].to_numpy(), "cif_churn_3m": rounded}
    )
    rng = np.random.default_rng(seed)
    with tempfile.TemporaryDirectory() as folder:
        history = ScoreHistory(Path(folder) / "h.duckdb")
        history.append_run("2026-06", scores=scores, meta=META)
        # the same scores again, stored in another row order, under another month
        history.append_run("2026-05", scores=scores.sample(frac=1.0, random_state=seed), meta=META)
        a = compare_with_outcomes(history, "2026-06", outcomes, horizon=3)
        b = compare_with_outcomes(
            history, "2026-05", outcomes.iloc[rng.permutation(len(outcomes))], horizon=3
        )
    pd.testing.assert_frame_equal(a.deciles, b.deciles)
    sizes = a.deciles["n"].to_numpy()
    assert sizes.sum() == len(outcomes) and sizes.max() - sizes.min() <= 1
    for key in ("events", "brier", "uno_c", "observed_expected"):
        assert a.summary[key] == pytest.approx(b.summary[key], rel=1e-12)


def test_unmatched_customers_are_counted_and_uptakes_use_those_at_risk(tmp_path):
    tables = make_tables(
        [
            dict(customer_id="a", start_month="2025-01"),
            dict(customer_id="b", start_month="2025-01", end_month="2026-09", end_reason="churn"),
            dict(customer_id="c", start_month="2025-01"),
            dict(customer_id="d", start_month="2025-01"),
        ],
        uptakes=[
            dict(customer_id="a", product="mesh", month="2026-02"),  # holds it: not at risk
            dict(customer_id="c", product="mesh", month="2026-09"),
        ],
        extract_month="2026-09",
    )
    outcomes = observed_outcomes(tables, "2026-08")
    scores = pd.DataFrame(
        {
            "customer_id": ["a", "b", "c", "zz"],  # zz was scored but has no outcome; d unscored
            "cif_churn_1m": [0.1, 0.2, 0.3, 0.4],
            "cif_uptake_mesh_1m": [0.5, 0.1, 0.6, 0.2],
        }
    )
    history = _stored(tmp_path, scores)
    churn = compare_with_outcomes(history, "2026-08", outcomes)
    assert (churn.summary["unmatched_scores"], churn.summary["unmatched_outcomes"]) == (1, 1)
    assert churn.summary["n"] == 3 and churn.summary["events"] == 1
    uptake = compare_with_outcomes(history, "2026-08", outcomes, cause="uptake_mesh")
    # a holds mesh already; b left (competing); c took it up in 2026-09
    assert uptake.summary["n"] == 2 and uptake.summary["events"] == 1
    assert uptake.summary["predicted_mean"] == pytest.approx(0.35)
    with pytest.raises(UsageError, match="no month has passed"):
        compare_with_outcomes(history, "2026-08", observed_outcomes(tables, "2026-09"))
    with pytest.raises(UsageError, match="no run for month 2026-07"):
        compare_with_outcomes(history, "2026-07", outcomes)
    uneven = outcomes.assign(months=[1, 1, 2, 1])
    with pytest.raises(InputError, match="censored customers have different follow-up"):
        compare_with_outcomes(history, "2026-08", uneven)


def test_scores_of_a_fitted_model_round_trip_and_are_checked_a_month_later(tmp_path):
    """The real column set of `score_customers` (horizons 3, 6, 12; churn, move-out, other
    exit), stored as of 2026-06 and compared once 2026-07 is in: one month has passed, so a
    3-month check runs over 1 month with the 1-month churn incidence interpolated."""
    tables, _ = _simulated(n=800, seed=21, extract="2026-07")
    panel = build_panel(tables, "2026-06")
    snapshot = build_snapshot(tables, "2026-06")
    model = TenureLifeTable().fit(panel)
    scores = score_customers(model, snapshot)
    scores["lifetime_value"] = np.linspace(100.0, 900.0, len(scores))
    history = _stored(tmp_path, scores, month="2026-06")
    pd.testing.assert_frame_equal(history.scores("2026-06"), scores)

    outcomes = observed_outcomes(tables, "2026-06")
    result = compare_with_outcomes(history, "2026-06", outcomes, horizon=3)
    s = result.summary
    assert (s["horizon_used"], s["months_elapsed"], s["interpolated"]) == (1, 1, True)
    assert s["n"] == len(snapshot) and s["unmatched_scores"] == s["unmatched_outcomes"] == 0
    assert s["events"] == int((outcomes["cause"] == "churn").sum())  # every exit is in month 1
    assert result.deciles["realised_events"].sum() == s["events"]
    # the life table's hazards change little from one tenure month to the next, so the
    # constant-hazard interpolation is close to the model's own 1-month incidence
    one_month = model.predict_cumulative_incidence(snapshot, 1)["churn"].to_numpy()
    assert s["expected_events"] == pytest.approx(one_month.sum(), rel=0.1)
