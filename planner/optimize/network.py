"""The network schedule: every terminal's plan under the crew limits of its depot.

Depots are independent given their crews, so each depot is solved on its own (in parallel
worker processes when there are several). Within a depot (Dantzig–Wolfe decomposition):

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

The master LPs go to HiGHS through ``highspy`` directly, the
master MILP through PuLP (``pulp.HiGHS``; CBC when HiGHS is not installed or ``solver="cbc"``).
"""
from __future__ import annotations

from collections.abc import Callable

import itertools
import math
import os
import time
from dataclasses import dataclass, field, replace

import numpy as np

from planner.optimize import milp, terminal
from planner.costs import cycle_dry_counts
from planner.optimize.problem import (PlanningProblem, PlanResult, ServiceRule, evaluate_plan,
                                      next_visits, result_from_plan, service_rule)

GAP_TOLERANCE = 0.005
MIN_ROUNDS = 4
MAX_ROUNDS = 500      # pricing rounds per depot (a work limit; convergence comes first)


@dataclass
class ColumnPool:
    """Plans collected for the terminals of one depot (local terminal numbers)."""

    terminal: list = field(default_factory=list)
    visits: list = field(default_factory=list)
    levels: list = field(default_factory=list)
    cost: list = field(default_factory=list)
    seen: set = field(default_factory=set)

    def add(self, t: int, visits: np.ndarray, levels: np.ndarray, cost: float) -> bool:
        key = (t, visits.tobytes(), np.where(visits, levels, -1).tobytes())
        if key in self.seen or not np.isfinite(cost):
            return False
        self.seen.add(key)
        self.terminal.append(t)
        self.visits.append(visits.copy())
        self.levels.append(np.where(visits, levels, -1))
        self.cost.append(float(cost))
        return True

    def arrays(self) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        return (np.array(self.terminal, dtype=int), np.array(self.visits, dtype=bool),
                np.array(self.cost, dtype=float))


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


# --------------------------------------------------------------------------------------------
# Master problem
# --------------------------------------------------------------------------------------------


def define_assignment(model: milp.LinearModel, pool: ColumnPool, t_count: int,
                      integer: bool) -> np.ndarray:
    """``x[t, j] ∈ {0, 1}`` (or ``[0, 1]``) per column, cost = its expected cost;
    ``Σ_j x[t, j] = 1`` per terminal (``one-plan-{t}``)."""
    term, _, cost = pool.arrays()
    names = [f"x-{t}-{j}" for j, t in enumerate(term)]
    cols = model.add_variables(names, cost, 0.0, 1.0, integer=integer)
    model.add_constraints([f"one-plan-{t}" for t in range(t_count)], term, cols,
                          np.ones(term.size), 1.0, 1.0)
    return cols


def define_crew_limits(model: milp.LinearModel, pool: ColumnPool, cols: np.ndarray,
                       depot: str, crew: np.ndarray, slack_cost: float | None) -> None:
    """``Σ_{t, j} visits[t, j, d] · x[t, j] (− slack[d]) ≤ crew_limit[d]`` per day
    (``crew-limit-{depot}-{day}``); the slack, priced at ``slack_cost``, keeps a restricted
    master feasible before enough columns exist."""
    _, visits, _ = pool.arrays()
    d_count = crew.size
    j, d = np.nonzero(visits)
    rows, columns, values = [d], [cols[j]], [np.ones(j.size)]
    if slack_cost is not None:
        slack = model.add_variables([f"crew-slack-{depot}-{day}" for day in range(d_count)],
                                    slack_cost, 0.0, milp.INF)
        rows.append(np.arange(d_count))
        columns.append(slack)
        values.append(-np.ones(d_count))
    model.add_constraints([f"crew-limit-{depot}-{day}" for day in range(d_count)],
                          np.concatenate(rows), np.concatenate(columns),
                          np.concatenate(values), upper=crew.astype(float))


def build_master(pool: ColumnPool, t_count: int, depot: str, crew: np.ndarray, *,
                 integer: bool, slack_cost: float | None) -> tuple[milp.LinearModel, np.ndarray]:
    """The restricted master of one depot (assignment + crew limits)."""
    model = milp.LinearModel(name=f"master-{depot}")
    cols = define_assignment(model, pool, t_count, integer)
    define_crew_limits(model, pool, cols, depot, crew, slack_cost)
    return model, cols


def solve_master_lp(pool: ColumnPool, t_count: int, depot: str, crew: np.ndarray,
                    slack_cost: float, solver: str
                    ) -> tuple[float, np.ndarray, np.ndarray, np.ndarray]:
    """LP relaxation of the restricted master: ``(value, convexity duals μ [T], crew prices
    λ [D] ≥ 0, crew slack [D])``."""
    model, cols = build_master(pool, t_count, depot, crew, integer=False,
                               slack_cost=slack_cost)
    sol = milp.solve(model, solver=solver, time_limit_s=60.0)
    duals = sol.row_dual if sol.row_dual is not None else np.zeros(model.n_rows)
    mu = duals[:t_count]
    lam = np.maximum(-duals[t_count:t_count + crew.size], 0.0)
    slack = sol.x[cols.size:cols.size + crew.size]
    return sol.objective, mu, lam, slack


def solve_master_mip(pool: ColumnPool, t_count: int, depot: str, crew: np.ndarray,
                     solver: str, time_limit_s: float, gap: float
                     ) -> tuple[str, np.ndarray | None, float, float]:
    """The master as a MILP through PuLP: ``(status, chosen column per terminal, objective,
    bound)``; ``chosen`` is ``None`` when no assignment respects the crew limits."""
    model, cols = build_master(pool, t_count, depot, crew, integer=True, slack_cost=None)
    name = "pulp-highs" if solver == "highs" and milp.highs_available() else "cbc"
    sol = milp.solve(model, solver=name, time_limit_s=time_limit_s, mip_rel_gap=gap)
    if sol.status in ("infeasible", "error"):
        return sol.status, None, math.inf, -math.inf
    term, _, _ = pool.arrays()
    chosen = np.full(t_count, -1)
    picked = np.flatnonzero(sol.x[cols] > 0.5)
    chosen[term[picked]] = picked
    return sol.status, chosen, sol.objective, sol.bound


# --------------------------------------------------------------------------------------------
# One depot
# --------------------------------------------------------------------------------------------


def _soft_penalty(problem: PlanningProblem) -> float:
    """Price of one extra dry path when targets are soft: more than any plan of a terminal can
    save otherwise (every day a visit, a dry day, a full load carried and handled twice)."""
    d_count = problem.shape[2]
    rates = problem.rates
    top = problem.limit.max(initial=0.0)
    worst = d_count * (rates.dry_day_penalty + problem.visit_fee.max(initial=0.0)
                       + rates.carry_rate_daily * top
                       + 2 * rates.handling_per_1000 * top / 1000.0
                       + rates.shortfall_penalty_per_1000 * problem.demand.max(initial=0.0)
                       / 1000.0)
    return 10.0 * worst + 1.0


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
    penalty = _soft_penalty(problem) if soft else None
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


# --------------------------------------------------------------------------------------------
# The network
# --------------------------------------------------------------------------------------------


_WORK: dict = {}


def depot_task_setup(args, work: dict):
    """The common start of a depot task: ``(k, deadline, members, sub-problem, service rule,
    notes)`` from ``(depot, time budget, last moment)`` and the shared work table."""
    k, budget, last = args
    deadline = min(time.perf_counter() + budget, last)
    problem = work["problem"]
    members = np.flatnonzero(problem.depot_of == k)
    sub = problem.subset(members)
    rule = service_rule(sub)
    return k, deadline, members, sub, rule, rule.notes


def _depot_task(args):
    k, deadline, members, sub, rule, notes = depot_task_setup(args, _WORK)
    result = solve_depot(sub, rule, k, deadline=deadline, solver=_WORK["solver"],
                         gap_tolerance=_WORK["gap"], exact=_WORK["exact"])
    return k, members, notes, result


def run_depot_tasks(task: Callable, tasks: list, workers: int, t_count: int,
                    progress: Callable[[int, int], None] | None, min_fork: int = 50) -> list:
    """Run one task per depot (side by side in forked workers when it pays), reporting the
    terminals done after each depot."""
    results: list = []
    context = _fork_context() if workers > 1 and t_count >= min_fork else None
    if context is not None:
        # forked workers see the problem without copying it
        with context.Pool(workers) as pool:
            for res in pool.imap_unordered(task, tasks):
                results.append(res)
                if progress is not None:
                    progress(sum(len(r[1]) for r in results), t_count)
    else:
        for args in tasks:
            results.append(task(args))
            if progress is not None:
                progress(sum(len(r[1]) for r in results), t_count)
    return results


def solve_swap(problem: PlanningProblem, *, time_limit_s: float = 60.0, solver: str = "highs",
               gap_tolerance: float = GAP_TOLERANCE, exact: bool = False,
               jobs: int | None = None,
               progress: Callable[[int, int], None] | None = None) -> PlanResult:
    """Plan a swap-mode problem (see the module text and
    :func:`planner.optimize.schedule.solve_plan`, which chooses the mode)."""
    started = time.perf_counter()
    deadline = started + time_limit_s
    t_count, _, d_count = problem.shape
    notes = [""] * t_count
    depots = [k for k in range(len(problem.depots)) if (problem.depot_of == k).any()]
    sizes = {k: int((problem.depot_of == k).sum()) for k in depots}
    depots.sort(key=lambda k: -sizes[k])
    workers = min(jobs or os.cpu_count() or 1, len(depots))
    _WORK.update(problem=problem, solver=solver, gap=gap_tolerance, exact=exact)
    # each depot gets its share of the time (the workers run depots side by side)
    last = deadline - 0.1 * time_limit_s
    tasks = [(k, 0.9 * time_limit_s * workers * sizes[k] / t_count, last) for k in depots]
    try:
        results = run_depot_tasks(_depot_task, tasks, workers, t_count, progress)
    finally:
        _WORK.clear()

    visits = np.zeros((t_count, d_count), bool)
    levels = np.full((t_count, d_count), -1)
    bound = 0.0
    statuses = []
    rounds = 0
    log: list[str] = []
    for k, members, depot_notes, res in results:
        for t, note in zip(members, depot_notes):
            notes[t] = note
        visits[members] = res.visits
        levels[members] = res.levels
        bound += res.bound
        rounds += res.rounds
        statuses.append(res.status)
        log.extend(res.log)
        if res.soft:
            for t in members:
                extra = ("crews of depot " f"{problem.depots[k]} cannot serve every target: "
                         "dry risk traded for visits")
                notes[t] = f"{notes[t]}; {extra}" if notes[t] else extra
    loads = np.where(visits, levels * problem.bundle[:, None], 0.0)
    log.append(f"network: {len(depots)} depot(s) on {workers} worker(s) in "
               f"{time.perf_counter() - started:.1f} s")
    elapsed = time.perf_counter() - started
    status = ("optimal" if all(s == "optimal" for s in statuses) else
              "time_limit" if any(s == "time_limit" for s in statuses) else "feasible")
    result = result_from_plan(problem, visits, loads, status=status, bound=bound,
                              solver=_solver_name(solver), time_s=elapsed, notes=tuple(notes),
                              iterations=rounds, log=tuple(log))
    # the bound is proven on the same accounting; rounding may put it a hair above
    if result.bound > result.objective:
        result = result_from_plan(problem, visits, loads, status=status,
                                  bound=min(bound, result.objective),
                                  solver=_solver_name(solver), time_s=elapsed,
                                  notes=tuple(notes), iterations=rounds, log=tuple(log))
    return result


def _fork_context():
    """A forking multiprocessing context, or ``None`` where the platform has none."""
    import multiprocessing as mp

    try:
        return mp.get_context("fork")
    except ValueError:
        return None


def _solver_name(solver: str) -> str:
    if solver == "highs" and milp.highs_available():
        return "HiGHS (highspy; master through PuLP)"
    return "CBC (through PuLP)"
