"""Settings from ``lifecycle.toml``.

The file is optional; every setting has a default. ``lifecycle settings`` prints every section
and key with its kind, default and meaning (generated from the one schema in
`lifecycle._settings_keys`); `load_config` checks the whole file against that schema, and each
stage's own rules, before any work.
"""

from __future__ import annotations

import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from . import _settings
from ._months import parse_month
from ._settings_keys import ARMS as ARMS
from ._settings_keys import OVERLAP_RULES as OVERLAP_RULES
from ._settings_keys import REASONS as REASONS
from ._settings_keys import SECTIONS
from ._settings_keys import TABLE_NAMES as TABLE_NAMES
from .errors import UsageError

__all__ = ["Config", "load_config", "setting"]

#: Decision flags: always kept out of the models and out of every contact plan.
DECISION_FLAGS = ("do_not_contact", "hardship")


@dataclass(frozen=True)
class PanelSettings:
    window_months: int = 48
    not_features: tuple[str, ...] = DECISION_FLAGS
    trailing_sums: dict[str, int] = field(default_factory=dict)
    known_future: dict[str, str] = field(default_factory=dict)

    def __post_init__(self) -> None:
        # The decision flags are never model inputs, whatever the setting lists; a single
        # name given as text is one column, not a sequence of letters.
        names = [self.not_features] if isinstance(self.not_features, str) else self.not_features
        bad = [n for n in names if not isinstance(n, str) or not n]
        if bad:
            raise UsageError(f"[panel] not_features has {bad!r}; each must be a column name")
        object.__setattr__(self, "not_features", tuple(dict.fromkeys([*DECISION_FLAGS, *names])))


@dataclass(frozen=True)
class SpatialSettings:
    radii_m: tuple[float, ...] = (400.0,)
    distance_crs: str | None = None
    nearest_area_max_m: float = 0.0
    move_rate_months: int = 12
    overlaps: str = "refuse"


@dataclass(frozen=True)
class CampaignSettings:
    """``[campaigns]``: the export's offer codes and arm labels onto ours."""

    offers: dict[str, str] = field(default_factory=dict)
    arms: dict[str, str] = field(default_factory=dict)


@dataclass(frozen=True)
class Config:
    """Every setting of a run. Build one with `load_config`, or directly in Python."""

    extract_month: str | None = None
    premise_crs: str | None = None
    areas_crs: str | None = None
    tables: dict[str, str] = field(default_factory=dict)
    columns: dict[str, dict[str, str]] = field(default_factory=dict)
    reasons: dict[str, str] = field(default_factory=dict)
    panel: PanelSettings = field(default_factory=PanelSettings)
    spatial: SpatialSettings = field(default_factory=SpatialSettings)
    formats: dict[str, str] = field(default_factory=dict)
    campaigns: CampaignSettings = field(default_factory=CampaignSettings)
    source: Path | None = None
    raw: dict[str, Any] = field(default_factory=dict)

    def extract_month_index(self) -> int | None:
        """The configured last month the data covers, or ``None``: then `check_tables`
        infers it from the data (never from today's date)."""
        if self.extract_month:
            return parse_month(self.extract_month, what="data.extract_month")
        return None

    def month_format(self, table: str, column: str) -> str | None:
        """The ``[formats]`` date format of a column: ``"<table>.<column>"``, else the table's."""
        return self.formats.get(f"{table}.{column}") or self.formats.get(table)


def setting(config: Config | None, key: str) -> Any:
    """One setting by its dotted name (``"value.horizon_months"``): the file's value (its
    section checked against the schema), else the schema's default (``None`` if none)."""
    name, _, last = key.rpartition(".")
    values = section(config, name)
    return values[last] if last in values else _settings.setting({}, SECTIONS, key)


def section(config: Config | None, name: str) -> dict[str, Any]:
    """The section ``name`` (dotted, e.g. ``"models.cox"``) of ``config``, checked against the
    schema (a config built in Python has not been through `load_config`); ``{}`` if absent."""
    raw = config.raw if config else {}
    table: Any = raw
    for part in name.split("."):
        table = table.get(part, {}) if isinstance(table, dict) else table
    nested: Any = table
    for part in reversed(name.split(".")):
        nested = {part: nested}
    source = str(config.source) if config and config.source else "config"
    _settings.validate(nested, SECTIONS, source)
    return dict(table)


def settings_template(*, examples: bool = False) -> str:
    """The documented ``lifecycle.toml`` of every setting (what ``lifecycle settings`` prints);
    keys without a default are commented out unless ``examples``."""
    return _settings.template(SECTIONS, examples=examples)


def _not_features(raw: dict[str, Any], panel: dict[str, Any]) -> tuple[str, ...]:
    """``[panel] not_features`` plus every flag the plan excludes on and its consent column."""
    given = panel.get("not_features", PanelSettings.not_features)
    names = (
        [given]
        if isinstance(given, str)
        else list(given)
        if isinstance(given, list | tuple)
        else None
    )
    if names is None:
        raise UsageError(f"[panel] not_features was {given!r} but must be a list of column names")
    plan = raw.get("plan", {}) if isinstance(raw.get("plan"), dict) else {}
    extra = plan.get("exclude", [])
    extra = [extra] if isinstance(extra, str) else extra if isinstance(extra, list) else []
    consent = plan.get("consent_column")
    extra = [*extra, *([consent] if isinstance(consent, str) and consent else [])]
    return tuple(dict.fromkeys([*names, *(e for e in extra if isinstance(e, str) and e)]))


def load_config(path: str | Path | None) -> Config:
    """Read a ``lifecycle.toml``; ``None`` gives the defaults.

    The whole file is checked before anything else: against the schema (unknown section or
    key, wrong kind, out-of-range value, required key missing), then each stage's own rules
    across settings (offers, reason phrases, the run's paths). Raises `UsageError` naming the
    file, the section, the key, the value given and what is allowed.
    """
    if path is None:
        return Config()
    path = Path(path)
    if not path.is_file():
        raise UsageError(f"config file {path} does not exist")
    try:
        raw = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as exc:
        raise UsageError(f"{path} is not valid TOML: {exc}") from None
    _settings.validate(raw, SECTIONS, str(path))
    data, panel, spatial = raw.get("data", {}), raw.get("panel", {}), raw.get("spatial", {})
    formats = _formats(raw, path)
    campaigns = _campaigns(raw, path)
    from .panel import check_known_future

    known_future = check_known_future(panel.get("known_future"))
    if data.get("extract_month"):
        parse_month(data["extract_month"], what=f"{path}: [data] extract_month")
    config = Config(
        extract_month=data.get("extract_month"),
        premise_crs=data.get("premise_crs"),
        areas_crs=data.get("areas_crs"),
        tables=dict(raw.get("tables", {})),
        columns={k: dict(v) for k, v in raw.get("columns", {}).items()},
        reasons=dict(raw.get("reasons", {})),
        panel=PanelSettings(
            window_months=panel.get("window_months", PanelSettings.window_months),
            not_features=_not_features(raw, panel),
            trailing_sums=dict(panel.get("trailing_sums", {})),
            known_future=known_future,
        ),
        spatial=SpatialSettings(
            radii_m=tuple(float(r) for r in spatial.get("radii_m", SpatialSettings.radii_m)),
            distance_crs=spatial.get("distance_crs") or None,
            nearest_area_max_m=float(spatial.get("nearest_area_max_m", 0.0)),
            move_rate_months=spatial.get("move_rate_months", SpatialSettings.move_rate_months),
            overlaps=spatial.get("overlaps", SpatialSettings.overlaps),
        ),
        formats=formats,
        campaigns=campaigns,
        source=path,
        raw=raw,
    )
    _check_stages(config)
    return config


def _check_stages(config: Config) -> None:
    """Each stage's rules across settings (an uptake offer's hazard ratio >= 1, a reason
    phrase's placeholders, ...), so that they too fail before any work."""
    from .cycle import run_settings
    from .decisions import offers_from_config, phrases_from_config, plan_settings_from_config
    from .forecast import forecast_settings
    from .value import value_settings

    value_settings(config)
    forecast_settings(config)
    run_settings(config)
    offers_from_config(config)
    phrases_from_config(config)
    if "budget" in config.raw.get("plan", {}):
        plan_settings_from_config(config)


def _formats(raw: dict[str, Any], path: Path) -> dict[str, str]:
    """``[formats]``: keys ``<table>`` or ``"<table>.<column>"``, values strftime formats."""
    section = raw.get("formats", {})
    if not isinstance(section, dict):
        raise UsageError(f"{path}: [formats] must be a table of settings")
    flat: dict[str, Any] = {}
    for key, value in section.items():  # activity.month = "..." unquoted is a nested table
        if isinstance(value, dict):
            flat |= {f"{key}.{column}": v for column, v in value.items()}
        else:
            flat[str(key)] = value
    out: dict[str, str] = {}
    for key, value in flat.items():
        table = str(key).split(".", 1)[0]
        if table not in TABLE_NAMES or table == "areas":
            raise UsageError(
                f"{path}: [formats] key {key!r} names no table; use a table name "
                f'({", ".join(t for t in TABLE_NAMES if t != "areas")}) or "<table>.<column>"'
            )
        if not isinstance(value, str) or "%" not in value:
            raise UsageError(
                f"{path}: [formats] {key} was {value!r} but is expected to be a date format "
                'such as "%d/%m/%Y" (Python strftime codes)'
            )
        out[str(key)] = value
    return out


def _campaigns(raw: dict[str, Any], path: Path) -> CampaignSettings:
    """``[campaigns]``: ``offers`` (your code = offer name) and ``arms`` (your label = arm)."""
    section = raw.get("campaigns", {})
    maps: dict[str, dict[str, str]] = {}
    for key in ("offers", "arms"):
        value = section.get(key, {})
        if not isinstance(value, dict) or not all(isinstance(v, str) for v in value.values()):
            raise UsageError(
                f"{path}: [campaigns] {key} was {value!r} but is expected to be a table of "
                'texts, e.g. { CODE = "name" }'
            )
        maps[key] = {str(k): v for k, v in value.items()}
    wrong = {k: v for k, v in maps["arms"].items() if v not in ARMS}
    if wrong:
        raise UsageError(
            f"{path}: [campaigns] arms maps onto {wrong}; each must be one of {list(ARMS)}"
        )
    return CampaignSettings(offers=maps["offers"], arms=maps["arms"])
