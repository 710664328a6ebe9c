"""Swap mode, one terminal at a time: the cheapest visit days and loads at given day prices.

A plan of a terminal is a path through its days: from the start (balance ``start_balance``) to
a first visit, from visit to visit, and from the last visit to the end of the plan; each step
(``a → b`` with level ``k``) costs its cycle (:mod:`planner.optimize.cycles`) plus the visit fee
and the day price of ``a`` (the crew price of the network model). Committed visits cannot be
skipped and keep their load.

Service target: a limit per cycle (:class:`planner.optimize.problem.ServiceRule`), so it is
already in the candidate lists of each cycle, and the shortest path over the days (dynamic
programming in the manner of Wagner–Whitin, vectorised over terminals) is each terminal's exact
optimum at the day prices. With soft targets (crews too few for every target) a dry path above
a cycle's allowance is priced in the cycle's cost instead.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.optimize.cycles import Candidates, cycle_candidates
from planner.optimize.problem import PlanningProblem, ServiceRule, next_visits


@dataclass
class TerminalBatch:
    """Per-terminal data of some terminals of one problem, ready for pricing.

    ``prefix`` ``[T, D + 1, P]``: cumulative demand before each day (day-major, so one day's
    paths are contiguous). ``arc_ok`` ``[T, D, D + 1]``: a cycle from a visit on ``a`` to the
    next visit on ``b`` is possible (``a`` allowed, ``b`` allowed or the end, no committed
    visit skipped); ``initial_ok`` ``[T, D + 1]`` likewise for the first visit;
    ``initial_cost`` is ``inf`` where the first visit cannot be on ``b`` (soft targets: with
    the price of its excess dry paths, ``initial_excess``). ``candidates``: the levels worth
    considering per cycle (:mod:`planner.optimize.cycles`).
    """

    problem: PlanningProblem
    rule: ServiceRule
    candidates: Candidates
    prefix: np.ndarray
    arc_ok: np.ndarray
    initial_ok: np.ndarray
    initial_cost: np.ndarray
    initial_excess: np.ndarray
    soft_penalty: float | None = None


def prepare_batch(problem: PlanningProblem, rule: ServiceRule,
                  soft_penalty: float | None = None) -> TerminalBatch:
    """Candidate cycles of every terminal of ``problem`` (swap).

    ``soft_penalty``: when given, a cycle's allowance may be exceeded at this cost per extra
    dry path (used only when crew limits make the targets impossible together).
    """
    t_count, p_count, d_count = problem.demand.shape
    arc_ok, initial_ok = cycle_structure(problem)
    candidates = cycle_candidates(problem, rule, arc_ok, soft_penalty)
    # cumulative demand before each day, [terminal, day, path] so a day's paths are contiguous
    prefix = np.zeros((t_count, d_count + 1, p_count))
    np.cumsum(problem.demand.transpose(0, 2, 1), axis=1, out=prefix[:, 1:, :])
    ends = np.broadcast_to(np.arange(d_count + 1), (t_count, d_count + 1))
    allow = rule.allowance(np.zeros((t_count, d_count + 1), dtype=int), ends)
    initial_excess = np.maximum(candidates.initial_dry - allow, 0)
    initial_cost = np.where(initial_ok, candidates.initial, np.inf)
    if soft_penalty is None:
        initial_cost = np.where(initial_excess == 0, initial_cost, np.inf)
        initial_excess = np.zeros_like(initial_excess)
    else:
        initial_cost = initial_cost + soft_penalty * initial_excess
    return TerminalBatch(problem=problem, rule=rule, candidates=candidates, prefix=prefix,
                         arc_ok=arc_ok, initial_ok=initial_ok, initial_cost=initial_cost,
                         initial_excess=initial_excess, soft_penalty=soft_penalty)


def cycle_structure(problem: PlanningProblem) -> tuple[np.ndarray, np.ndarray]:
    """``(arc_ok [T, D, D + 1], initial_ok [T, D + 1])``: which cycles a plan may contain."""
    t_count, _, d_count = problem.demand.shape
    allowed = problem.allowed
    committed = problem.committed
    # committed visits strictly between a and b: count(< b) − count(≤ a)
    seen = np.zeros((t_count, d_count + 1), dtype=int)
    np.cumsum(committed, axis=1, out=seen[:, 1:])
    ends = np.concatenate([allowed, np.ones((t_count, 1), bool)], axis=1)
    a = np.arange(d_count)[:, None]
    b = np.arange(d_count + 1)[None, :]
    skipped = seen[:, None, :] - seen[:, 1:, None]          # seen[b] − seen[a + 1]
    arc_ok = (b > a)[None] & allowed[:, :, None] & ends[:, None, :] & (skipped == 0)
    initial_ok = ends & (seen == 0)
    return arc_ok, initial_ok


# --------------------------------------------------------------------------------------------
# Shortest paths over the days
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Plans:
    """Plans of a batch: ``visits`` ``[T, D]``, ``next_visit`` ``[T, D]`` (end of each visit's
    cycle, ``D`` = end of plan), ``levels`` ``[T, D]`` (bundles, −1 without a visit) and
    ``value`` ``[T]`` (cost at the prices used, ``inf`` when none was found)."""

    visits: np.ndarray
    next_visit: np.ndarray
    levels: np.ndarray
    value: np.ndarray

    def take(self, rows: np.ndarray) -> "Plans":
        return Plans(self.visits[rows], self.next_visit[rows], self.levels[rows],
                     self.value[rows])

    def put(self, rows: np.ndarray, other: "Plans", where: np.ndarray | None = None) -> None:
        """Overwrite ``rows`` (optionally only where ``where``) with ``other``'s plans."""
        rows = rows if where is None else rows[where]
        pick = slice(None) if where is None else where
        self.visits[rows] = other.visits[pick]
        self.next_visit[rows] = other.next_visit[pick]
        self.levels[rows] = other.levels[pick]
        self.value[rows] = other.value[pick]


def shortest_plans(arc_cost: np.ndarray, initial_cost: np.ndarray,
                   day_price: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray,
                                                   np.ndarray]:
    """Cheapest path through the days for every terminal.

    ``arc_cost`` ``[T, D, D + 1]`` (``inf`` where impossible), ``initial_cost`` ``[T, D + 1]``,
    ``day_price`` ``[T, D]`` paid on each visit day. Returns ``(value [T], visits [T, D] bool,
    next_visit [T, D], forward [T, D + 1])``; ``forward[t, b]`` is the cheapest cost of
    everything before a visit on ``b`` (``b = D``: the whole plan).
    """
    t_count, d_count = day_price.shape
    forward = initial_cost.astype(float).copy()
    pred = np.full((t_count, d_count + 1), -1)
    step = arc_cost + day_price[:, :, None]
    rows = np.arange(t_count)
    for b in range(1, d_count + 1):
        through = forward[:, :b] + step[:, :b, b]
        a = through.argmin(axis=1)
        best = through[rows, a]
        better = best < forward[:, b]
        forward[:, b] = np.where(better, best, forward[:, b])
        pred[:, b] = np.where(better, a, -1)
    visits = np.zeros((t_count, d_count), bool)
    next_visit = np.full((t_count, d_count), d_count)
    node = np.full(t_count, d_count)
    alive = np.isfinite(forward[:, d_count])
    for _ in range(d_count + 1):
        prev = np.where(alive, pred[rows, node], -1)
        alive = prev >= 0
        if not alive.any():
            break
        visits[rows[alive], prev[alive]] = True
        next_visit[rows[alive], prev[alive]] = node[alive]
        node = np.where(alive, prev, node)
    return forward[:, d_count], visits, next_visit, forward


def backward_values(arc_cost: np.ndarray, day_price: np.ndarray) -> np.ndarray:
    """``[T, D + 1]`` cheapest cost from a visit on ``a`` (its price included) to the end."""
    t_count, d_count = day_price.shape
    back = np.full((t_count, d_count + 1), np.inf)
    back[:, d_count] = 0.0
    step = arc_cost + day_price[:, :, None]
    for a in range(d_count - 1, -1, -1):
        back[:, a] = (step[:, a, a + 1:] + back[:, a + 1:]).min(axis=1)
    return back


def _plans(batch: TerminalBatch, choice: np.ndarray, rows: np.ndarray, value: np.ndarray,
           visits: np.ndarray, next_visit: np.ndarray) -> Plans:
    """Plans with the level of each visit taken from candidate ``choice`` ``[T, D, D + 1]``."""
    d_count = visits.shape[1]
    pick = np.take_along_axis(choice, np.minimum(next_visit, d_count)[:, :, None], axis=2)[..., 0]
    level_table = batch.candidates.level[rows]
    lv = np.take_along_axis(
        level_table, np.minimum(next_visit, d_count)[:, :, None, None], axis=2)[:, :, 0, :]
    lv = np.take_along_axis(lv, pick[:, :, None], axis=2)[..., 0]
    return Plans(visits, next_visit, np.where(visits, lv, -1), value)


def cheapest_plans(batch: TerminalBatch, day_price: np.ndarray,
                   rows: np.ndarray | None = None) -> tuple[Plans, np.ndarray]:
    """Every terminal's optimum at ``day_price`` ``[T, D]``: every cycle takes its cheapest
    candidate, the days are joined by the shortest path. Returns the plans and the forward
    values."""
    rows = np.arange(batch.problem.shape[0]) if rows is None else rows
    cost = batch.candidates.best_cost[rows]
    value, visits, next_visit, forward = shortest_plans(cost, batch.initial_cost[rows],
                                                        day_price)
    choice = np.zeros(cost.shape, dtype=int)
    return _plans(batch, choice, rows, value, visits, next_visit), forward


def plan_values(batch: TerminalBatch, rows: np.ndarray, plans: Plans,
                day_price: np.ndarray) -> np.ndarray:
    """``[T]`` cost of plans at the prices from the candidate tables (``inf`` if not a plan of
    candidates)."""
    cand = batch.candidates
    d_count = plans.visits.shape[1]
    first = np.where(plans.visits.any(axis=1), plans.visits.argmax(axis=1), d_count)
    value = np.take_along_axis(batch.initial_cost[rows], first[:, None], axis=1)[:, 0].copy()
    r = np.arange(rows.size)
    for a in range(d_count):
        on = plans.visits[:, a]
        if not on.any():
            continue
        b = plans.next_visit[on, a]
        table_cost = cand.cost[rows[on], a, b, :]
        table_level = cand.level[rows[on], a, b, :]
        hit = table_level == plans.levels[on, a][:, None]
        arc = np.where(hit.any(axis=1),
                       np.take_along_axis(table_cost, hit.argmax(axis=1)[:, None], axis=1)[:, 0],
                       np.inf)
        value[r[on]] += arc + day_price[on, a]
    return value


def plan_excess(batch: TerminalBatch, rows: np.ndarray, plans: Plans) -> np.ndarray:
    """``[T]`` dry paths above the allowance, summed over the cycles of plans of candidates
    (0 unless targets are soft)."""
    cand = batch.candidates
    d_count = plans.visits.shape[1]
    first = np.where(plans.visits.any(axis=1), plans.visits.argmax(axis=1), d_count)
    out = np.take_along_axis(batch.initial_excess[rows], first[:, None], axis=1)[:, 0].copy()
    for a in range(d_count):
        on = np.flatnonzero(plans.visits[:, a])
        if not on.size:
            continue
        b = plans.next_visit[on, a]
        hit = cand.level[rows[on], a, b, :] == plans.levels[on, a][:, None]
        x = np.take_along_axis(cand.excess[rows[on], a, b, :], hit.argmax(axis=1)[:, None],
                               axis=1)[:, 0]
        out[on] += np.where(hit.any(axis=1), x, 0)
    return out


def pattern_plans(batch: TerminalBatch, t: int, patterns: np.ndarray,
                  price: np.ndarray) -> Plans:
    """The best plan of terminal ``t`` on each visit pattern ``patterns`` ``[n, D]`` at day
    prices ``price`` ``[D]``: each cycle its cheapest candidate (exact, the target being a
    limit per cycle); ``value`` ``inf`` where the pattern has no plan."""
    cand = batch.candidates
    d_count = patterns.shape[1]
    nxt = next_visits(patterns)
    first = np.where(patterns.any(axis=1), patterns.argmax(axis=1), d_count)
    value = batch.initial_cost[t][first].copy()
    levels = np.full(patterns.shape, -1)
    for a in range(d_count):
        on = patterns[:, a]
        value[on] += cand.best_cost[t, a, nxt[on, a]] + price[a]
        levels[on, a] = cand.best_level[t, a, nxt[on, a]]
    return Plans(patterns.copy(), np.where(patterns, nxt, d_count), levels, value)
