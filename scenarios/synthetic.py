"""An invented network of terminals as a :class:`PlanningProblem`, for tests and benchmarks.

Demand is lognormal around a weekday profile, with a level factor per path that persists over
the days (demand paths are joint over days), rounded to whole tens. All numbers are invented.
"""
from __future__ import annotations

import itertools
import math

import numpy as np
import pandas as pd

from planner.costs import CostRates
from planner.optimize.problem import PlanningProblem

# Mon … Sun: busier before and on the weekend, quiet on Sunday (invented)
WEEKDAY_PROFILE = np.array([0.95, 0.9, 0.95, 1.05, 1.35, 1.2, 0.6])
VISIT_DAY_CHOICES = (
    (True, True, True, True, True, False, False),
    (True, False, True, False, True, False, False),
    (False, True, False, True, False, True, False),
    (True, True, True, True, True, True, False),
    (True, True, True, True, True, True, True),
)


def synthetic_problem(*, terminals: int = 12, depots: int = 2, horizon_days: int = 14,
                      tail_days: int = 7, paths: int = 100, seed: int = 0, mode: str = "swap",
                      crew_share: float = 0.2, max_dry_probability: float = 0.05,
                      lock_days: int = 0, committed_share: float = 0.0,
                      start: str = "2026-12-07", days: int | None = None,
                      days_of_cash: tuple[float, float] = (4.0, 9.0)) -> PlanningProblem:
    """A seeded invented problem.

    ``crew_share``: crews per depot and weekday as a share of the depot's terminals (80 % of it
    on Saturday, 30 % on Sunday; at least one). ``committed_share``: share of terminals with a
    committed visit on the first day. ``days_of_cash``: range of the limit in days of mean
    demand. ``days`` overrides horizon + tail (then the horizon is
    ``days − tail_days``).
    """
    rng = np.random.default_rng(seed)
    d_count = days if days is not None else horizon_days + tail_days
    horizon = d_count - tail_days
    dates = pd.date_range(start, periods=d_count, freq="D")
    weekday = dates.day_of_week.to_numpy()

    base = rng.lognormal(np.log(8000.0), 0.45, size=terminals)
    level = rng.lognormal(0.0, 0.12, size=(terminals, paths, 1))
    noise = rng.lognormal(-0.5 * 0.3 ** 2, 0.3, size=(terminals, paths, d_count))
    demand = base[:, None, None] * WEEKDAY_PROFILE[weekday][None, None, :] * level * noise
    demand = np.round(demand / 10.0) * 10.0

    bundle = rng.choice([1000.0, 2000.0], size=terminals)
    cash_days = rng.uniform(*days_of_cash, size=terminals)
    limit = np.maximum(np.floor(base * cash_days / bundle), 3) * bundle
    start_balance = np.floor(limit * rng.uniform(0.25, 0.75, size=terminals) / 10.0) * 10.0

    pick = rng.integers(0, len(VISIT_DAY_CHOICES), size=terminals)
    allowed_weekdays = np.array([VISIT_DAY_CHOICES[i] for i in pick])
    allowed = allowed_weekdays[:, weekday]
    allowed[:, :lock_days] = False
    fixed_load = np.full((terminals, d_count), np.nan)
    chosen = rng.random(terminals) < committed_share
    fixed_load[chosen, 0] = np.floor(limit[chosen] * 0.8 / bundle[chosen]) * bundle[chosen]
    allowed |= ~np.isnan(fixed_load)

    depot_of = rng.integers(0, depots, size=terminals)
    members = np.bincount(depot_of, minlength=depots)
    by_weekday = np.array([1.0, 1.0, 1.0, 1.0, 1.0, 0.8, 0.3])
    crew = np.maximum(np.round(crew_share * members[:, None] * by_weekday[weekday][None, :]), 1)
    crew = crew.astype(int)
    fee_by_weekday = np.array([120.0, 120.0, 120.0, 120.0, 120.0, 180.0, 250.0])
    visit_fee = np.broadcast_to(fee_by_weekday[weekday], (terminals, d_count)).copy()

    return PlanningProblem(
        terminal_ids=tuple(f"KVB-{i + 1:04d}" for i in range(terminals)),
        depots=tuple(f"Depot {chr(65 + k)}" for k in range(depots)),
        depot_of=depot_of,
        dates=dates,
        horizon_days=horizon,
        demand=demand,
        start_balance=start_balance,
        limit=limit,
        bundle=bundle,
        allowed=allowed,
        fixed_load=fixed_load,
        visit_fee=visit_fee,
        crew_limit=crew,
        rates=CostRates(carry_rate_daily=0.05 / 365, handling_per_1000=0.8,
                        dry_day_penalty=600.0, shortfall_penalty_per_1000=2.0),
        mode=mode,
        max_dry_probability=max_dry_probability,
        lock_days=lock_days,
        visit_weekdays=allowed_weekdays,
        limit_names=("capacity",) * terminals,
    )


def crew_feasible_optimum(problem, tables) -> float:
    """Brute force for tests: the least total cost over one (pattern → cost) table per
    terminal, among the combinations of patterns that keep every depot within its crews."""
    best = math.inf
    for combo in itertools.product(*(table.items() for table in tables)):
        visits = np.array([pattern for pattern, _ in combo])
        used = np.zeros_like(problem.crew_limit)
        np.add.at(used, problem.depot_of, visits.astype(int))
        if (used <= problem.crew_limit).all():
            best = min(best, sum(cost for _, cost in combo))
    return best
