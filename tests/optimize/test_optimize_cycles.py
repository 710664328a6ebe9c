"""Direct tests of the swap pricing layer.

- :mod:`planner.optimize.cycles`: every candidate level of every cycle costs exactly what the
  one accounting (:func:`planner.costs.simulate`) charges for that cycle, its dry count is the
  accounting's, and the candidate list is the set of non-dominated levels within the cycle's
  allowance, found here by trying every level.
- :mod:`planner.optimize.terminal`: the dynamic programme over the days against scipy's
  shortest-path routine (``scipy.sparse.csgraph.shortest_path``) on random day graphs.
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest
from scipy.sparse import csr_matrix
from scipy.sparse.csgraph import shortest_path

from planner.costs import cycle_dry_counts, simulate
from planner.optimize.cycles import cycle_candidates
from planner.optimize.problem import service_rule
from planner.demo.synthetic import synthetic_problem
from planner.optimize.terminal import backward_values, cycle_structure, shortest_plans


def _cycle_by_accounting(problem, t: int, a: int, b: int, load: float) -> tuple[float, int]:
    """(cost, dry paths) of the cycle from a visit on ``a`` loading ``load`` to the next visit
    ``b`` (``D``: none), read off :func:`simulate`: carry, dry-day and shortfall penalties on
    days a … b − 1, handling on the load and on the residual returned at ``b``."""
    d_count = problem.shape[2]
    visits = np.zeros(d_count, bool)
    loads = np.zeros(d_count)
    visits[a], loads[a] = True, load
    if b < d_count:
        visits[b] = True
    ledger = simulate(visits, loads, problem.start_balance[t], problem.demand[t],
                      problem.limit[t], problem.visit_fee[t], problem.rates, "swap")
    days = slice(a, b)
    on_paths = (ledger.carry[0, :, days] + ledger.dry_penalty[0, :, days]
                + ledger.shortfall_penalty[0, :, days]).sum(axis=1).mean()
    h = problem.rates.handling_per_1000 / 1000.0
    back = ledger.returned[0, :, b].mean() if b < d_count else 0.0
    dry = int(cycle_dry_counts(ledger, visits[None])[0, a])
    return float(on_paths + h * (load + back)), dry


@pytest.fixture(scope="module")
def small():
    problem = synthetic_problem(terminals=3, depots=1, horizon_days=5, tail_days=2, paths=30,
                                seed=2, max_dry_probability=0.2)
    problem = replace(problem, rates=replace(problem.rates, shortfall_penalty_per_1000=2.0))
    rule = service_rule(problem)
    arc_ok, initial_ok = cycle_structure(problem)
    return problem, rule, arc_ok, initial_ok, cycle_candidates(problem, rule, arc_ok)


def test_every_candidate_costs_what_the_accounting_charges(small):
    problem, _, arc_ok, _, cand = small
    checked = 0
    for t, a, b in zip(*np.nonzero(arc_ok)):
        for c in np.flatnonzero(cand.level[t, a, b] >= 0):
            load = float(cand.level[t, a, b, c] * problem.bundle[t])
            cost, dry = _cycle_by_accounting(problem, int(t), int(a), int(b), load)
            assert cand.cost[t, a, b, c] == pytest.approx(cost, rel=1e-9, abs=1e-9)
            assert cand.dry[t, a, b, c] == dry
            checked += 1
    assert checked >= 50   # every cycle of three terminals over 7 days


def test_candidates_are_the_non_dominated_levels_within_the_allowance(small):
    problem, rule, arc_ok, _, cand = small
    for t, a, b in zip(*np.nonzero(arc_ok)):
        allowed = int(rule.allowance(np.array([[a + 1]]), np.array([[b]]), rows=[t])[0, 0])
        tried = []
        for k in range(int(round(problem.limit[t] / problem.bundle[t])) + 1):
            cost, dry = _cycle_by_accounting(problem, int(t), int(a), int(b),
                                             k * float(problem.bundle[t]))
            if dry <= allowed:
                tried.append((round(cost, 6), dry))
        front = {(c, d) for c, d in tried
                 if not any((c2 <= c and d2 <= d) and (c2, d2) != (c, d) for c2, d2 in tried)}
        kept = cand.level[t, a, b] >= 0
        listed = {(round(float(c), 6), int(d))
                  for c, d in zip(cand.cost[t, a, b][kept], cand.dry[t, a, b][kept])}
        assert listed == front, (t, a, b)
        # cheapest first; costs rise and dry counts fall along the list
        costs, dries = cand.cost[t, a, b][kept], cand.dry[t, a, b][kept]
        assert (np.diff(costs) > 0).all() and (np.diff(dries) < 0).all()


def test_the_start_balance_cycle_costs_what_the_accounting_charges(small):
    problem, _, _, initial_ok, cand = small
    d_count = problem.shape[2]
    h = problem.rates.handling_per_1000 / 1000.0
    for t, b in zip(*np.nonzero(initial_ok)):
        visits = np.zeros(d_count, bool)
        if b < d_count:
            visits[b] = True
        ledger = simulate(visits, np.zeros(d_count), problem.start_balance[t],
                          problem.demand[t], problem.limit[t], problem.visit_fee[t],
                          problem.rates, "swap")
        days = slice(0, b)
        cost = ((ledger.carry[0, :, days] + ledger.dry_penalty[0, :, days]
                 + ledger.shortfall_penalty[0, :, days]).sum(axis=1).mean()
                + (h * ledger.returned[0, :, b].mean() if b < d_count else 0.0))
        assert cand.initial[t, b] == pytest.approx(cost, rel=1e-9, abs=1e-9)
        dry = int(ledger.dry[0, :, days].any(axis=1).sum()) if b > 0 else 0
        assert cand.initial_dry[t, b] == dry


def _day_graph(arc_cost, initial_cost, day_price):
    """One terminal's plan as a graph: node 0 the start, node 1 + d a visit on day d, node
    1 + D the end; edges start → first visit, visit → next visit (its price paid)."""
    d_count = day_price.shape[0]
    n = d_count + 2
    weights = np.zeros((n, n))
    present = np.zeros((n, n), bool)
    for b in range(d_count + 1):
        if np.isfinite(initial_cost[b]):
            weights[0, 1 + b], present[0, 1 + b] = initial_cost[b], True
    for a in range(d_count):
        for b in range(a + 1, d_count + 1):
            if np.isfinite(arc_cost[a, b]):
                weights[1 + a, 1 + b] = arc_cost[a, b] + day_price[a]
                present[1 + a, 1 + b] = True
    # a zero in the matrix means no edge: the weights drawn in the test are all positive
    return csr_matrix(np.where(present, weights, 0.0))


@pytest.mark.parametrize("seed", range(6))
def test_shortest_plans_against_scipy_shortest_path(seed):
    rng = np.random.default_rng(seed)
    t_count, d_count = 4, 9
    arc = rng.uniform(1.0, 50.0, size=(t_count, d_count, d_count + 1))
    arc[:, np.arange(d_count)[:, None] >= np.arange(d_count + 1)[None, :]] = np.inf
    arc[rng.random(arc.shape) < 0.3] = np.inf                 # cycles that cannot occur
    initial = rng.uniform(1.0, 80.0, size=(t_count, d_count + 1))
    initial[rng.random(initial.shape) < 0.3] = np.inf
    price = rng.uniform(0.5, 20.0, size=(t_count, d_count))
    value, visits, next_visit, _ = shortest_plans(arc, initial, price)
    back = backward_values(arc, price)
    for t in range(t_count):
        graph = _day_graph(arc[t], initial[t], price[t])
        dist = shortest_path(graph, method="D", directed=True)
        assert value[t] == pytest.approx(dist[0, d_count + 1])
        for a in range(d_count):
            assert back[t, a] == pytest.approx(dist[1 + a, d_count + 1])
        if np.isfinite(value[t]):   # the plan returned costs its value
            days = np.flatnonzero(visits[t])
            cost = initial[t, days[0] if days.size else d_count]
            cost += sum(arc[t, a, next_visit[t, a]] + price[t, a] for a in days)
            assert cost == pytest.approx(value[t])
