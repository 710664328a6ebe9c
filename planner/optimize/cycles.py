"""Swap mode: the expected cost of every cycle between two visits, for every load level.

With swap the day's accounting (:mod:`planner.costs`) separates by cycle. A cycle starts with a
visit on day ``a`` loading level ``k`` (``L = k · bundle``) and ends the day before the next visit
``b`` (``b = D``: no further visit in the plan). With ``C(a, t) = demand[a] + … + demand[t]``:

- carry      ``r · Σ_{t=a}^{b−1} E[(L − C(a, t))⁺]``
- dry days   ``penalty · Σ_{t=a}^{b−1} P(C(a, t) > L and demand[t] > 0)``
- shortfall  ``s · E[(C(a, b − 1) − L)⁺]``
- handling   ``h · L`` on the load and ``h · E[(L − C(a, b − 1))⁺]`` on the residual returned at
  ``b`` (none when ``b = D``)

and the cycle has a dry day on path ``p`` iff ``C_p(a, b − 1) > L`` (``C`` never decreases):
the service target counts these paths per cycle (:class:`planner.optimize.problem.ServiceRule`). The cycle before the first visit starts with
the start balance on day 0 and pays no load handling; a first visit on day 0 returns the whole
start balance.

The expectations over paths come from one histogram per (terminal, a, t) of ``C(a, t)`` on the
grid of load levels: ``#{C < L_k}`` and ``Σ_{C < L_k} C`` are cumulative bin counts and sums, so
all levels cost ``O(P + levels)`` per pair, with no loop over paths. Demand in whole currency
units is summed exactly; ties ``C = L`` count as not dry, as in the accounting.

Of the levels of a cycle only the *candidates* are kept: a level is dominated when a higher
level costs no more (a higher level's dry set is never larger) or when a lower level with the
same dry set costs no more; and levels whose dry count exceeds the cycle's allowance can never
be part of a plan that meets the service target (with soft targets they stay, priced per dry
path above the allowance). What remains is a short list per cycle, cheapest first (costs rise
and dry counts fall along it). As the target is a limit per cycle, the cheapest path through
the days over these lists is the terminal's exact optimum.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from planner.optimize.problem import PlanningProblem, ServiceRule

CHUNK = 48          # terminals per block: keeps the [terminal, path, day] work in cache


@dataclass(frozen=True)
class Candidates:
    """Candidate levels of every cycle (arrays over terminal, start day ``a``, next visit ``b``
    in ``0 … D``, candidate ``c``; cheapest first, padded with ``cost = inf``).

    - ``cost`` ``[T, D, D + 1, C]`` expected cycle cost without the visit fee.
      With soft targets it includes ``soft_penalty`` per dry path above the allowance.
    - ``dry`` ``[T, D, D + 1, C]`` paths with a dry day in the cycle; ``excess`` the dry paths
      above the cycle's allowance (0 unless targets are soft).
    - ``level`` ``[T, D, D + 1, C]`` bundles loaded (−1 in padding).
    - ``initial`` ``[T, D + 1]`` expected cost from day 0 until the first visit on ``b``;
      ``initial_dry`` ``[T, D + 1]`` paths dry before it.
    """

    cost: np.ndarray
    dry: np.ndarray
    excess: np.ndarray
    level: np.ndarray
    initial: np.ndarray
    initial_dry: np.ndarray

    @property
    def best_cost(self) -> np.ndarray:
        """``[T, D, D + 1]`` the cheapest candidate of each cycle."""
        return self.cost[..., 0]

    @property
    def best_level(self) -> np.ndarray:
        return self.level[..., 0]


def cycle_candidates(problem: PlanningProblem, rule: ServiceRule, arc_ok: np.ndarray,
                     soft_penalty: float | None = None) -> Candidates:
    """Candidate levels of every cycle of every terminal (swap accounting; module text).

    ``rule``: the dry paths each cycle may have; ``arc_ok`` ``[T, D, D + 1]`` cycles that may
    occur; ``soft_penalty``: price per dry path above the allowance instead of a hard limit.
    """
    t_count, p_count, d_count = problem.demand.shape
    bundles = np.rint(problem.limit / problem.bundle).astype(int)
    order = np.argsort(bundles, kind="stable")
    blocks = [order[i:i + CHUNK] for i in range(0, t_count, CHUNK)]
    parts = [_block_candidates(problem, idx, rule, arc_ok, soft_penalty) for idx in blocks]
    width = max(part[0].shape[3] for part in parts) if parts else 1
    shape = (t_count, d_count, d_count + 1, width)
    cost = np.full(shape, np.inf)
    dry = np.zeros(shape, dtype=np.int32)
    excess = np.zeros(shape, dtype=np.int32)
    level = np.full(shape, -1, dtype=np.int32)
    for idx, (c, n, x, k) in zip(blocks, parts):
        w = c.shape[3]
        cost[idx, :, :, :w] = c
        dry[idx, :, :, :w] = n
        excess[idx, :, :, :w] = x
        level[idx, :, :, :w] = k
    initial, initial_dry = initial_cycles(problem)
    return Candidates(cost=cost, dry=dry, excess=excess, level=level, initial=initial,
                      initial_dry=initial_dry)


def _block_candidates(problem: PlanningProblem, idx: np.ndarray, rule: ServiceRule,
                      arc_ok: np.ndarray, soft_penalty: float | None
                      ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    demand = problem.demand[idx]
    t_count, p_count, d_count = demand.shape
    rates = problem.rates
    h = rates.handling_per_1000 / 1000.0
    s = rates.shortfall_penalty_per_1000 / 1000.0
    bundle_size = problem.bundle[idx]
    bundles = np.rint(problem.limit[idx] / bundle_size).astype(int)
    n_levels = int(bundles.max()) + 1
    bins = n_levels + 1                        # bin n_levels: beyond every level
    k = np.arange(n_levels)
    levels = k[None, :] * bundle_size[:, None]                       # [T, N]
    valid = k[None, :] <= bundles[:, None]
    fixed = problem.fixed_load[idx]
    fixed_level = np.where(np.isnan(fixed), -1,
                           np.rint(np.nan_to_num(fixed) / bundle_size[:, None])).astype(int)
    ok_arc = arc_ok[idx]

    # cumulative demand before each day, [terminal, day, path]: a day's paths are contiguous
    prefix = np.zeros((t_count, d_count + 1, p_count))
    np.cumsum(demand.transpose(0, 2, 1), axis=1, out=prefix[:, 1:, :])
    zero_days = ~(demand.transpose(0, 2, 1) > 0)                     # [T, D, P]
    any_zero = zero_days.any()
    bundle = bundle_size[:, None, None]
    top = (bundles * bundle_size)[:, None, None]                     # the limit, [T, 1, 1]
    # work buffers reused for every start day (fresh memory is slow to touch)
    flat = t_count * d_count * p_count
    cum_buf = np.empty(flat)
    below_buf = np.empty(flat)
    index_buf = np.empty(flat, dtype=np.intp)
    tie_buf = np.empty(flat, dtype=bool)

    width = 1
    out: list[tuple[int, np.ndarray, np.ndarray, np.ndarray]] = []
    for a in range(d_count):
        ends = np.arange(a + 1, d_count + 1)                          # next visit b per j
        limit = rule.allowance(np.full((t_count, ends.size), a + 1),
                               np.broadcast_to(ends, (t_count, ends.size)), idx)  # [T, J]
        span = (d_count - a if soft_penalty is not None else
                _useful_span(prefix, a, top, limit, rule.shortest_end[idx, a + 1]))
        if span == 0:
            continue
        ends, limit = ends[:span], limit[:, :span, None]
        shape3 = (t_count, span, p_count)
        n = t_count * span * p_count
        cum = cum_buf[:n].reshape(shape3)                             # C(a, a + j) per path
        np.subtract(prefix[:, a + 1:a + 1 + span, :], prefix[:, a:a + 1, :], out=cum)
        below = below_buf[:n].reshape(shape3)
        np.floor_divide(cum, bundle, out=below)
        tie = tie_buf[:n].reshape(shape3)
        np.multiply(below, bundle, out=below)
        np.equal(below, cum, out=tie)                                 # C = L exactly
        np.floor_divide(cum, bundle, out=below)
        np.minimum(below, n_levels, out=below)
        index = index_buf[:n].reshape(shape3)
        index[...] = below
        index += ((np.arange(t_count)[:, None] * span + np.arange(span)[None, :])
                  * bins)[:, :, None]
        index = index.ravel()
        size = t_count * span * bins
        shape = (t_count, span, bins)
        count = np.bincount(index, minlength=size).reshape(shape)
        total = np.bincount(index, weights=cum.ravel(), minlength=size).reshape(shape)
        flat_tie = tie.ravel()
        ties = np.bincount(index[flat_tie], minlength=size).reshape(shape)[:, :, :n_levels]
        # #{C < L_k}, Σ_{C < L_k} C for k = 0 … N − 1
        count_lt = np.zeros((t_count, span, n_levels))
        np.cumsum(count[:, :, :n_levels - 1], axis=2, out=count_lt[:, :, 1:])
        sum_lt = np.zeros((t_count, span, n_levels))
        np.cumsum(total[:, :, :n_levels - 1], axis=2, out=sum_lt[:, :, 1:])
        above = p_count - count_lt - ties                             # #{C > L_k}
        load = levels[:, None, :]
        held = (load * count_lt - sum_lt) / p_count                   # E[(L − C)⁺]
        dry_days = above
        if any_zero:
            dry_days = above - _zero_demand_above(index, flat_tie,
                                                  zero_days[:, a:a + span, :],
                                                  shape, n_levels)
        cum_held = np.cumsum(held, axis=1)
        cum_dry = np.cumsum(dry_days, axis=1) / p_count
        short = held - load + cum.mean(axis=2)[:, :, None]            # E[(C − L)⁺]
        ends_in_plan = (ends < d_count)[None, :, None]
        cost = (h * load + rates.carry_rate_daily * cum_held + rates.dry_day_penalty * cum_dry
                + s * short + h * held * ends_in_plan)                # [T, J, N]
        n_dry = above.astype(np.int64)                                # C(a, b − 1) > L

        level_ok = valid & ((fixed_level[:, a] < 0)[:, None]
                            | (k[None, :] == fixed_level[:, a][:, None]))
        usable = level_ok[:, None, :] & ok_arc[:, a, a + 1:a + 1 + span, None]
        over = np.maximum(n_dry - limit, 0)
        if soft_penalty is None:
            usable &= over == 0
        else:
            cost = cost + soft_penalty * over
        cost = np.where(usable, cost, np.inf)
        c, n, lv = _non_dominated(cost, n_dry)
        x = np.where(lv >= 0, np.maximum(n - limit, 0), 0)
        width = max(width, c.shape[2])
        out.append((a, c, n, x, lv))

    shape = (t_count, d_count, d_count + 1, width)
    cost_out = np.full(shape, np.inf)
    dry_out = np.zeros(shape, dtype=np.int32)
    excess_out = np.zeros(shape, dtype=np.int32)
    level_out = np.full(shape, -1, dtype=np.int32)
    for a, c, n, x, lv in out:
        w, span = c.shape[2], c.shape[1]
        cost_out[:, a, a + 1:a + 1 + span, :w] = c
        dry_out[:, a, a + 1:a + 1 + span, :w] = n
        excess_out[:, a, a + 1:a + 1 + span, :w] = x
        level_out[:, a, a + 1:a + 1 + span, :w] = lv
    return cost_out, dry_out, excess_out, level_out


def _useful_span(prefix: np.ndarray, a: int, top: np.ndarray, limit: np.ndarray,
                 shortest: np.ndarray) -> int:
    """Days after ``a`` worth pricing: a cycle from ``a`` that leaves more than its allowance
    of paths dry even with a full load is impossible, and so is every longer one (cumulative
    demand never falls; only the shortest cycle from ``a`` may keep its unavoidable risk, and
    its allowance says so; ends before it are no cycles at all). ``limit`` ``[T, J]`` the
    allowance per next visit, ``shortest`` ``[T]`` the shortest cycle's end. Returns the
    longest span any terminal of the block can use."""
    d_count = prefix.shape[1] - 1
    if np.all(limit >= prefix.shape[2]):
        return d_count - a
    cum = prefix[:, a + 1:, :] - prefix[:, a:a + 1, :]               # [T, D − a, P]
    over = (cum > top).sum(axis=2) > limit                            # [T, D − a]
    over &= np.arange(a + 1, d_count + 1)[None, :] >= shortest[:, None]
    first = np.where(over.any(axis=1), over.argmax(axis=1), d_count - a)
    # a cycle may end on the first impossible day's visit: spans up to `first`
    return int(min(first.max(), d_count - a))


def _zero_demand_above(index: np.ndarray, flat_tie: np.ndarray, zero: np.ndarray,
                       shape: tuple[int, int, int], n_levels: int) -> np.ndarray:
    """``#{C > L_k and demand = 0}`` per (terminal, j, k): an empty machine is not dry on a day
    without demand, so these (path, day) pairs leave the dry-day count."""
    flat_zero = zero.ravel()
    zidx = index[flat_zero]
    size = shape[0] * shape[1] * shape[2]
    zcount = np.bincount(zidx, minlength=size).reshape(shape)
    zties = np.bincount(zidx[flat_tie[flat_zero]], minlength=size).reshape(shape)
    z_lt = np.zeros(shape[:2] + (n_levels,))
    np.cumsum(zcount[:, :, :n_levels - 1], axis=2, out=z_lt[:, :, 1:])
    return zcount.sum(axis=2)[:, :, None] - z_lt - zties[:, :, :n_levels]


def _non_dominated(cost: np.ndarray, n_dry: np.ndarray
                   ) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Compact the non-dominated levels of ``cost`` ``[T, J, N]`` (``inf`` = unusable).

    Kept: finite, cheaper than every higher level, and with fewer dry paths than the kept level
    below it. Returns ``(cost, dry, level)`` ``[T, J, W]`` in level order, padded with inf/−1.
    """
    tail = np.minimum.accumulate(cost[..., ::-1], axis=2)[..., ::-1]
    later = np.empty_like(cost)
    later[..., :-1] = tail[..., 1:]
    later[..., -1] = np.inf
    kept = np.isfinite(cost) & (cost < later)
    big = np.iinfo(np.int64).max
    run = np.minimum.accumulate(np.where(kept, n_dry, big), axis=2)
    prior = np.empty_like(run)
    prior[..., 1:] = run[..., :-1]
    prior[..., 0] = big
    kept &= n_dry < prior
    width = max(int(kept.sum(axis=2).max()), 1)
    # stable order of kept levels first
    pick = np.argsort(~kept, axis=2, kind="stable")[..., :width]
    present = np.take_along_axis(kept, pick, axis=2)
    c = np.where(present, np.take_along_axis(cost, pick, axis=2), np.inf)
    n = np.where(present, np.take_along_axis(n_dry, pick, axis=2), 0).astype(np.int32)
    lv = np.where(present, pick, -1).astype(np.int32)
    return c, n, lv


def initial_cycles(problem: PlanningProblem) -> tuple[np.ndarray, np.ndarray]:
    """``(cost [T, D + 1], dry [T, D + 1])`` from day 0 on the start balance until a first
    visit on each day ``b`` (0 … D); ``dry`` counts paths dry before that visit."""
    demand = problem.demand
    t_count, p_count, d_count = demand.shape
    rates = problem.rates
    h = rates.handling_per_1000 / 1000.0
    s = rates.shortfall_penalty_per_1000 / 1000.0
    start = problem.start_balance[:, None, None]
    cum = np.cumsum(demand, axis=2)                                  # C(0, t)
    held = np.maximum(start - cum, 0.0).mean(axis=1)                 # [T, D]
    short = np.maximum(cum - start, 0.0).mean(axis=1)
    dry_days = ((cum > start) & (demand > 0)).mean(axis=1)
    cost = np.zeros((t_count, d_count + 1))
    cost[:, 0] = h * problem.start_balance
    ends_in_plan = np.arange(1, d_count + 1) < d_count
    cost[:, 1:] = (rates.carry_rate_daily * np.cumsum(held, axis=1)
                   + rates.dry_day_penalty * np.cumsum(dry_days, axis=1) + s * short
                   + h * held * ends_in_plan[None, :])
    dry = np.zeros((t_count, d_count + 1), dtype=np.int32)
    dry[:, 1:] = (cum > start).sum(axis=1)
    return cost, dry
