"""The invented company export (tests/_brackwater.py) taken through `lifecycle check` and
`lifecycle run` for two consecutive months, as a new user would: its own file and column names,
dates as days, Y/N flags, its own reason codes and promotion codes, all mapped in settings.
"""

from __future__ import annotations

import json

import pandas as pd

from lifecycle.cli import main
from tests._brackwater import write_brackwater


def test_the_export_runs_for_two_months_and_never_plans_flagged_customers(tmp_path, capsys, caplog):
    settings = write_brackwater(tmp_path / "data")
    data = settings.parent
    assert main(["check", str(data)]) == 0
    out = capsys.readouterr().out
    # Known truth of the generator: activity up to 2026-03, 300 accounts, four zones.
    assert "extract month: 2026-03" in out and "customers: 300" in out
    assert "areas: 4 polygons in EPSG:32630; attributes rental_share, flats_share" in out
    assert "campaigns: loyalty_credit/held_out" in out  # RET10 mapped onto the offer

    accounts = pd.read_csv(data / "accounts.csv", dtype=str, keep_default_na=False)
    flagged = accounts.loc[
        accounts["no_marketing"].str.upper().eq("Y") | accounts["payment_plan"].str.upper().eq("Y"),
        "account_ref",
    ]
    assert len(flagged) > 10
    for month in ("2026-02", "2026-03"):
        assert main(["-v", "run", "--config", str(settings), "--as-of", month]) == 0
        log = capsys.readouterr().err
        assert "effect from past campaigns" in log
        assert "extract month 2026-03 inferred from the data" in log
        folder = data / "reports" / month
        assert (folder / "contact_plan.csv").is_file() and (folder / "report.html").is_file()
        plan = pd.read_csv(folder / "contact_plan.csv", dtype={"customer_id": str})
        assert len(plan) > 0
        assert not set(plan["customer_id"]) & set(flagged)
        summary = json.loads((folder / "run_summary.json").read_text())
        assert summary["plan"]["excluded_customers"] > 0
        effects = summary["plan"]["effects"]
        assert effects["loyalty_credit"]["from"] == "campaigns"
        assert effects["loyalty_credit"]["lower_95"] < effects["loyalty_credit"]["hazard_ratio"]
        assert effects["leak_cover_trial"] == {
            "from": "settings", "hazard_ratio": 1.5, "lower_95": None, "upper_95": None,
            "per_customer": False,
        }  # fmt: skip
        scores = pd.read_csv(folder / "scores.csv")
        assert {"effect_loyalty_credit", "effect_leak_cover_trial"} <= set(scores.columns)
        html = (folder / "report.html").read_text(encoding="utf-8")
        assert "Offer effects" in html and "past campaigns with a hold-out" in html
    assert sorted(p.name for p in (data / "reports").iterdir() if p.is_dir()) == [
        "2026-02",
        "2026-03",
    ]
