"""Reading the scenario's text files: decoding, separators, the generic CSV table with the
line numbers an editor shows, and the cell checks every file shares (numbers, dates, ids,
weekdays). Every problem names file, line, column and fix (:class:`planner.errors.Problem`)."""

from __future__ import annotations

import csv
import difflib
import io
import itertools
import re
from dataclasses import dataclass
from pathlib import Path
from typing import Any, Callable

import numpy as np
import pandas as pd

from planner.errors import InputError, Problem
from planner.scenario.model import DATE_UNIT, FORMULA_START, WEEKDAYS, YEARS

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
    row_names: tuple[str, ...] | None = None   # rows named, not numbered (a changed table)
    unit: str = "line"    # "line" as an editor shows it, or "row" (Parquet: data rows from 1)

    def line(self, i: int) -> int:
        return int(self.lines[i])

    def place(self, i: int) -> dict[str, int]:
        """Where row ``i`` is, as :class:`~planner.errors.Problem` keywords."""
        return {self.unit: self.line(i)}

    def flag(self, problems: list[Problem], mask: Any, column: str | None,
             problem: Callable[[int], str] | str, fix: Callable[[int], str] | str) -> None:
        """Add one problem per flagged row (a count beyond MAX_ROWS_PER_CHECK rows)."""
        rows = np.flatnonzero(np.asarray(mask, dtype=bool))
        for i in rows[:MAX_ROWS_PER_CHECK]:
            text = problem(i) if callable(problem) else problem
            named = self.row_names is not None
            problems.append(Problem(
                self.file, f"{self.row_names[i]}: {text}" if named else text,
                fix(i) if callable(fix) else fix, column=column,
                **({} if named else self.place(i))))
        if len(rows) > MAX_ROWS_PER_CHECK:
            more = rows[MAX_ROWS_PER_CHECK:]
            where = "" if self.row_names is not None else \
                f" ({self.unit}s {self.line(more[0])}–{self.line(more[-1])})"
            problems.append(Problem(
                self.file, f"and {len(more)} more row(s) like these{where}",
                "fix them the same way", column=column))


def cells_table(frame: pd.DataFrame, source: str) -> _Table:
    """A frame of text cells (one row per item, the id first) as a :class:`_Table` whose
    problems name the row's item and ``source`` (where the changed cells came from), so that
    changed rows pass the checks of the file they belong to."""
    frame = frame.reset_index(drop=True).astype(str)
    return _Table(source, frame, np.arange(2, len(frame) + 2), False, ",",
                  row_names=tuple(frame.iloc[:, 0]))


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
            "with the cell format YYYY-MM-DD", column=col, **table.place(i)))
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
               lambda i: f"{what} {_show(ids.iloc[i])} appears twice (first on {table.unit} "
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
        more = (f" ({len(at)} rows, {table.unit}s {table.line(at.iloc[0])}–"
                f"{table.line(at.iloc[-1])})") \
            if len(at) > 1 else ""
        problems.append(Problem(table.file, f"{what} {_show(value)} is not in {other_file}"
                                            f"{more}",
                                f"add it to {other_file} or correct the name"
                                + _did_you_mean(value, list(known)),
                                column=col, **table.place(at.iloc[0])))
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
                         f"{key['d'].iloc[i]:%Y-%m-%d} (first on {table.unit} "
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


def _read_parquet(root: Path, file: str, required: list[str], optional: list[str],
                  notices: list[str]) -> _Table:
    """Read a Parquet file (pyarrow) as the same table of text cells as a CSV file, so that it
    passes the same checks; problems count data rows from 1 instead of lines. Dates may be
    Parquet dates, timestamps at midnight or ``YYYY-MM-DD`` text; numbers any numeric type."""
    import pyarrow as pa
    import pyarrow.compute as pc
    import pyarrow.parquet as pq

    path = root / file
    try:
        schema = pq.read_schema(path)
    except (OSError, pa.ArrowInvalid) as exc:
        raise InputError(Problem(file, f"the file is not readable Parquet: {exc}",
                                 "write it again with a Parquet writer (e.g. pandas' "
                                 "DataFrame.to_parquet), or give dispense.csv instead")) from None
    names = [str(n).strip() for n in schema.names]
    missing = [c for c in required if c not in names]
    if missing:
        raise InputError([Problem(file, f"required column '{c}' is missing",
                                  f"add a column '{c}'", column=c) for c in missing])
    extra = [c for c in names if c not in required + optional]
    if extra:
        notices.append(f"{file}: extra column(s) {', '.join(extra)} ignored")
    wanted = [c for c in required + optional if c in names]
    data = pq.read_table(path, columns=[schema.names[names.index(c)] for c in wanted])
    columns = {}
    for name, column in zip(wanted, data.columns):
        kind = column.type
        if pa.types.is_timestamp(kind):      # a time of day other than midnight is no date
            midnight = pc.equal(column, pc.floor_temporal(column, unit="day"))
            day = pc.cast(pc.cast(column, pa.timestamp("s")), pa.date32())
            text = pc.if_else(midnight, pc.cast(day, pa.string()), pc.cast(column, pa.string()))
        elif pa.types.is_date(kind) or pa.types.is_integer(kind) or pa.types.is_floating(kind):
            text = pc.cast(column, pa.string())          # ISO dates, plain numbers
        else:
            text = pc.utf8_trim_whitespace(pc.cast(column, pa.string()))
        columns[name] = pc.fill_null(text, "").to_pandas()
    frame = pd.DataFrame(columns)
    return _Table(file, frame, np.arange(1, len(frame) + 1), False, ",", unit="row")
