"""The schedule's entry point: one call for either replenishment mode.

:func:`solve_plan` splits the network by depot (:mod:`planner.optimize.depots`), has the mode's
depot solver plan each depot on the run's executor (swap: :mod:`planner.optimize.swap`,
top-up: :mod:`planner.optimize.topup`) and puts the depots back together.
"""
from __future__ import annotations

import time
from collections.abc import Callable

from planner.executor import Executor
from planner.optimize import swap, topup
from planner.optimize.depots import network_result, run_depots
from planner.optimize.master import solver_label
from planner.optimize.problem import PlanningProblem, PlanResult

GAP_TOLERANCE = swap.GAP_TOLERANCE


def solve_plan(problem: PlanningProblem, *, time_limit_s: float = 60.0, solver: str = "highs",
               gap_tolerance: float = GAP_TOLERANCE, exact: bool | None = None,
               executor: Executor | None = None,
               progress: Callable[[int, int], None] | None = None) -> PlanResult:
    """Plan visits and loads for every terminal of ``problem``.

    ``solver``: ``"highs"`` (CBC when HiGHS is not installed) or ``"cbc"``. ``exact``: prove
    optimality to ~1e-9 instead of ``gap_tolerance`` (default: on for ≤ 20 terminals).
    ``executor``: where the depots run (:mod:`planner.executor`; default: this process).
    ``progress(terminals_done, terminals)`` is called as each depot's plan is ready.
    The result's objective is the simulated expected cost of the plan; never raises for an
    unreachable service target (the notes say why per terminal).
    """
    started = time.perf_counter()
    if exact is None:
        exact = problem.shape[0] <= 20
    if problem.mode == "swap":
        mode, share, label = swap, 0.9, solver_label(solver)
    else:
        mode, share, label = topup, 0.85, f"{solver_label(solver)}; {topup.SOLVER_NOTE}"
    tasks, plans, workers = run_depots(
        problem, mode.plan_depot, time_limit_s=time_limit_s, share=share, solver=solver,
        gap_tolerance=gap_tolerance, exact=exact, executor=executor,
        min_parallel=mode.MIN_PARALLEL, progress=progress)
    return network_result(problem, tasks, plans, workers=workers, solver=label,
                          started=started, gap_tolerance=gap_tolerance, exact=exact)
