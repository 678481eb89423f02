"""Reasons in plain words: the features that push a customer's hazard up most.

For customer i, cause c and feature f with reference value r_f (the training median or mode
the model stored at fit as ``feature_reference_``, else the snapshot's median or mode: the
portfolio's typical value), the effect of f is

    effect_if = h_c(x_i) − h_c(x_i with f set to r_f)

where h_c is the model's 1-month hazard of c from its public `predict_hazard` (for a
`ChampionModel`, the hazard of the family chosen for c). Only the model's output is used, so
this works for every family. A positive effect means the customer's own value of f raises the
hazard above what it would be at the reference; the largest positive effects are the
customer's reasons, largest first. Tenure is a candidate too (its effect is that of moving
the customer's ``tenure_start`` to the portfolio's median), so that a baseline hazard that is
high at the customer's tenure is said in words.

Reasons never contradict each other: features that describe one thing (the count and the
share of neighbours holding a product, at any radius; a trailing sum and its monthly value;
the contract columns) form one *concept*, and only the concept's strongest feature is given.
Features named in ``hidden`` (the run passes the area attributes and the local move rate,
unless ``[plan] area_reasons = true``) are never given as reasons, though they still count in
the hazard: area features can act as proxies for protected characteristics.

Each reason is put in words by the first phrase whose pattern matches the feature name in
full (a Python regular expression; named groups become placeholders). The phrase used is
``high`` when the value is above the reference and ``low`` when below; placeholders are
``{value}``, ``{reference}``, ``{feature}``, ``{s}`` ("" when the value is 1, else "s"),
``{cause}`` (the cause in words, e.g. "switching away") and the pattern's named groups
(underscores shown as spaces). Phrases from ``[reason_phrases]`` come before the built-in
ones (`DEFAULT_PHRASES`)::

    [reason_phrases]
    "contract_ending" = "contract ends within 2 months"   # a text: the phrase when high
    "discount_(?P<kind>.+)" = { high = "a large {kind} discount", low = "a small {kind} discount" }

A feature without a phrase for its direction gets "<feature> is high (value)" or
"<feature> is low (value)" ("<feature> is <value>" for a category). A planned contact for
whom no feature adds at least ``min_relative_effect`` of its hazard is given its risk against
the portfolio instead (`risk_reason`), so that no row goes without a reason.
"""

from __future__ import annotations

import logging
import re
import string
from collections.abc import Collection, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import pandas as pd

from ..config import Config
from ..errors import UsageError

log = logging.getLogger(__name__)

__all__ = [
    "DEFAULT_PHRASES",
    "Phrase",
    "cause_words",
    "join_reasons",
    "phrases_from_config",
    "portfolio_reference",
    "reason_concept",
    "risk_reason",
    "top_reasons",
]

# features a snapshot cannot move: future months recompute them from the calendar
_NOT_REASONS = re.compile(r"season_(sin|cos)")
TENURE = "tenure_start"

# features that describe one thing: (pattern, concept) — the first full match names the concept
_CONCEPTS: tuple[tuple[re.Pattern[str], str], ...] = (
    (re.compile(r"nearby_adopt(?:ers|ion)_(?P<x>.+)_\d+(?:_\d+)?m"), "nearby {x}"),
    (re.compile(r"contract_(?:ending|months_left)"), "contract"),
    (re.compile(r"(?P<x>.+)_\d+m"), "{x}"),
    (re.compile(r"tenure|tenure_start"), "tenure"),
)


def reason_concept(feature: str) -> str:
    """The concept a feature describes: features of one concept never give two reasons.

    ``nearby_adopters_<p>_<r>m`` and ``nearby_adoption_<p>_<r>m`` (any radius) are "nearby
    <p>"; ``contract_ending`` and ``contract_months_left`` are "contract"; a trailing sum
    ``<x>_<k>m`` is ``<x>`` (as is the monthly ``<x>``); every other feature is its own.
    """
    for pattern, concept in _CONCEPTS:
        match = pattern.fullmatch(feature)
        if match:
            return concept.format(**match.groupdict())
    return feature


def cause_words(cause: str | None) -> str:
    """A cause in words: churn → "switching away", move_out → "moving out", other_exit →
    "leaving", uptake_<p> → "taking up <p>"."""
    if cause is None:
        return "the event"
    words = {"churn": "switching away", "move_out": "moving out", "other_exit": "leaving"}
    if cause in words:
        return words[cause]
    if cause.startswith("uptake_"):
        return "taking up " + cause.removeprefix("uptake_").replace("_", " ")
    return cause.replace("_", " ")


@dataclass(frozen=True)
class Phrase:
    """Words for a feature: ``pattern`` (full match on the name), ``high`` and ``low``
    templates (``None``: use the generic words)."""

    pattern: str
    high: str | None = None
    low: str | None = None

    def __post_init__(self) -> None:
        try:
            compiled = re.compile(self.pattern)
        except re.error as exc:
            raise UsageError(
                f"[reason_phrases] pattern {self.pattern!r} is not a regular expression: {exc}"
            ) from None
        allowed = {"value", "reference", "feature", "s", "cause", *compiled.groupindex}
        for template in (self.high, self.low):
            if template is None:
                continue
            try:
                fields = {f for _, f, _, _ in string.Formatter().parse(template) if f is not None}
            except ValueError as exc:
                raise UsageError(
                    f"[reason_phrases] {self.pattern!r}: template {template!r} is malformed: {exc}"
                ) from None
            unknown = sorted(fields - allowed)
            if unknown:
                raise UsageError(
                    f"[reason_phrases] {self.pattern!r}: template {template!r} uses {unknown}; "
                    f"the placeholders allowed are {sorted(allowed)}"
                )

    def words(
        self, feature: str, value: Any, reference: Any, high: bool, cause: str | None = None
    ) -> str | None:
        """The phrase for ``feature`` at ``value``, or ``None`` when this phrase has no words
        for the direction or does not match (``cause``: the cause explained)."""
        match = re.fullmatch(self.pattern, feature)
        template = self.high if high else self.low
        if match is None or template is None:
            return None
        groups = {k: v.replace("_", " ") for k, v in match.groupdict().items() if v is not None}
        plural = "" if _is_one(value) else "s"
        try:
            return template.format(
                value=value,
                reference=reference,
                feature=feature,
                s=plural,
                cause=cause_words(cause),
                **groups,
            )
        except (ValueError, TypeError, KeyError, IndexError):
            return None


DEFAULT_PHRASES: tuple[Phrase, ...] = (
    Phrase("contract_ending", "contract ends within 2 months", "contract not ending soon"),
    Phrase(
        "contract_months_left",
        "{value:.0f} month{s} left on the contract",
        "only {value:.0f} month{s} left on the contract",
    ),
    Phrase("complaints_3m", "{value:.0f} complaint{s} in the last quarter"),
    Phrase("complaints_(?P<k>\\d+)m", "{value:.0f} complaint{s} in the last {k} months"),
    Phrase("complaints", "{value:.0f} complaint{s} last month"),
    Phrase("bill_shock", "a bill shock last month"),
    Phrase("bill_shock_(?P<k>\\d+)m", "{value:.0f} bill shock{s} in the last {k} months"),
    Phrase("late_payment", "a late payment last month"),
    Phrase("late_payment_(?P<k>\\d+)m", "{value:.0f} late payment{s} in the last {k} months"),
    Phrase("local_move_rate", "many move-outs nearby", "few move-outs nearby"),
    Phrase("rental_share", "an area with many renters", "an area with few renters"),
    Phrase(
        "nearby_adoption_(?P<product>.+)_(?P<radius>\\d+)m",
        "many neighbours within {radius} m have {product} ({value:.0%})",
        "few neighbours within {radius} m have {product} ({value:.0%})",
    ),
    Phrase(
        "nearby_adopters_(?P<product>.+)_(?P<radius>\\d+)m",
        "{value:.0f} neighbour{s} within {radius} m have {product}",
        "only {value:.0f} neighbour{s} within {radius} m have {product}",
    ),
    Phrase("holds_(?P<product>.+)", "already has {product}", "does not have {product}"),
    # a reason is always a term that raises the hazard: at this tenure, the cause is likelier
    Phrase(
        "tenure|tenure_start",
        "{value:.0f} month{s} as a customer, a tenure at which {cause} is more common than "
        "at {reference:.0f} months",
        "only {value:.0f} month{s} as a customer, a tenure at which {cause} is more common "
        "than at {reference:.0f} months",
    ),
    Phrase(
        "monthly_margin",
        "a high monthly margin ({value:.2f})",
        "a low monthly margin ({value:.2f})",
    ),
)


def phrases_from_config(config: Config) -> tuple[Phrase, ...]:
    """The ``[reason_phrases]`` of a config followed by `DEFAULT_PHRASES`."""
    raw = config.raw.get("reason_phrases", {})
    src = str(config.source) if config.source is not None else "config"
    if not isinstance(raw, dict):
        raise UsageError(f"{src}: [reason_phrases] must be a table: pattern = phrase")
    own = []
    for pattern, entry in raw.items():
        if isinstance(entry, str):
            high, low = entry, None
        elif isinstance(entry, dict) and set(entry) <= {"high", "low"} and entry:
            high, low = entry.get("high"), entry.get("low")
            if not all(t is None or isinstance(t, str) for t in (high, low)):
                raise UsageError(f"{src}: [reason_phrases] {pattern!r}: high and low must be texts")
        else:
            raise UsageError(
                f"{src}: [reason_phrases] {pattern!r} was {entry!r} but must be a text or a "
                'table { high = "...", low = "..." }'
            )
        try:
            own.append(Phrase(pattern, high, low))
        except UsageError as exc:
            raise UsageError(f"{src}: {exc}") from None
    return (*own, *DEFAULT_PHRASES)


def top_reasons(
    model: Any,
    snapshot: pd.DataFrame,
    cause: str | Sequence[str],
    k: int = 3,
    *,
    reference: Mapping[str, Any] | None = None,
    phrases: Sequence[Phrase] = DEFAULT_PHRASES,
    min_relative_effect: float = 0.05,
    hidden: Collection[str] = (),
) -> pd.DataFrame:
    """Each customer's top ``k`` reasons: the features that raise its 1-month hazard most.

    A feature's effect is ``h(x) − h(x with the feature at its reference)``; it is a reason
    only when that is at least ``min_relative_effect`` of the customer's hazard ``h(x)``
    (default 5 %), so that a row does not cite features that barely move its risk. Tenure
    (``tenure_start``) is a candidate like a feature. Of the features of one concept
    (`reason_concept`) only the strongest is given, so reasons never contradict each other.

    Parameters
    ----------
    model
        A fitted model with ``features_``, ``causes_`` and ``predict_hazard`` (any family).
    snapshot
        One row per customer, as `lifecycle.panel.build_snapshot` gives it.
    cause
        The cause whose hazard is explained: one for every row, or one per row.
    k
        Reasons per customer (fewer when fewer features raise the hazard).
    reference
        Feature → reference value; default the model's ``feature_reference_`` (if it stored
        one at fit), else the snapshot's median (numbers) or most common value (categories).
    phrases
        Phrase table, first match wins (see the module docstring).
    min_relative_effect
        The smallest share of the customer's hazard a reason must add.
    hidden
        Features never given as reasons (e.g. area attributes); they still count in ``h``.

    Returns
    -------
    pandas.DataFrame
        One row per reason: ``customer_id``, ``rank`` (1 = strongest), ``feature``, ``value``,
        ``reference``, ``effect`` (the 1-month hazard it adds, ``effect_if`` above),
        ``cause``, ``phrase``. Sorted by customer (snapshot order) then rank.
    """
    n = len(snapshot)
    causes = [cause] * n if isinstance(cause, str) else list(cause)
    if len(causes) != n:
        raise UsageError(f"cause gives {len(causes)} causes for {n} customers")
    known = list(getattr(model, "causes_", ()))
    unknown = sorted(set(causes) - set(known))
    if unknown:
        raise UsageError(f"cause(s) {unknown} are not modelled; the model's causes are {known}")
    if n == 0 or k < 1:
        return _empty()
    snapshot = snapshot.reset_index(drop=True)
    stored = reference if reference is not None else getattr(model, "feature_reference_", None)
    features = _candidates(model, snapshot, hidden)
    base, effects, refs = _feature_effects(model, snapshot, causes, known, features, stored)
    effects = _strongest_of_each_concept(effects, features)
    order = np.argsort(-effects, axis=1, kind="stable")[:, :k]
    top = np.take_along_axis(effects, order, axis=1)
    floor = np.maximum(1e-12, min_relative_effect * base)[:, None]
    keep = top >= floor  # sorted, so the kept reasons of a row come first
    i, r = np.nonzero(keep)
    if len(i) == 0:
        return _empty()
    return _reason_rows(snapshot, features, refs, causes, order, top, i, r, phrases)


def _feature_effects(
    model: Any,
    snapshot: pd.DataFrame,
    causes: list[str],
    known: list[str],
    features: list[str],
    stored: Mapping[str, Any] | None,
) -> tuple[np.ndarray, np.ndarray, list[Any]]:
    """Each customer's 1-month hazard of its cause ``(n,)``, each feature's effect on it
    ``(n, F)`` (the hazard less the hazard with the feature at its reference) and the
    references."""
    n = len(snapshot)
    at = np.array([known.index(c) for c in causes])
    rows = np.arange(n)
    base = _one_month(model, snapshot)[rows, at]
    effects = np.zeros((n, len(features)))
    refs = []
    for j, feature in enumerate(features):
        ref = (
            stored[feature]
            if stored is not None and feature in stored
            else _typical(snapshot[feature])
        )
        refs.append(ref)
        moved = snapshot.assign(**{feature: _filled(snapshot[feature], ref)})
        effects[:, j] = base - _one_month(model, moved)[rows, at]
        if feature.startswith("holds_"):
            # holding a product makes its own uptake hazard 0 by construction: not a reason
            effects[np.array(causes) == "uptake_" + feature.removeprefix("holds_"), j] = 0.0
    return base, effects, refs


def _reason_rows(
    snapshot: pd.DataFrame,
    features: list[str],
    refs: list[Any],
    causes: list[str],
    order: np.ndarray,
    top: np.ndarray,
    i: np.ndarray,
    r: np.ndarray,
    phrases: Sequence[Phrase],
) -> pd.DataFrame:
    """The kept reasons (customer row ``i``, rank ``r``) as the table `top_reasons` returns."""
    j = order[i, r]
    values = np.empty(len(i), dtype=object)
    for f in np.unique(j):
        at = j == f
        values[at] = snapshot[features[f]].to_numpy(dtype=object)[i[at]]
    ref_of = np.empty(len(refs), dtype=object)
    ref_of[:] = refs
    out = pd.DataFrame(
        {
            "customer_id": snapshot["customer_id"].to_numpy()[i],
            "rank": r + 1,
            "feature": np.array(features, dtype=object)[j],
            "value": values,
            "reference": ref_of[j],
            "effect": top[i, r],
            "cause": np.array(causes, dtype=object)[i],
        }
    )
    out["phrase"] = [
        _phrase(f, v, ref, phrases, c)
        for f, v, ref, c in zip(out["feature"], values, out["reference"], out["cause"], strict=True)
    ]
    return out


def portfolio_reference(model: Any, snapshot: pd.DataFrame) -> dict[str, Any]:
    """The reference of every candidate feature over the whole portfolio: the model's stored
    ``feature_reference_`` where it has one, else the median (numbers) or most common value
    (categories) of ``snapshot`` (every customer scored, not only those planned)."""
    stored = dict(getattr(model, "feature_reference_", None) or {})
    columns = [*model.features_, TENURE]
    return {
        f: stored[f] if f in stored else _typical(snapshot[f]) for f in columns if f in snapshot
    }


def risk_reason(column: str, value: float, typical: float) -> str:
    """A customer's risk against the portfolio, in words: the reason of last resort.

    ``cif_<cause>_<h>m`` reads "<cause> risk 12 % within 3 months (portfolio median 4 %)";
    any other column "<column> 0.12 (portfolio median 0.04)".
    """
    match = re.fullmatch(r"cif_(?P<cause>.+)_(?P<h>\d+)m", column)
    if match is None:
        return f"{column} {value:.3g} (portfolio median {typical:.3g})"
    cause = match["cause"]
    what = "chance of " + cause_words(cause) if cause.startswith("uptake_") else None
    what = what or {"churn": "churn risk", "move_out": "move-out risk"}.get(
        cause, f"{cause_words(cause)} risk"
    )
    return f"{what} {value:.0%} within {match['h']} months (portfolio median {typical:.0%})"


def _candidates(model: Any, snapshot: pd.DataFrame, hidden: Collection[str]) -> list[str]:
    """The features that may be reasons: the model's, tenure, never the season or ``hidden``."""
    hidden = set(hidden)
    features = [f for f in model.features_ if not _NOT_REASONS.fullmatch(f) and f not in hidden]
    if TENURE in snapshot and TENURE not in features and TENURE not in hidden:
        features.append(TENURE)
    return features


def _strongest_of_each_concept(effects: np.ndarray, features: Sequence[str]) -> np.ndarray:
    """``effects`` with every feature but the strongest of its concept set to −inf per row."""
    concepts = np.array([reason_concept(f) for f in features], dtype=object)
    out = effects.copy()
    for concept in pd.unique(concepts):
        columns = np.flatnonzero(concepts == concept)
        if len(columns) < 2:
            continue
        part = effects[:, columns]
        best = columns[np.argmax(part, axis=1)]
        for column in columns:
            out[best != column, column] = -np.inf
    return out


def join_reasons(reasons: pd.DataFrame, customer_ids: Sequence[Any], sep: str = "; ") -> list[str]:
    """The phrases of each customer in ``customer_ids``, in rank order, joined by ``sep``
    ("" for a customer without reasons)."""
    joined = (
        reasons.sort_values(["customer_id", "rank"], kind="stable")
        .groupby("customer_id", sort=False)["phrase"]
        .agg(sep.join)
    )
    return [joined.get(c, "") for c in customer_ids]


RESPONDS_REASON = "responds to this offer more than most"
"""The reason given first to a planned customer whose own effect of the offer is clearly
stronger than the offer's average (learnt from a randomised campaign)."""


def with_response_reason(reasons: Sequence[str], responds: Sequence[bool]) -> list[str]:
    """``reasons`` with `RESPONDS_REASON` put first where ``responds`` is True."""
    return [
        "; ".join(p for p in (RESPONDS_REASON, text) if p) if yes else text
        for text, yes in zip(reasons, responds, strict=True)
    ]


_COLUMNS = ["customer_id", "rank", "feature", "value", "reference", "effect", "cause", "phrase"]


def _empty() -> pd.DataFrame:
    return pd.DataFrame({c: pd.Series(dtype=object) for c in _COLUMNS})


def _one_month(model: Any, snapshot: pd.DataFrame) -> np.ndarray:
    """``(n, K)`` hazards of month 1 through the model's public `predict_hazard`."""
    return model.predict_hazard(snapshot, 1).to_numpy(dtype=float)


def _typical(values: pd.Series) -> Any:
    """The median of numbers (NaN skipped; of whole numbers, rounded down to a whole number, so
    that the reference is a value the column can hold), else the most common value."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        if not values.notna().any():
            return np.nan
        median = float(np.nanmedian(values.to_numpy(dtype=float)))
        return float(np.floor(median)) if pd.api.types.is_integer_dtype(values) else median
    mode = values.mode(dropna=True)
    return mode.iloc[0] if len(mode) else values.iloc[0]


def _filled(values: pd.Series, ref: Any) -> pd.Series:
    """A column like ``values`` (same dtype, categories kept) holding ``ref`` in every row."""
    if isinstance(values.dtype, pd.CategoricalDtype):
        return pd.Series(
            pd.Categorical([ref] * len(values), dtype=values.dtype), index=values.index
        )
    filled = pd.Series(np.full(len(values), ref, dtype=object), index=values.index)
    try:
        return filled.astype(values.dtype)
    except (TypeError, ValueError):
        return filled


def _phrase(
    feature: str, value: Any, ref: Any, phrases: Sequence[Phrase], cause: str | None = None
) -> str:
    try:
        high = bool(float(value) > float(ref))
        numeric = True
    except (TypeError, ValueError):
        high, numeric = True, False
    if numeric:
        value = float(value)
    for phrase in phrases:
        words = phrase.words(feature, value, ref, high, cause)
        if words is not None:
            return words
        if re.fullmatch(phrase.pattern, feature):
            break  # the first matching pattern decides; no words for this direction
    if not numeric:
        return f"{feature} is {value}"
    return f"{feature} is {'high' if high else 'low'} ({value:.3g})"


def _is_one(value: Any) -> bool:
    try:
        return float(value) == 1.0
    except (TypeError, ValueError):
        return False
