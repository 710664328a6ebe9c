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
"""
from __future__ import annotations

import csv
import datetime as dt
import difflib
import hashlib
import io
import itertools
import math
import re
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from planner.costs import MODES  # noqa: F401 - the modes a scenario may name
from planner.errors import InputError, Problem

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
# Shared helpers
# --------------------------------------------------------------------------------------------

MAX_ROWS_PER_CHECK = 20  # beyond this a check reports a count, not a line per row


def _closest(word: str, choices: list[str] | tuple[str, ...], cutoff: float = 0.5) -> str | None:
    match = difflib.get_close_matches(word, list(choices), n=1, cutoff=cutoff)
    return match[0] if match else None


def _did_you_mean(word: str, choices: list[str] | tuple[str, ...]) -> str:
    near = _closest(word, choices)
    return f" (did you mean '{near}'?)" if near else ""


def _show(value: Any) -> str:
    """A cell or setting as quoted in messages, shortened so garbage cannot flood the
    screen."""
    text = repr(value)
    return text if len(text) <= 42 else text[:38] + "...'"


def _raise_if(problems: list[Problem]) -> None:
    """Raise all problems collected for one file (grouped by check, each in line order)."""
    if problems:
        raise InputError(problems)


# --------------------------------------------------------------------------------------------
# Reading text
# --------------------------------------------------------------------------------------------


def _read_text(root: Path, file: str, notices: list[str], *, what: str,
               must_exist: bool = True) -> str | None:
    """Read and decode one text file of the folder; None when an optional file is absent."""
    path = root / file
    if not path.exists():
        if not must_exist:
            return None
        raise InputError(Problem(file, f"file not found in the scenario folder {root.name}",
                                 f"create {file} with {what}"))
    if not path.is_file():
        raise InputError(Problem(file, "is not a regular file (a folder, a device or a pipe)",
                                 f"put a text file {file} with {what} in its place"))
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise InputError(Problem(file, f"the file cannot be read: {exc.strerror}",
                                 "check that it is not open in another program and that you "
                                 "may read it")) from None
    if raw.startswith(b"PK\x03\x04"):
        raise InputError(Problem(file, "this is a spreadsheet workbook (or a zip archive), "
                                       "not a text file",
                                 "export the sheet as 'CSV UTF-8 (comma delimited)'"))
    if raw.startswith((b"\xff\xfe", b"\xfe\xff")):
        text = raw.decode("utf-16", errors="replace")
        notices.append(f"{file}: read as UTF-16 text; saving it as UTF-8 is more portable")
    else:
        try:
            text = raw.decode("utf-8-sig")
        except UnicodeDecodeError:
            if b"\x00" in raw:
                kind = ("plain text (UTF-8)" if file.endswith(".toml")
                        else "'CSV UTF-8'")
                raise InputError(Problem(file, "the file holds binary data (NUL bytes), not "
                                               "text", f"save it as {kind}")) from None
            try:
                text, encoding = raw.decode("cp1252"), "Windows-1252"
            except UnicodeDecodeError:
                text, encoding = raw.decode("latin-1"), "Latin-1"
            notices.append(f"{file}: not UTF-8, read as {encoding}; check that accented "
                           "names look right, or save the file as UTF-8")
    if not text.strip():
        raise InputError(Problem(file, "the file is empty", f"write {what}"))
    return text


@dataclass(frozen=True)
class _Table:
    """One CSV file as text cells (stripped, "" when empty) with the line of every row.

    ``problems`` holds the rows that could not be read (wrong length, runaway quote): the
    readers add the problems of the cells to them, so that all come out together."""

    file: str
    frame: pd.DataFrame
    lines: np.ndarray
    decimal_comma: bool
    separator: str
    problems: tuple[Problem, ...] = ()

    def line(self, i: int) -> int:
        return int(self.lines[i])

    def flag(self, problems: list[Problem], mask: Any, column: str | None,
             problem: Callable[[int], str] | str, fix: Callable[[int], str] | str) -> None:
        """Add one problem per flagged row (a count beyond MAX_ROWS_PER_CHECK rows)."""
        rows = np.flatnonzero(np.asarray(mask, dtype=bool))
        for i in rows[:MAX_ROWS_PER_CHECK]:
            problems.append(Problem(
                self.file, problem(i) if callable(problem) else problem,
                fix(i) if callable(fix) else fix, line=self.line(i), column=column))
        if len(rows) > MAX_ROWS_PER_CHECK:
            more = rows[MAX_ROWS_PER_CHECK:]
            problems.append(Problem(
                self.file, f"and {len(more)} more row(s) like these (lines "
                           f"{self.line(more[0])}–{self.line(more[-1])})",
                "fix them the same way", column=column))


_SEPARATOR_NAMES = {",": "','", ";": "';'", "\t": "tabs"}
# a number written with a decimal comma, e.g. 1.234,50 or 1234,5 (dots group thousands)
_COMMA_DECIMAL = r"[+-]?(?:[0-9]{1,3}(?:\.[0-9]{3})+|[0-9]+)(?:,[0-9]+)?"
_HAS_DECIMAL_COMMA = r"[+-]?[0-9.]*[0-9],[0-9]+"


def _split_simple(text: str, separator: str) -> tuple | None:
    """The fast reading of a plain CSV (no quotes, every line one value per column), parsed
    by pandas' C reader; None when the file needs the careful reading."""
    if '"' in text or text.count("\r") != text.count("\r\n"):
        return None
    lines = text.split("\n")
    if lines[-1] in ("", "\r"):
        lines.pop()
    blank_header = not lines or not lines[0].replace(separator, "").strip()
    width = 0 if blank_header else lines[0].count(separator) + 1
    if width < 2:
        return None
    counts = np.fromiter(map(str.count, lines, itertools.repeat(separator)), dtype=np.int64,
                         count=len(lines))
    if (counts != width - 1).any():
        return None
    try:
        frame = pd.read_csv(io.StringIO(text), sep=separator, header=None, dtype="str",
                            na_filter=False, skip_blank_lines=False, skipinitialspace=True,
                            engine="c")
    except (pd.errors.ParserError, ValueError):
        return None
    if frame.shape != (len(lines), width):
        return None
    body = frame.iloc[1:].reset_index(drop=True)
    first = body[0] if not _needs_strip(text) else body[0].str.strip()
    maybe_blank = (first == "").to_numpy()
    if maybe_blank.any() and body[maybe_blank].apply(lambda c: c.str.strip() == "") \
            .all(axis=1).any():
        return None  # a row of bare separators: the careful reading skips it
    header = [str(c) for c in frame.iloc[0]]
    return header, 1, [body[k] for k in range(width)], np.arange(2, len(lines) + 1), []


def _split_careful(text: str, separator: str, file: str) -> tuple:
    """Python's csv reader, tracking the lines of every row: skips blank rows and reports
    rows of the wrong length or that run over several lines."""
    rd = csv.reader(io.StringIO(text, newline=""), delimiter=separator, skipinitialspace=True)
    rows, first, last, end = [], [], [], 0
    try:
        for row in rd:
            first.append(end + 1)
            end = rd.line_num
            last.append(end)
            rows.append(row)
    except csv.Error as exc:
        raise InputError(Problem(file, f"the file is not valid CSV: {exc}",
                                 "check the quotes on that line (a value that starts with \" "
                                 "must end with \")", line=end + 1)) from None
    filled = [i for i, r in enumerate(rows) if any(c.strip() for c in r)]
    if not filled:
        raise InputError(Problem(file, "the file holds no header line, only separators",
                                 "write the header line and the data rows"))
    header, header_at = rows[filled[0]], first[filled[0]]
    width = len(header)
    body, lines, runaway, wrong = [], [], [], []
    for i in filled[1:]:
        row, line = rows[i], first[i]
        if last[i] > line:
            runaway.append(i)
            continue
        if len(row) > width and not any(c.strip() for c in row[width:]):
            row = row[:width]  # trailing separators, as some spreadsheets write
        if len(row) != width:
            wrong.append(i)
            continue
        body.append(row)
        lines.append(line)
    problems: list[Problem] = []
    for bad, problem, fix in (
            (runaway, lambda i: f"the row runs over lines {first[i]}–{last[i]}: a double quote "
                                "opens a value that does not end on this line",
             "close the quote on the same line, or remove it"),
            (wrong, lambda i: f"the row has {len(rows[i])} values but the header has {width} "
                              "columns" + _comma_weekdays_hint(rows[i], header, separator),
             f"give every row one value per column, separated by "
             f"{_SEPARATOR_NAMES[separator]}; put a value that holds the separator in double "
             "quotes")):
        problems += [Problem(file, problem(i), fix, line=first[i])
                     for i in bad[:MAX_ROWS_PER_CHECK]]
        if len(bad) > MAX_ROWS_PER_CHECK:
            problems.append(Problem(file, f"and {len(bad) - MAX_ROWS_PER_CHECK} more row(s) "
                                          f"like these (up to line {first[bad[-1]]})",
                                    "fix them the same way"))
    columns = [[r[k] for r in body] for k in range(width)]
    return header, header_at, columns, np.asarray(lines, dtype=np.int64), problems


def _needs_strip(text: str) -> bool:
    """Whether any cell may carry surrounding white space (stripping millions of cells is
    slow, and most files have none at all)."""
    if text.isascii():
        return any(c in text for c in " \t\x0b\x0c\x1c\x1d\x1e\x1f")
    return re.search(r"[^\S\r\n]", text) is not None


def _comma_weekdays_hint(row: list[str], header: list[str], separator: str) -> str:
    """When the extra values of a too-long row are weekday names (``Mon,Wed,Fri`` in a
    ``visit_days`` cell), the words that say so; else ""."""
    words = {w.lower() for w in WEEKDAYS}
    runs = sum(1 for c in row if c.strip().lower() in words)
    if "visit_days" in header and runs >= 2:
        return (": visit_days seems to list its weekdays with "
                f"{_SEPARATOR_NAMES[separator]} — separate them with | (Mon|Wed|Fri)")
    return ""


def _read_csv(root: Path, file: str, required: list[str], optional: list[str],
              notices: list[str], *, optional_file: bool = False) -> _Table | None:
    """Read one CSV file as text cells, checking separator, row shape and column names.

    An ``optional_file`` may be absent (None is returned) or hold a header only."""
    text = _read_text(root, file, notices, must_exist=not optional_file,
                      what=f"a header line {','.join(required)} and one row per item")
    if text is None:
        return None
    header_line = next((line.rstrip("\r\n") for line in io.StringIO(text, newline="")
                        if line.strip()), "")
    separator = max((",", ";", "\t"), key=header_line.count)
    header, header_at, columns, lines, row_problems = (
        _split_simple(text, separator) or _split_careful(text, separator, file))
    problems: list[Problem] = []
    if header_at != 1:
        notices.append(f"{file}: {header_at - 1} blank line(s) before the header skipped")
    header = [c.strip() or f"(unnamed column {k + 1})" for k, c in enumerate(header)]
    known = required + optional
    for k, name in enumerate(header):
        if name in known and name in header[:k]:
            problems.append(Problem(file, f"column '{name}' appears twice in the header",
                                    "keep one column of that name", line=header_at,
                                    column=name))
    extra = [c for c in header if c not in known]
    missing = [c for c in required if c not in header]
    if missing and len(missing) == len(required):
        problems.append(Problem(file, "the first line names none of the required columns "
                                      "(is this the right file?)",
                                f"the first line must be the header: {','.join(required)}",
                                line=header_at))
        missing = []
    for col in missing:
        near = _closest(col, extra)
        fix = f"rename column '{near}' to '{col}'" if near else f"add a column '{col}'"
        problems.append(Problem(file, f"required column '{col}' is missing", fix,
                                line=header_at, column=col))
    if not len(lines) and not optional_file and not row_problems:
        problems.append(Problem(file, "the file has a header but no data rows",
                                "add one row per item below the header"))
    if problems:  # without the right columns the cells cannot be checked
        _raise_if(row_problems + problems)
    if separator != ",":
        notices.append(f"{file}: columns are separated by {_SEPARATOR_NAMES[separator]}; "
                       "read accordingly")
    if extra:
        notices.append(f"{file}: extra column(s) ignored: {', '.join(extra)}")
    strip = _needs_strip(text)
    frame = pd.DataFrame({
        name: (pd.Series(columns[k], dtype="str").str.strip() if strip
               else pd.Series(columns[k], dtype="str"))
        for k, name in enumerate(header) if name in known and name not in header[:k]})
    decimal_comma = False
    if separator != "," and len(frame):
        decimal_comma = bool(frame.apply(lambda c: c.str.fullmatch(_HAS_DECIMAL_COMMA)).any()
                             .any())
        if decimal_comma:
            notices.append(f"{file}: numbers read with a decimal comma (1.234,50 = 1234.50)")
    return _Table(file, frame, lines, decimal_comma, separator, tuple(row_problems))


_PLAIN_NUMBER = r"[+-]?(?:[0-9]+\.?[0-9]*|\.[0-9]+)(?:[eE][+-]?[0-9]+)?"
_NON_FINITE = r"(?i)[+-]?(?:inf|infinity|nan)"
_DOT_THOUSANDS = r"[+-]?[0-9]{1,3}(?:\.[0-9]{3})+"
# pd.to_numeric accepts exactly the _PLAIN_NUMBER cells (checked by comparing both on
# generated text), plus inf and nan, which we refuse; it parses in C, a regex would not


def _numbers(table: _Table, col: str, problems: list[Problem], *, what: str,
             minimum: float | None = None, strict: bool = False,
             empty_ok: Any = False, example: str = "12000") -> np.ndarray:
    """Parse a numeric column to float64; report every cell that is empty (unless
    ``empty_ok``, a bool or a row mask), does not parse, is not finite or lies below
    ``minimum`` (or at it, if ``strict``). Bad cells are NaN in the result."""
    cells = table.frame[col]
    text = cells
    ambiguous = np.zeros(len(cells), dtype=bool)
    if table.decimal_comma:
        comma = cells.str.fullmatch(_COMMA_DECIMAL)
        text = cells.where(~comma, cells.str.replace(".", "", regex=False)
                           .str.replace(",", ".", regex=False))
        ambiguous = (~comma & cells.str.contains(".", regex=False)
                     & cells.str.fullmatch(_PLAIN_NUMBER)).to_numpy()
    elif table.separator != ",":
        ambiguous = cells.str.fullmatch(_DOT_THOUSANDS).to_numpy()
    values = pd.to_numeric(text, errors="coerce").to_numpy(dtype=float, na_value=np.nan,
                                                           copy=True)
    values[ambiguous] = np.nan
    failed = ~np.isfinite(values) & ~ambiguous
    # classify the few failures in Python; the parse above did the bulk in C
    empty = np.zeros(len(cells), dtype=bool)
    non_finite = np.zeros(len(cells), dtype=bool)
    for i in np.flatnonzero(failed):
        c = cells.iloc[i]
        empty[i] = c == ""
        non_finite[i] = np.isinf(values[i]) or re.fullmatch(_NON_FINITE, c) is not None
    bad = failed & ~empty & ~non_finite
    values[failed] = np.nan
    allowed_empty = np.broadcast_to(np.asarray(empty_ok, dtype=bool), empty.shape)
    table.flag(problems, empty & ~allowed_empty, col, f"{what} is empty",
               f"write the {what} as a number, e.g. {example}")
    table.flag(problems, non_finite, col,
               lambda i: f"{what} {_show(cells.iloc[i])} is not a finite number",
               f"write the {what} as an ordinary number, e.g. {example}")
    decimal = "," if table.decimal_comma else "."
    if table.decimal_comma:
        table.flag(problems, ambiguous, col,
                   lambda i: f"{what} {_show(cells.iloc[i])} has a decimal point, but this "
                             "file writes decimal commas",
                   "write it with a decimal comma, like the other numbers of the file")
    else:
        table.flag(problems, ambiguous, col,
                   lambda i: f"{what} {_show(cells.iloc[i])} is ambiguous in a file "
                             f"separated by {_SEPARATOR_NAMES[table.separator]}: "
                             f"{float(cells.iloc[i]):g} or "
                             f"{float(cells.iloc[i].replace('.', '')):g}?",
                   "write it without a thousands separator")
    table.flag(problems, bad, col,
               lambda i: f"{what} {_show(cells.iloc[i])} does not parse as a number",
               f"write a plain number such as {example}"
               f"{'' if decimal == '.' or example != '12000' else ' or 12000,50'} "
               "(no currency sign, unit or thousands separator)")
    if minimum is not None:
        low = (values <= minimum) if strict else (values < minimum)
        word = "greater than" if strict else "at least"
        table.flag(problems, low, col,
                   lambda i: f"{what} must be {word} {minimum:g}, got {cells.iloc[i]}",
                   f"write a number {'greater than' if strict else 'of at least'} "
                   f"{minimum:g}")
        values[low] = np.nan
    return values


def _dates(table: _Table, col: str, problems: list[Problem], notices: list[str]) -> pd.Series:
    """Parse a date column (YYYY-MM-DD, or DD.MM.YYYY with a notice); NaT where bad."""
    cells = table.frame[col]
    parsed = pd.to_datetime(cells, format="%Y-%m-%d", errors="coerce").astype(DATE_UNIT)
    dotted = pd.Series(False, index=cells.index)
    dotted[parsed.isna()] = cells[parsed.isna()].str.fullmatch(
        r"[0-9]{1,2}\.[0-9]{1,2}\.[0-9]{4}")
    if dotted.any():
        parsed[dotted] = pd.to_datetime(cells[dotted], format="%d.%m.%Y",
                                        errors="coerce").astype(DATE_UNIT)
        notices.append(f"{table.file}: dates in column '{col}' written as day.month.year "
                       "were read as such")
    empty = cells == ""
    table.flag(problems, empty, col, "date is empty", "write the date as YYYY-MM-DD, e.g. "
                                                      "2026-03-31")
    bad = parsed.isna() & ~empty
    slashed = bad & cells.str.fullmatch(r"[0-9]{1,2}/[0-9]{1,2}/[0-9]{4}")
    if slashed.sum() >= 2 and slashed.sum() >= 0.5 * bad.sum():
        # one message for the file: the format is the problem, not each row
        i = int(np.flatnonzero(slashed.to_numpy())[0])
        example = cells.iloc[i]
        d, m, y = (int(v) for v in example.split("/"))
        guess = (f"{y:04d}-{m:02d}-{d:02d} for {example} if it means day/month"
                 if m <= 12 else f"{y:04d}-{d:02d}-{m:02d} for {example}")
        problems.append(Problem(
            table.file, f"{int(slashed.sum())} dates are written with slashes, like "
                        f"{_show(example)}: day/month or month/day cannot be told apart",
            f"write dates as YYYY-MM-DD (e.g. {guess}); a spreadsheet can export them so "
            "with the cell format YYYY-MM-DD", line=table.line(i), column=col))
        bad = bad & ~slashed
    table.flag(problems, bad, col,
               lambda i: f"date {_show(cells.iloc[i])} does not parse or does not exist",
               "write dates as YYYY-MM-DD, e.g. 2026-03-31")
    year = parsed.dt.year
    odd = (year < YEARS[0]) | (year > YEARS[1])
    table.flag(problems, odd, col,
               lambda i: f"date {cells.iloc[i]} lies outside the years {YEARS[0]}–{YEARS[1]}",
               "correct the year")
    return parsed.where(~odd)


def _text_ids(table: _Table, col: str, what: str, item: str,
              problems: list[Problem]) -> pd.Series:
    """Check an id column: none empty, none twice (one row per ``item``), none that a
    spreadsheet would run as a formula (first character ``= + - @``, a tab or a carriage
    return), so that every export of the plan is safe to open."""
    ids = table.frame[col]
    table.flag(problems, ids == "", col, f"{what} is empty", f"give every row a {what}")
    table.flag(problems, ids.str.match(FORMULA_START).to_numpy(), col,
               lambda i: f"{what} {_show(ids.iloc[i])} begins with a character a spreadsheet "
                         "reads as a formula",
               "begin the name with a letter or digit (drop the leading = + - @)")
    dup = ids.duplicated(keep="first") & (ids != "")
    first = ids.drop_duplicates(keep="first")
    first_line = pd.Series(table.lines[first.index], index=first.to_numpy())
    table.flag(problems, dup, col,
               lambda i: f"{what} {_show(ids.iloc[i])} appears twice (first on line "
                         f"{first_line[ids.iloc[i]]})", f"keep one row per {item}")
    return ids


def _check_known(table: _Table, col: str, known: pd.Index, other_file: str, what: str,
                 problems: list[Problem]) -> np.ndarray:
    """Flag ids that the referenced file lacks: one problem per unknown id, at its first
    line, suggesting the closest known id. Returns the mask of rows with an unknown id."""
    ids = table.frame[col]
    unknown = (~ids.isin(known) & (ids != "")).to_numpy()
    rows = np.flatnonzero(unknown)
    first = pd.Series(rows).groupby(ids.to_numpy()[rows], sort=False)
    for k, (value, at) in enumerate(first):
        if k == MAX_ROWS_PER_CHECK:
            problems.append(Problem(table.file, f"and {first.ngroups - k} more unknown "
                                                f"{what}(s)", "fix them the same way",
                                    column=col))
            break
        more = f" ({len(at)} rows, lines {table.line(at.iloc[0])}–{table.line(at.iloc[-1])})" \
            if len(at) > 1 else ""
        problems.append(Problem(table.file, f"{what} {_show(value)} is not in {other_file}"
                                            f"{more}",
                                f"add it to {other_file} or correct the name"
                                + _did_you_mean(value, list(known)),
                                line=table.line(at.iloc[0]), column=col))
    return unknown


def _check_duplicate_days(table: _Table, dates: pd.Series, problems: list[Problem]) -> None:
    """Flag a second row for the same terminal and date, naming the line of the first."""
    key = pd.DataFrame({"t": table.frame["terminal_id"], "d": dates})
    dup = key.duplicated(keep="first").to_numpy() & dates.notna().to_numpy()
    if not dup.any():
        return
    codes = key.groupby(["t", "d"], sort=False, dropna=False).ngroup().to_numpy()
    _, first_row = np.unique(codes, return_index=True)
    table.flag(problems, dup, "date",
               lambda i: f"terminal {_show(key['t'].iloc[i])} has a second row for "
                         f"{key['d'].iloc[i]:%Y-%m-%d} (first on line "
                         f"{table.line(first_row[codes[i]])})",
               "keep one row per terminal and date (add the amounts if both are real)")


_WEEKDAY_NAMES = {name.lower(): d for d, name in enumerate(
    ("Monday", "Tuesday", "Wednesday", "Thursday", "Friday", "Saturday", "Sunday"))}
_WEEKDAY_NAMES.update({w.lower(): d for d, w in enumerate(WEEKDAYS)})


def _weekday_hint(part: str) -> str:
    near = _closest(part.lower(), list(_WEEKDAY_NAMES))
    return f" (did you mean '{WEEKDAYS[_WEEKDAY_NAMES[near]]}'?)" if near else ""


def _parse_weekdays(text: str) -> tuple[tuple[bool, ...], list[str]]:
    """``"Mon|Thu"`` → allowed flags Mon…Sun and the parts that are no weekday.

    Case does not matter and full names are understood (``monday``)."""
    parts = [p.strip() for p in text.split("|") if p.strip()]
    days = {_WEEKDAY_NAMES.get(p.lower()) for p in parts}
    bad = [p for p in parts if p.lower() not in _WEEKDAY_NAMES]
    return tuple(d in days for d in range(7)), bad


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
    where = _toml_lines(text)
    problems: list[Problem] = []

    def report(key: str, problem: str, fix: str, line_key: str | None = None) -> None:
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


# --------------------------------------------------------------------------------------------
# The CSV files
# --------------------------------------------------------------------------------------------


def _read_depots(root: Path, notices: list[str]) -> pd.DataFrame:
    file = "depots.csv"
    table = _read_csv(root, file, ["depot", "max_visits_per_day"], list(WEEKDAYS), notices)
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


def _read_terminals(root: Path, depots: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    file = "terminals.csv"
    required = ["terminal_id", "depot", "capacity", "insurance_limit", "bundle", "balance_now",
                "visit_days"]
    table = _read_csv(root, file, required, ["site", "visit_fee"], notices)
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


def _read_dispense(root: Path, terminals: pd.DataFrame, notices: list[str]) -> pd.DataFrame:
    """All dispense rows (history and any dated on or after the first planning day)."""
    file = "dispense.csv"
    table = _read_csv(root, file, ["terminal_id", "date", "amount", "status"], [], notices)
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
                 "committed.csv"):
        p = root / name
        if p.is_file():
            h.update(name.encode())
            h.update(p.read_bytes())
    return h.hexdigest()[:16]
