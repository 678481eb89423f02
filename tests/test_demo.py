"""The invented demo scenario: reproducible files, sane tables, features that follow the panel's
definitions, and realised events that agree with the true parameters in truth.json.

Statistical checks use bounds of four standard errors (or 99.9 % binomial intervals), so that a
correct simulation fails them with probability well below 1e-3 per check; the seeds are fixed, so
the outcome is reproducible.
"""

from __future__ import annotations

import json
import math

import geopandas as gpd
import numpy as np
import pandas as pd
import pytest
import statsmodels.api as sm
from pyproj import Transformer
from scipy import stats
from scipy.spatial.distance import cdist

from lifecycle._months import format_month, parse_month
from lifecycle.config import load_config
from lifecycle.demo import DEMO_FILES, simulate_demo, write_demo
from lifecycle.errors import UsageError
from lifecycle.spatial import gamma_poisson_rates

SMALL = {"customers": 1500, "seed": 11}
MEDIUM = {"customers": 10_000, "seed": 5}
PRODUCT = "backup_line"
NEAR_SHARE = "nearby_adoption_backup_line_400m"
NEAR_ADOPTERS = "nearby_adopters_backup_line_400m"
ACTIVITY = ["bill_shock", "complaints", "late_payment", "contract_months_left", "contract_ending"]
EVENTS = ["churn", "move_out", "other_exit"]


@pytest.fixture(scope="module")
def small_dir(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo_small")
    write_demo(out, **SMALL)
    return out


@pytest.fixture(scope="module")
def small():
    return simulate_demo(**SMALL)


@pytest.fixture(scope="module")
def medium():
    return simulate_demo(**MEDIUM)


# --- helpers: the truth, recomputed from truth.json alone -------------------------------------


def baseline(spec: dict, tenure: np.ndarray) -> np.ndarray:
    """The baseline formula written in truth.json: late + (early − late)·exp(−tenure/decay)."""
    assert spec["formula"] == "late + (early - late) * exp(-tenure / decay_months)"
    t = np.asarray(tenure, dtype=np.float64)
    return spec["late"] + (spec["early"] - spec["late"]) * np.exp(-t / spec["decay_months"])


def true_hazards(features: pd.DataFrame, truth: dict) -> dict[str, np.ndarray]:
    """Monthly hazards per cause from truth.json and the feature columns (NaN counts as 0)."""
    out = {}
    for cause, betas in truth["beta"].items():
        lin = np.zeros(len(features))
        for column, beta in betas.items():
            lin += beta * np.nan_to_num(features[column].to_numpy(dtype=np.float64))
        out[cause] = baseline(truth["baseline"][cause], features["tenure_start"]) * np.exp(lin)
    offered = features["offer_loyalty_credit"].to_numpy() == 1
    ratio = features["customer_id"].astype(str).map(campaign_ratios(features, truth)).to_numpy()
    out["churn"] = np.where(offered, out["churn"] * ratio, out["churn"])
    holds = features["holds_backup_line"].to_numpy() == 1
    out[f"uptake_{PRODUCT}"] = np.where(holds, np.nan, out[f"uptake_{PRODUCT}"])
    return out


def campaign_ratios(features: pd.DataFrame, truth: dict) -> pd.Series:
    """Each customer's true campaign hazard ratio, from truth.json alone: the first segment
    whose rule (a pandas ``eval`` expression) holds on the features of the offer month."""
    campaign = truth["campaign"]
    rows = features[features["month"].astype(str) == campaign["month"]]
    ratio = pd.Series(np.nan, index=rows.index)
    for segment in campaign["segments"]:
        hit = True if segment["rule"] == "otherwise" else rows.eval(segment["rule"])
        ratio = ratio.where(
            ratio.notna() | ~pd.Series(hit, index=rows.index), segment["hazard_ratio"]
        )
    return pd.Series(ratio.to_numpy(), index=rows["customer_id"].astype(str).to_numpy())


def event_probabilities(hazards: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    """P(exit by cause k in the month) = (1 − exp(−Λ))·λ_k/Λ, Λ = Σ λ_k (competing risks with
    constant hazards within the month); P(uptake) = 1 − exp(−λ_u)."""
    total = sum(hazards[k] for k in EVENTS)
    p_any = -np.expm1(-total)
    out = {k: p_any * hazards[k] / total for k in EVENTS}
    out[f"uptake_{PRODUCT}"] = -np.expm1(-hazards[f"uptake_{PRODUCT}"])
    return out


# --- files ---------------------------------------------------------------------------------


def test_same_seed_gives_identical_bytes(tmp_path, small_dir):
    again = tmp_path / "again"
    write_demo(again, **SMALL)
    for name in DEMO_FILES:
        assert (again / name).read_bytes() == (small_dir / name).read_bytes(), name


def test_another_seed_gives_another_scenario(tmp_path, small_dir):
    other = tmp_path / "other"
    write_demo(other, customers=SMALL["customers"], seed=SMALL["seed"] + 1)
    assert (other / "customers.csv").read_bytes() != (small_dir / "customers.csv").read_bytes()


def test_refuses_a_folder_with_other_files(tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(UsageError, match=r"notes\.txt"):
        write_demo(tmp_path, customers=500, seed=1)
    assert sorted(p.name for p in tmp_path.iterdir()) == ["notes.txt"]


def test_refuses_demo_names_without_our_truth(tmp_path):
    (tmp_path / "customers.csv").write_text("customer_id\nX1\n")
    with pytest.raises(UsageError, match=r"truth\.json"):
        write_demo(tmp_path, customers=500, seed=1)
    assert (tmp_path / "customers.csv").read_text() == "customer_id\nX1\n"


def test_replaces_a_previous_demo(tmp_path):
    write_demo(tmp_path, customers=500, seed=1)
    write_demo(tmp_path, customers=500, seed=2)
    assert json.loads((tmp_path / "truth.json").read_text())["seed"] == 2
    assert sorted(p.name for p in tmp_path.iterdir()) == sorted(DEMO_FILES)


def test_accepts_git_placeholder_and_panels_the_demo_command_built(tmp_path):
    (tmp_path / ".gitkeep").write_text("")
    write_demo(tmp_path, customers=500, seed=1)
    (tmp_path / "panel_2026-10.parquet").write_bytes(b"panel")
    write_demo(tmp_path, customers=500, seed=2)
    assert (tmp_path / ".gitkeep").exists() and (tmp_path / "panel_2026-10.parquet").exists()


@pytest.mark.parametrize(
    "kwargs", [{"customers": 10}, {"customers": 2.5}, {"seed": -1}, {"months": 6}]
)
def test_bad_arguments_are_usage_errors(kwargs):
    with pytest.raises(UsageError):
        simulate_demo(**{"customers": 500, **kwargs})


def test_config_and_truth_files(small_dir):
    config = load_config(small_dir / "lifecycle.toml")
    assert config.extract_month == "2026-10"
    assert config.premise_crs == "EPSG:32625"
    assert config.panel.trailing_sums == {"complaints": 3}
    assert config.panel.window_months == 48
    text = (small_dir / "truth.json").read_text()
    truth = json.loads(text)
    # Deterministic JSON: dumping the parsed document again with sorted keys gives the text.
    assert json.dumps(truth, sort_keys=True, indent=2, ensure_ascii=False) + "\n" == text
    assert truth["window"] == {"months": 48, "start": "2022-11", "end": "2026-10"}
    assert truth["crs"] == "EPSG:32625" and truth["radius_m"] == 400
    table = truth["baseline_by_tenure"]
    for cause, spec in truth["baseline"].items():
        np.testing.assert_allclose(table[cause], baseline(spec, table["tenure"]), rtol=1e-9)
    assert "invented" in (small_dir / "README.md").read_text().lower()


def test_areas_file_and_premises(small_dir):
    areas = gpd.read_file(small_dir / "areas.geojson")
    assert areas.crs.to_epsg() == 32625  # read back by geopandas (GDAL's GeoJSON driver)
    assert 30 <= len(areas) <= 50 and areas["area_id"].is_unique
    assert areas.geometry.is_valid.all()
    assert areas["rental_share"].between(0, 1).all() and areas["area_name"].map(type).eq(str).all()
    customers = pd.read_csv(small_dir / "customers.csv")
    points = gpd.GeoDataFrame(
        geometry=gpd.points_from_xy(customers["x"], customers["y"]), crs=areas.crs
    )
    joined = gpd.sjoin(points, areas, predicate="within")
    assert len(joined) == len(customers) and joined.index.is_unique  # each in exactly one area
    # The district lies in open ocean (pyproj): west of the Azores, east of North America.
    lon, lat = Transformer.from_crs(32625, 4326, always_xy=True).transform(
        customers["x"].to_numpy(), customers["y"].to_numpy()
    )
    assert (lon > -34).all() and (lon < -32).all() and (lat > 39).all() and (lat < 41).all()


def test_place_names_are_coined(small_dir):
    """The district and area names are coined: none is the city of a time zone in the IANA
    database (a weak outside list of real places, but one that can fail), and every area name is
    one of our coined stems with a common word."""
    import zoneinfo

    from lifecycle.demo import _geography, _params

    cities = {
        part.replace("_", " ").lower()
        for zone in zoneinfo.available_timezones()
        for part in zone.split("/")[1:]
    }
    assert len(cities) > 300  # the database is there
    names = gpd.read_file(small_dir / "areas.geojson")["area_name"]
    stems = {name.rsplit(" ", 1)[0] for name in names}
    assert stems <= set(_geography._STEMS)
    for name in (*_geography._STEMS, _params.DISTRICT):
        assert name.lower() not in cities, name


# --- table sanity ----------------------------------------------------------------------------


def _months(series: pd.Series) -> np.ndarray:
    return np.array([np.nan if pd.isna(v) else parse_month(v) for v in series], dtype=float)


def test_tables_are_consistent(small_dir):
    c = pd.read_csv(small_dir / "customers.csv", dtype=str, keep_default_na=False, na_values=[""])
    assert c["customer_id"].is_unique
    start, end = _months(c["start_month"]), _months(c["end_month"])
    as_of = parse_month("2026-10")
    assert (np.isnan(end) | (end >= start)).all()
    assert (np.nan_to_num(end, nan=as_of) <= as_of).all() and (start <= as_of).all()
    assert set(c["end_reason"].dropna()) == {"churn", "move_out", "other"}
    assert (c["end_reason"].isna() == np.isnan(end)).all()
    assert set(c["plan_speed"]) == {"100M", "300M", "1G"}
    stop = np.nan_to_num(end, nan=as_of)
    first = parse_month("2021-11")  # the simulation starts 12 months before the window
    by_id = dict(zip(c["customer_id"], zip(start, stop, strict=True), strict=True))

    u = pd.read_csv(small_dir / "uptakes.csv", dtype=str)
    assert u["customer_id"].is_unique and set(u["product"]) == {PRODUCT}
    for cid, month in zip(u["customer_id"], _months(u["month"]), strict=True):
        s, e = by_id[cid]
        assert max(s, first) <= month <= e

    a = pd.read_parquet(small_dir / "activity.parquet")
    assert list(a.columns) == ["customer_id", "month", *ACTIVITY]
    am = _months(a["month"])
    s = np.array([by_id[cid][0] for cid in a["customer_id"]])
    e = np.array([by_id[cid][1] for cid in a["customer_id"]])
    assert ((am >= np.maximum(s, first)) & (am <= e)).all()
    assert not a.duplicated(["customer_id", "month"]).any()
    # Contracts: 12- or 24-month terms, ending flagged in the last two months of a term.
    assert a["contract_months_left"].between(0, 23).all()
    ending = a["contract_ending"] == 1
    assert (a.loc[ending, "contract_months_left"] <= 1).all()
    assert ending.mean() > 0.01
    # ... and every active simulated month has its row.
    expected_rows = np.maximum(stop - np.maximum(start, first) + 1, 0).sum()
    assert len(a) == expected_rows

    camp = pd.read_csv(small_dir / "campaigns.csv", dtype=str)
    assert set(camp["month"]) == {"2025-09"} and set(camp["offer"]) == {"loyalty_credit"}
    counts = camp["arm"].value_counts()
    assert set(counts.index) == {"offered", "held_out"} and abs(counts.diff().iloc[-1]) <= 1
    flags = c.set_index("customer_id").loc[camp["customer_id"], ["do_not_contact", "hardship"]]
    assert (flags == "0").all().all()
    campaign_month = parse_month("2025-09")
    for cid in camp["customer_id"]:
        s_, e_ = by_id[cid]
        assert s_ < campaign_month <= e_  # active in the offer month, with a month of history
    lagged = a[(am == campaign_month - 1) & a["customer_id"].isin(camp["customer_id"])]
    assert len(lagged) == len(camp) and (lagged["contract_months_left"] <= 1).all()


def test_flags_are_rare_and_present(medium):
    c = medium.customers
    n = len(c)
    # 2 % and 1.5 % of customers (design); 99.9 % binomial intervals (scipy).
    for column, p in (("do_not_contact", 0.02), ("hardship", 0.015)):
        lo, hi = stats.binom.interval(0.999, n, p)
        assert lo <= c[column].sum() <= hi, column


# --- features follow the panel's definitions (DEVELOPERS.md), recomputed from the files -------


def _recompute(folder) -> pd.DataFrame:
    """The panel's features, computed from the written tables by the definitions alone."""
    c = pd.read_csv(folder / "customers.csv", dtype={"customer_id": str})
    areas = gpd.read_file(folder / "areas.geojson")
    pts = gpd.GeoDataFrame(c, geometry=gpd.points_from_xy(c["x"], c["y"]), crs=areas.crs)
    c["area"] = gpd.sjoin(pts, areas, predicate="within")["area_id"].reindex(c.index)
    c["rental_share"] = c["area"].map(areas.set_index("area_id")["rental_share"])
    c["s"] = _months(c["start_month"])
    c["e"] = _months(c["end_month"])
    u = pd.read_csv(folder / "uptakes.csv", dtype=str)
    c["u"] = c["customer_id"].map(dict(zip(u["customer_id"], _months(u["month"]), strict=True)))
    as_of, w0 = parse_month("2026-10"), parse_month("2022-11")
    lo = np.maximum(c["s"], w0).astype(int).to_numpy()
    hi = np.nan_to_num(c["e"].to_numpy(), nan=as_of).astype(int)
    n = np.maximum(hi - lo + 1, 0)
    rows = pd.DataFrame({"i": np.repeat(c.index.to_numpy(), n)})
    rows["m"] = np.repeat(lo, n) + np.arange(n.sum()) - np.repeat(np.cumsum(n) - n, n)
    rows["customer_id"] = c["customer_id"].to_numpy()[rows["i"]]
    rows["holds_backup_line"] = (c["u"].to_numpy()[rows["i"]] < rows["m"]).astype(float)
    angle = 2 * np.pi * (rows["m"] % 12) / 12
    rows["season_sin"], rows["season_cos"] = np.sin(angle), np.cos(angle)
    rows["rental_share"] = c["rental_share"].to_numpy()[rows["i"]]
    rows["monthly_margin"] = c["monthly_margin"].to_numpy()[rows["i"]]

    a = pd.read_parquet(folder / "activity.parquet")
    a["m"] = _months(a["month"]).astype(int)
    a = a.set_index(["customer_id", "m"])
    key = pd.MultiIndex.from_arrays([rows["customer_id"], rows["m"] - 1])
    for column in ACTIVITY:
        rows[column] = a[column].reindex(key).to_numpy(dtype=float)
    rows["complaints_3m"] = sum(
        a["complaints"]
        .reindex(pd.MultiIndex.from_arrays([rows["customer_id"], rows["m"] - k]))
        .fillna(0)
        .to_numpy()
        for k in (1, 2, 3)
    )

    # local_move_rate: trailing 12 months, active customer-months with the end month included.
    area_codes, area_of = np.unique(c["area"].to_numpy(dtype=str), return_inverse=True)
    e_fill = np.nan_to_num(c["e"].to_numpy(), nan=10**6)
    moved = (c["end_reason"] == "move_out").to_numpy()
    rate = {}
    for m in range(w0, as_of + 1):
        t0, t1 = m - 12, m - 1
        exposure = np.clip(np.minimum(e_fill, t1) - np.maximum(c["s"], t0) + 1, 0, None)
        events = moved & (e_fill >= t0) & (e_fill <= t1)
        y = np.bincount(area_of, weights=events, minlength=area_codes.size)
        n_ = np.bincount(area_of, weights=exposure, minlength=area_codes.size)
        rate[m] = gamma_poisson_rates(y, n_)
    rows["local_move_rate"] = [
        rate[m][k] for m, k in zip(rows["m"], area_of[rows["i"]], strict=True)
    ]
    return rows, c


def test_features_follow_the_panel_definitions(small, small_dir):
    rows, c = _recompute(small_dir)
    f = small.features.copy()
    f["m"] = _months(f["month"].astype(str)).astype(int)
    merged = rows.merge(f, on=["customer_id", "m"], suffixes=("", "_sim"), validate="1:1")
    assert len(merged) == len(rows) == len(f)  # the same customer-months
    for column in [
        "holds_backup_line",
        "season_sin",
        "season_cos",
        "rental_share",
        "monthly_margin",
        "complaints_3m",
        "local_move_rate",
        *ACTIVITY,
    ]:
        np.testing.assert_allclose(
            merged[column + "_sim"].to_numpy(dtype=float),
            merged[column].to_numpy(dtype=float),
            rtol=1e-6,
            equal_nan=True,
            err_msg=column,
        )
    # Nearby adoption by brute force (scipy cdist) for a few months: other customers within
    # 400 m (inclusive) who are customers at the end of m − 1, and those holding the product.
    xy = c[["x", "y"]].to_numpy()
    for month in ("2022-11", "2024-06", "2026-10"):
        m = parse_month(month)
        is_customer = (c["s"] <= m - 1) & ~(c["e"] <= m - 1)
        holds = is_customer & (c["u"] <= m - 1)
        here = merged[merged["m"] == m]
        near = cdist(xy[here["i"]], xy) <= 400.0
        near[np.arange(len(here)), here["i"].to_numpy()] = False  # never its own neighbour
        count = (near & is_customer.to_numpy()).sum(1)
        adopters = (near & holds.to_numpy()).sum(1)
        share = np.divide(adopters, count, out=np.zeros(len(here)), where=count > 0)
        np.testing.assert_array_equal(here[NEAR_ADOPTERS].to_numpy(), adopters)
        assert (count > 0).mean() > 0.9  # most premises have customers within 400 m
        np.testing.assert_allclose(here[NEAR_SHARE].to_numpy(), share, rtol=1e-12)
    assert merged[NEAR_SHARE].max() > 0  # contagion has something to act on


def test_hazards_are_those_of_truth_json(small):
    """The hazards the simulation used equal those recomputed from truth.json."""
    f, truth = small.features, small.truth
    hazards = true_hazards(f, truth)
    for cause, values in hazards.items():
        np.testing.assert_allclose(f[f"hazard_{cause}"], values, rtol=1e-8, equal_nan=True)
    # The campaign's effect applies to offered customers in the six months after 2025-09 only.
    offered = set(small.campaigns.loc[small.campaigns["arm"] == "offered", "customer_id"])
    in_effect = f["month"].astype(str).isin(truth["campaign"]["effect_months_list"])
    expected = (f["customer_id"].astype(str).isin(offered) & in_effect).astype(int)
    np.testing.assert_array_equal(f["offer_loyalty_credit"].to_numpy(), expected.to_numpy())
    assert truth["campaign"]["effect_months_list"][0] == "2025-10"
    assert expected.sum() > 0


# --- realised events agree with the truth ---------------------------------------------------


def test_realised_counts_match_the_implied_probabilities(medium):
    """Observed events vs Σ of their true monthly probabilities, overall and by groups.

    For independent Bernoulli draws the count has variance Σ p(1 − p) ≤ Σ p = E (Poisson-binomial;
    common practice), so |O − E| ≤ 4·√E.
    """
    f = medium.features
    p = event_probabilities(true_hazards(f, medium.truth))
    groups = {
        "all": np.ones(len(f), dtype=bool),
        "contract_ending=1": f["contract_ending"].to_numpy() == 1,
        "contract_ending=0": f["contract_ending"].to_numpy() == 0,
        "bill_shock=1": f["bill_shock"].to_numpy() == 1,
        "late_payment=1": f["late_payment"].to_numpy() == 1,
        "tenure<12": f["tenure_start"].to_numpy() < 12,
    }
    for event, prob in p.items():
        observed = f[event].to_numpy()
        for name, mask in groups.items():
            at_risk = mask & ~np.isnan(prob)
            o, e = observed[at_risk].sum(), prob[at_risk].sum()
            assert abs(o - e) <= 4 * math.sqrt(e) + 1, (event, name, o, e)


def test_realised_rates_are_realistic(medium):
    """Monthly rates in the ranges the scenario was designed for (common practice for a
    broadband provider: churn ~1–1.5 %, move-out ~0.6–1 %, other ~0.1 %, uptake 0.3–1 %)."""
    f = medium.features
    assert 0.010 <= f["churn"].mean() <= 0.015
    assert 0.006 <= f["move_out"].mean() <= 0.010
    assert 0.0005 <= f["other_exit"].mean() <= 0.0015
    not_holding = f["holds_backup_line"] == 0
    assert 0.003 <= f.loc[not_holding, f"uptake_{PRODUCT}"].mean() <= 0.010


def _poisson_fit(f, event: str, betas: dict[str, float], offset: np.ndarray, mask):
    """statsmodels' Poisson GLM; IRLS starts at the truth only to save iterations (the
    log-likelihood is concave, so the maximum does not depend on the start)."""
    columns = sorted(betas)
    x = sm.add_constant(f.loc[mask, columns].astype(float).fillna(0.0))
    model = sm.GLM(f.loc[mask, event].astype(float), x, family=sm.families.Poisson(), offset=offset)
    return model.fit(start_params=np.array([0.0] + [betas[c] for c in columns]))


@pytest.mark.parametrize("cause", ["churn", "move_out", f"uptake_{PRODUCT}"])
def test_true_effects_come_back(medium, cause):
    """A Poisson GLM (statsmodels) of the events on the panel columns, with the true baseline
    in the offset, recovers every true β within four standard errors.

    E[event] = λ_k·g exactly, where g = (1 − e^{−Λ})/Λ for exits and (1 − e^{−λ})/λ for uptake,
    so with log(λ0(tenure)·g·campaign effect) as offset the log-linear model is correctly
    specified and its quasi-likelihood estimates are consistent.
    """
    f, truth = medium.features, medium.truth
    hazards = true_hazards(f, truth)
    betas = truth["beta"][cause]
    if cause == f"uptake_{PRODUCT}":
        mask = f["holds_backup_line"].to_numpy() == 0
        lam = hazards[cause][mask]
        g = -np.expm1(-lam) / lam
    else:
        mask = np.ones(len(f), dtype=bool)
        total = sum(hazards[k] for k in EVENTS)
        g = -np.expm1(-total) / total
    base = baseline(truth["baseline"][cause], f.loc[mask, "tenure_start"])
    effect = np.ones(mask.sum())
    if cause == "churn":
        offered = f["offer_loyalty_credit"].to_numpy() == 1
        ratio = f["customer_id"].astype(str).map(campaign_ratios(f, truth)).to_numpy()
        effect = np.where(offered, ratio, 1.0)
    offset = np.log(base * g * effect)
    fit = _poisson_fit(f, cause, betas, offset, mask)
    assert abs(fit.params["const"]) <= 4 * fit.bse["const"]
    for column in betas:
        gap = abs(fit.params[column] - betas[column])
        assert gap <= 4 * fit.bse[column], (column, fit.params[column], betas[column])


def test_contagion_is_visible(medium):
    """Uptake rate among non-holders rises with the nearby adoption share (two-proportion z
    test between the top and bottom quartiles of the share, z > 4)."""
    f = medium.features[medium.features["holds_backup_line"] == 0]
    share = f[NEAR_SHARE]
    low, high = share <= share.quantile(0.25), share >= share.quantile(0.75)
    y = f[f"uptake_{PRODUCT}"]
    p1, n1, p0, n0 = y[high].mean(), high.sum(), y[low].mean(), low.sum()
    pooled = (y[high].sum() + y[low].sum()) / (n1 + n0)
    z = (p1 - p0) / math.sqrt(pooled * (1 - pooled) * (1 / n1 + 1 / n0))
    assert z > 4, (p1, p0, z)


def test_campaign_effect_within_its_binomial_interval(medium):
    """Churn in the six months after the offer, offered vs held out, segment by segment.

    Within a segment of truth.json the hazard ratio HR is one number. With random assignment,
    conditional on the D churns in both arms, the offered arm's count is Binomial(D,
    HR·n1/(HR·n1 + n0)), n1 and n0 the arms' customer-months at risk (the exact conditional
    test of a Poisson rate ratio); the count must lie in the 99.9 % interval (scipy.stats.binom).
    """
    f, truth = medium.features, medium.truth
    camp = medium.campaigns
    arm = f["customer_id"].astype(str).map(dict(zip(camp["customer_id"], camp["arm"], strict=True)))
    ratio = f["customer_id"].astype(str).map(campaign_ratios(f, truth))
    window = f["month"].astype(str).isin(truth["campaign"]["effect_months_list"])
    sizes = {}
    for segment in truth["campaign"]["segments"]:
        hr = segment["hazard_ratio"]
        rows = f[window & arm.notna() & (ratio == hr)]
        a = arm[rows.index]
        n1, n0 = (a == "offered").sum(), (a == "held_out").sum()
        d1 = rows.loc[a == "offered", "churn"].sum()
        d0 = rows.loc[a == "held_out", "churn"].sum()
        assert n1 > 0 and n0 > 0 and d1 + d0 > 0
        lo, hi = stats.binom.interval(0.999, d1 + d0, hr * n1 / (hr * n1 + n0))
        assert lo <= d1 <= hi, (segment["name"], d1, d0, n1, n0)
        sizes[segment["name"]] = segment["eligible"]
    # The segments' sizes in truth.json add up to the campaign, and each is recomputed here.
    in_campaign = ratio[(f["month"].astype(str) == truth["campaign"]["month"]) & arm.notna()]
    for segment in truth["campaign"]["segments"]:
        assert (in_campaign == segment["hazard_ratio"]).sum() == segment["eligible"]
    assert sum(sizes.values()) == truth["campaign"]["eligible"]
    # Strong for some, none for most, harmful for a small segment (issue 15, item 2).
    by_name = {s["name"]: s for s in truth["campaign"]["segments"]}
    assert by_name["contract_end"]["hazard_ratio"] < 1 == by_name["others"]["hazard_ratio"]
    assert by_name["complained"]["hazard_ratio"] > 1
    assert by_name["complained"]["eligible"] < 0.25 * truth["campaign"]["eligible"]
    # Eligible customers were at the contract end: their churn hazard is raised meanwhile.
    assert len(camp) == truth["campaign"]["eligible"] > 100


def test_months_are_text_and_window_is_right(small):
    f = small.features
    assert f["month"].astype(str).min() == "2022-11"
    assert f["month"].astype(str).max() == "2026-10"
    assert format_month(parse_month(small.truth["first_simulated_month"]) + 12) == "2022-11"
    assert (f["tenure_start"] >= 0).all()
