"""The one accounting of a day at a cash machine (DESIGN §4).

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

import numpy as np
import pandas as pd

MODES = ("swap", "topup")
PART_COLUMNS = ("carry", "visit", "handling", "dry_penalty", "shortfall_penalty", "total")


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
    """Arrays ``[terminal, path, day]`` unless noted; amounts and costs in currency units."""

    balance_open: np.ndarray    # balance after the visit, before withdrawals
    dispensed: np.ndarray
    dry: np.ndarray             # bool
    shortfall: np.ndarray
    end_balance: np.ndarray
    returned: np.ndarray        # residual (swap) or excess (top-up) returned at a visit
    carry: np.ndarray
    handling: np.ndarray
    dry_penalty: np.ndarray
    shortfall_penalty: np.ndarray
    visit: np.ndarray           # [terminal, day] visit fees paid (deterministic)

    def total(self) -> np.ndarray:
        """``[terminal, path]`` cost over all days."""
        per_day = self.carry + self.handling + self.dry_penalty + self.shortfall_penalty
        return per_day.sum(axis=2) + self.visit.sum(axis=1)[:, None]

    def expected_cost(self) -> np.ndarray:
        """``[terminal]`` expected cost (mean over paths) over all days."""
        return self.total().mean(axis=1)

    def parts(self) -> pd.DataFrame:
        """Expected cost parts per terminal (one row per terminal, in terminal order).

        Columns ``carry, visit, handling, dry_penalty, shortfall_penalty, total``.
        """
        frame = pd.DataFrame({
            "carry": self.carry.sum(axis=2).mean(axis=1),
            "visit": self.visit.sum(axis=1).astype(float),
            "handling": self.handling.sum(axis=2).mean(axis=1),
            "dry_penalty": self.dry_penalty.sum(axis=2).mean(axis=1),
            "shortfall_penalty": self.shortfall_penalty.sum(axis=2).mean(axis=1),
        })
        frame["total"] = self.expected_cost()
        return frame

    def dry_probability(self, days: int | None = None) -> np.ndarray:
        """``[terminal]`` share of paths with at least one dry day in the first ``days`` days
        (all days when ``None``)."""
        dry = self.dry if days is None else self.dry[:, :, :days]
        if dry.shape[2] == 0:
            return np.zeros(dry.shape[0])
        return dry.any(axis=2).mean(axis=1)

    def dry_paths(self, days: int | None = None) -> np.ndarray:
        """``[terminal, path]`` bool: the path has at least one dry day in the first ``days``
        days (all days when ``None``)."""
        dry = self.dry if days is None else self.dry[:, :, :days]
        return dry.any(axis=2)


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

    shape = demand.shape
    balance_open = np.empty(shape)
    dispensed = np.empty(shape)
    returned = np.zeros(shape)
    balance = np.broadcast_to(start[:, None], shape[:2]).copy()
    for t in range(d_count):
        v = visits[:, t][:, None]
        load = loads[:, t][:, None]
        if mode == "swap":
            back = np.where(v, balance, 0.0)
            balance = np.where(v, load, balance)
        else:
            filled = balance + load
            back = np.where(v, np.maximum(filled - cap, 0.0), 0.0)
            balance = np.where(v, np.minimum(filled, cap), balance)
        returned[:, :, t] = back
        balance_open[:, :, t] = balance
        out = np.minimum(demand[:, :, t], balance)
        dispensed[:, :, t] = out
        balance = balance - out

    dry = demand > balance_open
    shortfall = demand - dispensed
    end_balance = balance_open - dispensed
    handling = rates.handling_per_1000 * (loads[:, None, :] * visits[:, None, :] + returned) / 1000.0
    return Ledger(
        balance_open=balance_open,
        dispensed=dispensed,
        dry=dry,
        shortfall=shortfall,
        end_balance=end_balance,
        returned=returned,
        carry=rates.carry_rate_daily * end_balance,
        handling=handling,
        dry_penalty=rates.dry_day_penalty * dry,
        shortfall_penalty=rates.shortfall_penalty_per_1000 * shortfall / 1000.0,
        visit=np.where(visits, fee, 0.0),
    )
