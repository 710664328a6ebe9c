"""Tests of the forecasting stage (planner.forecast.forecast_scenario) on the tiny scenario."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from planner.cleaning import clean_history
from planner.errors import InputError
from planner.executor import LocalExecutor
from planner.forecast import ForecastResult, NetworkProfile, forecast_scenario
from planner.forecast.profile import network_profile
from planner.scenario import load_scenario
from conftest import TINY



@pytest.fixture(scope="module")
def tiny():
    scenario = load_scenario(TINY)
    return scenario, clean_history(scenario)


@pytest.fixture(scope="module")
def result(tiny) -> ForecastResult:
    scenario, clean = tiny
    return forecast_scenario(scenario, clean, horizon_days=14, path_count=200, seed=11)


def test_result_shapes_and_frames(tiny, result):
    scenario, _ = tiny
    assert result.terminal_ids == tuple(scenario.terminal_ids)
    assert list(result.dates) == list(scenario.horizon_dates)
    assert result.paths.shape == (3, 200, 14)
    assert np.all(result.paths >= 0) and np.all(np.isfinite(result.paths))
    q = result.quantiles
    assert list(q.columns) == ["terminal_id", "date", "model", "q05", "q10", "q50", "q90",
                               "q95", "mean"]
    assert len(q) == 3 * 14
    assert np.all(np.diff(q[["q05", "q10", "q50", "q90", "q95"]].to_numpy(), axis=1) >= 0)
    assert list(result.champion.index) == list(scenario.terminal_ids)
    assert {"model", "score", "reason"} <= set(result.champion.columns)
    assert (q.groupby("terminal_id")["model"].first()
            == result.champion["model"]).all()
    acc = result.accuracy
    for column in ("terminal_id", "model", "mase", "smape", "pinball_10", "pinball_50",
                   "pinball_90", "coverage_80", "coverage_95"):
        assert column in acc.columns
    assert set(acc["model"]) == {"regression_arima", "holt_winters", "seasonal_naive"}
    # 84 days of history leave room for 3 of the 8 weekly origins: said in fallbacks
    assert any("only 3 of 8 backtest origins" in text for text in result.fallbacks)
    assert result.champion["reason"].str.contains("scaled pinball").all()
    assert set(result.residuals) == set(scenario.terminal_ids)


def test_path_quantiles_agree_with_reported_quantiles(tiny):
    scenario, clean = tiny
    res = forecast_scenario(scenario, clean, horizon_days=14, path_count=4000, seed=3)
    for i, tid in enumerate(res.terminal_ids):
        q = res.quantiles[res.quantiles["terminal_id"] == tid]
        below10 = (res.paths[i] <= q["q10"].to_numpy()).mean(axis=0)
        below90 = (res.paths[i] <= q["q90"].to_numpy()).mean(axis=0)
        # binomial sd with 4,000 paths ≈ 0.005 (the empirical band of seasonal naive is a
        # step function, hence the allowance)
        np.testing.assert_allclose(below10, 0.10, atol=0.03)
        np.testing.assert_allclose(below90, 0.90, atol=0.03)


def test_same_seed_same_paths_other_seed_other_paths_and_parallel_identical(tiny, result):
    scenario, clean = tiny
    again = forecast_scenario(scenario, clean, horizon_days=14, path_count=200, seed=11)
    assert np.array_equal(again.paths, result.paths)
    other = forecast_scenario(scenario, clean, horizon_days=14, path_count=200, seed=12)
    assert not np.array_equal(other.paths, result.paths)
    with LocalExecutor(2) as workers:
        parallel = forecast_scenario(scenario, clean, horizon_days=14, path_count=200, seed=11,
                                     executor=workers)
    assert np.array_equal(parallel.paths, result.paths)
    pd.testing.assert_frame_equal(parallel.quantiles, result.quantiles)
    pd.testing.assert_frame_equal(parallel.accuracy, result.accuracy)


def test_paths_depend_only_on_seed_position_and_champion(tiny, result):
    scenario, clean = tiny
    only = forecast_scenario(scenario, clean, horizon_days=14, path_count=200, seed=11,
                             models=["seasonal_naive", "holt_winters", "regression_arima"])
    # same seed per position, same candidates in another order: a champion's paths are
    # the same whenever the champion is
    for i in range(3):
        if only.champion["model"].iloc[i] == result.champion["model"].iloc[i]:
            np.testing.assert_array_equal(only.paths[i], result.paths[i])


def test_longer_horizon_for_the_end_valuation(tiny, result):
    scenario, clean = tiny
    longer = forecast_scenario(scenario, clean, horizon_days=21, path_count=200, seed=11)
    assert longer.paths.shape == (3, 200, 21)
    assert longer.dates[0] == scenario.start_date
    first = longer.quantiles.groupby("terminal_id").head(14).reset_index(drop=True)
    pd.testing.assert_frame_equal(first, result.quantiles)


def test_gap_between_history_and_first_planning_day(tiny):
    scenario, clean = tiny
    later = replace(scenario, start_date=scenario.start_date + pd.Timedelta(days=5))
    res = forecast_scenario(later, clean, horizon_days=14, path_count=100, seed=1)
    assert res.dates[0] == later.start_date
    assert res.paths.shape == (3, 100, 14)
    # day j of the late plan is day j + 5 after the history: same forecast as before
    base = forecast_scenario(scenario, clean, horizon_days=19, path_count=100, seed=1)
    np.testing.assert_allclose(res.quantiles["q50"].to_numpy(),
                               base.quantiles.groupby("terminal_id").tail(14)["q50"].to_numpy())


def test_terminal_without_history_gets_network_profile(tiny):
    scenario, _ = tiny
    dispense = scenario.dispense[scenario.dispense["terminal_id"] != "BRH-003"]
    newcomer = replace(scenario, dispense=dispense.reset_index(drop=True))
    res = forecast_scenario(newcomer, clean_history(newcomer), horizon_days=14,
                            path_count=2000, seed=5)
    assert res.champion.loc["BRH-003", "model"] == "network_profile"
    assert any(text.startswith("BRH-003: no history") and "network" in text
               for text in res.fallbacks)
    paths = res.paths[res.terminal_ids.index("BRH-003")]
    assert np.all(paths > 0)
    levels = [np.mean(g["amount"].to_numpy()[-56:])
              for _, g in dispense[dispense["status"] == "ok"].groupby("terminal_id")]
    # the mean of a network-profile day is the median level times the weekday multiplier
    assert paths.mean() == pytest.approx(np.median(levels), rel=0.15)


def test_network_profile_statistics():
    rng = np.random.default_rng(0)
    week = np.array([0.8, 0.9, 1.0, 1.0, 1.3, 1.4, 0.6])
    series = {f"T{i}": (pd.Timestamp("2026-01-05"),          # a Monday
                        level * np.tile(week, 20) * rng.lognormal(0, 0.1, 140))
              for i, level in enumerate([3000, 5000, 8000])}
    stats = network_profile(series)
    assert stats["level"] == pytest.approx(5000, rel=0.05)
    assert np.argmax(stats["weekday_profile"]) == 5          # Saturday
    assert np.mean(stats["weekday_profile"]) == pytest.approx(1.0)
    model = NetworkProfile(level=stats["level"], level_sd=stats["level_sd"],
                           noise_sd=stats["noise_sd"],
                           weekday_profile=stats["weekday_profile"], first_weekday=0).fit()
    paths = model.simulate(7, 20000, np.random.default_rng(1))
    np.testing.assert_allclose(paths.mean(axis=0), model.mean(7), rtol=0.03)
    # one level draw per path: days of a path move together
    logs = np.log(paths)
    assert np.corrcoef(logs[:, 0], logs[:, 3])[0, 1] > 0.5


def test_only_seasonal_naive_and_unknown_model(tiny):
    scenario, clean = tiny
    res = forecast_scenario(scenario, clean, horizon_days=7, path_count=50, seed=1,
                            models=["seasonal_naive"])
    assert (res.champion["model"] == "seasonal_naive").all()
    with pytest.raises(InputError, match="unknown forecasting model"):
        forecast_scenario(scenario, clean, horizon_days=7, path_count=50, seed=1,
                          models=["prophet"])


def test_short_history_falls_back_and_says_so(tiny):
    scenario, _ = tiny
    last = scenario.dispense["date"].max()
    short = scenario.dispense[scenario.dispense["date"] > last - pd.Timedelta(days=30)]
    res_scn = replace(scenario, dispense=short.reset_index(drop=True))
    res = forecast_scenario(res_scn, clean_history(res_scn), horizon_days=14, path_count=50,
                            seed=1)
    assert any("no backtest" in text for text in res.fallbacks)
    assert any("regression_arima could not be fitted" in text for text in res.fallbacks)
    assert (res.champion["model"] == "holt_winters").all()
    assert res.champion["score"].isna().all()
    tiny_history = scenario.dispense[scenario.dispense["date"] > last - pd.Timedelta(days=5)]
    res_scn = replace(scenario, dispense=tiny_history.reset_index(drop=True))
    res = forecast_scenario(res_scn, clean_history(res_scn), horizon_days=14, path_count=50,
                            seed=1)
    assert (res.champion["model"] == "network_profile").all()
    assert any("too few for any model" in text for text in res.fallbacks)
    assert np.all(res.paths >= 0)


# ----------------------------------------------------------------------------- fitted models


def test_draw_paths_equals_the_stage_for_the_same_seed(tiny, result):
    """The result keeps its fitted champions: drawing with seed s gives exactly the paths the
    stage draws with seed s — also for other counts, longer and shorter horizons, a gap before
    the first planning day, a terminal without history, and from a parallel run."""
    scenario, clean = tiny
    with LocalExecutor(2) as workers:
        other = forecast_scenario(scenario, clean, horizon_days=14, path_count=50, seed=99,
                                  executor=workers)
    np.testing.assert_array_equal(other.draw_paths(11, 200, 14), result.paths)
    np.testing.assert_array_equal(result.draw_paths(11, 200), result.paths)
    for days, count in ((21, 30), (5, 70)):
        stage = forecast_scenario(scenario, clean, horizon_days=days, path_count=count, seed=4)
        np.testing.assert_array_equal(result.draw_paths(4, count, days), stage.paths)
    later = replace(scenario, start_date=scenario.start_date + pd.Timedelta(days=5))
    late = forecast_scenario(later, clean, horizon_days=14, path_count=40, seed=8)
    np.testing.assert_array_equal(late.draw_paths(8, 40, 28),
                                  forecast_scenario(later, clean, horizon_days=28,
                                                    path_count=40, seed=8).paths)
    dispense = scenario.dispense[scenario.dispense["terminal_id"] != "BRH-002"]
    newcomer = replace(scenario, dispense=dispense.reset_index(drop=True))
    new_clean = clean_history(newcomer)
    res = forecast_scenario(newcomer, new_clean, horizon_days=14, path_count=20, seed=2)
    np.testing.assert_array_equal(
        res.draw_paths(3, 25, 14),
        forecast_scenario(newcomer, new_clean, horizon_days=14, path_count=25, seed=3).paths)
    # seeds are per terminal position: one terminal's draws do not depend on the others; the
    # only tie is the network's calibrated spread (fitted on every champion's errors)
    alone = replace(scenario, terminals=scenario.terminals.iloc[:1])
    one = forecast_scenario(alone, clean, horizon_days=14, path_count=200, seed=11)
    from planner.forecast.paths import terminal_seeds

    raw = [replace(f.terminals[0], spread=None) for f in (one.fitted, result.fitted)]
    seed = terminal_seeds(11, 1)[0]
    np.testing.assert_array_equal(raw[0].draw(200, seed, 14), raw[1].draw(200, seed, 14))


def test_fresh_paths_draw_from_the_fit_of_the_run_without_refitting(tiny, monkeypatch):
    """After the stage ran on a cleaned history, the out-of-sample paths come from its fitted
    models: no terminal is fitted again, and the paths are those of a stage run with the
    fresh seed."""
    import planner.forecast.stage as stage
    from planner.evaluate.simulate import fresh_paths, fresh_seed
    from planner.optimize import build_problem

    scenario, _ = tiny
    clean = clean_history(scenario)          # an object of this test only
    forecast = forecast_scenario(scenario, clean, horizon_days=21, path_count=30,
                                 seed=scenario.seed, origins=2)
    problem = build_problem(scenario, forecast.paths, forecast.dates, tail_days=7)
    calls = []
    real = stage.forecast_terminal
    monkeypatch.setattr(stage, "forecast_terminal", lambda task: calls.append(task) or real(task))
    s = fresh_seed(scenario.seed)
    fresh = fresh_paths(scenario, clean, problem, seed=s, path_count=45, origins=2)
    assert calls == []
    np.testing.assert_array_equal(fresh, forecast.draw_paths(s, 45, 21))
    # another history object (or other origins) is another fit: then the stage runs once
    fresh_paths(scenario, clean, problem, seed=s, path_count=45, origins=3)
    assert len(calls) == 3
    np.testing.assert_array_equal(
        fresh_paths(scenario, clean_history(scenario), problem, seed=s, path_count=45,
                    origins=2), fresh)
    assert len(calls) == 6
