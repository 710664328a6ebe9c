"""Swap mode, one terminal at a time: the cheapest visit days and loads at given day prices.

A plan of a terminal is a path through its days: from the start (balance ``start_balance``) to
a first visit, from visit to visit, and from the last visit to the end of the plan; each step
(``a → b`` with level ``k``) costs its cycle (:mod:`planner.optimize.cycles`) plus the visit fee
and the day price of ``a`` (the crew price of the network model). Committed visits cannot be
skipped and keep their load.

Service target: the paths with a dry day within the horizon are the union of the cycles' dry
sets; at most ``allowance`` paths (:func:`planner.optimize.problem.dry_path_allowance`).

Method, exact:

1. Relaxation: every cycle on its own keeps at most ``allowance`` dry paths (a union is at
   least as large as each of its sets). Shortest path over the days (dynamic programming,
   vectorised over terminals). Its value is a lower bound; if its plan meets the target on the
   union, it is optimal.
2. Otherwise a small MILP on the arcs ``x[a, b, k]`` (flow through the days) with
   ``z[p] = 1`` when path ``p`` may be dry, ``Σ z ≤ allowance`` and, per start day ``a`` and
   path ``p``, ``Σ_{arcs from a dry on p} x ≤ z[p]``. Arcs whose own dry set exceeds the
   allowance are left out, and so are dominated levels (a level costing at least as much as a
   higher one, whose dry set is never larger; of levels with the same dry set the cheapest).
   Given a plan that meets the target and costs ``U``, an arc is also left out when even the
   relaxation cannot pass through it for less than ``U`` (forward + arc + backward value).

Plans that meet the target quickly (columns between exact rounds, and the ``U`` above) come
from pricing every dry path of a cycle (a shortest path per price, bisection on the price per
terminal) and then lowering loads while the union of dry paths stays within the allowance.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from planner.optimize import milp
from planner.optimize.cycles import Candidates, cycle_candidates
from planner.optimize.problem import PlanningProblem

BIG = 1 << 30


@dataclass
class TerminalBatch:
    """Per-terminal data of some terminals of one problem, ready for pricing.

    ``prefix`` ``[T, D + 1, P]``: cumulative demand before each day (day-major, so one day's
    paths are contiguous). ``arc_ok`` ``[T, D, D + 1]``: a cycle from a visit on ``a`` to the
    next visit on ``b`` is possible (``a`` allowed, ``b`` allowed or the end, no committed
    visit skipped); ``initial_ok`` ``[T, D + 1]`` likewise for the first visit;
    ``initial_cost`` is ``inf`` where the first visit cannot be on ``b``. ``candidates``: the
    levels worth considering per cycle (:mod:`planner.optimize.cycles`).
    """

    problem: PlanningProblem
    candidates: Candidates
    prefix: np.ndarray
    allowance: np.ndarray
    arc_ok: np.ndarray
    initial_ok: np.ndarray
    initial_cost: np.ndarray
    soft_penalty: float | None = None
    # dry sets of cycles already asked for (they do not depend on prices)
    dry_set_cache: dict = field(default_factory=dict, repr=False, compare=False)


def prepare_batch(problem: PlanningProblem, allowance: np.ndarray,
                  soft_penalty: float | None = None) -> TerminalBatch:
    """Candidate cycles of every terminal of ``problem`` (swap).

    ``soft_penalty``: when given, the allowance may be exceeded at this cost per extra dry path
    (used only when crew limits make the targets impossible together).
    """
    t_count, p_count, d_count = problem.demand.shape
    arc_ok, initial_ok = cycle_structure(problem)
    candidates = cycle_candidates(problem, None if soft_penalty is not None else allowance,
                                  arc_ok)
    # cumulative demand before each day, [terminal, day, path] so a day's paths are contiguous
    prefix = np.zeros((t_count, d_count + 1, p_count))
    np.cumsum(problem.demand.transpose(0, 2, 1), axis=1, out=prefix[:, 1:, :])
    initial_cost = np.where(initial_ok, candidates.initial, np.inf)
    if soft_penalty is None:
        initial_cost = np.where(candidates.initial_dry <= allowance[:, None], initial_cost,
                                np.inf)
    return TerminalBatch(problem=problem, candidates=candidates, prefix=prefix,
                         allowance=np.asarray(allowance), arc_ok=arc_ok,
                         initial_ok=initial_ok, initial_cost=initial_cost,
                         soft_penalty=soft_penalty)


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


def relaxed_plans(batch: TerminalBatch, day_price: np.ndarray,
                  rows: np.ndarray | None = None) -> tuple[Plans, np.ndarray]:
    """Step 1 (relaxation): every cycle takes its cheapest candidate. Returns the plans and
    the forward values; ``value`` is a lower bound of each terminal's optimum."""
    rows = np.arange(batch.problem.shape[0]) if rows is None else rows
    cost = batch.candidates.best_cost[rows]
    value, visits, next_visit, forward = shortest_plans(cost, batch.initial_cost[rows],
                                                        day_price)
    choice = np.zeros(cost.shape, dtype=int)
    return _plans(batch, choice, rows, value, visits, next_visit), forward


def penalised_plans(batch: TerminalBatch, day_price: np.ndarray, rows: np.ndarray,
                    penalty: np.ndarray) -> Plans:
    """Shortest paths where every dry path of every cycle costs ``penalty`` ``[T]`` more (a
    heuristic towards the service target; ``value`` is the plan's cost without the penalty)."""
    cand = batch.candidates
    cost = cand.cost[rows]
    dry = cand.dry[rows]
    priced = cost + penalty[:, None, None, None] * dry
    choice = priced.argmin(axis=3)
    arc = np.take_along_axis(priced, choice[..., None], axis=3)[..., 0]
    init = batch.initial_cost[rows] + penalty[:, None] * cand.initial_dry[rows]
    _, visits, next_visit, _ = shortest_plans(arc, init, day_price)
    plans = _plans(batch, choice, rows, np.zeros(rows.size), visits, next_visit)
    value = plan_values(batch, rows, plans, day_price)
    return Plans(plans.visits, plans.next_visit, plans.levels, value)


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


def dry_union(batch: TerminalBatch, rows: np.ndarray, plans: Plans) -> np.ndarray:
    """``[T, P]`` bool: the path has a dry day within the horizon under the plan (swap)."""
    problem = batch.problem
    d_count = problem.demand.shape[2]
    horizon = problem.horizon_days
    prefix = batch.prefix
    visits = plans.visits
    first = np.where(visits.any(axis=1), visits.argmax(axis=1), d_count)
    end = np.minimum(first, horizon)                # days 0 … end − 1 on the start balance
    dry = prefix[rows, end] > problem.start_balance[rows][:, None]
    load = np.where(plans.levels >= 0, plans.levels, 0) * problem.bundle[rows][:, None]
    for a in range(horizon):
        on = np.flatnonzero(visits[:, a])
        if not on.size:
            continue
        t = rows[on]
        e = np.minimum(plans.next_visit[on, a], horizon)
        cum = prefix[t, e] - prefix[t, a]
        dry[on] |= cum > load[on, a][:, None]
    return dry


def dry_counts(batch: TerminalBatch, rows: np.ndarray, plans: Plans) -> np.ndarray:
    """``[T]`` paths with a dry day within the horizon under the plans."""
    return dry_union(batch, rows, plans).sum(axis=1)


# --------------------------------------------------------------------------------------------
# Exact: the arc MILP of one terminal
# --------------------------------------------------------------------------------------------


@dataclass
class ArcModel:
    """The MILP of one terminal and how to read it back (one column per arc)."""

    model: milp.LinearModel
    arc_from: np.ndarray      # start day (−1 = start balance)
    arc_to: np.ndarray
    arc_level: np.ndarray
    arc_cols: np.ndarray
    path_cols: np.ndarray


def define_arcs(model: milp.LinearModel, batch: TerminalBatch, t: int, day_price: np.ndarray,
                keep: np.ndarray, keep_initial: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Binary ``x[a, b, k]``, one per kept candidate cycle, costing cycle + visit price of
    ``a``; and ``x[start, b]`` for a first visit on ``b`` (the start balance, no level)."""
    cand = batch.candidates
    init = np.flatnonzero(keep_initial)
    a, b, c = np.nonzero(keep)
    cost = np.concatenate([batch.initial_cost[t, init], cand.cost[t, a, b, c] + day_price[a]])
    frm = np.concatenate([np.full(init.size, -1), a])
    to = np.concatenate([init, b])
    lev = np.concatenate([np.full(init.size, -1), cand.level[t, a, b, c]])
    dry = np.concatenate([cand.initial_dry[t, init], cand.dry[t, a, b, c]])
    names = [f"x-{'start' if f < 0 else f}-{g}-{max(v, 0)}" for f, g, v in zip(frm, to, lev)]
    cols = model.add_variables(names, cost, 0.0, 1.0, integer=True)
    return frm, to, lev, dry, cols


def define_flow(model: milp.LinearModel, batch: TerminalBatch, t: int, frm: np.ndarray,
                to: np.ndarray, cols: np.ndarray) -> None:
    """One first visit: ``Σ_b x[start, b] = 1``; through every allowed day ``a``:
    ``Σ_in x − Σ_out x = 0``; ``Σ_in x = 1`` on committed visits."""
    problem = batch.problem
    d_count = problem.demand.shape[2]
    first = frm < 0
    model.add_constraints(["flow-start"], np.zeros(first.sum()), cols[first],
                          np.ones(first.sum()), 1.0, 1.0)
    days = np.flatnonzero(problem.allowed[t])
    row_of = np.full(d_count + 1, -1)
    row_of[days] = np.arange(days.size)
    into = row_of[to] >= 0
    out = (frm >= 0) & (row_of[np.maximum(frm, 0)] >= 0)
    model.add_constraints([f"flow-{d}" for d in days],
                          np.concatenate([row_of[to[into]], row_of[frm[out]]]),
                          np.concatenate([cols[into], cols[out]]),
                          np.concatenate([np.ones(into.sum()), -np.ones(out.sum())]), 0.0, 0.0)
    committed = np.flatnonzero(problem.committed[t])
    if committed.size:
        crow = np.full(d_count + 1, -1)
        crow[committed] = np.arange(committed.size)
        hit = crow[to] >= 0
        model.add_constraints([f"committed-visit-{d}" for d in committed], crow[to[hit]],
                              cols[hit], np.ones(hit.sum()), 1.0, 1.0)


def define_dry_paths(model: milp.LinearModel, batch: TerminalBatch, t: int, frm: np.ndarray,
                     to: np.ndarray, lev: np.ndarray, dry: np.ndarray,
                     cols: np.ndarray) -> np.ndarray:
    """Binary ``z[p]`` (path p may run dry within the horizon), ``Σ_p z[p] ≤ allowance`` (a
    priced excess in the soft variant) and per start node and path
    ``Σ_{arcs from the node dry on p} x − z[p] ≤ 0``."""
    problem = batch.problem
    p_count = problem.demand.shape[1]
    horizon = problem.horizon_days
    prefix = batch.prefix[t].T                       # [path, day]
    link_node, link_path, link_col = [], [], []
    orders: dict[tuple[int, int], np.ndarray] = {}
    for f, g, n, c in zip(frm, to, dry, cols):
        if n == 0 or f >= horizon:
            continue
        e = min(g, horizon)
        key = (f, e)
        if key not in orders:
            base = prefix[:, 0] if f < 0 else prefix[:, f]
            # dry paths of a cycle are those with the largest cumulative demand
            orders[key] = np.argsort(-(prefix[:, e] - base), kind="stable")
        paths = orders[key][:n]
        link_node.append(np.full(n, f))
        link_path.append(paths)
        link_col.append(np.full(n, c))
    if not link_node:
        return np.zeros(0, dtype=int)
    node = np.concatenate(link_node)
    path = np.concatenate(link_path)
    col = np.concatenate(link_col)
    used = np.unique(path)
    zcols = model.add_variables([f"z-{p}" for p in used], 0.0, 0.0, 1.0, integer=True)
    zcol_of = np.full(p_count, -1)
    zcol_of[used] = zcols
    if batch.soft_penalty is not None:
        excess = model.add_variables(["excess-dry-paths"], batch.soft_penalty, 0.0, milp.INF)
        model.add_constraints(["dry-path-allowance"], np.zeros(used.size + 1),
                              np.append(zcols, excess), np.append(np.ones(used.size), -1.0),
                              upper=float(batch.allowance[t]))
    else:
        model.add_constraints(["dry-path-allowance"], np.zeros(used.size), zcols,
                              np.ones(used.size), upper=float(batch.allowance[t]))
    key = (node + 1) * p_count + path
    rows_key, row = np.unique(key, return_inverse=True)
    names = [f"dry-link-{'start' if q // p_count == 0 else q // p_count - 1}-{q % p_count}"
             for q in rows_key]
    model.add_constraints(names, np.concatenate([row, np.arange(rows_key.size)]),
                          np.concatenate([col, zcol_of[rows_key % p_count]]),
                          np.concatenate([np.ones(row.size), -np.ones(rows_key.size)]),
                          upper=0.0)
    return zcols


def build_arc_model(batch: TerminalBatch, t: int, day_price: np.ndarray,
                    upper_bound: float = np.inf, pattern: np.ndarray | None = None
                    ) -> ArcModel:
    """The exact MILP of terminal ``t`` at day prices ``day_price`` ``[D]``.

    With a known plan costing ``upper_bound``, arcs that cannot lie on any cheaper plan even in
    the relaxation (forward + arc + backward value above the bound) are left out. With a visit
    ``pattern`` ``[D]`` only its cycles remain (the loads are then what is chosen).
    """
    cand = batch.candidates
    keep = np.isfinite(cand.cost[t])
    keep_initial = np.isfinite(batch.initial_cost[t])
    if pattern is not None:
        d_count = pattern.size
        days = np.flatnonzero(pattern)
        ends = np.append(days[1:], d_count)
        only = np.zeros(keep.shape[:2], bool)
        only[days, ends] = True
        keep &= only[:, :, None]
        first = np.zeros(d_count + 1, bool)
        first[days[0] if days.size else d_count] = True
        keep_initial &= first
    if np.isfinite(upper_bound):
        arc = cand.best_cost[t][None]
        price = day_price[None]
        _, _, _, forward = shortest_plans(arc, batch.initial_cost[t][None], price)
        back = backward_values(arc, price)[0]
        limit = upper_bound + 1e-7 * max(1.0, abs(upper_bound))
        through = (forward[0, :-1, None, None] + day_price[:, None, None] + cand.cost[t]
                   + back[None, :, None])
        keep &= through <= limit
        keep_initial &= batch.initial_cost[t] + back <= limit
    model = milp.LinearModel(name=f"terminal-{batch.problem.terminal_ids[t]}")
    frm, to, lev, dry, cols = define_arcs(model, batch, t, day_price, keep, keep_initial)
    define_flow(model, batch, t, frm, to, cols)
    zcols = define_dry_paths(model, batch, t, frm, to, lev, dry, cols)
    return ArcModel(model, frm, to, lev, cols, zcols)


def read_arc_solution(arc: ArcModel, x: np.ndarray, d_count: int
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(visits [D], next_visit [D], levels [D])`` of a solved arc model."""
    chosen = x[arc.arc_cols] > 0.5
    visits = np.zeros(d_count, bool)
    next_visit = np.full(d_count, d_count)
    levels = np.full(d_count, -1)
    for f, g, k in zip(arc.arc_from[chosen], arc.arc_to[chosen], arc.arc_level[chosen]):
        if f >= 0:
            visits[f] = True
            next_visit[f] = g
            levels[f] = k
    return visits, next_visit, levels


def exact_plan(batch: TerminalBatch, t: int, day_price: np.ndarray, *,
               upper_bound: float = np.inf, solver: str = "highs", time_limit_s: float = 30.0,
               mip_rel_gap: float = 1e-9, pattern: np.ndarray | None = None
               ) -> tuple[Plans, float, str]:
    """Solve terminal ``t`` exactly (up to ``mip_rel_gap``), optionally on a fixed visit
    ``pattern``. Returns ``(plan (one row), bound, status)``; the plan's value is its cost at
    the prices (``inf`` when the model found no plan cheaper than ``upper_bound``)."""
    arc = build_arc_model(batch, t, day_price, upper_bound, pattern)
    sol = milp.solve(arc.model, solver=solver, time_limit_s=time_limit_s,
                     mip_rel_gap=mip_rel_gap)
    d_count = batch.problem.demand.shape[2]
    if sol.status in ("infeasible", "error"):
        empty = Plans(np.zeros((1, d_count), bool), np.full((1, d_count), d_count),
                      np.full((1, d_count), -1), np.array([np.inf]))
        bound = upper_bound if sol.status == "infeasible" else -np.inf
        return empty, bound, sol.status
    visits, next_visit, levels = read_arc_solution(arc, sol.x, d_count)
    plan = Plans(visits[None], next_visit[None], levels[None], np.array([sol.objective]))
    return plan, sol.bound, sol.status


# --------------------------------------------------------------------------------------------
# Heuristic plans that meet the service target (upper bounds, columns)
# --------------------------------------------------------------------------------------------


def target_plans(batch: TerminalBatch, day_price: np.ndarray, rows: np.ndarray, *,
                 steps: int | None = None,
                 penalty_range: tuple[np.ndarray, np.ndarray] | None = None
                 ) -> tuple[Plans, tuple[np.ndarray, np.ndarray]]:
    """Plans of ``rows`` that meet the service target, found by pricing each cycle's dry paths
    (bisection on the price per dry path, in log scale) and then lowering loads while the
    union of dry paths stays within the allowance. ``value`` is ``inf`` where none was found.

    Returns the plans and the final bisection range (to start the next call from); ``steps``
    of bisection (default 12 from scratch, 6 from a previous range)."""
    allowance = batch.allowance[rows]
    if steps is None:
        steps = 12 if penalty_range is None else 6
    if penalty_range is None:
        low = np.full(rows.size, 1e-2)
        high = np.full(rows.size, 1e7)
    else:
        low, high = (np.asarray(x, dtype=float).copy() for x in penalty_range)
        low = np.maximum(low / 4.0, 1e-2)      # prices move between calls: widen a little
        high = np.minimum(high * 4.0, 1e7)
    d_count = day_price.shape[1]
    best = Plans(np.zeros((rows.size, d_count), bool), np.full((rows.size, d_count), d_count),
                 np.full((rows.size, d_count), -1), np.full(rows.size, np.inf))
    idx = np.arange(rows.size)
    top = penalised_plans(batch, day_price, rows, high)
    ok = dry_counts(batch, rows, top) <= allowance
    best.put(idx, top, ok)
    high = np.where(ok, high, 1e7)
    for _ in range(steps):
        mid = np.sqrt(low * high)
        plans = penalised_plans(batch, day_price, rows, mid)
        ok = dry_counts(batch, rows, plans) <= allowance
        best.put(idx, plans, ok & (plans.value < best.value))
        high = np.where(ok, mid, high)
        low = np.where(ok, low, mid)
    found = np.isfinite(best.value)
    if found.any():
        sub = idx[found]
        lowered = lower_loads(batch, rows[sub], best.take(sub), day_price[sub])
        best.put(sub, lowered)
    return best, (low, high)


def cycle_dry_sets(batch: TerminalBatch, t: int, a: int, b: int) -> list[int]:
    """Dry sets (Python int bit sets over paths) of the candidates of cycle ``a → b``
    (``a = −1``: the start balance; one set), in candidate order."""
    key = (t, a, b)
    cached = batch.dry_set_cache.get(key)
    if cached is not None:
        return cached
    problem = batch.problem
    horizon = problem.horizon_days
    if a >= horizon:
        return [0] * batch.candidates.cost.shape[3]
    prefix = batch.prefix[t].T                       # [path, day]
    e = min(b, horizon)
    base = prefix[:, 0] if a < 0 else prefix[:, a]
    order = np.argsort(-(prefix[:, e] - base), kind="stable")
    counts = ([int(batch.candidates.initial_dry[t, b])] if a < 0
              else batch.candidates.dry[t, a, b].tolist())
    sets, acc, done = [], 0, 0
    for n in sorted(set(counts)):
        for p in order[done:n]:
            acc |= 1 << int(p)
        done = n
        sets.append((n, acc))
    by_count = dict(sets)
    batch.dry_set_cache[key] = out = [by_count[n] for n in counts]
    return out


def lower_loads(batch: TerminalBatch, rows: np.ndarray, plans: Plans,
                day_price: np.ndarray) -> Plans:
    """Greedy improvement of plans that meet the target: repeatedly move the cycle with the
    largest saving to its next cheaper candidate while the union of dry paths stays within the
    allowance. Visit days stay as they are."""
    cand = batch.candidates
    out = Plans(plans.visits.copy(), plans.next_visit.copy(), plans.levels.copy(),
                plans.value.copy())
    for i, t in enumerate(rows):
        days = np.flatnonzero(plans.visits[i])
        first = days[0] if days.size else plans.visits.shape[1]
        fixed = cycle_dry_sets(batch, t, -1, first)[0]
        cycles = []
        for a in days:
            b = int(plans.next_visit[i, a])
            levels = cand.level[t, a, b]
            c = int(np.flatnonzero(levels == plans.levels[i, a])[0])
            cycles.append([a, b, c, cycle_dry_sets(batch, t, a, b)])
        limit = int(batch.allowance[t])
        while True:
            best_gain, best_j = 0.0, -1
            for j, (a, b, c, sets) in enumerate(cycles):
                if c == 0:
                    continue
                gain = cand.cost[t, a, b, c] - cand.cost[t, a, b, c - 1]
                if gain <= best_gain:
                    continue
                union = fixed
                for q, (_, _, cq, sq) in enumerate(cycles):
                    union |= sq[cq - 1] if q == j else sq[cq]
                if union.bit_count() <= limit:
                    best_gain, best_j = gain, j
            if best_j < 0:
                break
            cycles[best_j][2] -= 1
            out.value[i] -= best_gain
        for a, b, c, _ in cycles:
            out.levels[i, a] = cand.level[t, a, b, c]
    return out
