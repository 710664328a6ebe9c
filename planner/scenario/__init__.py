"""Load and validate a scenario folder (README, "The scenario folder") into one typed :class:`Scenario`.

Validation happens here, once, at the edge: every problem of a file is collected and raised
together as an :class:`~planner.errors.InputError` so a user can fix them in one pass (files are
checked in the order scenario.toml, depots.csv, terminals.csv, dispense.csv, committed.csv, and
loading stops after the first file with problems, since later files refer to earlier ones).
Inner code trusts a :class:`Scenario`.

Files saved by spreadsheet programs are read as they are, each time with a notice in
:attr:`Scenario.warnings`, never silently: a CSV file that is not UTF-8 is read as Windows-1252
(or Latin-1, which decodes any byte), UTF-16 with a byte-order mark as UTF-16; ``;``- or
tab-separated files with their separator, and if such a file writes decimal commas
(``1.234,50``) its numbers with the comma as decimal mark (a number such as ``1.500`` that could
mean either is refused); dates as ``2026-09-07`` or ``07.09.2026``. Blank lines are skipped and
messages still name the line an editor shows.

Weekdays are numbered as in Python: Monday = 0 … Sunday = 6.

The package: :mod:`~planner.scenario.model` (the typed scenario and the input contract's
bounds), :mod:`~planner.scenario.reader` (text files, the generic CSV table and its cell
checks), :mod:`~planner.scenario.settings` (scenario.toml) and :mod:`~planner.scenario.tables`
(the CSV files); this module loads a folder with them.
"""
from __future__ import annotations

import hashlib
from pathlib import Path

import pandas as pd

from planner.errors import InputError, Problem
from planner.scenario.model import (DATE_UNIT, MAX_BUNDLES_PER_LOAD, MAX_CREWS, MAX_HORIZON_DAYS,
                                    MAX_PATH_COUNT, MAX_SEED, MIN_HISTORY_DAYS, RUN_RANGES,
                                    SETTINGS_FILE, STATUSES, WEEKDAYS, YEARS, CalendarSettings,
                                    CostSettings, Event, Scenario, run_setting_problem)
from planner.scenario.reader import MAX_ROWS_PER_CHECK
from planner.scenario.settings import _read_settings
from planner.scenario.tables import (VISIT_COLUMNS, _read_committed, _read_depots, _read_dispense,
                                     _read_terminals, read_past_visits)

__all__ = ["load_scenario", "read_past_visits", "Scenario", "CalendarSettings", "CostSettings",
           "Event", "WEEKDAYS", "STATUSES", "RUN_RANGES", "run_setting_problem", "VISIT_COLUMNS",
           "DATE_UNIT", "SETTINGS_FILE", "YEARS", "MIN_HISTORY_DAYS", "MAX_HORIZON_DAYS",
           "MAX_PATH_COUNT", "MAX_CREWS", "MAX_BUNDLES_PER_LOAD", "MAX_SEED", "MAX_ROWS_PER_CHECK"]


def load_scenario(path: str | Path) -> Scenario:
    """Load and validate a scenario folder.

    Raises :class:`~planner.errors.InputError` carrying every problem of the first malformed
    file (files are checked in the order scenario.toml, depots.csv, terminals.csv,
    dispense.csv, committed.csv).
    """
    root = Path(path)
    if not root.is_dir():
        raise InputError(Problem(str(root), "scenario folder not found",
                                 "give the path of a folder holding scenario.toml"))
    notices: list[str] = []
    settings = _read_settings(root, notices)
    depots = _read_depots(root, notices)
    terminals = _read_terminals(root, depots, notices)
    dispense = _read_dispense(root, terminals, notices)

    start = settings["start_date"]
    start = dispense["date"].max() + pd.Timedelta(days=1) if start is None else start
    horizon = settings["planning.horizon_days"]
    committed = _read_committed(root, terminals, start, horizon, notices,
                                settings["planning.lock_days"])

    history = dispense[dispense["date"] < start].reset_index(drop=True)
    if history.empty:
        raise InputError(Problem("dispense.csv", f"no row is dated before the first planning "
                                                 f"day {start:%Y-%m-%d}",
                                 "add history before start_date, or set start_date in "
                                 "scenario.toml after the history"))
    warnings = notices + _history_warnings(history, terminals, start,
                                           future_rows=len(dispense) - len(history))
    return Scenario(
        root=root,
        name=settings["name"],
        currency=settings["currency"],
        start_date=start,
        horizon_days=horizon,
        replenishment=settings["planning.replenishment"],
        lock_days=settings["planning.lock_days"],
        calendar=settings["calendar"],
        costs=settings["costs"],
        max_dry_probability=float(settings["service.max_dry_probability"]),
        path_count=settings["paths.count"],
        seed=settings["paths.seed"],
        terminals=terminals,
        depots=depots,
        dispense=history,
        committed=committed,
        warnings=tuple(warnings),
        fingerprint=_fingerprint(root),
    )



# --------------------------------------------------------------------------------------------
# Warnings and fingerprint
# --------------------------------------------------------------------------------------------


def _listing(ids: list[str] | pd.Index, limit: int = 10) -> str:
    ids = list(ids)
    return ", ".join(ids[:limit]) + (f" and {len(ids) - limit} more" if len(ids) > limit else "")


def _history_warnings(history: pd.DataFrame, terminals: pd.DataFrame, start: pd.Timestamp,
                      future_rows: int) -> list[str]:
    """Data-quality warnings on the history (rows before ``start``): they do not stop a run."""
    out: list[str] = []
    if future_rows:
        out.append(f"dispense.csv: {future_rows} row(s) dated on or after the first planning "
                   f"day {start:%Y-%m-%d} (in the future of the plan); they are ignored")
    missing = list(terminals.index[~terminals.index.isin(history["terminal_id"].unique())])
    if missing:
        out.append(f"dispense.csv: no history for {len(missing)} terminal(s): "
                   f"{_listing(missing)}; they are planned from network-wide averages")
    g = history.groupby("terminal_id")["date"]
    first, last, rows = g.min(), g.max(), g.size()
    span = (last - first).dt.days + 1
    short = span.index[span < MIN_HISTORY_DAYS]
    if len(short):
        out.append(f"dispense.csv: history shorter than 8 weeks for {len(short)} terminal(s): "
                   f"{_listing(short)}; their weekday profile is uncertain")
    gaps = (span - rows)[span > rows]
    if len(gaps):
        detail = _listing([f"{t} ({n} day(s))" for t, n in gaps.items()])
        out.append(f"dispense.csv: {int(gaps.sum())} missing day(s) in the history of "
                   f"{len(gaps)} terminal(s): {detail}; they are treated as gaps")
    stale = last.index[last < start - pd.Timedelta(days=1)]
    if len(stale):
        out.append(f"dispense.csv: history ends before {start - pd.Timedelta(days=1):%Y-%m-%d} "
                   f"(the day before the first planning day) for {len(stale)} terminal(s): "
                   f"{_listing(stale)}; the days between are treated as unknown")
    return out


def _fingerprint(root: Path) -> str:
    h = hashlib.sha256()
    for name in (SETTINGS_FILE, "terminals.csv", "depots.csv", "dispense.csv",
                 "dispense.parquet", "committed.csv"):
        p = root / name
        if p.is_file():
            h.update(name.encode())
            h.update(p.read_bytes())
    return h.hexdigest()[:16]
