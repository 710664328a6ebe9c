"""Write invented demo networks: the Northvale demo (Kestrel Valley Bank, 60 terminals, 3
depots, 26 months) and a small family of other networks made by the same generator with other
settings (:class:`NetworkSettings`).

Everything here is invented: the banks, the regions, their towns and the machine ids.
Run ``python -m planner.demo.make_demo`` from the repo root; it rewrites ``scenarios/northvale``
byte for byte (one seeded random generator, drawn in a fixed order) and prints the check that
the depot crew limits bind on busy days. ``python -m planner.demo.make_demo --network NAME
[FOLDER]`` writes another network of :data:`NETWORKS` (the hold-out networks into their
committed folders under ``scenarios/holdout/`` by default; the development networks need a
folder).

How the history is made, in the order of the code:

1. **Terminals.** Each town has a few sites of a type (shopping centre, high street, station,
   village, campus, hospital). The type sets the level of daily withdrawals, the weekday profile,
   how strongly paydays and holidays move demand, the noise and the annual season. Capacity
   (cassettes), insurance limit, bundle and the allowed visit weekdays follow from the level.
   Other networks may change the weekday profiles of the types and give every terminal its own
   profile around its type's (``weekday_jitter``).
2. **True demand** (multiplicative, per terminal and day) = level × trend × level shift ×
   weekday × annual season × Christmas shopping × paydays × holiday × events × exp(AR(1)
   noise), rounded to 10 EUR (banknotes). Paydays (``paydays``; Northvale: the last business day
   of the month) lift the day and the two following days. Holidays: the public holidays of
   ``country`` (``holidays`` library; Northvale "DE"); low on the day, lifted the day before and
   slightly the day after.
3. **Outages** (``down``): a few short runs per terminal per year, one longer one; nothing is
   dispensed.
4. **The legacy routine** the bank has used until now: fixed visit weekdays per terminal, a
   fixed swap load, no visits on public holidays, an emergency visit the morning after a machine
   ran dry (not on Sundays or holidays). The machine dispenses ``min(demand, balance)``; a day
   on which demand exceeded the balance is recorded as ``dry`` with the amount actually
   dispensed (a lower bound of demand). ``balance_now`` is the simulated end-of-day balance on
   the last history day. A share ``dry_sunday_share`` of the machines is visited Mon, Wed and
   Fri and has only 30–70 % of the day's demand left on 90 % of the Sundays (a mall machine
   whose Friday load does not last the weekend): they run dry on most Sundays.
5. **Recording problems**: a few amounts multiplied by ten, with a digit typed twice or (other
   networks) divided by ten, and missing rows (scattered, plus one block of a failed data feed).

Files written into the scenario folder: ``scenario.toml``, ``terminals.csv``, ``depots.csv``,
``dispense.csv``, ``committed.csv`` (the input contract), and ``truth/`` (not part of the
contract): ``true_demand.csv`` (terminal_id, date, demand: the demand before censoring, outages
and recording errors, for the history and the 28 days from the first planning day),
``injected.csv`` (every injected problem: terminal_id, date, kind, detail; the recording errors
are the rows of kind ``outlier``), ``terminal_truth.csv`` (the generator's parameters per
terminal and the legacy routine) and, for the other networks, ``settings.txt`` (the generator
settings, including paydays the scenario does not declare).
"""
from __future__ import annotations

import argparse
import itertools
import math
from dataclasses import dataclass, field, fields
from pathlib import Path

import holidays as holiday_calendars
import numpy as np
import pandas as pd

from planner.scenario import WEEKDAYS  # the weekday names of the input contract

SEED = 20261130

HISTORY_START = pd.Timestamp("2024-10-01")
LAST_HISTORY_DAY = pd.Timestamp("2026-11-29")  # a Sunday
START_DATE = pd.Timestamp("2026-11-30")  # first planning day, a Monday
TRUTH_DAYS_AHEAD = 28  # true demand is also kept for 4 weeks after the last history day

# Costs written into scenario.toml; the crew check below uses the same figures.
VISIT_FEE = 125.0
SATURDAY_FEE = 185.0
CARRY_RATE_ANNUAL = 0.05
REMOTE_VISIT_FEE = 155.0  # per-terminal fee of the remote villages
USABLE_SHARE = 0.8  # part of the limit a plan can count on spending (the rest is safety stock)

LEGACY_MARGIN = 1.5  # the legacy load covers the longest gap between visits with 50 % margin
FAIR_DATES = ("2024-12-07", "2025-12-06", "2026-12-05")  # the Northvale winter fair (Saturdays)
FAIR_LIFT = 1.4

CAPACITIES = (80_000, 100_000, 120_000, 160_000, 200_000, 240_000)

# depot -> crews per weekday Mon…Sun. The Saturday crew is small, nobody works on Sundays.
# Brenholm has one crew less on Fridays: it drives the weekend run to the cash centre.
DEPOT_CREWS = {
    "Brenholm": (7, 7, 7, 7, 6, 2, 0),
    "Ashmere": (5, 5, 5, 5, 5, 1, 0),
    "Tollbrook": (5, 5, 5, 5, 5, 1, 0),
}


@dataclass(frozen=True)
class SiteType:
    """Demand character of a kind of site.

    ``level`` is the range of the mean daily dispense (EUR); ``week`` the weekday profile
    Mon…Sun (normalised to mean 1); ``payday`` scales the payday lift; ``holiday`` is the factor
    on a public holiday; ``sigma`` the stationary standard deviation of the log noise and ``phi``
    its AR(1) coefficient; ``season`` 12 monthly factors (placed mid-month, interpolated);
    ``christmas`` the extra lift that builds up from 1 to 23 December.
    """

    name: str
    level: tuple[float, float]
    week: tuple[float, ...]
    payday: float
    holiday: float
    sigma: float
    phi: float
    season: tuple[float, ...]
    christmas: float


_SEASON = (0.92, 0.93, 0.98, 1.00, 1.01, 1.00, 1.02, 0.98, 0.98, 1.00, 1.02, 1.16)
# German semesters: lectures Oct–Feb and Apr–Jul; the long break is Aug–Sep.
_CAMPUS_SEASON = (1.00, 0.82, 0.75, 1.05, 1.10, 1.05, 0.88, 0.45, 0.60, 1.15, 1.10, 0.92)

SITE_TYPES = {s.name: s for s in (
    SiteType("shopping centre", (13_000, 24_000), (0.85, 0.85, 0.90, 1.00, 1.30, 1.65, 0.45),
             1.0, 0.35, 0.15, 0.45, _SEASON, 0.15),
    SiteType("high street", (6_000, 14_000), (0.90, 0.95, 0.95, 1.00, 1.25, 1.40, 0.55),
             1.0, 0.50, 0.17, 0.50, _SEASON, 0.10),
    SiteType("station", (7_000, 16_000), (1.10, 1.05, 1.05, 1.10, 1.30, 0.85, 0.75),
             0.6, 0.75, 0.14, 0.40, _SEASON, 0.0),
    SiteType("village", (2_000, 5_000), (0.95, 0.85, 0.90, 1.00, 1.35, 1.25, 0.70),
             1.3, 0.60, 0.22, 0.55, _SEASON, 0.05),
    SiteType("campus", (3_000, 9_000), (1.25, 1.20, 1.15, 1.10, 1.05, 0.65, 0.60),
             0.5, 0.40, 0.18, 0.50, _CAMPUS_SEASON, 0.0),
    SiteType("hospital", (3_000, 7_000), (1.05, 1.05, 1.00, 1.00, 1.05, 0.95, 0.90),
             0.7, 0.85, 0.12, 0.35, _SEASON, 0.0),
)}

# (code, town, depot, sites). The code prefixes the machine ids: BRH-001, BRH-002, …
TOWNS = (
    ("BRH", "Brenholm", "Brenholm", ["shopping centre", "shopping centre", "high street",
                                     "high street", "high street", "high street", "station",
                                     "station", "station", "campus", "campus", "hospital"]),
    ("WDB", "Wendelby", "Brenholm", ["high street", "station", "village", "village",
                                     "hospital"]),
    ("ORX", "Orrin Cross", "Brenholm", ["shopping centre", "village", "village"]),
    ("HTM", "Hatherly Moss", "Brenholm", ["village", "village"]),
    ("ASM", "Ashmere", "Ashmere", ["shopping centre", "shopping centre", "high street",
                                   "high street", "high street", "station", "campus",
                                   "hospital"]),
    ("FNK", "Fennick", "Ashmere", ["high street", "village", "village"]),
    ("MRD", "Marrowdene", "Ashmere", ["station", "village", "village"]),
    ("QLB", "Quillby", "Ashmere", ["village", "village"]),
    ("PWB", "Pellow Bridge", "Ashmere", ["high street", "village", "village"]),
    ("TLB", "Tollbrook", "Tollbrook", ["shopping centre", "high street", "high street",
                                       "station", "campus", "hospital"]),
    ("KSF", "Kestrelford", "Tollbrook", ["high street", "station", "campus", "village",
                                         "village"]),
    ("HLF", "Hollinsford", "Tollbrook", ["high street", "village", "village"]),
    ("DNM", "Dunmarrow", "Tollbrook", ["village", "village"]),
    ("SKE", "Skelby Edge", "Tollbrook", ["village", "village", "village"]),
)
REMOTE_TOWNS = ("HTM", "QLB", "SKE")

# Level shifts: (terminal, first day, factor, why)
LEVEL_SHIFTS = (
    ("ORX-001", "2025-09-15", 1.35, "anchor store opened"),
    ("TLB-003", "2026-03-02", 0.70, "road works in front of the branch"),
    ("FNK-002", "2025-06-02", 1.30, "the other machine in the village closed"),
    ("KSF-002", "2026-05-04", 1.25, "new platform entrance"),
)




@dataclass(frozen=True)
class Payday:
    """A payday of the generator: ``rule`` as in scenario.toml (``"last_business_day"``,
    ``"first_business_day"`` or a day of the month, moved to the previous business day on a
    weekend or holiday), the lifts of the day and of the two following days (each × the site
    type's ``payday`` factor), and whether scenario.toml declares it."""

    rule: str | int
    lifts: tuple[float, float, float] = (0.20, 0.25, 0.10)
    declared: bool = True


@dataclass(frozen=True)
class NetworkSettings:
    """Everything that makes one invented network differ from another.

    ``towns``: (code, town, depot, site types) as :data:`TOWNS`; ``depot_crews``: (depot,
    crews Mon…Sun); ``history_start`` … ``last_history_day`` (a Sunday; planning starts the day
    after); ``country``: public holidays (``holidays`` library code); ``paydays``;
    ``level_shifts``: (terminal, first day, factor, why); ``events``: (name, date, lift),
    declared in scenario.toml; ``site_weeks``: (site type, weekday profile Mon…Sun) replacing
    the type's profile; ``weekday_jitter``: log standard deviation of each terminal's own
    weekday profile around its type's; ``dry_sunday_share``: share of machines run dry on most
    Sundays by the legacy routine; ``recording_errors`` and their ``error_kinds`` (``x10``,
    ``digit`` typed twice, ``div10``); ``folder``: default output folder beside this file.
    """

    name: str
    seed: int
    towns: tuple
    depot_crews: tuple[tuple[str, tuple[int, ...]], ...]
    history_start: str
    last_history_day: str
    remote_towns: tuple[str, ...] = ()
    country: str = "DE"
    paydays: tuple[Payday, ...] = (Payday("last_business_day"),)
    level_shifts: tuple[tuple[str, str, float, str], ...] = ()
    events: tuple[tuple[str, str, float], ...] = ()
    site_weeks: tuple[tuple[str, tuple[float, ...]], ...] = ()
    weekday_jitter: float = 0.0
    dry_sunday_share: float = 0.0
    recording_errors: int = 14
    error_kinds: tuple[str, ...] = ("x10", "digit")
    folder: str = ""

    @property
    def start_date(self) -> pd.Timestamp:
        """The first planning day (the day after the history)."""
        return pd.Timestamp(self.last_history_day) + pd.Timedelta(days=1)

    @property
    def crews(self) -> dict[str, tuple[int, ...]]:
        return dict(self.depot_crews)

    def site_types(self) -> dict[str, SiteType]:
        """The site types with this network's weekday profiles."""
        weeks = dict(self.site_weeks)
        return {name: (SiteType(**{**{f.name: getattr(st, f.name) for f in fields(st)},
                                   "week": tuple(weeks[name])}) if name in weeks else st)
                for name, st in SITE_TYPES.items()}


NORTHVALE = NetworkSettings(
    name="Kestrel Valley Bank - Northvale region", seed=SEED, towns=TOWNS,
    depot_crews=tuple(DEPOT_CREWS.items()), history_start=f"{HISTORY_START:%Y-%m-%d}",
    last_history_day=f"{LAST_HISTORY_DAY:%Y-%m-%d}", remote_towns=REMOTE_TOWNS,
    level_shifts=LEVEL_SHIFTS,
    events=tuple(("Northvale winter fair", d, FAIR_LIFT) for d in FAIR_DATES),
    folder="northvale")


# The other networks of the family. Two are frozen as a hold-out: their folders under
# scenarios/holdout/ are committed with their truth, and no choice of a method or setting
# of the planner may be made by looking at them (they only measure). The development networks
# are for trying methods out; they are written on demand (``--network NAME FOLDER``).
SALTREACH = NetworkSettings(
    name="Merrow Coast Savings - Saltreach district", seed=73_155_021,
    towns=(
        ("SLT", "Saltreach", "Saltreach", ["shopping centre", "high street", "high street",
                                           "high street", "station", "station", "campus",
                                           "hospital"]),
        ("DHW", "Dunhollow", "Saltreach", ["high street", "station", "village", "village"]),
        ("OKW", "Oakwick", "Saltreach", ["village", "village", "village"]),
        ("QNK", "Quennock", "Quennock", ["shopping centre", "shopping centre", "high street",
                                         "high street", "station", "hospital"]),
        ("TRV", "Tarrow Vale", "Quennock", ["high street", "village", "village"]),
        ("FSW", "Fishlow", "Quennock", ["campus", "village", "village"]),
        ("ELN", "Elbury Ness", "Quennock", ["village", "village", "village"]),
    ),
    depot_crews=(("Saltreach", (4, 4, 4, 4, 4, 1, 0)), ("Quennock", (4, 4, 4, 4, 4, 1, 0))),
    history_start="2025-02-03", last_history_day="2026-09-27", remote_towns=("ELN",),
    country="NL", paydays=(Payday(25, (0.25, 0.20, 0.08)),),
    level_shifts=(("SLT-002", "2025-11-03", 1.30, "new office block opposite"),
                  ("QNK-004", "2026-04-06", 0.75, "a second machine opened next door"),
                  ("TRV-002", "2025-07-07", 1.25, "the village shop closed its till")),
    events=(("Saltreach harbour days", "2025-08-16", 1.35),
            ("Saltreach harbour days", "2026-08-15", 1.35)),
    site_weeks=(("shopping centre", (0.80, 0.85, 0.90, 1.05, 1.45, 1.55, 0.40)),
                ("high street", (0.95, 0.95, 1.00, 1.05, 1.40, 1.20, 0.45)),
                ("village", (1.00, 0.90, 0.95, 1.05, 1.30, 1.10, 0.70))),
    weekday_jitter=0.08, dry_sunday_share=0.2, recording_errors=30,
    error_kinds=("x10", "digit", "div10"), folder="holdout/saltreach")

BRANNOCK = NetworkSettings(
    name="Fellside Savings Bank - Brannock district", seed=58_204_377,
    towns=(
        ("BNK", "Brannock", "Brannock", ["shopping centre", "shopping centre", "high street",
                                         "high street", "station", "campus", "hospital"]),
        ("HLW", "Hallowmere", "Brannock", ["high street", "village", "village", "village"]),
        ("RSK", "Ruskby", "Brannock", ["station", "village", "village"]),
        ("GVN", "Gavenstead", "Gavenstead", ["shopping centre", "high street", "high street",
                                             "station", "hospital", "campus"]),
        ("PLD", "Pellingdale", "Gavenstead", ["high street", "village", "village"]),
        ("WYT", "Wythercombe", "Gavenstead", ["high street", "village", "village", "village"]),
        ("CRG", "Carrig Moor", "Gavenstead", ["village", "village", "village"]),
    ),
    depot_crews=(("Brannock", (4, 4, 4, 4, 4, 1, 0)), ("Gavenstead", (4, 4, 4, 4, 4, 1, 0))),
    history_start="2024-05-06", last_history_day="2025-12-28", remote_towns=("CRG",),
    country="AT",
    paydays=(Payday("first_business_day", (0.30, 0.15, 0.05)),
             Payday(15, (0.15, 0.10, 0.05))),
    level_shifts=(("BNK-003", "2025-03-03", 0.70, "the street was closed to traffic"),
                  ("WYT-001", "2024-10-07", 1.35, "the bank branch next door closed")),
    site_weeks=(("shopping centre", (0.90, 0.90, 0.95, 1.05, 1.35, 1.45, 0.30)),
                ("station", (1.15, 1.10, 1.05, 1.10, 1.25, 0.80, 0.65)),
                ("hospital", (1.10, 1.05, 1.05, 1.00, 1.05, 0.90, 0.80))),
    weekday_jitter=0.10, dry_sunday_share=0.15, recording_errors=30,
    error_kinds=("x10", "digit", "div10"), folder="holdout/brannock")

FENMOOR = NetworkSettings(
    name="Cobble Vale Bank - Fenmoor region", seed=40_917_733,
    towns=(
        ("FNM", "Fenmoor", "Fenmoor", ["shopping centre", "high street", "high street",
                                       "station", "campus", "hospital", "high street"]),
        ("LWK", "Lowick Fen", "Fenmoor", ["village", "village", "high street"]),
        ("SDG", "Sedgemarsh", "Fenmoor", ["village", "village", "station", "village"]),
        ("ARN", "Arnholt", "Arnholt", ["shopping centre", "high street", "station",
                                       "hospital", "high street"]),
        ("MWB", "Mawby", "Arnholt", ["village", "village", "village"]),
        ("TYN", "Tynsell", "Arnholt", ["high street", "village", "campus"]),
        ("BRK", "Brackenholt", "Arnholt", ["village", "village", "village", "village", "village"]),
    ),
    depot_crews=(("Fenmoor", (4, 4, 4, 4, 4, 1, 0)), ("Arnholt", (4, 4, 4, 4, 4, 1, 0))),
    history_start="2024-09-02", last_history_day="2026-04-26", remote_towns=("BRK",),
    country="PL",
    paydays=(Payday(10, (0.25, 0.20, 0.05)),
             Payday("last_business_day", (0.15, 0.15, 0.05), declared=False)),
    level_shifts=(("FNM-003", "2025-05-05", 1.30, "a new supermarket"),
                  ("MWB-002", "2025-10-06", 0.75, "the road was rebuilt")),
    site_weeks=(("high street", (0.95, 1.00, 1.00, 1.05, 1.30, 1.30, 0.40)),),
    weekday_jitter=0.07, dry_sunday_share=0.2, recording_errors=30,
    error_kinds=("x10", "digit", "div10"))

GLENARROW = NetworkSettings(
    name="Thornbury Guild Bank - Glenarrow valley", seed=91_550_642,
    towns=(
        ("GLN", "Glenarrow", "Glenarrow", ["shopping centre", "shopping centre", "high street",
                                           "high street", "high street", "station", "campus",
                                           "hospital", "station"]),
        ("KLM", "Kilmory Ford", "Glenarrow", ["high street", "village", "village"]),
        ("AVD", "Avondrie", "Glenarrow", ["village", "village", "village"]),
        ("CRN", "Carnbrae", "Carnbrae", ["shopping centre", "high street", "high street",
                                         "station", "hospital"]),
        ("DLM", "Dalmorrow", "Carnbrae", ["village", "village", "high street", "campus"]),
        ("SKR", "Skerryvale", "Carnbrae", ["village", "village", "village", "village"]),
    ),
    depot_crews=(("Glenarrow", (4, 4, 4, 4, 4, 1, 0)), ("Carnbrae", (4, 4, 4, 4, 4, 1, 0))),
    history_start="2024-03-04", last_history_day="2025-10-26", remote_towns=("SKR",),
    country="FR", paydays=(Payday("last_business_day", (0.20, 0.20, 0.08)),
                           Payday(5, (0.10, 0.10, 0.05))),
    level_shifts=(("GLN-004", "2025-01-06", 1.25, "a tram stop opened"),),
    weekday_jitter=0.06, dry_sunday_share=0.25, recording_errors=30,
    error_kinds=("x10", "digit", "div10"))

NETWORKS = {"northvale": NORTHVALE, "saltreach": SALTREACH, "brannock": BRANNOCK,
            "fenmoor": FENMOOR, "glenarrow": GLENARROW}
HOLDOUT = ("saltreach", "brannock")
DEVELOPMENT = ("fenmoor", "glenarrow")


# --------------------------------------------------------------------------------------------
# Terminals
# --------------------------------------------------------------------------------------------


def _ceil_to(x: float, step: float) -> float:
    return float(math.ceil(x / step - 1e-9) * step)


def build_terminals(rng: np.random.Generator, settings: NetworkSettings = NORTHVALE,
                    extra: np.random.Generator | None = None) -> pd.DataFrame:
    """One row per terminal: ids, depot, site, machine limits, visit days, demand parameters.

    ``extra`` (a second generator, so that Northvale's draws stay as they were) draws the
    terminals' own weekday profiles and the machines dry on most Sundays.
    """
    types = settings.site_types()
    rows = []
    for code, town, depot, sites in settings.towns:
        for i, site in enumerate(sites, 1):
            st = types[site]
            level = float(rng.uniform(*st.level))
            # a machine holds roughly a week at its level, rounded up to a cassette size
            need = level * rng.uniform(6.0, 10.0)
            capacity = next((c for c in CAPACITIES if c >= need), CAPACITIES[-1])
            insurance = capacity
            if rng.random() < 0.3 and capacity > CAPACITIES[0]:
                insurance = capacity - rng.choice([20_000, 40_000]) if capacity >= 120_000 \
                    else capacity - 20_000
            bundle = 1000 if level < 5000 else 2000 if level < 12_000 else 5000
            u = rng.random()
            if site == "shopping centre" and u < 0.6:
                visit_days = "Mon|Tue|Wed|Thu|Fri|Sat"
            elif site in ("village", "hospital") and u < 0.35:
                visit_days = "Mon|Wed|Fri"
            elif site == "village" and u > 0.92:
                visit_days = "Tue|Thu|Sat"
            else:
                visit_days = "Mon|Tue|Wed|Thu|Fri"
            rows.append({
                "terminal_id": f"{code}-{i:03d}", "depot": depot, "town": town, "site": site,
                "capacity": float(capacity), "insurance_limit": float(insurance),
                "bundle": float(bundle), "visit_days": visit_days,
                "visit_fee": REMOTE_VISIT_FEE if code in settings.remote_towns else np.nan,
                "level": level,
                "trend_annual": float(rng.uniform(-0.05, 0.02)),
                "week": st.week,
            })
    out = pd.DataFrame(rows).set_index("terminal_id")
    out["limit"] = np.floor(np.minimum(out["capacity"], out["insurance_limit"])
                            / out["bundle"]) * out["bundle"]
    out["dry_sunday"] = False
    if extra is not None and settings.weekday_jitter > 0:
        out["week"] = [tuple(float(v) for v in np.asarray(w) * np.exp(
            extra.normal(0.0, settings.weekday_jitter, 7))) for w in out["week"]]
    if extra is not None and settings.dry_sunday_share > 0:
        able = np.flatnonzero([{"Mon", "Wed", "Fri"} <= set(v.split("|"))
                               for v in out["visit_days"]])
        count = min(len(able), int(round(settings.dry_sunday_share * len(out))))
        picks = np.sort(extra.choice(able, size=count, replace=False))
        out.iloc[picks, out.columns.get_loc("dry_sunday")] = True
    return out


# --------------------------------------------------------------------------------------------
# Calendar and true demand
# --------------------------------------------------------------------------------------------


def public_holidays(dates: pd.DatetimeIndex, country: str = "DE") -> pd.DatetimeIndex:
    """National public holidays of ``country`` within the span of ``dates``."""
    years = range(dates.min().year, dates.max().year + 1)
    days = holiday_calendars.country_holidays(country, years=list(years))
    return pd.DatetimeIndex(sorted(pd.Timestamp(d) for d in days))


def payday_days(dates: pd.DatetimeIndex, hol: pd.DatetimeIndex, rule: str | int
                ) -> pd.DatetimeIndex:
    """The paydays of ``rule`` in every month touching ``dates`` (whole months, so the last
    month of a range gets its real last business day): ``"last_business_day"`` and
    ``"first_business_day"`` (Monday to Friday, not a public holiday), or a day of the month
    (capped at the month's length) moved back to the previous business day."""
    months = pd.period_range(dates.min().to_period("M"), dates.max().to_period("M"), freq="M")
    days = pd.date_range(months[0].start_time - pd.Timedelta(days=10),
                         months[-1].end_time.normalize(), freq="D")
    business = days[(days.day_of_week < 5) & ~days.isin(hol)]
    out = []
    for month in months:
        inside = business[business.to_period("M") == month]
        if rule == "last_business_day":
            out.append(inside.max())
        elif rule == "first_business_day":
            out.append(inside.min())
        else:
            target = month.start_time.normalize() + pd.Timedelta(
                days=min(int(rule), month.days_in_month) - 1)
            out.append(business[business <= target].max())
    return pd.DatetimeIndex(sorted(set(out)))


def _annual(season: tuple[float, ...], dates: pd.DatetimeIndex) -> np.ndarray:
    """Monthly factors placed on the 15th of each month, interpolated linearly over the year."""
    anchor = np.array([pd.Timestamp(2001, m, 15).day_of_year for m in range(1, 13)], float)
    x = np.concatenate([anchor - 365, anchor, anchor + 365])
    y = np.tile(np.asarray(season, float), 3)
    return np.interp(dates.day_of_year.to_numpy(float), x, y)


def true_demand(terms: pd.DataFrame, dates: pd.DatetimeIndex,
                rng: np.random.Generator, settings: NetworkSettings = NORTHVALE) -> np.ndarray:
    """Daily demand in EUR, array ``[terminal, day]``, rounded to 10."""
    types = settings.site_types()
    hol = public_holidays(dates, settings.country)
    is_hol = dates.isin(hol)
    eve = dates.isin(hol - pd.Timedelta(days=1)) & ~is_hol
    after = dates.isin(hol + pd.Timedelta(days=1)) & ~is_hol
    paydays = []
    for payday in settings.paydays:
        pay = payday_days(dates, hol, payday.rule)
        paydays.append((payday.lifts, [dates.isin(pay + pd.Timedelta(days=k)) for k in range(3)]))
    events = np.ones(len(dates))
    for _, day, lift in settings.events:
        events[dates == pd.Timestamp(day)] *= lift
    dec = (dates.month == 12) & (dates.day <= 23)
    ramp = np.where(dec, dates.day / 23.0, 0.0)
    years = ((dates - pd.Timestamp(settings.history_start)).days / 365.25).to_numpy()
    wd = dates.day_of_week.to_numpy()
    n_days = len(dates)
    out = np.empty((len(terms), n_days))
    for k, (tid, t) in enumerate(terms.iterrows()):
        st = types[t["site"]]
        week = np.asarray(t["week"]) / np.mean(t["week"])
        m = t["level"] * np.exp(t["trend_annual"] * years) * week[wd]
        m = m * _annual(st.season, dates) * (1 + st.christmas * ramp)
        for lifts, masks in paydays:
            for lift, mask in zip(lifts, masks):
                m = m * np.where(mask, 1 + lift * st.payday, 1.0)
        m = m * np.where(is_hol, st.holiday, 1.0) * np.where(eve, 1.30, 1.0)
        m = m * np.where(after, 1.10, 1.0) * events
        for shift_tid, first, factor, _ in settings.level_shifts:
            if shift_tid == tid:
                m = m * np.where(dates >= pd.Timestamp(first), factor, 1.0)
        # AR(1) on the log scale with stationary standard deviation sigma; the -sigma²/2
        # keeps the mean of exp(noise) at 1 so `level` stays the mean daily dispense
        z = rng.normal(0.0, st.sigma * math.sqrt(1 - st.phi ** 2), n_days)
        e = np.empty(n_days)
        e[0] = rng.normal(0.0, st.sigma)
        for d in range(1, n_days):
            e[d] = st.phi * e[d - 1] + z[d]
        out[k] = np.round(m * np.exp(e - st.sigma ** 2 / 2) / 10.0) * 10.0
    return out


# --------------------------------------------------------------------------------------------
# Outages, legacy routine, recording problems
# --------------------------------------------------------------------------------------------


def outage_days(n_terms: int, n_days: int, rng: np.random.Generator) -> np.ndarray:
    """Boolean ``[terminal, day]``: the machine is out of service all day."""
    down = np.zeros((n_terms, n_days), bool)
    for k in range(n_terms):
        for _ in range(rng.poisson(2.0 * n_days / 365)):
            start = int(rng.integers(0, n_days))
            length = int(min(rng.geometric(0.6), 4))
            down[k, start:start + length] = True
    long_one = int(rng.integers(0, n_terms))  # one machine vandalised: out for 6 days
    start = int(rng.integers(n_days // 4, n_days // 2))
    down[long_one, start:start + 6] = True
    return down


def _gap_cover(week: np.ndarray, days: list[int]) -> float:
    """Largest demand (in level-days) between two consecutive visits on weekdays ``days``."""
    worst = 0.0
    for i, d in enumerate(days):
        nxt = days[(i + 1) % len(days)]
        gap = (nxt - d) % 7 or 7
        worst = max(worst, sum(week[(d + j) % 7] for j in range(gap)))
    return worst


def legacy_routine(terms: pd.DataFrame, rng: np.random.Generator,
                   settings: NetworkSettings = NORTHVALE) -> pd.DataFrame:
    """The bank's current routine: fixed weekdays and a fixed swap load per terminal.

    Every machine is visited at least once a week, on as few weekdays as let the load cover the
    longest gap between visits at the level the terminal had when the routine was set up, with
    ``LEGACY_MARGIN``; the load is that cover, capped at the limit. Among the patterns with that
    many visits, the one that keeps the depot's busiest day least full is taken (the legacy
    routine stays within the crews), then the one with the most even gaps. A machine marked
    ``dry_sunday`` is visited Mon, Wed and Fri (see :func:`sunday_caps`).
    """
    crew_table = settings.crews
    used = {d: np.zeros(7) for d in crew_table}
    rows = []
    # the largest machines get their days first, as a dispatcher would plan them
    for tid in terms.sort_values("level", ascending=False).index:
        t = terms.loc[tid]
        week = np.asarray(t["week"])
        week = week / week.mean()
        allowed = [WEEKDAYS.index(w) for w in t["visit_days"].split("|")]
        crews = np.asarray(crew_table[t["depot"]], float)
        busy = used[t["depot"]]
        chosen = [0, 2, 4] if t["dry_sunday"] else None
        for k in range(1, len(allowed) + 1):
            if chosen is not None:
                break
            fits = [list(p) for p in itertools.combinations(allowed, k)
                    if _gap_cover(week, list(p)) * t["level"] * LEGACY_MARGIN <= t["limit"]]
            if fits:
                # the pattern that leaves the depot's busiest day least full, then the one
                # with the most even gaps between visits; remaining ties at random (both
                # rounded: their last bits differ from one processor's arithmetic to another's)
                score = [(round(max((busy[d] + 1) / crews[d] for d in p), 6),
                          round(_gap_cover(week, p), 9), rng.random()) for p in fits]
                chosen = fits[min(range(len(fits)), key=score.__getitem__)]
                break
        if chosen is None:  # even a visit every allowed day would not cover it
            chosen = allowed
        busy[chosen] += 1
        load = min(t["limit"], _ceil_to(_gap_cover(week, chosen) * t["level"] * LEGACY_MARGIN,
                                        t["bundle"]))
        rows.append({"terminal_id": tid, "legacy_days": "|".join(WEEKDAYS[d] for d in chosen),
                     "legacy_load": load})
    return pd.DataFrame(rows).set_index("terminal_id").loc[terms.index]


def sunday_caps(demand: np.ndarray, dates: pd.DatetimeIndex, terms: pd.DataFrame,
                rng: np.random.Generator, *, share: float = 0.9) -> np.ndarray:
    """The cash a machine can give ``[terminal, day]`` beyond its balance: unlimited, except at
    the machines marked ``dry_sunday``, where on a share ``share`` of the Sundays only 30–70 %
    of the day's demand is there (the Friday load of a machine in a shopping mall does not last
    its weekend trade: it runs dry on most Sundays, and the recorded amount is what it had)."""
    caps = np.full(demand.shape, np.inf)
    sundays = np.flatnonzero(dates.day_of_week == 6)
    for k in np.flatnonzero(terms["dry_sunday"].to_numpy()):
        hit = rng.random(len(sundays)) < share
        part = rng.uniform(0.3, 0.7, len(sundays))
        caps[k, sundays[hit]] = part[hit] * demand[k, sundays[hit]]
    return caps


def simulate_legacy(demand: np.ndarray, down: np.ndarray, dates: pd.DatetimeIndex,
                    terms: pd.DataFrame, routine: pd.DataFrame, country: str = "DE",
                    caps: np.ndarray | None = None
                    ) -> tuple[np.ndarray, np.ndarray, np.ndarray, pd.DataFrame]:
    """Run the legacy routine over the history (swap); ``caps`` (see :func:`sunday_caps`)
    limits the cash a machine can give on a day.

    Returns dispensed ``[terminal, day]``, status codes ``[terminal, day]`` (0 ok, 1 dry,
    2 down), the end-of-day balance of the last day per terminal, and the visits made.
    """
    n, days = demand.shape
    hol = dates.isin(public_holidays(dates, country))
    regular = np.zeros((n, 7), bool)
    for k, tid in enumerate(terms.index):
        for w in routine.at[tid, "legacy_days"].split("|"):
            regular[k, WEEKDAYS.index(w)] = True
    load = routine["legacy_load"].to_numpy(float)
    # the machines start the history freshly filled
    balance = load.copy()
    emergency = np.zeros(n, bool)
    dispensed = np.zeros((n, days))
    status = np.zeros((n, days), np.int8)
    visits = []
    for d in range(days):
        wd = dates[d].weekday()
        working = not hol[d] and wd != 6
        visit = (regular[:, wd] | emergency) & working
        balance = np.where(visit, load, balance)
        for k in np.flatnonzero(visit):
            kind = "regular" if regular[k, wd] else "emergency"
            visits.append((terms.index[k], dates[d], load[k], kind))
        emergency = emergency & ~visit
        if caps is not None:
            balance = np.minimum(balance, caps[:, d])
        give = np.where(down[:, d], 0.0, np.minimum(demand[:, d], balance))
        dry = ~down[:, d] & (demand[:, d] > balance)
        balance = balance - give
        dispensed[:, d] = give
        status[:, d] = np.where(down[:, d], 2, np.where(dry, 1, 0))
        emergency = emergency | dry
    frame = pd.DataFrame(visits, columns=["terminal_id", "date", "load", "kind"])
    return dispensed, status, balance, frame


def recording_problems(dispensed: np.ndarray, status: np.ndarray, rng: np.random.Generator,
                       settings: NetworkSettings = NORTHVALE
                       ) -> tuple[np.ndarray, np.ndarray, list[tuple[int, int, str, str]]]:
    """Recorded amounts with a few errors, and a mask of rows that were kept.

    Errors (``settings.recording_errors`` of them, the kinds ``settings.error_kinds`` in turn):
    an amount multiplied by ten (``x10``), one digit typed twice (``digit``: 8430 → 88430) or
    divided by ten (``div10``: 8430 → 840, a slipped decimal); all only on ordinary days with
    something dispensed. Missing rows: about 0.3 % at random and one block of nine days at one
    terminal.
    """
    n, days = dispensed.shape
    recorded = dispensed.copy()
    injected: list[tuple[int, int, str, str]] = []
    candidates = np.argwhere((status == 0) & (dispensed >= 1000))
    picks = candidates[rng.choice(len(candidates), size=settings.recording_errors,
                                  replace=False)]
    kinds = settings.error_kinds
    for j, (k, d) in enumerate(sorted(map(tuple, picks))):
        old = int(dispensed[k, d])
        kind = kinds[j % len(kinds)]
        if kind == "x10":
            new = old * 10
            detail = f"{old} recorded as {new} (x10)"
        elif kind == "digit":
            text = str(old)
            pos = int(rng.integers(0, len(text) - 1))  # never the final 0: stays a multiple of 10
            new = int(text[:pos + 1] + text[pos] + text[pos + 1:])
            detail = f"{old} recorded as {new} (digit typed twice)"
        elif kind == "div10":
            new = int(round(old / 100.0)) * 10
            detail = f"{old} recorded as {new} (/10)"
        else:
            raise ValueError(f"unknown recording error kind {kind!r}")
        recorded[k, d] = new
        injected.append((int(k), int(d), "outlier", detail))
    keep = rng.random((n, days)) > 0.003
    keep[:, -1] = True  # the last day is always reported: it fixes where the history ends
    feed = int(rng.integers(0, n))
    start = int(rng.integers(days // 3, 2 * days // 3))
    keep[feed, start:start + 9] = False
    keep[picks[:, 0], picks[:, 1]] = True  # an error needs a row to sit in
    for k, d in np.argwhere(~keep):
        injected.append((int(k), int(d), "missing", "row not recorded"))
    return recorded, keep, injected


# --------------------------------------------------------------------------------------------
# Crew check
# --------------------------------------------------------------------------------------------


def _spread(need: float, cover: np.ndarray) -> np.ndarray:
    """Split ``need`` visits a week over allowed weekdays in proportion to the demand each
    visit day has to cover, at most one visit per day (water filling)."""
    if need >= (cover > 0).sum():
        return (cover > 0).astype(float)
    share = cover / cover.sum()
    lo, hi = 0.0, need / share[share > 0].min() + 1.0
    for _ in range(60):
        c = (lo + hi) / 2
        if np.minimum(1.0, c * share).sum() < need:
            lo = c
        else:
            hi = c
    return np.minimum(1.0, hi * share)


def crew_check(terms: pd.DataFrame, weekly_demand: pd.Series,
               settings: NetworkSettings = NORTHVALE) -> pd.DataFrame:
    """Visits a typical week needs per depot and weekday, against the crews.

    Per terminal: visits per week = weekly demand / usable load, where the usable load is the
    smaller of ``USABLE_SHARE`` × limit (the rest is safety stock) and the Baumol (1952)
    square-root load √(2 · fee · daily demand / daily rate) (visiting more often than that costs
    more in fees than it saves in interest). Those visits are spread over the allowed weekdays
    in proportion to the demand until the next allowed day (a Friday visit must cover the
    weekend), at most one a day; the sum per depot and weekday is the need.

    ``terms`` needs columns depot, limit, visit_fee (NaN: the scenario fee), site, visit_days;
    ``weekly_demand`` is EUR a week per terminal. Returns one row per depot and weekday Mon…Sat:
    depot, weekday, need (visits), crews.
    """
    rate_daily = CARRY_RATE_ANNUAL / 365
    types = settings.site_types()
    need = {d: np.zeros(7) for d in settings.crews}
    for tid, t in terms.iterrows():
        daily = weekly_demand[tid] / 7
        fee = t["visit_fee"] if np.isfinite(t["visit_fee"]) else VISIT_FEE
        usable = min(USABLE_SHARE * t["limit"], math.sqrt(2 * fee * daily / rate_daily))
        week = np.asarray(t["week"] if "week" in t.index else types[t["site"]].week)
        allowed = sorted(WEEKDAYS.index(w) for w in t["visit_days"].split("|"))
        cover = np.zeros(7)
        for i, d in enumerate(allowed):
            gap = (allowed[(i + 1) % len(allowed)] - d) % 7 or 7
            cover[d] = sum(week[(d + j) % 7] for j in range(gap))
        need[t["depot"]] += _spread(weekly_demand[tid] / usable, cover)
    rows = []
    for depot, crews in settings.crews.items():
        for w in range(6):
            rows.append({"depot": depot, "weekday": WEEKDAYS[w], "need": need[depot][w],
                         "crews": crews[w]})
    return pd.DataFrame(rows)


# --------------------------------------------------------------------------------------------
# Writing
# --------------------------------------------------------------------------------------------


def _toml(settings: NetworkSettings = NORTHVALE) -> str:
    events = "".join(
        f'\n[[calendar.events]]\nname = "{name}"\ndate = {d}\nlift = {lift}\n'
        for name, d, lift in settings.events)
    rules = ", ".join(f'"{p.rule}"' if isinstance(p.rule, str) else str(p.rule)
                      for p in settings.paydays if p.declared)
    return (
        f'name = "{settings.name}"\n'
        'currency = "EUR"\n'
        f"start_date = {settings.start_date:%Y-%m-%d}\n\n"
        "[planning]\nhorizon_days = 14\nreplenishment = \"swap\"\nlock_days = 1\n\n"
        f"[calendar]\nholidays = \"{settings.country}\"\npaydays = [{rules}]\n"
        f"{events}\n"
        f"[costs]\ncarry_rate_annual = {CARRY_RATE_ANNUAL}\nvisit_fee = {VISIT_FEE:g}\n"
        f"emergency_visit_fee = {3 * VISIT_FEE:g}\nhandling_per_1000 = 0.7\n"
        "dry_day_penalty = 650\n\n"
        f"[costs.visit_fee_by_weekday]\nSat = {SATURDAY_FEE:g}\n\n"
        "[service]\nmax_dry_probability = 0.02\n\n"
        "[paths]\ncount = 500\nseed = 4242\n"
    )


def settings_text(settings: NetworkSettings) -> str:
    """The generator settings of a network as text (written to ``truth/settings.txt``)."""
    lines = [f"{f.name} = {getattr(settings, f.name)!r}" for f in fields(settings)
             if f.name not in ("towns", "name")]
    lines += [f"town {code} {town!r} depot {depot!r}: {', '.join(sites)}"
              for code, town, depot, sites in settings.towns]
    return "\n".join([f"name = {settings.name!r}"] + lines) + "\n"


def _write_csv(frame: pd.DataFrame, path: Path) -> None:
    path.parent.mkdir(parents=True, exist_ok=True)
    frame.to_csv(path, index=False, lineterminator="\n")


def main(out_dir: Path | str | None = None, *, verbose: bool = True,
         settings: NetworkSettings = NORTHVALE) -> Path:
    """Write the network of ``settings`` (default: Northvale) into ``out_dir`` (default: its
    ``folder`` beside this file) and, if ``verbose``, print the network figures and the crew
    check. Returns the folder."""
    if out_dir is None and not settings.folder:
        raise ValueError(f"network {settings.name!r} has no folder of its own: give out_dir")
    out = Path(out_dir) if out_dir is not None else Path(__file__).parent / settings.folder
    rng = np.random.default_rng(settings.seed)
    extra = np.random.default_rng([settings.seed, 1])
    terms = build_terminals(rng, settings, extra)
    last_day = pd.Timestamp(settings.last_history_day)
    dates = pd.date_range(settings.history_start,
                          last_day + pd.Timedelta(days=TRUTH_DAYS_AHEAD))
    n_hist = int((dates <= last_day).sum())
    hist = dates[:n_hist]
    demand = true_demand(terms, dates, rng, settings)
    down = outage_days(len(terms), n_hist, rng)
    routine = legacy_routine(terms, rng, settings)
    caps = sunday_caps(demand[:, :n_hist], hist, terms, extra) \
        if settings.dry_sunday_share > 0 else None
    dispensed, status, balance, visits = simulate_legacy(
        demand[:, :n_hist], down, hist, terms, routine, settings.country, caps)
    recorded, keep, injected = recording_problems(dispensed, status, rng, settings)

    ids = np.asarray(terms.index, dtype=object)
    k_idx, d_idx = np.nonzero(keep)  # row-major: terminal by terminal, dates in order
    dispense = pd.DataFrame({
        "terminal_id": ids[k_idx],
        "date": hist[d_idx].strftime("%Y-%m-%d"),
        "amount": recorded[k_idx, d_idx].astype(np.int64),
        "status": np.array(["ok", "dry", "down"], dtype=object)[status[k_idx, d_idx]],
    })
    k_all, d_all = np.indices(demand.shape).reshape(2, -1)
    truth = pd.DataFrame({"terminal_id": ids[k_all], "date": dates[d_all].strftime("%Y-%m-%d"),
                          "demand": demand[k_all, d_all].astype(np.int64)})
    for k, d in np.argwhere(status == 2):
        injected.append((int(k), int(d), "down", "out of service"))
    for k, d in np.argwhere(status == 1):
        injected.append((int(k), int(d), "dry", f"demand {int(demand[k, d])}, dispensed "
                                               f"{int(dispensed[k, d])}"))
    for tid, first, factor, why in settings.level_shifts:
        k = terms.index.get_loc(tid)
        injected.append((int(k), int(hist.get_loc(pd.Timestamp(first))), "level_shift",
                         f"x{factor} from this day: {why}"))
    inj = pd.DataFrame(injected, columns=["k", "d", "kind", "detail"]).sort_values(
        ["k", "d", "kind"], kind="stable")
    inj = pd.DataFrame({"terminal_id": ids[inj["k"].to_numpy()],
                        "date": hist[inj["d"].to_numpy()].strftime("%Y-%m-%d"),
                        "kind": inj["kind"].to_numpy(), "detail": inj["detail"].to_numpy()})

    terminals = pd.DataFrame({
        "terminal_id": terms.index,
        "depot": terms["depot"].to_numpy(),
        "capacity": terms["capacity"].astype(np.int64).to_numpy(),
        "insurance_limit": terms["insurance_limit"].astype(np.int64).to_numpy(),
        "bundle": terms["bundle"].astype(np.int64).to_numpy(),
        "balance_now": balance.astype(np.int64),
        "visit_days": terms["visit_days"].to_numpy(),
        "site": terms["site"].to_numpy(),
        "visit_fee": terms["visit_fee"].map(lambda v: "" if np.isnan(v) else f"{v:g}"),
    })
    crews = settings.crews
    depots = pd.DataFrame({"depot": list(crews),
                           "max_visits_per_day": [max(c) for c in crews.values()]})
    for w, day in enumerate(WEEKDAYS):
        depots[day] = [c[w] for c in crews.values()]

    # Visits already ordered for the first planning day: the Monday machines that will run
    # lowest, loaded with their routine amount.
    first_day = demand[:, n_hist]
    cover = balance / np.maximum(first_day, 1.0)
    monday = np.array(["Mon" in v.split("|") for v in terms["visit_days"]])
    order = [k for k in np.argsort(cover, kind="stable") if monday[k]][:3]
    if settings != NORTHVALE:
        # every Monday machine that would not last the day, within the depot's Monday crews
        free = {d: c[0] for d, c in settings.crews.items()}
        order = []
        for k in np.argsort(cover, kind="stable"):
            depot = terms["depot"].iloc[k]
            if monday[k] and cover[k] < 1.0 and free[depot] > 0:
                order.append(k)
                free[depot] -= 1
    committed = pd.DataFrame({
        "terminal_id": ids[sorted(order)],
        "date": f"{settings.start_date:%Y-%m-%d}",
        "load": routine["legacy_load"].to_numpy()[sorted(order)].astype(np.int64),
    })

    truth_terms = terms.drop(columns=["limit"]).join(routine)
    truth_terms = truth_terms.assign(level=truth_terms["level"].round(0).astype(np.int64),
                                     trend_annual=truth_terms["trend_annual"].round(4),
                                     legacy_load=truth_terms["legacy_load"].astype(np.int64))
    columns = ["terminal_id", "depot", "town", "site", "level", "trend_annual", "legacy_days",
               "legacy_load"]
    if settings != NORTHVALE:
        columns += ["dry_sunday", "weekday_profile"]
        truth_terms["weekday_profile"] = ["|".join(f"{v / np.mean(w):.3f}" for v in w)
                                          for w in truth_terms["week"]]
    truth_terms = truth_terms.reset_index()[columns]

    out.mkdir(parents=True, exist_ok=True)
    (out / "scenario.toml").write_text(_toml(settings), encoding="utf-8", newline="\n")
    _write_csv(terminals, out / "terminals.csv")
    _write_csv(depots, out / "depots.csv")
    _write_csv(dispense, out / "dispense.csv")
    _write_csv(committed, out / "committed.csv")
    _write_csv(truth, out / "truth" / "true_demand.csv")
    _write_csv(inj, out / "truth" / "injected.csv")
    _write_csv(truth_terms, out / "truth" / "terminal_truth.csv")
    if settings != NORTHVALE:
        (out / "truth" / "settings.txt").write_text(settings_text(settings), encoding="utf-8",
                                                    newline="\n")

    if verbose:
        _print_figures(out, terms, routine, dispense, demand, n_hist, dates, visits, cover,
                       order, settings)
    return out


def _print_figures(out: Path, terms: pd.DataFrame, routine: pd.DataFrame,
                   dispense: pd.DataFrame, demand: np.ndarray,
                   n_hist: int, dates: pd.DatetimeIndex, visits: pd.DataFrame,
                   cover: np.ndarray, committed: list[int],
                   settings: NetworkSettings = NORTHVALE) -> None:
    ids = list(terms.index)
    hist_mean = demand[:, :n_hist].mean(axis=1)
    print(f"written {out}")
    print(f"terminals {len(terms)}, depots {terms['depot'].nunique()}, history "
          f"{dates[0]:%Y-%m-%d} … {dates[n_hist - 1]:%Y-%m-%d} ({n_hist} days), first planning "
          f"day {settings.start_date:%Y-%m-%d} ({WEEKDAYS[settings.start_date.weekday()]})")
    print(f"mean daily demand per terminal: min {hist_mean.min():,.0f}, median "
          f"{np.median(hist_mean):,.0f}, max {hist_mean.max():,.0f} EUR")
    counts = dispense["status"].value_counts()
    n_grid = len(terms) * n_hist
    print(f"dispense rows {len(dispense):,} of {n_grid:,} terminal-days "
          f"(missing {n_grid - len(dispense)}); ok {counts.get('ok', 0):,}, dry "
          f"{counts.get('dry', 0)}, down {counts.get('down', 0)}")
    kinds = visits.groupby("kind").size()
    print(f"legacy routine visits: regular {kinds.get('regular', 0):,}, emergency "
          f"{kinds.get('emergency', 0):,}")
    sizes = sum(p.stat().st_size for p in out.rglob("*") if p.is_file())
    print(f"files together {sizes / 1e6:.2f} MB")
    print("first planning day, lowest cover (balance / demand that day): " + ", ".join(
        f"{ids[k]} {cover[k]:.2f}{' (committed)' if k in committed else ''}"
        for k in np.argsort(cover, kind="stable")[:6]))

    last_year = demand[:, n_hist - 364:n_hist].sum(axis=1) / 52
    fortnight = demand[:, n_hist:n_hist + 14].sum(axis=1) / 2
    typical = crew_check(terms, pd.Series(last_year, index=ids), settings)
    planning = crew_check(terms, pd.Series(fortnight, index=ids), settings)
    table = typical.rename(columns={"need": "need_typical"})
    table["need_planning"] = planning["need"].to_numpy()
    routine_days = terms[["depot"]].join(routine["legacy_days"])
    table["legacy"] = [sum(w in days.split("|") for days in
                           routine_days.loc[routine_days["depot"] == dep, "legacy_days"])
                       for dep, w in zip(table["depot"], table["weekday"])]
    table["binds"] = np.where(table["need_planning"].round(1) > table["crews"], "yes", "")
    print("\nCrew check: visits needed per week and weekday (weekly demand / usable load,")
    print("usable = min(0.8 x limit, Baumol load); spread by the demand each visit covers)")
    print("  typical = mean week of the last 52 weeks; planning = mean week of the first "
          "planning fortnight;")
    print("  legacy = regular visits a week of the legacy routine; binds = planning need above "
          "the crews")
    print(table.to_string(index=False, float_format=lambda v: f"{v:5.1f}"))
    for depot, part in table.groupby("depot", sort=False):
        print(f"  {depot}: week needs {part['need_typical'].sum():.1f} (typical) / "
              f"{part['need_planning'].sum():.1f} (planning) visits, crews allow "
              f"{part['crews'].sum()}")


def _cli() -> None:
    parser = argparse.ArgumentParser(description="Write an invented demo network.")
    parser.add_argument("folder", nargs="?", help="output folder (default: the network's own)")
    parser.add_argument("--network", default="northvale", choices=sorted(NETWORKS),
                        help="which network of the family (default: northvale)")
    args = parser.parse_args()
    main(args.folder, settings=NETWORKS[args.network])


if __name__ == "__main__":
    _cli()
