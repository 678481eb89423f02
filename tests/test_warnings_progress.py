"""Library warnings are logged once each in our words; long steps report their sub-steps.

Warnings are errors in the test configuration, so a library warning that escaped
`library_warnings` would fail these tests by itself.
"""

from __future__ import annotations

import logging
import warnings

import numpy as np
import pandas as pd
import pytest
from lifelines.utils import check_complete_separation_low_variance

from lifecycle._warnings import library_warnings, logged_once
from lifecycle.models import BoostedHazard, CauseSpecificCox
from lifecycle.panel import build_panel
from tests._builders import make_tables


def _separated_panel() -> pd.DataFrame:
    """Sixty customers; the twenty who churn, and only they, hold a bundle: the feature
    ``bundle`` is 1 in every churn month, so it separates the events (lifelines warns that
    it "completely determines whether a subject dies")."""
    rng = np.random.default_rng(1)
    rows = []
    for i in range(60):
        leaves = i % 3 == 0
        row = {"customer_id": f"K{i:03d}", "start_month": f"2025-{1 + i % 6:02d}",
               "bundle": float(leaves), "monthly_margin": float(rng.uniform(10, 40))}  # fmt: skip
        if leaves:
            row.update(end_month=f"2026-{1 + i % 9:02d}", end_reason="churn")
        rows.append(row)
    tables = make_tables(rows, static_columns=("monthly_margin", "bundle"))
    return build_panel(tables, "2026-10")


def test_lifelines_separation_warning_is_logged_in_our_words_naming_the_feature(caplog):
    panel = _separated_panel()
    with caplog.at_level(logging.WARNING, logger="lifecycle"):
        CauseSpecificCox(penalizer=0.1).fit(panel)  # an escaping warning would raise here
    messages = [r.getMessage() for r in caplog.records if r.levelno == logging.WARNING]
    separation = [m for m in messages if "separation" in m]
    assert len(separation) == 1, messages
    assert separation[0].startswith("cox: churn: feature 'bundle'")
    text = "\n".join(messages)
    # none of lifelines' own wording, internal column names or code survives
    assert "completely determines" not in text and ">>>" not in text
    assert "_event_" not in text and "x3" not in text


def test_the_same_warning_in_several_fits_is_logged_once_per_command(caplog):
    frame = pd.DataFrame({"x0": [0.0, 0.0, 0.0, 1.0, 2.0, 3.0], "x1": [1.0, 2, 3, 4, 5, 6]})
    events = np.array([1, 1, 1, 0, 0, 0])
    with caplog.at_level(logging.WARNING, logger="lifecycle"), logged_once():
        for _ in range(3):  # e.g. the same cause at three backtest cutoffs
            with library_warnings("cox", "move_out", names={"x0": "rental_share"}):
                check_complete_separation_low_variance(frame, events, "_event_")
    lines = [r.getMessage() for r in caplog.records]
    assert len(lines) == 1 and "cox: move_out: feature 'rental_share'" in lines[0]


def test_numpy_and_unknown_warnings_are_caught_counted_and_named(caplog):
    with caplog.at_level(logging.WARNING, logger="lifecycle"):
        with library_warnings("boosted", "uptake_backup_line"):
            with np.errstate(divide="warn"):
                np.log(np.zeros(2))
                np.log(np.zeros(2))
            warnings.warn(
                "Some unforeseen remark. See http://example.invalid", UserWarning, stacklevel=1
            )
    lines = [r.getMessage() for r in caplog.records]
    assert lines[0] == (
        "boosted: uptake_backup_line: a computation gave an infinite or undefined value "
        "(divide by zero in log); the values it touched may be NaN or infinite (2 times)"
    )
    assert lines[1].endswith("warned (UserWarning): Some unforeseen remark.")


def test_a_warning_before_an_error_is_still_logged(caplog):
    with caplog.at_level(logging.WARNING, logger="lifecycle"), pytest.raises(ValueError):
        with library_warnings("forest", "churn"):
            warnings.warn(
                "Newton-Raphson failed to converge sufficiently in 50 steps.", stacklevel=1
            )
            raise ValueError("stop")
    assert "forest: churn: the fit stopped after 50 steps" in caplog.text


# -- progress ----------------------------------------------------------------------------------
def _progress(caplog) -> list[tuple[str, int, int, str]]:
    return [
        (r.progress_stage, r.progress_done, r.progress_total, r.getMessage())
        for r in caplog.records
        if hasattr(r, "progress_stage")
    ]


def test_a_fit_reports_each_cause(caplog):
    panel = _separated_panel()
    with caplog.at_level(logging.INFO, logger="lifecycle.progress"):
        CauseSpecificCox(penalizer=0.1).fit(panel)
        BoostedHazard(max_iter=5, random_state=0).fit(panel)
    steps = _progress(caplog)
    assert [s[3] for s in steps] == [
        "fit 1/3: cox: churn",
        "fit 2/3: cox: move_out",
        "fit 3/3: cox: other_exit",
        "fit 1/1: boosted: exits (churn, move_out, other_exit)",
    ]


def test_scoring_reports_each_block_of_customers(caplog, monkeypatch):
    import lifecycle.models._base as base

    panel = _separated_panel()
    model = CauseSpecificCox(penalizer=0.1).fit(panel)
    snapshot = panel[panel["month"] == "2026-10"].reset_index(drop=True)
    monkeypatch.setattr(base, "_BLOCK_CUSTOMERS", 15)
    caplog.clear()  # only the scoring's records
    with caplog.at_level(logging.INFO, logger="lifecycle.progress"):
        model.predict_hazard(snapshot, 3)
    n = len(snapshot)
    blocks = -(-n // 15)
    steps = _progress(caplog)
    assert [(s[0], s[1], s[2]) for s in steps] == [("hazards", b, blocks) for b in range(blocks)]
    assert steps[-1][3].endswith(f"to {n:,} of {n:,}")


def test_the_backtest_reports_each_cutoff_and_family(caplog):
    from lifecycle.evaluation import TenureLifeTable, backtest

    tables = make_tables(
        [{"customer_id": f"C{i:03d}", "start_month": "2024-01",
          **({"end_month": f"2025-{1 + i % 12:02d}", "end_reason": ("churn", "move_out",
             "other")[i % 3]} if i % 2 else {})}
         for i in range(120)],
        extract_month="2026-06",
    )  # fmt: skip
    families = {"life_table": TenureLifeTable(), "boosted": BoostedHazard(max_iter=5)}
    with caplog.at_level(logging.INFO, logger="lifecycle.progress"):
        backtest(tables, families=families, cutoffs=["2025-03", "2025-06"], horizons=[3],
                 build_panel_fn=lambda t, c, cfg: build_panel(t, c, config=cfg))  # fmt: skip
    steps = [s[3] for s in _progress(caplog) if s[0] == "backtest"]
    assert steps == [
        "backtest 1/4: cutoff 2025-03, family life_table",
        "backtest 2/4: cutoff 2025-03, family boosted",
        "backtest 3/4: cutoff 2025-06, family life_table",
        "backtest 4/4: cutoff 2025-06, family boosted",
    ]
    fits = [s[3] for s in _progress(caplog) if s[0] == "fit"]
    assert fits == ["fit 1/1: boosted: exits (churn, move_out, other_exit)"] * 2


def test_the_command_line_shows_one_line_per_sub_step(tmp_path, capsys):
    from lifecycle.cli import main
    from lifecycle.demo import write_demo

    data = tmp_path / "data"
    write_demo(data, customers=500, seed=5)
    capsys.readouterr()  # only what the command writes
    argv = ["fit", str(data), "--as-of", "2026-10", "--family", "cox", "--out", str(tmp_path / "m")]
    assert main(argv) == 0
    # (the demo's rare "other" exits also bring a warning, in our words, on other lines)
    err = [line for line in capsys.readouterr().err.splitlines() if line.startswith("  ")]
    assert err == [
        "    fit 1/4: cox: churn",
        "    fit 2/4: cox: move_out",
        "    fit 3/4: cox: other_exit",
        "    fit 4/4: cox: uptake_backup_line",
    ]
