"""Offers and the plan's settings, read from ``lifecycle.toml``.

The format, section by section (every ``[[offers]]`` table is one offer; ``lifecycle settings``
prints every setting)::

    [[offers]]
    name = "loyalty_credit"      # letters, digits and _, starting with a letter; unique
    target = "churn"             # churn | move_out | uptake_<product>
    cost = 25.0                  # cost of one contact (currency), >= 0
    hazard_ratio = 0.7           # the effect: the target cause's monthly hazard h becomes
                                 # hazard_ratio * h in months 1..months after the contact.
                                 # Retention offers (churn, move_out): 0 < hazard_ratio <= 1;
                                 # uptake offers: hazard_ratio >= 1
    months = 6                   # how many months the effect lasts, >= 1
    value_per_uptake = 180.0     # uptake offers only, and required there: the value (currency)
                                 # of one more customer taking the product up within the
                                 # horizon, a lump sum credited in the month of uptake (to value
                                 # a monthly product margin g, put its present value here)
    cooldown_months = 3          # default 3: not contacted if the last contact (any offer) was
                                 # in one of the cooldown_months months before the plan month
    weekly_capacity = 400        # contacts of this offer per week; leave out for no limit

    [offers.eligible]            # eligibility of the offer above; every rule must hold
    min_tenure = 6               # min_<column> = v: column >= v;  max_<column> = v: column <= v,
    max_tenure = 120             #   for any numeric column of the planning frame (the snapshot
    min_cif_churn_3m = 0.02      #   with its scores); "tenure" means the snapshot's
                                 #   tenure_start (whole months as a customer at as_of).
                                 #   A missing value (NaN) is never eligible.
    not_holding = "backup_line"  # product(s) the customer must not hold: holds_<product> = 0
    holding = []                 # product(s) the customer must hold: holds_<product> = 1

    [offers.eligible.segments]   # column = allowed values (text or numbers)
    plan_speed = [100, 300]

    [plan]
    budget = 20000.0             # required: total cost of the plan's contacts <= budget
    weeks = 4                    # weeks in the plan period (capacity = weekly_capacity * weeks)
    solver = "auto"              # auto | exact | greedy
    max_exact_customers = 50000  # auto: the exact solver up to this many candidate customers
                                 # (customers with an allowed offer of positive value), else
                                 # the greedy; both report the optimality gap
    time_limit_s = 60.0          # time limit of the exact solver (then its best plan is used)
    mip_gap = 1e-4               # relative gap at which the exact solver may stop
    urgency = "cif_{target}_3m"  # column ranking an offer's contacts, most urgent first;
                                 # {target} is replaced by the offer's target cause
    exclude = []                 # flag columns added to do_not_contact and hardship, which
                                 # are always excluded: a flagged customer is never selected
    flags_absent = []            # flags the portfolio does not keep (e.g. ["hardship"]); any
                                 # other missing flag column is an input error
    consent_column = ""          # e.g. "marketing_opt_in": only customers with it set (1, true,
                                 # yes) may be planned; blank: no consent column
    reasons = 3                  # reasons per plan row (0: none)
    area_reasons = false         # true: area attributes (the areas table's columns, the local
                                 # move rate) may be given to staff as reasons; by default they
                                 # are not, as they can act as proxies for protected
                                 # characteristics (they still count in every hazard)
    contact_when_harmful = false # true: a customer an offer is predicted to harm (own effect
                                 # raising the target's risk) may still be planned for it

Phrases for reasons live in ``[reason_phrases]`` (see `lifecycle.decisions._reasons`).
Malformed settings raise `UsageError` naming the setting, the value and what is allowed.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from .._months import months_to_index
from ..config import Config
from ..errors import InputError, UsageError

__all__ = [
    "Eligibility",
    "Offer",
    "PlanSettings",
    "cooldown_ok",
    "eligible_mask",
    "excluded_mask",
    "last_contact_months",
    "offers_from_config",
    "plan_settings_from_config",
]

RETENTION_TARGETS = ("churn", "move_out")
UPTAKE_PREFIX = "uptake_"
SOLVERS = ("auto", "exact", "greedy")
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
_OFFER_KEYS = {
    "name",
    "target",
    "cost",
    "hazard_ratio",
    "months",
    "value_per_uptake",
    "cooldown_months",
    "weekly_capacity",
    "eligible",
}
_PLAN_KEYS = {
    "budget",
    "weeks",
    "solver",
    "max_exact_customers",
    "time_limit_s",
    "mip_gap",
    "urgency",
    "exclude",
    "flags_absent",
    "consent_column",
    "reasons",
    "area_reasons",
    "contact_when_harmful",
}
_TRUE = {"1", "true", "yes", "y", "t"}
_FALSE = {"", "0", "false", "no", "n", "f"}


@dataclass(frozen=True)
class Eligibility:
    """Who may receive an offer: every rule must hold.

    Attributes
    ----------
    minimum, maximum
        Column → inclusive lower / upper threshold (``tenure`` means ``tenure_start`` when the
        frame has no ``tenure`` column). A missing value is never eligible.
    not_holding, holding
        Products: ``holds_<product>`` must be 0 / 1.
    segments
        Column → allowed values.
    """

    minimum: dict[str, float] = field(default_factory=dict)
    maximum: dict[str, float] = field(default_factory=dict)
    not_holding: tuple[str, ...] = ()
    holding: tuple[str, ...] = ()
    segments: dict[str, tuple[Any, ...]] = field(default_factory=dict)


@dataclass(frozen=True)
class Offer:
    """One offer: what it targets, what it costs, what it does and to whom it may go.

    The effect multiplies the monthly hazard of ``target`` by ``hazard_ratio`` in months
    1..``months`` after the contact. For an uptake offer, ``value_per_uptake`` is the value of
    one more customer taking the product up (a lump sum in the month of uptake).
    ``effect_interval`` is the 95 % interval of ``hazard_ratio`` when it was estimated from
    past campaigns (``None``: the ratio is the configured one).
    """

    name: str
    target: str
    cost: float
    hazard_ratio: float
    months: int
    value_per_uptake: float = 0.0
    cooldown_months: int = 3
    weekly_capacity: int | None = None
    eligible: Eligibility = field(default_factory=Eligibility)
    effect_interval: tuple[float, float] | None = None

    def __post_init__(self) -> None:
        where = f"offer {self.name!r}"
        if not isinstance(self.name, str) or not _NAME.match(self.name):
            raise UsageError(
                f"offer name was {self.name!r} but must start with a letter and hold only "
                "letters, digits and _"
            )
        if self.target not in RETENTION_TARGETS and not (
            self.target.startswith(UPTAKE_PREFIX) and len(self.target) > len(UPTAKE_PREFIX)
        ):
            raise UsageError(
                f"{where}: target was {self.target!r} but is expected to be one of "
                f"{list(RETENTION_TARGETS)} or 'uptake_<product>'"
            )
        _check_number(where, "cost", self.cost, low=0.0)
        _check_number(where, "hazard_ratio", self.hazard_ratio, low=0.0, strict=True)
        _check_whole(where, "months", self.months, low=1)
        _check_whole(where, "cooldown_months", self.cooldown_months, low=0)
        if self.weekly_capacity is not None:
            _check_whole(where, "weekly_capacity", self.weekly_capacity, low=0)
        _check_number(where, "value_per_uptake", self.value_per_uptake, low=0.0)

    @property
    def is_uptake(self) -> bool:
        """True for an offer on ``uptake_<product>``."""
        return self.target.startswith(UPTAKE_PREFIX)

    @property
    def product(self) -> str | None:
        """The product of an uptake offer, else ``None``."""
        return self.target.removeprefix(UPTAKE_PREFIX) if self.is_uptake else None

    def capacity(self, weeks: int) -> float:
        """Contacts allowed in a plan of ``weeks`` weeks: ``weekly_capacity * weeks`` (inf if
        there is no limit)."""
        return math.inf if self.weekly_capacity is None else float(self.weekly_capacity * weeks)


@dataclass(frozen=True)
class PlanSettings:
    """The ``[plan]`` section (see the module docstring for each setting)."""

    budget: float
    weeks: int = 4
    solver: str = "auto"
    max_exact_customers: int = 50_000
    time_limit_s: float = 60.0
    mip_gap: float = 1e-4
    urgency: str = "cif_{target}_3m"
    exclude: tuple[str, ...] = ("do_not_contact", "hardship")
    reasons: int = 3
    flags_absent: tuple[str, ...] = ()
    consent_column: str | None = None
    area_reasons: bool = False
    contact_when_harmful: bool = False

    def __post_init__(self) -> None:
        where = "[plan]"
        _check_number(where, "budget", self.budget, low=0.0, finite=False)
        _check_whole(where, "weeks", self.weeks, low=1)
        if self.solver not in SOLVERS:
            raise UsageError(
                f"[plan] solver was {self.solver!r} but is expected to be in {list(SOLVERS)}"
            )
        _check_whole(where, "max_exact_customers", self.max_exact_customers, low=0)
        _check_number(where, "time_limit_s", self.time_limit_s, low=0.0, strict=True)
        _check_number(where, "mip_gap", self.mip_gap, low=0.0)
        _check_whole(where, "reasons", self.reasons, low=0)
        for key in ("exclude", "flags_absent"):
            value = getattr(self, key)
            if isinstance(value, str):  # one name, not a sequence of its letters
                value = (value,)
                object.__setattr__(self, key, value)
            if not all(isinstance(v, str) and v for v in value):
                raise UsageError(f"[plan] {key} was {value!r} but must be a list of column names")
        stray = sorted(set(self.flags_absent) - set(self.exclusions))
        if stray:
            raise UsageError(
                f"[plan] flags_absent names {stray}, which are not exclusion flags; allowed are "
                f"{list(self.exclusions)}"
            )
        if self.consent_column is not None and not (
            isinstance(self.consent_column, str) and self.consent_column
        ):
            raise UsageError(
                f"[plan] consent_column was {self.consent_column!r} but must be a column name"
            )
        if "{target}" not in self.urgency and "{" in self.urgency:
            raise UsageError(
                f"[plan] urgency was {self.urgency!r}; the only placeholder allowed is {{target}}"
            )

    @property
    def exclusions(self) -> tuple[str, ...]:
        """Every exclusion flag: ``do_not_contact``, ``hardship`` (always) and ``exclude``."""
        from ._exclusions import exclusion_columns

        return exclusion_columns(self.exclude)

    def urgency_column(self, offer: Offer) -> str:
        """The urgency column of ``offer`` (``urgency`` with ``{target}`` filled in)."""
        return self.urgency.replace("{target}", offer.target)


# -- reading the config ---------------------------------------------------------------------
def offers_from_config(config: Config) -> tuple[Offer, ...]:
    """The ``[[offers]]`` of a config, in file order (empty when there are none)."""
    src = _source(config)
    raw = config.raw.get("offers", [])
    if isinstance(raw, dict):
        raise UsageError(f"{src}: offers must be written as [[offers]] tables, one per offer")
    if not isinstance(raw, list):
        raise UsageError(f"{src}: offers must be [[offers]] tables, not {raw!r}")
    offers = []
    for position, entry in enumerate(raw, start=1):
        offers.append(_offer(entry, src, position))
    names = [o.name for o in offers]
    repeated = sorted({n for n in names if names.count(n) > 1})
    if repeated:
        raise UsageError(f"{src}: offer names must be unique; repeated: {repeated}")
    return tuple(offers)


def plan_settings_from_config(config: Config) -> PlanSettings:
    """The ``[plan]`` section of a config; ``budget`` is required."""
    src = _source(config)
    raw = config.raw.get("plan")
    if raw is None:
        raise UsageError(f"{src}: a [plan] section with a budget is needed to make a plan")
    if not isinstance(raw, dict):
        raise UsageError(f"{src}: [plan] must be a table of settings")
    _unknown(raw, _PLAN_KEYS, f"{src}: [plan]")
    if "budget" not in raw:
        raise UsageError(
            f"{src}: [plan] budget is missing; set the total cost allowed, e.g. 20000.0"
        )
    kwargs: dict[str, Any] = {}
    for key in ("budget", "time_limit_s", "mip_gap"):
        if key in raw:
            kwargs[key] = _number(raw[key], f"{src}: [plan] {key}")
    for key in ("weeks", "max_exact_customers", "reasons"):
        if key in raw:
            kwargs[key] = _whole(raw[key], f"{src}: [plan] {key}")
    for key in ("solver", "urgency"):
        if key in raw:
            kwargs[key] = _text(raw[key], f"{src}: [plan] {key}")
    for key in ("area_reasons", "contact_when_harmful"):
        if key in raw and not isinstance(raw[key], bool):
            raise UsageError(f"{src}: [plan] {key} was {raw[key]!r} but must be true or false")
        if key in raw:
            kwargs[key] = raw[key]
    if "exclude" in raw:
        kwargs["exclude"] = _texts(raw["exclude"], f"{src}: [plan] exclude")
    if "flags_absent" in raw:
        kwargs["flags_absent"] = _texts(raw["flags_absent"], f"{src}: [plan] flags_absent")
    if raw.get("consent_column"):
        kwargs["consent_column"] = _text(raw["consent_column"], f"{src}: [plan] consent_column")
    try:
        return PlanSettings(**kwargs)
    except UsageError as exc:
        raise UsageError(f"{src}: {exc}") from None


def _offer(entry: Any, src: str, position: int) -> Offer:
    where = f"{src}: [[offers]] #{position}"
    if not isinstance(entry, dict):
        raise UsageError(f"{where} must be a table of settings")
    _unknown(entry, _OFFER_KEYS, where)
    missing = [k for k in ("name", "target", "cost", "hazard_ratio", "months") if k not in entry]
    if missing:
        raise UsageError(f"{where} lacks the required setting(s) {missing}")
    name = _text(entry["name"], f"{where} name")
    where = f"{src}: offer {name!r}"
    target = _text(entry["target"], f"{where} target")
    hr = _number(entry["hazard_ratio"], f"{where} hazard_ratio")
    is_uptake = target.startswith(UPTAKE_PREFIX)
    if is_uptake and hr < 1.0:
        raise UsageError(
            f"{where}: hazard_ratio was {hr} but an uptake offer raises its hazard: use >= 1"
        )
    if not is_uptake and hr > 1.0:
        raise UsageError(
            f"{where}: hazard_ratio was {hr} but a retention offer lowers its hazard: "
            "use a value in (0, 1]"
        )
    if is_uptake and "value_per_uptake" not in entry:
        raise UsageError(
            f"{where}: an uptake offer needs value_per_uptake (the value of one more adopter)"
        )
    if not is_uptake and entry.get("value_per_uptake", 0) != 0:
        raise UsageError(
            f"{where}: value_per_uptake applies to uptake offers only; {target!r} is a "
            "retention target, remove the setting"
        )
    capacity = entry.get("weekly_capacity")
    kwargs = dict(
        name=name,
        target=target,
        cost=_number(entry["cost"], f"{where} cost"),
        hazard_ratio=hr,
        months=_whole(entry["months"], f"{where} months"),
        value_per_uptake=_number(entry.get("value_per_uptake", 0.0), f"{where} value_per_uptake"),
        cooldown_months=_whole(entry.get("cooldown_months", 3), f"{where} cooldown_months"),
        weekly_capacity=None if capacity is None else _whole(capacity, f"{where} weekly_capacity"),
        eligible=_eligibility(entry.get("eligible", {}), f"{where} eligible"),
    )
    try:
        return Offer(**kwargs)
    except UsageError as exc:
        raise UsageError(f"{src}: {exc}") from None


def _eligibility(raw: Any, where: str) -> Eligibility:
    if not isinstance(raw, dict):
        raise UsageError(f"{where} must be a table ([offers.eligible])")
    minimum, maximum, segments = {}, {}, {}
    for key, value in raw.items():
        if key in ("not_holding", "holding"):
            continue
        if key == "segments":
            if not isinstance(value, dict):
                raise UsageError(f"{where}.segments must be a table: column = [allowed values]")
            for column, allowed in value.items():
                values = allowed if isinstance(allowed, list) else [allowed]
                if not values or any(isinstance(v, dict | list) for v in values):
                    raise UsageError(
                        f"{where}.segments.{column} was {allowed!r} but must be a value or a "
                        "non-empty list of values"
                    )
                segments[str(column)] = tuple(values)
        elif key.startswith(("min_", "max_")) and len(key) > 4:
            target = minimum if key.startswith("min_") else maximum
            target[key[4:]] = _number(value, f"{where}.{key}")
        else:
            raise UsageError(
                f"{where} has unknown setting {key!r}; allowed are min_<column>, "
                "max_<column>, not_holding, holding and segments"
            )
    return Eligibility(
        minimum=minimum,
        maximum=maximum,
        not_holding=_texts(raw.get("not_holding", ()), f"{where}.not_holding"),
        holding=_texts(raw.get("holding", ()), f"{where}.holding"),
        segments=segments,
    )


# -- who may be contacted --------------------------------------------------------------------
def eligible_mask(frame: pd.DataFrame, offer: Offer) -> np.ndarray:
    """Boolean mask of the rows of ``frame`` that meet ``offer``'s eligibility rules.

    ``frame`` holds one row per customer: the snapshot's features with the scores (and any
    segment columns). Raises `UsageError` when a rule names a column the frame lacks.
    """
    rules = offer.eligible
    mask = np.ones(len(frame), dtype=bool)

    def column(name: str, setting: str) -> pd.Series:
        if name == "tenure" and "tenure" not in frame and "tenure_start" in frame:
            name = "tenure_start"
        if name not in frame:
            raise UsageError(
                f"offer {offer.name!r}: eligible.{setting} needs the column {name!r}, which the "
                f"planning frame lacks; its columns are {sorted(map(str, frame.columns))}"
            )
        return frame[name]

    for name, low in rules.minimum.items():
        values = _numbers(column(name, f"min_{name}"))
        mask &= values >= low  # NaN compares False: never eligible
    for name, high in rules.maximum.items():
        values = _numbers(column(name, f"max_{name}"))
        mask &= values <= high
    for product in rules.not_holding:
        values = column(f"holds_{product}", "not_holding").to_numpy()
        mask &= values == 0
    for product in rules.holding:
        values = column(f"holds_{product}", "holding").to_numpy()
        mask &= values == 1
    for name, allowed in rules.segments.items():
        values = column(name, f"segments.{name}")
        as_text = {str(v) for v in allowed}
        mask &= values.astype(object).map(lambda v, a=as_text: str(v) in a).to_numpy(bool)
    return mask


def excluded_mask(
    frame: pd.DataFrame, columns: Sequence[str], table: str = "customers"
) -> np.ndarray:
    """Rows flagged in any of ``columns`` (e.g. ``do_not_contact``, ``hardship``).

    A flag is set by a true boolean, a non-zero number or the text 1/true/yes/y/t (any case);
    0, false, no, n, f, blank and missing values are not set. Any other text raises
    `InputError`. A flag column the frame lacks flags nobody (the caller logs it).
    """
    out = np.zeros(len(frame), dtype=bool)
    for name in columns:
        if name not in frame:
            continue
        values = frame[name]
        if pd.api.types.is_bool_dtype(values) or pd.api.types.is_numeric_dtype(values):
            numbers = pd.to_numeric(values, errors="coerce").to_numpy(float)
            out |= np.nan_to_num(numbers, nan=0.0) != 0
            continue
        text = values.astype("string").str.strip().str.lower().fillna("")
        bad = ~text.isin(_TRUE | _FALSE)
        if bad.any():
            ids = frame.loc[bad.to_numpy(), "customer_id"] if "customer_id" in frame else []
            raise InputError(
                table=table,
                column=name,
                problem="flag values must be yes/no, true/false or 1/0; found "
                f"{text[bad].iloc[0]!r}",
                count=int(bad.sum()),
                examples=list(ids),
                fix="write the flag as 1 (set) or 0 (not set)",
            )
        out |= text.isin(_TRUE).to_numpy(bool)
    return out


def last_contact_months(*contacts: pd.DataFrame) -> pd.Series:
    """The month (index, float) of each customer's last contact, from past campaigns and plans.

    Each frame has ``customer_id`` and ``month`` (a month index or ``YYYY-MM``); rows of a
    frame with an ``arm`` column count only where ``arm == "offered"`` (a held-out customer was
    not contacted). Returns a Series indexed by ``customer_id`` (customers never contacted are
    absent).
    """
    parts = []
    for frame in contacts:
        if frame is None or len(frame) == 0:
            continue
        missing = [c for c in ("customer_id", "month") if c not in frame]
        if missing:
            raise UsageError(
                f"a contacts table needs columns customer_id and month; {missing} missing"
            )
        rows = frame if "arm" not in frame else frame[frame["arm"].astype(str) == "offered"]
        month = rows["month"]
        if pd.api.types.is_numeric_dtype(month):
            index = month.to_numpy(float)
        else:
            index, bad = months_to_index(month)
            if bad.any():
                raise InputError(
                    table="contacts",
                    column="month",
                    problem="months must be YYYY-MM",
                    count=int(bad.sum()),
                    examples=rows.loc[bad, "customer_id"],
                )
        parts.append(pd.DataFrame({"customer_id": rows["customer_id"].to_numpy(), "month": index}))
    if not parts:
        return pd.Series(
            [], dtype=float, name="last_contact", index=pd.Index([], name="customer_id")
        )
    both = pd.concat(parts, ignore_index=True).dropna(subset=["month"])
    return both.groupby("customer_id", sort=False)["month"].max().rename("last_contact")


def cooldown_ok(last_contact: np.ndarray, plan_month: int, cooldown_months: int) -> np.ndarray:
    """True where a customer may be contacted in ``plan_month``: never contacted (NaN), or
    ``plan_month − last_contact > cooldown_months``."""
    last = np.asarray(last_contact, dtype=float)
    with np.errstate(invalid="ignore"):
        return np.isnan(last) | (plan_month - last > cooldown_months)


def _numbers(values: pd.Series) -> np.ndarray:
    """A column as float64 (text that is not a number becomes NaN)."""
    if pd.api.types.is_numeric_dtype(values) and not pd.api.types.is_bool_dtype(values):
        return values.to_numpy(dtype=float, na_value=np.nan)
    return pd.to_numeric(values, errors="coerce").to_numpy(dtype=float)


# -- small checks --------------------------------------------------------------------------
def _source(config: Config) -> str:
    return str(config.source) if config.source is not None else "config"


def _unknown(raw: Mapping[str, Any], allowed: set[str], where: str) -> None:
    unknown = sorted(set(raw) - allowed)
    if unknown:
        raise UsageError(f"{where} has unknown setting(s) {unknown}; allowed are {sorted(allowed)}")


def _number(value: Any, what: str) -> float:
    if isinstance(value, bool) or not isinstance(value, int | float):
        raise UsageError(f"{what} was {value!r} but must be a number")
    return float(value)


def _whole(value: Any, what: str) -> int:
    if isinstance(value, bool) or not isinstance(value, int):
        raise UsageError(f"{what} was {value!r} but must be a whole number")
    return int(value)


def _text(value: Any, what: str) -> str:
    if not isinstance(value, str) or not value:
        raise UsageError(f"{what} was {value!r} but must be a non-empty text")
    return value


def _texts(value: Any, what: str) -> tuple[str, ...]:
    values = [value] if isinstance(value, str) else value
    if not isinstance(values, list | tuple) or not all(isinstance(v, str) and v for v in values):
        raise UsageError(f"{what} was {value!r} but must be a text or a list of texts")
    return tuple(values)


def _check_number(
    where: str, name: str, value: Any, *, low: float, strict: bool = False, finite: bool = True
) -> None:
    ok = isinstance(value, int | float) and not isinstance(value, bool) and not math.isnan(value)
    ok = ok and (value > low if strict else value >= low) and (not finite or math.isfinite(value))
    if not ok:
        bound = f"> {low}" if strict else f">= {low}"
        kind = "a finite number" if finite else "a number"
        raise UsageError(f"{where}: {name} was {value!r} but must be {kind} {bound}")


def _check_whole(where: str, name: str, value: Any, *, low: int) -> None:
    if isinstance(value, bool) or not isinstance(value, int | np.integer) or value < low:
        raise UsageError(f"{where}: {name} was {value!r} but must be a whole number >= {low}")
