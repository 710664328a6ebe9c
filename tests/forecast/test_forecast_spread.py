"""Calibrated bands and paths: the spread factor fitted to the backtest's pinball loss, on
errors whose true spread is known by construction."""
from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from planner.demo import demo_path
from planner.forecast.scoring import (BACKTEST_LEVELS, ModelBacktest, fit_network_spread,
                                       spread_by_day, widen)


def _backtest(true_sd: float, model_sd: float, seed: int) -> ModelBacktest:
    """8 origins × 14 days of lognormal demand with log-sd ``true_sd``, and bands of a model
    that believes ``model_sd`` (the median right)."""
    rng = np.random.default_rng(seed)
    median = 8000.0
    actual = median * np.exp(rng.normal(0.0, true_sd, (8, 14)))
    z = stats.norm.ppf(BACKTEST_LEVELS)
    q = median * np.exp(model_sd * z)[:, None, None] * np.ones((1, 8, 14))
    return ModelBacktest("m", np.arange(8), actual, np.full((8, 14), median), q,
                         np.full(8, 1000.0), None)


@pytest.mark.parametrize("model_sd, low, high", [(0.2, 1.3, 1.6), (0.45, 0.6, 0.8),
                                                 (0.3, 0.9, 1.1)])
def test_the_factor_recovers_the_true_spread(model_sd, low, high):
    # true log-sd 0.3: bands of sd 0.2 need ×1.5, of 0.45 ×0.67, of 0.3 none
    tests = [_backtest(0.3, model_sd, seed) for seed in range(30)]
    factors = fit_network_spread(tests)
    assert factors.shape == (2, 2)
    assert ((factors >= low) & (factors <= high)).all(), factors


def test_widen_is_monotone_keeps_the_median_and_moves_paths_with_the_bands():
    rng = np.random.default_rng(3)
    median = np.full(10, 5000.0)
    paths = median * np.exp(rng.normal(0.0, 0.25, (20000, 10)))
    factors = spread_by_day(np.array([[0.8, 0.8], [1.3, 1.3]]), 10)
    wide = widen(paths, median, factors)
    order = np.argsort(paths[:, 0])
    assert np.all(np.diff(wide[order, 0]) >= 0)                 # one realisation per path
    np.testing.assert_allclose(widen(median, median, factors), median)
    bands = widen(np.quantile(paths, [0.1, 0.9], axis=0), median, factors)
    np.testing.assert_allclose(np.quantile(wide, [0.1, 0.9], axis=0), bands, rtol=1e-9)


def test_the_stage_issues_calibrated_bands_and_paths_that_agree():
    from planner.cleaning import clean_history
    from planner.forecast import forecast_scenario
    from planner.scenario import load_scenario

    scenario = load_scenario(demo_path("tiny"))
    clean = clean_history(scenario)
    result = forecast_scenario(scenario, clean, horizon_days=14, path_count=4000, seed=5,
                               origins=4)
    factors = result.fitted.terminals[0].spread
    assert factors is not None and factors.shape[0] == 2
    q = result.quantiles[result.quantiles["terminal_id"] == result.terminal_ids[0]]
    empirical = np.quantile(result.paths[0], [0.1, 0.9], axis=0)
    np.testing.assert_allclose(empirical, q[["q10", "q90"]].to_numpy().T, rtol=0.06)
    # a later draw for the same seed is the stage's own draw
    np.testing.assert_array_equal(result.draw_paths(5, 4000, 14), result.paths)
