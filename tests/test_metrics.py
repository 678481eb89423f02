"""Accuracy metrics against scikit-survival, scikit-learn, statsmodels and pandas."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from sklearn.metrics import brier_score_loss
from sksurv.datasets import load_bmt, load_gbsg2, load_whas500
from sksurv.exceptions import NoComparablePairException
from sksurv.linear_model import CoxPHSurvivalAnalysis
from sksurv.metrics import brier_score as sk_brier_score
from sksurv.metrics import concordance_index_ipcw, cumulative_dynamic_auc
from sksurv.nonparametric import CensoringDistributionEstimator
from sksurv.nonparametric import cumulative_incidence_competing_risks as sk_cif
from sksurv.preprocessing import OneHotEncoder
from sksurv.util import Surv
from statsmodels.stats.proportion import proportion_confint

from lifecycle.errors import UsageError
from lifecycle.evaluation import (
    CensoringCurve,
    brier_score,
    calibration_table,
    lift_and_capture,
    time_dependent_auc,
    uno_concordance,
)

FAST = settings(max_examples=60, deadline=None)


# -- data ------------------------------------------------------------------------------------
@st.composite
def follow_up(draw, tied_times: bool):
    """Random outcomes and risks; with ``tied_times`` the times are whole numbers 1..8 (many
    ties between events and censorings), else distinct floats. Risks are rounded to one place
    half of the time (ties in risk)."""
    n = draw(st.integers(4, 40))
    seed = draw(st.integers(0, 2**31 - 1))
    rng = np.random.default_rng(seed)
    if tied_times:
        time = rng.integers(1, 9, n).astype(float)
    else:
        time = rng.permutation(np.arange(1, n + 1)) + rng.uniform(0, 0.5, n)
    event = rng.random(n) < 0.6
    event[rng.integers(n)] = True
    risk = rng.normal(size=n)
    if draw(st.booleans()):
        risk = np.round(risk, 1)
    # Training outcomes for the censoring curve: the test outcomes plus one customer followed
    # past them all, so the curve covers every test time (sksurv needs that too).
    train_time = np.r_[time, time.max() + 1.0]
    train_event = np.r_[event, False]
    return time, event, risk, train_time, train_event


def _sk(time, event):
    return Surv.from_arrays(event=np.asarray(event, dtype=bool), time=np.asarray(time, float))


# -- the censoring curve ---------------------------------------------------------------------
@FAST
@given(data=follow_up(tied_times=True))
def test_censoring_curve_equals_sksurv(data):
    time, event, _, _, _ = data
    # reference: sksurv.nonparametric.CensoringDistributionEstimator (reverse Kaplan–Meier)
    reference = CensoringDistributionEstimator().fit(_sk(time, event))
    at = np.unique(np.r_[time, time - 0.5, 0.0])
    at = at[at <= time.max()]
    np.testing.assert_allclose(
        CensoringCurve.fit(time, event).at(at), reference.predict_proba(at), rtol=1e-12
    )


# -- Uno's concordance -----------------------------------------------------------------------
@FAST
@given(data=follow_up(tied_times=True), truncate=st.booleans())
def test_uno_concordance_equals_sksurv_with_tied_times(data, truncate):
    _check_concordance(*data, tau=5.0 if truncate else None)


@FAST
@given(data=follow_up(tied_times=False), truncate=st.booleans())
def test_uno_concordance_equals_sksurv_without_tied_times(data, truncate):
    time = data[0]
    _check_concordance(*data, tau=float(np.median(time)) if truncate else None)


def _check_concordance(time, event, risk, train_time, train_event, tau):
    ours = uno_concordance(
        time, event, risk, tau=tau, train_time=train_time, train_event=train_event
    )
    weighted = event & (time < tau) if tau is not None else event
    # reference: sksurv.metrics.concordance_index_ipcw (Uno et al. 2011)
    try:
        with np.errstate(all="ignore"):  # sksurv divides 0 by 0 when no pair has weight
            expected = concordance_index_ipcw(
                _sk(train_time, train_event), _sk(time, event), risk, tau=tau
            )[0]
    except (NoComparablePairException, ValueError):
        # sksurv refuses when no event before tau has a comparable pair; ours says NaN
        assert not weighted.any() or not np.any(time > time[weighted].min())
        expected = float("nan")
    assert ours == pytest.approx(expected, rel=1e-12, abs=1e-12, nan_ok=True)


def test_uno_concordance_on_whas500_equals_sksurv():
    """A real cohort (Worcester Heart Attack Study, bundled with scikit-survival): 500 patients,
    times in days with ties; risk = a Cox model's linear predictor; truncated at 5 years."""
    x, y = load_whas500()
    x = OneHotEncoder().fit_transform(x.astype({c: float for c in x if x[c].dtype == bool}))
    risk = CoxPHSurvivalAnalysis(alpha=1e-3).fit(x, y).predict(x)
    time, event = y["lenfol"], y["fstat"]
    for tau in (None, 1825.0):
        expected = concordance_index_ipcw(y, y, risk, tau=tau)[0]
        # reference: sksurv.metrics.concordance_index_ipcw on the same inputs
        assert uno_concordance(time, event, risk, tau=tau) == pytest.approx(expected, rel=1e-12)


def test_uno_concordance_of_a_cause_treats_other_causes_as_censored():
    rng = np.random.default_rng(3)
    n = 400
    time = rng.integers(1, 13, n).astype(float)
    code = rng.choice([0, 1, 2], size=n, p=[0.3, 0.4, 0.3])
    risk = rng.normal(size=n) + 0.5 * (code == 2)
    ours = uno_concordance(time, code, risk, cause=2, tau=10.0)
    # reference: sksurv.metrics.concordance_index_ipcw with event = (code == 2)
    is_two = _sk(time, code == 2)
    assert ours == pytest.approx(concordance_index_ipcw(is_two, is_two, risk, tau=10.0)[0])


def test_uno_concordance_is_one_for_a_perfect_ranking_and_half_for_all_ties():
    time = np.arange(1.0, 21.0)
    event = np.ones(20, dtype=bool)
    # earlier event = higher risk: every comparable pair concordant (the definition)
    assert uno_concordance(time, event, -time) == pytest.approx(1.0)
    assert uno_concordance(time, event, np.zeros(20)) == pytest.approx(0.5)


def test_uno_concordance_refuses_bad_inputs():
    with pytest.raises(UsageError, match="NaN"):
        uno_concordance([1.0, 2.0], [1, 0], [np.nan, 1.0])
    with pytest.raises(UsageError, match="shape"):
        uno_concordance([1.0, 2.0, 3.0], [1, 0], [0.0, 1.0, 2.0])
    with pytest.raises(UsageError, match="past the last time"):
        uno_concordance([1.0, 5.0], [1, 1], [0.0, 1.0], train_time=[1.0, 2.0], train_event=[0, 1])


# -- time-dependent AUC ----------------------------------------------------------------------
@FAST
@given(data=follow_up(tied_times=True), per_time=st.booleans())
def test_time_dependent_auc_equals_sksurv(data, per_time):
    time, event, risk, train_time, train_event = data
    times = np.unique(np.clip([2.0, 4.0, 6.0], time.min(), None))
    times = times[times < time.max()]
    if times.size == 0:
        return
    cases = [np.any(event & (time <= t)) for t in times]
    controls = [np.any(time > t) for t in times]
    if not (all(cases) and all(controls)):
        return  # sksurv divides by zero there; ours gives NaN
    scores = np.column_stack([risk + 0.1 * k for k in range(times.size)]) if per_time else risk
    ours, ours_mean = time_dependent_auc(
        time, event, scores, times, train_time=train_time, train_event=train_event
    )
    # reference: sksurv.metrics.cumulative_dynamic_auc (Uno et al. 2007; Hung & Chiang 2010)
    expected, expected_mean = cumulative_dynamic_auc(
        _sk(train_time, train_event), _sk(time, event), scores, times
    )
    np.testing.assert_allclose(ours, expected, rtol=1e-12)
    assert ours_mean == pytest.approx(expected_mean, rel=1e-12)


def test_time_dependent_auc_on_gbsg2_equals_sksurv():
    """German Breast Cancer Study Group 2 (bundled with scikit-survival), risk = Cox predictor."""
    x, y = load_gbsg2()
    x["tgrade"] = x["tgrade"].map(len).astype(int)
    x = OneHotEncoder().fit_transform(x)
    risk = CoxPHSurvivalAnalysis(ties="efron").fit(x, y).predict(x)
    times = np.array([365.0, 730.0, 1095.0, 1825.0])
    ours, ours_mean = time_dependent_auc(y["time"], y["cens"], risk, times)
    # reference: sksurv.metrics.cumulative_dynamic_auc on the same inputs
    expected, expected_mean = cumulative_dynamic_auc(y, y, risk, times)
    np.testing.assert_allclose(ours, expected, rtol=1e-12)
    assert ours_mean == pytest.approx(expected_mean, rel=1e-12)


@pytest.mark.parametrize("cause", [1, 2])
def test_time_dependent_auc_with_competing_causes_equals_sksurv_at_10k_rows(cause):
    """The bench's input at 10,000 rows (three causes, per-month risks with ties): the events
    of the other causes censor, as sksurv.metrics.cumulative_dynamic_auc (the reference)
    computes it when given the cause's events as its event flag."""
    from lifecycle.bench._metrics import TIMES, auc_input

    months, event, risk = auc_input(10_000, seed=3)
    ours, ours_mean = time_dependent_auc(months, event, risk, TIMES, cause=cause)
    outcomes = _sk(months, event == cause)
    expected, expected_mean = cumulative_dynamic_auc(outcomes, outcomes, risk, TIMES)
    np.testing.assert_allclose(ours, expected, rtol=1e-12)
    assert ours_mean == pytest.approx(expected_mean, rel=1e-12)


def test_time_dependent_auc_refuses_times_outside_follow_up():
    with pytest.raises(UsageError, match="within the follow-up"):
        time_dependent_auc([1.0, 2.0, 3.0], [1, 0, 1], [0.1, 0.2, 0.3], [3.0])


# -- Brier score -----------------------------------------------------------------------------
def test_brier_score_reproduces_the_published_gbsg2_value():
    """scikit-survival's brier_score docstring: a Cox model (Efron ties) on GBSG2, predicted
    survival at 1825 days, Brier score 0.20881843 (sksurv.metrics.brier_score, Examples)."""
    x, y = load_gbsg2()
    x["tgrade"] = x["tgrade"].map(len).astype(int)
    x = OneHotEncoder().fit_transform(x)
    survival = np.array(
        [
            fn(1825)
            for fn in CoxPHSurvivalAnalysis(ties="efron").fit(x, y).predict_survival_function(x)
        ]
    )
    score = brier_score(y["time"], y["cens"], 1.0 - survival, [1825.0])
    assert score[0] == pytest.approx(0.20881843, abs=5e-9)


@FAST
@given(data=follow_up(tied_times=True))
def test_brier_score_with_one_cause_equals_sksurv(data):
    time, event, _, train_time, train_event = data
    times = np.unique(np.clip([2.0, 5.0], time.min(), None))
    times = times[times < time.max()]
    if times.size == 0:
        return
    survival = np.random.default_rng(int(time.sum() * 10)).uniform(size=(time.size, times.size))
    ours = brier_score(
        time, event, 1.0 - survival, times, train_time=train_time, train_event=train_event
    )
    # reference: sksurv.metrics.brier_score (Graf et al. 1999) on predicted survival = 1 − F
    _, expected = sk_brier_score(_sk(train_time, train_event), _sk(time, event), survival, times)
    np.testing.assert_allclose(ours, expected, rtol=1e-12)


def test_competing_risk_brier_without_censoring_is_the_plain_brier_score():
    rng = np.random.default_rng(11)
    n = 1000
    time = rng.integers(1, 20, n).astype(float)
    code = rng.choice([1, 2, 3], size=n)  # nobody censored: every weight is 1
    incidence = rng.uniform(size=n)
    ours = brier_score(time, code, incidence, [8.0], cause=2)[0]
    # reference: sklearn.metrics.brier_score_loss, the mean squared error of a probability
    expected = brier_score_loss((time <= 8) & (code == 2), incidence)
    assert ours == pytest.approx(expected, rel=1e-12)


def test_competing_risk_brier_under_censoring_recovers_the_uncensored_value():
    """Known truth: with censoring independent of everything, the IPCW score estimates the
    score the uncensored outcomes would give (Graf et al. 1999). Simulated competing risks
    with two causes; the predictions are the true cumulative incidences of cause 1."""
    rng = np.random.default_rng(5)
    n = 40_000
    x = rng.normal(size=n)
    rate1, rate2 = 0.05 * np.exp(0.7 * x), 0.03 * np.ones(n)
    total = rate1 + rate2
    latent = rng.exponential(1.0 / total)
    cause = np.where(rng.random(n) < rate1 / total, 1, 2)
    t = 6.0
    truth = rate1 / total * (1.0 - np.exp(-total * t))  # F_1(t) of each customer
    full = brier_score(latent, cause, truth, [t])[0]
    censor = rng.uniform(0, 20, n)
    seen = np.minimum(latent, censor)
    code = np.where(latent <= censor, cause, 0)
    weighted = brier_score(seen, code, truth, [t])[0]
    assert weighted == pytest.approx(full, rel=0.03)
    # and the true incidence beats a constant prediction at the overall rate
    flat = np.full(n, np.mean((latent <= t) & (cause == 1)))
    assert weighted < brier_score(seen, code, flat, [t])[0]


# -- calibration, lift, capture --------------------------------------------------------------
def _competing_sample(n, seed, censor=True):
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    h1, h2 = 0.04 * np.exp(0.8 * x), 0.02 * np.ones(n)
    months = np.full(n, 24, dtype=np.int64)
    code = np.zeros(n, dtype=np.int64)
    alive = np.ones(n, dtype=bool)
    for m in range(1, 25):
        u = rng.random(n)
        one = alive & (u < h1)
        two = alive & ~one & (u < h1 + h2)
        months[one | two], code[one], code[two] = m, 1, 2
        alive &= ~(one | two)
    if censor:
        last = rng.integers(0, 25, n)
        cut = alive | (last < months)
        cut &= last < months
        months = np.where(cut, last, months)
        code = np.where(cut, 0, code)
    predicted = 1.0 - np.exp(-12 * h1)  # a risk score increasing in x
    return months, code, predicted


def test_calibration_observed_equals_sksurv_aalen_johansen_in_every_decile():
    months, code, predicted = _competing_sample(2000, seed=1)
    table = calibration_table(months, code, predicted, 12)
    assert table["n"].tolist() == [200.0] * 10
    decile = pd.qcut(pd.Series(predicted).rank(method="first"), 10, labels=False).to_numpy()
    for g in range(10):
        mine = decile == g
        # reference: sksurv.nonparametric.cumulative_incidence_competing_risks (Aalen–Johansen)
        times, incidence = sk_cif(code[mine], months[mine].astype(float))
        expected = incidence[1][np.searchsorted(times, 12.0, side="right") - 1]
        assert table["observed"].iloc[g] == pytest.approx(expected, rel=1e-10, abs=1e-12)
        assert table["mean_predicted"].iloc[g] == pytest.approx(predicted[mine].mean())


def test_calibration_on_the_bone_marrow_data_equals_sksurv():
    """Bone-marrow transplant data (Scrucca, Santucci & Aversa 2007, bundled with scikit-survival):
    relapse (1) against transplant-related death (2); one group, read at 12 and 24 months. The
    times are whole months from 0, so they are shifted by one to start at month 1."""
    _, y = load_bmt()
    months = y["ftime"].astype(np.int64) + 1
    code = y["status"].astype(np.int64)
    times, incidence = sk_cif(code, months.astype(float))
    for h in (12, 24):
        ours = calibration_table(months, code, np.zeros(code.size), h, groups=1)
        expected = incidence[1][np.searchsorted(times, h, side="right") - 1]
        # reference: sksurv.nonparametric.cumulative_incidence_competing_risks
        assert ours["observed"].iloc[0] == pytest.approx(expected, rel=1e-10)


def test_calibration_interval_without_censoring_is_wilson():
    months, code, predicted = _competing_sample(1000, seed=2, censor=False)
    table = calibration_table(months, code, predicted, 12, level=0.9)
    decile = pd.qcut(pd.Series(predicted).rank(method="first"), 10, labels=False).to_numpy()
    for g in range(10):
        hits = int(np.sum((decile == g) & (code == 1) & (months <= 12)))
        # reference: statsmodels proportion_confint, Wilson score interval (Wilson 1927)
        lower, upper = proportion_confint(hits, 100, alpha=0.1, method="wilson")
        assert table["observed"].iloc[g] == pytest.approx(hits / 100)
        assert (table["lower"].iloc[g], table["upper"].iloc[g]) == pytest.approx((lower, upper))


def test_lift_and_capture_without_censoring_match_counts_by_decile():
    months, code, predicted = _competing_sample(3000, seed=4, censor=False)
    hit = (code == 1) & (months <= 6)
    frame = pd.DataFrame({"hit": hit, "decile": pd.qcut(predicted, 10, labels=False)})
    # reference: pandas qcut deciles and plain counting
    top = frame[frame["decile"] == 9]
    lift, capture = lift_and_capture(months, code, predicted, 6)
    assert lift == pytest.approx(top["hit"].mean() / frame["hit"].mean())
    assert capture == pytest.approx(top["hit"].sum() / frame["hit"].sum())
    assert lift > 1.5  # the score carries the true covariate effect


def test_tied_predictions_are_shared_between_deciles():
    months, code, _ = _competing_sample(1000, seed=6)
    flat = calibration_table(months, code, np.full(1000, 0.1), 12)
    overall = calibration_table(months, code, np.full(1000, 0.1), 12, groups=1)
    # all tied: every decile is a tenth of everyone, with the overall incidence
    np.testing.assert_allclose(flat["n"], 100.0)
    np.testing.assert_allclose(flat["observed"], overall["observed"].iloc[0], rtol=1e-12)


@settings(max_examples=30, deadline=None)
@given(seed=st.integers(0, 10_000), n=st.integers(3, 60), groups=st.integers(1, 10))
def test_calibration_ignores_the_order_of_the_rows(seed, n, groups):
    rng = np.random.default_rng(seed)
    months = rng.integers(0, 8, n)
    code = np.where(rng.random(n) < 0.5, rng.integers(1, 3, n), 0)
    predicted = rng.integers(0, 4, n) / 4.0  # many ties
    a = calibration_table(months, code, predicted, 5, groups=groups)
    p = rng.permutation(n)
    b = calibration_table(months[p], code[p], predicted[p], 5, groups=groups)
    pd.testing.assert_frame_equal(a, b, rtol=1e-9)
    assert a["n"].sum() == pytest.approx(n)
