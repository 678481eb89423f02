"""Landmark snapshots and the survival-forest family: follow-up, known truth, contract."""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.base import clone
from sklearn.compose import ColumnTransformer
from sklearn.impute import SimpleImputer
from sklearn.preprocessing import OneHotEncoder
from sksurv.metrics import concordance_index_censored
from sksurv.nonparametric import cumulative_incidence_competing_risks

from lifecycle._months import format_month, parse_month
from lifecycle.config import Config, PanelSettings
from lifecycle.errors import InputError, UsageError
from lifecycle.models import (
    SurvivalForest,
    landmark_months,
    landmark_snapshots,
    observed_incidence,
)
from lifecycle.models._design import CovariateDesign
from lifecycle.models._forest import GrownForest, _sample
from lifecycle.panel import build_panel
from tests._builders import make_tables
from tests.test_models_boosted import (
    CUTOFF,
    TERMINAL,
    simulate_known_truth,
    split_at,
    true_incidence,
)

AS_OF = parse_month("2026-10")
WINDOW = 12
REASONS = {"churn": "churn", "move_out": "move_out", "other": "other_exit"}


# -- landmark snapshots ----------------------------------------------------------------------------
@st.composite
def portfolios(draw):
    """Random customers: starts before and inside the window, exits, one product uptake."""
    customers, uptakes = [], []
    for i in range(draw(st.integers(1, 10))):
        start = draw(st.integers(AS_OF - 20, AS_OF))
        end = draw(st.one_of(st.none(), st.integers(start, AS_OF + 3)))
        row = dict(customer_id=i, start_month=format_month(start))
        if end is not None:
            row.update(end_month=format_month(end), end_reason=draw(st.sampled_from(list(REASONS))))
        customers.append(row)
        if draw(st.booleans()):
            last = AS_OF if end is None else min(end, AS_OF)
            if last >= start:
                month = draw(st.integers(start, last))
                uptakes.append(dict(customer_id=i, product="gadget", month=format_month(month)))
    return customers, uptakes


def _expected_rows(customers, uptakes, month: int, horizon: int) -> dict:
    """Follow-up of each customer active in ``month``, from the definitions alone."""
    uptake = {u["customer_id"]: parse_month(u["month"]) for u in uptakes}
    out = {}
    for row in customers:
        start = parse_month(row["start_month"])
        end = parse_month(row["end_month"]) if "end_month" in row else None
        first = max(start, AS_OF - WINDOW + 1)
        last = AS_OF if end is None or end > AS_OF else end
        if not first <= month <= last:
            continue
        time = min(last - month + 1, horizon)
        exited = end is not None and end <= AS_OF and end - month + 1 <= horizon
        flags = {c: int(exited and REASONS[row["end_reason"]] == c) for c in TERMINAL}
        u = uptake.get(row["customer_id"])
        if u is not None and u < month:  # holds the product already: not at risk
            up_time, up_event = 0, 0
        elif u is not None and u - month + 1 <= time:
            up_time, up_event = u - month + 1, 1
        else:
            up_time, up_event = time, 0
        out[row["customer_id"]] = (time, flags, up_time, up_event)
    return out


@settings(max_examples=40, deadline=None)
@given(portfolios(), st.integers(1, 8), st.integers(0, WINDOW - 1))
def test_landmark_follow_up_matches_the_definitions(portfolio, horizon, offset):
    """Property: times and flags of `landmark_snapshots` equal those worked out from the
    customers' start, end and uptake months directly (DEVELOPERS.md, the panel contract)."""
    customers, uptakes = portfolio
    tables = make_tables(customers, uptakes=uptakes, products=("gadget",))
    config = Config(panel=PanelSettings(window_months=WINDOW))
    panel = build_panel(tables, AS_OF, config=config)
    month = AS_OF - WINDOW + 1 + offset
    frame = landmark_snapshots(panel, horizon=horizon, months=[month])
    expected = _expected_rows(customers, uptakes, month, horizon)
    assert sorted(frame["customer_id"].tolist()) == sorted(expected)
    for _, row in frame.iterrows():
        time, flags, up_time, up_event = expected[row["customer_id"]]
        assert row["time"] == time
        assert {c: row[c] for c in TERMINAL} == flags
        assert (row["time_uptake_gadget"], row["uptake_gadget"]) == (up_time, up_event)
    # the same panel in another row order gives the same snapshots
    shuffled = panel.sample(frac=1.0, random_state=1).reset_index(drop=True)
    again = landmark_snapshots(shuffled, horizon=horizon, months=[month])
    key = ["customer_id"]
    pd.testing.assert_frame_equal(
        again.sort_values(key).reset_index(drop=True), frame.sort_values(key).reset_index(drop=True)
    )


def test_landmark_months_and_gaps():
    panel, _ = simulate_known_truth(300, months=24, seed=2)
    months = landmark_months(panel, every=5, max_landmarks=3)
    first = AS_OF - 23
    np.testing.assert_array_equal(months, [first + 10, first + 15, first + 20])
    sizes = panel.groupby("customer_id").size()
    rows = panel.index[panel["customer_id"] == sizes.index[(sizes >= 3).argmax()]]
    gap = panel.drop(index=rows[1])
    with pytest.raises(InputError, match="not consecutive"):
        landmark_snapshots(gap, horizon=3)
    with pytest.raises(UsageError, match="horizon was 0"):
        landmark_snapshots(panel, horizon=0)


def test_observed_incidence_agrees_with_scikit_survival():
    """The Aalen–Johansen incidence after a landmark, with follow-up censored at the panel's
    end for late landmarks, equals scikit-survival's nonparametric estimator
    (sksurv.nonparametric.cumulative_incidence_competing_risks) at every month."""
    panel, _ = simulate_known_truth(3000, months=36, seed=4)
    followup = landmark_snapshots(panel, horizon=24, months=[CUTOFF - 6, CUTOFF + 1])
    ours = observed_incidence(followup, 24)
    code = np.zeros(len(followup), dtype=int)
    for j, cause in enumerate(TERMINAL, start=1):
        code[followup[cause].to_numpy() == 1] = j
    assert (code == 0).any() and (followup["time"] < 24).any()
    times, reference = cumulative_incidence_competing_risks(code, followup["time"].to_numpy())
    at = np.searchsorted(times, np.arange(1, 25), side="right") - 1
    for j, cause in enumerate(TERMINAL, start=1):
        np.testing.assert_allclose(ours[cause].to_numpy(), reference[j][at], atol=1e-12)
    np.testing.assert_allclose(ours["survival"].to_numpy(), 1 - reference[0][at], atol=1e-12)


# -- the forest on a known truth -----------------------------------------------------------------
FAST = dict(
    n_estimators=30,
    max_rows=6_000,
    min_samples_leaf=50,
    importance_rows=1_500,
    importance_repeats=2,
    n_jobs=1,
)


@pytest.fixture(scope="module")
def known():
    panel, _ = simulate_known_truth(8000, seed=1)
    train, snapshot, _ = split_at(panel, CUTOFF)
    forest = SurvivalForest(horizon=12, **FAST).fit(train)
    followup = landmark_snapshots(panel, horizon=12, months=[CUTOFF + 1])
    cif = forest.predict_cumulative_incidence(snapshot, 12)
    return dict(train=train, snapshot=snapshot, forest=forest, followup=followup, cif=cif)


@pytest.mark.parametrize("cause", ["churn", "move_out"])
def test_forest_ranks_customers_nearly_as_well_as_the_true_risk(known, cause):
    """Known truth: Harrell's concordance of the forest's 12-month incidence with what
    happened is close to that of the true 12-month incidence (both by
    sksurv.metrics.concordance_index_censored). Tolerance: three bootstrap standard
    deviations of the paired difference (customers resampled, seeded) plus 0.01 for the
    estimation loss of a model fitted on about a thousand events."""
    followup = known["followup"]
    event = followup[cause].to_numpy() == 1
    time = followup["time"].to_numpy().astype(float)
    fitted = known["cif"].xs(12, level="month_ahead")[cause].to_numpy()
    truth = true_incidence(known["snapshot"], 12)[:, -1, TERMINAL.index(cause)]
    c_fitted = concordance_index_censored(event, time, fitted)[0]
    c_true = concordance_index_censored(event, time, truth)[0]
    rng = np.random.default_rng(0)
    differences = []
    for _ in range(50):
        i = rng.integers(0, event.size, event.size)
        differences.append(
            concordance_index_censored(event[i], time[i], fitted[i])[0]
            - concordance_index_censored(event[i], time[i], truth[i])[0]
        )
    assert c_true > 0.55
    assert c_fitted > c_true - (3 * np.std(differences) + 0.01), (c_fitted, c_true)


@pytest.mark.parametrize("cause", ["churn", "move_out"])
def test_forest_incidence_is_calibrated_in_the_large(known, cause):
    """The mean predicted 12-month incidence of the customers active after the cutoff equals
    the observed Aalen–Johansen incidence within three binomial standard errors, though each
    forest was grown on a weighted sample of its landmark rows (without the weights the
    incidence would be several times too large)."""
    forest = known["forest"]
    assert forest.n_rows_[cause] == FAST["max_rows"]
    predicted = known["cif"].xs(12, level="month_ahead")[cause].mean()
    observed = observed_incidence(known["followup"], 12)[cause].iloc[-1]
    n = len(known["followup"])
    assert abs(predicted - observed) < 3 * np.sqrt(observed * (1 - observed) / n)


def test_forest_survival_plus_incidence_is_one(known):
    """S(t) + Σ_k F_k(t) = 1 at every month; S falls and every F rises (DESIGN.md, Models)."""
    forest, snapshot = known["forest"], known["snapshot"].iloc[:300]
    survival = forest.predict_survival(snapshot, 12).to_numpy()
    incidence = forest.predict_cumulative_incidence(snapshot, 12)
    steps = incidence.to_numpy().reshape(len(snapshot), 12, -1)
    total = survival + incidence[TERMINAL].sum(axis=1).to_numpy().reshape(-1, 12)
    np.testing.assert_allclose(total, 1.0, atol=1e-12)
    assert (np.diff(survival, axis=1) <= 1e-15).all()
    assert (np.diff(steps, axis=1) >= -1e-15).all()
    holders = snapshot["holds_extra"].to_numpy() == 1
    assert holders.any() and (steps[holders, :, -1] == 0).all()
    with pytest.raises(UsageError, match="horizon was 13"):
        forest.predict_hazard(snapshot, 13)


def test_permutation_importances_find_the_true_drivers(known):
    """Known truth: churn depends on x_bin and x_cont, moving out on x_bin and plan, the
    uptake on x_cont alone; these lead the held-out permutation importances (moving out has
    fewest held-out events, so only its top two are checked)."""
    table = known["forest"].feature_importances_
    assert list(table.columns) == ["cause", "feature", "importance", "importance_sd"]
    top = {c: t["feature"].tolist() for c, t in table.groupby("cause", sort=False)}
    assert set(top["churn"][:2]) == {"x_bin", "x_cont"}
    assert "x_bin" in top["move_out"][:2]
    assert top["uptake_extra"][0] == "x_cont"


# -- the estimator contract ----------------------------------------------------------------------
@pytest.fixture(scope="module")
def small():
    panel, _ = simulate_known_truth(1000, months=24, seed=5)
    return panel


TINY = dict(horizon=6, n_estimators=5, max_rows=1_500, min_samples_leaf=20, n_jobs=1)


def test_clone_round_trip_and_determinism(small):
    """scikit-learn's clone keeps the hyperparameters and none of the learned state
    (sklearn.base.clone); the same random_state gives the same hazards and importances."""
    model = SurvivalForest(importance_rows=300, random_state=4, **TINY)
    fitted = clone(model).fit(small)
    copy = clone(fitted)
    assert copy.get_params() == model.get_params()
    assert not hasattr(copy, "forests_")
    assert fitted.get_params() == model.get_params()
    snapshot = small.iloc[:40]
    pd.testing.assert_frame_equal(
        fitted.predict_hazard(snapshot, 6), copy.fit(small).predict_hazard(snapshot, 6)
    )
    pd.testing.assert_frame_equal(fitted.feature_importances_, copy.feature_importances_)


def test_fitted_forest_keeps_no_training_data(small):
    """Four times the customers, the same row cap: the pickle stays about the same size; the
    model keeps the trees, not scikit-survival's forest object (which holds a weight per
    training row for out-of-bag scoring)."""
    bigger = pd.concat(
        [small.assign(customer_id=small["customer_id"] + k * 100_000) for k in range(4)],
        ignore_index=True,
    )
    one = SurvivalForest(importance_rows=0, **TINY).fit(small)
    four = SurvivalForest(importance_rows=0, **TINY).fit(bigger)
    assert all(isinstance(f, GrownForest) for f in four.forests_.values())
    assert all(not hasattr(f, "oob_score_") for f in four.forests_.values())
    assert len(pickle.dumps(four)) < 1.5 * len(pickle.dumps(one))


def test_stratified_sample_keeps_events_and_weights_up():
    """All events are kept when they fit in half the cap; the weights of each stratum add up
    to its size (the Horvitz–Thompson weights of sampling without replacement)."""
    rng = np.random.default_rng(0)
    event = rng.random(10_000) < 0.05
    pick, weight = _sample(event, 2_000, np.random.default_rng(1))
    assert pick.size == 2_000 and np.unique(pick).size == 2_000
    assert event[pick].sum() == event.sum()
    np.testing.assert_allclose(weight[event[pick]].sum(), event.sum())
    np.testing.assert_allclose(weight[~event[pick]].sum(), (~event).sum())
    many = rng.random(10_000) < 0.6
    pick, weight = _sample(many, 2_000, np.random.default_rng(1))
    assert many[pick].sum() == 1_000
    np.testing.assert_allclose(weight.sum(), 10_000)


def test_encoder_matches_scikit_learn(small):
    """Median imputation with missing indicators and one-hot coding agree with scikit-learn's
    SimpleImputer(strategy="median", add_indicator=True) and
    OneHotEncoder(handle_unknown="ignore"), unseen levels coding as all zeros."""
    train, test = small.iloc[:3000], small.iloc[3000:3200].copy()
    test["plan"] = test["plan"].cat.add_categories(["new"])
    test.loc[test.index[:5], "plan"] = "new"
    test.loc[test.index[5:9], "x_cont"] = np.nan  # gaps unseen in training: imputed, no flag
    names = ("usage", "x_cont", "plan")
    ours = CovariateDesign(
        reference_level=False, max_levels=30, drop_uninformative=False, dtype=np.float32
    ).fit(train, names)
    assert ours.names_[:3] == ("usage", "usage_missing", "x_cont")  # one suffix for every family
    ours = ours.transform(test)
    reference = ColumnTransformer(
        [
            ("usage", SimpleImputer(strategy="median", add_indicator=True), ["usage"]),
            ("x_cont", SimpleImputer(strategy="median"), ["x_cont"]),
            ("plan", OneHotEncoder(handle_unknown="ignore", sparse_output=False), ["plan"]),
        ]
    ).fit(train)
    expected = reference.transform(test)
    # our levels are ordered by frequency, scikit-learn's alphabetically
    levels = train["plan"].astype(object).value_counts().index.tolist()
    order = [0, 1, 2] + [3 + sorted(levels).index(level) for level in levels]
    np.testing.assert_allclose(ours, expected[:, order], rtol=1e-6)
    assert (ours[:5, 3:] == 0).all()


def test_grown_forest_predicts_as_the_library_forest():
    """The kept trees average to scikit-survival's own forest predictions, to the bit
    (reference: sksurv.ensemble.RandomSurvivalForest.predict_cumulative_hazard_function and
    .predict on the same fitted forest)."""
    from sksurv.ensemble import RandomSurvivalForest
    from sksurv.util import Surv

    rng = np.random.default_rng(3)
    x = rng.normal(size=(400, 3)).astype(np.float32)
    time = rng.integers(1, 12, 400).astype(float)
    event = rng.random(400) < 0.4
    forest = RandomSurvivalForest(n_estimators=6, min_samples_leaf=15, random_state=0, n_jobs=1)
    forest.fit(x, Surv.from_arrays(event, time), sample_weight=rng.random(400) + 0.5)
    grown = GrownForest(forest)
    np.testing.assert_array_equal(
        grown.predict_cumulative_hazard_function(x[:60]),
        forest.predict_cumulative_hazard_function(x[:60], return_array=True),
    )
    np.testing.assert_array_equal(grown.predict(x[:60]), forest.predict(x[:60]))
    np.testing.assert_array_equal(grown.unique_times_, forest.unique_times_)
