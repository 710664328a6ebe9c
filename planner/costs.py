"""The one accounting of a day at a cash machine (README, "How a plan is made").

Every stage that costs anything — the optimizer, the plan simulator, the backtest, the baselines
and the perfect-foresight bound — uses :func:`simulate`, so figures agree everywhere.

Rules, per terminal, demand path and day ``t`` (amounts in currency units):

- A visit happens at the start of day ``t``, before withdrawals.

  - swap: the residual (balance before the visit) goes back to the vault and the balance
    becomes the load; handling is paid on load + residual.
  - top-up: the balance becomes ``min(balance before + load, limit)``; what does not fit
    (the excess) goes back; handling is paid on load + excess.
  - the visit fee of the day is paid per visit (the same on every path).

- dispensed = min(demand, balance); the day is dry when demand > balance (strictly);
  shortfall = demand − dispensed. Dry-day penalty per dry day, shortfall penalty per 1,000 short.
- end balance = balance − dispensed; carry cost = ``carry_rate_daily`` × end balance.

With swap, starting from a visit with load ``L`` on day ``a`` and cumulative demand
``C(a, t) = demand[a] + … + demand[t]``, the machine is dry on day ``t`` (before the next visit)
iff ``C(a, t) > L`` and ``demand[t] > 0`` (an empty machine is not dry on a day without
demand); it has a dry day in ``a … e`` iff ``C(a, e) > L``; its end balance is
``max(L − C(a, t), 0)``, the shortfall over the cycle is ``max(C(a, b − 1) − L, 0)`` and the
residual returned at the next visit on day ``b`` is ``max(L − C(a, b − 1), 0)``: the cost
separates by cycle between visits, which the optimizer exploits (``planner.optimize``).
"""
from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
import pandas as pd

MODES = ("swap", "topup")
PART_COLUMNS = ("carry", "visit", "handling", "dry_penalty", "shortfall_penalty", "total")
# The planned window in two periods: the horizon (the days plan.csv commits and lists) and the
# look-ahead after it (planned so that the horizon ends well, neither committed nor listed)
PERIODS = ("horizon", "look_ahead")
PERIOD_LABELS = {"horizon": "horizon", "look_ahead": "look-ahead"}
REDUCE_BLOCK = 1 << 20          # values per block when summing a ledger without full copies


@dataclass(frozen=True)
class CostRates:
    """Cost rates in currency units.

    ``carry_rate_daily``: cost of one unit held overnight for one day (annual rate / 365).
    ``handling_per_1000``: fee per 1,000 units loaded and per 1,000 units returned.
    ``dry_day_penalty``: cost of one dry day. ``shortfall_penalty_per_1000``: cost per 1,000
    units of demand that could not be served.
    """

    carry_rate_daily: float
    handling_per_1000: float
    dry_day_penalty: float
    shortfall_penalty_per_1000: float = 0.0

    @classmethod
    def from_settings(cls, costs) -> "CostRates":
        """Rates from a :class:`planner.scenario.CostSettings`."""
        return cls(carry_rate_daily=float(costs.carry_rate_daily),
                   handling_per_1000=float(costs.handling_per_1000),
                   dry_day_penalty=float(costs.dry_day_penalty),
                   shortfall_penalty_per_1000=float(costs.shortfall_penalty_per_1000))


@dataclass(frozen=True)
class Ledger:
    """Arrays ``[terminal, path, day]`` unless noted; amounts and costs in currency units.

    The balance after each visit, the amounts returned, the loads and the demand are kept; the
    other arrays (``dispensed``, ``dry``, ``shortfall``, ``end_balance``, ``carry``,
    ``handling``, ``dry_penalty``, ``shortfall_penalty``) are derived from them on first use,
    so a ledger of many terminals costs only what is read from it.
    """

    balance_open: np.ndarray    # balance after the visit, before withdrawals
    returned: np.ndarray        # residual (swap) or excess (top-up) returned at a visit
    visit: np.ndarray           # [terminal, day] visit fees paid (deterministic)
    loads: np.ndarray           # [terminal, day] loads (0 without a visit)
    demand: np.ndarray
    rates: CostRates

    @cached_property
    def dispensed(self) -> np.ndarray:
        return np.minimum(self.demand, self.balance_open)

    @cached_property
    def dry(self) -> np.ndarray:
        """bool: demand above the balance (strictly)."""
        return self.demand > self.balance_open

    @cached_property
    def shortfall(self) -> np.ndarray:
        return np.maximum(self.demand - self.balance_open, 0.0)

    @cached_property
    def end_balance(self) -> np.ndarray:
        return np.maximum(self.balance_open - self.demand, 0.0)

    @cached_property
    def carry(self) -> np.ndarray:
        return self.rates.carry_rate_daily * self.end_balance

    @cached_property
    def handling(self) -> np.ndarray:
        return (self.rates.handling_per_1000 / 1000.0) * (self.returned + self.loads[:, None, :])

    @cached_property
    def dry_penalty(self) -> np.ndarray:
        return self.rates.dry_day_penalty * self.dry

    @cached_property
    def shortfall_penalty(self) -> np.ndarray:
        return (self.rates.shortfall_penalty_per_1000 / 1000.0) * self.shortfall

    def _part_sums(self, days: slice = slice(None)) -> dict[str, np.ndarray]:
        """``[terminal, path]`` sums over ``days`` of each cost part (visit fees ``[terminal,
        1]``), computed block by block of terminals so that no full-size temporary is
        needed; kept per day range."""
        t_count, p_count, d_count = self.balance_open.shape
        key = ("_sums", *days.indices(d_count))
        if key not in self.__dict__:
            r = self.rates
            held = np.empty((t_count, p_count))
            short = np.empty((t_count, p_count))
            dry = np.empty((t_count, p_count))
            width = len(range(*days.indices(d_count)))
            step = max(1, REDUCE_BLOCK // max(p_count * width, 1))
            for i in range(0, t_count, step):
                b, d = self.balance_open[i:i + step, :, days], self.demand[i:i + step, :, days]
                gap = b - d
                dry[i:i + step] = (gap < 0).sum(axis=2)          # demand > balance
                np.maximum(gap, 0.0, out=gap)
                held[i:i + step] = gap.sum(axis=2)
                np.subtract(d, b, out=gap)
                np.maximum(gap, 0.0, out=gap)
                short[i:i + step] = gap.sum(axis=2)
            self.__dict__[key] = {
                "carry": r.carry_rate_daily * held,
                "visit": self.visit[:, days].sum(axis=1)[:, None].astype(float),
                "handling": (r.handling_per_1000 / 1000.0)
                * (self.returned[:, :, days].sum(axis=2)
                   + self.loads[:, days].sum(axis=1)[:, None]),
                "dry_penalty": r.dry_day_penalty * dry,
                "shortfall_penalty": (r.shortfall_penalty_per_1000 / 1000.0) * short,
            }
        return self.__dict__[key]

    def total(self, days: slice = slice(None)) -> np.ndarray:
        """``[terminal, path]`` cost over ``days`` (all days by default)."""
        s = self._part_sums(days)
        return (s["carry"] + s["handling"] + s["dry_penalty"] + s["shortfall_penalty"]
                + s["visit"])

    def expected_cost(self, days: slice = slice(None)) -> np.ndarray:
        """``[terminal]`` expected cost (mean over paths) over ``days`` (all by default)."""
        return self.total(days).mean(axis=1)

    def parts(self, days: slice = slice(None)) -> pd.DataFrame:
        """Expected cost parts per terminal over ``days`` (all by default; one row per
        terminal, in terminal order).

        Columns ``carry, visit, handling, dry_penalty, shortfall_penalty, total``.
        """
        s = self._part_sums(days)
        frame = pd.DataFrame({
            "carry": s["carry"].mean(axis=1),
            "visit": s["visit"][:, 0],
            "handling": s["handling"].mean(axis=1),
            "dry_penalty": s["dry_penalty"].mean(axis=1),
            "shortfall_penalty": s["shortfall_penalty"].mean(axis=1),
        })
        frame["total"] = self.expected_cost(days)
        return frame

    def period_parts(self, horizon_days: int) -> pd.DataFrame:
        """Expected cost parts per terminal and period: the horizon (its first
        ``horizon_days`` days, which plan.csv lists) and the look-ahead after it. One row per
        terminal and period, terminal order then period order; columns ``period``
        (:data:`PERIODS`) and those of :meth:`parts`. The two periods add up to
        :meth:`parts` over all days."""
        frames = []
        for name, days in period_slices(horizon_days).items():
            frame = self.parts(days)
            frame.insert(0, "period", name)
            frame.insert(0, "_terminal", np.arange(len(frame)))
            frames.append(frame)
        both = pd.concat(frames, ignore_index=True)
        both["_order"] = both["period"].map({p: i for i, p in enumerate(PERIODS)})
        both = both.sort_values(["_terminal", "_order"], kind="stable", ignore_index=True)
        return both.drop(columns=["_terminal", "_order"])

    def dry_probability(self, days: int | None = None) -> np.ndarray:
        """``[terminal]`` share of paths with at least one dry day in the first ``days`` days
        (all days when ``None``)."""
        return self.dry_paths(days).mean(axis=1)

    def dry_paths(self, days: int | None = None) -> np.ndarray:
        """``[terminal, path]`` bool: the path has at least one dry day in the first ``days``
        days (all days when ``None``)."""
        t_count, p_count, d_count = self.balance_open.shape
        days = d_count if days is None else min(days, d_count)
        if days <= 0:
            return np.zeros((t_count, p_count), bool)
        if "dry" in self.__dict__:
            return self.dry[:, :, :days].any(axis=2)
        out = np.empty((t_count, p_count), bool)
        step = max(1, REDUCE_BLOCK // max(p_count * days, 1))
        for i in range(0, t_count, step):
            out[i:i + step] = (self.demand[i:i + step, :, :days]
                               > self.balance_open[i:i + step, :, :days]).any(axis=2)
        return out


def period_slices(horizon_days: int) -> dict[str, slice]:
    """The days of each of :data:`PERIODS`: ``horizon`` = the first ``horizon_days`` days,
    ``look_ahead`` = the rest of the planned window."""
    return {"horizon": slice(0, int(horizon_days)), "look_ahead": slice(int(horizon_days), None)}


def period_totals(parts: pd.DataFrame) -> dict[str, dict[str, float]]:
    """Network sums of a :meth:`Ledger.period_parts` frame: ``{period: {part: sum}}``."""
    columns = [c for c in PART_COLUMNS if c in parts]
    return {p: {c: float(parts.loc[parts["period"] == p, c].sum()) for c in columns}
            for p in PERIODS}


def cycle_ends(visits: np.ndarray) -> np.ndarray:
    """``[T, D]`` for every day that starts a cycle, the day its cycle ends (exclusive: the
    next visit, or ``D``); ``-1`` on other days.

    A cycle starts on every visit day; the start balance's cycle starts on day 0 when there is
    no visit that day (and is empty otherwise).
    """
    visits = np.asarray(visits, dtype=bool)
    t_count, d_count = visits.shape
    starts = visits.copy()
    starts[:, 0] = True
    out = np.full((t_count, d_count), -1)
    nxt = np.full(t_count, d_count)
    for d in range(d_count - 1, -1, -1):
        out[:, d] = np.where(starts[:, d], nxt, -1)
        nxt = np.where(visits[:, d], d, nxt)
    return out


def cycle_dry_counts(ledger: Ledger, visits: np.ndarray) -> np.ndarray:
    """``[T, D]`` paths with at least one dry day in the cycle that starts on each day (the
    visit's cycle on a visit day, the start balance's cycle on day 0 without a visit; see
    :func:`cycle_ends`); ``-1`` on days that start no cycle.

    This is the count behind the service target (a cycle service level): the share of paths
    on which the machine runs dry before the next visit.
    """
    visits = np.asarray(visits, dtype=bool)
    ends = cycle_ends(visits)
    t_count, p_count, d_count = ledger.balance_open.shape
    out = np.full((t_count, d_count), -1, dtype=np.int64)
    step = max(1, REDUCE_BLOCK // max(p_count * d_count, 1))
    for i in range(0, t_count, step):
        block = slice(i, i + step)
        dry = ledger.demand[block] > ledger.balance_open[block]
        before = np.zeros(dry.shape[:2] + (d_count + 1,), dtype=np.int32)
        np.cumsum(dry, axis=2, out=before[:, :, 1:])          # dry days before each day
        e = ends[block]
        s_idx = np.broadcast_to(np.arange(d_count), e.shape)
        e_idx = np.where(e >= 0, e, s_idx)
        inside = (np.take_along_axis(before, e_idx[:, None, :].repeat(p_count, 1), axis=2)
                  - before[:, :, :d_count]) > 0
        counts = inside.sum(axis=1)
        out[block] = np.where(e >= 0, counts, -1)
    return out


def cycle_dry_shares(ledger: Ledger, visits: np.ndarray,
                     rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """``(worst [T], every [n])``: each terminal's cycle dry risk (the largest share of paths
    that run dry before the next visit, over the cycles of the planned window), and the share
    of every cycle of the terminals ``rows`` (a bool mask; default all), for network means
    (:func:`cycle_dry_counts`)."""
    counts = cycle_dry_counts(ledger, visits)
    paths = ledger.balance_open.shape[1]
    kept = counts if rows is None else counts[rows]
    return counts.max(axis=1, initial=0) / paths, kept[kept >= 0] / paths


def simulate(visits: np.ndarray, loads: np.ndarray, start_balance: np.ndarray,
             demand: np.ndarray, limit: np.ndarray, visit_fee: np.ndarray, rates: CostRates,
             mode: str) -> Ledger:
    """Run the day's accounting for a plan on demand paths.

    ``visits`` ``[T, D]`` bool, ``loads`` ``[T, D]`` (currency; ignored where there is no
    visit), ``start_balance`` ``[T]``, ``demand`` ``[T, P, D]`` (≥ 0), ``limit`` ``[T]`` (max
    balance after a visit; only the top-up mode uses it, a swap load is trusted to respect it),
    ``visit_fee`` ``[T, D]``. ``mode`` is ``"swap"`` or ``"topup"``.

    A single terminal may be given as ``visits`` ``[D]``, ``loads`` ``[D]``, scalar
    ``start_balance`` and ``limit``, ``demand`` ``[P, D]`` and ``visit_fee`` ``[D]``; the
    ledger then has one terminal. Loops over days only; vectorised over terminals and paths.

    Raises ``ValueError`` on an unknown mode.
    """
    if mode not in MODES:
        raise ValueError(f"mode must be 'swap' or 'topup', got {mode!r}")
    demand = np.asarray(demand, dtype=float)
    if demand.ndim == 2:
        demand = demand[None]
    t_count, _, d_count = demand.shape
    visits = np.asarray(visits, dtype=bool).reshape(t_count, d_count)
    loads = np.where(visits, np.asarray(loads, dtype=float).reshape(t_count, d_count), 0.0)
    fee = np.broadcast_to(np.asarray(visit_fee, dtype=float), (t_count, d_count))
    start = np.asarray(start_balance, dtype=float).reshape(t_count)
    cap = np.broadcast_to(np.asarray(limit, dtype=float).reshape(-1), (t_count,))[:, None]

    balance_open = np.empty(demand.shape)
    returned = np.zeros(demand.shape)
    balance = np.broadcast_to(start[:, None], demand.shape[:2]).copy()
    for t in range(d_count):
        v = visits[:, t]
        if v.any():
            on = np.flatnonzero(v)
            before = balance[on]
            load = loads[on, t][:, None]
            if mode == "swap":
                returned[on, :, t] = before
                balance[on] = load
            else:
                filled = before + load
                returned[on, :, t] = np.maximum(filled - cap[on], 0.0)
                balance[on] = np.minimum(filled, cap[on])
        balance_open[:, :, t] = balance
        # what stays after the day's withdrawals: balance − min(demand, balance)
        np.subtract(balance, demand[:, :, t], out=balance)
        np.maximum(balance, 0.0, out=balance)
    return Ledger(balance_open=balance_open, returned=returned,
                  visit=np.where(visits, fee, 0.0), loads=loads, demand=demand, rates=rates)
