"""The model families by name, with hyperparameters from the config's ``[models.<family>]``."""

from __future__ import annotations

from ..config import Config, section, setting
from ..errors import UsageError
from ._base import HazardModel


def _families() -> dict[str, type[HazardModel]]:
    from ._boosted import BoostedHazard
    from ._cox import CauseSpecificCox
    from ._forest import SurvivalForest

    return {"cox": CauseSpecificCox, "forest": SurvivalForest, "boosted": BoostedHazard}


FAMILY_NAMES = ("cox", "forest", "boosted")


SCORE_HORIZON = 12
"""The longest horizon scores are given for by default (``score --horizons 3,6,12``)."""


def needed_horizon(config: Config | None = None, longest: int = SCORE_HORIZON) -> int:
    """The longest horizon, in months, a later step asks of a model: ``longest`` (the scores'),
    ``[value] horizon_months`` and ``[forecast] horizon_months``."""
    value = setting(config, "value.horizon_months")
    forecast = setting(config, "forecast.horizon_months")
    return int(max(longest, value, forecast))


def make_model(
    family: str, config: Config | None = None, *, horizon: int | None = None
) -> HazardModel:
    """A new, unfitted model of ``family`` (``cox``, ``forest`` or ``boosted``).

    Hyperparameters come from the config section ``[models.<family>]`` (``lifecycle settings``
    lists them), checked against the settings schema. The forest predicts at most its
    ``horizon`` months ahead; unless set, that follows `needed_horizon` (with ``horizon``, the
    longest the caller will ask for, when it is longer), so that scoring, lifetime value and
    the forecast can use it as fitted.

    Unknown families or hyperparameters raise `UsageError` naming what is allowed. The
    families that project features month by month (Cox, boosted) take ``[panel]
    known_future`` and the schedules of the past-offer features (`lifecycle.panel._offers`).
    """
    families = _families()
    if family not in families:
        raise UsageError(f"family was {family!r} but is expected to be one of {list(FAMILY_NAMES)}")
    cls = families[family]
    settings = section(config, f"models.{family}")
    if family == "forest" and "horizon" not in settings:
        settings["horizon"] = needed_horizon(config, max(SCORE_HORIZON, horizon or 0))
    if config is not None and "known_future" in cls().get_params():
        # features whose future is known: past offers' (by themselves) and [panel] known_future
        from ..panel import offer_schedules

        schedule = {**offer_schedules(config), **config.panel.known_future}
        if schedule:
            settings = {**settings, "known_future": schedule}
    return cls(**settings)
