"""Load and validate a scenario folder (DESIGN §2) into one typed :class:`Scenario`.

Validation happens here, once, at the edge: every problem of a file is collected and raised
together as an :class:`~planner.errors.InputError` so a user can fix them in one pass. Inner code
trusts a :class:`Scenario`.

Weekdays are numbered as in Python: Monday = 0 … Sunday = 6.
"""
from __future__ import annotations

import difflib
import hashlib
import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from planner.errors import InputError, Problem

WEEKDAYS = ("Mon", "Tue", "Wed", "Thu", "Fri", "Sat", "Sun")
STATUSES = ("ok", "dry", "down")
MODES = ("swap", "topup")


# --------------------------------------------------------------------------------------------
# Typed settings
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

    Frames (one row per item; amounts in currency units):

    - ``terminals``: index ``terminal_id`` (str); columns ``depot`` (str), ``capacity``,
      ``insurance_limit``, ``bundle``, ``balance_now`` (float), ``visit_days`` (the original
      text, e.g. ``"Mon|Thu"``), ``allowed_weekdays`` (tuple of 7 bools, Mon…Sun), ``limit``
      (= min(capacity, insurance_limit) rounded down to whole bundles), ``site`` (str, "" if not
      given), ``visit_fee`` (float, NaN when the scenario fee applies).
    - ``depots``: index ``depot`` (str); columns ``Mon`` … ``Sun`` (int crews per day).
    - ``dispense``: columns ``terminal_id`` (str), ``date`` (datetime64, midnight), ``amount``
      (float), ``status`` (one of ``ok``, ``dry``, ``down``); sorted by terminal and date.
    - ``committed``: columns ``terminal_id``, ``date``, ``load``; may be empty.
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


# --------------------------------------------------------------------------------------------
# TOML settings
# --------------------------------------------------------------------------------------------

# key -> (type, required, default); nested tables are dicts of the same form.
_NUMBER = (int, float)
_SCHEMA: dict[str, Any] = {
    "name": (str, True, None),
    "currency": (str, True, None),
    "start_date": ("date", False, None),
    "planning": {
        "horizon_days": (int, False, 14),
        "replenishment": (str, False, "swap"),
        "lock_days": (int, False, 0),
    },
    "calendar": {
        "holidays": (str, False, None),
        "subdivision": (str, False, None),
        "paydays": (list, False, ["last_business_day"]),
        "events": (list, False, []),
    },
    "costs": {
        "carry_rate_annual": (_NUMBER, True, None),
        "visit_fee": (_NUMBER, True, None),
        "visit_fee_by_weekday": (dict, False, {}),
        "emergency_visit_fee": (_NUMBER, False, None),
        "handling_per_1000": (_NUMBER, False, 0.0),
        "dry_day_penalty": (_NUMBER, True, None),
        "shortfall_penalty_per_1000": (_NUMBER, False, 0.0),
    },
    "service": {
        "max_dry_probability": (_NUMBER, False, 0.02),
    },
    "paths": {
        "count": (int, False, 500),
        "seed": (int, False, 20261201),
    },
}

_TYPE_WORDS = {str: "text in quotes", int: "a whole number", dict: "a table", list: "a list"}


def _closest(word: str, choices: list[str] | tuple[str, ...]) -> str | None:
    match = difflib.get_close_matches(word, list(choices), n=1, cutoff=0.5)
    return match[0] if match else None


def _type_word(kind: Any) -> str:
    if kind is _NUMBER:
        return "a number"
    if kind == "date":
        return "a date like 2026-12-07"
    return _TYPE_WORDS.get(kind, str(kind))


def _check_table(
    data: dict, schema: dict, prefix: str, file: str, problems: list[Problem]
) -> dict[str, Any]:
    """Check keys and types of one TOML table against its schema; fill defaults."""
    out: dict[str, Any] = {}
    for key, value in data.items():
        dotted = f"{prefix}{key}"
        if key not in schema:
            near = _closest(key, list(schema))
            fix = f"did you mean '{prefix}{near}'?" if near else "remove it"
            problems.append(Problem(file, f"unknown setting '{dotted}'", fix))
            continue
        spec = schema[key]
        if isinstance(spec, dict):
            if not isinstance(value, dict):
                problems.append(Problem(file, f"'{dotted}' must be a table [{dotted}]",
                                        f"write it as a section [{dotted}]"))
                continue
            out[key] = _check_table(value, spec, f"{dotted}.", file, problems)
            continue
        kind = spec[0]
        ok = _type_ok(value, kind)
        if not ok:
            problems.append(Problem(
                file, f"'{dotted}' must be {_type_word(kind)}, got {value!r}",
                f"set {dotted} to {_type_word(kind)}"))
            continue
        out[key] = value
    for key, spec in schema.items():
        if key in out:
            continue
        if isinstance(spec, dict):
            out[key] = _check_table({}, spec, f"{prefix}{key}.", file, problems) \
                if key not in data else out.get(key, {})
            continue
        kind, required, default = spec
        if required and key not in data:
            problems.append(Problem(file, f"required setting '{prefix}{key}' is missing",
                                    f"add {key} = <{_type_word(kind)}> under "
                                    f"[{prefix.rstrip('.')}]" if prefix else
                                    f"add {key} = <{_type_word(kind)}> at the top"))
        elif key not in data:
            out[key] = default
    return out


def _type_ok(value: Any, kind: Any) -> bool:
    if kind == "date":
        import datetime as _dt

        return isinstance(value, _dt.date) and not isinstance(value, _dt.datetime) \
            or isinstance(value, str)
    if kind is _NUMBER:
        return isinstance(value, _NUMBER) and not isinstance(value, bool)
    if kind is int:
        return isinstance(value, int) and not isinstance(value, bool)
    return isinstance(value, kind)


def _read_settings(root: Path) -> tuple[dict[str, Any], list[Problem]]:
    file = "scenario.toml"
    path = root / file
    if not path.is_file():
        raise InputError(Problem(file, f"file not found in {root}",
                                 "create scenario.toml (see README, 'The scenario folder')"))
    raw = path.read_bytes()
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        raise InputError(Problem(file, "the file is not UTF-8 text",
                                 "save it as UTF-8")) from None
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        line = getattr(exc, "lineno", None)
        msg = getattr(exc, "msg", str(exc))
        raise InputError(Problem(file, f"TOML syntax error: {msg}",
                                 "correct the syntax on that line (text values need quotes)",
                                 line=line)) from None
    problems: list[Problem] = []
    settings = _check_table(data, _SCHEMA, "", file, problems)
    if problems:
        return settings, problems
    p, c, s, k = (settings["planning"], settings["costs"], settings["service"],
                  settings["paths"])
    if p["horizon_days"] < 1:
        problems.append(Problem(file, f"planning.horizon_days must be at least 1, got "
                                      f"{p['horizon_days']}", "set horizon_days = 14 or more"))
    if p["replenishment"] not in MODES:
        problems.append(Problem(file, f"planning.replenishment must be 'swap' or 'topup', got "
                                      f"{p['replenishment']!r}",
                                "write replenishment = \"swap\" or \"topup\""))
    if p["lock_days"] < 0 or p["lock_days"] > max(p["horizon_days"], 0):
        problems.append(Problem(file, "planning.lock_days must lie between 0 and horizon_days",
                                "set lock_days = 0 … horizon_days"))
    rate = c["carry_rate_annual"]
    if not (math.isfinite(rate) and 0 <= rate < 1):
        problems.append(Problem(file, f"costs.carry_rate_annual must lie in [0, 1), got {rate}",
                                "write the rate as a fraction, e.g. 0.05 for 5 %"))
    for key in ("visit_fee", "emergency_visit_fee", "handling_per_1000", "dry_day_penalty",
                "shortfall_penalty_per_1000"):
        v = c.get(key)
        if v is not None and not (math.isfinite(v) and v >= 0):
            problems.append(Problem(file, f"costs.{key} must be a finite number ≥ 0, got {v}",
                                    f"set costs.{key} to 0 or more"))
    fees: dict[int, float] = {}
    for day, fee in c["visit_fee_by_weekday"].items():
        if day not in WEEKDAYS:
            near = _closest(day, WEEKDAYS)
            problems.append(Problem(file, f"unknown weekday '{day}' in "
                                          "costs.visit_fee_by_weekday",
                                    f"use one of {', '.join(WEEKDAYS)}"
                                    + (f" (did you mean '{near}'?)" if near else "")))
        elif not _type_ok(fee, _NUMBER) or not (math.isfinite(fee) and fee >= 0):
            problems.append(Problem(file, f"costs.visit_fee_by_weekday.{day} must be a number "
                                          f"≥ 0, got {fee!r}", "write e.g. Sat = 150"))
        else:
            fees[WEEKDAYS.index(day)] = float(fee)
    c["visit_fee_by_weekday"] = fees
    q = s["max_dry_probability"]
    if not (0 < q < 1):
        problems.append(Problem(file, f"service.max_dry_probability must lie in (0, 1), got {q}",
                                "write a probability, e.g. 0.02 for 2 %"))
    if k["count"] < 1:
        problems.append(Problem(file, f"paths.count must be at least 1, got {k['count']}",
                                "set paths.count = 500"))
    return settings, problems


def _calendar(settings: dict[str, Any], file: str, problems: list[Problem]) -> CalendarSettings:
    cal = settings["calendar"]
    country = cal["holidays"]
    if country is not None:
        import holidays as hol

        try:
            hol.country_holidays(country, subdiv=cal["subdivision"], years=2026)
        except (NotImplementedError, KeyError, ValueError) as exc:
            problems.append(Problem(file, f"calendar.holidays '{country}' (subdivision "
                                          f"{cal['subdivision']!r}) is not known: {exc}",
                                    "use an ISO 3166 country code such as 'DE', 'FR', 'GB'"))
    rules: list[str | int] = []
    for rule in cal["paydays"]:
        if isinstance(rule, int) and not isinstance(rule, bool) and 1 <= rule <= 31:
            rules.append(rule)
        elif rule in ("last_business_day", "first_business_day"):
            rules.append(rule)
        else:
            problems.append(Problem(file, f"unknown payday rule {rule!r} in calendar.paydays",
                                    "use \"last_business_day\", \"first_business_day\" or a "
                                    "day of the month 1–31"))
    events: list[Event] = []
    for i, ev in enumerate(cal["events"], 1):
        if not isinstance(ev, dict) or "date" not in ev or "lift" not in ev:
            problems.append(Problem(file, f"calendar event {i} needs a date and a lift",
                                    "write [[calendar.events]] with date = 2026-12-24 and "
                                    "lift = 1.3"))
            continue
        unknown = set(ev) - {"date", "lift", "name"}
        for key in sorted(unknown):
            near = _closest(key, ["date", "lift", "name"])
            problems.append(Problem(file, f"unknown setting '{key}' in calendar event {i}",
                                    f"did you mean '{near}'?" if near else "remove it"))
        try:
            date = pd.Timestamp(str(ev["date"])).normalize()
        except ValueError:
            problems.append(Problem(file, f"calendar event {i}: date {ev['date']!r} does not "
                                          "parse", "write the date as 2026-12-24"))
            continue
        lift = ev["lift"]
        if not _type_ok(lift, _NUMBER) or not (math.isfinite(lift) and lift > 0):
            problems.append(Problem(file, f"calendar event {i}: lift must be a number > 0, got "
                                          f"{lift!r}", "write e.g. lift = 1.3 for +30 %"))
            continue
        events.append(Event(date, float(lift), str(ev.get("name", ""))))
    return CalendarSettings(country, cal["subdivision"], tuple(rules), tuple(events))


# --------------------------------------------------------------------------------------------
# CSV files
# --------------------------------------------------------------------------------------------


def _read_csv(root: Path, file: str, required: list[str], optional: list[str],
              notices: list[str], must_exist: bool = True) -> pd.DataFrame | None:
    """Read one CSV as text columns, checking encoding, separator and column names."""
    path = root / file
    if not path.is_file():
        if not must_exist:
            return None
        raise InputError(Problem(file, f"file not found in {root}",
                                 f"create {file} with columns {', '.join(required)}"))
    raw = path.read_bytes()
    if not raw.strip():
        raise InputError(Problem(file, "the file is empty",
                                 f"write a header line with {', '.join(required)} and data rows"))
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError:
        try:
            raw.decode("cp1252")
        except UnicodeDecodeError:
            pass
        raise InputError(Problem(file, "the file is not UTF-8 text (it looks like a Windows or "
                                       "Latin-1 encoding)",
                                 "save it as 'CSV UTF-8' in your spreadsheet program")) from None
    header = text.splitlines()[0]
    if ";" in header and "," not in header:
        raise InputError(Problem(file, "the columns are separated by ';' instead of ','",
                                 "save the file with comma separators (in a spreadsheet: "
                                 "'CSV comma-delimited')", line=1))
    import io

    try:
        frame = pd.read_csv(io.StringIO(text), dtype=str, keep_default_na=False,
                            skipinitialspace=True)
    except pd.errors.ParserError as exc:
        raise InputError(Problem(file, f"the file is not valid CSV: {exc}",
                                 "check that every row has the same number of commas")) from None
    frame.columns = [str(c).strip() for c in frame.columns]
    problems: list[Problem] = []
    known = required + optional
    for col in required:
        if col not in frame.columns:
            near = _closest(col, [c for c in frame.columns if c not in known])
            fix = (f"rename column '{near}' to '{col}'" if near
                   else f"add a column '{col}'")
            problems.append(Problem(file, f"required column '{col}' is missing", fix, line=1,
                                    column=col))
    if problems:
        raise InputError(problems)
    extra = [c for c in frame.columns if c not in known]
    if extra:
        notices.append(f"{file}: extra columns ignored: {', '.join(extra)}")
        frame = frame.drop(columns=extra)
    if frame.empty:
        raise InputError(Problem(file, "the file has a header but no data rows",
                                 "add at least one row"))
    for col in frame.columns:
        frame[col] = frame[col].str.strip()
    return frame


def _line(i: int) -> int:
    """Line number in the file of data row ``i`` (0-based), the header being line 1."""
    return int(i) + 2


def _numbers(frame: pd.DataFrame, col: str, file: str, problems: list[Problem],
             minimum: float | None = None, strict: bool = False, required: bool = True,
             what: str = "an amount") -> pd.Series:
    """Parse a numeric column; report every cell that does not parse or is out of range."""
    values = pd.to_numeric(frame[col].where(frame[col] != "", None), errors="coerce")
    for i in np.flatnonzero(values.isna().to_numpy()):
        cell = frame[col].iloc[i]
        if cell == "" and not required:
            continue
        problems.append(Problem(file, f"{what} {cell!r} does not parse as a number"
                                if cell != "" else f"{what} is empty",
                                "write a plain number such as 12000 (no thousands separator "
                                "or currency sign)", line=_line(i), column=col))
    finite = values.notna()
    bad = finite & ~np.isfinite(values.astype(float))
    for i in np.flatnonzero(bad.to_numpy()):
        problems.append(Problem(file, f"{what} {frame[col].iloc[i]!r} is not finite",
                                "write a finite number", line=_line(i), column=col))
    if minimum is not None:
        ok = np.isfinite(values.astype(float))
        low = ok & ((values <= minimum) if strict else (values < minimum))
        for i in np.flatnonzero(low.to_numpy()):
            rel = "> " if strict else "≥ "
            problems.append(Problem(file, f"{what} {frame[col].iloc[i]} must be {rel}{minimum:g}",
                                    f"correct the value to {rel}{minimum:g}", line=_line(i),
                                    column=col))
    return values.astype(float)


def _dates(frame: pd.DataFrame, col: str, file: str, problems: list[Problem]) -> pd.Series:
    parsed = pd.to_datetime(frame[col], format="%Y-%m-%d", errors="coerce")
    for i in np.flatnonzero(parsed.isna().to_numpy()):
        problems.append(Problem(file, f"date {frame[col].iloc[i]!r} does not parse",
                                "write dates as YYYY-MM-DD, e.g. 2026-03-31", line=_line(i),
                                column=col))
    return parsed


def _parse_weekdays(text: str) -> tuple[tuple[bool, ...], list[str]]:
    parts = [p.strip() for p in text.split("|") if p.strip()]
    bad = [p for p in parts if p not in WEEKDAYS]
    allowed = tuple(d in parts for d in WEEKDAYS)
    return allowed, bad


def _read_depots(root: Path, notices: list[str]) -> pd.DataFrame:
    file = "depots.csv"
    frame = _read_csv(root, file, ["depot", "max_visits_per_day"], list(WEEKDAYS), notices)
    problems: list[Problem] = []
    base = _numbers(frame, "max_visits_per_day", file, problems, minimum=0,
                    what="crew limit")
    out = pd.DataFrame(index=pd.Index(frame["depot"], name="depot"))
    for d in WEEKDAYS:
        if d in frame.columns:
            vals = _numbers(frame, d, file, problems, minimum=0, required=False,
                            what="crew limit")
            vals = vals.where(vals.notna(), base)
        else:
            vals = base
        out[d] = vals.to_numpy()
    for col in ["max_visits_per_day", *[d for d in WEEKDAYS if d in frame.columns]]:
        v = pd.to_numeric(frame[col], errors="coerce")
        for i in np.flatnonzero((v.notna() & np.isfinite(v) & (v % 1 != 0)).to_numpy()):
            problems.append(Problem(file, f"crew limit {frame[col].iloc[i]} is not a whole "
                                          "number", "write a whole number of visits",
                                    line=_line(i), column=col))
    dup = frame["depot"].duplicated(keep="first")
    for i in np.flatnonzero(dup.to_numpy()):
        problems.append(Problem(file, f"depot {frame['depot'].iloc[i]!r} appears twice",
                                "keep one row per depot", line=_line(i), column="depot"))
    for i in np.flatnonzero((frame["depot"] == "").to_numpy()):
        problems.append(Problem(file, "depot name is empty", "name the depot", line=_line(i),
                                column="depot"))
    if problems:
        raise InputError(problems)
    return out.astype(int)


def _read_terminals(root: Path, depots: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    file = "terminals.csv"
    required = ["terminal_id", "depot", "capacity", "insurance_limit", "bundle", "balance_now",
                "visit_days"]
    frame = _read_csv(root, file, required, ["site", "visit_fee"], notices)
    problems: list[Problem] = []
    cap = _numbers(frame, "capacity", file, problems, minimum=0, strict=True,
                   what="capacity")
    ins = _numbers(frame, "insurance_limit", file, problems, minimum=0, strict=True,
                   what="insurance limit")
    bundle = _numbers(frame, "bundle", file, problems, minimum=0, strict=True, what="bundle")
    bal = _numbers(frame, "balance_now", file, problems, minimum=0, what="balance")
    if "visit_fee" in frame.columns:
        fee = _numbers(frame, "visit_fee", file, problems, minimum=0, required=False,
                       what="visit fee")
    else:
        fee = pd.Series(np.nan, index=frame.index)
    for i in np.flatnonzero((bal > cap).to_numpy()):
        problems.append(Problem(file, f"balance_now {frame['balance_now'].iloc[i]} is above the "
                                      f"capacity {frame['capacity'].iloc[i]}",
                                "correct the balance or the capacity", line=_line(i),
                                column="balance_now"))
    allowed: list[tuple[bool, ...]] = []
    for i, text in enumerate(frame["visit_days"]):
        days, bad = _parse_weekdays(text)
        for b in bad:
            near = _closest(b, WEEKDAYS)
            problems.append(Problem(file, f"unknown weekday {b!r} in visit_days",
                                    f"use {'|'.join(WEEKDAYS)}"
                                    + (f" (did you mean '{near}'?)" if near else ""),
                                    line=_line(i), column="visit_days"))
        if not bad and not any(days):
            problems.append(Problem(file, "visit_days lists no day", "write e.g. Mon|Thu",
                                    line=_line(i), column="visit_days"))
        allowed.append(days)
    for i in np.flatnonzero((~frame["depot"].isin(depots.index)).to_numpy()):
        problems.append(Problem(file, f"depot {frame['depot'].iloc[i]!r} is not in depots.csv",
                                "add the depot to depots.csv or correct the name",
                                line=_line(i), column="depot"))
    for i in np.flatnonzero(frame["terminal_id"].duplicated().to_numpy()):
        problems.append(Problem(file, f"terminal {frame['terminal_id'].iloc[i]!r} appears "
                                      "twice", "keep one row per terminal", line=_line(i),
                                column="terminal_id"))
    for i in np.flatnonzero((frame["terminal_id"] == "").to_numpy()):
        problems.append(Problem(file, "terminal_id is empty", "give every terminal an id",
                                line=_line(i), column="terminal_id"))
    if problems:
        raise InputError(problems)
    out = pd.DataFrame({
        "depot": frame["depot"].to_numpy(),
        "capacity": cap.to_numpy(),
        "insurance_limit": ins.to_numpy(),
        "bundle": bundle.to_numpy(),
        "balance_now": bal.to_numpy(),
        "visit_days": frame["visit_days"].to_numpy(),
        "site": frame["site"].to_numpy() if "site" in frame.columns else "",
        "visit_fee": fee.to_numpy(),
    }, index=pd.Index(frame["terminal_id"], name="terminal_id"))
    out["allowed_weekdays"] = allowed
    out["limit"] = np.floor(np.minimum(out["capacity"], out["insurance_limit"])
                            / out["bundle"]) * out["bundle"]
    for tid in out.index[out["limit"] <= 0]:
        problems.append(Problem(file, f"terminal {tid!r}: min(capacity, insurance_limit) is "
                                      "smaller than one bundle",
                                "raise the capacity or insurance limit, or lower the bundle",
                                line=_line(frame.index[frame['terminal_id'] == tid][0]),
                                column="bundle"))
    if problems:
        raise InputError(problems)
    return out


def _check_terminal_ids(frame: pd.DataFrame, file: str, terminals: pd.DataFrame,
                        problems: list[Problem]) -> None:
    unknown = ~frame["terminal_id"].isin(terminals.index)
    for i in np.flatnonzero(unknown.to_numpy()):
        problems.append(Problem(file, f"terminal {frame['terminal_id'].iloc[i]!r} is not in "
                                      "terminals.csv",
                                "add it to terminals.csv or remove its rows", line=_line(i),
                                column="terminal_id"))


def _check_duplicates(frame: pd.DataFrame, dates: pd.Series, file: str,
                      problems: list[Problem]) -> None:
    key = pd.DataFrame({"t": frame["terminal_id"], "d": dates})
    dup = key.duplicated(keep="first") & dates.notna()
    first = {}
    for i, (t, d) in enumerate(zip(key["t"], key["d"])):
        first.setdefault((t, d), i)
    for i in np.flatnonzero(dup.to_numpy()):
        t, d = key["t"].iloc[i], key["d"].iloc[i]
        problems.append(Problem(file, f"terminal {t!r} has a second row for "
                                      f"{d:%Y-%m-%d} (first on line {_line(first[(t, d)])})",
                                "keep one row per terminal and date", line=_line(i),
                                column="date"))


def _read_dispense(root: Path, terminals: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    file = "dispense.csv"
    frame = _read_csv(root, file, ["terminal_id", "date", "amount", "status"], [], notices)
    problems: list[Problem] = []
    dates = _dates(frame, "date", file, problems)
    amount = _numbers(frame, "amount", file, problems, minimum=0, what="amount")
    status = frame["status"].str.lower()
    for i in np.flatnonzero((~status.isin(STATUSES)).to_numpy()):
        cell = frame["status"].iloc[i]
        near = _closest(cell.lower(), STATUSES)
        problems.append(Problem(file, f"unknown status {cell!r}",
                                "use ok, dry or down" + (f" (did you mean '{near}'?)"
                                                         if near else ""),
                                line=_line(i), column="status"))
    _check_terminal_ids(frame, file, terminals, problems)
    _check_duplicates(frame, dates, file, problems)
    if problems:
        raise InputError(problems)
    out = pd.DataFrame({"terminal_id": frame["terminal_id"].to_numpy(),
                        "date": dates.to_numpy(), "amount": amount.to_numpy(),
                        "status": status.to_numpy()})
    # a `down` row may carry an empty amount in some exports; it is never demand anyway
    return out.sort_values(["terminal_id", "date"], ignore_index=True)


def _read_committed(root: Path, terminals: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    file = "committed.csv"
    empty = pd.DataFrame({"terminal_id": pd.Series([], dtype=str),
                          "date": pd.Series([], dtype="datetime64[ns]"),
                          "load": pd.Series([], dtype=float)})
    frame = _read_csv(root, file, ["terminal_id", "date", "load"], [], notices,
                      must_exist=False)
    if frame is None:
        return empty
    problems: list[Problem] = []
    dates = _dates(frame, "date", file, problems)
    load = _numbers(frame, "load", file, problems, minimum=0, what="load")
    _check_terminal_ids(frame, file, terminals, problems)
    _check_duplicates(frame, dates, file, problems)
    known = frame["terminal_id"].isin(terminals.index)
    for i in np.flatnonzero(known.to_numpy()):
        tid = frame["terminal_id"].iloc[i]
        b = terminals.at[tid, "bundle"]
        v = load.iloc[i]
        if np.isfinite(v) and abs(v / b - round(v / b)) > 1e-9:
            problems.append(Problem(file, f"load {frame['load'].iloc[i]} for {tid!r} is not a "
                                          f"multiple of its bundle {b:g}",
                                    f"round the load to a multiple of {b:g}", line=_line(i),
                                    column="load"))
        elif np.isfinite(v) and v > terminals.at[tid, "limit"]:
            problems.append(Problem(file, f"load {frame['load'].iloc[i]} for {tid!r} is above "
                                          f"its limit {terminals.at[tid, 'limit']:g} "
                                          "(min of capacity and insurance limit)",
                                    "lower the load", line=_line(i), column="load"))
    if problems:
        raise InputError(problems)
    return pd.DataFrame({"terminal_id": frame["terminal_id"].to_numpy(),
                         "date": dates.to_numpy(), "load": load.to_numpy()})


def _fingerprint(root: Path) -> str:
    h = hashlib.sha256()
    for name in ("scenario.toml", "terminals.csv", "depots.csv", "dispense.csv",
                 "committed.csv"):
        p = root / name
        if p.is_file():
            h.update(name.encode())
            h.update(p.read_bytes())
    return h.hexdigest()[:16]


def _history_warnings(dispense: pd.DataFrame, terminals: pd.DataFrame,
                      start: pd.Timestamp) -> list[str]:
    out: list[str] = []
    missing = sorted(set(terminals.index) - set(dispense["terminal_id"]))
    if missing:
        out.append(f"dispense.csv: no history for {len(missing)} terminal(s): "
                   f"{', '.join(missing[:10])}{' …' if len(missing) > 10 else ''}; "
                   "they are planned from network-wide averages")
    g = dispense.groupby("terminal_id")["date"]
    span = (g.max() - g.min()).dt.days + 1
    rows = g.size()
    short = span.index[span < 56]
    if len(short):
        out.append(f"dispense.csv: history shorter than 8 weeks for {len(short)} terminal(s): "
                   f"{', '.join(list(short)[:10])}")
    gappy = (span - rows)[(span - rows) > 0]
    if len(gappy):
        out.append(f"dispense.csv: {int(gappy.sum())} missing day(s) in the history of "
                   f"{len(gappy)} terminal(s); they are treated as gaps")
    future = dispense["date"] >= start
    if future.any():
        out.append(f"dispense.csv: {int(future.sum())} row(s) dated on or after the first "
                   f"planning day {start:%Y-%m-%d}; they are ignored")
    return out


def load_scenario(path: str | Path) -> Scenario:
    """Load and validate a scenario folder.

    Raises :class:`~planner.errors.InputError` carrying every problem of the first malformed
    file (files are checked in the order settings, depots, terminals, dispense, committed).
    """
    root = Path(path)
    if not root.is_dir():
        raise InputError(Problem(str(root), "scenario folder not found",
                                 "give the path of a folder holding scenario.toml"))
    notices: list[str] = []
    settings, problems = _read_settings(root)
    calendar = _calendar(settings, "scenario.toml", problems) if not problems else None
    if problems:
        raise InputError(problems)
    depots = _read_depots(root, notices)
    terminals = _read_terminals(root, depots, notices)
    dispense = _read_dispense(root, terminals, notices)
    committed = _read_committed(root, terminals, notices)

    start = settings.get("start_date")
    if start is None:
        start = dispense["date"].max() + pd.Timedelta(days=1)
    else:
        try:
            start = pd.Timestamp(str(start)).normalize()
        except ValueError:
            raise InputError(Problem("scenario.toml", f"start_date {start!r} does not parse",
                                     "write start_date = 2026-12-07")) from None
    c = settings["costs"]
    costs = CostSettings(
        carry_rate_annual=float(c["carry_rate_annual"]),
        visit_fee=float(c["visit_fee"]),
        emergency_visit_fee=float(c["emergency_visit_fee"]
                                  if c["emergency_visit_fee"] is not None
                                  else 3 * c["visit_fee"]),
        handling_per_1000=float(c["handling_per_1000"]),
        dry_day_penalty=float(c["dry_day_penalty"]),
        shortfall_penalty_per_1000=float(c["shortfall_penalty_per_1000"]),
        visit_fee_by_weekday=c["visit_fee_by_weekday"],
    )
    horizon = int(settings["planning"]["horizon_days"])
    end = start + pd.Timedelta(days=horizon)
    problems = []
    for i, (d, t) in enumerate(zip(committed["date"], committed["terminal_id"])):
        if d < start or d >= end:
            problems.append(Problem("committed.csv", f"visit for {t!r} on {d:%Y-%m-%d} lies "
                                                     f"outside the horizon {start:%Y-%m-%d} … "
                                                     f"{end - pd.Timedelta(days=1):%Y-%m-%d}",
                                    "remove the row or change start_date", line=_line(i),
                                    column="date"))
        elif not terminals.at[t, "allowed_weekdays"][d.weekday()]:
            notices.append(f"committed.csv: line {_line(i)}: {t} is visited on "
                           f"{WEEKDAYS[d.weekday()]}, outside its visit_days; kept as ordered")
    if problems:
        raise InputError(problems)
    warnings = notices + _history_warnings(dispense, terminals, start)
    dispense = dispense[dispense["date"] < start].reset_index(drop=True)
    return Scenario(
        root=root,
        name=settings["name"],
        currency=settings["currency"],
        start_date=start,
        horizon_days=horizon,
        replenishment=settings["planning"]["replenishment"],
        lock_days=int(settings["planning"]["lock_days"]),
        calendar=calendar,
        costs=costs,
        max_dry_probability=float(settings["service"]["max_dry_probability"]),
        path_count=int(settings["paths"]["count"]),
        seed=int(settings["paths"]["seed"]),
        terminals=terminals,
        depots=depots,
        dispense=dispense,
        committed=committed,
        warnings=tuple(warnings),
        fingerprint=_fingerprint(root),
    )
