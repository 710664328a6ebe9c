"""The plan as tables for the run folder: one row per visit, and cash per depot and day.

Each visit's reason is put together from facts that :func:`plan_frame` also writes as columns,
so that a reader (or a test) can check every word against the plan:

- ``next_visit`` and ``next_visit_in``: the terminal's next planned visit and whether it lies in
  the horizon (a row of plan.csv), in the look-ahead (planned but not committed, not in
  plan.csv) or nowhere in the planned window;
- ``load_stop``: why the load is what it is — ``committed`` (committed.csv), ``limit`` (the
  balance limit, capacity or insurance, whichever is lower), ``target`` (one bundle less would
  let this cycle run dry on more paths than the service target allows), ``cost`` (one bundle
  less keeps the target but raises the expected cost), ``solver`` (one bundle less would be
  cheaper: a saving the solver did not find, within its gap or by a preview rule) or ``empty`` (no cash loaded);
- when the cycle's dry risk is above the target, what stood in the way: a load at its limit
  (or committed) and, for every day before the next visit, why no visit could be made that
  day (a lock day, not one of the terminal's visit days, crews taken by committed visits, or
  every crew of the depot busy) — or, when a day was open, that it was.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from planner.costs import PERIODS, REDUCE_BLOCK, cycle_dry_counts, simulate
from planner.optimize.problem import (WEEKDAY_NAMES, PlanningProblem, PlanResult,
                                      next_visits, target_dry_paths)

LOAD_STOPS = ("committed", "limit", "target", "cost", "solver", "empty")
PERIOD_NAMES = (*PERIODS, "none")   # where the next visit lies: a period of costs.csv, or none
MAX_RUNS = 4      # closed spells named one by one; more are counted by cause
BY_COUNT = {"a lock day": "locked", "not a visit day": "outside the visit days",
            "no visit allowed": "closed"}   # others: "with " + cause
PLURAL = {"a lock day": "lock days", "not a visit day": "not visit days"}
PLAN_COLUMNS = ["terminal_id", "depot", "date", "load", "expected_residual", "dry_probability",
                "next_visit", "next_visit_in", "load_stop", "reason"]


@dataclass(frozen=True)
class Trial:
    """What another load at one visit would do, everything else as planned: ``dry`` paths with
    a dry day in the visit's cycle, ``extra_cost`` the change of the terminal's expected cost
    (positive: dearer)."""

    dry: np.ndarray
    extra_cost: np.ndarray


def trial_loads(problem: PlanningProblem, result: PlanResult, terminals: np.ndarray,
                days: np.ndarray, loads: np.ndarray) -> Trial:
    """Re-run each terminal's accounting with load ``loads[i]`` at the visit ``days[i]`` (one
    trial per pair ``terminals[i]``, ``days[i]``)."""
    n = len(terminals)
    dry = np.zeros(n, dtype=np.int64)
    extra = np.zeros(n)
    _, p_count, d_count = problem.shape
    step = max(1, REDUCE_BLOCK // max(p_count * d_count, 1))
    base = result.ledger.expected_cost()
    for i in range(0, n, step):
        t, d = terminals[i:i + step], days[i:i + step]
        rows = np.arange(len(t))
        planned = result.loads[t].copy()
        planned[rows, d] = loads[i:i + step]
        visits = result.visits[t]
        ledger = simulate(visits, planned, problem.start_balance[t], problem.demand[t],
                          problem.limit[t], problem.visit_fee[t], problem.rates, problem.mode)
        dry[i:i + step] = cycle_dry_counts(ledger, visits)[rows, d]
        extra[i:i + step] = ledger.expected_cost() - base[t]
    return Trial(dry, extra)


def plan_frame(problem: PlanningProblem, result: PlanResult) -> pd.DataFrame:
    """One row per visit within the horizon, by terminal and date.

    Columns: ``terminal_id``, ``depot``, ``date``, ``load`` (currency), ``expected_residual``
    (mean residual (swap) or excess (top-up) returned at this visit), ``dry_probability``
    (share of paths with a dry day from this visit until the next one, or the window's end),
    ``next_visit`` (date; empty when none in the window), ``next_visit_in`` (``horizon``,
    ``look_ahead`` or ``none``), ``load_stop`` (one of :data:`LOAD_STOPS`) and ``reason``
    (plain words built from these facts; module text).
    """
    horizon = problem.horizon_days
    t_count, p_count, d_count = problem.shape
    terminals, days = np.nonzero(result.visits[:, :horizon])
    if terminals.size == 0:
        frame = pd.DataFrame(columns=PLAN_COLUMNS)
        frame["date"] = pd.to_datetime(frame["date"])
        frame["next_visit"] = pd.to_datetime(frame["next_visit"])
        return frame
    ledger = result.ledger
    ends = next_visits(result.visits)[terminals, days]
    dry = cycle_dry_counts(ledger, result.visits)[terminals, days]
    allowance = (np.full(t_count, target_dry_paths(problem)) if problem.dry_allowance is None
                 else np.asarray(problem.dry_allowance))[terminals]
    load = result.loads[terminals, days]
    bundle = problem.bundle[terminals]
    committed = problem.committed[terminals, days]
    at_limit = ~committed & (load > problem.limit[terminals] - bundle / 2)
    empty = ~committed & ~at_limit & (load < bundle / 2)
    trial = ~committed & ~at_limit & ~empty
    less = trial_loads(problem, result, terminals[trial], days[trial],
                       load[trial] - bundle[trial])
    stop = np.select([committed, at_limit, empty], ["committed", "limit", "empty"], "cost")
    trial_stop = np.where((dry[trial] <= allowance[trial]) & (less.dry > allowance[trial]),
                          "target", np.where(less.extra_cost >= -1e-6, "cost", "solver"))
    stop[trial] = trial_stop
    extra = np.full(len(terminals), np.nan)
    extra[trial] = less.extra_cost
    # over the target with room left: what the fullest load would have reached
    short = ~committed & ~at_limit & (dry / p_count > problem.max_dry_probability + 1e-12)
    full_dry = np.full(len(terminals), -1, dtype=np.int64)
    full_dry[short] = trial_loads(problem, result, terminals[short], days[short],
                                  problem.limit[terminals[short]]).dry

    used = np.zeros_like(problem.crew_limit)
    np.add.at(used, problem.depot_of, result.visits.astype(int))
    share = dry / p_count
    rows = []
    for i, (t, d) in enumerate(zip(terminals, days)):
        e = int(ends[i])
        in_horizon, in_look_ahead, nowhere = PERIOD_NAMES
        where = in_horizon if e < horizon else (in_look_ahead if e < d_count else nowhere)
        facts = _Facts(problem, int(t), int(d), e, where, str(stop[i]), float(load[i]),
                       float(extra[i]), int(allowance[i]), float(share[i]),
                       int(full_dry[i]), used)
        rows.append({
            "terminal_id": problem.terminal_ids[t],
            "depot": problem.depots[problem.depot_of[t]],
            "date": problem.dates[d],
            "load": float(load[i]),
            "expected_residual": float(ledger.returned[t, :, d].mean()),
            "dry_probability": float(share[i]),
            "next_visit": problem.dates[e] if e < d_count else pd.NaT,
            "next_visit_in": where,
            "load_stop": str(stop[i]),
            "reason": facts.reason(),
        })
    frame = pd.DataFrame(rows, columns=PLAN_COLUMNS)
    frame["next_visit"] = pd.to_datetime(frame["next_visit"])
    return frame.sort_values(["terminal_id", "date"], ignore_index=True)


def _day(date) -> str:
    return f"{WEEKDAY_NAMES[date.weekday()]} {date:%d %b}"


@dataclass(frozen=True)
class _Facts:
    """One visit's facts and the sentence made of them."""

    problem: PlanningProblem
    t: int
    d: int
    end: int              # next visit (D: none in the window)
    where: str            # PERIOD_NAMES
    stop: str             # LOAD_STOPS
    load: float
    extra_cost: float     # one bundle less: change of the expected cost (NaN: not tried)
    allowance: int        # in-sample dry paths the cycle may have
    dry: float            # the cycle's dry share
    full_dry: int         # dry paths of the cycle with the fullest load (-1: not tried)
    used: np.ndarray      # [K, D] visits planned per depot and day

    def reason(self) -> str:
        words = [self._load_words(), self._next_words()]
        target = self.problem.max_dry_probability
        if self.dry > target + 1e-12:
            words.append(f"dry risk {self.dry:.1%} is above the {target:.1%} target: "
                         + self._why_over())
        return "; ".join(words)

    @property
    def limit_name(self) -> str:
        names = self.problem.limit_names
        return names[self.t] if names is not None else "balance limit"

    def _load_words(self) -> str:
        p = self.problem
        if self.stop == "committed":
            return "committed load"
        if self.stop == "limit":
            return f"loaded to the {self.limit_name} ({p.limit[self.t]:,.0f})"
        if self.stop == "empty":
            return "no cash loaded"
        if self.stop == "target":
            planned = self.allowance / p.shape[1]
            text = "least load that keeps the dry risk within the target"
            if self.allowance != target_dry_paths(p):
                text += f" (held at {planned:.1%} on these paths, set by calibration)"
            return text
        if self.stop == "cost":
            text = f"one bundle less would raise the expected cost by {self.extra_cost:,.0f}"
            return text if self.dry > self.problem.max_dry_probability + 1e-12 \
                else "more than the target needs: " + text
        return (f"one bundle less would lower the expected cost by {-self.extra_cost:,.0f} "
                f"(a saving the solver did not find)")

    def _next_words(self) -> str:
        dates = self.problem.dates
        if self.where == "horizon":
            return f"next visit {_day(dates[self.end])}"
        if self.where == "look_ahead":
            return (f"next visit {_day(dates[self.end])}, after the horizon (look-ahead: "
                    f"planned, not committed)")
        return f"no further visit planned up to the window's end ({_day(dates[-1])})"

    def _why_over(self) -> str:
        p = self.problem
        if self.stop == "committed":
            load = "the load is committed"
        elif self.stop == "limit":
            load = f"the load is at the {self.limit_name}"
        else:
            full = self.full_dry / p.shape[1]
            fill = "topping up to" if p.mode == "topup" else "a load at"
            if full > p.max_dry_probability + 1e-12:
                load = f"even {fill} the {self.limit_name} would leave {full:.1%} dry"
            else:
                return (f"{fill} the {self.limit_name} would bring it to {full:.1%} but was "
                        f"not planned")
        between = range(self.d + 1, self.end)
        if not between:
            return f"{load}; the next visit is the following day"
        causes = [(j, self.closed_because(j)) for j in between]
        open_days = [j for j, why in causes if why is None]
        if open_days:
            shown = ", ".join(_day(p.dates[j]) for j in open_days[:3])
            more = f" and {len(open_days) - 3} more" if len(open_days) > 3 else ""
            return f"{load}; a visit was possible on {shown}{more} but not planned"
        runs: list[list] = []
        for j, why in causes:
            if runs and runs[-1][2] == why and runs[-1][1] == j - 1:
                runs[-1][1] = j
            else:
                runs.append([j, j, why])
        if len(runs) <= MAX_RUNS:
            shown = "; ".join(
                f"{_day(p.dates[a])} {why}" if a == b
                else f"{_day(p.dates[a])}–{_day(p.dates[b])} {PLURAL.get(why, why)}"
                for a, b, why in runs)
        else:
            count: dict[str, int] = {}
            for _, why in causes:
                count[why] = count.get(why, 0) + 1
            shown = (f"of the {len(causes)} days from {_day(p.dates[self.d + 1])} to "
                     f"{_day(p.dates[self.end - 1])}, " + ", ".join(
                         f"{n} {'day' if n == 1 else 'days'} {BY_COUNT.get(why, 'with ' + why)}"
                         for why, n in count.items()))
        return f"{load}, and no sooner visit could be made: {shown}"

    def closed_because(self, j: int) -> str | None:
        """Why no visit of this terminal could be added on day ``j`` (``None``: it could)."""
        p = self.problem
        k = p.depot_of[self.t]
        crews = int(p.crew_limit[k, j])
        if not p.allowed[self.t, j]:
            if j < p.lock_days:
                return "a lock day"
            if p.visit_weekdays is not None and not p.visit_weekdays[self.t, p.dates[j].weekday()]:
                return "not a visit day"
            if crews == 0:
                return "no crew"
            if p.visit_weekdays is not None:
                return "crews taken by committed visits"
            return "no visit allowed"
        if self.used[k, j] >= crews:
            return f"all {crews} crews busy" if crews != 1 else "the one crew busy"
        return None


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
