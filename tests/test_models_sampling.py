"""Row sampling of large panels (``max_rows``): the share kept, and fits that use it."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from lifecycle.errors import UsageError
from lifecycle.models import BoostedHazard, CauseSpecificCox
from lifecycle.models._sampling import non_event_share

from .test_models_boosted import CUTOFF, simulate_known_truth, split_at


def test_share_by_hand():
    """Hand-worked: 10,000 rows with 1,000 events and max_rows 4,000 keep all 1,000 events
    and 3,000 of the 9,000 others, a share of 1/3; a given fraction wins; small panels and
    no cap keep every row; with more events than the cap a tenth of it is still drawn."""
    assert non_event_share(None, 4_000, 10_000, 1_000) == pytest.approx(1 / 3)
    assert non_event_share(0.2, 4_000, 10_000, 1_000) == 0.2
    assert non_event_share(None, 4_000, 3_999, 1_000) == 1.0
    assert non_event_share(None, None, 10**9, 1_000) == 1.0
    assert non_event_share(None, 4_000, 10_000, 5_000) == pytest.approx(400 / 5_000)


@pytest.fixture(scope="module")
def train():
    panel, _ = simulate_known_truth(3000, seed=2)
    return split_at(panel, CUTOFF)[0]


def test_cox_max_rows_is_the_fit_with_that_share(train):
    """A cap below the rows at risk gives exactly the fit with ``sample_fraction`` equal to
    the share `non_event_share` computes (one share per cause: checked on churn, whose rows
    at risk are the whole panel), and uses about ``max_rows`` rows."""
    cap = len(train) // 3
    capped = CauseSpecificCox(max_rows=cap, random_state=4).fit(train)
    events = int(train["churn"].sum())
    share = non_event_share(None, cap, len(train), events)
    same = CauseSpecificCox(sample_fraction=share, random_state=4).fit(train)
    a = capped.coefficients_.query("cause == 'churn'").reset_index(drop=True)
    b = same.coefficients_.query("cause == 'churn'").reset_index(drop=True)
    pd.testing.assert_frame_equal(a, b)
    rows = capped.cause_fits_["churn"].n_rows
    assert abs(rows - cap) < 5 * np.sqrt(cap)  # binomial draw around the cap
    # no cap: every row
    assert CauseSpecificCox(max_rows=None).fit(train).cause_fits_["churn"].n_rows == len(train)


def test_boosted_max_rows_samples_to_about_the_cap(train):
    """The boosted family's exit classifier is fitted on about ``max_rows`` rows less its
    early-stopping hold-out (15 % of the customers), and the weighted sample stays calibrated
    in the large: fitted churn hazards sum to the observed churn events within 3 Poisson SEs."""
    cap = len(train) // 2  # above 10,000 rows, so early stopping is on ("auto")
    assert cap > 10_000
    model = BoostedHazard(max_rows=cap, n_threads=1).fit(train)
    assert 0.75 * cap < model.n_rows_["terminal"] < 0.95 * cap
    fitted = model.predict_hazard(train, horizon=1)["churn"].sum()
    events = train["churn"].sum()
    assert abs(fitted - events) < 3 * np.sqrt(events)


@pytest.mark.parametrize("value", [0, 999, 2.5, True, "many"])
def test_bad_max_rows_is_refused(train, value):
    with pytest.raises(UsageError, match="max_rows"):
        CauseSpecificCox(max_rows=value).fit(train.iloc[:200])
    with pytest.raises(UsageError, match="max_rows"):
        BoostedHazard(max_rows=value).fit(train.iloc[:200])
