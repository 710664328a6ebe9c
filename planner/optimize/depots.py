"""The depot runner: the schedule's work split by depot and handed to an executor.

Depots are independent given their crews, so each depot is one task: its terminals'
sub-problem, its share of the time limit and the solver settings (:class:`DepotTask`). The
mode's depot solver (:func:`planner.optimize.swap.plan_depot` or
:func:`planner.optimize.topup.plan_depot`) turns it into a :class:`DepotPlan`, wherever the
executor runs it (:mod:`planner.executor`); :func:`network_result` puts the depots' plans back
together into one :class:`~planner.optimize.problem.PlanResult`. A task carries everything it
needs, so the plan does not depend on the engine, on the number of workers or on the order in
which the depots finish.
"""
from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field, replace

import numpy as np

from planner.executor import Executor, LocalExecutor
from planner.optimize.problem import PlanningProblem, PlanResult, result_from_plan


@dataclass(frozen=True)
class DepotTask:
    """One depot's share of the schedule."""

    depot: int                  # index into the whole problem's depots
    members: np.ndarray         # the depot's terminals: rows of the whole problem
    problem: PlanningProblem    # the sub-problem of these terminals
    budget_s: float             # this depot's share of the time limit
    last: float                 # wall-clock moment (time.time()) when every depot stops
    solver: str
    gap_tolerance: float
    exact: bool

    def deadline(self) -> float:
        """The emergency stop as a ``time.perf_counter()`` moment of the machine that runs
        the task (counted from the moment it starts)."""
        return time.perf_counter() + max(0.0, min(self.budget_s, self.last - time.time()))


@dataclass
class DepotPlan:
    """One depot's plan (its terminals in the task's order) and the proof of its quality."""

    visits: np.ndarray          # [n, D] bool
    loads: np.ndarray           # [n, D]
    bound: float                # a lower bound of the depot's expected cost
    status: str                 # "optimal" | "feasible" | "time_limit"
    short: np.ndarray           # [n] bool: the crews could not serve this terminal's target
    notes: tuple[str, ...]      # per terminal, from the service rule
    log: list[str] = field(default_factory=list)
    rounds: int = 0


def depot_tasks(problem: PlanningProblem, *, time_limit_s: float, workers: int, share: float,
                solver: str, gap_tolerance: float, exact: bool) -> list[DepotTask]:
    """One task per depot with terminals, the largest first. Each depot gets ``share`` of the
    time limit in proportion to its terminals (times the workers, which run depots side by
    side); every depot stops at 90 % of the time limit."""
    t_count = problem.shape[0]
    depots = [k for k in range(len(problem.depots)) if (problem.depot_of == k).any()]
    members = {k: np.flatnonzero(problem.depot_of == k) for k in depots}
    depots.sort(key=lambda k: -members[k].size)
    last = time.time() + 0.9 * time_limit_s
    return [DepotTask(k, members[k], problem.subset(members[k]),
                      share * time_limit_s * workers * members[k].size / t_count, last,
                      solver, gap_tolerance, exact) for k in depots]


def run_depots(problem: PlanningProblem, plan_depot: Callable[[DepotTask], DepotPlan], *,
               time_limit_s: float, share: float, solver: str, gap_tolerance: float,
               exact: bool, executor: Executor | None, min_parallel: int,
               progress: Callable[[int, int], None] | None = None
               ) -> tuple[list[DepotTask], list[DepotPlan], int]:
    """Every depot's plan: ``(tasks, plans, workers used)``. The depots run on ``executor``
    when the network has at least ``min_parallel`` terminals (below that, starting workers
    costs more than it saves), else here; ``progress(terminals_done, terminals)`` after each
    depot."""
    t_count = problem.shape[0]
    runner: Executor = executor if executor is not None and t_count >= min_parallel \
        else LocalExecutor(1)
    workers = max(1, min(runner.workers, np.unique(problem.depot_of).size))
    tasks = depot_tasks(problem, time_limit_s=time_limit_s, workers=workers, share=share,
                        solver=solver, gap_tolerance=gap_tolerance, exact=exact)
    plans = runner.map(plan_depot, tasks, progress=progress,
                       weights=[t.members.size for t in tasks])
    return tasks, plans, workers


def network_result(problem: PlanningProblem, tasks: list[DepotTask], plans: list[DepotPlan],
                   *, workers: int, solver: str, started: float, gap_tolerance: float,
                   exact: bool) -> PlanResult:
    """The depots' plans as one result: bounds and rounds add up; the status is "optimal"
    when every depot is, or when the network's gap is within the tolerance (``1e-6`` when
    ``exact``)."""
    t_count, _, d_count = problem.shape
    visits = np.zeros((t_count, d_count), bool)
    loads = np.zeros((t_count, d_count))
    notes = [""] * t_count
    log: list[str] = []
    bound, rounds = 0.0, 0
    for task, plan in zip(tasks, plans):
        visits[task.members], loads[task.members] = plan.visits, plan.loads
        bound += plan.bound
        rounds += plan.rounds
        log.extend(plan.log)
        for i, t in enumerate(task.members):
            notes[t] = plan.notes[i]
            if plan.short[i]:
                extra = (f"crews of depot {problem.depots[task.depot]} cannot serve every "
                         "target: dry risk traded for visits")
                notes[t] = f"{notes[t]}; {extra}" if notes[t] else extra
    statuses = [p.status for p in plans]
    status = ("optimal" if all(s == "optimal" for s in statuses) else
              "time_limit" if any(s == "time_limit" for s in statuses) else "feasible")
    elapsed = time.perf_counter() - started
    log.append(f"network: {len(tasks)} depot(s) on {workers} worker(s) in {elapsed:.1f} s")
    result = result_from_plan(problem, visits, loads, status=status, bound=bound,
                              solver=solver, time_s=elapsed, notes=tuple(notes),
                              iterations=rounds, log=tuple(log))
    # every depot's bound holds on the same accounting; rounding may put it a hair above
    if result.bound > result.objective:
        result = replace(result, bound=result.objective, gap=0.0)
    if result.gap <= (1e-6 if exact else gap_tolerance):
        result = replace(result, status="optimal")
    return result
