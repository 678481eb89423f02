"""The cause-specific Cox family: published values, reference libraries and known truth."""

from __future__ import annotations

import json
import logging
import pickle
import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from lifelines import CoxPHFitter, CoxTimeVaryingFitter
from lifelines.datasets import load_rossi, load_stanford_heart_transplants
from lifelines.statistics import proportional_hazard_test
from sklearn.base import clone
from statsmodels.duration.hazard_regression import PHReg

from lifecycle._months import month_categorical, parse_month
from lifecycle.config import load_config
from lifecycle.data import load_tables
from lifecycle.demo import write_demo
from lifecycle.errors import InputError, UsageError
from lifecycle.models import CauseSpecificCox
from lifecycle.models._design import CovariateDesign
from lifecycle.panel import build_panel
from lifecycle.spatial import add_spatial_context

log = logging.getLogger(__name__)

Z95 = 1.959963984540054  # scipy.stats.norm.ppf(0.975)
TERMINAL = ("churn", "move_out", "other_exit")


def _panel_frame(ids, start, stop, events: dict, features: pd.DataFrame) -> pd.DataFrame:
    """A panel-shaped frame: ids, tenure, the cause columns, then the features."""
    n = len(ids)
    frame = pd.DataFrame(
        {
            "customer_id": np.asarray(ids),
            "month": month_categorical(np.full(n, parse_month("2026-01"))),
            "tenure_start": np.asarray(start),
            "tenure_stop": np.asarray(stop),
        }
    )
    for cause in TERMINAL:
        frame[cause] = np.asarray(events.get(cause, np.zeros(n))).astype(np.int8)
    for cause, flags in events.items():
        if cause not in TERMINAL:
            frame[cause] = np.asarray(flags).astype(np.int8)
    for column in features.columns:
        frame[column] = features[column].to_numpy()
    return frame


# -- Rossi recidivism data (bundled with lifelines) ----------------------------------------------
ROSSI_FEATURES = ["fin", "age", "race", "wexp", "mar", "paro", "prio"]
# Fox & Weisberg, "Cox Proportional-Hazards Regression for Survival Data in R", appendix to
# "An R Companion to Applied Regression": coxph(Surv(week, arrest) ~ fin + age + race + wexp +
# mar + paro + prio, data = Rossi), Efron ties. Coefficients as printed (value, decimals).
ROSSI_COEF = {
    "fin": (-0.379, 3),
    "age": (-0.0574, 4),
    "race": (0.314, 3),
    "wexp": (-0.150, 3),
    "mar": (-0.434, 3),
    "paro": (-0.0849, 4),
    "prio": (0.0915, 4),
}
# Their standard errors, same table, as R prints them (four decimals): from memory (the table
# could not be re-checked against the text).
ROSSI_SE = {
    "fin": (0.1914, 4),
    "age": (0.0220, 4),
    "race": (0.3080, 4),
    "wexp": (0.2122, 4),
    "mar": (0.3819, 4),
    "paro": (0.1958, 4),
    "prio": (0.0286, 4),
}


@pytest.fixture(scope="module")
def rossi():
    data = load_rossi()
    panel = _panel_frame(
        np.arange(len(data)),
        np.zeros(len(data), dtype=np.int16),
        data["week"].to_numpy(np.int16),
        {"churn": data["arrest"]},
        data[ROSSI_FEATURES],
    )
    return data, CauseSpecificCox().fit(panel)


def test_rossi_reproduces_published_coefficients(rossi):
    _, model = rossi
    table = model.coefficients_.set_index("feature")
    assert set(model.coefficients_["cause"]) == {"churn"}  # no move_out / other_exit events
    for feature, (value, decimals) in ROSSI_COEF.items():
        assert abs(table.loc[feature, "coef"] - value) <= 0.5 * 10**-decimals + 1e-12, feature
    for feature, (value, decimals) in ROSSI_SE.items():
        assert abs(table.loc[feature, "se"] - value) <= 0.5 * 10**-decimals + 1e-12, feature
    # z and p against lifelines' own summary of CoxPHFitter on the same Rossi data
    # (lifelines.datasets.load_rossi; two-sided Wald test)
    data, _ = rossi
    cph = CoxPHFitter().fit(data[["week", "arrest", *ROSSI_FEATURES]], "week", "arrest")
    summary = cph.summary
    np.testing.assert_allclose(table.loc[ROSSI_FEATURES, "z"], summary["z"], rtol=1e-4)
    np.testing.assert_allclose(table.loc[ROSSI_FEATURES, "p"], summary["p"], rtol=1e-3)
    assert table.loc["fin", "p"] < 0.05 < table.loc["race", "p"]  # a test that can fail
    row = table.loc["fin"]
    np.testing.assert_allclose(row["hazard_ratio"], np.exp(row["coef"]))
    np.testing.assert_allclose(
        [row["lower_95"], row["upper_95"]],
        np.exp(row["coef"] + np.array([-1, 1]) * Z95 * row["se"]),
    )


def _midrank(durations, events, weights):
    """Rank of each time among the event times, ties sharing their mean rank (a time
    transform in lifelines' calling convention)."""
    t = np.asarray(durations, dtype=np.float64)
    event_times = np.sort(t[np.asarray(events).astype(bool)])
    below = np.searchsorted(event_times, t, side="left")
    upto = np.searchsorted(event_times, t, side="right")
    return pd.Series(below + (upto - below + 1) / 2.0, index=getattr(durations, "index", None))


def test_rossi_proportional_hazards_tests_match_lifelines(rossi):
    data, model = rossi
    # Reference: lifelines' proportional_hazard_test (scaled Schoenfeld residuals, Grambsch &
    # Therneau 1994) on CoxPHFitter fitted to the same one-row-per-subject data, with the same
    # time transform (our rank transform, mean ranks for ties).
    cph = CoxPHFitter().fit(data[["week", "arrest", *ROSSI_FEATURES]], "week", "arrest")
    with warnings.catch_warnings():  # lifelines changes the global warning filters here
        result = proportional_hazard_test(cph, data, time_transform=_midrank)
    reference = result.summary
    ours = model.ph_tests_.set_index("feature")
    np.testing.assert_allclose(
        ours.loc[ROSSI_FEATURES, "statistic"],
        reference.loc[ROSSI_FEATURES, "test_statistic"],
        rtol=1e-4,
    )
    np.testing.assert_allclose(
        ours.loc[ROSSI_FEATURES, "p_value"], reference.loc[ROSSI_FEATURES, "p"], rtol=1e-3
    )
    # age breaks proportionality clearly in these data (Fox & Weisberg's appendix shows the
    # same with cox.zph; that it is age and wexp is from memory)
    assert ours.loc["age", "p_value"] < 0.01


def test_rossi_ph_test_identity_transform_matches_lifelines(rossi):
    from lifecycle.models._cox_stats import RiskSets, ph_test

    data, _ = rossi
    # Reference: lifelines' proportional_hazard_test against the time itself, on CoxPHFitter;
    # our statistic is computed from the same β̂ and covariance, so they agree to rounding.
    cph = CoxPHFitter().fit(data[["week", "arrest", *ROSSI_FEATURES]], "week", "arrest")
    with warnings.catch_warnings():
        reference = proportional_hazard_test(cph, data, time_transform="identity").summary
    x = data[ROSSI_FEATURES].to_numpy(np.float64)
    stop = data["week"].to_numpy(np.float64)
    event = data["arrest"].to_numpy().astype(bool)
    beta = cph.params_[ROSSI_FEATURES].to_numpy()
    cov = cph.variance_matrix_.loc[ROSSI_FEATURES, ROSSI_FEATURES].to_numpy()
    risk = RiskSets(np.zeros_like(stop), stop, np.unique(stop[event]))
    statistic, _ = ph_test(risk, x, stop, event, np.exp(x @ beta), cov, time_transform="identity")
    np.testing.assert_allclose(
        statistic, reference.loc[ROSSI_FEATURES, "test_statistic"], rtol=1e-8
    )


# -- Stanford heart transplant data (bundled with lifelines): start-stop, time-varying ----------
STANFORD_FEATURES = ["age", "year", "surgery", "transplant"]


@pytest.fixture(scope="module")
def stanford():
    data = load_stanford_heart_transplants()
    panel = _panel_frame(
        data["id"], data["start"], data["stop"], {"churn": data["event"]}, data[STANFORD_FEATURES]
    )
    # the reference is Breslow's raw baseline: the tenure smoothing is off here
    return data, panel, CauseSpecificCox(baseline_min_events=0).fit(panel)


def test_stanford_time_varying_matches_statsmodels_phreg(stanford):
    data, _, model = stanford
    # Reference: statsmodels PHReg with entry times and Efron ties (its default is Breslow).
    # PHReg counts a start-stop row as at risk at its own entry time, lifelines (and we) do
    # not: the entries are moved a millionth of a day later so that both use (start, stop].
    fit = PHReg(
        data["stop"].to_numpy(),
        data[STANFORD_FEATURES].to_numpy(np.float64),
        status=data["event"].to_numpy(),
        entry=data["start"].to_numpy() + 1e-6,
        ties="efron",
    ).fit()
    ours = model.coefficients_.set_index("feature").loc[STANFORD_FEATURES]
    np.testing.assert_allclose(ours["coef"], fit.params, rtol=1e-5, atol=1e-7)
    np.testing.assert_allclose(ours["se"], fit.bse, rtol=1e-5)


def test_stanford_baseline_and_hazard_agree_with_lifelines_centring(stanford):
    data, panel, model = stanford
    # Reference: lifelines' own CoxTimeVaryingFitter; its baseline cumulative hazard is at the
    # training mean of the covariates (partial hazard exp((x − mean)·β)).
    ctv = CoxTimeVaryingFitter().fit(
        data.drop(columns="id"), event_col="event", start_col="start", stop_col="stop"
    )
    cumulative = ctv.baseline_cumulative_hazard_.iloc[:, 0]

    def lifelines_h(t: float) -> float:
        return (
            float(cumulative[cumulative.index <= t].iloc[-1])
            if (cumulative.index <= t).any()
            else 0.0
        )

    rows = panel.iloc[[0, 5, 40]].copy()
    rows["tenure_start"] = [1, 4, 15]  # days 2, 5 and 16 hold deaths
    rows["tenure_stop"] = rows["tenure_start"] + 1
    predicted = model.predict_hazard(rows, horizon=1)["churn"].to_numpy()
    partial = ctv.predict_partial_hazard(rows[STANFORD_FEATURES]).to_numpy()
    jumps = np.array([lifelines_h(a + 1) - lifelines_h(a) for a in rows["tenure_start"]])
    expected = 1.0 - np.exp(-jumps * partial)
    np.testing.assert_allclose(predicted, expected, rtol=1e-6)
    assert np.all(expected > 0)


# -- a known-truth simulation ---------------------------------------------------------------------
TRUE_BETA = {
    "churn": {"score": 0.5, "flag": -0.4, "usage": 0.3, "plan=fast": -0.3, "plan=mid": 0.2,
              "holds_addon": -0.5},
    "move_out": {"score": -0.3, "flag": 0.6},
    "other_exit": {},
    "uptake_addon": {"score": 0.4, "usage": -0.3},
}  # fmt: skip


def _true_baseline(cause: str, tenure: np.ndarray) -> np.ndarray:
    """Monthly baseline cumulative hazard of the simulation, by tenure month."""
    if cause == "churn":
        return 0.01 + 0.02 * np.exp(-tenure / 12.0)
    return np.full(tenure.shape, {"move_out": 0.006, "other_exit": 0.002}.get(cause, 0.01))


def simulate_panel(n: int = 3000, months: int = 24, seed: int = 1) -> pd.DataFrame:
    """Customers entering the window at tenure 0..35, followed for ``months`` months.

    In month t a customer with covariates x has cause-specific cumulative hazards
    ``Λ_k = λ0_k(tenure) exp(β_k·x)`` (constant within the month); it leaves with probability
    ``1 − exp(−Σ_terminal Λ_k)``, by cause k with probability ``Λ_k / ΣΛ``, and (while not
    holding the add-on) takes the add-on up with probability ``1 − exp(−Λ_uptake)``.
    ``usage`` changes every month (AR(1)); ``holds_addon`` turns 1 the month after an uptake.
    """
    rng = np.random.default_rng(seed)
    entry = rng.integers(0, 36, n)
    score = rng.normal(size=n)
    flag = (rng.random(n) < 0.4).astype(float)
    plan = rng.choice(["basic", "fast", "mid"], size=n, p=[0.5, 0.3, 0.2])
    usage = rng.normal(size=n)
    alive, holds = np.ones(n, dtype=bool), np.zeros(n)
    first, parts = parse_month("2024-01"), []
    for m in range(months):
        idx = np.flatnonzero(alive)
        tenure = entry[idx] + m
        x = {
            "score": score[idx],
            "flag": flag[idx],
            "usage": usage[idx],
            "holds_addon": holds[idx],
            "plan=fast": (plan[idx] == "fast").astype(float),
            "plan=mid": (plan[idx] == "mid").astype(float),
        }
        lam = {
            c: _true_baseline(c, tenure) * np.exp(sum(v * x[k] for k, v in b.items()))
            for c, b in TRUE_BETA.items()
        }
        total = lam["churn"] + lam["move_out"] + lam["other_exit"]
        leave = rng.random(idx.size) < -np.expm1(-total)
        u = rng.random(idx.size) * total
        cause = np.where(u < lam["churn"], 0, np.where(u < lam["churn"] + lam["move_out"], 1, 2))
        up = (holds[idx] == 0) & (rng.random(idx.size) < -np.expm1(-lam["uptake_addon"]))
        parts.append(
            pd.DataFrame(
                {
                    "customer_id": idx,
                    "month": first + m,
                    "tenure_start": tenure.astype(np.int16),
                    "tenure_stop": (tenure + 1).astype(np.int16),
                    "churn": (leave & (cause == 0)).astype(np.int8),
                    "move_out": (leave & (cause == 1)).astype(np.int8),
                    "other_exit": (leave & (cause == 2)).astype(np.int8),
                    "uptake_addon": up.astype(np.int8),
                    "holds_addon": holds[idx].astype(np.int8),
                    "score": score[idx].astype(np.float32),
                    "flag": flag[idx].astype(np.float32),
                    "usage": usage[idx].astype(np.float32),
                    "plan": pd.Categorical(plan[idx], categories=["basic", "fast", "mid"]),
                }
            )
        )
        alive[idx[leave]] = False
        holds[idx[up]] = 1
        usage = 0.7 * usage + np.sqrt(1 - 0.7**2) * rng.normal(size=n)
    panel = pd.concat(parts, ignore_index=True)
    panel = panel.sort_values(["customer_id", "month"], kind="stable").reset_index(drop=True)
    panel["month"] = month_categorical(panel["month"].to_numpy())
    return panel


@pytest.fixture(scope="module")
def simulated():
    panel = simulate_panel()
    return panel, CauseSpecificCox().fit(panel)


def test_known_truth_coefficients_are_recovered(simulated):
    _, model = simulated
    table = model.coefficients_
    truth = np.array(
        [TRUE_BETA[c].get(f, 0.0) for c, f in zip(table["cause"], table["feature"], strict=True)]
    )
    z = (table["coef"].to_numpy() - truth) / table["se"].to_numpy()
    # every coefficient (true effects and true zeros) within 3 SE: a 99.7 % band each
    assert np.all(np.abs(z) < 3), table.assign(truth=truth, z=z)
    # and the 95 % intervals cover at least 80 % of them (their nominal rate is 95 %)
    assert np.mean(np.abs(z) < Z95) >= 0.8
    # the add-on holders are not at risk of taking it up: holds_addon is no uptake covariate
    uptake = table[table["cause"] == "uptake_addon"]
    assert "holds_addon" not in set(uptake["feature"])
    assert "holds_addon" in set(table.loc[table["cause"] == "churn", "feature"])


def test_known_truth_baseline_through_predictions(simulated):
    panel, model = simulated
    # A customer with every covariate at 0 (plan basic) has the true baseline hazard itself.
    snapshot = panel.iloc[[0]].copy()
    snapshot[["score", "flag", "usage"]] = 0.0
    snapshot["holds_addon"] = 0
    snapshot["plan"] = pd.Categorical(["basic"], categories=["basic", "fast", "mid"])
    snapshot["tenure_start"], snapshot["tenure_stop"] = 0, 1
    hazard = model.predict_hazard(snapshot.drop(columns=list(model.causes_)), horizon=48)
    tenure = np.arange(48)
    for cause in ("churn", "move_out", "uptake_addon"):
        fitted = -np.log1p(-hazard[cause].to_numpy()).sum()
        true = _true_baseline(cause, tenure).sum()
        assert abs(fitted / true - 1) < 0.15, (cause, fitted, true)


def test_weighted_sample_agrees_with_full_fit(simulated):
    panel, full = simulated
    sampled = CauseSpecificCox(sample_fraction=0.25, random_state=0).fit(panel)
    a = full.coefficients_.set_index(["cause", "feature"])
    b = sampled.coefficients_.set_index(["cause", "feature"])
    assert a.index.equals(b.index)
    assert np.all(np.abs(b["coef"] - a["coef"]) < a["se"])
    # the weighted Breslow baseline estimates the full one (an unweighted risk-set sum would
    # come out about 1 / 0.25 = 4 times too high)
    for cause in ("churn", "move_out", "uptake_addon"):
        ratio = sampled.baseline_hazard_[cause].sum() / full.baseline_hazard_[cause].sum()
        assert abs(ratio - 1) < 0.05, (cause, ratio)
    # fewer rows were used: all events and about a quarter of the others
    fit = sampled.cause_fits_["churn"]
    assert fit.n_events == full.cause_fits_["churn"].n_events
    assert 0.2 < fit.n_rows / full.cause_fits_["churn"].n_rows < 0.32


def test_sampling_is_deterministic_given_random_state(simulated):
    panel, _ = simulated
    small = panel[panel["customer_id"] < 1000]
    one = CauseSpecificCox(sample_fraction=0.3, random_state=5).fit(small).coefficients_
    two = CauseSpecificCox(sample_fraction=0.3, random_state=5).fit(small).coefficients_
    other = CauseSpecificCox(sample_fraction=0.3, random_state=6).fit(small).coefficients_
    pd.testing.assert_frame_equal(one, two)
    assert not np.allclose(one["coef"], other["coef"])


def test_tail_beyond_last_tenure_holds_the_trailing_rate(simulated):
    panel, model = simulated
    snapshot = panel.drop(columns=list(model.causes_)).iloc[[3]].copy()
    last = int(model.baseline_hazard_["churn"].last_valid_index())
    hazards = {}
    for start in (10, last + 5):
        snapshot["tenure_start"], snapshot["tenure_stop"] = start, start + 1
        hazards[start] = model.predict_hazard(snapshot, horizon=3)["churn"].to_numpy()
    # −log(1 − h) = ΔH0(t)·exp(η): the same exp(η) at every tenure
    risk = -np.log1p(-hazards[10][0]) / model.baseline_hazard_.loc[10, "churn"]
    tail = -np.log1p(-hazards[last + 5]) / risk
    # the tail is Σ d / Σ E over the trailing months (at least 12, with at least
    # baseline_min_events events): an exposure-weighted mean of the raw monthly increments
    raw = CauseSpecificCox(baseline_min_events=0).fit(panel).baseline_hazard_["churn"]
    window = raw.loc[last - 11 : last]
    assert np.all(tail >= window.min() - 1e-12) and np.all(tail <= window.max() + 1e-12)
    np.testing.assert_allclose(tail, model.cause_fits_["churn"].tail, rtol=1e-9)
    assert tail[0] == pytest.approx(window.mean(), rel=0.25)


def test_unidentified_covariates_are_left_out(simulated):
    panel, _ = simulated
    panel = panel[panel["customer_id"] < 1500].copy()
    rng = np.random.default_rng(3)
    # a column missing exactly in a customer's first month: its missing indicator is a
    # function of tenure alone (constant within every risk set), so it is left out
    panel["noise"] = rng.normal(size=len(panel))
    panel.loc[panel["tenure_start"] == 0, "noise"] = np.nan
    # a linear combination of other columns (not an exact copy, so the design keeps it)
    panel["score_and_flag"] = 2.0 * panel["score"] - panel["flag"] + 1.0
    model = CauseSpecificCox().fit(panel)
    assert (panel["tenure_start"] == 0).sum() > 0
    for cause in ("churn", "move_out", "uptake_addon"):
        features = set(model.coefficients_.loc[model.coefficients_["cause"] == cause, "feature"])
        assert "noise" in features and "score" in features and "flag" in features, cause
        assert "noise_missing" not in features and "score_and_flag" not in features, cause


def test_separation_is_logged_not_raised(caplog):
    # every other_exit event has flag 0: the flag coefficient runs off towards −∞. lifelines
    # warns; the family logs those warnings with the cause and column named (warnings are
    # errors in this test suite, so a re-emitted warning would fail the fit)
    panel = simulate_panel(n=1500)
    panel.loc[panel["other_exit"] == 1, "flag"] = 0.0
    with caplog.at_level("WARNING", logger="lifecycle.models._cox"):
        model = CauseSpecificCox().fit(panel)
    messages = [r.getMessage() for r in caplog.records]
    assert any("other_exit" in m and "flag" in m and "variance" in m for m in messages)
    row = model.coefficients_.set_index(["cause", "feature"]).loc[("other_exit", "flag")]
    assert row["coef"] < -5 and row["upper_95"] > 1  # reported, with an honest interval


def test_extreme_covariates_still_give_probabilities(simulated):
    panel, model = simulated
    snapshot = panel.drop(columns=list(model.causes_)).iloc[:4].copy()
    snapshot["score"] = 1000.0  # churn and other_exit hazards both near 1 in every month
    survival = model.predict_survival(snapshot, 3).to_numpy()
    incidence = model.predict_cumulative_incidence(snapshot, 3)
    terminal = incidence[list(TERMINAL)].to_numpy().reshape(4, 3, 3)
    np.testing.assert_allclose(survival + terminal.sum(axis=-1), 1.0, atol=1e-12)
    assert np.all(survival < 1e-6)


# -- predictions: survival and incidence through the shared function ----------------------------
@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(
    rows=st.lists(
        st.tuples(
            st.floats(-3, 3),
            st.sampled_from([0.0, 1.0]),
            st.floats(-3, 3),
            st.sampled_from(["basic", "fast", "mid"]),
            st.sampled_from([0, 1]),
            st.integers(0, 120),
        ),
        min_size=1,
        max_size=5,
    ),
    horizon=st.integers(1, 30),
)
def test_predicted_survival_and_incidence_add_up(simulated, rows, horizon):
    _, model = simulated
    score, flag, usage, plan, holds, tenure = map(list, zip(*rows, strict=True))
    n = len(rows)
    snapshot = pd.DataFrame(
        {
            "customer_id": np.arange(n),
            "month": month_categorical(np.full(n, parse_month("2026-03"))),
            "tenure_start": np.array(tenure, dtype=np.int16),
            "tenure_stop": np.array(tenure, dtype=np.int16) + 1,
            "holds_addon": np.array(holds, dtype=np.int8),
            "score": np.array(score, dtype=np.float32),
            "flag": np.array(flag, dtype=np.float32),
            "usage": np.array(usage, dtype=np.float32),
            "plan": pd.Categorical(plan, categories=["basic", "fast", "mid"]),
        }
    )
    survival = model.predict_survival(snapshot, horizon).to_numpy()
    incidence = model.predict_cumulative_incidence(snapshot, horizon)
    terminal = incidence[list(TERMINAL)].to_numpy().reshape(n, horizon, 3)
    np.testing.assert_allclose(survival + terminal.sum(axis=-1), 1.0, atol=1e-12)
    assert np.all(np.diff(survival, axis=1) <= 1e-15)
    assert np.all(np.diff(terminal, axis=1) >= -1e-15)
    uptake = incidence["uptake_addon"].to_numpy().reshape(n, horizon)
    assert np.all((uptake >= 0) & (uptake <= 1)) and np.all(np.diff(uptake, axis=1) >= -1e-15)
    assert np.all(uptake[np.array(holds) == 1] == 0)


# -- the estimator contract -----------------------------------------------------------------------
def test_clone_round_trip_and_fit_keeps_hyperparameters(simulated):
    panel, _ = simulated
    model = CauseSpecificCox(penalizer=0.1, sample_fraction=0.5, random_state=3)
    params = model.get_params()
    copy = clone(model)
    assert copy.get_params() == params and copy is not model
    model.fit(panel[panel["customer_id"] < 500])
    assert model.get_params() == params
    refreshed = clone(model)
    assert refreshed.get_params() == params and not hasattr(refreshed, "coefficients_")


def test_unfitted_predict_raises_usage_error(simulated):
    panel, _ = simulated
    with pytest.raises(UsageError, match="not fitted"):
        CauseSpecificCox().predict_survival(panel.iloc[:2], 3)


@pytest.mark.parametrize(
    "params",
    [
        {"penalizer": -1.0},
        {"sample_fraction": 0.0},
        {"sample_fraction": 1.5},
        {"random_state": "x"},
    ],
)
def test_bad_hyperparameters_raise_usage_error_at_fit(simulated, params):
    panel, _ = simulated
    model = CauseSpecificCox(**params)  # the constructor only stores
    with pytest.raises(UsageError, match="expected"):
        model.fit(panel.iloc[:100])


def test_bad_panel_values_raise_input_error(simulated):
    panel, _ = simulated
    bad = panel.iloc[:300].copy()
    bad.loc[bad.index[:3], "churn"] = 2
    with pytest.raises(InputError, match="churn") as info:
        CauseSpecificCox().fit(bad)
    assert info.value.count == 3
    bad = panel.iloc[:300].copy()
    bad.loc[bad.index[:2], "tenure_stop"] = bad["tenure_start"].iloc[:2]
    with pytest.raises(InputError, match="tenure_stop"):
        CauseSpecificCox().fit(bad)


def test_fitted_model_keeps_no_training_rows(simulated):
    panel, big = simulated
    small = CauseSpecificCox().fit(panel[panel["customer_id"] < 1500])
    size_big, size_small = len(pickle.dumps(big)), len(pickle.dumps(small))
    # the pickle is a few kB and does not grow with the number of training rows
    assert size_big < 40_000
    assert abs(size_big - size_small) < 2_000
    assert len(panel) * 8 > 10 * size_big


# -- the shared covariate design ------------------------------------------------------------------
def test_design_against_pandas_reference():
    frame = pd.DataFrame(
        {
            "a": [1.0, np.nan, 3.0, 4.0, np.nan],
            "b": pd.Categorical(["x", "y", "z", "y", "x"], categories=["w", "x", "y", "z"]),
            "c": [5.0, 5.0, 5.0, 5.0, 5.0],
            "d": ["p", None, "q", "p", "q"],
        }
    )
    design = CovariateDesign().fit(frame, ["a", "b", "c", "d"])
    x = design.transform(frame)
    # Reference: pandas' median and get_dummies(drop_first=True) over the observed levels.
    median = frame["a"].median()
    dummies_b = pd.get_dummies(frame["b"].cat.remove_unused_categories(), drop_first=True)
    dummies_d = pd.get_dummies(frame["d"], drop_first=True)
    expected = pd.DataFrame(
        {
            "a": frame["a"].fillna(median),
            "a_missing": frame["a"].isna().astype(float),
            "b=y": dummies_b["y"].astype(float),
            "b=z": dummies_b["z"].astype(float),
            "d=q": dummies_d["q"].astype(float),
            "d_missing": frame["d"].isna().astype(float),
        }
    )
    assert design.names_ == tuple(expected.columns)  # c is constant: dropped
    np.testing.assert_array_equal(x, expected.to_numpy())
    # unseen level → reference level; NaN where training had none → median, no indicator
    new = pd.DataFrame(
        {
            "a": [2.0],
            "b": pd.Categorical(["w"], categories=["w", "x", "y", "z"]),
            "c": [np.nan],
            "d": ["r"],
        }
    )
    np.testing.assert_array_equal(design.transform(new), [[2.0, 0.0, 0.0, 0.0, 0.0, 0.0]])


def test_design_drops_duplicate_missing_indicators():
    frame = pd.DataFrame({"a": [1.0, np.nan, 2.0, 3.0], "b": [0.0, np.nan, 1.0, 1.0]})
    design = CovariateDesign().fit(frame, ["a", "b"])
    assert design.names_ == ("a", "a_missing", "b")  # b_missing equals a_missing


def test_design_rejects_columns_neither_numeric_nor_categorical():
    frame = pd.DataFrame({"when": pd.to_datetime(["2026-01-01", "2026-02-01"])})
    with pytest.raises(InputError, match="when"):
        CovariateDesign().fit(frame, ["when"])


# -- the demo scenario: coverage of the true effects ----------------------------------------------
def test_demo_true_effects_are_mostly_covered(tmp_path):
    # the demo as a user gets it: written, read and checked, panelled, spatial context added.
    # Known truth: truth.json's beta (a column not listed has no effect). Not in the panel: the
    # campaign's effect on churn (offered customers, six months), so a few churn estimates may
    # carry its imprint.
    files = write_demo(tmp_path / "demo", customers=4000, seed=7)
    truth = json.loads(files["truth"].read_text(encoding="utf-8"))
    config = load_config(files["config"])
    tables = load_tables(tmp_path / "demo", config)
    panel = build_panel(tables, truth["as_of"], config=config)
    panel = add_spatial_context(panel, tables, config=config)
    model = CauseSpecificCox().fit(panel)
    table = model.coefficients_
    beta = truth["beta"]  # true log hazard ratios, keyed by cause and panel column
    true = np.array(
        [beta[c].get(f, 0.0) for c, f in zip(table["cause"], table["feature"], strict=True)]
    )
    low = table["coef"].to_numpy() - Z95 * table["se"].to_numpy()
    high = table["coef"].to_numpy() + Z95 * table["se"].to_numpy()
    covered = (low <= true) & (true <= high)
    effect = true != 0
    fitted_keys = set(zip(table["cause"], table["feature"], strict=True))
    assert all((c, f) in fitted_keys for c in beta for f in beta[c])  # every true effect fitted
    log.info(
        "demo: 95 %% intervals cover %d of %d true effects and %d of %d true zeros",
        covered[effect].sum(),
        effect.sum(),
        covered[~effect].sum(),
        (~effect).sum(),
    )
    assert covered[effect].sum() > effect.sum() / 2
    assert covered[~effect].sum() > (~effect).sum() / 2
