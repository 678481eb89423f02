"""Saved models: manifest, hash check before loading, and scores from a fitted model."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from lifecycle.errors import ModelFileError, UsageError
from lifecycle.models import HazardModel, load_model, save_model, score_customers
from lifecycle.panel import build_panel, build_snapshot
from tests._builders import make_tables


class ConstantHazards(HazardModel):
    """A test family: each cause's hazard is its overall monthly rate in the panel."""

    def __init__(self, *, floor: float = 0.0):
        self.floor = floor

    def _fit(self, panel):
        self.rates_ = np.array([max(panel[c].mean(), self.floor) for c in self.causes_])

    def _hazard_array(self, future, n, horizon):
        return np.broadcast_to(self.rates_, (n, horizon, len(self.rates_))).copy()


@pytest.fixture
def tables():
    rows = []
    for i in range(40):
        row = dict(customer_id=i, start_month="2025-01")
        if i % 4 == 0:
            row.update(end_month="2026-0" + str(1 + i % 9), end_reason=["churn", "move_out"][i % 2])
        rows.append(row)
    return make_tables(rows, uptakes=[dict(customer_id=1, product="gadget", month="2025-06")])


def test_save_then_load_round_trip_and_manifest(tables, tmp_path):
    model = ConstantHazards().fit(build_panel(tables, "2026-10"))
    folder = save_model(
        model, tmp_path / "m", training_window=("2022-11", "2026-10"), family="test"
    )
    manifest = json.loads((folder / "manifest.json").read_text())
    assert set(manifest["files"]) == {"model.pickle"}
    assert manifest["causes"] == ["churn", "move_out", "other_exit", "uptake_gadget"]
    assert manifest["training_window"] == {"first_month": "2022-11", "last_month": "2026-10"}
    loaded = load_model(folder, trusted_modules=("tests",))
    np.testing.assert_array_equal(loaded.rates_, model.rates_)


def test_a_changed_model_file_is_refused_before_loading(tables, tmp_path):
    model = ConstantHazards().fit(build_panel(tables, "2026-10"))
    folder = save_model(
        model, tmp_path / "m", training_window=("2022-11", "2026-10"), family="test"
    )
    with open(folder / "model.pickle", "ab") as handle:
        handle.write(b"\0")
    with pytest.raises(ModelFileError, match=r"SHA-256.*will not be loaded"):
        load_model(folder, trusted_modules=("tests",))
    (folder / "manifest.json").unlink()
    with pytest.raises(ModelFileError, match=r"no manifest\.json"):
        load_model(folder, trusted_modules=("tests",))


def test_scores_add_up_and_exclude_holders_from_uptake(tables):
    model = ConstantHazards().fit(build_panel(tables, "2026-10"))
    snapshot = build_snapshot(tables, "2026-10")
    scores = score_customers(model, snapshot, horizons=(3, 12))
    assert list(scores.columns[:3]) == ["customer_id", "survival_3m", "survival_12m"]
    terminal = scores[["cif_churn_12m", "cif_move_out_12m", "cif_other_exit_12m"]].sum(axis=1)
    # survival and the terminal incidences add to one (discrete Aalen–Johansen identity)
    np.testing.assert_allclose(scores["survival_12m"] + terminal, 1.0, atol=1e-12)
    # constant hazards: S(12) = (1 − Σh)^12, a closed form to compare with
    total = model.rates_[:3].sum()
    np.testing.assert_allclose(scores["survival_12m"], (1 - total) ** 12)
    holder = scores.set_index("customer_id").loc[1]
    assert holder["cif_uptake_gadget_12m"] == 0.0


def test_unfitted_model_and_bad_horizon_are_usage_errors(tables):
    snapshot = build_snapshot(tables, "2026-10")
    with pytest.raises(UsageError, match="not fitted"):
        ConstantHazards().predict_survival(snapshot, 3)
    model = ConstantHazards().fit(build_panel(tables, "2026-10"))
    with pytest.raises(UsageError, match="horizons"):
        score_customers(model, snapshot, horizons=(0,))
    assert isinstance(model.predict_hazard(snapshot, 2), pd.DataFrame)


def test_hazards_predicted_in_blocks_equal_one_block(tables, monkeypatch):
    """Predicting customers block by block (memory) gives exactly the one-block hazards."""
    from lifecycle.models import _base

    model = ConstantHazards().fit(build_panel(tables, "2026-10"))
    snapshot = build_snapshot(tables, "2026-10")
    whole = model.hazard_array(snapshot, 6)
    monkeypatch.setattr(_base, "_BLOCK_CUSTOMERS", 7)
    np.testing.assert_array_equal(model.hazard_array(snapshot, 6), whole)


def test_manifest_records_the_published_distribution_version():
    """The distribution is published under a name of its own ("lifecycle" on the package index
    is an unrelated project), and the manifest looks its version up under that name."""
    import tomllib
    from importlib import metadata
    from pathlib import Path

    import lifecycle
    from lifecycle.models._persist import DISTRIBUTION, _versions

    project = tomllib.loads((Path(__file__).parents[1] / "pyproject.toml").read_text())
    assert project["project"]["name"] == DISTRIBUTION != "lifecycle"
    assert metadata.version(DISTRIBUTION) == lifecycle.__version__ == _versions()["lifecycle"]
