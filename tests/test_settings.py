"""One schema for every setting: faults refused before any work, the template, no drift.

The model families' hyperparameter ranges are compared with the parameter constraints that
scikit-learn and scikit-survival declare for the estimators they build
(``_parameter_constraints``, checked by ``sklearn.utils._param_validation``).
"""

from __future__ import annotations

import dataclasses
import re
import tomllib
from pathlib import Path

import pytest

from lifecycle._settings_keys import SECTIONS, TABLE_NAMES
from lifecycle.cli import main
from lifecycle.config import Config, load_config, settings_template
from lifecycle.errors import UsageError
from tests._tables_factory import EXTRACT, PREMISE_CRS, valid_frames, write_csv

ROOT = Path(__file__).parents[1]
BY_NAME = {s.name: s for s in SECTIONS}


@pytest.fixture
def data(tmp_path):
    folder = write_csv(tmp_path / "data", valid_frames())
    (folder / "lifecycle.toml").write_text(
        f'[data]\nextract_month = "{EXTRACT}"\npremise_crs = "{PREMISE_CRS}"\n'
    )
    return folder


def _listing(folder: Path) -> list[tuple[str, int]]:
    return sorted((str(p.relative_to(folder)), p.stat().st_size) for p in folder.rglob("*"))


# -- every fault of the issue: exit 2, one message naming file/section/key/value/allowed -----
FAULTS = [
    # (lines added to lifecycle.toml, the parts the message must hold)
    ('[panel]\nwindow_months = "abc"', ["[panel]", "window_months", '"abc"', "a whole number"]),
    ("[panel]\nwindow_months = 12.9", ["[panel]", "window_months", "12.9", "a whole number"]),
    ("[spatial]\nradii_m = 400", ["[spatial]", "radii_m", "400", "list of numbers"]),
    ("reasons = 5", ["[reasons]", "5", "a table of settings"]),
    (
        '[panel]\ntrailing_sums = { complaints = "three" }',
        ["[panel]", "trailing_sums", '"three"', "whole number"],
    ),
    ("[forcast]\nhorizon_months = 6", ["[forcast]", "did you mean [forecast]", "[value]"]),
    ("[datta]\nextract_month = '2026-01'", ["[datta]", "did you mean [data]", "[tables]"]),
    ("[models.boosted]\nlearning_rate = -1", ["[models.boosted]", "learning_rate", "-1", "> 0"]),
    ("[models.forest]\nn_estimators = 0", ["[models.forest]", "n_estimators", "0", ">= 1"]),
    ("[models.boosted]\nmax_iter = 0", ["[models.boosted]", "max_iter", "0", ">= 1"]),
    ("[models.cox]\npenalizer = -0.5", ["[models.cox]", "penalizer", "-0.5", ">= 0"]),
    ("[models.cox]\nsample_fraction = 1.5", ["[models.cox]", "sample_fraction", "(0, 1]"]),
    ("[models.forest]\nmax_features = 'half'", ["[models.forest]", "max_features", '"half"']),
    ("[models.cox]\npenaliser = 0.1", ["[models.cox]", "'penaliser'", "did you mean"]),
    ("[panel]\nwindow_months = 0", ["[panel]", "window_months", "0", ">= 1"]),
    ("[forecast]\nlevels = [0.9, 1.5]", ["[forecast]", "levels", "1.5", "(0, 1)"]),
    ("[run]\nfamilies = ['cox', 'trees']", ["[run]", "families", '"trees"', "forest"]),
    ("[value]\nhorizon_months = 100000", ["[value]", "horizon_months", "100000", "[1, 120]"]),
    ("[compute]\nworkers = 2.0", ["[compute]", "workers", "2.0", "a whole number"]),
    (
        '[tables]\ncustomers = "../../etc/customers.csv"',
        ["[tables]", "customers", "../../etc/customers.csv", "inside the data folder"],
    ),
    (
        "[[offers]]\nname = 'a'\ntarget = 'churn'\ncost = 1\nhazard_ratio = 0.5\nmonths = 2.5",
        ["[[offers]] #1", "months", "2.5", "a whole number"],
    ),
]


@pytest.mark.parametrize(("lines", "parts"), FAULTS, ids=[f[0].split("\n")[-1] for f in FAULTS])
def test_a_bad_setting_exits_2_naming_it_and_writes_nothing(data, tmp_path, capsys, lines, parts):
    config = data / "lifecycle.toml"
    config.write_text(lines + "\n" + config.read_text())  # first: a top-level key stays one
    (tmp_path / "out").mkdir()
    out = tmp_path / "out" / "panel.parquet"
    before = _listing(tmp_path)
    assert main(["panel", str(data), "--as-of", "2026-03", "--out", str(out)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1, err
    assert str(config) in err[0]
    for part in parts:
        assert part in err[0], (part, err[0])
    assert _listing(tmp_path) == before  # nothing written


def test_run_refuses_a_bad_setting_before_any_work(data, tmp_path, capsys):
    config = data / "lifecycle.toml"
    config.write_text(config.read_text() + "[models.boosted]\nn_iter_no_change = 0\n")
    before = _listing(tmp_path)
    assert main(["run", "--config", str(config)]) == 2
    assert "[models.boosted] n_iter_no_change was 0" in capsys.readouterr().err
    assert _listing(tmp_path) == before  # no reports, no work folder


def test_a_table_path_out_of_the_data_folder_is_refused_when_built_in_python(data):
    from lifecycle.data import load_tables

    config = Config(tables={"customers": "../customers.csv"}, premise_crs=PREMISE_CRS)
    with pytest.raises(UsageError, match=r"\[tables\] customers was '../customers.csv'"):
        load_tables(data, config)
    inside = Config(
        tables={"customers": "./sub/../customers.csv"},
        premise_crs=PREMISE_CRS,
        extract_month=EXTRACT,
    )
    assert len(load_tables(data, inside).customers) == 6
    elsewhere = data.parent / "elsewhere"
    elsewhere.mkdir()
    (data / "customers.csv").rename(elsewhere / "customers.csv")
    absolute = dataclasses.replace(inside, tables={"customers": str(elsewhere / "customers.csv")})
    assert len(load_tables(data, absolute).customers) == 6  # an absolute path, on purpose


# -- the template ---------------------------------------------------------------------------
def test_settings_prints_a_valid_file_that_gives_the_defaults(tmp_path, capsys):
    from lifecycle.cycle._run import run_settings
    from lifecycle.decisions import offers_from_config
    from lifecycle.distributed import compute_settings
    from lifecycle.forecast import forecast_settings
    from lifecycle.value import value_settings

    assert main(["settings"]) == 0
    text = capsys.readouterr().out
    for section in SECTIONS:
        assert f"[{section.name}]" in text
        for key in section.keys:
            assert f"#   {key.name}: {key.meaning}\n#     ({key.allowed()}; " in text
    file = tmp_path / "lifecycle.toml"
    file.write_text(text)
    config = load_config(file)
    default = Config()
    assert (config.panel, config.spatial, config.tables) == (
        default.panel,
        default.spatial,
        default.tables,
    )
    for reader in (value_settings, forecast_settings, compute_settings, offers_from_config):
        assert reader(config) == reader(default), reader
    assert run_settings(config) == run_settings(Config(source=file))


def test_settings_with_examples_is_valid_too(tmp_path, capsys):
    from lifecycle.decisions import offers_from_config, plan_settings_from_config

    assert main(["settings", "--examples"]) == 0
    file = tmp_path / "lifecycle.toml"
    file.write_text(capsys.readouterr().out)
    config = load_config(file)
    assert [o.name for o in offers_from_config(config)] == ["loyalty_credit"]
    assert plan_settings_from_config(config).budget == 20000.0


def test_schema_defaults_are_the_readers_defaults():
    from lifecycle.config import PanelSettings, SpatialSettings, setting
    from lifecycle.cycle._run import RunSettings
    from lifecycle.decisions import PlanSettings
    from lifecycle.distributed import ComputeSettings
    from lifecycle.evaluation._campaign_metrics import CampaignMetricSettings
    from lifecycle.forecast._uptake import ForecastSettings
    from lifecycle.value._lifetime import ValueSettings

    def fields(cls) -> dict:
        out = {}
        for f in dataclasses.fields(cls):
            if f.default is not dataclasses.MISSING:
                out[f.name] = f.default
            elif f.default_factory is not dataclasses.MISSING:
                out[f.name] = f.default_factory()
        return out

    for section, cls in [
        ("panel", PanelSettings),
        ("spatial", SpatialSettings),
        ("value", ValueSettings),
        ("forecast", ForecastSettings),
        ("compute", ComputeSettings),
        ("plan", PlanSettings),
        ("run", RunSettings),
        ("evaluation", CampaignMetricSettings),
    ]:
        keys = {k.name for k in BY_NAME[section].keys}
        for name, default in fields(cls).items():
            assert name in keys, (section, name)
            ours = setting(None, f"{section}.{name}")
            if isinstance(default, tuple):
                default = list(default)
            if isinstance(default, Path):
                default = str(default)
            if section == "spatial" and name == "radii_m":
                ours = [float(r) for r in ours]
            assert ours == default, (section, name, ours, default)


@pytest.mark.parametrize("family", ["cox", "forest", "boosted"])
def test_model_sections_are_the_families_hyperparameters(family):
    """Every hyperparameter (``get_params()``) is a key, with the family's default (the
    forest's horizon excepted: it follows the horizons later steps need)."""
    from lifecycle.models._families import _families

    params = _families()[family]().get_params()
    params.pop("known_future", None)  # set from [panel] known_future and the offers, not here
    section = BY_NAME[f"models.{family}"]
    assert sorted(k.name for k in section.keys) == sorted(params)
    for key in section.keys:
        if (family, key.name) == ("forest", "horizon"):
            assert key.default is None
            continue
        assert key.default == params[key.name], (family, key.name)


def _sklearn_accepts(constraints, name, value) -> bool:
    from sklearn.utils._param_validation import (
        InvalidParameterError,
        validate_parameter_constraints,
    )

    try:
        validate_parameter_constraints({name: constraints[name]}, {name: value}, "estimator")
    except InvalidParameterError:
        return False
    return True


@pytest.mark.parametrize(
    ("section", "estimator", "names"),
    [
        (
            "models.boosted",
            "sklearn.ensemble.HistGradientBoostingClassifier",
            ["max_iter", "learning_rate", "max_leaf_nodes", "min_samples_leaf",
             "l2_regularization", "max_depth", "n_iter_no_change", "tol"],
        ),
        (
            "models.forest",
            "sksurv.ensemble.RandomSurvivalForest",
            ["n_estimators", "max_depth", "min_samples_leaf", "max_features", "max_samples"],
        ),
    ],
)  # fmt: skip
def test_model_ranges_lie_within_the_libraries_constraints(section, estimator, names):
    """Whatever the schema accepts, the library accepts too (so no library parameter error
    can reach the user); the probes are boundary values of each kind."""
    import importlib

    module, _, cls = estimator.rpartition(".")
    constraints = getattr(importlib.import_module(module), cls)._parameter_constraints
    probes = [-1, 0, 1, 2, 10, -1.0, 0.0, 1e-9, 0.5, 1.0, 1.5, 2.5, "sqrt", "log2", "x", True]
    for name in names:
        key = BY_NAME[section].key(name)
        accepted = [v for v in probes if key.kind.accepts(v) and key.check.ok(v)]
        assert accepted, name
        for value in accepted:
            assert _sklearn_accepts(constraints, name, value), (name, value)


# -- every key the code reads is in the schema -------------------------------------------------
class _Recorder(dict):
    """A dict that records each key looked up in it (and in the tables inside it)."""

    def __init__(self, data: dict, path: tuple[str, ...], seen: set) -> None:
        super().__init__({k: _wrap(v, (*path, k), seen) for k, v in data.items()})
        self._path, self._seen = path, seen

    def __getitem__(self, key):
        self._seen.add((*self._path, key))
        return super().__getitem__(key)

    def get(self, key, default=None):
        self._seen.add((*self._path, key))
        return super().get(key, default)

    def __contains__(self, key):
        self._seen.add((*self._path, key))
        return super().__contains__(key)


def _wrap(value, path, seen):
    if isinstance(value, dict):
        return _Recorder(value, path, seen)
    if isinstance(value, list) and value and all(isinstance(v, dict) for v in value):
        return [_Recorder(v, path, seen) for v in value]
    return value


def _in_schema(path: tuple[str, ...]) -> bool:
    """Whether a looked-up path is a section, a group of sections, or a key of a section
    (anything below a key is part of its value)."""
    for i in range(len(path), 0, -1):
        dotted = ".".join(path[:i])
        if dotted in BY_NAME or any(s.startswith(dotted + ".") for s in BY_NAME):
            rest = path[i:]
            if not rest:
                return True
            return dotted in BY_NAME and BY_NAME[dotted].key(rest[0]) is not None
    return False


# Every module that reads config.raw, and is exercised below.
READERS = {
    "lifecycle/config.py",
    "lifecycle/value/_lifetime.py",
    "lifecycle/forecast/_uptake.py",
    "lifecycle/cycle/_run.py",
    "lifecycle/distributed/_client.py",
    "lifecycle/decisions/_offers.py",
    "lifecycle/decisions/_reasons.py",
    "lifecycle/models/_families.py",
    "lifecycle/models/_fittable.py",
    "lifecycle/forecast/_bass.py",
    "lifecycle/evaluation/_campaign_metrics.py",
}


def test_every_key_the_code_reads_is_in_the_schema(tmp_path, monkeypatch):
    import lifecycle.config as config_module
    from lifecycle.distributed import compute_settings
    from lifecycle.evaluation._campaign_metrics import campaign_metric_settings
    from lifecycle.forecast._bass import launch_settings
    from lifecycle.models._families import make_model
    from lifecycle.models._fittable import min_events_setting

    readers = {
        str(p.relative_to(ROOT))
        for p in (ROOT / "lifecycle").rglob("*.py")
        if re.search(r"config\.raw\b|= section\(", p.read_text(encoding="utf-8"))
        and p.name not in ("_settings.py", "_settings_keys.py")
    }
    assert readers <= READERS, f"read here too, add to the test: {sorted(readers - READERS)}"
    seen: set[tuple[str, ...]] = set()
    loads = tomllib.loads
    monkeypatch.setattr(
        config_module.tomllib, "loads", lambda text: _Recorder(loads(text), (), seen)
    )
    file = tmp_path / "lifecycle.toml"
    file.write_text(settings_template(examples=True))
    config = load_config(file)  # reads [data], [panel], ... and runs every stage's reader
    for family in ("cox", "forest", "boosted"):
        make_model(family, config)
    compute_settings(config)
    min_events_setting(config)
    assert campaign_metric_settings(config).qini_min_rows >= 2
    assert launch_settings(config) is not None
    assert len(seen) > 40
    unknown = sorted(p for p in seen if not _in_schema(p))
    assert not unknown, unknown
    # and the check itself can fail
    assert not _in_schema(("forecast", "no_such_key")) and not _in_schema(("forcast",))


# -- the README -----------------------------------------------------------------------------
def test_readme_and_settings_name_the_same_sections():
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    part = text.split("## Settings", 1)[1].split("\n## ", 1)[0]
    named = set(re.findall(r"`\[\[?([a-z_.<>]+)\]\]?`", part))
    expanded = set()
    for name in named:
        if "<table>" in name:
            expanded |= {name.replace("<table>", t) for t in TABLE_NAMES}
        else:
            expanded.add(name)
    assert expanded == set(BY_NAME)
    assert "lifecycle settings" in part
