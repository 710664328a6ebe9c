"""Forecasting: candidate models, rolling-origin model choice and joint demand paths.

``forecast_scenario(scenario, clean, horizon_days=…, path_count=…, seed=…)`` is the stage's
one entry point (see :mod:`planner.forecast.stage`); its result draws more demand paths
from the fitted models with ``result.draw_paths(seed, count, days)``; the models live in
:mod:`planner.forecast.models`, the backtest in :mod:`planner.forecast.scoring`.
"""
from planner.forecast.models import (CANDIDATES, LEVELS, DemandModel, HoltWinters,
                                     ModelFitError, RegressionARIMA, SeasonalNaive)
from planner.forecast.profile import NetworkProfile
from planner.forecast.stage import (DEFAULT_MODELS, FittedForecast, ForecastResult,
                                    candidate_models, fitted_forecast, forecast_scenario)

__all__ = ["forecast_scenario", "ForecastResult", "FittedForecast", "fitted_forecast",
           "candidate_models", "DEFAULT_MODELS",
           "DemandModel", "SeasonalNaive", "HoltWinters", "RegressionARIMA",
           "NetworkProfile", "ModelFitError", "CANDIDATES", "LEVELS"]
