"""The interface every model family implements, and what it shares."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import BaseEstimator

from .._months import categorical_to_index
from .._progress import progress
from .._warnings import library_warnings
from ..errors import UsageError
from ..panel import PanelLayout, panel_layout, project_known_future
from ._competing import survival_and_incidence, uptake_incidence, valid_hazards

_SEASON_ANGLE = 2.0 * np.pi * np.arange(12) / 12.0
_BLOCK_CUSTOMERS = 50_000


class HazardModel(BaseEstimator):
    """Monthly cause-specific hazards of one model family.

    scikit-learn's contract: keyword-only hyperparameters that the constructor only stores,
    learned state ending in ``_``, ``fit`` returns ``self``. A family implements `_fit` and
    `_hazard_array`; survival and cumulative incidence follow from the hazards through the
    one shared function `survival_and_incidence`.

    Learned attributes (set by ``fit`` through `_learn_layout`)
    --------------------------------------------------------
    terminal_causes_ : tuple of str
        ``churn``, ``move_out``, ``other_exit``: competing, terminal.
    uptake_causes_ : tuple of str
        ``uptake_<product>``: each competes with every terminal cause.
    features_ : tuple of str
        The panel's feature columns the model was fitted on.
    """

    # -- what a family implements -------------------------------------------------------------
    def _fit(self, panel: pd.DataFrame) -> None:
        raise NotImplementedError

    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        """Hazards ``(n, horizon, K)`` for the causes in `causes_` order, from the rows of
        `future_rows` (customer-major: customer i's month k is row ``i * horizon + k − 1``)."""
        raise NotImplementedError

    def _known_future(self) -> dict[str, str] | None:
        """The schedule of the features whose future is known (``known_future``), if any."""
        return getattr(self, "known_future", None)

    # -- the shared part ----------------------------------------------------------------------
    @property
    def causes_(self) -> tuple[str, ...]:
        return self.terminal_causes_ + self.uptake_causes_

    def fit(self, panel: pd.DataFrame) -> HazardModel:
        """Learn one hazard per cause from a panel (see `lifecycle.build_panel`)."""
        self._learn_layout(panel)
        with library_warnings(_family_label(self)):
            self._fit(panel)
        return self

    def _learn_layout(self, panel: pd.DataFrame) -> None:
        layout = panel_layout(panel)
        self.terminal_causes_ = layout.terminal_causes
        self.uptake_causes_ = layout.uptake_causes
        self.features_ = layout.features

    def predict_hazard(self, snapshot: pd.DataFrame, horizon: int = 12) -> pd.DataFrame:
        """Monthly cause-specific hazards for months 1..``horizon`` after the snapshot.

        Month k is the k-th month from the snapshot's ``month`` on (the snapshot row holds the
        features known at the end of the month before). Tenure and season advance with k, and
        so do the features of the model's ``known_future`` schedule (`future_rows`); every
        other covariate is held at its snapshot value.

        Returns
        -------
        pandas.DataFrame
            Index (``customer_id``, ``month_ahead``), one column per cause: the probability of
            the cause in that month given still a customer (and, for an uptake, not holding the
            product) at its start.
        """
        array = self._hazards(snapshot, horizon)
        index = pd.MultiIndex.from_product(
            [snapshot["customer_id"].to_numpy(), np.arange(1, horizon + 1)],
            names=["customer_id", "month_ahead"],
        )
        return pd.DataFrame(array.reshape(-1, array.shape[-1]), index=index, columns=self.causes_)

    def predict_survival(self, snapshot: pd.DataFrame, horizon: int = 12) -> pd.DataFrame:
        """Probability of still being a customer after each month 1..``horizon``.

        ``S(t) = Π_{s ≤ t} (1 − Σ_k h_k(s))`` over the terminal causes. Index ``customer_id``,
        columns ``1..horizon``.
        """
        array = self._hazards(snapshot, horizon)
        survival = survival_from_hazards(array, len(self.terminal_causes_))
        return pd.DataFrame(
            survival,
            index=pd.Index(snapshot["customer_id"].to_numpy(), name="customer_id"),
            columns=pd.RangeIndex(1, horizon + 1, name="month_ahead"),
        )

    def predict_cumulative_incidence(
        self, snapshot: pd.DataFrame, horizon: int = 12
    ) -> pd.DataFrame:
        """Probability of each cause by month 1..``horizon``, competing risks accounted for.

        For a terminal cause k, ``F_k(t) = Σ_{s ≤ t} S(s−1) h_k(s)`` with S the survival from
        all terminal causes. For an uptake u (among customers not holding the product) the
        terminal causes compete with it: ``F_u(t) = Σ_{s ≤ t} S_u(s−1) h_u(s)`` with
        ``S_u(t) = Π (1 − h_u − Σ_k h_k)``: the probability of taking the product up before
        leaving. Index (``customer_id``, ``month_ahead``), one column per cause.
        """
        array = self._hazards(snapshot, horizon)
        out = incidence_from_hazards(array, len(self.terminal_causes_))
        index = pd.MultiIndex.from_product(
            [snapshot["customer_id"].to_numpy(), np.arange(1, horizon + 1)],
            names=["customer_id", "month_ahead"],
        )
        return pd.DataFrame(out.reshape(-1, out.shape[-1]), index=index, columns=self.causes_)

    def hazard_array(self, snapshot: pd.DataFrame, horizon: int = 12) -> np.ndarray:
        """`predict_hazard` as an array ``(n, horizon, K)`` in `causes_` order (no index)."""
        return self._hazards(snapshot, horizon)

    def _hazards(self, snapshot: pd.DataFrame, horizon: int) -> np.ndarray:
        if not hasattr(self, "features_"):
            raise UsageError(f"this {type(self).__name__} is not fitted yet; call fit(panel)")
        if horizon < 1:
            raise UsageError(f"horizon was {horizon} but must be at least 1")
        missing = [c for c in self.features_ if c not in snapshot.columns]
        if missing:
            raise UsageError(
                f"the snapshot lacks feature columns the model was fitted on: {missing}"
            )
        # Customers in blocks, so that the repeated future rows (customers × horizon) of a
        # large portfolio never sit in memory at once; each customer's hazards are its own.
        blocks = []
        n = len(snapshot)
        for lo in range(0, max(n, 1), _BLOCK_CUSTOMERS):
            part = snapshot.iloc[lo : lo + _BLOCK_CUSTOMERS]
            what = f"{_family_label(self)}: customers {lo + 1:,} to {lo + len(part):,} of {n:,}"
            progress("hazards", lo // _BLOCK_CUSTOMERS, -(-n // _BLOCK_CUSTOMERS) or 1, what)
            future = future_rows(part, horizon, self._known_future())
            with library_warnings(_family_label(self)):
                blocks.append(self._hazard_array(future, len(part), horizon))
        array = valid_hazards(np.concatenate(blocks, axis=0), len(self.terminal_causes_))
        for j, cause in enumerate(self.causes_):
            holds = PanelLayout.at_risk_column(cause)
            if holds is not None and holds in snapshot:
                # a customer who holds the product already cannot take it up again
                array[snapshot[holds].to_numpy() == 1, :, j] = 0.0
        return array


def _family_label(model: HazardModel) -> str:
    """The short family name used in messages (``cox``, ``forest``, ``boosted``, ...)."""
    return _FAMILY_LABELS.get(type(model).__name__, type(model).__name__)


_FAMILY_LABELS = {
    "CauseSpecificCox": "cox",
    "SurvivalForest": "forest",
    "BoostedHazard": "boosted",
    "TenureLifeTable": "life_table",
    "ChampionModel": "champion",
}


def survival_from_hazards(hazards: np.ndarray, n_terminal: int) -> np.ndarray:
    """Survival ``(n, T)`` from hazards ``(n, T, K)`` whose first ``n_terminal`` causes are
    the terminal ones (`survival_and_incidence` over those)."""
    survival, _ = survival_and_incidence(hazards[..., :n_terminal])
    return survival


def incidence_from_hazards(hazards: np.ndarray, n_terminal: int) -> np.ndarray:
    """Cumulative incidence ``(n, T, K)`` of every cause from hazards ``(n, T, K)``.

    Terminal causes compete with each other; each uptake cause (after the terminal ones)
    competes with all terminal causes (see `HazardModel.predict_cumulative_incidence`). The
    hazards must be valid (`valid_hazards`), as every model's are.
    """
    k = n_terminal
    _, terminal = survival_and_incidence(hazards[..., :k])
    parts = [terminal]
    for j in range(k, hazards.shape[-1]):
        parts.append(uptake_incidence(hazards, range(k), j)[..., None])
    return np.concatenate(parts, axis=-1)


def future_rows(
    snapshot: pd.DataFrame, horizon: int, known_future: dict[str, str] | None = None
) -> pd.DataFrame:
    """The snapshot repeated for months 1..``horizon``, tenure and season advanced.

    Customer-major: customer i's month k is row ``i * horizon + k − 1``. Adds ``month_ahead``.
    ``month`` becomes the integer month index of each row. The columns of ``known_future``
    (``{column: schedule}``, `lifecycle.panel._future`) are moved ``k − 1`` months on.
    """
    n = len(snapshot)
    repeat = np.repeat(np.arange(n), horizon)
    step = np.tile(np.arange(horizon), n)
    future = snapshot.iloc[repeat].reset_index(drop=True)
    month = categorical_to_index(snapshot["month"])[repeat] + step
    future["month"] = month
    future["month_ahead"] = (step + 1).astype(np.int16)
    future["tenure_start"] = (snapshot["tenure_start"].to_numpy()[repeat] + step).astype(np.int16)
    future["tenure_stop"] = future["tenure_start"] + 1
    if "season_sin" in future:
        future["season_sin"] = np.sin(_SEASON_ANGLE).astype(np.float32)[month % 12]
        future["season_cos"] = np.cos(_SEASON_ANGLE).astype(np.float32)[month % 12]
    project_known_future(future, step, known_future)
    return future
