"""Killing `lifecycle run` at random points never damages earlier months or leaves partial
files (SIGKILL, 20 seeded trials); what a killed run leaves in its staging folder is gone
after the next run."""

from __future__ import annotations

import hashlib
import os
import random
import signal
import subprocess
import sys

import pytest

from lifecycle.config import load_config
from lifecycle.cycle import run_cycle
from lifecycle.demo import write_demo
from lifecycle.history._store import ScoreHistory

MONTH_FILES = {
    "scores.csv", "contact_plan.csv", "uptake_forecast.csv", "backtest_metrics.csv",
    "forecast_backtest.csv", "policy_comparison.csv", "policy_backtest.csv",
    "run_summary.json", "report.html", "key_figures.json",
}  # fmt: skip
TRIALS = 20


def _digest(folder):
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest() for p in sorted(folder.iterdir())}


# What a killed run may leave at the top of the reports folder until the next run starts
# (which removes or mends them: lifecycle.cycle._publish.mend).
LEFT_UNTIL_NEXT_START = (".staging-", ".journal-", ".replaced-")


def _assert_reports_whole(reports, *, killed=False):
    for path in reports.rglob("*"):
        if killed and path.relative_to(reports).parts[0].startswith(LEFT_UNTIL_NEXT_START):
            continue
        assert not path.name.startswith("."), f"temporary file left: {path}"
        assert not path.name.endswith((".part", ".tmp")), f"partial file left: {path}"
    for month in (p for p in reports.iterdir() if p.is_dir() and not p.name.startswith(".")):
        assert {p.name for p in month.iterdir()} == MONTH_FILES, month


@pytest.mark.skipif(not hasattr(signal, "SIGKILL"), reason="SIGKILL is POSIX only")
def test_sigkill_at_random_points_leaves_earlier_months_intact(tmp_path):
    data = tmp_path / "data"
    paths = write_demo(data, customers=600, seed=5)
    text = paths["config"].read_text()
    text = text.replace('families = ["cox", "boosted", "forest"]', 'families = ["boosted"]')
    text = text.replace('reports = "../reports"', f'reports = "{tmp_path / "reports"}"')
    paths["config"].write_text(text)
    config = load_config(paths["config"])
    reports = tmp_path / "reports"
    run_cycle(data, config, as_of="2026-09")  # the earlier month
    earlier = _digest(reports / "2026-09")

    rng = random.Random(20261202)
    command = [sys.executable, "-m", "lifecycle", "run", "--config", str(paths["config"])]
    completed = 0
    for _ in range(TRIALS):
        proc = subprocess.Popen(
            [*command, "--as-of", "2026-10", "--force"],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            env={**os.environ, "PYTHONHASHSEED": "0"},
        )
        delay = rng.uniform(0.2, 12.0)
        try:
            proc.wait(timeout=delay)
            completed += proc.returncode == 0
        except subprocess.TimeoutExpired:
            proc.send_signal(signal.SIGKILL)
            proc.wait()
        assert _digest(reports / "2026-09") == earlier
        _assert_reports_whole(reports, killed=True)
        months = ScoreHistory(reports / "history.duckdb").months()
        assert "2026-09" in months
    # a final uninterrupted run completes and the history holds both months
    done = subprocess.run([*command, "--as-of", "2026-10", "--force"], capture_output=True)
    assert done.returncode == 0, done.stderr.decode()[-2000:]
    _assert_reports_whole(reports)  # the next run removed every staging folder left by a kill
    assert ScoreHistory(reports / "history.duckdb").months() == ["2026-09", "2026-10"]
    assert _digest(reports / "2026-09") == earlier
