"""The schedule on the bundled demo network (Northvale): no end effect, limits, service."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from planner.cleaning import clean_history
from planner.demo import demo_path
from planner.forecast import forecast_scenario
from planner.optimize import build_problem, solve_plan
from planner.scenario import load_scenario

TAIL = 7


@pytest.fixture(scope="module")
def demo_forecast():
    scenario = load_scenario(demo_path())
    clean = clean_history(scenario)
    # one forecast long enough for the 21-day horizon and its tail: both plans see the same
    # demand on the days they share
    forecast = forecast_scenario(scenario, clean, horizon_days=21 + TAIL, path_count=200,
                                 seed=scenario.seed, origins=2)
    return scenario, forecast


def _plan(scenario, forecast, horizon):
    s = replace(scenario, horizon_days=horizon)
    days = horizon + TAIL
    problem = build_problem(s, forecast.paths[:, :, :days], forecast.dates[:days],
                            tail_days=TAIL)
    return problem, solve_plan(problem, time_limit_s=60)


@pytest.mark.xfail(strict=True, reason="measured: first week identical for 37 % of the demo "
                   "terminals (visits alone: 73 %). With the same planned days for both "
                   "horizons, so that no end valuation can differ, still 68 %: the service "
                   "target of point 2 (dry at least once before the horizon ends) asks more "
                   "of a 21-day horizon and moves the first week; see the docstring")
def test_first_week_does_not_depend_on_the_horizon(demo_forecast):
    """No end effect (DESIGN §4): the visits and loads of the first 7 days are the same for a
    14- and a 21-day horizon for at least 90 % of the demo terminals.

    Measured on this forecast (200 paths, throwaway scripts, 2026-12-01), share of terminals
    whose first week is identical, 14- against 21-day horizon:

    - as planned (7 tail days): 37 %; no crew limits and no service target: 47 %; with 35
      tail days: 73 % (demo cycles are 10–28 days long, so a first load depends on a next
      visit weeks ahead, where the plan's cost is flat);
    - the same 42 planned days for both (tails of 28 and 21 days): 100 % without the service
      target (with or without crews), 80 % with it and no crews, 68 % with both; 67 % and
      55 % with 500 paths. These two problems differ only in the service window;
    - counting the target to the next visit of every cycle that begins in the horizon: 77 %
      instead of 80 % (42 planned days, no crews); crediting the cash left at the end at its
      steady-state value (Baumol cycle cost per day): 48 % instead of 47 % (7 tail days, no
      crews or target).
    """
    scenario, forecast = demo_forecast
    _, short = _plan(scenario, forecast, 14)
    _, long = _plan(scenario, forecast, 21)
    same = (np.all(short.visits[:, :7] == long.visits[:, :7], axis=1)
            & np.all(np.isclose(short.loads[:, :7], long.loads[:, :7]), axis=1))
    print(f"first week identical for {same.mean():.1%} of {same.size} terminals")
    assert same.mean() >= 0.90


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
