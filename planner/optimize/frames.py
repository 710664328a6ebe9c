"""The plan as tables for the run folder: one row per visit, and cash per depot and day."""
from __future__ import annotations

import numpy as np
import pandas as pd

from planner.optimize.problem import (WEEKDAY_NAMES, PlanningProblem, PlanResult,
                                      next_visits, target_dry_paths)



def plan_frame(problem: PlanningProblem, result: PlanResult) -> pd.DataFrame:
    """One row per visit within the horizon, by terminal and date.

    Columns: ``terminal_id``, ``depot``, ``date``, ``load`` (currency), ``expected_residual``
    (mean residual (swap) or excess (top-up) returned at this visit), ``dry_probability``
    (share of paths with a dry day from this visit until the next one, or the plan's end),
    ``reason`` (plain words).
    """
    ledger = result.ledger
    horizon = problem.horizon_days
    d_count = problem.shape[2]
    target = target_dry_paths(problem) / problem.shape[1]
    nxt = next_visits(result.visits)
    rows = []
    for t, d in zip(*np.nonzero(result.visits[:, :horizon])):
        end = int(nxt[t, d])
        dry = float(ledger.dry[t, :, d:end].any(axis=1).mean())
        until = (f"{WEEKDAY_NAMES[problem.dates[end].weekday()]} "
                 f"{problem.dates[end]:%d %b}" if end < d_count else "the end of the plan")
        if problem.committed[t, d]:
            reason = "committed"
        elif dry <= target + 1e-12:
            reason = f"keeps dry risk under target until {until}"
        else:
            reason = f"least dry risk reachable ({dry:.1%}) until {until}"
        rows.append({
            "terminal_id": problem.terminal_ids[t],
            "depot": problem.depots[problem.depot_of[t]],
            "date": problem.dates[d],
            "load": float(result.loads[t, d]),
            "expected_residual": float(ledger.returned[t, :, d].mean()),
            "dry_probability": dry,
            "reason": reason,
        })
    columns = ["terminal_id", "depot", "date", "load", "expected_residual", "dry_probability",
               "reason"]
    frame = pd.DataFrame(rows, columns=columns)
    if frame.empty:
        frame["date"] = pd.to_datetime(frame["date"])
        return frame
    return frame.sort_values(["terminal_id", "date"], ignore_index=True)


def orders_frame(problem: PlanningProblem, result: PlanResult) -> pd.DataFrame:
    """Cash per depot and day within the horizon: ``depot``, ``date``, ``visits``,
    ``load_total`` (cash to prepare), ``expected_returns`` (mean residual or excess coming
    back). Days without visits are listed with zeros."""
    horizon = problem.horizon_days
    k_count = len(problem.depots)
    visits = result.visits[:, :horizon]
    loads = np.where(visits, result.loads[:, :horizon], 0.0)
    returns = np.where(visits, result.ledger.returned[:, :, :horizon].mean(axis=1), 0.0)
    count = np.zeros((k_count, horizon), dtype=int)
    total = np.zeros((k_count, horizon))
    back = np.zeros((k_count, horizon))
    np.add.at(count, problem.depot_of, visits.astype(int))
    np.add.at(total, problem.depot_of, loads)
    np.add.at(back, problem.depot_of, returns)
    return pd.DataFrame({
        "depot": np.repeat(np.array(problem.depots, dtype=object), horizon),
        "date": np.tile(problem.dates[:horizon].to_numpy(), k_count),
        "visits": count.ravel(),
        "load_total": total.ravel(),
        "expected_returns": back.ravel(),
    })
