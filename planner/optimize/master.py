"""The master problem of one depot, shared by swap (:mod:`planner.optimize.swap`) and top-up
(:mod:`planner.optimize.topup`).

A *column* is one terminal's plan (visit days and loads) with its expected cost over all days.
The master chooses one column per terminal, ``Σ_j x[t, j] = 1`` (``one-plan-{t}``), with
``Σ_{t, j} visits[t, j, d] · x[t, j] ≤ crew_limit[d]`` (``crew-limit-{depot}-{day}``). Its LP
relaxation goes to HiGHS through ``highspy`` directly and gives the crew prices ``λ[d] ≥ 0``
(the duals of the crew rows); the MILP goes through PuLP (``pulp.HiGHS``; CBC when HiGHS is
not installed or ``solver="cbc"``).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from planner.optimize import milp
from planner.optimize.problem import PlanningProblem


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


def soft_penalty(problem: PlanningProblem) -> float:
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


def solver_label(solver: str) -> str:
    """How the run names the solvers that made its plan."""
    if solver == "highs" and milp.highs_available():
        return "HiGHS (highspy; master through PuLP)"
    return "CBC (through PuLP)"
