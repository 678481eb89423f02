"""Degenerate fits are refused: an empty panel, one customer, everyone censored, a cause with
too few events; and a family with no valid backtest metric is never a champion."""

from __future__ import annotations

import logging
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from lifecycle.cli import main
from lifecycle.config import Config
from lifecycle.errors import InputError, UsageError
from lifecycle.evaluation._backtest import champions
from lifecycle.models._fittable import MIN_EVENTS, check_fittable, min_events_setting
from lifecycle.panel import build_panel
from tests._builders import make_tables


def _panel(customers: list[dict], **kwargs) -> pd.DataFrame:
    return build_panel(make_tables(customers, **kwargs), "2026-10")


def _leavers(n: int, reason: str, start: int = 0) -> list[dict]:
    return [
        {"customer_id": f"{reason}{start + i}", "start_month": "2025-01",
         "end_month": f"2026-{1 + i % 9:02d}", "end_reason": reason}
        for i in range(n)
    ]  # fmt: skip


def _stayers(n: int) -> list[dict]:
    return [{"customer_id": f"S{i}", "start_month": "2024-06"} for i in range(n)]


def test_an_empty_panel_is_refused():
    panel = _panel(_stayers(3)).iloc[:0]
    with pytest.raises(InputError, match="the panel is empty"):
        check_fittable(panel)


def test_one_customer_is_refused_with_its_id():
    panel = _panel(_leavers(1, "churn"))
    with pytest.raises(InputError, match="only 1 customer") as caught:
        check_fittable(panel, min_events=0)
    assert "churn0" in str(caught.value)


def test_everyone_censored_is_refused_whatever_the_minimum():
    panel = _panel(_stayers(40))
    with pytest.raises(InputError, match="every customer is censored") as caught:
        check_fittable(panel, min_events=0)
    assert "40 customers" in str(caught.value)


def test_a_cause_with_too_few_events_is_named_with_its_count():
    panel = _panel(_stayers(20) + _leavers(8, "churn") + _leavers(2, "move_out"))
    with pytest.raises(InputError) as caught:
        check_fittable(panel, min_events=5)
    message = str(caught.value)
    # other_exit has none, move_out two; churn's eight pass
    assert "move_out 2" in message and "other_exit 0" in message and "churn" not in message
    assert "at least 5 events" in message and "[models] min_events = 0" in message


def test_min_events_zero_accepts_a_cause_without_events_with_a_warning(caplog):
    panel = _panel(_stayers(20) + _leavers(8, "churn"))
    with caplog.at_level(logging.WARNING, logger="lifecycle"):
        check_fittable(panel, min_events=0)
    assert "other_exit has no events" in caplog.text


def test_the_min_events_setting_is_read_and_checked():
    assert min_events_setting(Config()) == MIN_EVENTS == 5
    assert min_events_setting(Config(raw={"models": {"min_events": 0}})) == 0
    for bad in (-1, 2.5, "five", True):
        with pytest.raises(UsageError, match="min_events was"):
            min_events_setting(Config(raw={"models": {"min_events": bad}}))


def _metrics(values: dict[str, tuple[float, float]]) -> pd.DataFrame:
    rows = []
    for family, (uno_c, brier) in values.items():
        for cutoff in ("2025-01", "2025-04"):
            # the mean prediction is finite whatever else could be scored
            for metric, value in (("uno_c", uno_c), ("brier", brier), ("mean_predicted", 0.1)):
                rows.append(dict(family=family, cause="move_out", horizon=12, cutoff=cutoff,
                                 metric=metric, value=value, n=100, events=0))  # fmt: skip
    return pd.DataFrame(rows)


def test_a_family_with_only_nan_metrics_is_never_the_champion(caplog):
    # "aaa" sorts first by name, so before the guard it won when every concordance was NaN
    metrics = _metrics({"aaa": (np.nan, np.nan), "boosted": (np.nan, 0.08)})
    with caplog.at_level(logging.WARNING, logger="lifecycle"):
        table = champions(metrics)
    assert table["family"].tolist() == ["boosted"]
    assert "aaa scored no valid concordance or Brier score" in caplog.text
    metrics = _metrics({"aaa": (np.nan, np.nan), "cox": (0.61, 0.09), "zzz": (np.nan, np.nan)})
    assert champions(metrics)["family"].tolist() == ["cox"]


def test_a_cause_where_no_family_has_a_valid_metric_has_no_champion(caplog):
    metrics = _metrics({"aaa": (np.nan, np.nan), "cox": (np.nan, np.nan)})
    with caplog.at_level(logging.WARNING, logger="lifecycle"):
        assert champions(metrics).empty
    assert "it has no champion" in caplog.text


# -- the commands, on a small demo without any "other" exits ----------------------------------
@pytest.fixture(scope="module")
def no_other_exits(tmp_path_factory):
    from lifecycle.demo import write_demo

    root = tmp_path_factory.mktemp("degenerate")
    paths = write_demo(root / "data", customers=500, seed=3)
    customers = pd.read_csv(paths["customers"], dtype=str, keep_default_na=False)
    other = customers["end_reason"] == "other"
    assert other.sum() >= 5
    customers.loc[other, "end_reason"] = "churn"
    customers.to_csv(paths["customers"], index=False)
    text = paths["config"].read_text().replace('["cox", "boosted"]', '["boosted"]')
    paths["config"].write_text(text)
    return root


def _listing(root: Path) -> list[str]:
    return sorted(str(p.relative_to(root)) for p in root.rglob("*"))


@pytest.mark.parametrize(
    "command",
    [
        ["fit", "{data}", "--as-of", "2026-10", "--family", "boosted", "--out", "{root}/model"],
        ["backtest", "{data}", "--as-of", "2026-10", "--families", "boosted",
         "--horizons", "3", "--out", "{root}/b.csv"],
        ["run", "--config", "{data}/lifecycle.toml"],
    ],
)  # fmt: skip
def test_commands_refuse_a_cause_without_events(no_other_exits, command, capsys):
    root = no_other_exits
    argv = [a.format(data=root / "data", root=root) for a in command]
    before = _listing(root)
    assert main(argv) == 2
    # one message (progress lines, indented, such as "  check took 0.1s", are not messages)
    err = [e for e in capsys.readouterr().err.splitlines() if e and not e.startswith("  ")]
    assert len(err) == 1
    assert "other_exit 0" in err[0] and "at least 5 events" in err[0]
    if command[0] != "fit":
        assert "backtest cutoff" in err[0]
    assert _listing(root) == before


def test_fit_with_min_events_zero_fits_and_gives_that_cause_no_hazard(no_other_exits, capsys):
    root = no_other_exits
    config = root / "zero.toml"
    text = (root / "data" / "lifecycle.toml").read_text()
    config.write_text(text + "\n[models]\nmin_events = 0\n")
    out = root / "model-zero"
    argv = ["fit", str(root / "data"), "--config", str(config), "--as-of", "2026-10",
            "--family", "boosted", "--out", str(out)]  # fmt: skip
    assert main(argv) == 0
    assert (out / "manifest.json").is_file()
    capsys.readouterr()


def test_a_run_gives_a_cause_without_champion_the_first_configured_family(tmp_path):
    """The run's champion model: a cause left without a champion (no valid metric) takes
    the first family of ``[run] families``, never the fixed default of a family not run."""
    from lifecycle.cycle._run import _champion_model
    from lifecycle.evaluation import TenureLifeTable
    from lifecycle.models import CauseSpecificCox

    panel = _panel(_stayers(30) + _leavers(12, "churn") + _leavers(9, "move_out", start=50))
    families = {"life_table": TenureLifeTable(), "cox": CauseSpecificCox()}
    keys = ("2026-10", "0" * 64, "1" * 64)
    saves = []
    model = _champion_model(
        tmp_path, keys, panel, families, {"churn": "cox"}, 1, force=False, saves=saves
    )
    assert len(saves) == 1  # a new fit, saved only once the month is published
    assert model.cause_family_ == {"churn": "cox", "move_out": "cox", "other_exit": "cox"}
