"""Offer effects from past campaigns with a random hold-out.

References: the Cox estimate is checked against statsmodels' PHReg (Efron ties) on the same
follow-up data, and against the true hazard ratio of a known-truth simulation and of the demo
scenario (truth.json).
"""

from __future__ import annotations

import logging
import math
from dataclasses import dataclass

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from scipy import stats

from lifecycle._months import parse_month
from lifecycle.data import RawTables, Tables, check_tables
from lifecycle.errors import UsageError
from lifecycle.value import campaign_follow_up, estimate_offer_effects

OFFER_MONTH = "2026-06"


@dataclass(frozen=True)
class Offer:
    name: str
    target: str
    months: int
    hazard_ratio: float = 0.8


def make_tables(customers, campaigns, uptakes=(), extract="2026-10") -> Tables:
    """Checked-form tables from rows with YYYY-MM months (end/reason None while active)."""
    c = pd.DataFrame(customers, columns=["customer_id", "start", "end", "end_reason"])
    frame = pd.DataFrame(
        {
            "customer_id": c["customer_id"].astype(object),
            "start": c["start"].map(parse_month).astype(np.int32),
            "end": [np.nan if e is None else float(parse_month(e)) for e in c["end"]],
            "end_reason": pd.Categorical(
                c["end_reason"], categories=["churn", "move_out", "other"]
            ),
            "x": 0.0,
            "y": 0.0,
            "monthly_margin": 10.0,
        }
    )
    camp = pd.DataFrame(campaigns, columns=["customer_id", "month", "offer", "arm"])
    camp["month"] = camp["month"].map(parse_month).astype(np.int32)
    up = pd.DataFrame(list(uptakes), columns=["customer_id", "product", "month"])
    up["month"] = up["month"].map(parse_month).astype(np.int32)
    return Tables(
        customers=frame,
        uptakes=up,
        areas=gpd.GeoDataFrame({"area_id": []}, geometry=[], crs="EPSG:32625"),
        activity=pd.DataFrame({"customer_id": [], "month": np.array([], np.int32)}),
        campaigns=camp,
        premise_crs="EPSG:32625",
        extract_month=parse_month(extract),
        products=sorted(set(up["product"])),
    )


# --- the follow-up, row by row --------------------------------------------------------------------


def test_follow_up_times_and_events_follow_the_rules():
    customers = [
        ("c1", "2024-01", "2026-08", "churn"),  # churn 2 months after the offer month: event
        ("c2", "2024-01", "2026-06", "churn"),  # left in the offer month: not followed up
        ("c3", "2024-01", "2026-07", "move_out"),  # competing exit: censored at 1
        ("c4", "2024-01", None, None),  # still a customer: censored at the extract month (4)
        ("c5", "2024-01", "2026-10", "churn"),  # churn in the extract month: event at 4
        ("c6", "2024-01", "2025-09", "churn"),  # offered 2025-01: churn after the 6-month window
        ("c7", "2024-01", "2026-09", "other"),  # other exit: censored at 3
    ]
    campaigns = [
        (c, OFFER_MONTH, "credit", arm)
        for c, arm in zip(["c1", "c2", "c3", "c4", "c5"], ["offered", "held_out"] * 3, strict=False)
    ] + [("c6", "2025-01", "credit", "held_out"), ("c7", OFFER_MONTH, "credit", "offered")]
    tables = make_tables(customers, campaigns)
    follow = campaign_follow_up(tables, "credit", target="churn", months=6).set_index("customer_id")
    assert follow.index.tolist() == ["c1", "c3", "c4", "c5", "c6", "c7"]
    assert follow["duration"].to_dict() == {"c1": 2, "c3": 1, "c4": 4, "c5": 4, "c6": 6, "c7": 3}
    assert follow["event"].to_dict() == {"c1": 1, "c3": 0, "c4": 0, "c5": 1, "c6": 0, "c7": 0}
    assert follow.loc["c6", "offer_month"] == "2025-01"
    assert follow["offered"].to_dict() == {"c1": 1, "c3": 1, "c4": 0, "c5": 1, "c6": 0, "c7": 1}
    # on move_out, c3 is the event and the churners are censored
    move = campaign_follow_up(tables, "credit", target="move_out", months=6)
    assert move.set_index("customer_id")["event"].to_dict() == {
        "c1": 0, "c3": 1, "c4": 0, "c5": 0, "c6": 0, "c7": 0,
    }  # fmt: skip


def test_follow_up_on_an_uptake_target():
    customers = [
        ("u1", "2024-01", None, None),  # takes it up 2026-08: event at 2
        ("u2", "2024-01", None, None),  # holds it since 2026-03: not at risk
        ("u3", "2024-01", "2026-09", "churn"),  # takes it up in its exit month: event at 3
        ("u4", "2024-01", "2026-08", "move_out"),  # leaves first: censored at 2
    ]
    arms = {"u1": "offered", "u2": "offered", "u3": "held_out", "u4": "held_out"}
    campaigns = [(c, OFFER_MONTH, "bundle", a) for c, a in arms.items()]
    uptakes = [("u1", "tv", "2026-08"), ("u2", "tv", "2026-03"), ("u3", "tv", "2026-09")]
    tables = make_tables(customers, campaigns, uptakes)
    follow = campaign_follow_up(tables, "bundle", target="uptake_tv", months=6)
    follow = follow.set_index("customer_id")
    assert follow["duration"].to_dict() == {"u1": 2, "u3": 3, "u4": 2}
    assert follow["event"].to_dict() == {"u1": 1, "u3": 1, "u4": 0}
    with pytest.raises(UsageError, match="target was 'uptake_radio'"):
        campaign_follow_up(tables, "bundle", target="uptake_radio")
    with pytest.raises(UsageError, match="'nothing' is not in the campaigns table"):
        campaign_follow_up(tables, "nothing")


# --- a known-truth simulation --------------------------------------------------------------------

TRUE_HR = 0.6


@pytest.fixture(scope="module")
def simulated():
    """Two randomised arms of 2 500 customers; continuous exponential times to churn (rate
    0.04 per month held out, 0.04·TRUE_HR offered), move-out (0.01) and other exits (0.002),
    recorded as the month of the exit like the customers table does."""
    rng = np.random.default_rng(20240611)
    n = 5000
    offered = rng.permutation(np.repeat([True, False], n // 2))
    rates = np.column_stack(
        [np.where(offered, 0.04 * TRUE_HR, 0.04), np.full(n, 0.01), np.full(n, 0.002)]
    )
    times = rng.exponential(1.0 / rates)
    first = times.argmin(axis=1)
    months_after = np.ceil(times.min(axis=1)).astype(int)
    m0 = parse_month("2025-09")
    extract = m0 + 13
    reasons = np.array(["churn", "move_out", "other"], dtype=object)[first]
    rows, camp = [], []
    for i in range(n):
        end = m0 + months_after[i]
        ended = end <= extract
        rows.append(
            (f"S{i:05d}", "2023-01", _label(end) if ended else None, reasons[i] if ended else None)
        )
        camp.append((f"S{i:05d}", "2025-09", "credit", "offered" if offered[i] else "held_out"))
    # eight customers who left in the offer month itself are not followed up
    for i in range(8):
        rows.append((f"X{i}", "2023-01", "2025-09", "churn"))
        camp.append((f"X{i}", "2025-09", "credit", "offered" if i % 2 else "held_out"))
    tables = make_tables(rows, camp, extract=_label(extract))
    truth = pd.DataFrame(
        {
            "customer_id": [f"S{i:05d}" for i in range(n)],
            "duration": np.minimum(months_after, 6),
            "event": ((months_after <= 6) & (first == 0)).astype(int),
        }
    )
    return tables, truth


def _label(index: int) -> str:
    year, month0 = divmod(int(index), 12)
    return f"{year:04d}-{month0 + 1:02d}"


def test_simulated_follow_up_matches_the_simulated_times(simulated):
    tables, truth = simulated
    follow = campaign_follow_up(tables, "credit", target="churn", months=6)
    merged = truth.merge(follow, on="customer_id", suffixes=("_true", ""), validate="1:1")
    assert len(follow) == len(truth)  # the eight offer-month leavers are dropped
    np.testing.assert_array_equal(merged["duration"], merged["duration_true"])
    np.testing.assert_array_equal(merged["event"], merged["event_true"])


def test_known_hazard_ratio_is_recovered_within_its_interval(simulated, caplog):
    tables, _ = simulated
    with caplog.at_level(logging.INFO, logger="lifecycle.value"):
        effects = estimate_offer_effects(tables, horizon_months=6)
    assert effects.columns.tolist() == [
        "offer", "target", "hazard_ratio", "lower_95", "upper_95", "n_offered", "n_held_out",
        "events",
    ]  # fmt: skip
    row = effects.iloc[0]
    assert (row["offer"], row["target"]) == ("credit", "churn")
    assert row["lower_95"] < TRUE_HR < row["upper_95"]
    assert row["upper_95"] / row["lower_95"] < 1.5  # informative: about ±0.14 on the log scale
    assert (row["n_offered"], row["n_held_out"]) == (2500, 2500)
    # No offer of that name is configured: the log must not claim the estimate replaces one.
    assert "it is not a configured offer, so no plan uses it" in caplog.text
    assert "replaces" not in caplog.text

    # cross-check: statsmodels' Cox regression (Efron ties) on the same follow-up data
    follow = campaign_follow_up(tables, "credit", target="churn", months=6)
    assert row["events"] == follow["event"].sum()
    fit = sm.PHReg(
        follow["duration"].to_numpy(float),
        follow[["offered"]].to_numpy(float),
        status=follow["event"].to_numpy(float),
        ties="efron",
    ).fit()
    assert math.log(row["hazard_ratio"]) == pytest.approx(fit.params[0], rel=1e-5)
    lower, upper = np.exp(fit.conf_int()[0])
    assert row["lower_95"] == pytest.approx(lower, rel=1e-4)
    assert row["upper_95"] == pytest.approx(upper, rel=1e-4)


def test_configured_offers_set_target_and_window_and_are_named_in_the_log(simulated, caplog):
    tables, _ = simulated
    with caplog.at_level(logging.INFO, logger="lifecycle.value"):
        effects = estimate_offer_effects(tables, offers=[Offer("credit", "move_out", 3, 0.8)])
    row = effects.iloc[0]
    assert row["target"] == "move_out"
    follow = campaign_follow_up(tables, "credit", target="move_out", months=3)
    assert row["events"] == follow["event"].sum()
    assert follow["duration"].max() == 3
    # the offer did not change the move-out rate in the simulation
    assert row["lower_95"] < 1.0 < row["upper_95"]
    assert "the plan uses it instead of the configured hazard ratio 0.8" in caplog.text


def test_offers_without_hold_out_or_without_events_are_left_out(caplog):
    customers = [(f"c{i}", "2024-01", None, None) for i in range(6)]
    customers[0] = ("c0", "2024-01", "2026-08", "churn")
    campaigns = [(f"c{i}", OFFER_MONTH, "everyone", "offered") for i in range(3)] + [
        (f"c{i}", OFFER_MONTH, "quiet", arm) for i, arm in zip(
            range(3, 6), ["offered", "held_out", "held_out"], strict=True
        )
    ]  # fmt: skip
    tables = make_tables(customers, campaigns)
    with caplog.at_level(logging.WARNING, logger="lifecycle.value"):
        effects = estimate_offer_effects(tables)
    assert effects.empty
    assert effects.columns[0] == "offer"
    assert "'everyone' has no randomised hold-out" in caplog.text
    assert "'quiet': no finite hazard ratio" in caplog.text


def test_a_customer_in_several_campaign_rows_gets_a_clustered_variance(simulated):
    tables, _ = simulated
    camp = tables.campaigns
    again = camp.iloc[:400].copy()
    again["month"] = again["month"] + 1  # the same customers offered again a month later
    doubled = Tables(**{**tables.__dict__, "campaigns": pd.concat([camp, again])})
    row = estimate_offer_effects(doubled).iloc[0]
    assert row["n_offered"] + row["n_held_out"] > 5000
    assert row["lower_95"] < TRUE_HR < row["upper_95"]


def test_empty_campaigns_give_an_empty_table():
    tables = make_tables([("c1", "2024-01", None, None)], [])
    assert estimate_offer_effects(tables).empty


# --- the demo scenario ---------------------------------------------------------------------------


def test_the_demo_campaign_interval_covers_the_true_hazard_ratio(tmp_path):
    demo = pytest.importorskip("lifecycle.demo")
    from lifecycle.config import load_config

    scenario = demo.simulate_demo(customers=20_000, seed=7)  # the default demo
    (tmp_path / "lifecycle.toml").write_text(scenario.config)
    raw = RawTables(
        customers=scenario.customers,
        uptakes=scenario.uptakes,
        areas=scenario.areas,
        campaigns=scenario.campaigns,
    )
    tables = check_tables(raw, load_config(tmp_path / "lifecycle.toml"))
    truth = scenario.truth["campaign"]
    effects = estimate_offer_effects(tables, horizon_months=truth["effect_months"])
    row = effects.set_index("offer").loc[truth["offer"]]
    assert row["target"] == truth["target_cause"] == "churn"
    # The demo's effect varies by segment; one hazard ratio of offered vs held out estimates
    # the churn-hazard-weighted average ratio truth.json gives as hazard_ratio_average (to
    # first order, with randomised arms and six months of follow-up).
    # One fixed demo: its 95 % interval misses the truth one time in twenty by design, so the
    # check uses the 99.9 % interval (|z| < 3.29, the style of the demo's own checks), with the
    # standard error recovered from the reported 95 % bounds, exp(β̂ ± 1.96·se).
    se = (math.log(row["upper_95"]) - math.log(row["lower_95"])) / (2 * stats.norm.ppf(0.975))
    z = (math.log(row["hazard_ratio"]) - math.log(truth["hazard_ratio_average"])) / se
    assert abs(z) < stats.norm.ppf(0.9995)
    assert row["n_offered"] + row["n_held_out"] <= truth["eligible"]
