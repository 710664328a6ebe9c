"""The CSV files of a scenario folder: depots.csv, terminals.csv, dispense.csv, committed.csv,
and the replay's file of past visits (same reader and checks as committed.csv)."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pandas as pd

from planner.errors import InputError, Problem
from planner.scenario.model import DATE_UNIT, MAX_BUNDLES_PER_LOAD, MAX_CREWS, STATUSES, WEEKDAYS
from planner.scenario.reader import (MAX_ROWS_PER_CHECK, _check_duplicate_days, _check_known,
                                     _dates, _did_you_mean, _numbers, _parse_weekdays,
                                     _raise_if, _read_csv, _read_parquet, _show, _Table,
                                     _text_ids, _weekday_hint)

# --------------------------------------------------------------------------------------------
# The CSV files
# --------------------------------------------------------------------------------------------


def _read_depots(root: Path, notices: list[str]) -> pd.DataFrame:
    table = _read_csv(root, "depots.csv", ["depot", "max_visits_per_day"], list(WEEKDAYS),
                      notices)
    return depots_from(table)


def depots_from(table: _Table) -> pd.DataFrame:
    """depots.csv's checks on a table of text cells (the file's, or one with changed cells):
    index ``depot``, one column of visits per day for each weekday."""
    problems = list(table.problems)
    frame = table.frame
    names = _text_ids(table, "depot", "depot name", "depot", problems)
    out = pd.DataFrame(index=pd.Index(names, name="depot"))
    base = _crews(table, "max_visits_per_day", problems, empty_ok=False)
    for day in WEEKDAYS:
        if day in frame.columns:
            per_day = _crews(table, day, problems, empty_ok=True)
            out[day] = np.where(frame[day] == "", base, per_day)
        else:
            out[day] = base
    _raise_if(problems)
    return out.astype(np.int64)


def _crews(table: _Table, col: str, problems: list[Problem], empty_ok: bool) -> np.ndarray:
    values = _numbers(table, col, problems, what="crew limit", minimum=0, empty_ok=empty_ok,
                      example="2")
    table.flag(problems, np.isfinite(values) & (values % 1 != 0), col,
               lambda i: f"crew limit {table.frame[col].iloc[i]} is not a whole number",
               "write a whole number of visits per day")
    table.flag(problems, values > MAX_CREWS, col,
               lambda i: f"crew limit {table.frame[col].iloc[i]} is above {MAX_CREWS:,}",
               "write the number of visits the depot's crews can make per day")
    return values


TERMINAL_REQUIRED = ["terminal_id", "depot", "capacity", "insurance_limit", "bundle",
                     "balance_now", "visit_days"]
TERMINAL_OPTIONAL = ["site", "visit_fee"]


def _read_terminals(root: Path, depots: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    table = _read_csv(root, "terminals.csv", TERMINAL_REQUIRED, TERMINAL_OPTIONAL, notices)
    return terminals_from(table, depots, notices)


def terminals_from(table: _Table, depots: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    """terminals.csv's checks on a table of text cells (the file's, or one with changed
    cells), against the depots: the terminal frame of :class:`~planner.scenario.Scenario`."""
    file = table.file
    frame = table.frame
    problems = list(table.problems)
    ids = _text_ids(table, "terminal_id", "terminal_id", "terminal", problems)
    depot = frame["depot"]
    table.flag(problems, depot == "", "depot", "depot is empty",
               "name the terminal's depot as in depots.csv")
    _check_known(table, "depot", depots.index, "depots.csv", "depot", problems)
    cap = _numbers(table, "capacity", problems, what="capacity", minimum=0, strict=True)
    ins = _numbers(table, "insurance_limit", problems, what="insurance limit", minimum=0,
                   strict=True)
    bundle = _numbers(table, "bundle", problems, what="bundle", minimum=0, strict=True)
    bal = _numbers(table, "balance_now", problems, what="balance", minimum=0)
    table.flag(problems, bal > cap, "balance_now",
               lambda i: f"balance_now {frame['balance_now'].iloc[i]} is above the capacity "
                         f"{frame['capacity'].iloc[i]}",
               "correct the balance or the capacity")
    with np.errstate(invalid="ignore"):
        limit = np.floor(np.minimum(cap, ins) / bundle) * bundle
    table.flag(problems, limit > MAX_BUNDLES_PER_LOAD * bundle, "bundle",
               lambda i: f"the bundle {frame['bundle'].iloc[i]} is tiny against the capacity "
                         f"{frame['capacity'].iloc[i]} (more than {MAX_BUNDLES_PER_LOAD:,} "
                         "bundles per load)",
               "write the bundle in currency units, e.g. 2000 for 100 notes of 20")
    table.flag(problems, limit <= 0, "bundle",
               lambda i: f"the bundle {frame['bundle'].iloc[i]} is larger than "
                         "min(capacity, insurance_limit)",
               "lower the bundle, or raise the capacity or the insurance limit")
    over = bal > np.minimum(cap, ins)
    if (over & (bal <= cap)).any():
        notices.append(f"{file}: balance_now is above the insurance limit for "
                       f"{', '.join(ids[over & (bal <= cap)].head(10))}; the next visit must "
                       "bring it down")
    if "visit_fee" in frame.columns:
        fee = _numbers(table, "visit_fee", problems, what="visit fee", minimum=0,
                       empty_ok=True)
    else:
        fee = np.full(len(frame), np.nan)
    allowed: list[tuple[bool, ...]] = []
    unknown_day = np.zeros(len(frame), dtype=bool)
    hints: dict[int, str] = {}
    for i, text in enumerate(frame["visit_days"]):
        days, bad = _parse_weekdays(text)
        allowed.append(days)
        if bad:
            unknown_day[i] = True
            hints[i] = bad[0]
    table.flag(problems, unknown_day, "visit_days",
               lambda i: f"unknown weekday {_show(hints[i])} in visit_days",
               lambda i: f"write the days as {'|'.join(WEEKDAYS[:3])} (separated by '|')"
                         + _weekday_hint(hints[i]))
    table.flag(problems, ~unknown_day & ~np.array([any(a) for a in allowed], dtype=bool),
               "visit_days", "visit_days lists no day", "write the days a crew may visit, "
                                                        "e.g. Mon|Thu")
    _raise_if(problems)
    out = pd.DataFrame({
        "depot": depot.to_numpy(),
        "capacity": cap,
        "insurance_limit": ins,
        "bundle": bundle,
        "balance_now": bal,
        "visit_days": frame["visit_days"].to_numpy(),
        "allowed_weekdays": pd.Series(allowed, dtype=object).to_numpy(),
        "limit": limit,
        "site": frame["site"].to_numpy() if "site" in frame.columns else "",
        "visit_fee": fee,
    }, index=pd.Index(ids, name="terminal_id"))
    return out.astype({"depot": "str", "visit_days": "str", "site": "str"})


DISPENSE_COLUMNS = ["terminal_id", "date", "amount", "status"]


def _read_dispense(root: Path, terminals: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    """All dispense rows (history and any dated on or after the first planning day), from
    dispense.csv or, for large networks, dispense.parquet (the same checks)."""
    file = "dispense.csv"
    if (root / "dispense.parquet").is_file():
        if (root / file).exists():
            raise InputError(Problem("dispense.parquet", "the folder holds both dispense.csv "
                                                         "and dispense.parquet",
                                     "keep one of them (the same history in either format)"))
        file = "dispense.parquet"
        table = _read_parquet(root, file, DISPENSE_COLUMNS, [], notices)
    else:
        table = _read_csv(root, file, DISPENSE_COLUMNS, [], notices)
    frame = table.frame
    problems = list(table.problems)
    table.flag(problems, frame["terminal_id"] == "", "terminal_id", "terminal_id is empty",
               "write the terminal's id as in terminals.csv")
    _check_known(table, "terminal_id", terminals.index, "terminals.csv", "terminal", problems)
    dates = _dates(table, "date", problems, notices)
    status = frame["status"]
    odd = ~status.isin(STATUSES)
    if odd.any():  # Ok, DRY … are understood; lowering only these keeps big files fast
        status = status.where(~odd, status[odd].str.lower())
    table.flag(problems, status == "", "status", "status is empty",
               "write ok, dry (ran out that day) or down (out of service)")
    table.flag(problems, ~status.isin(STATUSES) & (status != ""), "status",
               lambda i: f"unknown status {_show(frame['status'].iloc[i])}",
               lambda i: "use ok, dry or down" + _did_you_mean(status.iloc[i], STATUSES))
    # a down day is not demand, so some exports leave its amount empty
    amount = _numbers(table, "amount", problems, what="amount", minimum=0,
                      empty_ok=(status == "down").to_numpy())
    _check_duplicate_days(table, dates, problems)
    _check_outlying_dates(table, dates, problems)
    _raise_if(problems)
    out = pd.DataFrame({"terminal_id": frame["terminal_id"], "date": dates,
                        "amount": amount, "status": status})
    return out.sort_values(["terminal_id", "date"], ignore_index=True, kind="stable")


MAX_DATE_GAP_DAYS = 31      # a few rows this far after all the others are a typo
MAX_OUTLYING_ROWS = 20


def _check_outlying_dates(table, dates: pd.Series, problems: list[Problem]) -> None:
    """A dispense date after today, or one of a few rows dated more than
    ``MAX_DATE_GAP_DAYS`` after all the others (a mistyped year would otherwise move the whole
    plan, whose first day follows the last date), is a problem naming its line."""
    valid = dates.notna()
    if not valid.any():
        return
    today = pd.Timestamp.today().normalize()
    table.flag(problems, (dates > today).to_numpy() & valid.to_numpy(), "date",
               lambda i: f"date {dates.iloc[i]:%Y-%m-%d} lies after today "
                         f"({today:%Y-%m-%d}): a dispense record cannot be from the future",
               "correct the date, or remove the row")
    days = np.sort(dates[valid & (dates <= today)].unique())
    if len(days) < 2:
        return
    gaps = np.diff(days) > np.timedelta64(MAX_DATE_GAP_DAYS, "D")
    if not gaps.any():
        return
    cut = days[int(np.flatnonzero(gaps)[-1]) + 1]         # first date after the last big gap
    late = (dates >= cut).to_numpy() & valid.to_numpy() & (dates <= today).to_numpy()
    if 0 < late.sum() <= min(MAX_OUTLYING_ROWS, 0.01 * valid.sum()):
        before = days[days < cut].max()
        table.flag(problems, late, "date",
                   lambda i: f"date {dates.iloc[i]:%Y-%m-%d} lies "
                             f"{(dates.iloc[i] - before).days:,} days after the rest of the "
                             f"history (which ends {pd.Timestamp(before):%Y-%m-%d})",
                   "correct the date (a mistyped year?), or remove the row")


VISIT_COLUMNS = ["terminal_id", "date", "load"]   # committed.csv and the replay's past visits


def _read_committed(root: Path, terminals: pd.DataFrame, start: pd.Timestamp, horizon: int,
                    notices: list[str], lock_days: int = 0) -> pd.DataFrame:
    file = "committed.csv"
    table = _read_csv(root, file, VISIT_COLUMNS, [], notices, optional_file=True)
    if table is None or (table.frame.empty and not table.problems):
        return pd.DataFrame({"terminal_id": pd.Series([], dtype="str"),
                             "date": pd.Series([], dtype=DATE_UNIT),
                             "load": pd.Series([], dtype=float)})
    frame = table.frame
    problems = list(table.problems)
    dates, load = _visit_rows(table, terminals, problems, notices)
    end = start + pd.Timedelta(days=horizon)
    outside = dates.notna() & ((dates < start) | (dates >= end))
    table.flag(problems, outside, "date",
               lambda i: f"visit on {dates.iloc[i]:%Y-%m-%d} lies outside the horizon "
                         f"{start:%Y-%m-%d} … {end - pd.Timedelta(days=1):%Y-%m-%d}",
               "remove the row, or change start_date or horizon_days in scenario.toml")
    _raise_if(problems)
    known = terminals.reindex(frame["terminal_id"])
    weekday = dates.dt.day_of_week.to_numpy()
    off_day = [not known["allowed_weekdays"].iloc[i][weekday[i]] for i in range(len(frame))]
    for i in np.flatnonzero(off_day)[:MAX_ROWS_PER_CHECK]:
        notices.append(f"{file}: line {table.line(i)}: {frame['terminal_id'].iloc[i]} is "
                       f"visited on a {WEEKDAYS[weekday[i]]}, outside its visit_days; kept "
                       "as ordered")
    # a committed visit after the lock days is kept too (the plan is built around it)
    late = np.flatnonzero((dates >= start + pd.Timedelta(days=lock_days)).to_numpy())
    for i in late[:MAX_ROWS_PER_CHECK]:
        notices.append(f"{file}: line {table.line(i)}: {frame['terminal_id'].iloc[i]} on "
                       f"{dates.iloc[i]:%Y-%m-%d} lies after the {lock_days} lock day"
                       f"{'' if lock_days == 1 else 's'}; kept as ordered, and the plan is "
                       "built around it (remove the row to let the planner choose that visit)")
    if len(late) > MAX_ROWS_PER_CHECK:
        notices.append(f"{file}: {len(late) - MAX_ROWS_PER_CHECK} more committed visits lie "
                       "after the lock days; kept as ordered")
    out = pd.DataFrame({"terminal_id": frame["terminal_id"], "date": dates, "load": load})
    return out.sort_values(["terminal_id", "date"], ignore_index=True, kind="stable")


def _visit_rows(table: _Table, terminals: pd.DataFrame, problems: list[Problem],
                notices: list[str]) -> tuple[pd.Series, np.ndarray]:
    """The checks every file of visits shares (committed.csv, the visits actually made that
    the replay prices): a known terminal, a date, a load ≥ 0 in whole bundles and within the
    limit, one row per terminal and day. Returns the dates and the loads."""
    frame = table.frame
    table.flag(problems, frame["terminal_id"] == "", "terminal_id", "terminal_id is empty",
               "write the terminal's id as in terminals.csv")
    unknown = _check_known(table, "terminal_id", terminals.index, "terminals.csv", "terminal",
                           problems)
    dates = _dates(table, "date", problems, notices)
    load = _numbers(table, "load", problems, what="load", minimum=0)
    known = terminals.reindex(frame["terminal_id"])
    bundle, limit = known["bundle"].to_numpy(), known["limit"].to_numpy()
    with np.errstate(invalid="ignore"):
        steps = load / bundle
        off_bundle = ~unknown & (np.abs(steps - np.round(steps)) > 1e-9)
    table.flag(problems, off_bundle, "load",
               lambda i: f"load {frame['load'].iloc[i]} for {frame['terminal_id'].iloc[i]} is "
                         f"not a multiple of its bundle {bundle[i]:g}",
               lambda i: f"round the load to a multiple of {bundle[i]:g}, e.g. "
                         f"{math.floor(steps[i]) * bundle[i]:g}")
    table.flag(problems, ~unknown & ~off_bundle & (load > limit), "load",
               lambda i: f"load {frame['load'].iloc[i]} for {frame['terminal_id'].iloc[i]} is "
                         f"above its limit {limit[i]:g} (min of capacity and insurance limit, "
                         "in whole bundles)", lambda i: f"lower the load to {limit[i]:g} or less")
    _check_duplicate_days(table, dates, problems)
    return dates, load


def read_past_visits(path: str | Path, terminals: pd.DataFrame) -> pd.DataFrame:
    """Read a CSV of the visits actually made, ``terminal_id, date, load`` (one row per
    visit; the replay's ``--past-visits``), with the reader and the checks of committed.csv
    (:func:`_visit_rows`); any date.

    ``terminals`` is the scenario's terminal frame (ids, bundles, limits). Returns a frame with
    ``terminal_id`` (str), ``date`` (datetime64) and ``load`` (float), sorted. Raises
    :class:`~planner.errors.InputError` naming the line and column of every bad cell.
    """
    path = Path(path)
    if not path.is_file():
        raise InputError(Problem(str(path), "file of past visits not found",
                                 "give the path of a CSV with columns terminal_id, date, load"))
    notices: list[str] = []
    table = _read_csv(path.parent, path.name, VISIT_COLUMNS, [], notices)
    problems = list(table.problems)
    _raise_if(problems)          # a file without its columns: say so before the rows
    dates, load = _visit_rows(table, terminals, problems, notices)
    _raise_if(problems)
    out = pd.DataFrame({"terminal_id": table.frame["terminal_id"], "date": dates,
                        "load": load})
    return out.sort_values(["terminal_id", "date"], ignore_index=True, kind="stable")


def _cell(value) -> str:
    """A value as the text a CSV cell would hold (empty for a missing number)."""
    if isinstance(value, float):
        if np.isnan(value):
            return ""
        return str(int(value)) if value.is_integer() else repr(value)
    return str(value)


def terminal_cells(terminals: pd.DataFrame) -> pd.DataFrame:
    """The terminal frame of a scenario back as text cells with terminals.csv's columns."""
    out = pd.DataFrame({"terminal_id": terminals.index.astype(str)})
    for col in TERMINAL_REQUIRED[1:] + TERMINAL_OPTIONAL:
        out[col] = [_cell(v) for v in terminals[col]]
    return out


def depot_cells(depots: pd.DataFrame) -> pd.DataFrame:
    """The depot frame of a scenario back as text cells with depots.csv's columns."""
    # every weekday has its own cell, so max_visits_per_day (the fallback of an empty weekday
    # cell) only has to be a valid number: the most of any day
    out = pd.DataFrame({"depot": depots.index.astype(str),
                        "max_visits_per_day": [str(int(v)) for v in depots[list(WEEKDAYS)]
                                               .max(axis=1)]})
    for day in WEEKDAYS:
        out[day] = [str(int(v)) for v in depots[day]]
    return out
