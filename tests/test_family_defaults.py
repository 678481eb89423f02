"""Every family works with its defaults wherever it is used: the forest's horizon follows the
longest horizon a later step needs (scores, lifetime value, the forecast) unless it is set."""

from __future__ import annotations

import pandas as pd

from lifecycle.cli import main
from lifecycle.config import Config
from lifecycle.models._families import make_model, needed_horizon


def test_the_forest_horizon_follows_the_steps_after_it():
    assert needed_horizon(Config()) == 36  # [value] horizon_months, default 36
    assert make_model("forest", Config()).horizon == 36
    longer = Config(raw={"forecast": {"horizon_months": 48}})
    assert make_model("forest", longer).horizon == 48
    shorter = Config(raw={"value": {"horizon_months": 6}, "forecast": {"horizon_months": 6}})
    assert make_model("forest", shorter).horizon == 12  # scores at 3, 6, 12 months
    assert make_model("forest", shorter, horizon=18).horizon == 18  # backtest --horizons ...,18
    fixed = Config(raw={"models": {"forest": {"horizon": 20}}})
    assert make_model("forest", fixed).horizon == 20  # set on purpose: kept
    assert make_model("boosted", Config()).horizon == 12  # the boosted lag is its own setting


def test_fit_forest_then_score_with_the_defaults(tmp_path, capsys):
    """``fit --family forest`` then ``score`` with every horizon at its default (lifetime value
    over 36 months) runs through (it used to stop: the forest was fitted for 24 months)."""
    from lifecycle.demo import write_demo

    paths = write_demo(tmp_path / "demo", customers=600, seed=4)
    config = paths["config"]
    text = config.read_text()
    assert "horizon_months = 24\n" in text
    config.write_text(text.replace("horizon_months = 24\n", ""))  # the [value] default, 36
    model, scores = tmp_path / "model", tmp_path / "scores.csv"
    common = [str(paths["config"].parent), "--as-of", "2026-10"]
    assert main(["fit", *common, "--family", "forest", "--out", str(model)]) == 0
    assert main(["score", *common, "--model", str(model), "--out", str(scores)]) == 0, (
        capsys.readouterr().err
    )
    frame = pd.read_csv(scores)
    assert {"survival_12m", "cif_churn_3m", "lifetime_value"} <= set(frame.columns)
    assert frame["lifetime_value"].notna().all() and (frame["lifetime_value"] > 0).all()
