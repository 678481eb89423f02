"""Valid hazards in one place: every family and every mixture of families (the champion).

Each month's terminal hazards must sum to at most 1 and each uptake hazard to at most 1 minus
them; `valid_hazards` is the one rule, applied by `HazardModel` to every family's output.
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays

from lifecycle.models import BoostedHazard, CauseSpecificCox, SurvivalForest
from lifecycle.models._champion import ChampionModel
from lifecycle.models._competing import valid_hazards
from lifecycle.value._hazards import read_hazards, uptake_incidence

from .test_models_boosted import CUTOFF, simulate_known_truth, split_at

CAUSES = ("churn", "move_out", "other_exit", "uptake_extra")


# -- the rule itself ----------------------------------------------------------------------------
def test_continuous_time_split_by_hand():
    # Worked from the formula: h = (0.9, 0.6) sum past 1; λ = −log(1 − h) = (2.302585, 0.916291),
    # Λ = 3.218876, 1 − e^{−Λ} = 1 − 0.1 · 0.4 = 0.96; h_k = λ_k/Λ · 0.96.
    out = valid_hazards(np.array([[[0.9, 0.6, 0.3]]]), 2)[0, 0]
    lam = np.array([np.log(10.0), np.log(2.5)])
    np.testing.assert_allclose(out[:2], lam / lam.sum() * 0.96, rtol=1e-12)
    assert out[2] == pytest.approx(0.04, abs=1e-12)  # uptake capped at 1 − 0.96


def test_valid_hazards_are_left_alone():
    h = np.array([[[0.2, 0.3, 0.1, 0.4], [0.0, 0.0, 0.0, 1.0]]])
    np.testing.assert_array_equal(valid_hazards(h, 3), h)


@settings(max_examples=80, deadline=None, derandomize=True)
@given(
    arrays(
        np.float64,
        st.tuples(st.integers(1, 3), st.integers(1, 6), st.integers(1, 5)),
        elements=st.one_of(st.floats(-0.5, 1.5), st.just(np.nan)),
    ),
    st.integers(0, 5),
)
def test_any_array_comes_out_valid(h, n_terminal):
    k = min(n_terminal, h.shape[-1])
    out = valid_hazards(h, k)
    assert np.all((out >= 0) & (out <= 1))
    total = out[..., :k].sum(axis=-1)
    assert np.all(total <= 1 + 1e-12)
    assert np.all(out[..., k:] <= 1 - total[..., None] + 1e-12)
    # where the terminal causes already summed to at most 1, they are unchanged
    clean = np.clip(np.nan_to_num(h, nan=0.0), 0, 1)
    fine = clean[..., :k].sum(axis=-1) <= 1
    np.testing.assert_array_equal(out[..., :k][fine], clean[..., :k][fine])


# -- every family and their mixtures ------------------------------------------------------------
@pytest.fixture(scope="module")
def families():
    panel, _ = simulate_known_truth(700, seed=3)
    train, snapshot, _ = split_at(panel, CUTOFF)
    fitted = {
        "cox": CauseSpecificCox().fit(train),
        "boosted": BoostedHazard(max_iter=20, min_samples_leaf=20, n_threads=1).fit(train),
        "forest": SurvivalForest(
            horizon=6, n_estimators=5, max_rows=1_500, min_samples_leaf=20, n_jobs=1
        ).fit(train),
    }
    return train, snapshot.drop(columns=list(CAUSES)), fitted


def _mixture(families, choice: tuple[str, ...]) -> ChampionModel:
    train, _, fitted = families
    model = ChampionModel(families={}, champions=dict(zip(CAUSES, choice, strict=True)))
    model._learn_layout(train)
    model.cause_family_ = dict(zip(CAUSES, choice, strict=True))
    model.fitted_ = {name: fitted[name] for name in set(choice)}
    return model


@settings(
    max_examples=30,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@given(
    choice=st.tuples(*[st.sampled_from(["cox", "boosted", "forest"]) for _ in CAUSES]),
    x_cont=st.floats(-40.0, 40.0),
    x_bin=st.sampled_from([0.0, 1.0]),
    tenure=st.integers(0, 200),
)
def test_every_mixture_of_families_gives_valid_hazards(families, choice, x_cont, x_bin, tenure):
    model = _mixture(families, choice)
    snapshot = families[1].iloc[:5].copy()
    snapshot["x_cont"] = np.float32(x_cont)  # extreme covariates push the hazards towards 1
    snapshot["x_bin"] = np.float32(x_bin)
    snapshot["tenure_start"] = np.int16(tenure)
    snapshot["tenure_stop"] = np.int16(tenure + 1)
    snapshot["holds_extra"] = np.int8(0)
    hazards = model.predict_hazard(snapshot, horizon=6)
    h = hazards.to_numpy()
    assert np.all((h >= 0) & (h <= 1))
    terminal = h[:, :3].sum(axis=1)
    assert np.all(terminal <= 1 + 1e-12)
    assert np.all(h[:, 3] + terminal <= 1 + 1e-12)
    survival = model.predict_survival(snapshot, horizon=6).to_numpy()
    incidence = model.predict_cumulative_incidence(snapshot, horizon=6)
    f = incidence[list(CAUSES[:3])].to_numpy().reshape(5, 6, 3)
    np.testing.assert_allclose(survival + f.sum(axis=-1), 1.0, atol=1e-12)
    # the value step takes the same hazards without complaint (the demo once failed here), and
    # its uptake incidence is the models' own
    h_in = read_hazards(hazards)
    np.testing.assert_allclose(
        uptake_incidence(h_in.array, h_in.terminal, 3).ravel(),
        incidence["uptake_extra"].to_numpy(),
        atol=1e-12,
    )
