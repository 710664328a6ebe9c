"""The scenario as typed values: the settings, the sanity bounds of the input contract, and
:class:`Scenario` itself (README, "The scenario folder"). Inner code trusts a :class:`Scenario`."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd

WEEKDAYS = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
STATUSES = ("ok", "dry", "down")

SETTINGS_FILE = "scenario.toml"
MIN_HISTORY_DAYS = 56  # 8 weeks: fewer weekly cycles make weekday profiles unreliable
DATE_UNIT = "datetime64[us]"  # pandas' default unit for parsed dates and date ranges
# Sanity bounds: beyond them a value is a typo, and it would overflow dates or memory later.
YEARS = (1970, 2199)
# half a year: measured on the demo network (60 terminals, 500 paths, 2026-12-02), a 183-day
# horizon plans in 3 min 16 s (3.6 GB peak), a 91-day one in 79 s; at 366 days the run had not
# finished after 6 minutes, and its work grows with the square of the planned days
MAX_HORIZON_DAYS = 183
MAX_PATH_COUNT = 100_000
MAX_CREWS = 10_000
MAX_BUNDLES_PER_LOAD = 10**9
MAX_SEED = 2**63 - 1
FORMULA_START = r"^[=+\-@\t\r]"   # an identifier a spreadsheet would run as a formula
# The one definition of the run settings' ranges, for scenario.toml and the command line
# alike: setting -> (least, most, the TOML key, the option)
RUN_RANGES = {
    "horizon_days": (1, MAX_HORIZON_DAYS, "planning.horizon_days", "--horizon"),
    "path_count": (1, MAX_PATH_COUNT, "paths.count", "--paths"),
    "seed": (0, MAX_SEED, "paths.seed", "--seed"),
}


def run_setting_problem(name: str, value: int, where: str) -> str | None:
    """Why ``value`` is out of range for run setting ``name`` (:data:`RUN_RANGES`), or None;
    ``where`` names it in the text (the TOML key or the option)."""
    low, high, _, _ = RUN_RANGES[name]
    if low <= value <= high:
        return None
    return f"{where} must lie between {low:,} and {high:,}, got {value:,}"

# --------------------------------------------------------------------------------------------
# Typed settings and the scenario
# --------------------------------------------------------------------------------------------


@dataclass(frozen=True)
class Event:
    """A dated event with an expected multiplicative lift of demand (1.2 = +20 %)."""

    date: pd.Timestamp
    lift: float
    name: str = ""


@dataclass(frozen=True)
class CalendarSettings:
    """Holiday country (and subdivision), payday rules and custom events.

    ``paydays`` holds rules: ``"last_business_day"``, ``"first_business_day"`` or a day of the
    month as an integer (moved to the previous business day when it falls on a weekend or a
    holiday).
    """

    country: str | None = None
    subdivision: str | None = None
    paydays: tuple[str | int, ...] = ("last_business_day",)
    events: tuple[Event, ...] = ()


@dataclass(frozen=True)
class CostSettings:
    """Cost rates, all in the scenario's currency.

    ``visit_fee_by_weekday`` maps weekday (0 = Mon) to a fee that replaces ``visit_fee`` on that
    day. ``handling_per_1000`` is paid per 1,000 units loaded and per 1,000 units returned.
    """

    carry_rate_annual: float
    visit_fee: float
    emergency_visit_fee: float
    handling_per_1000: float
    dry_day_penalty: float
    shortfall_penalty_per_1000: float = 0.0
    visit_fee_by_weekday: dict[int, float] = field(default_factory=dict)

    @property
    def carry_rate_daily(self) -> float:
        """Opportunity cost of one unit held for one day (365-day year)."""
        return self.carry_rate_annual / 365.0

    def visit_fee_on(self, weekday: int) -> float:
        """Visit fee on a weekday (0 = Mon)."""
        return self.visit_fee_by_weekday.get(weekday, self.visit_fee)


@dataclass(frozen=True)
class Scenario:
    """Everything one planning run needs, validated.

    Frames (one row per item; amounts in currency units; text columns have pandas' ``str``
    dtype, dates are ``datetime64[us]`` at midnight):

    - ``terminals``: index ``terminal_id`` (str); columns ``depot`` (str), ``capacity``,
      ``insurance_limit``, ``bundle``, ``balance_now`` (float64), ``visit_days`` (the original
      text, e.g. ``"Mon|Thu"``), ``allowed_weekdays`` (tuple of 7 bools, Mon…Sun), ``limit``
      (float64, = min(capacity, insurance_limit) rounded down to whole bundles, ≥ one bundle),
      ``site`` (str, "" if not given), ``visit_fee`` (float64, NaN when the scenario fee
      applies). Rows in file order.
    - ``depots``: index ``depot`` (str); columns ``Mon`` … ``Sun`` (int64 crews per day).
    - ``dispense``: columns ``terminal_id`` (str), ``date``, ``amount`` (float64 ≥ 0; NaN only
      on ``down`` rows written without an amount), ``status`` (one of ``ok``, ``dry``,
      ``down``); only days before ``start_date``; sorted by terminal and date; unique per
      terminal and date.
    - ``committed``: columns ``terminal_id`` (str), ``date`` (inside the horizon), ``load``
      (float64, a multiple of the terminal's bundle, ≤ its limit); sorted by terminal and date;
      may be empty.

    ``warnings`` holds notices and data-quality warnings as ``"file: text"`` lines.
    """

    root: Path
    name: str
    currency: str
    start_date: pd.Timestamp
    horizon_days: int
    replenishment: str
    lock_days: int
    calendar: CalendarSettings
    costs: CostSettings
    max_dry_probability: float
    path_count: int
    seed: int
    terminals: pd.DataFrame
    depots: pd.DataFrame
    dispense: pd.DataFrame
    committed: pd.DataFrame
    warnings: tuple[str, ...] = ()
    fingerprint: str = ""

    @property
    def terminal_ids(self) -> list[str]:
        return list(self.terminals.index)

    @property
    def horizon_dates(self) -> pd.DatetimeIndex:
        return pd.date_range(self.start_date, periods=self.horizon_days, freq="D")
