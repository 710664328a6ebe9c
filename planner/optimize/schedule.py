"""The schedule's entry point: one call for either replenishment mode."""
from __future__ import annotations

from collections.abc import Callable

from planner.optimize.network import GAP_TOLERANCE, solve_swap
from planner.optimize.problem import PlanningProblem, PlanResult
from planner.optimize.topup import solve_topup


def solve_plan(problem: PlanningProblem, *, time_limit_s: float = 60.0, solver: str = "highs",
               gap_tolerance: float = GAP_TOLERANCE, exact: bool | None = None,
               jobs: int | None = None,
               progress: Callable[[int, int], None] | None = None) -> PlanResult:
    """Plan visits and loads for every terminal of ``problem``: swap by the decomposition of
    :mod:`planner.optimize.network`, top-up by :mod:`planner.optimize.topup`.

    ``solver``: ``"highs"`` (CBC when HiGHS is not installed) or ``"cbc"``. ``exact``: prove
    optimality to ~1e-9 instead of ``gap_tolerance`` (default: on for ≤ 20 terminals).
    ``jobs``: worker processes for the depots (default: the CPUs, at most the depots).
    ``progress(terminals_done, terminals)`` is called as each depot's plan is ready.
    The result's objective is the simulated expected cost of the plan; never raises for an
    unreachable service target (the notes say why per terminal).
    """
    if exact is None:
        exact = problem.shape[0] <= 20
    solve = solve_swap if problem.mode == "swap" else solve_topup
    return solve(problem, time_limit_s=time_limit_s, solver=solver,
                 gap_tolerance=gap_tolerance, exact=exact, jobs=jobs, progress=progress)
