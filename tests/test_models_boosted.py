"""The boosted discrete-time family: known-truth recovery, calibration, sampling, contract.

The known truth is a discrete-time competing-risks process simulated here
(`simulate_known_truth`), with continuous-time rates piecewise constant within a month:
for the rates ``λ_k`` of the terminal causes the monthly hazard is
``h_k = (1 − exp(−Σ_j λ_j)) · λ_k / Σ_j λ_j`` and the uptake hazard ``1 − exp(−λ_u)``.
"""

from __future__ import annotations

import pickle

import numpy as np
import pandas as pd
import pytest
from scipy import stats
from sklearn.base import clone

from lifecycle._months import categorical_to_index, month_categorical, parse_month
from lifecycle.errors import InputError, UsageError
from lifecycle.models import (
    BoostedHazard,
    future_rows,
    landmark_snapshots,
    observed_incidence,
    survival_and_incidence,
)

AS_OF = parse_month("2026-10")
CUTOFF = AS_OF - 12
PLANS = ["basic", "plus", "max"]
TERMINAL = ["churn", "move_out", "other_exit"]
CRITICAL = 0.999  # chi-square tests below reject only at the 0.1 % level


# -- the known-truth process ----------------------------------------------------------------------
def true_rates(tenure, season_cos, x_bin, x_cont, plan_max):
    """Monthly rates λ of churn, move_out, other_exit and the uptake of ``extra``."""
    churn = (0.010 + 0.015 * np.exp(-tenure / 6.0)) * np.exp(
        0.7 * x_bin + 0.4 * x_cont + 0.2 * season_cos
    )
    move_out = 0.006 * np.exp(-0.5 * x_bin + 0.5 * plan_max)
    other = np.full(np.shape(churn), 0.001)
    uptake = 0.012 * np.exp(0.6 * x_cont)
    return churn, move_out, other, uptake


def true_hazards(tenure, season_cos, x_bin, x_cont, plan_max) -> np.ndarray:
    """Monthly hazards ``(..., 4)``: churn, move_out, other_exit, uptake_extra."""
    churn, move_out, other, uptake = true_rates(tenure, season_cos, x_bin, x_cont, plan_max)
    total = churn + move_out + other
    leave = 1.0 - np.exp(-total)
    return np.stack(
        [
            leave * churn / total,
            leave * move_out / total,
            leave * other / total,
            1 - np.exp(-uptake),
        ],
        axis=-1,
    )


def true_hazards_of(frame: pd.DataFrame) -> np.ndarray:
    return true_hazards(
        frame["tenure_start"].to_numpy(dtype=float),
        frame["season_cos"].to_numpy(dtype=float),
        frame["x_bin"].to_numpy(dtype=float),
        frame["x_cont"].to_numpy(dtype=float),
        (frame["plan"] == "max").to_numpy(),
    )


def true_incidence(snapshot: pd.DataFrame, horizon: int) -> np.ndarray:
    """True cumulative incidence ``(n, horizon, 3)`` of the terminal causes after a snapshot."""
    future = future_rows(snapshot, horizon)
    hazards = true_hazards_of(future).reshape(len(snapshot), horizon, 4)
    return survival_and_incidence(hazards[..., :3])[1]


def simulate_known_truth(
    customers: int, months: int = 36, seed: int = 1
) -> tuple[pd.DataFrame, pd.DataFrame]:
    """A panel (layout of DEVELOPERS.md) from the known process, and each row's true hazards.

    Customers start at random in the 36 months before the window and during it (so that many
    enter the window late), with a static binary ``x_bin``, continuous ``x_cont``, a plan
    (categorical; ``max`` raises moving out) and ``usage`` (no effect; missing in a customer's
    first month). Season acts on churn through ``season_cos``.
    """
    rng = np.random.default_rng(seed)
    first = AS_OF - months + 1
    start = rng.integers(first - 36, AS_OF - 2, customers)
    x_bin = (rng.random(customers) < 0.4).astype(float)
    x_cont = rng.normal(size=customers)
    plan = rng.choice(3, customers, p=[0.5, 0.3, 0.2])
    usage_level = rng.gamma(2.0, 5.0, customers)
    active = np.ones(customers, dtype=bool)
    holds = np.zeros(customers, dtype=bool)
    parts = []
    for month in range(int(start.min()), AS_OF + 1):
        who = np.flatnonzero(active & (start <= month))
        tenure = month - start[who]
        angle = 2.0 * np.pi * (month % 12) / 12.0
        h = true_hazards(tenure, np.cos(angle), x_bin[who], x_cont[who], plan[who] == 2)
        draw = rng.random(who.size)
        bounds = np.cumsum(h[:, :3], axis=1)
        cause = (draw[:, None] >= bounds).sum(axis=1) + 1
        cause[draw >= bounds[:, -1]] = 0
        uptake = ~holds[who] & (rng.random(who.size) < h[:, 3])
        if month >= first:
            usage = usage_level[who] * rng.gamma(4.0, 0.25, who.size)
            usage[tenure == 0] = np.nan
            part = {
                "customer_id": who,
                "month": np.full(who.size, month),
                "tenure_start": tenure,
                "churn": cause == 1,
                "move_out": cause == 2,
                "other_exit": cause == 3,
                "uptake_extra": uptake,
                "holds_extra": holds[who],
                "season_sin": np.full(who.size, np.sin(angle)),
                "season_cos": np.full(who.size, np.cos(angle)),
                "x_bin": x_bin[who],
                "x_cont": x_cont[who],
                "plan": plan[who],
                "usage": usage,
            }
            part.update({f"true_{c}": h[:, j] for j, c in enumerate([*TERMINAL, "uptake_extra"])})
            parts.append(pd.DataFrame(part))
        holds[who[uptake]] = True
        active[who[cause > 0]] = False
    rows = pd.concat(parts).sort_values(["customer_id", "month"], kind="stable")
    rows = rows.reset_index(drop=True)
    panel = pd.DataFrame(
        {
            "customer_id": rows["customer_id"].to_numpy(),
            "month": month_categorical(rows["month"].to_numpy()),
            "tenure_start": rows["tenure_start"].to_numpy().astype(np.int16),
            "tenure_stop": (rows["tenure_start"].to_numpy() + 1).astype(np.int16),
        }
    )
    for cause in [*TERMINAL, "uptake_extra"]:
        panel[cause] = rows[cause].to_numpy().astype(np.int8)
    panel["holds_extra"] = rows["holds_extra"].to_numpy().astype(np.int8)
    for name in ["season_sin", "season_cos", "x_bin", "x_cont"]:
        panel[name] = rows[name].to_numpy().astype(np.float32)
    panel["plan"] = pd.Categorical.from_codes(rows["plan"].to_numpy(), PLANS)
    panel["usage"] = rows["usage"].to_numpy().astype(np.float32)
    truth = rows[[c for c in rows if c.startswith("true_")]].copy()
    truth.columns = [c.removeprefix("true_") for c in truth.columns]
    truth.loc[panel["holds_extra"].to_numpy() == 1, "uptake_extra"] = np.nan
    return panel, truth.reset_index(drop=True)


def split_at(panel: pd.DataFrame, cutoff: int):
    """Rows up to ``cutoff`` (the panel as of then), the snapshot of month ``cutoff + 1``, and
    the mask of the former."""
    month = categorical_to_index(panel["month"])
    train = panel[month <= cutoff].reset_index(drop=True)
    snapshot = panel[month == cutoff + 1].reset_index(drop=True)
    return train, snapshot, month <= cutoff


def decile_calibration(predicted: np.ndarray, followup: pd.DataFrame, cause: str, horizon: int):
    """Per risk decile: mean predicted and observed (Aalen–Johansen) incidence, and z-scores.

    With complete follow-up to the horizon (as here) the observed incidence is a proportion,
    whose binomial standard error under the predicted value is ``sqrt(p (1 − p) / n)``.
    """
    decile = pd.qcut(predicted, 10, labels=False)
    rows = []
    for d in range(10):
        inside = decile == d
        p = predicted[inside].mean()
        observed = observed_incidence(followup[inside], horizon)[cause].iloc[-1]
        rows.append((p, observed, (observed - p) / np.sqrt(p * (1 - p) / inside.sum())))
    return pd.DataFrame(rows, columns=["predicted", "observed", "z"])


# -- fixtures --------------------------------------------------------------------------------------
@pytest.fixture(scope="module")
def known():
    panel, truth = simulate_known_truth(8000, seed=1)
    train, snapshot, before = split_at(panel, CUTOFF)
    model = BoostedHazard(n_threads=1).fit(train)
    truth = truth[before].reset_index(drop=True)
    hazards = model.predict_hazard(train, horizon=1)
    return dict(
        panel=panel, truth=truth, train=train, snapshot=snapshot, model=model, hazards=hazards
    )


def group_errors(
    hazards: pd.DataFrame, rows: pd.DataFrame, truth: pd.DataFrame, cause: str
) -> pd.DataFrame:
    """Mean fitted (``hazards``: `predict_hazard` of ``rows``, horizon 1) and true hazard by
    x_bin × (x_cont quartile or plan) × tenure band."""
    predicted = hazards[cause].to_numpy()
    at_risk = truth[cause].notna().to_numpy()
    second = (
        rows["plan"].cat.codes
        if cause == "move_out"
        else pd.qcut(rows["x_cont"], 4, labels=False).to_numpy()
    )
    frame = pd.DataFrame(
        {
            "x_bin": rows["x_bin"].to_numpy(),
            "second": np.asarray(second),
            "tenure": pd.cut(rows["tenure_start"], [-1, 5, 17, 10_000], labels=False),
            "predicted": predicted,
            "true": truth[cause].to_numpy(),
        }
    )[at_risk]
    groups = frame.groupby(["x_bin", "second", "tenure"])
    out = groups.agg(predicted=("predicted", "mean"), true=("true", "mean"), n=("true", "size"))
    # the standard error of a nonparametric estimate of the group's hazard (binomial)
    out["se"] = np.sqrt(out["true"] * (1 - out["true"]) / out["n"])
    return out


# -- known truth -----------------------------------------------------------------------------------
@pytest.mark.parametrize("cause", ["churn", "move_out", "uptake_extra"])
def test_recovers_the_true_monthly_hazards(known, cause):
    """Known truth: in every covariate × tenure group the fitted hazard is as close to the true
    one as a nonparametric estimate from the group's own rows would be: Σ z² over the groups,
    z = (fitted − true) / binomial SE, stays below the 99.9 % point of χ² with one degree of
    freedom per group (scipy.stats.chi2 as the reference distribution)."""
    train, truth = known["train"], known["truth"]
    errors = group_errors(known["hazards"], train, truth, cause)
    z = (errors["predicted"] - errors["true"]) / errors["se"]
    assert len(errors) >= 18
    assert (z**2).sum() < stats.chi2.ppf(CRITICAL, len(errors)), errors.assign(z=z)
    # and the effects are there: the highest group is far above the lowest (known truth)
    assert errors["predicted"].max() > 2 * errors["predicted"].min()


def test_plain_person_month_mode_recovers_the_true_hazards(known):
    """With ``horizon=None`` (each row's own features, no lag) the churn hazards are recovered
    as well, by the same χ² criterion."""
    train, truth = known["train"], known["truth"]
    model = BoostedHazard(horizon=None, n_threads=1).fit(train)
    assert "month_ahead" not in model.inputs_
    errors = group_errors(model.predict_hazard(train, horizon=1), train, truth, "churn")
    z = (errors["predicted"] - errors["true"]) / errors["se"]
    assert (z**2).sum() < stats.chi2.ppf(CRITICAL, len(errors)), errors.assign(z=z)


@pytest.mark.parametrize("cause", ["churn", "move_out"])
def test_twelve_month_incidence_calibrated_within_deciles(known, cause):
    """Out of time: fitted on months up to the cutoff, the predicted 12-month cumulative
    incidence of the customers active after it agrees with the observed incidence
    (Aalen–Johansen, `observed_incidence`) in every risk decile: Σ z² < χ²(10) at 99.9 %
    (the decile-of-risk test, Hosmer & Lemeshow, Applied Logistic Regression, 2nd ed. 2000,
    §5.2.2, out-of-sample form with g degrees of freedom — from memory)."""
    snapshot = known["snapshot"]
    followup = landmark_snapshots(known["panel"], horizon=12, months=[CUTOFF + 1])
    assert followup["customer_id"].tolist() == snapshot["customer_id"].tolist()
    cif = known["model"].predict_cumulative_incidence(snapshot, 12)
    predicted = cif.xs(12, level="month_ahead")[cause].to_numpy()
    table = decile_calibration(predicted, followup, cause, 12)
    assert (table["z"] ** 2).sum() < stats.chi2.ppf(CRITICAL, 10), table
    # the predictions also agree with the true incidence of each customer (known truth)
    truth = true_incidence(snapshot, 12)[:, -1, TERMINAL.index(cause)]
    assert abs(predicted.mean() - truth.mean()) < 0.1 * truth.mean()


def test_sample_fraction_agrees_with_the_full_fit(known):
    """All event rows plus a weighted fifth of the rest give the full fit's hazards within
    sampling error in every group (Σ z² < χ² at 99.9 %, z = difference / binomial SE), and the
    sum of fitted hazards matches the events (calibration in the large, 3 Poisson SEs); without
    the 1/f weights the hazards would be about 5 times too large."""
    train, truth = known["train"], known["truth"]
    sampled = BoostedHazard(n_threads=1, sample_fraction=0.2).fit(train)
    assert sampled.n_rows_["terminal"] < 0.35 * known["model"].n_rows_["terminal"]
    hazards = sampled.predict_hazard(train, horizon=1)
    for cause in ["churn", "move_out", "uptake_extra"]:
        full = group_errors(known["hazards"], train, truth, cause)
        part = group_errors(hazards, train, truth, cause)
        z = (part["predicted"] - full["predicted"]) / full["se"]
        assert (z**2).sum() < stats.chi2.ppf(CRITICAL, len(z)), cause
        at_risk = truth[cause].notna().to_numpy()
        events = train[cause].to_numpy()[at_risk].sum()
        fitted = hazards[cause].to_numpy()[at_risk].sum()
        assert abs(fitted - events) < 3 * np.sqrt(events), cause


def test_survival_plus_incidence_is_one(known):
    """S(t) + Σ_k F_k(t) = 1 at every month; S falls and every F rises (DESIGN.md, Models)."""
    model, snapshot = known["model"], known["snapshot"].iloc[:300]
    survival = model.predict_survival(snapshot, 24)
    incidence = model.predict_cumulative_incidence(snapshot, 24)
    total = survival.to_numpy() + incidence[TERMINAL].sum(axis=1).to_numpy().reshape(-1, 24)
    np.testing.assert_allclose(total, 1.0, atol=1e-12)
    assert (np.diff(survival.to_numpy(), axis=1) <= 1e-15).all()
    steps = incidence.to_numpy().reshape(len(snapshot), 24, -1)
    assert (np.diff(steps, axis=1) >= -1e-15).all()
    hazards = model.predict_hazard(snapshot, 24)
    holders = snapshot["holds_extra"].to_numpy() == 1
    assert holders.any()
    by_customer = hazards["uptake_extra"].to_numpy().reshape(len(snapshot), 24)
    assert (by_customer[holders] == 0).all() and (by_customer[~holders] > 0).all()


# -- the estimator contract ------------------------------------------------------------------------
@pytest.fixture(scope="module")
def small():
    panel, _ = simulate_known_truth(1000, months=24, seed=5)
    return panel


def test_clone_round_trip_and_determinism(small):
    """scikit-learn's clone keeps the hyperparameters and none of the learned state
    (sklearn.base.clone); the same random_state gives the same hazards."""
    model = BoostedHazard(max_iter=30, sample_fraction=0.5, random_state=3, n_threads=1)
    fitted = clone(model).fit(small)
    copy = clone(fitted)
    assert copy.get_params() == model.get_params()
    assert not hasattr(copy, "terminal_model_")
    assert fitted.get_params() == model.get_params()  # fit changed no hyperparameter
    snapshot = small.iloc[:50]
    first = fitted.predict_hazard(snapshot, 6)
    again = copy.fit(small).predict_hazard(snapshot, 6)
    pd.testing.assert_frame_equal(first, again)


def test_fitted_model_keeps_no_training_data(small):
    """A model fitted on four times the rows pickles to about the same size (a copy of the
    data would make it four times larger)."""
    bigger = pd.concat(
        [small.assign(customer_id=small["customer_id"] + k * 100_000) for k in range(4)],
        ignore_index=True,
    )
    settings = dict(max_iter=10, early_stopping=False, n_threads=1)
    one = len(pickle.dumps(BoostedHazard(**settings).fit(small)))
    four = len(pickle.dumps(BoostedHazard(**settings).fit(bigger)))
    assert four < 1.3 * one
    assert one < small.memory_usage(deep=True).sum()


def test_a_cause_without_events_has_hazard_zero(small):
    panel = small.assign(other_exit=np.int8(0))
    model = BoostedHazard(max_iter=10, n_threads=1).fit(panel)
    hazards = model.predict_hazard(panel.iloc[:20], 3)
    assert (hazards["other_exit"] == 0).all() and (hazards["churn"] > 0).all()


def test_bad_input_is_named(small):
    text = small.assign(plan=small["plan"].astype(str))
    with pytest.raises(InputError, match=r"'plan'.*neither numeric nor categorical"):
        BoostedHazard().fit(text)
    infinite = small.assign(usage=small["usage"].where(small.index != 7, np.inf))
    with pytest.raises(InputError, match=r"'usage'.*infinite"):
        BoostedHazard().fit(infinite)
    both = small.copy()
    both.loc[both.index[:2], ["churn", "move_out"]] = 1
    with pytest.raises(InputError, match="more than one terminal cause"):
        BoostedHazard().fit(both)
    with pytest.raises(UsageError, match=r"sample_fraction was 1\.5"):
        BoostedHazard(sample_fraction=1.5).fit(small)
    with pytest.raises(UsageError, match="not fitted"):
        BoostedHazard().predict_hazard(small.iloc[:3], 3)


# -- the demo scenario -----------------------------------------------------------------------------
def demo_panel(customers: int, months: int, seed: int) -> pd.DataFrame:
    """The demo's simulated features in the panel layout (its spatial context included)."""
    from lifecycle.demo import simulate_demo

    features = simulate_demo(customers=customers, seed=seed, months=months).features
    drop = [c for c in features if c.startswith("hazard_")] + ["offer_loyalty_credit"]
    panel = features.drop(columns=drop)
    panel.insert(3, "tenure_stop", (panel["tenure_start"] + 1).astype(np.int16))
    return panel


@pytest.fixture(scope="module")
def demo():
    panel = demo_panel(4000, 36, seed=11)
    train, snapshot, _ = split_at(panel, CUTOFF)
    model = BoostedHazard(n_threads=1).fit(train)
    followup = landmark_snapshots(panel, horizon=12, months=[CUTOFF + 1])
    cif = model.predict_cumulative_incidence(snapshot, 12).xs(12, level="month_ahead")
    return dict(followup=followup, cif=cif)


@pytest.mark.parametrize("cause", ["churn", "move_out"])
def test_demo_twelve_month_incidence_calibrated_within_deciles(demo, cause):
    """Known truth on the demo scenario (lifecycle.demo): fitted up to 12 months before its
    end, the predicted 12-month incidence of the customers active then is calibrated within
    risk deciles against the observed Aalen–Johansen incidence (as above, χ²(10) at 99.9 %).
    The demo's risk moves from month to month (contract ends, bill shocks), which the
    snapshot-lag inputs (``horizon=12``) account for."""
    table = decile_calibration(demo["cif"][cause].to_numpy(), demo["followup"], cause, 12)
    assert (table["z"] ** 2).sum() < stats.chi2.ppf(CRITICAL, 10), table


def test_a_feature_missing_on_every_fitted_row_is_fitted_around(small):
    """scikit-learn's histogram binning raises on a column with no value at all (seen with
    scikit-learn 1.9: "window shape cannot be larger than input array shape"); the family fits
    around it, and predicts exactly as it does without that column (a constant is never split
    on)."""
    train, snapshot = small, small.iloc[:50]
    plain = BoostedHazard(max_iter=30, n_threads=1, random_state=0).fit(train)
    empty = train.assign(never_seen=np.float32(np.nan))
    model = BoostedHazard(max_iter=30, n_threads=1, random_state=0).fit(empty)
    ahead = snapshot.assign(never_seen=np.float32(3.0))
    np.testing.assert_array_equal(
        model.predict_hazard(ahead, horizon=3).to_numpy(),
        plain.predict_hazard(snapshot, horizon=3).to_numpy(),
    )
