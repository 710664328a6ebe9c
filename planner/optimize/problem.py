"""The planning problem and its result, as arrays (the schedule specification).

:class:`PlanningProblem` is what every solver of the schedule sees (the decomposition in
:mod:`planner.optimize.swap` and the monolithic reference model): terminals, days (horizon +
tail days), demand paths, limits, allowed days, committed visits, fees, crew limits, cost rates
and the service target. :class:`PlanResult` is what every solver answers.

Rules fixed here so that all solvers agree:

- A visit may be planned on day ``d`` only where ``allowed[t, d]``. ``allowed`` is False in the
  lock days (except on committed visits) and on days when the depot has no crew left after
  its committed visits; it is True on every committed visit (``fixed_load`` not NaN), which must
  be kept with its load.
- Loads are whole bundles, ``0 ≤ load ≤ limit``.
- Service target (a cycle service level, the textbook measure of Silver, Pyke & Thomas,
  *Inventory and Production Management in Supply Chains*): for every cycle of the planned
  window — from each visit to the next one, from the start balance to the first visit, and
  from the last visit to the window's end — at most ``allowed_dry`` of the ``P`` paths run
  dry. ``allowed_dry = floor(max_dry_probability · P + 1e-9)`` unless the problem carries a
  calibrated in-sample level per terminal (``dry_allowance``,
  :mod:`planner.optimize.calibrate`). The horizon decides only what is committed and
  reported, never what is constrained.
- A cycle that cannot be made shorter (it ends on the next day a visit is possible) keeps the
  risk it cannot avoid: its allowance is raised to the dry count of a full load (or the
  committed load) on that shortest cycle, and the result says why in ``notes``
  (:func:`service_rule`).
- The objective is the expected cost over all days (horizon + tail), by
  :func:`planner.costs.simulate`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from planner.costs import (CostRates, Ledger, cycle_dry_counts, cycle_dry_shares, cycle_ends,
                           simulate)

WEEKDAY_NAMES = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")


@dataclass(frozen=True)
class PlanningProblem:
    """One planning run as arrays; amounts in currency units, days counted from ``dates[0]``."""

    terminal_ids: tuple[str, ...]   # T terminals
    depots: tuple[str, ...]         # K depots
    depot_of: np.ndarray            # [T] int index into depots
    dates: pd.DatetimeIndex         # D days planned = horizon + tail days
    horizon_days: int               # days reported and covered by the service target (≤ D)
    demand: np.ndarray              # [T, P, D] demand paths, ≥ 0
    start_balance: np.ndarray       # [T]
    limit: np.ndarray               # [T] max balance after a visit, whole bundles
    bundle: np.ndarray              # [T]
    allowed: np.ndarray             # [T, D] bool: a visit may be planned that day
    fixed_load: np.ndarray          # [T, D] NaN = free; a number = committed visit with that load
    visit_fee: np.ndarray           # [T, D]
    crew_limit: np.ndarray          # [K, D] int visits per depot and day
    rates: CostRates
    mode: str                       # "swap" | "topup"
    max_dry_probability: float      # the target per visit cycle (share of paths)
    dry_allowance: np.ndarray | None = None   # [T] calibrated in-sample dry paths per cycle
    # what the plan's reasons name (planner.optimize.frames); None when unknown
    lock_days: int = 0                        # first days with committed visits only
    visit_weekdays: np.ndarray | None = None  # [T, 7] bool: the terminal's visit_days, Mon…Sun
    limit_names: tuple[str, ...] | None = None  # [T] "capacity" or "insurance limit"

    @property
    def shape(self) -> tuple[int, int, int]:
        """(terminals, paths, days)."""
        return self.demand.shape

    @property
    def committed(self) -> np.ndarray:
        """[T, D] bool: committed visits (must be kept)."""
        return ~np.isnan(self.fixed_load)

    def subset(self, terminals: np.ndarray) -> "PlanningProblem":
        """The problem restricted to some terminals (indices or a bool mask), all depots kept."""
        idx = np.flatnonzero(terminals) if np.asarray(terminals).dtype == bool \
            else np.asarray(terminals, dtype=int)
        return PlanningProblem(
            terminal_ids=tuple(self.terminal_ids[i] for i in idx),
            depots=self.depots, depot_of=self.depot_of[idx], dates=self.dates,
            horizon_days=self.horizon_days, demand=self.demand[idx],
            start_balance=self.start_balance[idx], limit=self.limit[idx],
            bundle=self.bundle[idx], allowed=self.allowed[idx],
            fixed_load=self.fixed_load[idx], visit_fee=self.visit_fee[idx],
            crew_limit=self.crew_limit, rates=self.rates, mode=self.mode,
            max_dry_probability=self.max_dry_probability,
            dry_allowance=None if self.dry_allowance is None else self.dry_allowance[idx],
            lock_days=self.lock_days,
            visit_weekdays=None if self.visit_weekdays is None else self.visit_weekdays[idx],
            limit_names=None if self.limit_names is None
            else tuple(self.limit_names[i] for i in idx))


@dataclass(frozen=True)
class PlanResult:
    """A plan and how good it is.

    ``visits`` ``[T, D]`` bool, ``loads`` ``[T, D]`` (0 where no visit). ``objective`` is the
    expected cost summed over terminals (= ``ledger.expected_cost().sum()``), ``bound`` the best
    lower bound proven, ``gap = (objective − bound) / objective``. ``status`` is ``"optimal"``
    (gap within the tolerance), ``"time_limit"`` (best plan found when time ran out, with its
    gap) or ``"feasible"``. ``notes`` has one text per terminal ("" when the service target is
    met as asked); ``dry_probability`` ``[T]`` is each terminal's worst cycle: the largest
    share of paths that run dry before the next visit, over the cycles of the planned window.
    """

    visits: np.ndarray
    loads: np.ndarray
    status: str
    objective: float
    bound: float
    gap: float
    solver: str
    time_s: float
    notes: tuple[str, ...]
    dry_probability: np.ndarray
    ledger: Ledger
    iterations: int = 0
    log: tuple[str, ...] = field(default=())

    @property
    def reachable(self) -> np.ndarray:
        """``[T]`` bool: the terminal's target can be met at all (its note does not say it
        cannot; crews too few for every target still count as reachable)."""
        return np.array([not note.startswith("target") for note in self.notes], dtype=bool)


# --------------------------------------------------------------------------------------------
# Building the problem from a scenario
# --------------------------------------------------------------------------------------------


def build_problem(scenario, paths: np.ndarray, dates, *, tail_days: int,
                  terminal_ids: list[str] | tuple[str, ...] | None = None) -> PlanningProblem:
    """Turn a :class:`planner.scenario.Scenario` and demand paths into a :class:`PlanningProblem`.

    ``paths`` ``[T, P, D]`` (currency per day, ≥ 0) in the order of ``terminal_ids`` (default:
    the scenario's terminal order); ``dates`` the ``D`` days of the paths (horizon + tail days;
    when shorter, continued day by day from its first day). The horizon is ``D − tail_days``
    days. Allowed days come from each terminal's ``visit_days``; in the first ``lock_days``
    days only committed visits happen; visit fees are the terminal's own ``visit_fee`` when
    given, else the scenario's fee of the weekday; crew limits are the depots' Mon…Sun columns.

    Raises ``ValueError`` when the paths do not match the terminals or the tail leaves no horizon.
    """
    terminals = scenario.terminals
    ids = tuple(terminal_ids) if terminal_ids is not None else tuple(terminals.index)
    demand = np.asarray(paths, dtype=float)
    if demand.ndim != 3 or demand.shape[0] != len(ids):
        raise ValueError(f"paths must be [terminal, path, day] for {len(ids)} terminals, got "
                         f"shape {demand.shape}")
    t_count, _, d_count = demand.shape
    horizon = d_count - int(tail_days)
    if horizon < 1:
        raise ValueError(f"{d_count} days of paths leave no horizon after {tail_days} tail days")
    dates = pd.DatetimeIndex(dates)
    if len(dates) != d_count:
        dates = pd.date_range(pd.Timestamp(dates[0]).normalize(), periods=d_count, freq="D")
    weekday = dates.day_of_week.to_numpy()

    rows = terminals.loc[list(ids)]
    depots = tuple(scenario.depots.index)
    depot_of = np.array([depots.index(d) for d in rows["depot"]], dtype=int)
    crew_limit = scenario.depots[list(WEEKDAY_NAMES)].to_numpy(dtype=int)[:, weekday]

    allowed_weekdays = np.array([list(w) for w in rows["allowed_weekdays"]], dtype=bool)
    allowed = allowed_weekdays[:, weekday]
    allowed[:, : min(int(scenario.lock_days), d_count)] = False

    fixed_load = np.full((t_count, d_count), np.nan)
    position = {tid: i for i, tid in enumerate(ids)}
    day_of = {pd.Timestamp(d): j for j, d in enumerate(dates)}
    for tid, date, load in zip(scenario.committed["terminal_id"], scenario.committed["date"],
                               scenario.committed["load"]):
        i, j = position.get(tid), day_of.get(pd.Timestamp(date))
        if i is not None and j is not None:
            fixed_load[i, j] = float(load)
    committed = ~np.isnan(fixed_load)

    # a day on which the depot's crews are all taken by committed visits offers no free visit
    taken = np.zeros_like(crew_limit)
    np.add.at(taken, depot_of, committed.astype(int))
    allowed &= (crew_limit - taken)[depot_of] > 0
    allowed |= committed

    costs = scenario.costs
    by_weekday = np.array([costs.visit_fee_on(w) for w in weekday], dtype=float)
    own_fee = rows["visit_fee"].to_numpy(dtype=float)
    visit_fee = np.where(np.isnan(own_fee)[:, None], by_weekday[None, :], own_fee[:, None])

    return PlanningProblem(
        terminal_ids=ids,
        depots=depots,
        depot_of=depot_of,
        dates=dates,
        horizon_days=horizon,
        demand=demand,
        start_balance=rows["balance_now"].to_numpy(dtype=float),
        limit=rows["limit"].to_numpy(dtype=float),
        bundle=rows["bundle"].to_numpy(dtype=float),
        allowed=allowed,
        fixed_load=fixed_load,
        visit_fee=visit_fee,
        crew_limit=crew_limit,
        rates=CostRates.from_settings(costs),
        mode=scenario.replenishment,
        max_dry_probability=float(scenario.max_dry_probability),
        lock_days=int(scenario.lock_days),
        visit_weekdays=allowed_weekdays,
        limit_names=tuple(np.where(rows["insurance_limit"] < rows["capacity"],
                                   "insurance limit", "capacity")),
    )


# --------------------------------------------------------------------------------------------
# Shared rules: evaluation, service target, results
# --------------------------------------------------------------------------------------------


def evaluate_plan(problem: PlanningProblem, visits: np.ndarray, loads: np.ndarray) -> Ledger:
    """The exact accounting of a plan on the problem's paths (:func:`planner.costs.simulate`)."""
    return simulate(visits, loads, problem.start_balance, problem.demand, problem.limit,
                    problem.visit_fee, problem.rates, problem.mode)


def target_dry_paths(problem: PlanningProblem) -> int:
    """Paths per cycle allowed to run dry by the target as asked (before calibration)."""
    return int(math.floor(problem.max_dry_probability * problem.shape[1] + 1e-9))


def max_service_plan(problem: PlanningProblem) -> tuple[np.ndarray, np.ndarray]:
    """Visits and loads that keep each terminal as far from dry as it can get on its own.

    A visit with a full load (the limit) on every allowed day, committed loads kept. Whatever
    plan a terminal follows, its balance on every path and day is at most this plan's (a later
    visit and a fuller load never lower the balance, in swap and in top-up mode), so no plan
    has fewer dry paths.
    """
    visits = problem.allowed.copy()
    loads = np.where(problem.committed, problem.fixed_load,
                     np.where(visits, problem.limit[:, None], 0.0))
    return visits, loads


@dataclass(frozen=True)
class ServiceRule:
    """How many paths each cycle of a terminal may have dry (the service target as counts).

    Cycles are indexed by their start: ``0`` the start balance's cycle (day 0 until the first
    visit), ``a + 1`` the cycle of a visit on day ``a``.

    - ``allowed_dry`` ``[T]``: in-sample dry paths per cycle (the target, or the calibrated
      level of :mod:`planner.optimize.calibrate`).
    - ``shortest_end`` ``[T, D + 1]``: the end (next possible visit, ``D`` = window's end) of the
      shortest cycle from each start; ``unavoidable`` ``[T, D + 1]``: its dry paths with a full
      load (committed loads kept), the least any plan can reach on that cycle.
    - ``notes`` ``[T]``: why the target cannot be met ("" when it can).
    """

    allowed_dry: np.ndarray
    shortest_end: np.ndarray
    unavoidable: np.ndarray
    notes: tuple[str, ...]

    def take(self, rows: np.ndarray) -> "ServiceRule":
        """The rule of some terminals (indices)."""
        rows = np.asarray(rows, dtype=int)
        return ServiceRule(self.allowed_dry[rows], self.shortest_end[rows],
                           self.unavoidable[rows], tuple(self.notes[i] for i in rows))

    def allowance(self, start: np.ndarray, end: np.ndarray,
                  rows: np.ndarray | slice = slice(None)) -> np.ndarray:
        """Dry paths allowed to cycles from ``start`` (index as above, ``[n, …]``) to ``end``
        for terminals ``rows`` (broadcast against the leading axis)."""
        short = np.take_along_axis(self.shortest_end[rows], start, axis=1)
        least = np.take_along_axis(self.unavoidable[rows], start, axis=1)
        base = self.allowed_dry[rows].reshape((-1,) + (1,) * (np.ndim(start) - 1))
        return np.where(end == short, np.maximum(base, least), base)

    def excess(self, visits: np.ndarray, counts: np.ndarray,
               rows: np.ndarray | slice = slice(None)) -> np.ndarray:
        """``[n]`` dry paths above the allowance, summed over the cycles of plans ``visits``
        ``[n, D]`` whose cycle dry counts are ``counts`` ``[n, D]``
        (:func:`planner.costs.cycle_dry_counts`)."""
        ends = cycle_ends(visits)
        has = ends >= 0
        start = np.where(np.asarray(visits, bool), np.arange(visits.shape[1]) + 1, 0)
        allow = self.allowance(start, np.where(has, ends, 0), rows)
        return np.where(has, np.maximum(counts - allow, 0), 0).sum(axis=1)


def service_rule(problem: PlanningProblem) -> ServiceRule:
    """The :class:`ServiceRule` of a problem, from one simulation of the
    :func:`max_service_plan` (whose cycles are exactly the shortest cycle from every start)."""
    t_count, p_count, d_count = problem.shape
    visits, loads = max_service_plan(problem)
    ledger = evaluate_plan(problem, visits, loads)
    counts = cycle_dry_counts(ledger, visits)
    ends = cycle_ends(visits)
    shortest_end = np.full((t_count, d_count + 1), d_count)
    unavoidable = np.zeros((t_count, d_count + 1), dtype=np.int64)
    first = np.where(visits.any(axis=1), visits.argmax(axis=1), d_count)
    shortest_end[:, 0] = first
    start_cycle = ~visits[:, 0]
    unavoidable[:, 0] = np.where(start_cycle, counts[:, 0], 0)
    t_idx, a_idx = np.nonzero(visits)
    shortest_end[t_idx, a_idx + 1] = ends[t_idx, a_idx]
    unavoidable[t_idx, a_idx + 1] = counts[t_idx, a_idx]
    if problem.dry_allowance is not None:
        allowed = np.asarray(problem.dry_allowance, dtype=np.int64).reshape(t_count)
    else:
        allowed = np.full(t_count, target_dry_paths(problem), dtype=np.int64)
    target = target_dry_paths(problem)
    notes = []
    for t in range(t_count):
        worst = int(unavoidable[t].max(initial=0))
        if worst <= target:
            notes.append("")
            continue
        j = int(unavoidable[t].argmax())
        share = worst / p_count
        head = (f"target {problem.max_dry_probability:.1%} not reachable: at best "
                f"{share:.1%} of paths run dry in one cycle")
        notes.append(f"{head}; {_dry_cause(problem, t, visits[t], ledger.dry[t], j)}")
    return ServiceRule(allowed_dry=allowed, shortest_end=shortest_end,
                       unavoidable=unavoidable, notes=tuple(notes))


def target_notes(problem: PlanningProblem) -> tuple[str, ...]:
    """Per terminal, why the service target cannot be met ("" when it can)."""
    return service_rule(problem).notes


def _dry_cause(problem: PlanningProblem, t: int, visits: np.ndarray, dry: np.ndarray,
               start: int) -> str:
    """Plain words for the cause of the dry days that no plan can avoid in the shortest cycle
    from ``start`` (0 = the start balance, ``a + 1`` = a visit on day ``a``)."""
    d_count = visits.size
    lo = 0 if start == 0 else start - 1
    later = np.flatnonzero(visits[lo + 1:])
    hi = lo + 1 + int(later[0]) if later.size else d_count
    days = dry[:, lo:hi].sum(axis=0)            # dry paths per day of that cycle
    worst = lo + int(np.argmax(days))
    before = np.flatnonzero(visits[: worst + 1]) if start else np.zeros(0, int)
    when = f"{WEEKDAY_NAMES[problem.dates[worst].weekday()]} {problem.dates[worst]:%Y-%m-%d}"
    if before.size == 0:
        if problem.allowed[t].any():
            first = int(np.flatnonzero(problem.allowed[t])[0])
            return (f"the start balance {problem.start_balance[t]:,.0f} runs out before the "
                    f"first possible visit on {problem.dates[first]:%a %Y-%m-%d} "
                    f"(lock days, visit days or crews), e.g. on {when}")
        return "no visit is possible in the planned window (visit days, lock days or crews)"
    last = int(before[-1])
    if problem.committed[t, last]:
        return (f"the committed load {problem.fixed_load[t, last]:,.0f} on "
                f"{problem.dates[last]:%a %Y-%m-%d} does not last until the next possible "
                f"visit, e.g. dry on {when}")
    if last == worst:
        return (f"demand above the limit {problem.limit[t]:,.0f} even with daily visits, "
                f"e.g. on {when}")
    return (f"too few allowed visit days: no visit possible between "
            f"{problem.dates[last]:%a %Y-%m-%d} and {when} with a full load of "
            f"{problem.limit[t]:,.0f}")


def result_from_plan(problem: PlanningProblem, visits: np.ndarray, loads: np.ndarray, *,
                     status: str, bound: float, solver: str, time_s: float,
                     notes: tuple[str, ...] | None = None, iterations: int = 0,
                     log: tuple[str, ...] = ()) -> PlanResult:
    """Evaluate a plan exactly and package it as a :class:`PlanResult` (objective, gap)."""
    visits = np.asarray(visits, dtype=bool)
    loads = np.where(visits, np.asarray(loads, dtype=float), 0.0)
    ledger = evaluate_plan(problem, visits, loads)
    objective = float(ledger.expected_cost().sum())
    gap = relative_gap(objective, bound)
    if notes is None:
        notes = target_notes(problem)
    return PlanResult(visits=visits, loads=loads, status=status, objective=objective,
                      bound=float(bound), gap=gap, solver=solver, time_s=float(time_s),
                      notes=tuple(notes), dry_probability=cycle_dry_shares(ledger, visits)[0],
                      ledger=ledger, iterations=iterations, log=tuple(log))


def relative_gap(objective: float, bound: float) -> float:
    """``(objective − bound) / |objective|`` (0 when both are 0; ``inf`` without a bound)."""
    if not np.isfinite(bound):
        return math.inf
    if abs(objective) < 1e-12:
        return 0.0 if bound >= objective - 1e-9 else math.inf
    return max(0.0, (objective - bound) / abs(objective))


def next_visits(visits: np.ndarray) -> np.ndarray:
    """``[T, D]`` the day of the next visit after each day (``D`` when none)."""
    t_count, d_count = visits.shape
    out = np.full((t_count, d_count), d_count)
    nxt = np.full(t_count, d_count)
    for d in range(d_count - 1, -1, -1):
        out[:, d] = nxt
        nxt = np.where(visits[:, d], d, nxt)
    return out
