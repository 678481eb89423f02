"""The model families by name, with hyperparameters from the config's ``[models.<family>]``."""

from __future__ import annotations

from ..config import Config
from ..errors import UsageError
from ._base import HazardModel


def _families() -> dict[str, type[HazardModel]]:
    from ._boosted import BoostedHazard
    from ._cox import CauseSpecificCox
    from ._forest import SurvivalForest

    return {"cox": CauseSpecificCox, "forest": SurvivalForest, "boosted": BoostedHazard}


FAMILY_NAMES = ("cox", "forest", "boosted")


def make_model(family: str, config: Config | None = None) -> HazardModel:
    """A new, unfitted model of ``family`` (``cox``, ``forest`` or ``boosted``).

    Hyperparameters come from the config section ``[models.<family>]``, e.g.::

        [models.cox]
        penalizer = 0.01
        sample_fraction = 0.2

        [models.boosted]
        max_iter = 200

    Unknown families or hyperparameters raise `UsageError` naming what is allowed. The
    families that project features month by month (Cox, boosted) take ``[panel]
    known_future`` and the schedules of the past-offer features (`lifecycle.panel._offers`).
    """
    families = _families()
    if family not in families:
        raise UsageError(f"family was {family!r} but is expected to be one of {list(FAMILY_NAMES)}")
    cls = families[family]
    settings = (config.raw if config else {}).get("models", {}).get(family, {})
    if not isinstance(settings, dict):
        raise UsageError(f"[models.{family}] must be a table of hyperparameters")
    allowed = sorted(set(cls().get_params()) - {"known_future"})
    unknown = sorted(set(settings) - set(allowed))
    if unknown:
        raise UsageError(
            f"[models.{family}] has unknown hyperparameter(s) {unknown}; allowed are {allowed}"
        )
    if config is not None and "known_future" in cls().get_params():
        # features whose future is known: past offers' (by themselves) and [panel] known_future
        from ..panel._offers import offer_schedules

        schedule = {**offer_schedules(config), **config.panel.known_future}
        if schedule:
            settings = {**settings, "known_future": schedule}
    return cls(**settings)
