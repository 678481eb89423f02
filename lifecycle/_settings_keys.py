"""Every section and key of ``lifecycle.toml``, declared once (see `lifecycle._settings`).

``lifecycle settings`` prints them as a documented template; `lifecycle.config.load_config`
checks a file against them before any work. To add a setting, add a `Key` to its section here
(``Key(name, kind, default, meaning, check)``); the stage that uses it reads it from
``config.raw`` (validated) or with ``setting(config, "section.key")``. A test compares the
defaults here with the stages' own (the model families' ``get_params()`` among them).
"""

from __future__ import annotations

from ._settings import (
    FLAG,
    NUMBER,
    NUMBER_OR_INF,
    NUMBERS,
    PHRASE,
    TEXT,
    TEXT_OR_TEXTS,
    TEXTS,
    VALUE_OR_VALUES,
    WHOLE,
    WHOLES_BY_TEXT,
    Check,
    Key,
    Kind,
    Section,
    above,
    at_least,
    between,
    both,
    choice,
    each,
    one_of,
    unique,
)

TABLE_NAMES = ("customers", "activity", "uptakes", "areas", "campaigns")
REASONS = ("churn", "move_out", "other")
ARMS = ("offered", "held_out")
OVERLAP_RULES = ("refuse", "smallest", "first_id")
FAMILIES = ("cox", "forest", "boosted")
MAX_HORIZON_MONTHS = 120
_SEED = between(0, 2**32 - 1)
_FRACTION = between(0, 1, low_open=True)
_HORIZON = between(1, MAX_HORIZON_MONTHS)
_MONTH = Check("of the form YYYY-MM (e.g. 2026-11)", lambda v: _is_month(v))
_INSIDE = Check(
    "naming a file inside the data folder (no '..'), or an absolute path",
    lambda v: _inside(v),
)


def _is_month(text: str) -> bool:
    parts = text.split("-")
    return (
        len(parts) == 2 and len(parts[0]) == 4 and len(parts[1]) == 2
        and all(p.isdigit() for p in parts) and 1 <= int(parts[1]) <= 12
    )  # fmt: skip


def _inside(text: str) -> bool:
    from pathlib import PurePath, PurePosixPath, PureWindowsPath

    if PurePosixPath(text).is_absolute() or PureWindowsPath(text).is_absolute():
        return True
    depth = 0
    for part in PurePath(text.replace("\\", "/")).parts:
        depth += -1 if part == ".." else (0 if part == "." else 1)
        if depth < 0:
            return False
    return text.strip() != ""


def _table(name: str) -> Key:
    return Key(name, TEXT, None, f"file of the {name} table, or its DuckDB table or view",
               _INSIDE, example=f"{name}.csv" if name != "areas" else "areas.gpkg")  # fmt: skip


def _columns(table: str) -> Section:
    return Section(
        f"columns.{table}",
        f"column names of the {table} table: our name = your name",
        open=(Key("<our name>", TEXT, None, "your column holding our column of that name"),),
        examples=('customer_id = "account_no"',),
    )


_WORDS_TO_FLAGS = Kind(
    'a table of texts (your word = "1" or "0")',
    lambda v: (
        isinstance(v, dict) and all(isinstance(x, str) and str(k).strip() for k, x in v.items())
    ),
)

_DATA = Section("data", "the data as a whole", (
    Key("extract_month", TEXT, None, "last month the data covers (default: the last month in "
        "which any row of the data is dated)", _MONTH, example="2026-11"),
    Key("premise_crs", TEXT, None, "CRS of the customers' x, y columns (not needed with lon, "
        "lat)", example="EPSG:32625"),
    Key("areas_crs", TEXT, None, "CRS of areas read from DuckDB as WKT text",
        example="EPSG:32625"),
    Key("blank_end_reason", TEXT, None, "the end reason of a customer who left with a blank "
        "end_reason (default: refused)", choice(*REASONS), example="other"),
    Key("flag_words", _WORDS_TO_FLAGS, {}, "your words for a set (\"1\") or unset (\"0\") "
        "flag, any case, beside 1/0, true/false, yes/no, Y/N",
        each(choice("1", "0")), example={"J": "1", "N": "0"}),
))  # fmt: skip

_TABLES = Section(
    "tables",
    "where each table is, relative to the data folder (default: <name>.csv / .parquet, areas "
    ".gpkg / .geojson / .parquet, or the DuckDB table of that name)",
    tuple(_table(name) for name in TABLE_NAMES),
)

_REASONS = Section(
    "reasons",
    "your end-reason codes onto ours",
    open=(Key("<code>", TEXT, None, "the end reason it means", choice(*REASONS)),),
    examples=('SW = "churn"', 'MV = "move_out"'),
)

_TEXTS_BY_TEXT = Kind(
    'a table of texts (key = "text")',
    lambda v: isinstance(v, dict) and all(isinstance(x, str) for x in v.values()),
)

_PANEL = Section("panel", "the customer-month panel", (
    Key("window_months", WHOLE, 48, "months of history in the panel, ending at as_of",
        at_least(1)),
    Key("not_features", TEXT_OR_TEXTS, ["do_not_contact", "hardship"],
        "customer columns kept out of the models; the decision flags ([plan] exclude, "
        "consent_column, do_not_contact, hardship) always are"),
    Key("trailing_sums", WHOLES_BY_TEXT, {}, "activity column = months summed before each "
        "month (lagged), e.g. { complaints = 3 }", each(at_least(1))),
    Key("known_future", _TEXTS_BY_TEXT, {}, "feature = schedule of its future values when "
        'predicting months ahead: "countdown", "countup", "within:<countdown column>:<k>", '
        '"upto:<countdown column>:<k>", "until:<countdown column>"'),
))  # fmt: skip

_SPATIAL = Section("spatial", "spatial context", (
    Key("radii_m", NUMBERS, [400], "nearby-adoption radii in metres (boundary inclusive)",
        both(each(above(0)), unique())),
    Key("distance_crs", TEXT, None, "projected CRS for distances (default: the premise CRS "
        "if projected, else the UTM zone of the premises)", example="EPSG:32630"),
    Key("nearest_area_max_m", NUMBER, 0, "> 0: a premise outside every area takes the "
        "nearest area within this distance instead of being an error", at_least(0)),
    Key("move_rate_months", WHOLE, 12, "trailing window of the local move rate, months",
        at_least(1)),
    Key("overlaps", TEXT, "refuse", "premises in overlapping areas: refuse, or take the "
        "smallest area, or the first area id", choice(*OVERLAP_RULES)),
))  # fmt: skip

_FORMATS = Section(
    "formats",
    "date formats (Python strftime) beside the ones always read (YYYY-MM, YYYY-MM-DD, ISO "
    "date-time): per table, or per column as \"<table>.<column>\" (the column wins)",
    open=(Key("<table>", one_of(TEXT, _TEXTS_BY_TEXT), None, "the date format of the table's "
              "month columns (or a table column = format)"),),
    examples=('customers = "%d/%m/%Y"', '"activity.month" = "%m/%Y"'),
)  # fmt: skip

_CAMPAIGNS = Section("campaigns", "the export's campaign codes onto ours", (
    Key("offers", _TEXTS_BY_TEXT, {}, "your offer codes onto [[offers]] names, e.g. "
        '{ WINBACK10 = "loyalty_credit" }'),
    Key("arms", _TEXTS_BY_TEXT, {}, "your arm labels onto offered / held_out, e.g. "
        '{ T = "offered", C = "held_out" }', each(choice(*ARMS))),
))  # fmt: skip

_MODELS = (
    Section("models", "what every family's fit needs", (
        Key("min_events", WHOLE, 5, "events of each cause a fitting window must hold at least "
            "(0: a cause without events is let through, with hazard 0)", at_least(0)),
    )),
    Section("models.cox", "hyperparameters of the cause-specific Cox family", (
        Key("penalizer", NUMBER, 0.0, "ridge penalty on the coefficients", at_least(0)),
        Key("sample_fraction", NUMBER, None, "share of non-event rows kept (default: by "
            "max_rows)", _FRACTION, example=0.25),
        Key("max_rows", WHOLE, 1_500_000, "rows fitted per cause at most, about (events all "
            "kept, the others sampled and weighted)", at_least(1000)),
        Key("random_state", WHOLE, 0, "seed of the row sample", _SEED),
        Key("baseline_min_events", NUMBER, 20, "events the smoothing window of each tenure "
            "month's baseline hazard must hold (0: raw Breslow steps)", at_least(0)),
    )),
    Section("models.forest", "hyperparameters of the survival-forest family", (
        Key("horizon", WHOLE, None, "months followed after each landmark (default: the "
            "longest horizon a later step needs: scores 12, [value] and [forecast] "
            "horizon_months)", _HORIZON, example=36),
        Key("landmark_every", WHOLE, 3, "months between landmarks", at_least(1)),
        Key("max_landmarks", WHOLE, 12, "latest landmarks used at most", at_least(1)),
        Key("max_rows", WHOLE, 20_000, "landmark rows one forest is grown on at most",
            at_least(10)),
        Key("n_estimators", WHOLE, 100, "trees per forest", at_least(1)),
        Key("max_depth", WHOLE, 10, "depth of a tree at most", at_least(1)),
        Key("min_samples_leaf", WHOLE, 100, "landmark rows in a leaf at least", at_least(1)),
        Key("max_features", one_of(
            TEXT, WHOLE, NUMBER, describe='"sqrt", "log2", a whole number >= 1 or a fraction '
            'in (0, 1]'), "sqrt", "features tried at each split",
            Check("", lambda v: v in ("sqrt", "log2") if isinstance(v, str) else (
                v >= 1 if isinstance(v, int) else 0 < v <= 1))),
        Key("max_samples", one_of(WHOLE, NUMBER, describe="a whole number >= 1 or a fraction "
            "in (0, 1]"), None, "rows drawn for each tree (default: as many as there are)",
            Check("", lambda v: v >= 1 if isinstance(v, int) else 0 < v <= 1), example=0.5),
        Key("n_jobs", WHOLE, None, "processes growing trees (-1: every core; default one)",
            Check("other than 0", lambda v: v != 0), example=1),
        Key("importance_rows", WHOLE, 2_000, "landmark rows held out for permutation "
            "importances (0: none)", at_least(0)),
        Key("importance_repeats", WHOLE, 3, "permutations per feature", at_least(1)),
        Key("random_state", WHOLE, 0, "seed of landmarks, hold-out and forests", _SEED),
    )),
    Section("models.boosted", "hyperparameters of the boosted discrete-time family", (
        Key("horizon", WHOLE, 12, "longest lag in months between features and the month "
            "learned", _HORIZON),
        Key("max_iter", WHOLE, 300, "boosting rounds at most", at_least(1)),
        Key("learning_rate", NUMBER, 0.05, "shrinkage of each round", above(0)),
        Key("max_leaf_nodes", WHOLE, 15, "leaves of a tree at most", at_least(2)),
        Key("min_samples_leaf", WHOLE, 200, "rows in a leaf at least", at_least(1)),
        Key("l2_regularization", NUMBER, 1.0, "L2 penalty on leaf values", at_least(0)),
        Key("max_depth", WHOLE, None, "depth of a tree at most (default: no limit)",
            at_least(1), example=6),
        Key("sample_fraction", NUMBER, None, "share of non-event rows kept (default: by "
            "max_rows)", _FRACTION, example=0.25),
        Key("max_rows", WHOLE, 2_000_000, "rows a classifier is fitted on at most, about",
            at_least(1000)),
        Key("early_stopping", one_of(FLAG, TEXT, describe='"auto", true or false'), "auto",
            "stop when the held-out loss stops improving (auto: above 10,000 rows)",
            Check("", lambda v: v in ("auto", True, False))),
        Key("validation_fraction", NUMBER, 0.15, "share of customers held out for early "
            "stopping", between(0, 1, low_open=True, high_open=True)),
        Key("n_iter_no_change", WHOLE, 15, "rounds without improvement before stopping",
            at_least(1)),
        Key("tol", NUMBER, 1e-7, "improvement that counts", at_least(0)),
        Key("n_threads", WHOLE, None, "OpenMP threads (default: every core)", at_least(1),
            example=1),
        Key("random_state", WHOLE, 0, "seed of lags, samples and classifiers", _SEED),
    )),
)  # fmt: skip

_OFFERS = (
    Section("offers", "one table per offer", many=True, keys=(
        Key("name", TEXT, None, "letters, digits and _, starting with a letter; unique",
            Check("starting with a letter, then letters, digits or _", lambda v: (
                v[:1].isascii() and v[:1].isalpha()
                and all(c.isascii() and (c.isalnum() or c == "_") for c in v))),
            required=True, example="loyalty_credit"),
        Key("target", TEXT, None, "churn | move_out | uptake_<product>", required=True,
            example="churn"),
        Key("cost", NUMBER, None, "cost of one contact (currency)", at_least(0),
            required=True, example=25.0),
        Key("hazard_ratio", NUMBER, None, "the target's monthly hazard is multiplied by "
            "this for `months` months (retention: in (0, 1]; uptake: >= 1)", above(0),
            required=True, example=0.7),
        Key("months", WHOLE, None, "how many months the effect lasts", at_least(1),
            required=True, example=6),
        Key("value_per_uptake", NUMBER, 0.0, "uptake offers only (required there): value of "
            "one more adopter, a lump sum in the month of uptake", at_least(0)),
        Key("cooldown_months", WHOLE, 3, "not contacted if the last contact was this recent",
            at_least(0)),
        Key("weekly_capacity", WHOLE, None, "contacts of this offer per week (default: no "
            "limit)", at_least(0), example=400),
    )),
    Section("offers.eligible", "who may get the offer above; every rule must hold",
            (Key("not_holding", TEXT_OR_TEXTS, [], "product(s) the customer must not hold"),
             Key("holding", TEXT_OR_TEXTS, [], "product(s) the customer must hold")),
            open=(Key("min_<column>", NUMBER, None, "the column must be >= this (tenure: "
                      "months as a customer)"),
                  Key("max_<column>", NUMBER, None, "the column must be <= this")),
            examples=("min_tenure = 6",)),
    Section("offers.eligible.segments", "columns whose value must be among those listed",
            open=(Key("<column>", VALUE_OR_VALUES, None, "the values allowed"),),
            examples=("plan_speed = [100, 300]",)),
    Section("plan", "the contact plan", (
        Key("budget", NUMBER_OR_INF, None, "total cost of the plan's contacts at most "
            "(required to make a plan)", at_least(0), example=20000.0),
        Key("weeks", WHOLE, 4, "weeks in the plan period", at_least(1)),
        Key("solver", TEXT, "auto", "exact, greedy, or auto (exact up to "
            "max_exact_customers)", choice("auto", "exact", "greedy")),
        Key("max_exact_customers", WHOLE, 50_000, "candidate customers the exact solver "
            "takes at most", at_least(0)),
        Key("time_limit_s", NUMBER, 60.0, "seconds the exact solver may take", above(0)),
        Key("mip_gap", NUMBER, 1e-4, "relative gap at which the exact solver may stop",
            at_least(0)),
        Key("urgency", TEXT, "cif_{target}_3m", "column ranking an offer's contacts ({target}: "
            "the offer's target)"),
        Key("exclude", TEXT_OR_TEXTS, ["do_not_contact", "hardship"], "further flag columns: a "
            "flagged customer is never selected (do_not_contact and hardship always are)"),
        Key("flags_absent", TEXT_OR_TEXTS, [], "decision flags (do_not_contact, hardship) this "
            "portfolio does not have; otherwise a missing flag column is an input error"),
        Key("consent_column", TEXT, None, "a marketing opt-in flag column: only opted-in "
            "customers are eligible", example="marketing_opt_in"),
        Key("reasons", WHOLE, 3, "reasons per plan row (0: none)", at_least(0)),
        Key("area_reasons", FLAG, False, "give area attributes (rental share, local move "
            "rate, ...) to staff as reasons; off by default, as they can act as proxies for "
            "protected characteristics"),
        Key("contact_when_harmful", FLAG, False, "plan a customer for an offer predicted to "
            "harm it (own effect raising the target's risk); off by default"),
    )),
    Section("reason_phrases", "words for reasons: feature pattern (regular expression) = phrase",
            open=(Key("<pattern>", PHRASE, None, "the phrase when the value is high, or both "
                      "directions ({value}, {reference}, {feature}, {s}, named groups)"),),
            examples=('"contract_ending" = "contract ends within 2 months"',)),
)  # fmt: skip

_STAGES = (
    Section("value", "lifetime value", (
        Key("annual_discount", NUMBER, 0.08, "yearly discount rate a (monthly d = (1 + "
            "a)^(1/12) - 1)", between(0, 1, high_open=True)),
        Key("horizon_months", WHOLE, 36, "months of margin counted", _HORIZON),
        Key("currency", TEXT, "", "currency of monthly_margin and the offers' costs, named in "
            "the report, key figures and CSV headers (blank: unnamed)", Check(
                "of at most 8 characters without surrounding spaces",
                lambda v: len(v) <= 8 and v == v.strip())),
        Key("customer_effects", FLAG, True, "learn each customer's own effect of an offer from "
            "its past randomised campaign and plan by it (false: one ratio for everyone)"),
        Key("effect_features", TEXT_OR_TEXTS, [], "panel columns the own effects are learnt on "
            "(default: every numeric feature except area, nearby, past-offer and season ones)"),
    )),
    Section("evaluation", "campaign metrics in the backtest (`qini`, `emp`)", (
        Key("emp_clv", NUMBER, 200.0, "expected maximum profit: lifetime value of a churner "
            "kept (currency)", above(0)),
        Key("emp_incentive_cost", NUMBER, 10.0, "expected maximum profit: cost of the "
            "incentive to a customer who accepts it", at_least(0)),
        Key("emp_contact_cost", NUMBER, 1.0, "expected maximum profit: cost of one contact",
            at_least(0)),
        Key("emp_alpha", NUMBER, 6.0, "expected maximum profit: alpha of the beta law of the "
            "acceptance rate", above(0)),
        Key("emp_beta", NUMBER, 14.0, "expected maximum profit: beta of that law", above(0)),
        Key("qini_min_rows", WHOLE, 200, "fewer customers followed up in a campaign: no "
            "`qini` row (logged)", at_least(2)),
        Key("effect_features", TEXTS, [], "numeric panel columns the per-customer offer "
            "effect is learnt from (none: no `qini` row)", unique()),
    )),
    Section("forecast", "the uptake forecast", (
        Key("horizon_months", WHOLE, 12, "months forecast", _HORIZON),
        Key("levels", NUMBERS, [0.9], "prediction-interval levels (0.9: lower_90, upper_90)",
            each(between(0, 1, low_open=True, high_open=True))),
        Key("method", TEXT, "auto", "how the Poisson-binomial is computed",
            choice("auto", "exact", "rna")),
        Key("exact_max", WHOLE, 20_000, "auto computes groups up to this size exactly",
            at_least(0)),
        Key("joiners", FLAG, True, "add the uptakes of customers who join during the horizon"),
        Key("joiner_months", WHOLE, 36, "months of joiner counts fitted, ending at as_of",
            between(1, 240)),
        Key("joiner_trend", FLAG, True, "joiner counts with a log-linear trend (with >= 12 "
            "months)"),
        Key("draws", WHOLE, 200, "draws of what is not known about the models (hazard level, "
            "its drift, joiner coefficients) mixed into the intervals; 0: outcome noise only",
            between(0, 10_000)),
        Key("seed", WHOLE, 0, "seed of those draws and of the joiners' template sample", _SEED),
        Key("level_trend", FLAG, True, "carry the recent trend of the uptake rate that the "
            "models' held features lack (observed slope minus the forecast's own)"),
    )),
    Section("forecast.launch", "a launch without history (`lifecycle forecast --launch-month`) "
            "when no comparable product is given: the Bass model's coefficients", (
        Key("innovation", NUMBER, None, "Bass p, per month", above(0), required=True,
            example=0.01),
        Key("imitation", NUMBER, None, "Bass q, per month", at_least(0), required=True,
            example=0.3),
        Key("market_share", NUMBER, None, "share of customers who eventually take it up",
            between(0, 1, low_open=True), required=True, example=0.2),
    )),
    Section("run", "`lifecycle run`: the monthly cycle", (
        Key("families", TEXTS, ["cox", "boosted", "forest"], "families compared in the "
            "backtest (the tenure life table always is)", both(Check("non-empty", bool),
                                                  each(choice(*FAMILIES)))),
        Key("cutoffs", WHOLE, 2, "past cutoffs in the backtest, 3 months apart; champions "
            "are chosen on all but the latest, whose score is reported (held out)",
            at_least(1)),
        Key("switch_margin", NUMBER, 0.005, "a cause's champion changes from last month's "
            "family only when another's mean Uno's C is higher by more than this",
            between(0, 1, high_open=True)),
        Key("refit_months", WHOLE, 1, "refit when the saved model is this many months old",
            at_least(1)),
        Key("backtest_months", WHOLE, 1, "redo the backtest this often, months", at_least(1)),
        Key("reports", TEXT, "reports", "month folders go to <reports>/<YYYY-MM>/ (relative to "
            "the config's folder)"),
        Key("history", TEXT, None, "score history (default: <reports>/history.duckdb)",
            example="reports/history.duckdb"),
        Key("work", TEXT, ".lifecycle-work", "saved models, cached steps and the staging "
            "folder"),
    )),
    Section("compute", "a Dask cluster for scoring and forecasting", (
        Key("scheduler", TEXT, None, "address of a running scheduler; its workers need "
            "lifecycle and the data folder at the same path", example="tcp://10.0.0.5:8786"),
        Key("workers", WHOLE, None, "without a scheduler: a local cluster of this many "
            "processes", at_least(1), example=4),
        Key("partition_customers", WHOLE, 100_000, "customers per partition", at_least(1)),
    )),
)  # fmt: skip

SECTIONS: tuple[Section, ...] = (
    _DATA, _TABLES, *(_columns(t) for t in TABLE_NAMES), _REASONS, _FORMATS, _CAMPAIGNS,
    _PANEL, _SPATIAL,
    *_MODELS, *_OFFERS, *_STAGES,
)  # fmt: skip
