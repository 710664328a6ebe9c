"""Forecast once per run: the out-of-sample check and the what-if comparison draw their fresh
demand paths from the fitted models of the run's forecasting stage (planner.forecast.stage)."""
from __future__ import annotations


import numpy as np
import pytest

import planner.forecast.stage as stage
from planner.scenario import load_scenario
from conftest import TINY



@pytest.fixture
def fits(monkeypatch) -> list[str]:
    """The terminal ids of every terminal fit of the forecasting stage during the test."""
    calls: list[str] = []
    real = stage.forecast_terminal

    def counted(task):
        calls.append(task.terminal_id)
        return real(task)

    monkeypatch.setattr(stage, "forecast_terminal", counted)
    return calls


def test_a_plan_with_check_and_what_if_fits_every_terminal_once(fits):
    from planner.evaluate.simulate import fresh_seed
    from planner.pipeline import plan_scenario

    run = plan_scenario(TINY, path_count=40, origins=2, time_limit_s=30, diagnose=False,
                        what_if=("costs.visit_fee=+10%",))
    assert sorted(fits) == ["BRH-001", "BRH-002", "BRH-003"]
    # the fresh paths are the stage's own draw for the fresh seed
    s = fresh_seed(run.scenario.seed)
    days = len(run.problem.dates)
    count = run.out_of_sample.demand.shape[1]
    assert count >= 4000           # sharp: standard error ≤ 0.2 points at the 5 % target
    np.testing.assert_array_equal(run.out_of_sample.demand,
                                  run.forecast.draw_paths(s, count, days))
    assert run.out_of_sample.summary["seed"] == s


def test_compare_on_its_own_fits_every_terminal_once(fits):
    from planner.compare import compare_scenario, parse_variants
    from planner.pipeline import PlanOptions

    scenario = load_scenario(TINY)
    result = compare_scenario(scenario, parse_variants(["costs.visit_fee=+10%"], []),
                              options=PlanOptions(path_count=30, origins=2, time_limit_s=30))
    assert sorted(fits) == ["BRH-001", "BRH-002", "BRH-003"]
    assert result.summary["out_of_sample_paths"]["count"] == 30
