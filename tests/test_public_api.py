"""The public surface is pinned: adding or removing a name is a deliberate change."""

from __future__ import annotations

import inspect

import lifecycle

EXPECTED = {
    "BacktestResult", "BoostedHazard", "CauseSpecificCox", "Config", "HazardModel",
    "InputError", "LifecycleError", "ModelFileError", "Offer", "Plan", "RawTables",
    "SurvivalForest", "Tables", "TenureLifeTable", "UsageError", "add_spatial_context",
    "backtest", "build_panel", "build_snapshot", "check_tables", "describe_tables",
    "estimate_offer_effects", "fan_chart", "forecast_uptake", "harrell_concordance",
    "integrated_brier_score", "life_table", "lifetime_value", "logrank_test",
    "load_config", "load_model", "load_tables", "make_plan", "offer_values",
    "offers_from_config", "panel_layout", "premise_areas", "read_raw_tables", "run_cycle",
    "save_model", "score_customers", "simulate_demo", "survival_and_incidence",
    "tables_as_of", "top_reasons", "write_demo",
}  # fmt: skip


def test_public_names_are_pinned():
    assert set(lifecycle.__all__) == EXPECTED
    for name in lifecycle.__all__:
        assert hasattr(lifecycle, name), name


FORECAST = {
    "ALL_AREAS", "ForecastSettings", "ShiftedBetaGeometric", "fan_chart",
    "fit_shifted_beta_geometric", "forecast_coverage", "forecast_extras", "forecast_settings",
    "forecast_uptake", "launch_forecast", "launch_settings", "mixture_quantiles",
    "poisson_binomial_cdf", "poisson_binomial_pmf", "poisson_binomial_quantiles",
    "save_fan_chart", "track_record", "track_record_hook",
}  # fmt: skip


def test_forecast_names_are_pinned():
    import lifecycle.forecast as forecast

    assert set(forecast.__all__) == FORECAST
    for name in forecast.__all__:
        assert inspect.getdoc(getattr(forecast, name)), f"{name} has no docstring"


EVALUATION_CAMPAIGN = {
    "CampaignMetricSettings", "campaign_metric_settings", "cross_fitted_qini",
    "expected_maximum_profit", "qini_coefficient", "qini_curve",
}  # fmt: skip
VALUE_CAMPAIGN = {"OfferEffectModel", "campaign_covariates", "customer_offer_effects"}


def test_campaign_metrics_and_effects_are_pinned():
    """The uplift metrics and the per-customer offer effects are public, documented and typed."""
    import lifecycle.evaluation as evaluation
    import lifecycle.value as value

    for module, names in ((evaluation, EVALUATION_CAMPAIGN), (value, VALUE_CAMPAIGN)):
        assert names <= set(module.__all__)
        for name in names:
            obj = getattr(module, name)
            assert inspect.getdoc(obj), f"{name} has no docstring"
            if inspect.isfunction(obj):
                ret = inspect.signature(obj).return_annotation
                assert ret is not inspect.Signature.empty, f"{name} has no return type"


def test_public_functions_are_documented_and_typed():
    for name in lifecycle.__all__:
        obj = getattr(lifecycle, name)
        assert inspect.getdoc(obj), f"{name} has no docstring"
        if inspect.isfunction(obj):
            hints = inspect.signature(obj).return_annotation
            assert hints is not inspect.Signature.empty, f"{name} has no return type"


def test_estimators_follow_the_scikit_learn_contract():
    """Keyword-only hyperparameters that the constructor only stores; clone round-trips
    (scikit-learn's own ``clone`` is the reference)."""
    from sklearn.base import clone

    for cls in (lifecycle.CauseSpecificCox, lifecycle.BoostedHazard, lifecycle.SurvivalForest):
        params = inspect.signature(cls.__init__).parameters
        assert all(
            p.kind is inspect.Parameter.KEYWORD_ONLY for n, p in params.items() if n != "self"
        ), cls
        model = cls()
        assert clone(model).get_params() == model.get_params()


def test_every_public_name_resolves_to_where_it_lives():
    import importlib

    for name in lifecycle.__all__:
        module = importlib.import_module(f"lifecycle.{lifecycle._WHERE[name]}")
        assert getattr(lifecycle, name) is getattr(module, name)
    assert set(lifecycle._WHERE) == set(lifecycle.__all__)
