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
(plus a step at each of them), so its least value lies at an end of one of these pieces: the
programme tries exactly those loads (whole bundles with swap), for every end of the cycle at
once (:func:`_terminal_bound`), so the work per terminal and path grows with the square of the
days. It is compiled with numba.

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

import math
from dataclasses import dataclass
from functools import cache

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
    ``bundle`` ``[T]``, ``allowed``, ``fixed_load`` (NaN = free), ``visit_fee`` ``[T, D]``.

    Compiled with numba (:func:`_terminal_bound`, on first use); the work per terminal and path grows with
    the square of the days."""
    demand = np.asarray(demand, dtype=float)
    t_count, p_count, d_count = demand.shape
    fixed = np.asarray(fixed_load, dtype=float).reshape(t_count, d_count)
    can = np.asarray(allowed, bool).reshape(t_count, d_count) | ~np.isnan(fixed)
    fee = np.broadcast_to(np.asarray(visit_fee, dtype=float), (t_count, d_count)).copy()
    if anyday_fee is not None:
        fee = np.where(can, np.minimum(fee, anyday_fee), anyday_fee)
        can = np.ones((t_count, d_count), bool)
    limit = np.broadcast_to(np.asarray(limit, dtype=float).reshape(-1), (t_count,))
    bundle = np.broadcast_to(np.asarray(bundle, dtype=float).reshape(-1), (t_count,))
    start = np.broadcast_to(np.asarray(start_balance, dtype=float).reshape(-1), (t_count,))
    # swap loads are whole bundles up to the limit; top-up levels are any amount up to it
    cap = np.floor(limit / bundle + 1e-9) * bundle if mode == "swap" else limit
    cost = np.empty((t_count, p_count))
    visits = np.zeros(demand.shape, bool) if plans else None
    loads = np.zeros(demand.shape) if plans else None
    rows = p_count if plans else 0          # the cycles are kept only when plans are asked for
    came_from = np.empty((rows, d_count + 1), np.int64)
    level_at = np.empty((rows, d_count + 1))
    h = rates.handling_per_1000 / 1000.0
    short = rates.shortfall_penalty_per_1000 / 1000.0
    kernel = _compiled()
    for t in range(t_count):
        kernel(demand[t], float(start[t]), float(cap[t]), float(bundle[t]), can[t], fixed[t],
               fee[t], h, float(rates.carry_rate_daily), float(rates.dry_day_penalty), short,
               mode == "swap", plans, cost[t], came_from, level_at)
        if plans:
            _walk_back(came_from, level_at, visits[t], loads[t])
    return PerfectForesight(cost=cost, exact=mode == "swap", visits=visits, loads=loads)


@cache
def _compiled():
    """:func:`_terminal_bound` compiled by numba (on first use; the machine code is cached on
    disk, so later processes load it)."""
    from numba import njit

    return njit(cache=True)(_terminal_bound)


def _terminal_bound(demand, start, cap, bundle, can, fixed, fee, h, carry, dry_cost, short,
                    swap, plans, out, came_from, level_at):
    """The dynamic programme of one terminal, path by path (``demand`` ``[P, D]``); writes the
    least cost per path into ``out`` and, with ``plans``, the cycles into ``came_from`` /
    ``level_at`` ``[P, D + 1]`` (see :func:`_walk_back`).

    ``best[b]`` is the least cost of days ``0 … b − 1`` when a visit takes place on day ``b``
    (``b = D``: the end). A cycle starts with level ``L`` on day ``a`` (a visit, or the start
    balance for the cycle before the first visit) and lasts ``m`` days. With the cumulative
    demand ``c_k`` of its days (non-decreasing), the days ``k`` with ``c_k ≤ L`` are a prefix
    of ``j(L)`` days: the machine holds cash on those days and is empty afterwards. So with
    ``S_j = c_0 + … + c_{j−1}`` and ``N_j`` the days with demand among the first ``j``:

    - covered (``L ≥ c_{m−1}``): cost = fee + handling on the load + carry · (m·L − S_m)
      ± handling on the ``L − c_{m−1}`` left at the next visit;
    - run dry (``L < c_{m−1}``): cost = ``G(L) + H(m)`` with ``G(L)`` = fee + handling on the
      load + carry · (j·L − S_j) − shortfall · L − dry · N_j and ``H(m)`` = dry · N_m +
      shortfall · c_{m−1}, so the best ``L`` for every ``m`` is a running minimum of ``G``
      over the groups ``j = 0, 1, …, m − 1``.

    Within a group (``c_{j−1} ≤ L < c_j``) and in the covered case the cost is linear in
    ``L``, so only the ends of each interval of allowed levels are tried: whole bundles up to
    ``cap`` with swap, any amount up to ``cap`` with top-up. The work per path is
    proportional to ``D²`` (cycle starts × ends).
    """
    p_count, d_count = demand.shape
    # what is left at the next visit is handled when it returns (swap) or saves loading it
    # (top-up); before a committed top-up visit the load is given, so nothing is saved: its
    # handling is charged on the committed load instead, which is never more than it costs
    sign = 1.0 if swap else -1.0
    credit = np.ones(d_count + 1)
    credit[d_count] = 0.0
    first_must = np.full(d_count + 1, d_count)      # the first committed day ≥ k
    for k in range(d_count - 1, -1, -1):
        committed = not math.isnan(fixed[k])
        if committed and not swap:
            credit[k] = 0.0
        first_must[k] = k if committed else first_must[k + 1]
    best = np.empty(d_count + 1)
    came = np.empty(d_count + 1, np.int64)
    level = np.empty(d_count + 1)
    for p in range(p_count):
        d = demand[p]
        best[:] = np.inf
        best[0] = sign * h * start * credit[0]          # a visit on day 0 returns the start
        came[:] = -2
        came[0] = -1
        level[:] = 0.0
        for a in range(-1, d_count):
            if a >= 0 and (not can[a] or best[a] == np.inf):
                continue
            a0 = 0 if a < 0 else a
            reach = first_must[a0 + 1] if a >= 0 else first_must[0]
            if a < 0:                                   # the start balance: no visit, no fee
                fixed_level, lv, const, on_load, base, top = True, start, 0.0, 0.0, 0.0, np.inf
            elif not math.isnan(fixed[a]):
                # a committed visit pays handling on its committed load; with swap the level
                # is that load, with top-up it is free (the relaxation of the module text)
                fixed_level = swap
                lv = fixed[a]
                const = fee[a] + h * fixed[a]
                on_load = 0.0
                base = best[a]
                top = np.inf if swap else cap
            else:
                fixed_level, lv, const, on_load, base, top = False, 0.0, fee[a], h, best[a], cap
            run_min = np.inf
            run_level = 0.0
            c_prev = 0.0
            s = 0.0                                     # S_k
            wet = 0.0                                   # N_k
            for k in range(reach - a0):
                ck = c_prev + d[a0 + k]
                # the group of k covered days: L in [c_prev, ck)
                if ck > c_prev:
                    slope = on_load + carry * k - short
                    g0 = const - carry * s - dry_cost * wet
                    if fixed_level:
                        lo = lv
                        hi = lv
                    elif swap:
                        # the least whole bundles ≥ c_prev, the greatest < ck
                        lo = math.ceil(c_prev / bundle - 1e-9) * bundle
                        if lo < c_prev:
                            lo += bundle
                        hi = math.ceil(ck / bundle - 1e-9) * bundle
                        if hi < ck:
                            hi += bundle
                        hi = min(hi - bundle, top)
                    else:
                        lo = c_prev
                        hi = top
                    if lo >= c_prev and lo < ck and lo <= top and lo >= 0.0:
                        g = g0 + slope * lo
                        if g < run_min:
                            run_min = g
                            run_level = lo
                    if hi >= c_prev and hi < ck and hi <= top and hi >= 0.0:
                        g = g0 + slope * hi
                        if g < run_min:
                            run_min = g
                            run_level = hi
                s += ck
                if d[a0 + k] > 0.0:
                    wet += 1.0
                b = a0 + k + 1
                cycle = run_min + dry_cost * wet + short * ck
                chosen = run_level
                # covered: the least and the greatest level that covers the k + 1 days
                back = sign * h * credit[b]
                slope = on_load + carry * (k + 1) + back
                lin = const - carry * s - back * ck
                if fixed_level:
                    l1 = lv
                elif swap:
                    l1 = math.ceil(ck / bundle - 1e-9) * bundle
                    if l1 < ck:
                        l1 += bundle
                else:
                    l1 = ck
                l2 = lv if fixed_level else top
                if l1 >= ck and l1 <= top and lin + slope * l1 < cycle:
                    cycle = lin + slope * l1
                    chosen = l1
                if l2 >= ck and l2 <= top and lin + slope * l2 < cycle:
                    cycle = lin + slope * l2
                    chosen = l2
                total = base + cycle
                if total < best[b]:
                    best[b] = total
                    came[b] = a
                    level[b] = chosen
                c_prev = ck
        out[p] = best[d_count]
        if plans:
            came_from[p] = came
            level_at[p] = level


def _walk_back(came_from: np.ndarray, level_at: np.ndarray, visits: np.ndarray,
               loads: np.ndarray) -> None:
    """Visits and loads ``[P, D]`` of the cycles that reach the bound on each path."""
    d_count = visits.shape[1]
    for p in range(visits.shape[0]):
        b = d_count
        while b > 0 and came_from[p, b] >= 0:
            a = int(came_from[p, b])
            visits[p, a] = True
            loads[p, a] = level_at[p, b]
            b = a
