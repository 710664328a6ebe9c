"""The optimizer's reported objective against a plain day-by-day loop written in the tests
(not the product's accounting that computed it), in swap and top-up mode, with and without
binding crews and a binding service target."""
from __future__ import annotations

from dataclasses import replace

import pytest

from planner.optimize import solve_plan
from planner.demo.synthetic import synthetic_problem
from plain import expected_cost_plain, missed_terminals


@pytest.mark.parametrize("mode", ["swap", "topup"])
@pytest.mark.parametrize("seed", [3, 4])
def test_objective_equals_a_plain_day_by_day_loop(mode, seed):
    problem = synthetic_problem(terminals=4, depots=1, horizon_days=7, tail_days=3, paths=25,
                                seed=seed, crew_share=0.6, max_dry_probability=0.08)
    problem = replace(problem, mode=mode,
                      rates=replace(problem.rates, shortfall_penalty_per_1000=2.0))
    result = solve_plan(problem, time_limit_s=60)
    plain = expected_cost_plain(problem, result.visits, result.loads)
    assert result.objective == pytest.approx(plain, rel=1e-9)
    # and the plan keeps the service target per visit cycle (or says why not)
    assert all(result.notes[t] for t in missed_terminals(problem, result.visits,
                                                         result.ledger))
