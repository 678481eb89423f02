"""One model made of the best family for each cause."""

from __future__ import annotations

import numpy as np
import pandas as pd
from sklearn.base import clone

from ..errors import UsageError
from ._base import HazardModel


class ChampionModel(HazardModel):
    """Each cause's hazard from the family that predicted it best in the backtest.

    Cause-specific hazards are separate quantities, so the hazard of churn may come from one
    family and that of move-out from another; survival and cumulative incidence then follow
    from the combined hazards through the one shared competing-risk function, as for any
    family.

    Parameters
    ----------
    families
        Family name → unfitted (or fitted) model.
    champions
        Cause → family name; a cause not named takes ``default``.
    default
        The family for causes without a champion.
    """

    def __init__(
        self,
        *,
        families: dict[str, HazardModel] | None = None,
        champions: dict[str, str] | None = None,
        default: str = "boosted",
    ) -> None:
        self.families = families
        self.champions = champions
        self.default = default

    def _fit(self, panel: pd.DataFrame) -> None:
        families = self.families or {}
        choice = {c: (self.champions or {}).get(c, self.default) for c in self.causes_}
        unknown = sorted(set(choice.values()) - set(families))
        if unknown:
            raise UsageError(f"champion families {unknown} are not among {sorted(families)}")
        self.cause_family_ = choice
        self.fitted_ = {
            name: clone(families[name]).fit(panel) for name in sorted(set(choice.values()))
        }

    def _hazard_array(self, future: pd.DataFrame, n: int, horizon: int) -> np.ndarray:
        parts = {
            name: model._hazard_array(future, n, horizon) for name, model in self.fitted_.items()
        }
        out = np.empty((n, horizon, len(self.causes_)))
        for j, cause in enumerate(self.causes_):
            model = self.fitted_[self.cause_family_[cause]]
            out[..., j] = parts[self.cause_family_[cause]][..., model.causes_.index(cause)]
        return out

    def _known_future(self) -> dict[str, str] | None:
        """The fitted families' schedule of features whose future is known (they share one)."""
        for model in getattr(self, "fitted_", {}).values():
            schedule = model._known_future()
            if schedule:
                return schedule
        return None

    @property
    def coefficients_(self) -> pd.DataFrame | None:
        """The Cox family's coefficients, when it is one of the fitted families."""
        cox = getattr(self, "fitted_", {}).get("cox")
        return getattr(cox, "coefficients_", None)

    @property
    def ph_tests_(self) -> pd.DataFrame | None:
        """The Cox family's proportional-hazards tests, when it is one of the fitted families."""
        cox = getattr(self, "fitted_", {}).get("cox")
        return getattr(cox, "ph_tests_", None)
