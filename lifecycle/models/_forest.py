"""Random survival forests on landmark snapshots, one per cause."""

from __future__ import annotations

import logging

import numpy as np
import pandas as pd
from sksurv.ensemble import RandomSurvivalForest
from sksurv.metrics import concordance_index_censored
from sksurv.util import Surv

from .._progress import progress
from .._warnings import library_warnings
from ..errors import InputError, UsageError
from ._base import HazardModel
from ._design import CovariateDesign
from ._landmarks import TIME, UPTAKE_TIME_PREFIX, landmark_snapshots

log = logging.getLogger(__name__)

_MAX_CATEGORIES = 30
_MIN_HELD_OUT_EVENTS = 5


class SurvivalForest(HazardModel):
    """Cause-specific random survival forests fitted on landmark snapshots.

    The panel is cut into landmark snapshots (`landmark_snapshots`): at every
    ``landmark_every``-th month (the latest ``max_landmarks`` of them) the customers active
    then, with their covariates then (tenure at the landmark ``tenure_start``, season and every
    feature), followed for up to ``horizon`` months. One forest is grown per terminal cause on
    all landmark rows (the other causes censor), and one per product on the rows not holding it
    (an exit censors). Each forest's cumulative hazard ``Λ_k(t)`` at whole months gives
    the monthly hazards: with ``ΔΛ_k(t) = Λ_k(t) − Λ_k(t − 1)``,

        h_k(t) = 1 − exp(−ΔΛ_k(t))

    for every cause; where small risk sets make the terminal ones sum past 1, the shared
    `valid_hazards` splits them in continuous time and caps the uptakes, as for every family.
    Survival and incidence follow through the shared `survival_and_incidence`. Predictions use
    the snapshot row alone: the forest's time axis carries tenure and season forward.

    Sampling, to keep time and memory sane on a monthly grid: landmarks are every
    ``landmark_every``-th month only, and each forest is grown on at most ``max_rows`` rows:
    when a forest has more candidate rows, all its event rows are kept (or, when events alone
    exceed half of ``max_rows``, a random half-``max_rows`` of them) and the non-event rows are
    drawn at random without replacement to fill ``max_rows``; each sampled row carries the weight
    (candidates / drawn) of its stratum (Horvitz–Thompson), so that the weighted Nelson–Aalen
    estimates in the leaves estimate the full data's: the sample changes their precision, not
    their target. Randomness is seeded by ``random_state``.

    Covariates: the forest needs numbers without gaps, so the shared `CovariateDesign` imputes
    numeric features with the training median and adds a 0/1 ``<feature>_missing`` indicator
    for a feature (numeric or categorical) that had gaps in training; categorical (and text)
    features are one-hot coded over their 30 most frequent training levels, one column each
    (other levels code as all zeros). Both are learned at ``fit``.

    ``low_memory`` mode of scikit-survival is not used: it keeps only a risk score, while the
    hazards need each leaf's cumulative hazard. The forest stays small because its leaves hold
    the cumulative hazard only at the ``horizon`` whole months (and ``min_samples_leaf``,
    ``max_depth`` bound the leaves). No training rows are kept.

    Parameters
    ----------
    horizon
        Months of follow-up after each landmark; predictions reach at most this far.
    landmark_every, max_landmarks
        Landmark spacing in months and the largest number of landmarks (the latest are kept).
    max_rows
        Largest number of landmark rows one forest is grown on (see sampling above).
    n_estimators, max_depth, min_samples_leaf, max_features, max_samples, n_jobs
        Passed to `sksurv.ensemble.RandomSurvivalForest` (``min_samples_split`` is
        ``2 · min_samples_leaf``).
    importance_rows
        Landmark rows held out (whole customers, drawn at random, at most a quarter of the
        customers) to measure permutation importances; 0 skips them.
    importance_repeats
        Permutations per feature.
    random_state
        Seed of landmark sampling, hold-out and forests.

    Attributes
    ----------
    forests_ : dict
        Cause → `GrownForest`, the trees of the fitted `RandomSurvivalForest` and its time grid
        (``None`` for a cause without events: hazard 0).
    encoder_ : CovariateDesign
        The learned imputation and one-hot coding (the covariate encoder every family shares).
    inputs_ : tuple of str
        ``tenure_start`` and the features, as given to the encoder.
    feature_importances_ : pandas.DataFrame
        ``cause``, ``feature``, ``importance``, ``importance_sd``: the drop in Harrell's
        concordance (`sksurv.metrics.concordance_index_censored`, risk score = the forest's
        summed cumulative hazard) on the held-out landmark rows when the feature's values are
        permuted among them, mean and standard deviation over ``importance_repeats``.
    n_rows_ : dict
        Cause → rows the forest was grown on.
    """

    def __init__(
        self,
        *,
        horizon: int = 24,
        landmark_every: int = 3,
        max_landmarks: int = 12,
        max_rows: int = 20_000,
        n_estimators: int = 100,
        max_depth: int | None = 10,
        min_samples_leaf: int = 100,
        max_features: str | int | float | None = "sqrt",
        max_samples: int | float | None = None,
        n_jobs: int | None = None,
        importance_rows: int = 2_000,
        importance_repeats: int = 3,
        random_state: int | None = 0,
    ) -> None:
        self.horizon = horizon
        self.landmark_every = landmark_every
        self.max_landmarks = max_landmarks
        self.max_rows = max_rows
        self.n_estimators = n_estimators
        self.max_depth = max_depth
        self.min_samples_leaf = min_samples_leaf
        self.max_features = max_features
        self.max_samples = max_samples
        self.n_jobs = n_jobs
        self.importance_rows = importance_rows
        self.importance_repeats = importance_repeats
        self.random_state = random_state

    # -- fitting --------------------------------------------------------------------------------
    def _fit(self, panel: pd.DataFrame) -> None:
        if not isinstance(self.max_rows, int | np.integer) or self.max_rows < 10:
            raise UsageError(f"max_rows was {self.max_rows!r} but must be a whole number >= 10")
        landmarks = landmark_snapshots(
            panel,
            horizon=self.horizon,
            every=self.landmark_every,
            max_landmarks=self.max_landmarks,
        )
        if landmarks.empty:
            raise InputError(
                table="panel",
                column="month",
                problem="no customer is active in any landmark month",
                fix="pass a panel with rows, or lower landmark_every",
            )
        rng = np.random.default_rng(self.random_state)
        self.inputs_ = ("tenure_start", *self.features_)
        held_out = self._hold_out(landmarks, rng)
        train = landmarks.loc[~held_out]
        self.encoder_ = CovariateDesign(
            reference_level=False,
            max_levels=_MAX_CATEGORIES,
            drop_uninformative=False,
            dtype=np.float32,
        ).fit(train, self.inputs_)
        self.forests_, self.n_rows_ = {}, {}
        for i, cause in enumerate(self.causes_):
            progress("fit", i, len(self.causes_), f"forest: {cause}")
            rows, time, event = _outcome(train, cause)
            with library_warnings("forest", cause):
                self.forests_[cause], self.n_rows_[cause] = self._grow(
                    train.loc[rows], time, event, cause, rng
                )
        self.feature_importances_ = self._importances(landmarks.loc[held_out], rng)

    def _hold_out(self, landmarks: pd.DataFrame, rng: np.random.Generator) -> np.ndarray:
        """Mask of the landmark rows of customers held out for the importances."""
        held = np.zeros(len(landmarks), dtype=bool)
        if self.importance_rows <= 0:
            return held
        codes, uniques = pd.factorize(landmarks["customer_id"])
        per_customer = np.bincount(codes, minlength=len(uniques))
        order = rng.permutation(len(uniques))
        enough = np.searchsorted(np.cumsum(per_customer[order]), self.importance_rows) + 1
        chosen = order[: min(enough, len(uniques) // 4)]
        return np.isin(codes, chosen)

    def _grow(
        self,
        rows: pd.DataFrame,
        time: np.ndarray,
        event: np.ndarray,
        cause: str,
        rng: np.random.Generator,
    ) -> tuple[GrownForest | None, int]:
        if not event.any() or len(rows) < 2:
            log.warning("%s: no events in the landmark rows; its hazard is taken as 0", cause)
            return None, 0
        pick, weight = _sample(event, self.max_rows, rng)
        forest = RandomSurvivalForest(
            n_estimators=self.n_estimators,
            max_depth=self.max_depth,
            min_samples_leaf=self.min_samples_leaf,
            min_samples_split=2 * self.min_samples_leaf,
            max_features=self.max_features,
            max_samples=self.max_samples,
            n_jobs=self.n_jobs,
            random_state=int(rng.integers(2**31 - 1)),
        )
        x = self.encoder_.transform(rows.iloc[pick])
        forest.fit(x, Surv.from_arrays(event[pick], time[pick]), sample_weight=weight)
        log.info(
            "%s: forest of %d trees on %d landmark rows (%d events)",
            cause,
            self.n_estimators,
            pick.size,
            int(event[pick].sum()),
        )
        return GrownForest(forest), int(pick.size)

    def _importances(self, held: pd.DataFrame, rng: np.random.Generator) -> pd.DataFrame:
        records = []
        for cause in self.causes_:
            forest = self.forests_[cause]
            rows, time, event = _outcome(held, cause)
            if forest is None or event.sum() < _MIN_HELD_OUT_EVENTS:
                continue
            sample = held.loc[rows].reset_index(drop=True)
            observed = event.astype(bool)
            base = _concordance(forest, self.encoder_.transform(sample), observed, time)
            for feature in self.inputs_:
                drops = []
                for _ in range(self.importance_repeats):
                    shuffled = sample.copy()
                    shuffled[feature] = sample[feature].to_numpy()[rng.permutation(len(sample))]
                    x = self.encoder_.transform(shuffled)
                    drops.append(base - _concordance(forest, x, observed, time))
                records.append((cause, feature, float(np.mean(drops)), float(np.std(drops))))
        frame = pd.DataFrame(records, columns=["cause", "feature", "importance", "importance_sd"])
        return frame.sort_values(
            ["cause", "importance"],
            ascending=[True, False],
            key=lambda s: s.map(self.causes_.index) if s.name == "cause" else s,
        ).reset_index(drop=True)

    # -- predicting -----------------------------------------------------------------------------
    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        if horizon > self.horizon:
            raise UsageError(
                f"horizon was {horizon} but this forest was fitted with horizon={self.horizon}; "
                f"ask for at most {self.horizon} months or refit with a longer horizon "
                "([models.forest] horizon in lifecycle.toml)"
            )
        snapshot = future.iloc[::horizon]
        x = self.encoder_.transform(snapshot)
        increments = np.zeros((n, horizon, len(self.causes_)))
        grid = np.arange(horizon + 1)
        for j, cause in enumerate(self.causes_):
            forest = self.forests_[cause]
            if forest is None:
                continue
            chf = forest.predict_cumulative_hazard_function(x)
            at = np.searchsorted(forest.unique_times_, grid, side="right") - 1
            curve = np.where(at >= 0, chf[:, np.maximum(at, 0)], 0.0)
            increments[:, :, j] = np.maximum(np.diff(curve, axis=1), 0.0)
        return -np.expm1(-increments)


def _outcome(landmarks: pd.DataFrame, cause: str) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Rows at risk of ``cause`` at the landmark, their follow-up time and event flag."""
    if cause.startswith("uptake_"):
        time = landmarks[UPTAKE_TIME_PREFIX + cause].to_numpy()
        rows = time > 0
    else:
        time = landmarks[TIME].to_numpy()
        rows = np.ones(len(landmarks), dtype=bool)
    event = landmarks[cause].to_numpy()[rows] == 1
    return rows, time[rows].astype(np.float64), event


def _sample(event: np.ndarray, max_rows: int, rng: np.random.Generator):
    """Row positions and weights: all events if they fit in half, the rest filled by non-events.

    Each stratum (events, non-events) is drawn without replacement; a drawn row's weight is
    the stratum's size over the number drawn from it.
    """
    n = event.size
    if n <= max_rows:
        return np.arange(n), np.ones(n)
    events, others = np.flatnonzero(event), np.flatnonzero(~event)
    keep_events = min(events.size, max_rows // 2)
    keep_others = min(others.size, max_rows - keep_events)
    picks, weights = [], []
    for stratum, keep in ((events, keep_events), (others, keep_others)):
        if keep == 0:
            continue
        drawn = np.sort(rng.choice(stratum, size=keep, replace=False))
        picks.append(drawn)
        weights.append(np.full(keep, stratum.size / keep))
    pick, weight = np.concatenate(picks), np.concatenate(weights)
    order = np.argsort(pick)
    return pick[order], weight[order]


class GrownForest:
    """What prediction needs of a fitted `sksurv.ensemble.RandomSurvivalForest`: its trees
    (``estimators_``) and its grid of training times (``unique_times_``).

    The library's forest object also keeps every training row's weight (for out-of-bag
    scoring, which this family does not use); keeping the trees alone keeps the model free of
    training data. Predictions average the trees exactly as the library's forest does (their
    sum in order, over the number of trees), so they are the same numbers.
    """

    def __init__(self, forest: RandomSurvivalForest) -> None:
        self.estimators_ = list(forest.estimators_)
        self.unique_times_ = forest.unique_times_

    def predict_cumulative_hazard_function(self, x: np.ndarray) -> np.ndarray:
        """The forest's cumulative hazard ``(len(x), len(unique_times_))``: the trees' mean."""
        total = np.zeros((x.shape[0], self.unique_times_.size))
        for tree in self.estimators_:
            total += tree.predict_cumulative_hazard_function(x, return_array=True)
        return total / len(self.estimators_)

    def predict(self, x: np.ndarray) -> np.ndarray:
        """The forest's risk score (the summed cumulative hazard): the trees' mean."""
        total = np.zeros(x.shape[0])
        for tree in self.estimators_:
            total += tree.predict(x)
        return total / len(self.estimators_)


def _concordance(forest, x: np.ndarray, event: np.ndarray, time: np.ndarray) -> float:
    return float(concordance_index_censored(event, time, forest.predict(x))[0])
