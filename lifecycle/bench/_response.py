"""``lifecycle bench response``: who an offer moves, learnt from the demo's campaign, against
the demo's truth.

The demo (`lifecycle.demo.write_demo`, seeded) is written once into a temporary folder; then one
fresh process (`_harness.measure`) reads it and, for the past campaign's offer (month m):

1. follows the campaign's customers up (`campaign_follow_up`) and takes their features of the
   offer month (`campaign_covariates`, the demo config's ``[evaluation] effect_features``);
2. fits our per-customer effects (`customer_offer_effects`: a cause-specific Cox model with
   arm × feature interactions shrunk toward the average; the time in the table is this fit);
3. fits the Cox family on the panel up to m and predicts each campaign customer's monthly
   hazards for months m+1..m+36 without the offer; a customer's predicted effect is the change
   in its 12-month churn incidence when its churn hazard is multiplied by its own ratio in the
   offer's months (the competing-risk arithmetic of `survival_and_incidence`), and its expected
   value from its own effect is the change in discounted margin over 36 months minus the cost;
4. computes each customer's TRUE effect by forward simulation (`true_offer_effect`);
5. measures: the rank (Spearman) correlation of predicted and true effects (goal ≥ 0.5); the
   mean predicted effect of the truly harmful segment (goal > 0); two selections of the same
   number of contacts (same budget), the top by expected value from own effects against the
   top churn risk (and a random one), each valued with the TRUE effects: churns avoided in 12
   months, and value = Σ (−true effect) × the customer's predicted 36-month lifetime value −
   cost (goal: by effect beats top risk);
6. compares, cross-fitted on the same campaign (5 folds stratified by arm and event), our
   ranking with a T-learner from scikit-uplift (``TwoModels``, ``method="vanilla"``: one
   gradient-boosted classifier of churn within the offer's window per arm, effect = the
   difference of their probabilities): both rank correlations with the truth and both Qini
   coefficients (response = no churn in the window).

The times in the table are the fits on the folds, ours and the T-learner's (same folds, one
thread each); the selection row's is the selection's. Peak memory is that of the one process
all rows come from.
"""

from __future__ import annotations

import json
import logging
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ._harness import Measurement, measure

log = logging.getLogger(__name__)

SUITE = "response"
DEMO_SEED = 7
VALUE_MONTHS = 36
EFFECT_HORIZON = 12
RHO_GOAL = 0.5
BUDGET_SHARE = 0.2  # contacts: this share of the campaign customers, for both selections


def run_response_bench(
    customers: int, *, paths: int = 20, folder: str | Path | None = None
) -> list[Measurement]:
    """The suite at ``customers`` demo customers (``folder``: a demo already written there)."""
    from ._models import write_demo_folder

    _require_uplift_library()
    with tempfile.TemporaryDirectory(prefix="lifecycle-bench-response-") as tmp:
        if folder is None:
            folder = write_demo_folder(Path(tmp) / "demo", customers, seed=DEMO_SEED)
        result_file = Path(tmp) / "response.json"
        size = f"{customers:,} customers"
        ours = measure(
            SUITE, "offer effects, ours (Cox, arm × features)", size, _measured,
            folder=str(folder), customers=customers, paths=paths, result_file=str(result_file),
        )  # fmt: skip
        figures = json.loads(result_file.read_text(encoding="utf-8"))
    return [ours, *_more_rows(figures, size, ours.peak_mb)]


def _require_uplift_library() -> None:
    """The comparison needs scikit-uplift, an optional extra (``bench``), not a run-time need."""
    from importlib.util import find_spec

    from ..errors import UsageError

    if find_spec("sklift") is None:
        raise UsageError(
            "`lifecycle bench response` compares with scikit-uplift's T-learner, which is not "
            "installed: pip install 'lifecycle-hazards[bench]'"
        )


def _measured(folder: str, customers: int, paths: int, result_file: str) -> dict:
    figures = response_figures(folder, customers, paths=paths)
    Path(result_file).write_text(json.dumps(figures), encoding="utf-8")
    note = (
        f"{figures['campaign_customers']:,} campaign customers; rank correlation of predicted "
        f"and true effect {figures['rho']:.3f} (goal ≥ {RHO_GOAL}); harmful segment "
        f"({figures['harmful_customers']} customers) mean predicted effect "
        f"{figures['harmful_mean_predicted']:+.4f}, true {figures['harmful_mean_true']:+.4f} "
        f"(goal > 0: predicted harmful); {figures['reason']}"
    )
    note += f"; time: its {figures['cross_fitted']['folds']} cross-fitted fits, as the "
    note += f"T-learner's (one fit on everyone: {figures['fit_seconds']:.1f} s)"
    return {"seconds": figures["ours_seconds"], "note": note}


def _more_rows(figures: dict, size: str, peak_mb: float) -> list[Measurement]:
    by, top, rnd = figures["by_effect"], figures["top_risk"], figures["random"]
    plan_note = (
        f"{by['contacts']} contacts each (budget {by['cost']:,.0f}), valued with the TRUE effects: "
        f"by effect saves {by['saves']:.1f} churns, value {by['value']:,.0f}; top risk saves "
        f"{top['saves']:.1f} churns, value {top['value']:,.0f}; random saves "
        f"{rnd['saves']:.1f} churns, value {rnd['value']:,.0f}; "
        f"by effect − top risk = {by['value'] - top['value']:+,.0f} "
        f"(saves ratio {by['saves'] / top['saves'] if top['saves'] else float('nan'):.2f}×; "
        "goal: by effect beats top risk)"
    )
    cf = figures["cross_fitted"]
    compare_note = (
        f"cross-fitted ({cf['folds']} folds): rank correlation with the true effect ours "
        f"{cf['rho_ours']:.3f} vs T-learner {cf['rho_t']:.3f}; Qini ours {cf['qini_ours']:.4f} "
        f"vs T-learner {cf['qini_t']:.4f}"
    )
    return [
        Measurement(SUITE, "plan by effect vs top risk, same budget", size,
                    figures["select_seconds"], peak_mb, plan_note, role="figure"),
        Measurement(SUITE, "T-learner, scikit-uplift (gradient boosting)", size,
                    figures["t_seconds"], peak_mb, compare_note, role="plain"),
    ]  # fmt: skip


def response_figures(
    folder: str | Path, customers: int, *, paths: int = 20, seed: int = DEMO_SEED
) -> dict[str, Any]:
    """Every figure of the suite (see the module's docstring), as plain numbers."""
    from ..demo import true_offer_effect
    from ..value import customer_offer_effects

    data = _campaign_data(Path(folder))
    follow, covariates, offer = data["follow"], data["covariates"], data["offer"]
    began = time.perf_counter()
    model = customer_offer_effects(follow, covariates, seed=0)
    fit_seconds = time.perf_counter() - began
    ratio = model.predict_hazard_ratio(covariates)
    predicted, value_change, ltv, risk = _predicted(data, ratio)
    truth = true_offer_effect(
        follow["customer_id"], data["month"], customers=customers, seed=seed, paths=paths
    )
    true_effect = truth["effect"].to_numpy()
    harmful = truth["hazard_ratio"].to_numpy() > 1
    began = time.perf_counter()
    selections = _selections(value_change - offer.cost, risk, true_effect, ltv, offer.cost)
    select_seconds = time.perf_counter() - began
    return {
        "campaign_customers": len(follow),
        "fit_seconds": fit_seconds,
        "reason": model.reason,
        "rho": _spearman(predicted, true_effect),
        "harmful_customers": int(harmful.sum()),
        "harmful_mean_predicted": float(predicted[harmful].mean()) if harmful.any() else np.nan,
        "harmful_mean_true": float(true_effect[harmful].mean()) if harmful.any() else np.nan,
        **selections,
        "select_seconds": select_seconds,
        **_cross_fitted(data, true_effect),
    }


def _campaign_data(folder: Path) -> dict[str, Any]:
    """The campaign's follow-up and offer-month features, and the Cox family's hazards of its
    customers for the months after the offer month, without the offer."""
    from ..config import load_config
    from ..cycle import panel_with_context, snapshot_with_context
    from ..data import load_tables
    from ..decisions import offers_from_config
    from ..evaluation import campaign_metric_settings
    from ..models import make_model
    from ..value import campaign_covariates, campaign_follow_up, value_settings

    config = load_config(folder / "lifecycle.toml")
    tables = load_tables(folder, config)
    name = str(tables.campaigns["offer"].iloc[0])
    offer = next(o for o in offers_from_config(config) if o.name == name)
    month = int(tables.campaigns["month"].iloc[0])
    follow = campaign_follow_up(tables, name, target=offer.target, months=offer.months)
    panel = panel_with_context(tables, month, config)
    features = list(campaign_metric_settings(config).effect_features)
    covariates = campaign_covariates(panel, follow, features)
    hazard_model = make_model("cox", config).fit(panel)
    del panel
    snapshot = snapshot_with_context(tables, month, config)
    where = pd.Index(snapshot["customer_id"].astype(str)).get_indexer(
        follow["customer_id"].astype(str)
    )
    snapshot = snapshot.iloc[where].reset_index(drop=True)
    for column in [c for c in snapshot.columns if c.startswith(f"offer_{name}_")]:
        snapshot[column] = 0.0 if column.endswith("_active") else np.nan  # as if not offered
    return {
        "follow": follow,
        "covariates": covariates,
        "offer": offer,
        "month": month,
        "hazards": hazard_model.hazard_array(snapshot, VALUE_MONTHS),
        "n_terminal": len(hazard_model.terminal_causes_),
        "churn": list(hazard_model.causes_).index(offer.target),
        "margin": snapshot["monthly_margin"].to_numpy(dtype=np.float64),
        "annual_discount": value_settings(config).annual_discount,
    }


def _predicted(
    data: dict[str, Any], ratio: np.ndarray
) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Per customer: the predicted change in 12-month churn incidence from its own ratio, the
    change in discounted margin over `VALUE_MONTHS`, the lifetime value without the offer
    and the 12-month churn risk without it."""
    from ..models import survival_and_incidence, valid_hazards
    from ..value import discount_factors

    k, churn = data["n_terminal"], data["churn"]
    base = data["hazards"][:, :, :k]
    offered = base.copy()
    months = data["offer"].months
    offered[:, :months, churn] *= np.asarray(ratio, dtype=np.float64)[:, None]
    offered = valid_hazards(offered, k)
    s0, f0 = survival_and_incidence(base)
    s1, f1 = survival_and_incidence(offered)
    worth = data["margin"][:, None] * discount_factors(VALUE_MONTHS, data["annual_discount"])
    change = f1[:, EFFECT_HORIZON - 1, churn] - f0[:, EFFECT_HORIZON - 1, churn]
    value_change = ((s1 - s0) * worth).sum(axis=1)
    return change, value_change, (s0 * worth).sum(axis=1), f0[:, EFFECT_HORIZON - 1, churn]


def _selections(
    expected_value: np.ndarray,
    risk: np.ndarray,
    true_effect: np.ndarray,
    ltv: np.ndarray,
    cost: float,
) -> dict[str, dict[str, float]]:
    """The same number of contacts chosen three ways, each valued with the true effects."""
    n = expected_value.size
    contacts = max(1, round(BUDGET_SHARE * n))
    worth = -true_effect * ltv - cost
    chosen = {
        "by_effect": np.argsort(-expected_value, kind="stable")[:contacts],
        "top_risk": np.argsort(-risk, kind="stable")[:contacts],
        "random": np.random.default_rng(0).permutation(n)[:contacts],
    }
    return {
        name: {
            "contacts": int(idx.size),
            "cost": float(cost * idx.size),
            "saves": float(-true_effect[idx].sum()),
            "value": float(worth[idx].sum()),
        }
        for name, idx in chosen.items()
    }


def _cross_fitted(data: dict[str, Any], true_effect: np.ndarray, folds: int = 5) -> dict:
    """Out-of-fold effects of ours and of scikit-uplift's T-learner on the same folds."""
    from sklearn.ensemble import HistGradientBoostingClassifier
    from sklearn.model_selection import StratifiedKFold
    from sklift.models import TwoModels
    from threadpoolctl import threadpool_limits

    from ..evaluation import qini_coefficient
    from ..value import customer_offer_effects

    follow, covariates = data["follow"], data["covariates"]
    offered = follow["offered"].to_numpy()
    event = follow["event"].to_numpy()
    x = covariates.to_numpy(dtype=np.float64)
    ours, theirs = np.empty(len(follow)), np.empty(len(follow))
    t_seconds = ours_seconds = 0.0
    split = StratifiedKFold(n_splits=folds, shuffle=True, random_state=0)
    for train, test in split.split(x, 2 * offered + event):
        began = time.perf_counter()
        model = customer_offer_effects(
            follow.iloc[train].reset_index(drop=True),
            covariates.iloc[train].reset_index(drop=True),
            seed=0,
        )
        ours_seconds += time.perf_counter() - began
        part = {**data, "hazards": data["hazards"][test], "margin": data["margin"][test]}
        ours[test] = _predicted(part, model.predict_hazard_ratio(covariates.iloc[test]))[0]
        began = time.perf_counter()
        learner = TwoModels(
            estimator_trmnt=HistGradientBoostingClassifier(max_iter=100, random_state=0),
            estimator_ctrl=HistGradientBoostingClassifier(max_iter=100, random_state=0),
            method="vanilla",
        )
        with threadpool_limits(1):  # one thread, as our fits use: a fair time
            learner.fit(x[train], event[train], offered[train])
            theirs[test] = learner.predict(x[test])
        t_seconds += time.perf_counter() - began
    kept = 1 - event
    return {
        "cross_fitted": {
            "folds": folds,
            "rho_ours": _spearman(ours, true_effect),
            "rho_t": _spearman(theirs, true_effect),
            "qini_ours": qini_coefficient(-ours, offered, kept),
            "qini_t": qini_coefficient(-theirs, offered, kept),
        },
        "t_seconds": t_seconds,
        "ours_seconds": ours_seconds,
    }


def _spearman(a: np.ndarray, b: np.ndarray) -> float:
    from scipy import stats

    if np.ptp(a) == 0 or np.ptp(b) == 0:
        return float("nan")  # a constant ranking has no rank correlation
    return float(stats.spearmanr(a, b).statistic)
