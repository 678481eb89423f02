"""``lifecycle bench models``: fitting each model family on the demo, and its out-of-time accuracy.

The demo scenario (`lifecycle.demo.write_demo`, seeded) is written once into a temporary folder;
its generation is not measured. Every case then runs in a fresh process on that folder: it
builds the panel up to the cutoff ``c = E − 12`` (E the extract month) with its spatial context
and the snapshot of the customers present at the end of c (neither is timed), fits one family
(timed: the figure in the table), predicts the snapshot's 12-month cumulative incidence and
scores it against what happened in months c + 1..E with Uno's concordance per cause, the
way `lifecycle.evaluation.backtest` does (`twelve_month_concordance`). Peak memory is the
case's whole process: tables, panel and fit.

Cases (hyperparameters from the demo's ``lifecycle.toml`` — boosted: ``max_iter = 150``,
``n_threads = 1``; the forest has no section there, so its defaults, one process — then the
case's own):

* ours: the Cox family fitted on every event row and a weighted fraction of the other rows;
* plain: the Cox family on every row, its comparator: the note gives the largest
  ``|β̂_weighted − β̂_full| / se_full`` over every cause and covariate (goal: within one
  standard error) and the time ratio (goal: at least 5× less time);
* ours: the boosted family on every row, and on a weighted sample of its non-event rows;
* plain: the survival forest (landmark snapshots, at most ``max_rows`` rows per cause), their
  comparator: the note of each boosted case gives its concordance minus the forest's per cause
  (goal: nowhere below by more than 0.005) and the time ratio (goal: at least 10× less time).

Each case's note also compares it with the truth (`lifecycle.bench._yardstick`): the demo's true
process scores the same customers as of the same cutoff (forward simulation from the exact
state, not timed), and per cause the note gives ``C`` against ``C_truth``, the ratio
``(C − 0.5)/(C_truth − 0.5)`` and the Brier score at 12 months minus the truth's; the forest's
note ends with the best family per cause against the goal (churn ≥ 0.93, every cause ≥ 0.90,
causes whose truth has C < 0.55 exempt). Both are given twice: against the exact truth and
against the truth knowable at the cutoff (the campaign's effect averaged over the offered
customers; why, in `lifecycle.bench._yardstick`).

The Cox pair may run on a smaller demo than the rest (``cox_customers``): the fit on every row
of the full-size panel takes long (about 5 minutes on 100,000 demo customers, 5M rows, on an
idle 2-core machine; over 11 minutes on a busy one).
"""

from __future__ import annotations

import dataclasses
import json
import logging
import multiprocessing as mp
import tempfile
import time
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from ..errors import UsageError
from ._harness import Measurement, measure
from ._yardstick import TRUTHS, goal_note, truth_comparison, truth_note, write_truth_file

log = logging.getLogger(__name__)

HORIZON = 12  # months between the cutoff and the extract month, and the horizon scored
DEMO_SEED = 7
COX_SE_GOAL = 1.0  # every weighted-sample coefficient within this many full-fit standard errors
COX_TIME_GOAL = 5.0
C_GOAL = 0.005  # the boosted family's concordance at most this much below the forest's
TREE_TIME_GOAL = 10.0


@dataclasses.dataclass(frozen=True)
class Case:
    """One measured fit: a family with its hyperparameters, and its role in the comparisons."""

    key: str
    label: str
    family: str
    params: dict[str, Any]
    role: str


def model_cases(
    cox_sample_fraction: float = 0.15, boosted_sample_fraction: float = 0.05
) -> tuple[Case, ...]:
    """The cases of the suite, in the order they run."""
    return (
        Case(
            "cox_weighted",
            f"Cox, weighted sample f={cox_sample_fraction:g}",
            "cox",
            {"sample_fraction": cox_sample_fraction},
            "ours",
        ),
        Case(
            "cox_full",
            "Cox, every row",
            "cox",
            {"sample_fraction": None, "max_rows": None},
            "plain",
        ),
        Case(
            "boosted",
            "boosted, every row",
            "boosted",
            {"sample_fraction": None, "max_rows": None},
            "ours",
        ),
        Case(
            "boosted_sampled",
            f"boosted, weighted sample f={boosted_sample_fraction:g}",
            "boosted",
            {"sample_fraction": boosted_sample_fraction},
            "ours",
        ),
        Case("forest", "survival forest", "forest", {}, "plain"),
    )


# -- the demo, written once ------------------------------------------------------------------------
def _write_demo(folder: str, customers: int, seed: int) -> None:
    from ..demo import write_demo

    write_demo(folder, customers=customers, seed=seed)


def write_demo_folder(folder: str | Path, customers: int, *, seed: int = DEMO_SEED) -> Path:
    """Write the demo of ``customers`` into ``folder`` in a fresh process (its memory is freed
    when it ends, so the measuring process stays small)."""
    ctx = mp.get_context("spawn")
    proc = ctx.Process(target=_write_demo, args=(str(folder), customers, seed))
    proc.start()
    proc.join()
    if proc.exitcode != 0:
        raise RuntimeError(f"writing the {customers:,}-customer demo failed ({proc.exitcode})")
    return Path(folder)


# -- one case ----------------------------------------------------------------------------------
def twelve_month_concordance(
    outcomes: pd.DataFrame, incidence: np.ndarray, causes: tuple[str, ...], horizon: int = HORIZON
) -> tuple[dict[str, float], dict[str, int]]:
    """Uno's concordance of each cause's ``F̂_k(horizon)`` against the observed follow-up.

    ``outcomes`` is `lifecycle.evaluation.observed_outcomes` in the snapshot's order and
    ``incidence`` the predicted cumulative incidence ``(n, T, K)``, T ≥ ``horizon``. As in
    `lifecycle.evaluation.backtest`: for cause k among the customers at risk of it (for an
    uptake, those not holding the product), an event of k in month t sits at time t and any
    other end of follow-up after month t (censoring, a competing exit) at ``t + ½``, and

        C_k = uno_concordance(time, event_k, F̂_k(horizon), tau = horizon + ¼).

    Returns the concordance and the number of events within the horizon, per cause.
    """
    from ..evaluation import EVENT, outcome_for_cause, uno_concordance

    concordance, events = {}, {}
    for j, cause in enumerate(causes):
        months, code, at_risk = outcome_for_cause(outcomes, cause)
        is_event = code[at_risk] == EVENT
        time_axis = months[at_risk] + 0.5 * (~is_event)
        risk = incidence[at_risk, horizon - 1, j]
        events[cause] = int(np.sum(is_event & (months[at_risk] <= horizon)))
        concordance[cause] = (
            float(uno_concordance(time_axis, is_event, risk, tau=horizon + 0.25))
            if is_event.any()
            else float("nan")
        )
    return concordance, events


def fit_and_score(
    folder: str | Path,
    family: str,
    params: Mapping[str, Any],
    *,
    horizon: int = HORIZON,
    truth_files: Mapping[str, str | Path] | None = None,
) -> dict[str, Any]:
    """Fit ``family`` on the demo in ``folder`` up to ``E − horizon`` and score its predictions.

    Hyperparameters: the demo config's ``[models.<family>]``, then ``params``. Only the fit is
    timed (``fit_seconds``); building the panel and the snapshot, and predicting, are not.

    Returns
    -------
    dict
        ``family``, ``params``, ``cutoff``, ``rows`` (panel rows), ``customers`` (in the
        snapshot), ``fit_seconds``, ``predict_seconds``, ``concordance`` and ``events`` per
        cause (`twelve_month_concordance`), for the Cox family ``coefficients`` (records of
        ``cause``, ``feature``, ``coef``, ``se``), and with ``truth_files`` (truth name, a key
        of `lifecycle.bench._yardstick.TRUTHS` → its `write_truth_file` parquet) ``truth``:
        truth name → `truth_comparison`.
    """
    from .._months import format_month
    from ..config import load_config
    from ..cycle import panel_with_context, snapshot_with_context
    from ..data import load_tables
    from ..evaluation import observed_outcomes
    from ..models import make_model

    folder = Path(folder)
    config = load_config(folder / "lifecycle.toml")
    tables = load_tables(folder, config)
    cutoff = int(tables.extract_month) - horizon
    panel = panel_with_context(tables, cutoff, config)
    snapshot = snapshot_with_context(tables, cutoff, config)
    outcomes = observed_outcomes(tables, cutoff)
    where = pd.Index(outcomes["customer_id"]).get_indexer(snapshot["customer_id"])
    if (where < 0).any():
        raise RuntimeError("the snapshot holds customers the outcomes do not")
    outcomes = outcomes.iloc[where].reset_index(drop=True)

    model = make_model(family, config).set_params(**params)
    began = time.perf_counter()
    model.fit(panel)
    fit_seconds = time.perf_counter() - began
    rows = len(panel)
    del panel
    began = time.perf_counter()
    incidence = model.predict_cumulative_incidence(snapshot, horizon).to_numpy()
    incidence = incidence.reshape(len(snapshot), horizon, -1)
    predict_seconds = time.perf_counter() - began
    concordance, events = twelve_month_concordance(outcomes, incidence, model.causes_, horizon)
    result: dict[str, Any] = {
        "family": family,
        "params": {k: v for k, v in model.get_params().items() if k in params},
        "cutoff": format_month(cutoff),
        "rows": rows,
        "customers": len(snapshot),
        "fit_seconds": fit_seconds,
        "predict_seconds": predict_seconds,
        "concordance": concordance,
        "events": events,
    }
    if truth_files:
        result["truth"] = {
            name: truth_comparison(
                outcomes, incidence, model.causes_, pd.read_parquet(file), horizon
            )
            for name, file in truth_files.items()
        }
    if family == "cox":
        table = model.coefficients_[["cause", "feature", "coef", "se"]]
        result["coefficients"] = table.to_dict(orient="records")
    return result


def _measured_fit(
    folder: str, family: str, params: dict[str, Any], result_file: str, truth_files: dict
) -> dict:
    result = fit_and_score(folder, family, params, truth_files=truth_files)
    Path(result_file).write_text(json.dumps(result), encoding="utf-8")
    scores = ", ".join(
        f"{cause.replace('uptake_', 'up_')} {c:.4f}" for cause, c in result["concordance"].items()
    )
    note = f"{result['rows'] / 1e6:.2f}M rows; 12-month Uno C: {scores}"
    for against, comparison in result.get("truth", {}).items():
        note += "; " + truth_note(comparison, against)
    return {"seconds": result["fit_seconds"], "note": note}


# -- the comparisons ---------------------------------------------------------------------------
def compare_coefficients(full: pd.DataFrame, weighted: pd.DataFrame) -> dict[str, Any]:
    """How far the weighted-sample Cox fit lies from the full fit, in the full fit's standard
    errors: ``z = |β̂_weighted − β̂_full| / se_full`` per cause and covariate.

    Returns ``max_z``, ``where`` (``cause:feature`` of the largest), ``within`` (covariates with
    ``z ≤ 1``) and ``total``. Covariates present in one fit only are counted as outside.
    """
    keys = ["cause", "feature"]
    both = full.merge(weighted, on=keys, how="outer", suffixes=("_full", "_weighted"))
    z = (both["coef_weighted"] - both["coef_full"]).abs() / both["se_full"]
    z = z.fillna(np.inf)
    top = int(np.argmax(z.to_numpy())) if len(z) else 0
    return {
        "max_z": float(z.max()) if len(z) else float("nan"),
        "where": f"{both['cause'].iloc[top]}:{both['feature'].iloc[top]}" if len(z) else "",
        "within": int((z <= COX_SE_GOAL).sum()),
        "total": len(z),
    }


def compare_concordance(ours: Mapping[str, float], forest: Mapping[str, float]) -> dict[str, Any]:
    """``C_ours − C_forest`` per cause, and the worst (lowest) difference with its cause."""
    diffs = {cause: ours[cause] - forest[cause] for cause in ours if cause in forest}
    worst = min(diffs, key=lambda c: diffs[c] if np.isfinite(diffs[c]) else -np.inf)
    return {"diffs": diffs, "worst": diffs[worst], "worst_cause": worst}


def _cox_note(full: dict, weighted: dict) -> str:
    gap = compare_coefficients(
        pd.DataFrame(full["coefficients"]), pd.DataFrame(weighted["coefficients"])
    )
    ratio = full["fit_seconds"] / max(weighted["fit_seconds"], 1e-9)
    met = gap["max_z"] <= COX_SE_GOAL and ratio >= COX_TIME_GOAL
    return (
        f"vs every row: max |Δcoef|/se {gap['max_z']:.2f} ({gap['where']}), "
        f"{gap['within']}/{gap['total']} within 1 se; {ratio:.1f}× less time "
        f"(goal ≤ {COX_SE_GOAL:g} se at ≥ {COX_TIME_GOAL:g}×: {'met' if met else 'missed'})"
    )


def _tree_note(boosted: dict, forest: dict) -> str:
    cmp = compare_concordance(boosted["concordance"], forest["concordance"])
    ratio = forest["fit_seconds"] / max(boosted["fit_seconds"], 1e-9)
    diffs = ", ".join(f"{c.replace('uptake_', 'up_')} {d:+.4f}" for c, d in cmp["diffs"].items())
    met = cmp["worst"] >= -C_GOAL and ratio >= TREE_TIME_GOAL
    return (
        f"vs forest: ΔC {diffs}; {ratio:.2f}× less time (goal ΔC ≥ −{C_GOAL:g} at "
        f"≥ {TREE_TIME_GOAL:g}×: {'met' if met else 'missed'})"
    )


# -- the suite ---------------------------------------------------------------------------------
def run_models_bench(
    customers: int = 100_000,
    *,
    cox_customers: int | None = None,
    cox_sample_fraction: float = 0.15,
    boosted_sample_fraction: float = 0.05,
    family_params: Mapping[str, Mapping[str, Any]] | None = None,
    seed: int = DEMO_SEED,
    demo: str | Path | None = None,
) -> list[Measurement]:
    """Fit time, peak memory and 12-month Uno C of each family on the demo of ``customers``.

    ``cox_customers`` (default ``customers``) sets the demo of the two Cox cases;
    ``family_params`` adds hyperparameters per family (``cox``, ``boosted``, ``forest``) to
    every case of it, e.g. smaller forests for a quick run. The comparisons of the module
    docstring are appended to the notes of the weighted Cox and the boosted cases.
    ``demo``: a demo folder written earlier (by `write_demo_folder` or ``lifecycle demo``) to
    use for every case instead of writing one; ``customers`` then only labels the size.
    """
    cox_customers = cox_customers or customers
    if demo is not None and cox_customers != customers:
        raise UsageError("with an existing demo folder every case runs on it; leave cox_customers")
    extra = {k: dict(v) for k, v in (family_params or {}).items()}
    cases = model_cases(cox_sample_fraction, boosted_sample_fraction)
    with tempfile.TemporaryDirectory(prefix="lifecycle-bench-models-") as tmp:
        root = Path(tmp)
        if demo is not None:
            folders = {customers: Path(demo)}
        else:
            folders = {
                customers: write_demo_folder(root / f"demo_{customers}", customers, seed=seed)
            }
        if cox_customers not in folders:
            folders[cox_customers] = write_demo_folder(
                root / f"demo_{cox_customers}", cox_customers, seed=seed
            )
        # The demo's true process scores the same customers (not timed): the yardstick, from
        # the exact state and as knowable at the cutoff.
        truths = {
            size: {
                against: str(
                    write_truth_file(
                        folder,
                        root / f"truth_{size}_{against}.parquet",
                        campaign_effect=against,
                    )
                )
                for against in TRUTHS
            }
            for size, folder in folders.items()
        }
        measured: dict[str, Measurement] = {}
        results: dict[str, dict] = {}
        for case in cases:
            size = cox_customers if case.family == "cox" else customers
            result_file = root / f"result_{case.key}.json"
            log.info("models benchmark: %s on %d demo customers", case.label, size)
            # the harness pairs plain and ours cases of equal size for its ratios: the size
            # label names the comparison (the Cox pair, the tree families)
            group = "Cox" if case.family == "cox" else "trees"
            measured[case.key] = measure(
                "models",
                case.label,
                f"{size:,} demo, {group}",
                _measured_fit,
                role=case.role,
                folder=str(folders[size]),
                family=case.family,
                params={**extra.get(case.family, {}), **case.params},
                result_file=str(result_file),
                truth_files=truths[size],
            )
            results[case.key] = json.loads(result_file.read_text(encoding="utf-8"))
    return _with_notes(cases, measured, results)


def _with_notes(
    cases, measured: dict[str, Measurement], results: dict[str, dict]
) -> list[Measurement]:
    """The measurements in case order, each with the comparison of its note appended."""
    notes = {
        "cox_weighted": _cox_note(results["cox_full"], results["cox_weighted"]),
        "boosted": _tree_note(results["boosted"], results["forest"]),
        "boosted_sampled": _tree_note(results["boosted_sampled"], results["forest"]),
    }
    notes["forest"] = "; ".join(
        n
        for n in (
            goal_note({c.key: results[c.key].get("truth", {}).get(t, {}) for c in cases}, t)
            for t in TRUTHS
        )
        if n
    )
    out = []
    for case in cases:
        m = measured[case.key]
        if notes.get(case.key):
            m = dataclasses.replace(m, note=f"{m.note}; {notes[case.key]}")
        out.append(m)
    return out
