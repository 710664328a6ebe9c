"""Swap mode: every terminal's plan under the crew limits of its depot.

Each depot is solved on its own (:mod:`planner.optimize.depots` runs the depots). Within a
depot (Dantzig–Wolfe decomposition; the master problem is :mod:`planner.optimize.master`):

- A *column* is one terminal's plan (visit days and loads) with its expected cost over all
  days, priced exactly on the demand paths (:mod:`planner.optimize.cycles`).
- The *master* chooses one column per terminal, ``Σ_j x[t, j] = 1``, with
  ``Σ_{t, j} visits[t, j, d] · x[t, j] ≤ crew_limit[d]`` (``crew-limit-{depot}-{day}``).
- Its LP relaxation's duals are Lagrangian prices ``λ[d] ≥ 0`` on the crew rows; each terminal
  then finds its cheapest plan with ``λ[d]`` added to the visit fee of day ``d``
  (:mod:`planner.optimize.terminal`: a shortest path over the days, exact because the service
  target is a limit per cycle). Columns with negative reduced cost join the master.
- Every pricing round gives the Lagrangian bound
  ``Σ_t min_plan (cost + λ · visits) − Σ_d λ[d] · crew_limit[d]`` (a lower bound of the
  coupled optimum for any ``λ ≥ 0``).
- The master as a MILP over all columns gives the plan; ``gap = (objective − bound) /
  objective``. In exact mode (small instances) a fractional master LP is closed too: every
  visit pattern whose reduced cost could still lead to a cheaper integer plan gets its best
  plan priced exactly (see :func:`_plans_within`), then the master MILP is solved again. When
  the crews cannot serve every terminal's target together, the targets of that depot become
  soft (an extra dry path costs more than anything else) and the notes say so.
"""
from __future__ import annotations

import itertools
import math
import time
from dataclasses import dataclass

import numpy as np

from planner.costs import cycle_dry_counts
from planner.optimize import terminal
from planner.optimize.depots import DepotPlan, DepotTask
from planner.optimize.master import (ColumnPool, soft_penalty, solve_master_lp,
                                     solve_master_mip)
from planner.optimize.problem import (PlanningProblem, ServiceRule, evaluate_plan, next_visits,
                                      service_rule)

GAP_TOLERANCE = 0.005
MIN_ROUNDS = 4
MAX_ROUNDS = 500      # pricing rounds per depot (a work limit; convergence comes first)
MIN_PARALLEL = 50     # terminals below which the depots run in this process


@dataclass
class DepotResult:
    """Plan of one depot's terminals (local order) and the proof of its quality."""

    visits: np.ndarray
    levels: np.ndarray
    objective: float
    bound: float
    status: str
    soft: bool
    log: list
    rounds: int = 0
    pool: "ColumnPool | None" = None


def solve_depot(problem: PlanningProblem, rule: ServiceRule, depot: int, *,
                deadline: float, solver: str = "highs", gap_tolerance: float = GAP_TOLERANCE,
                exact: bool = False, soft: bool = False,
                seed_pool: ColumnPool | None = None) -> DepotResult:
    """Plan the terminals of one depot (``problem`` holds only them) under its crew limits.

    ``exact``: prove optimality to ~1e-9 (small instances); otherwise stop at
    ``gap_tolerance``. ``soft``: targets may be exceeded at a price (see the module text).
    ``deadline`` (``time.perf_counter()``) is an emergency stop only: the rounds end by their
    own work limits, so the plan does not depend on the machine's speed.
    """
    started = time.perf_counter()
    log: list[str] = []
    t_count, _, d_count = problem.shape
    name = problem.depots[depot]
    crew = np.maximum(problem.crew_limit[depot], problem.committed.sum(axis=0)).astype(float)
    fee = problem.visit_fee
    penalty = soft_penalty(problem) if soft else None
    batch = terminal.prepare_batch(problem, rule, soft_penalty=penalty)
    rows = np.arange(t_count)
    # soft prices inflate the objective: a relative tolerance on it would leave real cost on
    # the table, so soft depots are solved to the exact tolerances
    tight = 1e-9 if exact or soft else gap_tolerance / 10.0
    log.append(f"{name}: {t_count} terminals, cycles priced in "
               f"{time.perf_counter() - started:.1f} s")

    pool = ColumnPool()
    slack_cost: float | None = 1e3 * (float(fee.max(initial=1.0)) * d_count + 1.0)
    if soft:
        slack_cost = None       # plans with the committed visits only always fit the crews
        for t in rows:
            pool.add(t, *_committed_only(batch, t))
        if seed_pool is not None:     # plans that meet the targets keep their cost
            for t, v, lv, c in zip(seed_pool.terminal, seed_pool.visits, seed_pool.levels,
                                   seed_pool.cost):
                pool.add(t, v, lv, c)

    lam = np.zeros(d_count)
    mu = np.full(t_count, np.inf)
    best_bound = -math.inf
    slack = np.zeros(d_count)
    converged = False
    value_lp = math.inf
    for iteration in range(MAX_ROUNDS):
        price = fee + lam[None, :]
        plans, _ = terminal.cheapest_plans(batch, price, rows)
        # a Lagrangian bound for any λ ≥ 0
        best_bound = max(best_bound, float(plans.value.sum() - lam @ crew))
        added = 0
        for t in rows:
            if np.isfinite(plans.value[t]) and plans.value[t] < mu[t] - 1e-9 * max(
                    1.0, abs(plans.value[t])):
                cost = plans.value[t] - lam @ plans.visits[t]
                added += pool.add(t, plans.visits[t], plans.levels[t], cost)
        value_lp, mu, lam, slack = solve_master_lp(pool, t_count, name, crew, slack_cost,
                                                   solver)
        log.append(f"{name}: round {iteration}: LP {value_lp:,.2f}, columns "
                   f"{len(pool.cost)} (+{added}), bound {best_bound:,.2f}, "
                   f"{time.perf_counter() - started:.1f} s")
        converged = added == 0 or value_lp - best_bound <= tight * max(abs(value_lp), 1e-9)
        if converged:
            break
        if time.perf_counter() > deadline and iteration >= MIN_ROUNDS:
            log.append(f"{name}: emergency time limit reached in the pricing rounds")
            break

    if not soft and converged and slack.max(initial=0.0) > 1e-6:
        # proven: even the LP over every plan needs more crews than there are
        log.append(f"{name}: the crews cannot serve every terminal's service target; the "
                   "targets become soft")
        return _soft_retry(problem, rule, depot, deadline, solver, gap_tolerance, exact, log,
                           pool)

    remaining = max(deadline - time.perf_counter(), 1.0)
    status, chosen, objective, mip_bound = solve_master_mip(
        pool, t_count, name, crew, solver, remaining,
        1e-9 if exact or soft else gap_tolerance / 4)
    if chosen is None:
        if soft:
            raise RuntimeError(f"{name}: no plan respects the crew limits")  # cannot happen
        log.append(f"{name}: no combination of plans found so far respects the crews; the "
                   "targets become soft")
        return _soft_retry(problem, rule, depot, deadline, solver, gap_tolerance, exact, log,
                           pool)
    bound = best_bound if best_bound > -math.inf else -math.inf
    if exact and converged and objective - value_lp > 1e-9 * max(abs(objective), 1.0):
        # the LP optimum is fractional: add every plan whose reduced cost could still lead to
        # a better integer plan, then solve the master again (proven when all could be listed)
        listed, added = _plans_within(batch, pool, fee, mu, lam, objective - value_lp)
        log.append(f"{name}: integer gap closed by listing plans: +{added} columns"
                   f"{'' if listed else ' (too many patterns to list them all)'}")
        status, chosen, objective, mip_bound = solve_master_mip(
            pool, t_count, name, crew, solver, max(deadline - time.perf_counter(), 1.0), 1e-9)
        if listed and status == "optimal":
            bound = max(bound, min(mip_bound, objective))
    visits = np.array([pool.visits[j] for j in chosen])
    levels = np.array([pool.levels[j] for j in chosen])
    gap = (objective - bound) / max(abs(objective), 1e-12)
    state = ("optimal" if gap <= (1e-6 if exact else gap_tolerance) else
             "time_limit" if time.perf_counter() > deadline else "feasible")
    log.append(f"{name}: master MILP {status}, objective {objective:,.2f}, bound {bound:,.2f},"
               f" gap {gap:.4%}, {time.perf_counter() - started:.1f} s")
    if soft:
        # the soft prices are not costs: report the plan's cost and a bound without them
        objective, bound = _without_soft_prices(batch, visits, levels, objective, bound)
    return DepotResult(visits, levels, objective, bound, state, soft, log, iteration + 1, pool)


def _plans_within(batch: terminal.TerminalBatch, pool: ColumnPool, fee: np.ndarray,
                  mu: np.ndarray, lam: np.ndarray, threshold: float,
                  most_patterns: int = 4096) -> tuple[bool, int]:
    """Add, per terminal, the best plan of every visit pattern whose reduced cost at the final
    LP prices may be at most ``threshold``.

    At convergence every plan has reduced cost ``c + λ·v − μ ≥ 0``, and an integer plan of the
    network costs at least the LP value plus the reduced costs of its columns; so a plan that
    could beat the incumbent has reduced cost below ``threshold = incumbent − LP``. Returns
    ``(every pattern could be listed, columns added)``."""
    problem = batch.problem
    t_count = problem.shape[0]
    listed, added = True, 0
    for t in range(t_count):
        free = np.flatnonzero(problem.allowed[t] & ~problem.committed[t])
        if 2 ** free.size > most_patterns:
            listed = False
            continue
        price = fee[t] + lam
        choice = np.array(list(itertools.product([False, True], repeat=free.size)),
                          dtype=bool).reshape(-1, free.size)
        patterns = np.tile(problem.committed[t], (len(choice), 1))
        patterns[:, free] = choice
        plans = terminal.pattern_plans(batch, t, patterns, price)
        margin = 1e-9 * max(1.0, abs(threshold), abs(mu[t]))
        for j in np.flatnonzero(plans.value - mu[t] <= threshold + margin):
            cost = plans.value[j] - lam @ plans.visits[j]
            added += pool.add(t, plans.visits[j], plans.levels[j], cost)
    return listed, added


def _soft_retry(problem, rule, depot, deadline, solver, gap_tolerance, exact, log, pool):
    result = solve_depot(problem, rule, depot, deadline=deadline, solver=solver,
                         gap_tolerance=gap_tolerance, exact=exact, soft=True, seed_pool=pool)
    result.log[:0] = log
    return result


def _committed_only(batch: terminal.TerminalBatch, t: int) -> tuple[np.ndarray, np.ndarray,
                                                                     float]:
    """Terminal ``t``'s plan with its committed visits only, and its cost with soft targets."""
    problem = batch.problem
    visits = problem.committed[t].copy()
    levels = np.where(visits, np.rint(np.nan_to_num(problem.fixed_load[t])
                                      / problem.bundle[t]), -1).astype(int)
    loads = np.where(visits, levels * problem.bundle[t], 0.0)
    ledger = evaluate_plan(problem.subset([t]), visits[None], loads[None])
    counts = cycle_dry_counts(ledger, visits[None])
    excess = int(batch.rule.excess(visits[None], counts, np.array([t]))[0])
    return visits, levels, float(ledger.expected_cost()[0]) + excess * batch.soft_penalty


def _without_soft_prices(batch, visits, levels, objective, bound):
    """Objective and bound of a soft-target depot in plain expected cost.

    With ``E`` the priced excess of dry paths of the plan, any plan with no more excess costs
    at least ``bound − E``; the sum of the terminals' cheapest plans ignoring crews and targets
    bounds every plan. The larger of the two is reported."""
    rows = np.arange(visits.shape[0])
    plans = terminal.Plans(visits, next_visits(visits), levels, np.zeros(visits.shape[0]))
    excess = float(terminal.plan_excess(batch, rows, plans).sum() * batch.soft_penalty)
    free_batch = terminal.prepare_batch(batch.problem, batch.rule, soft_penalty=0.0)
    free, _ = terminal.cheapest_plans(free_batch, batch.problem.visit_fee)
    return objective - excess, max(bound - excess, float(free.value.sum()))


def plan_depot(task: DepotTask) -> DepotPlan:
    """The swap plan of one depot's task (the executor's unit of work)."""
    sub = task.problem
    rule = service_rule(sub)
    res = solve_depot(sub, rule, task.depot, deadline=task.deadline(), solver=task.solver,
                      gap_tolerance=task.gap_tolerance, exact=task.exact)
    loads = np.where(res.visits, res.levels * sub.bundle[:, None], 0.0)
    return DepotPlan(res.visits, loads, res.bound, res.status,
                     np.full(sub.shape[0], res.soft), rule.notes, res.log, res.rounds)
