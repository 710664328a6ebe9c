"""The schedule: visit days and loads per terminal under crew limits (README, "How a plan is made", step 5).

- :mod:`planner.optimize.problem` — :class:`PlanningProblem`, :class:`PlanResult`,
  :func:`build_problem` and the rules every solver shares.
- :mod:`planner.optimize.schedule` — :func:`solve_plan`, the one entry point for both modes.
- :mod:`planner.optimize.depots` — the depot runner: one task per depot on the run's executor,
  and the depots' plans put back together.
- :mod:`planner.optimize.master` — the master problem of a depot (one plan per terminal, crew
  limits, crew prices), shared by both modes.
- :mod:`planner.optimize.swap` — swap: column generation per depot over exact per-terminal
  plans.
- :mod:`planner.optimize.cycles` and :mod:`planner.optimize.terminal` — swap cycle costs for
  every load level; one terminal's cheapest plan at given day prices.
- :mod:`planner.optimize.topup` — the top-up mode.
- :mod:`planner.optimize.milp` — the small array model layer (HiGHS, PuLP/CBC).
- :mod:`planner.optimize.frames` — :func:`plan_frame` and :func:`orders_frame` for the run folder.
- :mod:`planner.optimize.monolithic` — the reference MILP for small instances.

Invented problems for tests and benchmarks: :mod:`planner.demo.synthetic`.
"""
from __future__ import annotations

from planner.optimize.problem import PlanningProblem, PlanResult, build_problem

__all__ = ["PlanningProblem", "PlanResult", "build_problem", "solve_plan", "plan_frame",
           "orders_frame"]


def __getattr__(name: str):
    # the solver pulls in PuLP; load it on first use only
    if name == "solve_plan":
        from planner.optimize.schedule import solve_plan

        return solve_plan
    if name in ("plan_frame", "orders_frame"):
        from planner.optimize import frames

        return getattr(frames, name)
    raise AttributeError(f"module 'planner.optimize' has no attribute {name!r}")
