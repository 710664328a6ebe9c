"""scenario.toml: the settings with their types, defaults and ranges, read into checked values
(README, "The scenario folder")."""

from __future__ import annotations

import datetime as dt
import math
import re
import tomllib
from collections.abc import Mapping
from pathlib import Path
from typing import Any, Callable

import pandas as pd

from planner.costs import MODES  # noqa: F401 - the modes a scenario may name
from planner.errors import InputError, Problem
from planner.scenario.model import (MAX_HORIZON_DAYS, MAX_PATH_COUNT, RUN_RANGES, SETTINGS_FILE,
                                    WEEKDAYS, YEARS, CalendarSettings, CostSettings, Event,
                                    Scenario, run_setting_problem)
from planner.scenario.reader import _closest, _did_you_mean, _raise_if, _read_text, _show

# --------------------------------------------------------------------------------------------
# scenario.toml
# --------------------------------------------------------------------------------------------

_REQUIRED = object()
_NUMBER, _DATE = "number", "date"
# dotted key -> (kind, default); _REQUIRED marks settings without a default
_SETTINGS: dict[str, tuple[Any, Any]] = {
    "name": (str, _REQUIRED),
    "currency": (str, _REQUIRED),
    "start_date": (_DATE, None),
    "planning.horizon_days": (int, 14),
    "planning.replenishment": (str, "swap"),
    "planning.lock_days": (int, 0),
    "calendar.holidays": (str, None),
    "calendar.subdivision": (str, None),
    "calendar.paydays": (list, ["last_business_day"]),
    "calendar.events": (list, []),
    "costs.carry_rate_annual": (_NUMBER, _REQUIRED),
    "costs.visit_fee": (_NUMBER, _REQUIRED),
    "costs.visit_fee_by_weekday": (dict, {}),
    "costs.emergency_visit_fee": (_NUMBER, None),
    "costs.handling_per_1000": (_NUMBER, 0.0),
    "costs.dry_day_penalty": (_NUMBER, _REQUIRED),
    "costs.shortfall_penalty_per_1000": (_NUMBER, 0.0),
    "service.max_dry_probability": (_NUMBER, 0.02),
    "paths.count": (int, 500),
    "paths.seed": (int, 20261201),
}
_TABLES = ("planning", "calendar", "costs", "service", "paths")
_EVENT_KEYS = ("date", "lift", "name")
_PAYDAY_RULES = ("last_business_day", "first_business_day")
_TYPE_WORDS = {str: "text in double quotes", int: "a whole number", dict: "a table",
               list: "a list in [ ]", _NUMBER: "a number", _DATE: "a date like 2026-12-07"}
_EXAMPLES = {  # what a fix suggests writing, when the default cannot serve as example
    "name": '"Kestrel Valley Bank"', "currency": '"EUR"', "start_date": "2026-12-07",
    "calendar.holidays": '"DE"', "calendar.subdivision": '"BY"',
    "calendar.events": "[{ date = 2026-12-24, lift = 1.3 }]",
    "costs.carry_rate_annual": "0.05", "costs.visit_fee": "120",
    "costs.visit_fee_by_weekday": "{ Sat = 150 }", "costs.emergency_visit_fee": "400",
    "costs.dry_day_penalty": "600"}


def _example(key: str) -> str:
    """A valid TOML value for a setting, as shown in fixes."""
    if key in _EXAMPLES:
        return _EXAMPLES[key]
    default = _SETTINGS[key][1]
    if isinstance(default, str):
        return f'"{default}"'
    if isinstance(default, list):
        return "[" + ", ".join(f'"{v}"' for v in default) + "]"
    return str(default)


def _type_ok(value: Any, kind: Any) -> bool:
    if isinstance(value, bool) and kind is not bool:
        return False  # TOML true/false is never a number here
    if kind == _DATE:
        return isinstance(value, str) or (isinstance(value, dt.date)
                                          and not isinstance(value, dt.datetime))
    if kind == _NUMBER:
        return isinstance(value, (int, float))
    return isinstance(value, kind)


def _parse_date(value: Any) -> pd.Timestamp | None:
    """A TOML date or a ``YYYY-MM-DD`` string as a midnight Timestamp; None if neither."""
    if isinstance(value, dt.date) and not isinstance(value, dt.datetime):
        return pd.Timestamp(value)
    if isinstance(value, str) and re.fullmatch(r"[0-9]{4}-[0-9]{2}-[0-9]{2}", value.strip()):
        try:
            return pd.Timestamp(dt.date.fromisoformat(value.strip()))
        except ValueError:
            return None
    return None


def _toml_lines(text: str) -> dict[str, int]:
    """Best-effort line of each dotted key and table header (first occurrence).

    Entries of an array of tables are numbered: ``calendar.events.0.date``."""
    where: dict[str, int] = {}
    table = ""
    counts: dict[str, int] = {}

    def dotted(raw: str) -> str:
        return ".".join(p.strip().strip("\"'") for p in raw.split("."))

    for n, raw in enumerate(text.splitlines(), 1):
        s = raw.strip()
        if m := re.match(r"\[\[\s*([^\]]+?)\s*\]\]", s):
            name = dotted(m[1])
            counts[name] = counts.get(name, -1) + 1
            where.setdefault(name, n)
            table = key = f"{name}.{counts[name]}"
        elif m := re.match(r"\[\s*([^\]]+?)\s*\]", s):
            table = key = dotted(m[1])
        elif m := re.match(r"([A-Za-z0-9_\-.\s\"']+?)\s*=", s):
            key = f"{table}.{dotted(m[1])}" if table else dotted(m[1])
        else:
            continue
        parts = key.split(".")
        for k in range(1, len(parts) + 1):
            where.setdefault(".".join(parts[:k]), n)
    return where


_TOML_FIXES = (
    ("Invalid value", "text needs double quotes (currency = \"EUR\"), dates are written "
                      "2026-12-07, decimals with a point (0.05)"),
    ("Cannot overwrite", "this setting or section appears twice: keep one"),
    ("Cannot declare", "this section appears twice: keep one"),
    ("Expected '=' after a key", "write each setting as key = value"),
    ("Unclosed", "close the list with ] or the text with a quote"),
)


def _toml_syntax_problem(file: str, exc: tomllib.TOMLDecodeError) -> Problem:
    message = str(exc)
    line = getattr(exc, "lineno", None)
    column = getattr(exc, "colno", None)
    if m := re.search(r"\s*\(at line (\d+), column (\d+)\)", message):
        line, column = int(m[1]), int(m[2])
        message = message[:m.start()] + message[m.end():]
    message = message.replace("(at end of document)", "at the end of the file").strip()
    message = re.sub(r"\(((?:'[^']*',?\s*)+)\)",
                     lambda m: "'" + ".".join(re.findall(r"'([^']*)'", m[1])) + "'", message)
    fix = next((f for key, f in _TOML_FIXES if message.startswith(key)),
               "correct the TOML syntax on that line")
    at = f" (at character {column} of the line)" if column else ""
    return Problem(file, f"TOML syntax error: {message[:1].lower()}{message[1:]}{at}", fix,
                   line=line)


def _read_settings(root: Path, notices: list[str]) -> dict[str, Any]:
    """Read scenario.toml into a flat dict of checked values (dotted keys), plus the typed
    ``calendar`` and ``costs`` and the parsed ``start_date`` (None: day after the history)."""
    file = SETTINGS_FILE
    text = _read_text(root, file, notices, what="the settings described in the README, "
                                                "'The scenario folder'")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(_toml_syntax_problem(file, exc)) from None
    return check_settings(data, file, _toml_lines(text))


def check_settings(data: dict[str, Any], file: str, where: Mapping[str, int] | None = None,
                   sources: Mapping[str, str] | None = None) -> dict[str, Any]:
    """The checks of scenario.toml on its parsed ``data``: every problem at once, as an
    :class:`~planner.errors.InputError`. ``where`` gives the line of each dotted key in
    ``file``; ``sources`` names, per dotted key, where a changed value came from instead (a
    what-if's ``--set`` text or variant file), so that its problem points there. Returns what
    :func:`_read_settings` returns."""
    where = where or {}
    sources = sources or {}
    problems: list[Problem] = []

    def report(key: str, problem: str, fix: str, line_key: str | None = None) -> None:
        source = sources.get(key)
        if source is not None:
            problems.append(Problem(source, problem, fix, column=key))
            return
        line = where.get(line_key or key)
        if line is None and "." in key:
            line = where.get(key.rsplit(".", 1)[0])
        problems.append(Problem(file, problem, fix, line=line, column=key))

    values: dict[str, Any] = {}
    seen: set[str] = set()
    _walk_settings(data, "", values, seen, report)
    for key, (_, default) in _SETTINGS.items():
        if key in values:
            continue
        if default is not _REQUIRED:
            values[key] = default  # also stands in for a value of the wrong type, reported
        elif key not in seen:
            table, _, leaf = key.rpartition(".")
            place = f"under [{table}]" if table else "at the top, above the first [section]"
            report(key, f"required setting '{key}' is missing",
                   f"add {leaf} = {_example(key)} {place}")

    def check(key: str, ok: Callable[[Any], bool], problem: str, fix: str) -> None:
        if key in values and values[key] is not None and not ok(values[key]):
            report(key, f"'{key}' {problem}, got {_show(values[key])}", fix)

    finite = math.isfinite
    check("name", lambda v: v.strip() != "", "must not be empty", 'write name = "My network"')
    check("currency", lambda v: re.fullmatch(r"[A-Z]{3}", v) is not None,
          "must be a three-letter ISO 4217 code in capitals", 'write e.g. currency = "EUR"')
    start = None
    if values.get("start_date") is not None:
        start = _parse_date(values["start_date"])
        if start is not None and not YEARS[0] <= start.year <= YEARS[1]:
            report("start_date", f"'start_date' {values['start_date']} lies outside the years "
                                 f"{YEARS[0]}–{YEARS[1]}", "correct the year")
        elif start is None:
            report("start_date", f"'start_date' {_show(values['start_date'])} is not a date",
                   "write start_date = 2026-12-07 (a date that exists)")
    check("planning.horizon_days", lambda v: v >= RUN_RANGES["horizon_days"][0],
          "must be at least 1", "set horizon_days = 14 (days)")
    check("planning.horizon_days", lambda v: v < 1 or v <= RUN_RANGES["horizon_days"][1],
          f"must be at most {MAX_HORIZON_DAYS} (half a year)", "plan a shorter horizon, e.g. 14")
    check("planning.replenishment", lambda v: v in MODES, "must be \"swap\" or \"topup\"",
          'write replenishment = "swap" or "topup"'
          + _did_you_mean(str(values.get("planning.replenishment")), MODES))
    horizon = values.get("planning.horizon_days")
    horizon = horizon if isinstance(horizon, int) and 1 <= horizon <= MAX_HORIZON_DAYS \
        else None
    check("planning.lock_days",
          lambda v: v >= 0 and (horizon is None or v <= horizon),
          f"must lie between 0 and horizon_days ({horizon})", "set lock_days = 0 … horizon_days")
    check("costs.carry_rate_annual", lambda v: finite(v) and 0 <= v < 1,
          "must lie in [0, 1)", "write the annual rate as a fraction, e.g. 0.05 for 5 %")
    for key in ("visit_fee", "emergency_visit_fee", "handling_per_1000", "dry_day_penalty",
                "shortfall_penalty_per_1000"):
        check(f"costs.{key}", lambda v: finite(v) and v >= 0, "must be a finite number ≥ 0",
              f"set {key} to 0 or more")
    check("service.max_dry_probability", lambda v: finite(v) and 0 < v < 1,
          "must lie in (0, 1)", "write a probability, e.g. 0.02 for 2 %")
    check("paths.count", lambda v: run_setting_problem("path_count", v, "") is None,
          f"must lie between 1 and {MAX_PATH_COUNT:,}", "set count = 500")
    check("paths.seed", lambda v: run_setting_problem("seed", v, "") is None,
          "must be a whole number ≥ 0", "set seed = 1 (any whole number ≥ 0)")

    fees: dict[int, float] = {}
    for day, fee in values["costs.visit_fee_by_weekday"].items():
        key = f"costs.visit_fee_by_weekday.{day}"
        if day not in WEEKDAYS:
            report(key, f"unknown weekday '{day}' in costs.visit_fee_by_weekday",
                   f"use one of {', '.join(WEEKDAYS)}{_did_you_mean(day, WEEKDAYS)}")
        elif not _type_ok(fee, _NUMBER) or not (finite(fee) and fee >= 0):
            report(key, f"'{key}' must be a number ≥ 0, got {_show(fee)}", f"write e.g. {day} = 150")
        else:
            fees[WEEKDAYS.index(day)] = float(fee)
    calendar = _calendar(values, report)
    _raise_if(problems)

    c = {k.split(".", 1)[1]: v for k, v in values.items() if k.startswith("costs.")}
    values["costs"] = CostSettings(
        carry_rate_annual=float(c["carry_rate_annual"]),
        visit_fee=float(c["visit_fee"]),
        emergency_visit_fee=float(c["emergency_visit_fee"] if c["emergency_visit_fee"]
                                  is not None else 3 * c["visit_fee"]),
        handling_per_1000=float(c["handling_per_1000"]),
        dry_day_penalty=float(c["dry_day_penalty"]),
        shortfall_penalty_per_1000=float(c["shortfall_penalty_per_1000"]),
        visit_fee_by_weekday=fees,
    )
    values["calendar"] = calendar
    values["start_date"] = start
    return values


def _walk_settings(table: dict[str, Any], prefix: str, values: dict[str, Any],
                   seen: set[str], report: Callable[..., None]) -> None:
    """Check the keys and value types of one TOML table against ``_SETTINGS``."""
    for key, value in table.items():
        dotted = prefix + key
        if dotted in _SETTINGS:
            seen.add(dotted)
            kind = _SETTINGS[dotted][0]
            if _type_ok(value, kind):
                values[dotted] = value
            else:
                report(dotted, f"'{dotted}' must be {_TYPE_WORDS[kind]}, got {_show(value)}",
                       f"write {key} = {_example(dotted)}")
        elif dotted in _TABLES:
            if isinstance(value, dict):
                _walk_settings(value, dotted + ".", values, seen, report)
            else:
                report(dotted, f"'{dotted}' must be a section, got {_show(value)}",
                       f"write a line [{dotted}] and its settings below it")
        else:
            report(dotted, f"unknown setting '{dotted}'", _unknown_key_fix(key, prefix))


def _unknown_key_fix(key: str, prefix: str) -> str:
    """Suggest the nearest known setting: a sibling of similar spelling, or the same name in
    another section."""
    names = [*_SETTINGS, *_TABLES]
    siblings = [n[len(prefix):] for n in names
                if n.startswith(prefix) and "." not in n[len(prefix):]]
    elsewhere = [n for n in names if n.rsplit(".", 1)[-1] == key]
    if elsewhere:
        table = elsewhere[0].rpartition(".")[0]
        return (f"move it under [{table}]" if table
                else "move it to the top, above the first [section]")
    if near := _closest(key, siblings):
        return f"did you mean '{prefix}{near}'?"
    if near := _closest(key, [n.rsplit(".", 1)[-1] for n in names], cutoff=0.7):
        full = next(n for n in names if n.rsplit(".", 1)[-1] == near)
        return f"did you mean '{full}'?"
    return f"remove it (known here: {', '.join(siblings)})"


def _calendar(values: dict[str, Any], report: Callable[..., None]) -> CalendarSettings:
    country, subdivision = values["calendar.holidays"], values["calendar.subdivision"]
    if country is not None:
        import holidays

        try:
            holidays.country_holidays(country, subdiv=subdivision, years=2026)
        except (NotImplementedError, KeyError, ValueError) as exc:
            sub = f" with subdivision {_show(subdivision)}" if subdivision else ""
            report("calendar.holidays", f"calendar.holidays {_show(country)}{sub} is not "
                                        f"known: {exc}",
                   "use an ISO 3166 country code in capitals such as \"DE\", \"FR\", \"GB\", "
                   "and a subdivision the holidays library lists")
    elif subdivision is not None:
        report("calendar.subdivision", "calendar.subdivision is set but calendar.holidays is "
                                       "not", 'add holidays = "DE" (the country) as well')
    rules: list[str | int] = []
    for rule in values["calendar.paydays"]:
        if isinstance(rule, int) and not isinstance(rule, bool) and 1 <= rule <= 31:
            rules.append(rule)
        elif isinstance(rule, str) and rule in _PAYDAY_RULES:
            rules.append(rule)
        else:
            report("calendar.paydays", f"unknown payday rule {_show(rule)} in calendar.paydays",
                   "use \"last_business_day\", \"first_business_day\" or a day of the month "
                   "1–31" + (_did_you_mean(rule, _PAYDAY_RULES) if isinstance(rule, str)
                             else ""))
    events: list[Event] = []
    for i, ev in enumerate(values["calendar.events"]):
        at = f"calendar.events.{i}"
        label = f"calendar event {i + 1}"
        if not isinstance(ev, dict) or "date" not in ev or "lift" not in ev:
            report("calendar.events", f"{label} needs a date and a lift",
                   "write [[calendar.events]] with date = 2026-12-24 and lift = 1.3", at)
            continue
        ok = True
        for key in sorted(set(ev) - set(_EVENT_KEYS)):
            report("calendar.events", f"unknown setting '{key}' in {label}",
                   f"did you mean '{_closest(key, _EVENT_KEYS)}'?"
                   if _closest(key, _EVENT_KEYS) else "remove it (known: date, lift, name)",
                   f"{at}.{key}")
            ok = False
        date = _parse_date(ev["date"])
        if date is None:
            report("calendar.events", f"{label}: date {_show(ev['date'])} is not a date",
                   "write date = 2026-12-24", f"{at}.date")
            ok = False
        lift = ev["lift"]
        if not _type_ok(lift, _NUMBER) or not (math.isfinite(lift) and lift > 0):
            report("calendar.events", f"{label}: lift must be a number > 0, got {_show(lift)}",
                   "write e.g. lift = 1.3 for +30 %", f"{at}.lift")
            ok = False
        if ok:
            events.append(Event(date, float(lift), str(ev.get("name", ""))))
    return CalendarSettings(country, subdivision, tuple(rules), tuple(events))


def settings_data(scenario: Scenario) -> dict[str, Any]:
    """The settings in force in ``scenario`` as scenario.toml data (the inverse of
    :func:`check_settings`; also the values changed on the command line), for changes that
    must pass the same checks as the file (a what-if comparison's overrides)."""
    cal, costs = scenario.calendar, scenario.costs
    calendar: dict[str, Any] = {"paydays": list(cal.paydays),
                                "events": [{"date": e.date.date(), "lift": e.lift,
                                            "name": e.name} for e in cal.events]}
    if cal.country is not None:
        calendar["holidays"] = cal.country
    if cal.subdivision is not None:
        calendar["subdivision"] = cal.subdivision
    return {
        "name": scenario.name,
        "currency": scenario.currency,
        "start_date": scenario.start_date.date(),
        "planning": {"horizon_days": scenario.horizon_days,
                     "replenishment": scenario.replenishment,
                     "lock_days": scenario.lock_days},
        "calendar": calendar,
        "costs": {"carry_rate_annual": costs.carry_rate_annual,
                  "visit_fee": costs.visit_fee,
                  "emergency_visit_fee": costs.emergency_visit_fee,
                  "handling_per_1000": costs.handling_per_1000,
                  "dry_day_penalty": costs.dry_day_penalty,
                  "shortfall_penalty_per_1000": costs.shortfall_penalty_per_1000,
                  "visit_fee_by_weekday": {WEEKDAYS[d]: fee for d, fee
                                           in sorted(costs.visit_fee_by_weekday.items())}},
        "service": {"max_dry_probability": scenario.max_dry_probability},
        "paths": {"count": scenario.path_count, "seed": scenario.seed},
    }
