"""Plain re-implementations for the tests: slow loops, written apart from the product's
vectorised code, so that a test comparing the two can fail."""
from __future__ import annotations

import numpy as np

from planner.optimize.problem import PlanningProblem, service_rule


def cycle_dry_counts_plain(dry: np.ndarray, visits: np.ndarray) -> list[tuple[int, int, int]]:
    """``(start, end, dry paths)`` per cycle of one terminal: ``dry`` ``[P, D]`` bool (dry
    days), ``visits`` ``[D]``; ``start = −1`` for the start balance's cycle (left out when the
    first visit is on day 0), ``end`` the next visit or ``D``."""
    p_count, d_count = dry.shape
    days = [int(d) for d in np.flatnonzero(visits)]
    starts = ([] if days and days[0] == 0 else [-1]) + days
    out = []
    for s in starts:
        later = [d for d in days if d > s]
        end = later[0] if later else d_count
        count = 0
        for p in range(p_count):
            if any(dry[p, d] for d in range(max(s, 0), end)):
                count += 1
        out.append((s, end, count))
    return out


def missed_terminals(problem: PlanningProblem, visits: np.ndarray, ledger) -> list[int]:
    """Terminals with a visit cycle above its allowance of dry paths, counted by a plain loop
    over the cycles (the start balance's cycle, each visit to the next, the last one to the
    end); the allowance of a cycle that cannot be shortened is its unavoidable risk."""
    rule = service_rule(problem)
    missed = []
    for t in range(problem.shape[0]):
        for s, end, dry in cycle_dry_counts_plain(ledger.dry[t], visits[t]):
            allowed = int(rule.allowed_dry[t])
            if end == rule.shortest_end[t, s + 1]:
                allowed = max(allowed, int(rule.unavoidable[t, s + 1]))
            if dry > allowed:
                missed.append(t)
                break
    return missed


def meets_target(problem: PlanningProblem, visits: np.ndarray, ledger) -> bool:
    """No terminal misses the service target (:func:`missed_terminals`)."""
    return not missed_terminals(problem, visits, ledger)


def expected_cost_plain(problem: PlanningProblem, visits: np.ndarray,
                        loads: np.ndarray) -> float:
    """The plan's expected cost summed over terminals, by a day-by-day loop over every
    terminal and path with the rules of the accounting written out again: a visit at the
    start of the day (swap: the residual goes back, the balance becomes the load; top-up: the
    balance becomes min(balance + load, limit), the excess goes back), handling on what is
    loaded and returned, the fee per visit, then withdrawals; a day is dry when demand exceeds
    the balance; carry on the balance left at night."""
    r = problem.rates
    t_count, p_count, d_count = problem.shape
    total = 0.0
    for t in range(t_count):
        fees = sum(float(problem.visit_fee[t, d]) for d in range(d_count) if visits[t, d])
        on_paths = 0.0
        for p in range(p_count):
            balance = float(problem.start_balance[t])
            cost = 0.0
            for d in range(d_count):
                if visits[t, d]:
                    load = float(loads[t, d])
                    if problem.mode == "swap":
                        back = balance
                        balance = load
                    else:
                        back = max(balance + load - float(problem.limit[t]), 0.0)
                        balance = min(balance + load, float(problem.limit[t]))
                    cost += r.handling_per_1000 / 1000.0 * (load + back)
                demand = float(problem.demand[t, p, d])
                if demand > balance:
                    cost += r.dry_day_penalty
                    cost += r.shortfall_penalty_per_1000 / 1000.0 * (demand - balance)
                    balance = 0.0
                else:
                    balance -= demand
                cost += r.carry_rate_daily * balance
            on_paths += cost
        total += fees + on_paths / p_count
    return total
