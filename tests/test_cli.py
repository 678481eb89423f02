"""The command line: exit codes, one clear message, and nothing written on bad input."""

from __future__ import annotations

import subprocess
import sys

import pandas as pd
import pytest

from lifecycle.cli import main
from tests._tables_factory import EXTRACT, PREMISE_CRS, valid_frames, write_csv


@pytest.fixture
def data(tmp_path):
    folder = write_csv(tmp_path / "data", valid_frames())
    (folder / "lifecycle.toml").write_text(
        f'[data]\nextract_month = "{EXTRACT}"\npremise_crs = "{PREMISE_CRS}"\n'
    )
    return folder


def test_check_prints_what_it_found(data, capsys):
    assert main(["check", str(data)]) == 0
    out = capsys.readouterr().out
    assert "customers: 6" in out and "all checks passed" in out


def test_bad_input_exits_2_with_one_message_and_writes_nothing(data, tmp_path, capsys):
    customers = pd.read_csv(data / "customers.csv", dtype=str)
    customers.loc[1, "customer_id"] = customers.loc[0, "customer_id"]
    customers.to_csv(data / "customers.csv", index=False)
    out = tmp_path / "out" / "panel.parquet"
    out.parent.mkdir()
    assert main(["panel", str(data), "--as-of", "2026-03", "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1
    assert "table 'customers', column 'customer_id'" in err[0] and "C001" in err[0]
    assert not out.exists() and not any(out.parent.iterdir())


def test_bad_month_and_bad_output_name_are_usage_errors(data, tmp_path, capsys):
    out = tmp_path / "panel.parquet"
    assert main(["panel", str(data), "--as-of", "2026-13", "--out", str(out)]) == 2
    assert "--as-of was '2026-13'" in capsys.readouterr().err
    assert main(["panel", str(data), "--as-of", "2026-03", "--out", str(tmp_path / "p.csv")]) == 2
    assert main(["panel", str(data), "--as-of", "2026-09", "--out", str(out)]) == 2
    assert "only covers months up to 2026-06" in capsys.readouterr().err
    assert not out.exists()


def test_panel_writes_parquet_atomically(data, tmp_path):
    out = tmp_path / "panel.parquet"
    assert main(["panel", str(data), "--as-of", "2026-03", "--out", str(out), "--no-spatial"]) == 0
    panel = pd.read_parquet(out)
    assert list(panel.columns[:4]) == ["customer_id", "month", "tenure_start", "tenure_stop"]
    assert [p.name for p in tmp_path.iterdir()] == ["data", "panel.parquet"]  # no temp left


def test_console_entry_point_runs():
    done = subprocess.run(
        [sys.executable, "-m", "lifecycle", "--help"], capture_output=True, text=True, check=False
    )
    assert done.returncode == 0 and "check" in done.stdout and "panel" in done.stdout
    done = subprocess.run(
        [sys.executable, "-m", "lifecycle", "no-such-step"], capture_output=True, text=True
    )
    assert done.returncode == 2


def test_check_reports_premises_outside_every_area(data, capsys):
    customers = pd.read_csv(data / "customers.csv", dtype=str)
    customers.loc[2, "x"] = str(float(customers.loc[2, "x"]) + 1_000_000.0)
    customers.to_csv(data / "customers.csv", index=False)
    assert main(["check", str(data)]) == 2
    err = capsys.readouterr().err
    assert "customers" in err and customers.loc[2, "customer_id"] in err


def test_model_commands_on_a_small_demo(tmp_path, capsys):
    """fit → score → plan → forecast → backtest from the command line, and a model file changed
    after saving is refused (exit 2) with nothing written."""
    from lifecycle.demo import write_demo

    data = tmp_path / "demo"
    write_demo(data, customers=600, seed=4)
    model = tmp_path / "model"
    common = [str(data), "--as-of", "2026-10"]
    assert main(["fit", *common, "--family", "boosted", "--out", str(model)]) == 0
    assert (model / "manifest.json").is_file()
    assert main(["score", *common, "--model", str(model), "--out", str(tmp_path / "s.csv")]) == 0
    scores = pd.read_csv(tmp_path / "s.csv")
    assert {"survival_12m", "cif_churn_3m", "lifetime_value"} <= set(scores.columns)
    assert main(["plan", *common, "--model", str(model), "--out", str(tmp_path / "p.csv")]) == 0
    plan = pd.read_csv(tmp_path / "p.csv")
    assert list(plan.columns) == [
        "customer_id",
        "offer",
        "week",
        "expected_value",
        "cost",
        "reasons",
    ]
    out = tmp_path / "f.csv"
    assert main(["forecast", *common, "--model", str(model), "--out", str(out)]) == 0
    forecast = pd.read_csv(out)
    assert {"month", "area_id", "product", "expected", "lower_90", "upper_90"} <= set(forecast)
    assert {"expected_current", "expected_joiners"} <= set(forecast)
    # a launch without history, from the comparable product in the data
    launch = tmp_path / "launch.csv"
    args = ["--launch-month", "2026-12", "--comparable", "backup_line", "--launch-name", "new"]
    assert main(["forecast", *common, "--model", str(model), "--out", str(launch), *args]) == 0
    launched = pd.read_csv(launch)
    assert set(launched["product"]) == {"new"} and launched["month"].iloc[0] == "2026-12"
    bad = tmp_path / "bad.csv"
    args = ["--launch-month", "2026-09", "--comparable", "backup_line"]
    assert main(["forecast", *common, "--model", str(model), "--out", str(bad), *args]) == 2
    assert not bad.exists()
    backtest = tmp_path / "b.csv"
    args = ["backtest", *common, "--families", "boosted", "--horizons", "3", "--out", str(backtest)]
    assert main(args) == 0
    assert set(pd.read_csv(backtest)["family"]) == {"boosted", "life_table"}
    capsys.readouterr()

    with open(model / "model.pickle", "ab") as handle:
        handle.write(b"\0")
    refused = tmp_path / "refused.csv"
    assert main(["score", *common, "--model", str(model), "--out", str(refused)]) == 2
    assert "will not be loaded" in capsys.readouterr().err
    assert not refused.exists()


def test_run_with_workers_on_a_local_cluster(tmp_path, capsys):
    """``lifecycle run --workers 2`` scores on a local Dask cluster and writes the month; its
    scores equal those of a run in one process (the same seeded backtest and fit)."""
    from lifecycle.demo import write_demo

    paths = write_demo(tmp_path / "data", customers=600, seed=3)
    config = paths["config"]
    text = config.read_text().replace(
        'families = ["cox", "boosted", "forest"]', 'families = ["cox"]'
    )
    config.write_text(text.replace('reports = "../reports"', 'reports = "../one"'))
    assert main(["run", "--config", str(config)]) == 0
    config.write_text(text.replace('reports = "../reports"', 'reports = "../two"'))
    assert main(["run", "--config", str(config), "--workers", "2"]) == 0
    one = pd.read_csv(tmp_path / "one" / "2026-10" / "scores.csv")
    two = pd.read_csv(tmp_path / "two" / "2026-10" / "scores.csv")
    pd.testing.assert_frame_equal(one, two, rtol=1e-9, atol=1e-12)
    capsys.readouterr()
    assert main(["run", "--config", str(config), "--workers", "0", "--force"]) == 2
    assert "--workers was 0" in capsys.readouterr().err


def test_an_unknown_compute_setting_is_refused_before_any_work(tmp_path, capsys):
    """``[compute]`` with an unknown setting is refused before any work (exit 2)."""
    from lifecycle.demo import write_demo

    paths = write_demo(tmp_path / "data", customers=500, seed=3)
    config = paths["config"]
    config.write_text(config.read_text() + "\n[compute]\nthreads = 4\n")
    assert main(["run", "--config", str(config)]) == 2
    assert "[compute] has an unknown setting 'threads'" in capsys.readouterr().err
    assert not (tmp_path / "reports").exists()


def test_compute_workers_in_the_config_start_a_cluster_without_the_option(tmp_path, capsys):
    """``[compute] workers = 1`` alone makes ``lifecycle run`` score on a local cluster: the
    log names the cluster it starts, and the month is written."""
    from lifecycle.demo import write_demo

    paths = write_demo(tmp_path / "data", customers=500, seed=4)
    config = paths["config"]
    text = config.read_text().replace(
        'families = ["cox", "boosted", "forest"]', 'families = ["cox"]'
    )
    config.write_text(text + "\n[compute]\nworkers = 1\n")
    assert main(["-v", "run", "--config", str(config)]) == 0
    assert "starting a local Dask cluster of 1 worker process(es)" in capsys.readouterr().err
    assert (tmp_path / "reports" / "2026-10" / "scores.csv").is_file()
