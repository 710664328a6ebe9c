"""The schedule: visit days and loads per terminal under crew limits (DESIGN §5).

- :mod:`planner.optimize.problem` — :class:`PlanningProblem`, :class:`PlanResult`,
  :func:`build_problem` and the rules every solver shares.
- :mod:`planner.optimize.network` — :func:`solve_plan`, the decomposition by depot and terminal.
- :mod:`planner.optimize.frames` — :func:`plan_frame` and :func:`orders_frame` for the run folder.
"""
from __future__ import annotations

from planner.optimize.problem import PlanningProblem, PlanResult, build_problem

__all__ = ["PlanningProblem", "PlanResult", "build_problem", "solve_plan", "plan_frame",
           "orders_frame"]


def __getattr__(name: str):
    # the solver pulls in PuLP; load it on first use only
    if name == "solve_plan":
        from planner.optimize.network import solve_plan

        return solve_plan
    if name in ("plan_frame", "orders_frame"):
        from planner.optimize import frames

        return getattr(frames, name)
    raise AttributeError(f"module 'planner.optimize' has no attribute {name!r}")
