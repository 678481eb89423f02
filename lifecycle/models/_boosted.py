"""Boosted discrete-time hazards: gradient-boosted classifiers on person-months."""

from __future__ import annotations

import contextlib
import logging

import numpy as np
import pandas as pd
from sklearn.ensemble import HistGradientBoostingClassifier
from threadpoolctl import threadpool_limits

from .._progress import progress
from .._warnings import library_warnings
from ..errors import InputError, UsageError
from ..panel import project_known_future
from ._base import HazardModel
from ._design import finite_numbers
from ._landmarks import block_first, in_customer_order
from ._sampling import check_max_rows, non_event_share

log = logging.getLogger(__name__)

_MAX_LEVELS = 255  # histogram gradient boosting bins a categorical into at most 255 levels
_ADVANCED = ("tenure_start", "season_sin", "season_cos")  # what future_rows moves on


class BoostedHazard(HazardModel):
    """Discrete-time competing-risks hazards from histogram gradient boosting.

    Every panel row is one customer-month at risk. A multiclass classifier
    (scikit-learn's `HistGradientBoostingClassifier`, log loss) learns

        P(class = k | z) = h_k(z)     for k in churn, move_out, other_exit,
        P(class = 0 | z) = 1 − Σ_k h_k(z)     (no exit in the month),

    so the predicted class probabilities are the monthly cause-specific hazards, and they sum
    to at most 1 by construction. Each product p gets a binary classifier on the rows at risk
    of its uptake (``holds_<p> = 0``): ``P(uptake_<p> = 1 | z) = h_p(z)``.

    The inputs z of the row of month t. With ``horizon = None`` they are the row's own tenure
    (``tenure_start``) and features (season included): the hazard of the month given what was
    known at its start. Predicting s months ahead then holds the snapshot's features for
    month s, which overstates the risk of a customer whose risk is high for a month only (a
    contract ending, a bill shock) and so is not calibrated beyond the first month. With
    ``horizon = H`` (the default) the model learns the hazard *s months after a snapshot*
    instead, as the predictions use it: for each row of month t a lag s is drawn uniformly
    from 1..min(H, months of the customer in the panel up to t), and z is the features of
    the customer's row of month m = t − s + 1 (the snapshot), the tenure and season of month t,
    and ``month_ahead = s`` (the inputs `future_rows` gives when predicting). The lag is drawn
    independently of the outcome, so the hazard given z is estimated without bias, with one
    row per person-month as before; the predicted cumulative incidence then averages over how
    covariates change after the snapshot (landmarking: van Houwelingen 2007, Scand. J. Statist.
    34, 70–85). Months ahead beyond H use the hazard of month H's inputs.

    Categorical features are used natively (``categorical_features="from_dtype"``; levels
    unseen in training are treated as missing) and missing values natively. The calendar
    month itself is not an input: trees would carry its last level flat into the months
    predicted, while the season columns carry what recurs.

    Large panels: with ``sample_fraction = f`` each classifier is fitted on all its event rows
    and a random fraction f of its non-event rows, the latter weighted ``1 / f``; the weighted
    log loss is then an unbiased estimate of the full panel's, so the hazards stay calibrated.
    Without ``sample_fraction``, a classifier with more than ``max_rows`` rows at risk samples
    its non-event rows the same way, with f chosen so that about ``max_rows`` rows are fitted.

    Early stopping holds out a random ``validation_fraction`` of the customers (all their
    months, so that a customer's correlated months never sit on both sides) and stops when the
    held-out loss has not improved by ``tol`` in ``n_iter_no_change`` rounds.

    Parameters
    ----------
    horizon
        Longest lag H between snapshot and month learned (see above), or ``None`` for the
        hazard given the month's own features.
    max_iter, learning_rate, max_leaf_nodes, min_samples_leaf, l2_regularization, max_depth
        Boosting settings, passed to every classifier.
    sample_fraction
        ``None`` (every row, up to ``max_rows``) or the fraction in (0, 1] of non-event rows
        kept.
    max_rows
        Without ``sample_fraction``: the rows a classifier is fitted on at most, about (see
        above); ``None`` never samples. Default 2,000,000.
    early_stopping
        ``"auto"`` (on when more than 10,000 rows are fitted), ``True`` or ``False``.
    validation_fraction, n_iter_no_change, tol
        Early-stopping settings (see above).
    n_threads
        OpenMP threads for fitting and predicting; ``None`` leaves scikit-learn's default (every
        core). On a machine shared with other work, 1 avoids threads waiting on each other.
    random_state
        Seed of the lags, the row sample, the validation customers and the classifiers.
    known_future
        Features whose future path is known, ``{column: schedule}`` (``[panel]
        known_future``; `lifecycle.panel._future`): projected month by month when predicting,
        and, for a lagged training row, projected from its snapshot by ``lag − 1`` months, so
        that training and prediction see the same inputs. ``None``: held at the snapshot.

    Attributes
    ----------
    inputs_ : tuple of str
        The columns given to the classifiers: ``tenure_start``, the features and, with a
        horizon, ``month_ahead``.
    terminal_model_ : HistGradientBoostingClassifier or None
        The multiclass exit model (``None`` when the panel has no exits: hazards 0).
    terminal_columns_ : tuple of int
        For each class of `terminal_model_` after class 0, the position of its cause.
    uptake_models_ : dict
        Uptake cause → binary classifier, or ``None`` when it had no events (hazard 0).
    n_rows_ : dict
        Model (``"terminal"`` or the uptake cause) → rows fitted (after sampling).
    n_iter_ : dict
        Model → boosting rounds used (after early stopping).
    """

    def __init__(
        self,
        *,
        horizon: int | None = 12,
        max_iter: int = 300,
        learning_rate: float = 0.05,
        max_leaf_nodes: int = 15,
        min_samples_leaf: int = 200,
        l2_regularization: float = 1.0,
        max_depth: int | None = None,
        sample_fraction: float | None = None,
        max_rows: int | None = 2_000_000,
        early_stopping: bool | str = "auto",
        validation_fraction: float = 0.15,
        n_iter_no_change: int = 15,
        tol: float = 1e-7,
        n_threads: int | None = None,
        random_state: int | None = 0,
        known_future: dict[str, str] | None = None,
    ) -> None:
        self.horizon = horizon
        self.max_iter = max_iter
        self.learning_rate = learning_rate
        self.max_leaf_nodes = max_leaf_nodes
        self.min_samples_leaf = min_samples_leaf
        self.l2_regularization = l2_regularization
        self.max_depth = max_depth
        self.sample_fraction = sample_fraction
        self.max_rows = max_rows
        self.early_stopping = early_stopping
        self.validation_fraction = validation_fraction
        self.n_iter_no_change = n_iter_no_change
        self.tol = tol
        self.n_threads = n_threads
        self.random_state = random_state
        self.known_future = known_future

    # -- fitting --------------------------------------------------------------------------------
    def _fit(self, panel: pd.DataFrame) -> None:
        self._check_settings()
        with self._threads():
            self._fit_models(panel)

    def _threads(self) -> contextlib.AbstractContextManager:
        if self.n_threads is None:
            return contextlib.nullcontext()
        return threadpool_limits(limits=self.n_threads, user_api="openmp")

    def _fit_models(self, panel: pd.DataFrame) -> None:
        rng = np.random.default_rng(self.random_state)
        self.inputs_ = ("tenure_start", *self.features_)
        _check_inputs(panel, self.inputs_)
        if self.horizon is not None:
            self.inputs_ = (*self.inputs_, "month_ahead")
            panel = in_customer_order(panel)
        design = self._design(panel, rng)
        validation = self._validation_rows(panel, rng)
        self.n_rows_, self.n_iter_ = {}, {}

        label = np.zeros(len(panel), dtype=np.int8)
        flags = np.column_stack([panel[c].to_numpy() == 1 for c in self.terminal_causes_])
        several = flags.sum(axis=1) > 1
        if several.any():
            raise InputError(
                table="panel",
                column=",".join(self.terminal_causes_),
                problem="a row has more than one terminal cause",
                count=int(several.sum()),
                examples=panel["customer_id"].to_numpy()[several],
                fix="a customer leaves once, by one cause",
            )
        for j in range(flags.shape[1]):
            label[flags[:, j]] = j + 1
        everyone = np.ones(len(panel), dtype=bool)
        steps = 1 + len(self.uptake_causes_)
        progress("fit", 0, steps, "boosted: exits (" + ", ".join(self.terminal_causes_) + ")")
        with library_warnings("boosted", "exits (" + ", ".join(self.terminal_causes_) + ")"):
            self.terminal_model_ = self._classifier(
                design, everyone, label, validation, rng, "terminal"
            )
        if self.terminal_model_ is not None:
            self.terminal_columns_ = tuple(int(c) - 1 for c in self.terminal_model_.classes_[1:])
        else:
            self.terminal_columns_ = ()

        self.uptake_models_ = {}
        for i, cause in enumerate(self.uptake_causes_):
            progress("fit", 1 + i, steps, f"boosted: {cause}")
            holds = "holds_" + cause.removeprefix("uptake_")
            at_risk = panel[holds].to_numpy() == 0 if holds in panel else everyone
            event = (panel[cause].to_numpy() == 1).astype(np.int8)
            with library_warnings("boosted", cause):
                self.uptake_models_[cause] = self._classifier(
                    design, at_risk, event, validation, rng, cause
                )

    def _check_settings(self) -> None:
        f = self.sample_fraction
        if f is not None and not (isinstance(f, int | float) and 0 < f <= 1):
            raise UsageError(f"sample_fraction was {f!r} but is expected to be None or in (0, 1]")
        check_max_rows(self.max_rows)
        h = self.horizon
        if h is not None and not (isinstance(h, int | np.integer) and h >= 1):
            raise UsageError(f"horizon was {h!r} but is expected to be None or a whole number >= 1")
        if self.early_stopping not in ("auto", True, False):
            raise UsageError(
                f"early_stopping was {self.early_stopping!r} but is expected to be "
                "'auto', True or False"
            )
        if self.n_threads is not None and not (
            isinstance(self.n_threads, int) and self.n_threads >= 1
        ):
            raise UsageError(f"n_threads was {self.n_threads!r} but is expected to be None or >= 1")
        if not 0 < self.validation_fraction < 1:
            raise UsageError(
                f"validation_fraction was {self.validation_fraction!r} but must lie in (0, 1)"
            )

    def _design(self, panel: pd.DataFrame, rng: np.random.Generator) -> _Design:
        """The inputs of every row: its own, or (with a horizon) a snapshot's at a random lag.

        The rows are only gathered for the rows a classifier is fitted on (`_Design.rows`),
        so a sampled fit never copies the whole panel's inputs.
        """
        own = _Columns(panel, ["tenure_start", *self.features_])  # not a copy of the panel
        if self.horizon is None:
            return _Design(own, None, None)
        position = np.arange(len(panel))
        first = block_first(pd.factorize(panel["customer_id"])[0])
        reach = np.minimum(position - first + 1, self.horizon)
        lag = 1 + np.floor(rng.random(len(panel)) * reach).astype(np.int64)
        return _Design(own, position - lag + 1, lag.astype(np.int16), self.known_future)

    def _validation_rows(self, panel: pd.DataFrame, rng: np.random.Generator) -> np.ndarray:
        """Rows of a random ``validation_fraction`` of the customers."""
        codes, uniques = pd.factorize(panel["customer_id"])
        chosen = rng.random(len(uniques)) < self.validation_fraction
        return chosen[codes]

    def _classifier(
        self,
        design: _Design,
        at_risk: np.ndarray,
        label: np.ndarray,
        validation: np.ndarray,
        rng: np.random.Generator,
        name: str,
    ) -> HistGradientBoostingClassifier | None:
        """Fit one classifier on the rows at risk (sampled), or ``None`` without events."""
        keep = at_risk.copy()
        weight = np.ones(len(design))
        n_events = int((label[at_risk] > 0).sum())
        share = non_event_share(self.sample_fraction, self.max_rows, int(keep.sum()), n_events)
        if share < 1:
            drawn = rng.random(len(design)) < share
            keep &= (label > 0) | drawn
            weight[label == 0] = 1.0 / share
        stop = self.early_stopping
        if stop == "auto":
            stop = int(keep.sum()) > 10_000
        if stop:
            fit_rows, val_rows = keep & ~validation, keep & validation
            # a class unseen in the fitting rows cannot be scored; count it as no event there
            val_label = np.where(np.isin(label, np.unique(label[fit_rows])), label, 0)
        else:
            fit_rows, val_rows = keep, None
        if not (label[fit_rows] > 0).any():
            log.warning("%s: no events among the rows at risk; its hazard is taken as 0", name)
            self.n_rows_[name], self.n_iter_[name] = 0, 0
            return None
        model = HistGradientBoostingClassifier(
            learning_rate=self.learning_rate,
            max_iter=self.max_iter,
            max_leaf_nodes=self.max_leaf_nodes,
            max_depth=self.max_depth,
            min_samples_leaf=self.min_samples_leaf,
            l2_regularization=self.l2_regularization,
            categorical_features="from_dtype",
            early_stopping=bool(stop),
            n_iter_no_change=self.n_iter_no_change,
            tol=self.tol,
            random_state=None if self.random_state is None else int(rng.integers(2**31 - 1)),
        )
        x = _fillable(design.rows(fit_rows))
        if val_rows is None or not val_rows.any():
            if stop:
                model.set_params(early_stopping=False)
            model.fit(x, label[fit_rows], sample_weight=weight[fit_rows])
        else:
            model.fit(
                x,
                label[fit_rows],
                sample_weight=weight[fit_rows],
                X_val=design.rows(val_rows),
                y_val=val_label[val_rows],
                sample_weight_val=weight[val_rows],
            )
        self.n_rows_[name], self.n_iter_[name] = int(fit_rows.sum()), int(model.n_iter_)
        log.info(
            "%s: %d rounds on %d rows (%d events)",
            name,
            model.n_iter_,
            int(fit_rows.sum()),
            int((label[fit_rows] > 0).sum()),
        )
        return model

    # -- predicting -----------------------------------------------------------------------------
    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        x = future[list(self.inputs_)]
        if self.horizon is not None:
            x = x.assign(month_ahead=np.minimum(x["month_ahead"].to_numpy(), self.horizon))
        with self._threads():
            return self._predict_array(x, n, horizon)

    def _predict_array(self, x: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        out = np.zeros((n * horizon, len(self.causes_)))
        if self.terminal_model_ is not None:
            proba = self.terminal_model_.predict_proba(x)
            for j, column in enumerate(self.terminal_columns_):
                out[:, column] = proba[:, j + 1]
        k = len(self.terminal_causes_)
        for j, cause in enumerate(self.uptake_causes_):
            model = self.uptake_models_[cause]
            if model is not None:
                out[:, k + j] = model.predict_proba(x)[:, 1]
        return out.reshape(n, horizon, len(self.causes_))


def _check_inputs(panel: pd.DataFrame, inputs: tuple[str, ...]) -> None:
    """Inputs must be numbers, booleans or categoricals of at most 255 levels, and finite."""
    for name in inputs:
        values = panel[name]
        if isinstance(values.dtype, pd.CategoricalDtype):
            levels = values.cat.categories.size
            if levels > _MAX_LEVELS:
                raise InputError(
                    table="panel",
                    column=name,
                    problem=f"the categorical feature has {levels} levels, more than {_MAX_LEVELS}",
                    fix="group rare levels together, or list the column in [panel] not_features",
                )
        elif pd.api.types.is_bool_dtype(values) or pd.api.types.is_numeric_dtype(values):
            finite_numbers(values, name, panel["customer_id"].to_numpy())
        else:
            raise InputError(
                table="panel",
                column=name,
                problem=f"the feature has dtype {values.dtype}, which is neither numeric nor "
                "categorical",
                count=len(values),
                fix="convert text columns to pandas categoricals (build_panel does)",
            )


class _Design:
    """The classifiers' inputs of each panel row, gathered on demand.

    Without lags (``source is None``) a row's inputs are its own columns. With lags, row i
    takes the columns of row ``source[i]`` (its snapshot, ``lag[i] − 1`` months earlier), except
    tenure and season, which stay row i's own, and ``month_ahead = lag[i]``; the features of
    ``known_future`` are projected from the snapshot ``lag[i] − 1`` months on, as
    `future_rows` does when predicting.
    """

    def __init__(
        self,
        own: _Columns,
        source: np.ndarray | None,
        lag: np.ndarray | None,
        known_future: dict[str, str] | None = None,
    ):
        self.own, self.source, self.lag = own, source, lag
        self.known_future = known_future

    def __len__(self) -> int:
        return len(self.own)

    def rows(self, mask: np.ndarray) -> pd.DataFrame:
        """The inputs of the rows where ``mask`` is true, in panel order."""
        where = np.flatnonzero(mask)
        if self.source is None:
            return self.own.take(where)
        out = self.own.take(self.source[where])
        for name in _ADVANCED:
            if name in out:
                out[name] = self.own.column(name)[where]
        out["month_ahead"] = self.lag[where]
        project_known_future(out, self.lag[where] - 1, self.known_future)
        return out


def _fillable(x: pd.DataFrame) -> pd.DataFrame:
    """``x`` with every all-missing numeric column set to 0: scikit-learn's histogram binning
    fails on a column with no value at all (a feature no sampled row has yet, such as the months
    since an offer nobody in the sample received). A constant column is never split on, so the
    fitted trees are the same; prediction may then see values there, which no tree reads."""
    empty = [c for c in x.columns if x[c].dtype.kind == "f" and x[c].isna().all()]
    return x.assign(**{c: np.zeros(len(x), dtype=x[c].dtype) for c in empty}) if empty else x


class _Columns:
    """Some columns of a panel, read without copying the panel: rows are taken on demand."""

    def __init__(self, panel: pd.DataFrame, names: list[str]) -> None:
        self.panel, self.names = panel, names
        self.positions = [panel.columns.get_loc(name) for name in names]

    def __len__(self) -> int:
        return len(self.panel)

    def take(self, rows: np.ndarray) -> pd.DataFrame:
        """The columns at row positions ``rows``, as a new frame indexed 0..len(rows) − 1."""
        return self.panel.iloc[rows, self.positions].reset_index(drop=True)

    def column(self, name: str) -> np.ndarray:
        return self.panel[name].to_numpy()
