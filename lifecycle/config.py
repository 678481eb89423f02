"""Settings from ``lifecycle.toml``.

The file is optional; every setting has a default. ``lifecycle settings`` prints every section
and key with its kind, default and meaning (generated from the one schema in
`lifecycle._settings_keys`); `load_config` checks the whole file against that schema, and each
stage's own rules, before any work.
"""

from __future__ import annotations

import datetime as _dt
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from . import _settings
from ._months import parse_month
from ._settings_keys import REASONS as REASONS
from ._settings_keys import SECTIONS
from ._settings_keys import TABLE_NAMES as TABLE_NAMES
from .errors import UsageError

__all__ = ["Config", "load_config", "setting"]


@dataclass(frozen=True)
class PanelSettings:
    window_months: int = 48
    not_features: tuple[str, ...] = ("do_not_contact", "hardship")
    trailing_sums: dict[str, int] = field(default_factory=dict)


@dataclass(frozen=True)
class SpatialSettings:
    radii_m: tuple[float, ...] = (400.0,)
    distance_crs: str | None = None
    nearest_area_max_m: float = 0.0
    move_rate_months: int = 12


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
    source: Path | None = None
    raw: dict[str, Any] = field(default_factory=dict)

    def extract_month_index(self, today: _dt.date | None = None) -> int:
        """The last month the data covers: the configured one, else this calendar month."""
        if self.extract_month:
            return parse_month(self.extract_month, what="data.extract_month")
        today = today or _dt.date.today()
        return today.year * 12 + today.month - 1


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
            not_features=tuple(panel.get("not_features", PanelSettings.not_features)),
            trailing_sums=dict(panel.get("trailing_sums", {})),
        ),
        spatial=SpatialSettings(
            radii_m=tuple(float(r) for r in spatial.get("radii_m", SpatialSettings.radii_m)),
            distance_crs=spatial.get("distance_crs") or None,
            nearest_area_max_m=float(spatial.get("nearest_area_max_m", 0.0)),
            move_rate_months=spatial.get("move_rate_months", SpatialSettings.move_rate_months),
        ),
        source=path,
        raw=raw,
    )
    _check_stages(config)
    return config


def _check_stages(config: Config) -> None:
    """Each stage's rules across settings (an uptake offer's hazard ratio >= 1, a reason
    phrase's placeholders, ...), so that they too fail before any work."""
    from .cycle._run import run_settings
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
