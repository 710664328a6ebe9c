"""Top-up mode: visit days and loads when cash is added to what the machine still holds.

With top-up the residual stays in the machine, so a cycle's cost depends on every earlier load
and the cycle separation of swap does not hold. What is done instead, per terminal by size:

- **Small terminals, exact.** When a terminal has few enough plans (every subset of its allowed
  days × every load in whole bundles; plans × paths × days at most ``ENUMERATION_LIMIT``), all
  of them are costed with :func:`planner.costs.simulate` and each visit pattern keeps its
  cheapest plan. With every terminal enumerated the master below sees every pattern, so the
  plan is optimal and the bound proven.
- **Beyond enumeration, small enough for an exact MILP.** A terminal whose paths × days are at
  most ``EXACT_PRICING_LIMIT`` is priced by its own reference MILP
  (:mod:`planner.optimize.monolithic`, one terminal, each day's visit at its fee plus the crew
  price of the master) in column generation; with every terminal of the depot enumerated or
  priced this way, the Lagrangian bound ``Σ_t min_plan (cost + λ · visits) − λ · crews`` holds
  for every plan, so the plan comes with a proven gap (measured: 13 paths × 7 days costs about
  7 s per pricing MILP with HiGHS, 30 × 10 about 47 s; hence the small limit). The columns
  found by the tiers below are its starting columns.
- **Fewer patterns than plans.** When the visit patterns alone are few enough (patterns ×
  paths × days at most ``PATTERN_LIMIT``), every pattern is kept, each with loads found by the
  coordinate descent below from three starts (full loads; the mean and the 95 % quantile of
  the demand until the next visit). Exact in cost, not proven optimal.
- **Larger terminals, order-up-to levels refined on the paths.** First the swap model of these
  terminals is solved under the crews (:mod:`planner.optimize.swap`); its plans, with each
  swap level loaded as the top-up amount, keep every path at least as full as under swap (a
  top-up balance is at least the load), so they meet the service target and fit the crews
  together. Then, at the crew prices of the top-up master, new visit patterns and levels come
  from the swap pricing (:mod:`planner.optimize.terminal`), and every plan's loads are moved
  bundle by bundle (one down or up, then doubling steps) while the exact accounting says the
  cost falls (coordinate descent, vectorised over terminals); last, a local search moves,
  drops or adds single visits around each terminal's best plan. These columns are exact in
  cost, not in optimality.
- **Bound.** Every depot reports a valid lower bound: the exact Lagrangian bound when every
  terminal was enumerated or priced exactly, else the perfect-foresight Lagrangian bound
  (:func:`foresight_bound`: each path's least cost at visit fee + crew price, which knows the
  demand and drops the service target, minus the crew prices times the crews). It is a true
  bound but a loose one, as it lets every path choose its own loads: on the demo network in
  top-up mode it leaves a gap of 26.8 % (measured 2026-12-02).
- **Network.** The same master as swap (:mod:`planner.optimize.master`: one plan per
  terminal, crew limits per day, Lagrangian prices from its LP), with the service target priced rather than imposed: a dry path above
  the allowance costs more than any plan can save, so the master finds crew-feasible plans
  even when the crews are too few, and prefers meeting every target whenever it can. Depots
  run on the run's executor like swap (:mod:`planner.optimize.depots`). Every stage ends by a work limit (patterns priced,
  rounds, passes), so identical input gives an identical plan on any machine; the time limit
  is an emergency stop only, and the log says when it was reached.

Measured once against the monolithic reference MILP (:mod:`planner.optimize.monolithic`) on
30 one-terminal instances beyond enumeration (6 days, 10 paths, 11 load levels; seeds 50–79 of
the reference tests' generator), without exact pricing: every one at the optimum with the
pattern tier; with the order-up-to tier forced instead: mean +0.41 %, worst +3.7 %, 6 of 30
above it.
"""
from __future__ import annotations

import itertools
import math
import time
from dataclasses import replace

import numpy as np

from planner.costs import cycle_dry_counts, simulate
from planner.optimize import milp, terminal
from planner.optimize.depots import DepotPlan, DepotTask
from planner.optimize.master import ColumnPool, soft_penalty, solve_master_lp, solve_master_mip
from planner.optimize.problem import PlanningProblem, ServiceRule, next_visits, service_rule
from planner.optimize.swap import solve_depot

ENUMERATION_LIMIT = 40_000_000     # plans × paths × days costed when enumerating a terminal
PATTERN_LIMIT = 300_000            # patterns × paths × days when every pattern gets its loads
NEIGHBOUR_LIMIT = 20_000_000       # neighbour plans × paths × days in one local search
EXACT_PRICING_LIMIT = 120          # paths × days of a terminal priced by its exact MILP
MAX_EXACT_ROUNDS = 30
PATTERN_BUDGET = 12_000_000        # patterns × paths × days of all "every pattern" terminals
ORDER_UP_TO_ROUNDS = 12            # column rounds at the crew prices (stop earlier when none)
SEARCH_ROUNDS = 2                  # local-search rounds around each terminal's best plan
EXACT_PRICING_SECONDS = 120.0      # per pricing MILP; far above its measured need (a limit
                                   # for a machine in trouble, not a work limit)
MASTER_SECONDS = 120.0             # the master MILP's time at least, likewise
CHUNK = 20_000


def pattern_count(problem: PlanningProblem, t: int) -> int:
    """Number of visit patterns of terminal ``t`` (subsets of its free allowed days)."""
    return 2 ** int((problem.allowed[t] & ~problem.committed[t]).sum())


def plan_count(problem: PlanningProblem, t: int) -> int:
    """Number of plans of terminal ``t`` (subsets of its free allowed days × load levels)."""
    free = int((problem.allowed[t] & ~problem.committed[t]).sum())
    levels = int(round(problem.limit[t] / problem.bundle[t])) + 1
    return (levels + 1) ** free


def evaluate(problem: PlanningProblem, rows: np.ndarray, visits: np.ndarray,
             loads: np.ndarray, rule: ServiceRule) -> tuple[np.ndarray, np.ndarray]:
    """Exact ``(expected cost [n], dry paths above the allowance summed over cycles [n])`` of
    one plan per row (``rule`` the service rule of ``problem``'s terminals)."""
    ledger = simulate(visits, np.where(visits, loads, 0.0), problem.start_balance[rows],
                      problem.demand[rows], problem.limit[rows], problem.visit_fee[rows],
                      problem.rates, problem.mode)
    counts = cycle_dry_counts(ledger, visits)
    return ledger.expected_cost(), rule.excess(visits, counts, rows)


def enumerate_patterns(problem: PlanningProblem, t: int, rule: ServiceRule,
                       penalty: float) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """Every plan of terminal ``t``; per visit pattern the plan with the least priced cost
    (expected cost + ``penalty`` per dry path above a cycle's allowance)."""
    d_count = problem.shape[2]
    committed = problem.committed[t]
    free = np.flatnonzero(problem.allowed[t] & ~committed)
    levels = problem.bundle[t] * np.arange(int(round(problem.limit[t] / problem.bundle[t])) + 1)
    base_load = np.where(committed, np.nan_to_num(problem.fixed_load[t]), 0.0)
    out = []
    for chosen in itertools.product([False, True], repeat=len(free)):
        days = free[np.array(chosen, bool)]
        visit = committed.copy()
        visit[days] = True
        combos = (np.array(list(itertools.product(levels, repeat=len(days)))) if len(days)
                  else np.zeros((1, 0)))
        best = (math.inf, None)
        for start in range(0, len(combos), CHUNK):
            part = combos[start:start + CHUNK]
            m = len(part)
            loads = np.tile(base_load, (m, 1))
            loads[:, days] = part
            visits = np.tile(visit, (m, 1))
            ledger = simulate(visits, loads, np.full(m, problem.start_balance[t]),
                              np.broadcast_to(problem.demand[t], (m,) + problem.demand[t].shape),
                              np.full(m, problem.limit[t]),
                              np.broadcast_to(problem.visit_fee[t], (m, d_count)),
                              problem.rates, problem.mode)
            excess = rule.excess(visits, cycle_dry_counts(ledger, visits), np.full(m, t))
            priced = ledger.expected_cost() + penalty * excess
            i = int(np.argmin(priced))
            if priced[i] < best[0]:
                best = (float(priced[i]), loads[i].copy())
        out.append((visit, best[1], best[0]))
    return out


def refine_loads(problem: PlanningProblem, rows: np.ndarray, visits: np.ndarray,
                 loads: np.ndarray, rule: ServiceRule, penalty: float,
                 passes: int = 4, deadline: float = math.inf) -> tuple[np.ndarray, np.ndarray]:
    """Coordinate descent on the free loads of fixed visit patterns (whole bundles within
    ``0 … limit``), on the exact priced cost: per visit one bundle down and up, then on in the
    better direction with doubling steps while the cost falls. Returns ``(loads, priced
    cost)``."""
    loads = loads.copy()
    cost, excess = evaluate(problem, rows, visits, loads, rule)
    priced = cost + penalty * excess
    free = visits & ~problem.committed[rows]
    order = np.cumsum(free, axis=1) - 1                      # index of each free visit
    most = int(free.sum(axis=1).max(initial=0))
    bundle = problem.bundle[rows][:, None]
    limit = problem.limit[rows][:, None]

    def attempt(sub: np.ndarray, at: np.ndarray, step: np.ndarray) -> np.ndarray:
        """Try ``step`` bundles on the marked visit of rows ``sub``; keep improvements.
        Returns which rows improved."""
        trial = np.where(at[sub], np.clip(loads[sub] + step[:, None] * bundle[sub], 0.0,
                                          limit[sub]), loads[sub])
        moved = (trial != loads[sub]).any(axis=1)
        if not moved.any():
            return np.zeros(sub.size, bool)
        c, e = evaluate(problem, rows[sub[moved]], visits[sub[moved]], trial[moved], rule)
        p = c + penalty * e
        better = np.zeros(sub.size, bool)
        gain = p < priced[sub[moved]] - 1e-9 * np.maximum(1.0, np.abs(priced[sub[moved]]))
        better[np.flatnonzero(moved)[gain]] = True
        win = sub[better]
        loads[win] = trial[better]
        priced[win] = p[gain]
        return better

    for _ in range(passes):
        improved = False
        for j in range(most):
            if time.perf_counter() > deadline:
                return loads, priced
            at = free & (order == j)
            sub = np.flatnonzero(at.any(axis=1))
            if not sub.size:
                continue
            down = attempt(sub, at, np.full(sub.size, -1.0))
            rest = sub[~down]
            up = attempt(rest, at, np.full(rest.size, 1.0)) if rest.size else np.zeros(0, bool)
            direction = np.zeros(rows.size)
            direction[sub[down]] = -1.0
            direction[rest[up]] = 1.0
            going = np.flatnonzero(direction != 0)
            improved |= going.size > 0
            size = 2.0
            while going.size and size <= 8:
                ok = attempt(going, at, direction[going] * size)
                going = going[ok]
                size *= 2
        if not improved:
            break
    return loads, priced


def pattern_columns(problem: PlanningProblem, t: int, rule: ServiceRule,
                    penalty: float) -> list[tuple[np.ndarray, np.ndarray, float]]:
    """Every visit pattern of terminal ``t``, each with loads found by coordinate descent from
    three starts (full loads; the mean and the 95 % quantile of the demand until the next
    visit, in whole bundles). Returns ``(visits, loads, priced cost)`` per pattern."""
    d_count = problem.shape[2]
    committed = problem.committed[t]
    free = np.flatnonzero(problem.allowed[t] & ~committed)
    patterns = np.array(list(itertools.product([False, True], repeat=len(free))),
                        dtype=bool).reshape(-1, len(free))
    visits = np.tile(committed, (len(patterns), 1))
    visits[:, free] = patterns
    nxt = next_visits(visits)
    prefix = np.concatenate([np.zeros((problem.shape[1], 1)),
                             np.cumsum(problem.demand[t], axis=1)], axis=1)   # [P, D + 1]
    need = prefix[:, nxt] - prefix[:, np.arange(d_count)][:, None, :]        # [P, n, D]
    bundle, limit = problem.bundle[t], problem.limit[t]
    fixed = np.where(committed, np.nan_to_num(problem.fixed_load[t]), 0.0)
    starts = [np.full(visits.shape, limit), np.mean(need, axis=0),
              np.quantile(need, 0.95, axis=0)]
    best_load = np.zeros(visits.shape)
    best = np.full(len(visits), np.inf)
    for start in starts:
        loads = np.clip(np.ceil(start / bundle) * bundle, 0.0, limit)
        loads = np.where(committed, fixed, np.where(visits, loads, 0.0))
        step = max(1, 4_000_000 // max(problem.shape[1] * d_count, 1))
        for i in range(0, len(visits), step):
            part = slice(i, i + step)
            rows = np.full(len(visits[part]), t)
            found, priced = refine_loads(problem, rows, visits[part], loads[part], rule,
                                         penalty)
            better = priced < best[part]
            best[part] = np.where(better, priced, best[part])
            best_load[part] = np.where(better[:, None], found, best_load[part])
    return [(visits[i], best_load[i], float(best[i])) for i in range(len(visits))]



def order_up_to_columns(problem: PlanningProblem, batch: terminal.TerminalBatch,
                        rows: np.ndarray, price: np.ndarray, rule: ServiceRule,
                        penalty: float, deadline: float = math.inf
                        ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Plans of ``rows`` at day prices ``price`` ``[n, D]``: swap pattern and levels as top-up
    loads, refined on the paths. Returns ``(visits, loads, priced cost without day prices)``."""
    plans, _ = terminal.cheapest_plans(batch, price, rows)
    visits = plans.visits
    loads = np.where(visits, np.maximum(plans.levels, 0) * problem.bundle[rows][:, None], 0.0)
    committed = problem.committed[rows]
    loads = np.where(committed, np.nan_to_num(problem.fixed_load[rows]), loads)
    visits = visits | committed
    loads, priced = refine_loads(problem, rows, visits, loads, rule, penalty,
                                 deadline=deadline)
    return visits, loads, priced


MIN_PARALLEL = 20     # terminals below which the depots run in this process
SOLVER_NOTE = "top-up by enumeration, exact pricing or order-up-to"


def plan_depot(task: DepotTask) -> DepotPlan:
    """The top-up plan of one depot's task (the executor's unit of work)."""
    sub = task.problem
    rule = service_rule(sub)
    visits, loads, bound, _, log, short = _solve_depot(sub, rule, task.depot, task.deadline(),
                                                       task.solver, task.gap_tolerance)
    return DepotPlan(visits, loads, bound, "feasible", short, rule.notes, log)


def _solve_depot(sub: PlanningProblem, rule: ServiceRule, depot: int, deadline: float,
                 solver: str, gap_tolerance: float):
    # every stage ends by its own work limit; ``deadline`` is an emergency stop only (logged),
    # so the plan does not depend on the machine's speed
    t_count, _, d_count = sub.shape
    name = sub.depots[depot]
    crew = np.maximum(sub.crew_limit[depot], sub.committed.sum(axis=0)).astype(float)
    penalty = soft_penalty(sub)
    pool = ColumnPool()
    log: list[str] = []
    work = sub.shape[1] * d_count
    small = np.array([plan_count(sub, t) * work <= ENUMERATION_LIMIT for t in range(t_count)])
    for t in np.flatnonzero(small):
        for visit, load, cost in enumerate_patterns(sub, t, rule, penalty):
            pool.add(t, visit, _levels(sub, t, visit, load), cost)
    few = np.array([not small[t] and pattern_count(sub, t) * work <= PATTERN_LIMIT
                    for t in range(t_count)])
    budget = PATTERN_BUDGET
    for t in np.flatnonzero(few):
        budget -= pattern_count(sub, t) * work
        if budget < 0:
            few[t] = False               # beyond the budget: the order-up-to columns instead
            continue
        for visit, load, cost in pattern_columns(sub, t, rule, penalty):
            pool.add(t, visit, _levels(sub, t, visit, load), cost)
    large = np.flatnonzero(~small & ~few)
    # committed visits only: always within the crews
    base_visits = sub.committed.copy()
    base_loads = np.where(base_visits, np.nan_to_num(sub.fixed_load), 0.0)
    cost, excess = evaluate(sub, np.arange(t_count), base_visits, base_loads, rule)
    for t in range(t_count):
        pool.add(t, base_visits[t], _levels(sub, t, base_visits[t], base_loads[t]),
                 cost[t] + penalty * excess[t])
    log.append(f"{name}: top-up, {small.sum()} terminal(s) enumerated, {few.sum()} by every "
               f"pattern with searched loads, {large.size} by order-up-to levels")
    if large.size:
        part = sub.subset(large)
        rows = np.arange(large.size)
        # the swap model of these terminals first (fast, exact for swap): its plans, loaded as
        # top-up amounts, are at least as safe on every path and fit the crews together
        as_swap = replace(part, mode="swap")
        swap_rule = service_rule(as_swap)
        swap = solve_depot(as_swap, swap_rule, depot, deadline=deadline, solver=solver,
                           gap_tolerance=gap_tolerance)
        log.extend(f"{line} (swap start)" for line in swap.log[-1:])
        added = _add_as_topup(pool, sub, large, swap.pool, rule, penalty)
        v = swap.visits | part.committed
        lo = np.where(v, np.maximum(swap.levels, 0) * part.bundle[:, None], 0.0)
        lo = np.where(part.committed, np.nan_to_num(part.fixed_load), lo)
        lo, priced = refine_loads(part, rows, v, lo, rule.take(large), penalty)
        added += sum(pool.add(t, v[i], _levels(sub, t, v[i], lo[i]), priced[i])
                     for i, t in enumerate(large))
        log.append(f"{name}: top-up from the swap plans: {added} columns")
        batch = terminal.prepare_batch(as_swap, swap_rule)
        _, _, lam, _ = solve_master_lp(pool, t_count, name, crew, None, solver)
        for iteration in range(ORDER_UP_TO_ROUNDS):
            if _late(deadline, log, name):
                break
            price = sub.visit_fee[large] + lam[None, :]
            v, lo, priced = order_up_to_columns(part, batch, rows, price, rule.take(large),
                                                penalty)
            added = 0
            for i, t in enumerate(large):
                added += pool.add(t, v[i], _levels(sub, t, v[i], lo[i]), priced[i])
            _, _, lam, _ = solve_master_lp(pool, t_count, name, crew, None, solver)
            log.append(f"{name}: top-up round {iteration}: +{added} columns")
            if added == 0:
                break
        # local search around each terminal's best plan at the last crew prices
        price = sub.visit_fee + lam[None, :]
        for _ in range(SEARCH_ROUNDS):
            if _late(deadline, log, name):
                break
            best_v, best_l, best_c = _best_columns(pool, sub, large, price)
            v, lo, priced = neighbour_plans(part, np.arange(large.size), best_v, best_l,
                                            rule.take(large), penalty, price[large])
            added = sum(pool.add(t, v[i], _levels(sub, t, v[i], lo[i]), priced[i])
                        for i, t in enumerate(large) if np.isfinite(priced[i]))
            log.append(f"{name}: top-up local search: +{added} columns")
            if not added:
                break
    exact = ~small & (sub.shape[1] * d_count <= EXACT_PRICING_LIMIT)
    lagrangian = -math.inf
    if exact.any() and (small | exact).all():
        lagrangian = _exact_rounds(sub, pool, small, exact, rule, penalty, crew, name,
                                   solver, deadline, log)
    foresight = foresight_bound(sub, pool, small, crew, name, solver)
    log.append(f"{name}: perfect-foresight Lagrangian bound {foresight:,.2f}")
    remaining = max(deadline - time.perf_counter(), MASTER_SECONDS)
    status, chosen, objective, mip_bound = solve_master_mip(pool, t_count, name, crew, solver,
                                                            remaining, gap_tolerance / 4
                                                            if large.size else 1e-9)
    visits = np.array([pool.visits[j] for j in chosen])
    levels = np.array([pool.levels[j] for j in chosen])
    loads = np.where(visits, np.maximum(levels, 0) * sub.bundle[:, None], 0.0)
    loads = np.where(sub.committed, np.nan_to_num(sub.fixed_load), loads)
    _, excess = evaluate(sub, np.arange(t_count), visits, loads, rule)
    priced_excess = float(excess.sum() * penalty)
    log.append(f"{name}: master MILP {status}, priced objective {objective:,.2f}")
    if np.isfinite(lagrangian):
        # every terminal enumerated or priced exactly: the Lagrangian bound holds for every
        # plan that meets the targets (none is proven when a target is priced, not met)
        bound = max(lagrangian, foresight)
        gap = (objective - priced_excess - bound) / max(abs(objective), 1e-12)
        log.append(f"{name}: Lagrangian bound {bound:,.2f}, gap {max(gap, 0.0):.4%}")
        return visits, loads, bound, not excess.any(), log, excess > 0
    proven = not large.size and not few.any() and status == "optimal"
    bound = mip_bound - priced_excess if proven else foresight
    return visits, loads, bound, proven, log, excess > 0


def _late(deadline: float, log: list, name: str) -> bool:
    """The emergency stop: True (and logged once) when the depot's time is up."""
    if time.perf_counter() <= deadline:
        return False
    line = f"{name}: emergency time limit reached; the plan may depend on the machine's speed"
    if line not in log:
        log.append(line)
    return True


def foresight_bound(sub: PlanningProblem, pool: ColumnPool, small: np.ndarray,
                    crew: np.ndarray, name: str, solver: str) -> float:
    """A lower bound of the depot's optimum for every terminal, enumerated or not: the
    Lagrangian bound ``Σ_t LB_t(λ) − λ · crew`` at the crew prices ``λ`` of the final master
    LP (and at ``λ = 0``), where ``LB_t(λ)`` is the exact least priced cost for an enumerated
    terminal and otherwise its perfect-foresight value (:mod:`planner.evaluate.bound`: each
    path's least cost at visit fee + ``λ``, which drops the service target and knows the
    demand, so it is below every plan's)."""
    from planner.evaluate.bound import perfect_foresight_arrays

    t_count = sub.shape[0]
    _, _, lam, _ = solve_master_lp(pool, t_count, name, crew, None, solver)
    term, visits, cost = pool.arrays()
    best = -math.inf
    for prices in (lam, np.zeros_like(lam)):
        fee = sub.visit_fee + prices[None, :]
        low = perfect_foresight_arrays(
            demand=sub.demand, start_balance=sub.start_balance, limit=sub.limit,
            bundle=sub.bundle, allowed=sub.allowed, fixed_load=sub.fixed_load, visit_fee=fee,
            rates=sub.rates, mode=sub.mode).expected_cost()
        listed = np.full(t_count, math.inf)
        np.minimum.at(listed, term, cost + (visits * prices[None, :]).sum(axis=1))
        low = np.where(small, np.maximum(low, listed), low)
        best = max(best, float(low.sum() - prices @ crew))
    return best


def price_exactly(problem: PlanningProblem, t: int, price: np.ndarray, time_limit_s: float
                  ) -> tuple[np.ndarray, np.ndarray, float, str]:
    """Terminal ``t``'s cheapest plan that meets its service target when a visit on day ``d``
    costs ``price[d]`` (visit fee + crew price), by the reference MILP of that one terminal
    (:mod:`planner.optimize.monolithic`). Returns ``(visits [D], loads [D], priced cost,
    status)``."""
    from planner.optimize.monolithic import solve_monolithic

    if milp.highs_available():
        milp.new_highs()             # the process's first HiGHS object prints a banner: muted
    one = problem.subset([t])
    one = replace(one, visit_fee=np.asarray(price, dtype=float)[None, :],
                  crew_limit=np.full_like(one.crew_limit, 1))
    visits, loads, objective, status = solve_monolithic(one, time_limit_s=time_limit_s)
    return visits[0], loads[0], objective, status


def _exact_rounds(sub: PlanningProblem, pool: ColumnPool, small: np.ndarray,
                  exact: np.ndarray, rule: ServiceRule, penalty: float, crew: np.ndarray,
                  name: str, solver: str, deadline: float, log: list) -> float:
    """Column generation with exact pricing: the ``exact`` terminals by
    :func:`price_exactly`, the enumerated (``small``) ones from their complete columns. Adds
    the new plans to ``pool``; returns the best Lagrangian bound
    ``Σ_t min_plan (cost + λ · visits) − λ · crew`` found (``−inf`` when a pricing MILP did
    not finish)."""
    t_count = sub.shape[0]
    best = -math.inf
    last = None
    for iteration in range(MAX_EXACT_ROUNDS):
        _, mu, lam, _ = solve_master_lp(pool, t_count, name, crew, None, solver)
        if last is not None and np.allclose(lam, last, rtol=0.0, atol=1e-9):
            break         # same crew prices: the pricing would find the plans just added
        last = lam
        price = sub.visit_fee + lam[None, :]
        term, visits, cost = pool.arrays()
        priced = cost + (visits * lam[None, :]).sum(axis=1)
        lower = np.full(t_count, math.inf)
        np.minimum.at(lower, term, priced)
        added, finished = 0, True
        for t in np.flatnonzero(exact):
            if _late(deadline, log, name):
                finished = False
                break
            v, lo, value, status = price_exactly(sub, t, price[t], EXACT_PRICING_SECONDS)
            if status != "optimal":
                finished = False
                continue
            lower[t] = min(lower[t], value)
            c, e = evaluate(sub, np.array([t]), v[None], lo[None], rule)
            if value < mu[t] - 1e-9 * max(1.0, abs(value)):
                added += pool.add(t, v, _levels(sub, t, v, lo), float(c[0] + penalty * e[0]))
        if not finished:
            log.append(f"{name}: top-up exact pricing stopped by the time limit")
            return -math.inf
        best = max(best, float(lower.sum() - lam @ crew))
        log.append(f"{name}: top-up exact round {iteration}: +{added} columns, bound "
                   f"{best:,.2f}")
        if not added:
            break
    return best


def _add_as_topup(pool: ColumnPool, problem: PlanningProblem, members: np.ndarray,
                  swap_pool: ColumnPool | None, rule: ServiceRule, penalty: float) -> int:
    """Add the plans of a swap pool (terminals numbered within ``members``) with their levels
    as top-up loads, priced exactly. Returns how many were new."""
    if swap_pool is None or not swap_pool.cost:
        return 0
    term = members[np.array(swap_pool.terminal)]
    visits = np.array(swap_pool.visits) | problem.committed[term]
    loads = np.where(visits, np.maximum(np.array(swap_pool.levels), 0)
                     * problem.bundle[term][:, None], 0.0)
    loads = np.where(problem.committed[term], np.nan_to_num(problem.fixed_load[term]), loads)
    step = max(1, 4_000_000 // max(problem.shape[1] * problem.shape[2], 1))
    added = 0
    for i in range(0, term.size, step):
        part = slice(i, i + step)
        cost, excess = evaluate(problem, term[part], visits[part], loads[part], rule)
        for t, v, lo, c in zip(term[part], visits[part], loads[part], cost + penalty * excess):
            added += pool.add(t, v, _levels(problem, t, v, lo), c)
    return added


def _best_columns(pool: ColumnPool, problem: PlanningProblem, terminals: np.ndarray,
                  price: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Per terminal the pool's plan cheapest at day prices ``price`` ``[T, D]``."""
    term, visits, cost = pool.arrays()
    priced = cost + (visits * price[term]).sum(axis=1) - (visits * problem.visit_fee[term]).sum(
        axis=1)
    out_v = np.zeros((terminals.size, problem.shape[2]), bool)
    out_l = np.zeros((terminals.size, problem.shape[2]))
    out_c = np.full(terminals.size, np.inf)
    for i, t in enumerate(terminals):
        mine = np.flatnonzero(term == t)
        j = mine[np.argmin(priced[mine])]
        out_v[i] = pool.visits[j]
        out_l[i] = np.where(pool.visits[j], np.maximum(pool.levels[j], 0) * problem.bundle[t],
                            0.0)
        out_c[i] = priced[j]
    return out_v, out_l, out_c


def neighbour_plans(problem: PlanningProblem, rows: np.ndarray, visits: np.ndarray,
                    loads: np.ndarray, rule: ServiceRule, penalty: float,
                    price: np.ndarray, deadline: float = math.inf
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """For each plan, the best of its neighbours (one free visit dropped, added on an allowed
    day, or moved a day), loads refined by coordinate descent; judged at day prices
    ``price`` ``[n, D]``. Returns ``(visits, loads, priced cost without day prices)``, cost
    ``inf`` where no neighbour is better."""
    d_count = problem.shape[2]
    cand_row, cand_v, cand_l = [], [], []
    committed = problem.committed[rows]
    for i in range(rows.size):
        v, lo = visits[i], loads[i]
        free = np.flatnonzero(v & ~committed[i])
        open_days = np.flatnonzero(problem.allowed[rows[i]] & ~v)
        mean_day = problem.demand[rows[i]].mean(axis=0)
        moves = [(d, None) for d in free]
        moves += [(d, d + s) for d in free for s in (-1, 1)
                  if 0 <= d + s < d_count and d + s in set(open_days)]
        if len(moves) * problem.shape[1] * d_count * rows.size <= NEIGHBOUR_LIMIT:
            moves += [(None, d) for d in open_days]
        for drop, add in moves:
            nv, nl = v.copy(), lo.copy()
            carried = 0.0
            if drop is not None:
                nv[drop] = False
                carried = nl[drop]
                nl[drop] = 0.0
            starts = [nl]
            if add is not None:
                nv[add] = True
                nxt = np.flatnonzero(nv[add + 1:])
                end = add + 1 + nxt[0] if nxt.size else d_count
                need = mean_day[add:end].sum()
                bundle = problem.bundle[rows[i]]
                top = problem.limit[rows[i]]
                # a moved visit starts from its load and full, a new one from the mean need
                # and full
                firsts = [carried if carried else min(top, math.ceil(need / bundle) * bundle)]
                firsts += [top] if firsts[0] != top else []
                starts = []
                for first in firsts:
                    start = nl.copy()
                    start[add] = first
                    starts.append(start)
            for start in starts:
                cand_row.append(i)
                cand_v.append(nv)
                cand_l.append(start)
    best_v, best_l = visits.copy(), loads.copy()
    best = np.full(rows.size, np.inf)
    if not cand_row:
        return best_v, best_l, best
    base_cost, base_excess = evaluate(problem, rows, visits, loads, rule)
    base = base_cost + penalty * base_excess + (visits * price).sum(axis=1)
    cand_row = np.array(cand_row)
    cand_v, cand_l = np.array(cand_v), np.array(cand_l)
    step = max(1, 4_000_000 // max(problem.shape[1] * d_count, 1))
    for k in range(0, cand_row.size, step):
        if time.perf_counter() > deadline:
            break
        part = slice(k, k + step)
        r = cand_row[part]
        found, priced = refine_loads(problem, rows[r], cand_v[part], cand_l[part], rule,
                                     penalty, passes=2, deadline=deadline)
        judged = priced + (cand_v[part] * price[r]).sum(axis=1)
        for q in np.argsort(judged):
            i = r[q]
            if judged[q] < base[i] - 1e-9 * abs(base[i]):
                base[i] = judged[q]
                best_v[i], best_l[i] = cand_v[part][q], found[q]
                best[i] = priced[q]
    return best_v, best_l, best


def _levels(problem: PlanningProblem, t: int, visit: np.ndarray, load: np.ndarray) -> np.ndarray:
    """Loads as bundle counts (−1 without a visit), the pool's representation."""
    return np.where(visit, np.rint(np.nan_to_num(load) / problem.bundle[t]), -1).astype(int)
