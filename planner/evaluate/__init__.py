"""Evaluation of plans, all priced by the one accounting (:func:`planner.costs.simulate`).

- :mod:`planner.evaluate.simulate` — out-of-sample check of a plan on fresh demand paths.
- :mod:`planner.evaluate.baselines` — baseline routines (fixed weekdays, days of cover, past
  visits) as ``(problem) -> (visits, loads)``.
- :mod:`planner.evaluate.bound` — the perfect-foresight bound (Wagner–Whitin style programme).
- :mod:`planner.evaluate.replay` — rolling backtest of the planner and the baselines on the
  recorded history.
"""
from __future__ import annotations

from planner.evaluate.baselines import (crew_overruns, days_of_cover, fixed_weekdays,
                                        past_visits, trailing_weekday_mean)
from planner.evaluate.bound import PerfectForesight, perfect_foresight
from planner.evaluate.simulate import (OutOfSampleCheck, check_plan, fresh_seed,
                                       out_of_sample_check, plan_ledger)

__all__ = ["OutOfSampleCheck", "check_plan", "fresh_seed", "out_of_sample_check", "plan_ledger",
           "fixed_weekdays", "days_of_cover", "past_visits",
           "crew_overruns", "trailing_weekday_mean", "PerfectForesight", "perfect_foresight",
           "BacktestResult", "backtest_scenario", "write_backtest"]


def __getattr__(name: str):
    # the replay pulls in the forecast and the solver; load it on first use only
    if name in ("BacktestResult", "backtest_scenario", "write_backtest"):
        from planner.evaluate import replay

        return getattr(replay, name)
    raise AttributeError(f"module 'planner.evaluate' has no attribute {name!r}")
