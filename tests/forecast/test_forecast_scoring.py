"""Tests of the rolling-origin backtest and the champion choice (planner.forecast.scoring)."""
from __future__ import annotations

import numpy as np
import pytest

from planner.forecast.scoring import (BACKTEST_LEVELS, accuracy, backtest_model,
                                       champion_reason, mase_scale, origin_days, pinball,
                                       rank_models)
from planner.forecast.models import HoltWinters, RegressionARIMA, SeasonalNaive
from test_forecast_models import weekly_ar1


def test_origin_days_are_weekly_and_leave_the_test_window():
    days = origin_days(730, origins=8, horizon=14)
    assert list(days) == [730 - 14 - 7 * k for k in range(7, -1, -1)]
    assert days[-1] + 14 == 730
    # origins that leave less than min_train days of training history are dropped
    assert list(origin_days(84, origins=8, horizon=14, min_train=56)) == [56, 63, 70]
    assert len(origin_days(60, origins=8, horizon=14, min_train=56)) == 0


def test_pinball_loss_by_hand():
    # pinball (quantile) loss: q·(y − f) above the forecast, (1 − q)·(f − y) below
    # (Koenker & Bassett 1978; common practice)
    assert pinball(np.array(10.0), np.array(8.0), 0.9) == pytest.approx(1.8)
    assert pinball(np.array(10.0), np.array(12.0), 0.9) == pytest.approx(0.2)
    assert pinball(np.array(10.0), np.array(12.0), 0.5) == pytest.approx(1.0)


def test_mase_scale_is_mean_absolute_weekly_difference():
    y = np.array([1, 2, 3, 4, 5, 6, 7, 3, 2, 3, 4, 5, 6, 9], dtype=float)
    assert mase_scale(y) == pytest.approx(np.mean(np.abs(y[7:] - y[:7])))
    assert mase_scale(np.full(30, 5.0)) > 0          # constant series: finite ratios


def test_accuracy_identities():
    rng = np.random.default_rng(0)
    actual = rng.gamma(5.0, 1000.0, (8, 14))
    point = actual * rng.lognormal(0, 0.2, actual.shape)
    quant = np.stack([point * f for f in (0.6, 0.8, 1.0, 1.25, 1.6)])
    scale = np.full(8, 700.0)
    out = accuracy(actual, point, quant, scale)
    # the scaled pinball loss of the median is half the MASE when the median is the point
    assert out["pinball_50"] / 700.0 == pytest.approx(out["mase"] / 2)
    assert out["coverage_80"] == pytest.approx(np.mean((actual >= quant[1]) &
                                                       (actual <= quant[3])))
    perfect = accuracy(actual, actual, np.stack([actual] * 5), scale)
    assert perfect["mase"] == 0 and perfect["smape"] == 0 and perfect["score"] == 0
    assert perfect["coverage_80"] == 1.0


def test_backtest_fits_once_and_refilters_without_seeing_the_test_window():
    y, _, _ = weekly_ar1(400, seed=1)
    origins = origin_days(len(y))
    result = backtest_model(HoltWinters(), y, None, origins)
    assert result.point.shape == (8, 14) and result.quantiles.shape == (5, 8, 14)
    # the model was fitted on the data before the earliest origin only
    assert len(result.model.w_) == origins[0]
    spoiled = y.copy()
    spoiled[origins[-1]:] *= 10                      # the last test window must not matter
    again = backtest_model(HoltWinters(), spoiled, None, origins)
    np.testing.assert_allclose(again.point[-1], result.point[-1])
    assert np.all(np.diff(result.quantiles, axis=0) >= 0)


def test_champion_beats_seasonal_naive_on_known_process_with_calibrated_band():
    # weekly-seasonal log-normal AR(1): known process, so regression with AR errors is the
    # right model and must beat the weekly seasonal naive; its 80 % band must cover ≈ 80 %
    coverage, wins = [], 0
    for seed in range(6):
        y, _, _ = weekly_ar1(730, phi=0.5, sigma=0.15, seed=100 + seed)
        origins = origin_days(len(y))
        metrics = {m.name: backtest_model(m, y, None, origins).metrics()
                   for m in (RegressionARIMA(), HoltWinters(), SeasonalNaive())}
        order = list(metrics)
        best = rank_models(metrics, order)[0]
        wins += metrics[best]["mase"] < metrics["seasonal_naive"]["mase"]
        assert best != "seasonal_naive"
        coverage.append(metrics[best]["coverage_80"])
        assert "lowest mean scaled pinball loss" in champion_reason(
            metrics, rank_models(metrics, order), len(origins), 14)
    assert wins == 6
    # 6 × 112 autocorrelated days: the pooled share has a sampling sd of about 0.03
    assert np.mean(coverage) == pytest.approx(0.80, abs=0.06)


def test_rank_models_breaks_ties_by_list_order():
    metrics = {"a": {"score": 0.2}, "b": {"score": 0.1}, "c": {"score": 0.1}}
    assert rank_models(metrics, ["c", "b", "a"]) == ["c", "b", "a"]
    assert rank_models(metrics, ["a", "b", "c"]) == ["b", "c", "a"]
    assert BACKTEST_LEVELS[1] == 0.1 and BACKTEST_LEVELS[3] == 0.9
