"""The schedule on the bundled demo network (Northvale): no end effect, limits, service."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from planner.cleaning import clean_history
from planner.demo import demo_path
from planner.forecast import forecast_scenario
from planner.optimize import build_problem, solve_plan
from planner.pipeline import PlanOptions
from planner.scenario import load_scenario

OPTIONS = PlanOptions()          # the planner's own look-ahead past the horizon


@pytest.fixture(scope="module")
def demo_forecast():
    scenario = load_scenario(demo_path())
    clean = clean_history(scenario)
    # one forecast long enough for both horizons and their tails: both plans see the same
    # demand on the days they share
    days = max(h + OPTIONS.tail_for(h) for h in (14, 21))
    forecast = forecast_scenario(scenario, clean, horizon_days=days, path_count=200,
                                 seed=scenario.seed, origins=2)
    return scenario, forecast


def _plan(scenario, forecast, horizon):
    s = replace(scenario, horizon_days=horizon)
    tail = OPTIONS.tail_for(horizon)
    days = horizon + tail
    problem = build_problem(s, forecast.paths[:, :, :days], forecast.dates[:days],
                            tail_days=tail)
    return problem, solve_plan(problem, time_limit_s=60)


def test_first_week_visits_do_not_depend_on_the_horizon(demo_forecast):
    """No end effect: the visits of the first 7 days are the same for a 14- and a 21-day
    horizon for at least 90 % of the demo terminals, each planned as the planner does.

    Both look six weeks ahead, and the service target is a limit per visit cycle over the
    whole planned window, so the horizon no longer changes what is constrained: measured
    100 % (visits and loads) on this forecast, 2026-12-02."""
    scenario, forecast = demo_forecast
    _, short = _plan(scenario, forecast, 14)
    _, long = _plan(scenario, forecast, 21)
    same = np.all(short.visits[:, :7] == long.visits[:, :7], axis=1)
    print(f"first-week visits identical for {same.mean():.1%} of {same.size} terminals")
    assert same.mean() >= 0.90


def test_first_week_of_the_short_plan_costs_little_in_the_long_problem(demo_forecast):
    """Regret: the first week of the 14-day plan, held fixed and re-optimised inside the 21-day
    problem, costs at most 0.5 % more than that problem's own optimum (measured −0.007 %: the
    re-solve lands a hair under the plan it is compared with, inside the 0.5 % gap tolerance)."""
    scenario, forecast = demo_forecast
    _, short = _plan(scenario, forecast, 14)
    problem, long = _plan(scenario, forecast, 21)
    week = np.zeros(problem.allowed.shape, bool)
    week[:, :7] = True
    fixed = problem.fixed_load.copy()
    fixed[:, :7] = np.where(short.visits[:, :7], short.loads[:, :7], np.nan)
    held = replace(problem, fixed_load=fixed,
                   allowed=np.where(week, short.visits, problem.allowed))
    again = solve_plan(held, time_limit_s=60)
    regret = (again.objective - long.objective) / long.objective
    print(f"regret of the 14-day plan's first week: {regret:.3%}")
    assert regret <= 0.005


def test_demo_plan_meets_gap_limits_and_service(demo_forecast):
    scenario, forecast = demo_forecast
    problem, result = _plan(scenario, forecast, 14)
    assert result.gap <= 0.005
    visits, loads = result.visits, result.loads
    # limits, bundles, allowed days, committed visits
    assert (loads <= problem.limit[:, None] + 1e-9).all()
    assert np.allclose(loads / problem.bundle[:, None], np.round(loads / problem.bundle[:, None]))
    fixed = ~np.isnan(problem.fixed_load)
    assert (visits[fixed]).all() and np.allclose(loads[fixed], problem.fixed_load[fixed])
    assert (~visits | problem.allowed | fixed).all()
    # crews per depot and day
    for k in range(len(problem.depots)):
        assert (visits[problem.depot_of == k].sum(axis=0) <= problem.crew_limit[k]).all()
    # each terminal at or under the target, or a note saying why not
    over = result.dry_probability > problem.max_dry_probability + 1e-12
    assert all(result.notes[i] for i in np.flatnonzero(over))
