"""Perfect-foresight bound: the least cost any plan could reach if demand were known.

For every terminal and every demand path the bound solves a dynamic programme over visit days
in the manner of Wagner & Whitin (1958, "Dynamic version of the economic lot size model"): a
plan is a sequence of cycles, each starting with a visit on day ``a`` and lasting until the next
visit on day ``b`` (or the end of the days planned). The accounting of :mod:`planner.costs`
separates by cycle when the load ``L`` of the visit is known (``C(a, t)`` = demand of days
``a … t``):

- end balance on day ``t`` = ``max(L − C(a, t), 0)``, carry on it;
- dry on day ``t`` iff ``C(a, t) > L`` and ``demand[t] > 0``;
- shortfall over the cycle = ``max(C(a, b − 1) − L, 0)``;
- left in the machine at the next visit = ``max(L − C(a, b − 1), 0)``;
- the visit fee of day ``a`` and handling on ``L``.

Per cycle the cost is piecewise linear in ``L`` between the cumulative demands ``C(a, t)``
(plus a step at each of them), so its least value over whole bundles lies at a bundle multiple
next to one of these points, at 0 or at the limit: the programme tries exactly those loads.

What the programme respects: the limit, whole bundles, allowed days (so lock days and days
without crews), committed visits (kept on their day; with swap also with their load), visit fees
of the day, handling, carry, dry days and shortfall (a dry day is allowed whenever it is cheaper
than a visit, and unavoidable when demand exceeds the limit). It ignores crew limits across
terminals and the service target — both only restrict a plan, so dropping them keeps a bound.

- **swap**: exact. The programme's value is the least cost of any visit sequence on that path
  (:func:`perfect_foresight` can return the plans that reach it; simulating them with
  :func:`planner.costs.simulate` gives the same cost).
- **top-up**: a lower bound, not always reached. A top-up visit with load ``x`` on balance
  ``β`` is paid handling on ``x`` plus any excess, which is never less than
  ``handling · (level after the visit − β)``; the programme charges exactly that, lets the
  level be any amount in ``[0, limit]`` (not only ``β`` + whole bundles), and does not forbid a
  level below ``β``; a committed top-up visit is charged handling on its committed load, its
  level being free as well. Every top-up plan is therefore priced at or above its true cost,
  so the value is ≤ the cost of every plan; it is reached when the optimal levels happen to be
  reachable by whole bundles without taking cash out of the machine. Against brute force on
  small random instances with coarse bundles it was reached on about two paths in three; it is
  loosest when a machine holds more cash than it needs (the relaxation may take it out for
  free) and around committed top-up visits.

Optional ``anyday_fee``: visits are also allowed on every other day at this fee (and at the
lower of the two fees on allowed days). The rolling backtest uses it with the emergency-visit
fee, so the bound stays below policies that call emergency visits on any day.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.costs import CostRates


@dataclass(frozen=True)
class PerfectForesight:
    """The perfect-foresight bound of a planning problem.

    ``cost`` ``[terminal, path]``: least cost over all days (currency) if that path's demand
    were known. ``exact`` is True for swap (the value is attained), False for top-up (a lower
    bound). ``visits`` / ``loads`` ``[terminal, path, day]`` are the plans reaching the value
    (swap) or the relaxed levels (top-up: the balance after each visit), only when asked for.
    """

    cost: np.ndarray
    exact: bool
    visits: np.ndarray | None = None
    loads: np.ndarray | None = None

    def expected_cost(self) -> np.ndarray:
        """``[terminal]`` mean over paths (currency)."""
        return self.cost.mean(axis=1)

    def network_cost(self) -> np.ndarray:
        """``[path]`` cost summed over terminals (currency)."""
        return self.cost.sum(axis=0)


def perfect_foresight(problem, *, anyday_fee: float | None = None,
                      plans: bool = False) -> PerfectForesight:
    """Perfect-foresight bound of a :class:`planner.optimize.PlanningProblem`, per terminal and
    path, over all its days (horizon + tail), with the problem's own demand paths.

    ``anyday_fee``: also allow a visit on any day at this fee (see the module text).
    ``plans=True`` also returns the visit days and loads reaching the bound.
    """
    return perfect_foresight_arrays(
        demand=problem.demand, start_balance=problem.start_balance, limit=problem.limit,
        bundle=problem.bundle, allowed=problem.allowed, fixed_load=problem.fixed_load,
        visit_fee=problem.visit_fee, rates=problem.rates, mode=problem.mode,
        anyday_fee=anyday_fee, plans=plans)


def perfect_foresight_arrays(*, demand: np.ndarray, start_balance: np.ndarray,
                             limit: np.ndarray, bundle: np.ndarray, allowed: np.ndarray,
                             fixed_load: np.ndarray, visit_fee: np.ndarray, rates: CostRates,
                             mode: str, anyday_fee: float | None = None,
                             plans: bool = False) -> PerfectForesight:
    """The bound from arrays: ``demand`` ``[T, P, D]``, ``start_balance``, ``limit``,
    ``bundle`` ``[T]``, ``allowed``, ``fixed_load`` (NaN = free), ``visit_fee`` ``[T, D]``."""
    demand = np.asarray(demand, dtype=float)
    t_count, p_count, d_count = demand.shape
    cost = np.empty((t_count, p_count))
    visits = np.zeros(demand.shape, bool) if plans else None
    loads = np.zeros(demand.shape) if plans else None
    for t in range(t_count):
        fixed = np.asarray(fixed_load[t], dtype=float)
        can = np.asarray(allowed[t], bool) | ~np.isnan(fixed)
        fee = np.asarray(visit_fee[t], dtype=float).copy()
        if anyday_fee is not None:
            fee = np.where(can, np.minimum(fee, anyday_fee), anyday_fee)
            can = np.ones(d_count, bool)
        out = _terminal_bound(demand[t], float(start_balance[t]), float(limit[t]),
                              float(bundle[t]), can, fixed, fee, rates, mode, plans)
        cost[t] = out[0]
        if plans:
            visits[t], loads[t] = out[1], out[2]
    return PerfectForesight(cost=cost, exact=mode == "swap", visits=visits, loads=loads)


def _segment(demand: np.ndarray, levels: np.ndarray, rates: CostRates,
             return_sign: float) -> np.ndarray:
    """Cost of a cycle starting with balance ``levels`` ``[P, K]`` on the first day of
    ``demand`` ``[P, n]``, for every length ``m = 1 … n``: ``[P, K, n]`` (index ``m − 1``).

    Carry, dry days, shortfall, and ``return_sign`` × handling on what is left at the next
    visit (charged only when a next visit follows, i.e. not for the cycle reaching the last day;
    the caller drops that term for ``m = n`` when the cycle ends the days planned).
    """
    cum = np.cumsum(demand, axis=1)[:, None, :]                    # [P, 1, n]
    lev = levels[:, :, None]                                        # [P, K, 1]
    left = np.maximum(lev - cum, 0.0)                               # end balance [P, K, n]
    dry = (cum > lev) & (demand[:, None, :] > 0)
    cost = (rates.carry_rate_daily * np.cumsum(left, axis=2)
            + rates.dry_day_penalty * np.cumsum(dry, axis=2)
            + rates.shortfall_penalty_per_1000 / 1000.0 * np.maximum(cum - lev, 0.0))
    return cost, return_sign * rates.handling_per_1000 / 1000.0 * left


def _candidates(cum: np.ndarray, limit: float, bundle: float, mode: str) -> np.ndarray:
    """Loads worth trying for a cycle (``cum`` ``[P, n]`` cumulative demand): ``[P, K]``."""
    p_count = cum.shape[0]
    ends = np.column_stack([np.zeros(p_count), np.full(p_count, limit)])
    if mode == "swap":
        top = np.floor(limit / bundle + 1e-9) * bundle
        ends[:, 1] = top
        near = np.concatenate([np.floor(cum / bundle + 1e-9) * bundle,
                               np.ceil(cum / bundle - 1e-9) * bundle], axis=1)
        return np.clip(np.concatenate([ends, near], axis=1), 0.0, top)
    return np.clip(np.concatenate([ends, cum], axis=1), 0.0, limit)


def _terminal_bound(demand: np.ndarray, start: float, limit: float, bundle: float,
                    can: np.ndarray, fixed: np.ndarray, fee: np.ndarray, rates: CostRates,
                    mode: str, plans: bool):
    """Dynamic programme for one terminal, vectorised over paths (``demand`` ``[P, D]``)."""
    p_count, d_count = demand.shape
    handling = rates.handling_per_1000 / 1000.0
    # with swap what is left is handled when it returns; with top-up it saves loading it
    sign = 1.0 if mode == "swap" else -1.0
    must = ~np.isnan(fixed)
    must_days = np.flatnonzero(must)
    # what is left at the next visit is handled (swap) or saves loading (top-up); before a
    # committed top-up visit the load is given, so nothing is saved: its handling is charged
    # on the committed load instead, which is never more than it costs
    credit = np.ones(d_count + 1)
    credit[d_count] = 0.0
    if mode != "swap":
        credit[:d_count][must] = 0.0
    # reach[a]: the last day a cycle starting on day a (or the start, a = -1) may end before
    # the next visit; a committed visit must not be skipped
    def next_must(after: int) -> int:
        later = must_days[must_days > after]
        return int(later[0]) if later.size else d_count

    # best[:, b]: least cost of days 0 … b − 1 when a visit takes place on day b (b = D: end)
    best = np.full((p_count, d_count + 1), np.inf)
    came_from = np.full((p_count, d_count + 1), -2, dtype=int)     # -1: from the start
    level_at = np.zeros((p_count, d_count + 1))                    # load of the cycle ending at b

    # the start: balance `start`, no visit until day b
    stop = next_must(-1)
    seg, left = _segment(demand, np.full((p_count, 1), start), rates, sign)
    best[:, 0] = sign * handling * start * credit[0]
    came_from[:, 0] = -1
    ends = np.arange(1, stop + 1)                                   # b = 1 … stop
    if ends.size:
        value = seg[:, 0, ends - 1] + credit[ends] * left[:, 0, ends - 1]
        best[:, ends] = value
        came_from[:, ends] = -1

    for a in range(d_count):
        if not can[a]:
            continue
        stop = next_must(a)
        sub = demand[:, a:]
        if must[a] and mode == "swap":
            levels = np.full((p_count, 1), fixed[a])
        else:
            levels = _candidates(np.cumsum(sub, axis=1), limit, bundle, mode)
        loaded = np.full_like(levels, fixed[a]) if must[a] else levels
        seg, left = _segment(sub, levels, rates, sign)
        ends = np.arange(a + 1, stop + 1)                           # next visit (or end) b
        m = ends - a - 1
        value = (seg[:, :, m] + credit[ends] * left[:, :, m]
                 + handling * loaded[:, :, None])                  # [P, K, len(ends)]
        pick = np.argmin(value, axis=1)                             # [P, len(ends)]
        cycle = np.take_along_axis(value, pick[:, None, :], axis=1)[:, 0, :] + fee[a]
        total = best[:, a][:, None] + cycle
        better = total < best[:, ends]
        best[:, ends] = np.where(better, total, best[:, ends])
        came_from[:, ends] = np.where(better, a, came_from[:, ends])
        chosen = np.take_along_axis(levels, pick, axis=1)
        level_at[:, ends] = np.where(better, chosen, level_at[:, ends])

    if not plans:
        return best[:, d_count], None, None
    visits = np.zeros((p_count, d_count), bool)
    loads = np.zeros((p_count, d_count))
    # walking back the cycles is per path; only asked for in checks and explanations
    for p in range(p_count):
        b = d_count
        while b > 0 and came_from[p, b] >= 0:
            a = int(came_from[p, b])
            visits[p, a] = True
            loads[p, a] = level_at[p, b]
            b = a
    return best[:, d_count], visits, loads
