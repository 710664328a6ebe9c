"""Baseline routines: the simple rules a bank runs today, priced by the same accounting.

Each routine is a function ``(problem) -> (visits [T, D] bool, loads [T, D])`` on a
:class:`planner.optimize.PlanningProblem` (further settings are keyword arguments; bind them
with :func:`functools.partial`). All routines

- plan visits only on allowed days (``problem.allowed``: visit days, lock days, days without
  crews) and keep every committed visit with its committed load;
- load whole bundles, never more than the limit (top-up: never more than fits by the routine's
  own estimate of the balance);
- do **not** respect crew limits across terminals — a routine run by hand seldom does. Use
  :func:`crew_overruns` to see where they would need more crews than the depot has.

The routines see demand only through an estimate ``daily_demand`` ``[T, D]`` (currency per
day): by default the mean of the problem's demand paths; the rolling backtest passes the
trailing weekday means of the history (:func:`trailing_weekday_mean`), which is what such a
routine uses in practice. They project the expected balance forward with that estimate.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from planner.scenario import WEEKDAYS


DEFAULT_WEEKDAYS = (0, 3)       # Mon and Thu
DEFAULT_TRIGGER_DAYS = 3.0      # days of cover below which the routine calls a visit
DEFAULT_COVER_DAYS = 7.0        # days a visit loads for ...
DEFAULT_SAFETY = 0.25           # ... plus this share on top


def _estimate(problem, daily_demand: np.ndarray | None) -> np.ndarray:
    if daily_demand is None:
        return problem.demand.mean(axis=1)
    return np.broadcast_to(np.asarray(daily_demand, dtype=float), problem.allowed.shape)


def _whole_bundles_down(amount: np.ndarray, bundle: np.ndarray) -> np.ndarray:
    return np.floor(np.maximum(amount, 0.0) / bundle + 1e-9) * bundle


def _whole_bundles_up(amount: np.ndarray, bundle: np.ndarray) -> np.ndarray:
    return np.ceil(np.maximum(amount, 0.0) / bundle - 1e-9) * bundle


def _next_allowed(allowed: np.ndarray) -> np.ndarray:
    """``[T, D]`` index of the first allowed day on or after each day (D when none)."""
    t_count, d_count = allowed.shape
    out = np.full((t_count, d_count + 1), d_count)
    for d in range(d_count - 1, -1, -1):
        out[:, d] = np.where(allowed[:, d], d, out[:, d + 1])
    return out[:, :d_count]


def _run(problem, estimate: np.ndarray, wants_visit, level_after) -> tuple[np.ndarray,
                                                                          np.ndarray]:
    """Walk the days with the expected balance: ``wants_visit(d, balance) -> [T] bool``,
    ``level_after(d, balance) -> [T]`` the wanted balance after a free visit."""
    t_count, d_count = problem.allowed.shape
    committed = problem.committed
    visits = np.zeros((t_count, d_count), bool)
    loads = np.zeros((t_count, d_count))
    balance = problem.start_balance.astype(float).copy()
    limit, bundle = problem.limit, problem.bundle
    top = _whole_bundles_down(limit, bundle)
    for d in range(d_count):
        free = problem.allowed[:, d] & ~committed[:, d] & wants_visit(d, balance)
        want = np.minimum(level_after(d, balance), limit)
        if problem.mode == "swap":
            load = np.minimum(_whole_bundles_up(want, bundle), top)
        else:
            room = _whole_bundles_down(limit - balance, bundle)
            load = np.minimum(_whole_bundles_up(want - balance, bundle), room)
        load = np.where(committed[:, d], problem.fixed_load[:, d], np.where(free, load, 0.0))
        visit = free | committed[:, d]
        visits[:, d] = visit
        loads[:, d] = load
        if problem.mode == "swap":
            balance = np.where(visit, load, balance)
        else:
            balance = np.where(visit, np.minimum(balance + load, limit), balance)
        balance = np.maximum(balance - estimate[:, d], 0.0)
    return visits, loads


def fixed_weekdays(problem, *, weekdays: tuple[int, ...] = DEFAULT_WEEKDAYS,
                   daily_demand: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Visit on fixed weekdays (0 = Mon; default Mon and Thu) and fill to the limit.

    A weekday not allowed for a terminal (visit days, lock days, no crew) moves to its next
    allowed day; two visits moved onto one day make one visit. Swap loads the limit; top-up
    loads what fits by the expected balance (whole bundles). Committed visits are kept.
    Crew limits are not respected (see :func:`crew_overruns`).
    """
    wanted = np.isin(problem.dates.day_of_week.to_numpy(), list(weekdays))
    t_count, d_count = problem.allowed.shape
    target = _next_allowed(problem.allowed)[:, wanted]              # [T, wanted days]
    planned = np.zeros((t_count, d_count + 1), bool)
    rows = np.repeat(np.arange(t_count), target.shape[1])
    planned[rows, target.ravel()] = True
    planned = planned[:, :d_count]
    return _run(problem, _estimate(problem, daily_demand),
                wants_visit=lambda d, balance: planned[:, d],
                level_after=lambda d, balance: problem.limit.astype(float))


def days_of_cover(problem, *, trigger_days: float = DEFAULT_TRIGGER_DAYS,
                  cover_days: float = DEFAULT_COVER_DAYS, safety: float = DEFAULT_SAFETY,
                  daily_demand: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Visit when the expected balance falls below ``trigger_days`` days of expected demand,
    and load for ``cover_days`` days plus ``safety`` (a share) on top.

    Defaults: 3 days, 7 days, 25 %. On an allowed day the routine calls a visit when the
    expected balance before the visit is below the expected demand of the next
    ``max(trigger_days, days until the next allowed day)`` days (so a machine never waits for
    a visit day it cannot reach). The load brings the balance to ``(1 + safety)`` × the
    expected demand of the next ``cover_days`` days, in whole bundles, at most the limit.
    Committed visits are kept. Crew limits are not respected (see :func:`crew_overruns`).
    """
    estimate = _estimate(problem, daily_demand)
    t_count, d_count = estimate.shape
    # cumulative expected demand, continued past the last day with the last week's pattern
    reach = int(np.ceil(max(trigger_days, cover_days))) + 7
    extra = np.concatenate([estimate[:, -7:]] * (reach // 7 + 1), axis=1)[:, :reach] \
        if d_count >= 7 else np.repeat(estimate.mean(axis=1, keepdims=True), reach, axis=1)
    cum = np.concatenate([np.zeros((t_count, 1)), np.cumsum(
        np.concatenate([estimate, extra], axis=1), axis=1)], axis=1)
    nxt = _next_allowed(np.concatenate([problem.allowed[:, 1:],
                                        np.ones((t_count, 1), bool)], axis=1)) + 1
    rows = np.arange(t_count)

    def demand_over(d: int, days: np.ndarray) -> np.ndarray:
        whole = np.floor(days).astype(int)
        part = days - whole
        upto = cum[rows, d + whole]
        return upto + part * (cum[rows, d + whole + 1] - upto) - cum[:, d]

    def wants_visit(d: int, balance: np.ndarray) -> np.ndarray:
        gap = (nxt[:, d] - d).astype(float)
        return balance < demand_over(d, np.maximum(trigger_days, gap))

    def level_after(d: int, balance: np.ndarray) -> np.ndarray:
        return (1.0 + safety) * demand_over(d, np.full(t_count, float(cover_days)))

    return _run(problem, estimate, wants_visit, level_after)


def past_visits(problem, visits: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """The user's own visits (frame ``terminal_id, date, load`` as read by
    :func:`planner.scenario.read_past_visits`) on the problem's days, priced as they were done.

    Rows for other terminals or days are ignored; committed visits of the problem are kept.
    The recorded visits are taken as they were — also on days outside the terminal's visit
    days and regardless of crews — so on such days this routine is not held to the rules the
    perfect-foresight bound keeps (its ratio to the bound may then fall below 1).
    """
    t_count, d_count = problem.allowed.shape
    out_visits = problem.committed.copy()
    out_loads = np.where(problem.committed, problem.fixed_load, 0.0)
    row = {tid: i for i, tid in enumerate(problem.terminal_ids)}
    day = {pd.Timestamp(d): j for j, d in enumerate(problem.dates)}
    for tid, date, load in zip(visits["terminal_id"], visits["date"], visits["load"]):
        i, j = row.get(tid), day.get(pd.Timestamp(date))
        if i is None or j is None or problem.committed[i, j]:
            continue
        out_visits[i, j] = True
        out_loads[i, j] = float(load)
    return out_visits, out_loads


def crew_overruns(problem, visits: np.ndarray) -> pd.DataFrame:
    """Depot days on which ``visits`` ``[T, D]`` need more crews than the depot has.

    Columns ``depot, date, visits, crew_limit, over`` (one row per depot and day over its
    limit; empty when none).
    """
    k_count, d_count = problem.crew_limit.shape
    used = np.zeros((k_count, d_count), int)
    np.add.at(used, problem.depot_of, np.asarray(visits, bool).astype(int))
    over = used - problem.crew_limit
    k, d = np.nonzero(over > 0)
    return pd.DataFrame({"depot": [problem.depots[i] for i in k],
                         "date": problem.dates[d] if len(d) else pd.DatetimeIndex([]),
                         "visits": used[k, d], "crew_limit": problem.crew_limit[k, d],
                         "over": over[k, d]})


def trailing_weekday_mean(daily: pd.DataFrame, terminal_ids, dates: pd.DatetimeIndex, *,
                          weeks: int = 4, column: str = "demand") -> np.ndarray:
    """``[T, D]`` the mean demand of each weekday over the last ``weeks`` weeks before
    ``dates[0]``, laid on ``dates`` (currency per day).

    ``daily`` is a long frame ``terminal_id, date, <column>`` (e.g. ``CleanHistory.daily``).
    A weekday without data takes the terminal's mean over the window; a terminal without data
    takes 0.
    """
    dates = pd.DatetimeIndex(dates)
    first = dates[0] - pd.Timedelta(days=7 * weeks)
    window = daily[(daily["date"] >= first) & (daily["date"] < dates[0])]
    window = window[window[column].notna()]
    weekday = window["date"].dt.day_of_week
    table = window.groupby([window["terminal_id"], weekday])[column].mean().unstack()
    table = table.reindex(index=list(terminal_ids), columns=range(7))
    overall = window.groupby("terminal_id")[column].mean().reindex(list(terminal_ids))
    table = table.T.fillna(overall).T.fillna(0.0)
    return table.to_numpy(dtype=float)[:, dates.day_of_week.to_numpy()]


ROUTINES = {
    "fixed_weekdays": fixed_weekdays,
    "days_of_cover": days_of_cover,
}
# how the run names the routines with their default settings (the plan's routine table, the
# replay, the report)
ROUTINE_LABELS = {
    "fixed_weekdays": "fixed weekdays Mon+Thu, filled to the limit",
    "days_of_cover": "days of cover (3-day trigger, 7 days + 25 %)",
}
