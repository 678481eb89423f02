"""The shared discrete-time Aalen–Johansen function against reference implementations."""

from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from hypothesis.extra.numpy import arrays
from lifelines import AalenJohansenFitter
from sksurv.datasets import load_bmt
from sksurv.nonparametric import cumulative_incidence_competing_risks

from lifecycle.models import survival_and_incidence


def _bmt() -> tuple[np.ndarray, np.ndarray]:
    """Bone-marrow transplant data bundled with scikit-survival (35 patients; status 0
    censored, 1 and 2 the competing events; Scrucca, Santucci & Aversa 2007, Bone Marrow
    Transplantation 40, 381–387)."""
    _, y = load_bmt()
    return y["ftime"].astype(np.float64), y["status"].astype(np.int64)


def _nonparametric_hazards(time: np.ndarray, status: np.ndarray, causes: int = 2):
    """``h_k(u) = d_k(u) / n(u)`` at each distinct time u: events of cause k at u over the
    number still under observation at u (time ≥ u)."""
    grid = np.unique(time)
    at_risk = (time[None, :] >= grid[:, None]).sum(axis=1)
    deaths = np.stack(
        [
            ((time[None, :] == grid[:, None]) & (status == k)).sum(axis=1)
            for k in range(1, 1 + causes)
        ],
        axis=-1,
    )
    return grid, deaths / at_risk[:, None]


def test_bmt_matches_scikit_survival_exactly():
    time, status = _bmt()
    grid, hazards = _nonparametric_hazards(time, status)
    survival, incidence = survival_and_incidence(hazards[None])
    # Reference: sksurv.nonparametric.cumulative_incidence_competing_risks on the same data;
    # row 0 of its result is the total over causes, rows 1.. the causes.
    ref_time, ref = cumulative_incidence_competing_risks(status, time)
    np.testing.assert_array_equal(ref_time, grid)
    np.testing.assert_allclose(incidence[0], ref[1:].T, rtol=0, atol=1e-12)
    np.testing.assert_allclose(1.0 - survival[0], ref[0], rtol=0, atol=1e-12)
    # sanity of the reference comparison itself: both causes have events at several times
    assert (np.diff(incidence[0], axis=0) > 0).sum(axis=0).min() >= 5


def test_bmt_matches_lifelines_aalen_johansen_with_ties_broken():
    # lifelines' AalenJohansenFitter cannot take events of different causes at the same time:
    # it jitters them at random and reseeds numpy's global generator while doing so. We break
    # the ties ourselves, deterministically (cause 2 a hundredth later, censoring two
    # hundredths later, i.e. censored after the events of their time), so that lifelines does
    # not jitter, and compare both estimators on that same data. The times are also moved one
    # unit later: lifelines sets the incidence of its first timeline row to 0, which would drop
    # the BMT events at time 0.
    time, status = _bmt()
    broken = time + 1.0 + np.where(status == 2, 0.01, 0.0) + np.where(status == 0, 0.02, 0.0)
    grid, hazards = _nonparametric_hazards(broken, status)
    _, incidence = survival_and_incidence(hazards[None])
    rng_state = np.random.get_state()[1].copy()  # noqa: NPY002 (the global state is the point)
    for cause in (1, 2):
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # a jitter would warn: prove that none happened
            fitter = AalenJohansenFitter(calculate_variance=False).fit(
                broken, status, event_of_interest=cause
            )
        reference = fitter.cumulative_density_.iloc[:, 0]
        ours = pd.Series(incidence[0, :, cause - 1], index=grid)
        np.testing.assert_allclose(
            ours.reindex(reference.index[1:]), reference.iloc[1:], atol=1e-12
        )
    assert (np.random.get_state()[1] == rng_state).all()  # noqa: NPY002


def test_known_two_month_example():
    # Worked by hand from the definition: month 1 hazards (0.1, 0.2): S = 0.7, F = (0.1, 0.2);
    # month 2 hazards (0.5, 0.0): S = 0.35, F = (0.1 + 0.7·0.5, 0.2) = (0.45, 0.2).
    survival, incidence = survival_and_incidence(np.array([[0.1, 0.2], [0.5, 0.0]]))
    np.testing.assert_allclose(survival, [0.7, 0.35])
    np.testing.assert_allclose(incidence, [[0.1, 0.2], [0.45, 0.2]])


def test_rejects_hazards_summing_past_one():
    with pytest.raises(ValueError, match="must lie in"):
        survival_and_incidence(np.array([[0.6, 0.5]]))


@st.composite
def _hazard_arrays(draw):
    n = draw(st.integers(1, 4))
    months = draw(st.integers(1, 30))
    causes = draw(st.integers(1, 4))
    shares = draw(
        arrays(np.float64, (n, months, causes + 1), elements=st.floats(0.0, 1.0, width=32))
    )
    total = draw(arrays(np.float64, (n, months, 1), elements=st.floats(0.0, 1.0, width=32)))
    # split a total monthly exit probability in [0, 1] among the causes
    weights = shares[..., :causes] / np.maximum(shares.sum(axis=-1, keepdims=True), 1e-12)
    return np.clip(total * weights, 0.0, None)


@settings(max_examples=60, deadline=None)
@given(_hazard_arrays())
def test_survival_plus_incidence_is_one_and_monotone(hazards):
    survival, incidence = survival_and_incidence(hazards)
    # S(t) + Σ_k F_k(t) = 1 at every horizon (the Aalen–Johansen identity)
    np.testing.assert_allclose(survival + incidence.sum(axis=-1), 1.0, atol=1e-12)
    assert np.all(np.diff(survival, axis=-1) <= 1e-15)
    assert np.all(np.diff(incidence, axis=-2) >= -1e-15)
    assert np.all((survival >= -1e-15) & (survival <= 1 + 1e-15))
    assert np.all((incidence >= -1e-15) & (incidence <= 1 + 1e-15))
