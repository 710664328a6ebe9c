"""``plan.xlsx``: the plan as a spreadsheet, one sheet per depot and a summary, ready to print.

Every sheet prints on A4, fitted to the page width, with its header row repeated on each page
and "Confidential" in the page header. Column widths come from the content (a wide text column
wraps), and every wrapped row is given the height of its lines, so that a spreadsheet program
that keeps the stored row heights (LibreOffice does) prints no text over the next row. Dates carry a date format, amounts a currency format
and risks a percent format, so the numbers stay numbers for whoever filters or sums them.

Text from the input (terminal ids, sites, depot names) is always written as text: a cell whose
text starts with ``=``, ``+``, ``-`` or ``@`` would otherwise be read as a formula by a
spreadsheet program (formula injection); such cells are stored as strings with the
quote-prefix style, so they show and stay as typed.
"""
from __future__ import annotations

import datetime as _dt
import io
import math
import re
import zipfile
from typing import Any, Sequence

import numpy as np
import pandas as pd
from openpyxl import Workbook
from openpyxl.cell.cell import ILLEGAL_CHARACTERS_RE
from openpyxl.styles import Alignment, Border, Font, PatternFill, Side
from openpyxl.utils import get_column_letter
from openpyxl.worksheet.properties import PageSetupProperties

from planner.costs import PERIODS, period_totals
from planner.report.palette import NEUTRALS, ROLE
from planner.report.wording import CAUTIONS, PART_LABELS

FORMULA_STARTS = ("=", "+", "-", "@")
DATE_FORMAT = "ddd dd mmm yyyy"
PERCENT_FORMAT = "0.0%"
SUMMARY_SHEET = "Summary"

_HEADER_FILL = PatternFill("solid", fgColor=NEUTRALS["shade"][1:])
_WARN_FILL = PatternFill("solid", fgColor=ROLE["warn_fill"][1:])
_BOLD = Font(bold=True)
_TITLE = Font(bold=True, size=14)
_RULE = Border(bottom=Side(style="thin", color=NEUTRALS["muted"][1:]))

PLAN_COLUMNS = (   # header, plan column, kind, widest (characters; wider text wraps)
    ("Day", "date", "date", 18),
    ("Terminal", "terminal_id", "text", 18),
    ("Site", "site", "text", 24),
    ("Load", "load", "money", 18),
    ("Expected residual", "expected_residual", "money", 18),
    ("Dry risk until next visit", "dry_probability", "percent", 18),
    ("Reason", "reason", "text", 64),
)
LINE_POINTS = 15.0     # height of one line of 11-point text in a row (points)
HEADER_WIDTH_SHARE = 1.25   # bold text is about this much wider than regular (common practice)


def write_plan_xlsx(run: Any, writer: Any, *, name: str = "plan.xlsx") -> int:
    """Write ``plan.xlsx`` for a :class:`planner.pipeline.PlanRun` into a run folder.

    ``writer`` is a :class:`planner.runfolder.RunFolderWriter`. Returns the file size in bytes.
    """
    buffer = io.BytesIO()
    plan_workbook(run).save(buffer)
    data = _fixed_zip(buffer.getvalue())
    writer.write_bytes(name, data)
    return len(data)


def _fixed_zip(data: bytes) -> bytes:
    """The same workbook with every zip entry dated 1980-01-01, in the same order, and the
    document's "modified" date equal to its "created" date (the plan's first day, set in
    :func:`plan_workbook`), so that the same plan gives the same bytes."""
    source = zipfile.ZipFile(io.BytesIO(data))
    out = io.BytesIO()
    with zipfile.ZipFile(out, "w", compression=zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            fixed = zipfile.ZipInfo(info.filename, date_time=(1980, 1, 1, 0, 0, 0))
            fixed.compress_type = zipfile.ZIP_DEFLATED
            fixed.external_attr = 0o600 << 16
            content = source.read(info.filename)
            if info.filename == "docProps/core.xml":
                # openpyxl stamps the saving moment as "modified": use the document's own date
                text = content.decode("utf-8")
                created = re.search(r"<dcterms:created[^>]*>([^<]*)<", text)
                if created:
                    text = re.sub(r"(<dcterms:modified[^>]*>)[^<]*(<)",
                                  lambda m: m.group(1) + created.group(1) + m.group(2), text)
                content = text.encode("utf-8")
            target.writestr(fixed, content)
    return out.getvalue()


def plan_workbook(run: Any) -> Workbook:
    """The plan workbook: a summary sheet first, then one sheet per depot."""
    wb = Workbook()
    # the document's dates are the plan's first day, not the moment of writing
    first = pd.Timestamp(getattr(run.scenario, "start_date", "2000-01-01")).to_pydatetime()
    wb.properties.created = wb.properties.modified = first
    summary = wb.active
    summary.title = SUMMARY_SHEET
    currency = str(getattr(run.scenario, "currency", "") or "")
    money_format = _money_format(currency)
    _summary_sheet(summary, run, money_format)
    plan = run.plan.copy()
    plan["date"] = pd.to_datetime(plan["date"])
    terminals = run.scenario.terminals
    plan["site"] = plan["terminal_id"].map(
        terminals["site"] if "site" in terminals else pd.Series(dtype=str)).fillna("")
    target = float(getattr(run.scenario, "max_dry_probability", math.nan))
    depots = list(getattr(run.problem, "depots", None) or plan["depot"].drop_duplicates())
    names = _sheet_names(depots)
    for depot, title in zip(depots, names):
        ws = wb.create_sheet(title)
        rows = plan[plan["depot"] == depot].sort_values(["date", "terminal_id"])
        _depot_sheet(ws, str(depot), rows, money_format, target, _currency_code(currency))
    return wb


# ---------------------------------------------------------------------------------------------


def _shown(value: Any, kind: str, currency: str) -> str:
    """The text a spreadsheet shows for ``value`` in a column of ``kind`` (for widths)."""
    if kind == "date":
        day = _to_date(value)
        return "" if day is None else f"{day:%a %d %b %Y}"
    number = _number(value)
    if kind == "money":
        return "" if number is None else f"{number:,.0f} {currency}".strip()
    if kind == "percent":
        return "" if number is None else f"{number:.1%}"
    return "" if value is None or (isinstance(value, float) and math.isnan(value)) else str(value)


def column_widths(rows: pd.DataFrame, currency: str) -> list[float]:
    """Each plan column's width in characters, from its content: the widest value shown (the
    total row's bold sum included), at least the header's longest word, at most the column's
    widest (text beyond it wraps)."""
    widths = []
    for header, column, kind, widest in PLAN_COLUMNS:
        values = rows[column] if column in rows else pd.Series(dtype=object)
        texts = [_shown(v, kind, currency) for v in values]
        if kind == "money" and len(values):
            total = float(pd.to_numeric(values, errors="coerce").sum())
            texts.append(_shown(total, kind, currency) + "  ")   # bold: a little wider
        longest = max((len(t) for t in texts), default=0)
        # the header in at most two lines where the column's widest allows it
        fits = next((w for w in range(4, widest + 1)
                     if _lines(header, (w - 3) / HEADER_WIDTH_SHARE) <= 2), widest)
        widths.append(float(min(max(longest + 3, fits, 8), widest)))
    return widths


def _lines(text: str, width: float) -> int:
    """Lines a wrapped ``text`` takes in a column ``width`` characters wide (whole words)."""
    lines, used = 1, 0
    for word in str(text).split():
        if used and used + 1 + len(word) > width:
            lines, used = lines + 1, len(word)
        else:
            used += (1 if used else 0) + len(word)
    return lines


def _depot_sheet(ws, depot: str, rows: pd.DataFrame, money_format: str, target: float,
                 currency: str = "") -> None:
    widths = column_widths(rows, currency)
    header_lines = 1
    for j, (header, _, _, _) in enumerate(PLAN_COLUMNS, start=1):
        cell = ws.cell(row=1, column=j)
        _put(cell, header)
        cell.font, cell.fill, cell.border = _BOLD, _HEADER_FILL, _RULE
        # numbers stand right-aligned: so do their headings
        cell.alignment = Alignment(wrap_text=True, vertical="top", horizontal="right"
                                   if PLAN_COLUMNS[j - 1][2] in ("money", "percent")
                                   else "left", indent=1 if j > 1 else 0)
        ws.column_dimensions[get_column_letter(j)].width = widths[j - 1]
        header_lines = max(header_lines,
                           _lines(header, (widths[j - 1] - 3) / HEADER_WIDTH_SHARE))
    # a wrapped header gets the height of all its lines, so it never runs into the first row
    ws.row_dimensions[1].height = LINE_POINTS * header_lines + 3
    reason_width = widths[[c for _, c, _, _ in PLAN_COLUMNS].index("reason")]
    r = 1
    for _, row in rows.iterrows():
        r += 1
        for j, (_, column, kind, _) in enumerate(PLAN_COLUMNS, start=1):
            cell = ws.cell(row=r, column=j)
            value = row.get(column)
            if kind == "date":
                _put(cell, _to_date(value))
                cell.number_format = DATE_FORMAT
                cell.alignment = Alignment(horizontal="left")
            elif kind == "money":
                _put(cell, _number(value))
                cell.number_format = money_format
            elif kind == "percent":
                _put(cell, _number(value))
                cell.number_format = PERCENT_FORMAT
                v = _number(value)
                if v is not None and math.isfinite(target) and v > target + 1e-12:
                    cell.fill = _WARN_FILL
                    cell.font = _BOLD
            else:
                _put(cell, "" if value is None or (isinstance(value, float) and
                                                   math.isnan(value)) else str(value))
                if column == "reason":
                    cell.alignment = Alignment(wrap_text=True, vertical="top", horizontal="left",
                                               indent=1)
                    lines = _lines(cell.value or "", reason_width - 3)
                    if lines > 1:
                        ws.row_dimensions[r].height = LINE_POINTS * lines
    if r == 1:
        _put(ws.cell(row=2, column=1), "no visits planned in the horizon")
        r = 2
    else:
        r += 1
        _put(ws.cell(row=r, column=1), "total")
        ws.cell(row=r, column=1).font = _BOLD
        for j, (_, column, kind, _) in enumerate(PLAN_COLUMNS, start=1):
            if kind == "money":
                cell = ws.cell(row=r, column=j)
                _put(cell, float(pd.to_numeric(rows[column], errors="coerce").sum()))
                cell.number_format, cell.font = money_format, _BOLD
    ws.auto_filter.ref = f"A1:{get_column_letter(len(PLAN_COLUMNS))}{max(r - 1, 1)}"
    _print_setup(ws, landscape=True, title=f"Depot {depot}")


def _summary_sheet(ws, run: Any, money_format: str) -> None:
    s = dict(run.summary or {})
    solver = s.get("solver", {})
    service = s.get("service", {})
    plan = run.plan
    costs = run.costs
    ws.column_dimensions["A"].width = 44
    for col in "BCDEF":
        ws.column_dimensions[col].width = 16
    for j, header in enumerate(("Figure", "Value"), start=1):
        cell = ws.cell(row=1, column=j)
        _put(cell, header)
        cell.font, cell.fill, cell.border = _BOLD, _HEADER_FILL, _RULE

    first = pd.Timestamp(run.problem.dates[0]) if len(run.problem.dates) else None
    gap = solver.get("gap", math.nan)
    bound = solver.get("bound", math.nan)
    figures: list[tuple[str, Any, str | None]] = [
        ("Scenario", str(s.get("scenario", getattr(run.scenario, "name", ""))), None),
        ("Currency", str(getattr(run.scenario, "currency", "")), None),
        ("First planning day", _to_date(first), DATE_FORMAT),
        ("Horizon (days)", int(run.problem.horizon_days), "0"),
        ("Look-ahead days planned after the horizon", s.get("tail_days"), "0"),
        ("Replenishment", str(getattr(run.scenario, "replenishment", "")), None),
        ("Terminals", len(run.problem.terminal_ids), "0"),
        ("Visits planned in the horizon", int(len(plan)), "0"),
        ("Cash to load in the horizon", float(plan["load"].sum()) if len(plan) else 0.0,
         money_format),
        ("Expected cash returned at those visits",
         float(plan["expected_residual"].sum()) if len(plan) else 0.0, money_format),
    ]
    by_period = period_totals(costs)
    for period in PERIODS:
        span = (f"horizon, {int(run.problem.horizon_days)} days" if period == "horizon" else
                f"look-ahead, {s.get('tail_days')} days (not committed)")
        for part, value in by_period[period].items():
            figures.append((f"Expected cost in the {span}: "
                            f"{PART_LABELS.get(part, part.replace('_', ' '))}", value,
                            money_format))
    figures += [
        ("Service target (per visit: the chance of running dry before the next visit)",
         service.get("max_dry_probability", getattr(run.scenario, "max_dry_probability", None)),
         PERCENT_FORMAT),
    ]
    oos = s.get("out_of_sample") or {}
    if oos:
        figures += [
            (f"Terminals over the target on {oos.get('paths', 0):,} fresh paths",
             oos.get("terminals_over_target"), "0"),
            ("Mean cycle dry risk on fresh paths", oos.get("mean_dry_probability"),
             PERCENT_FORMAT),
        ]
    figures += [
        ("Terminals over the target on the plan's own paths",
         service.get("terminals_over_target"), "0"),
        ("Highest cycle dry risk of a terminal (own paths)",
         service.get("worst_dry_probability"), PERCENT_FORMAT),
        ("Solver status", str(solver.get("status", "")), None),
        ("Best lower bound", bound if _finite(bound) else "none proven",
         money_format if _finite(bound) else None),
        ("Optimality gap", gap if _finite(gap) else "unknown (no bound)",
         "0.00%" if _finite(gap) else None),
        ("Demand paths", (s.get("paths") or {}).get("count"), "0"),
        ("Seed", (s.get("paths") or {}).get("seed"), "0"),
        ("Input fingerprint", str(s.get("input_fingerprint", "")), None),
    ]
    # the label column as wide as its longest label (wrapped beyond 70 characters)
    ws.column_dimensions["A"].width = min(max(len(label) for label, _, _ in figures) + 2, 70)
    r = 1
    for label, value, fmt in figures:
        r += 1
        ws.cell(row=r, column=1).alignment = Alignment(wrap_text=True, vertical="top")
        _put(ws.cell(row=r, column=1), label)
        cell = ws.cell(row=r, column=2)
        _put(cell, value)
        if fmt and not isinstance(value, str):
            cell.number_format = fmt
        cell.alignment = Alignment(horizontal="right" if not isinstance(value, str)
                                   else "left")

    r += 2
    _put(ws.cell(row=r, column=1), "Cash to order per depot and day")
    ws.cell(row=r, column=1).font = _BOLD
    r += 1
    heads = ("Day", "Depot", "Visits", "Cash to load", "Expected back")
    for j, h in enumerate(heads, start=1):
        cell = ws.cell(row=r, column=j)
        _put(cell, h)
        cell.font, cell.fill, cell.border = _BOLD, _HEADER_FILL, _RULE
    orders = run.orders.copy()
    orders["date"] = pd.to_datetime(orders["date"])
    for _, o in orders.sort_values(["date", "depot"]).iterrows():
        r += 1
        _put(ws.cell(row=r, column=1), _to_date(o["date"]))
        ws.cell(row=r, column=1).number_format = DATE_FORMAT
        ws.cell(row=r, column=1).alignment = Alignment(horizontal="left")
        _put(ws.cell(row=r, column=2), str(o["depot"]))
        _put(ws.cell(row=r, column=3), int(o.get("visits", 0)))
        for j, col in ((4, "load_total"), (5, "expected_returns")):
            cell = ws.cell(row=r, column=j)
            _put(cell, _number(o.get(col)))
            cell.number_format = money_format

    r += 2
    _put(ws.cell(row=r, column=1), "Before you use this plan")
    ws.cell(row=r, column=1).font = _BOLD
    for text in CAUTIONS:
        r += 1
        ws.merge_cells(start_row=r, start_column=1, end_row=r, end_column=6)
        cell = ws.cell(row=r, column=1)
        _put(cell, text)
        cell.alignment = Alignment(wrap_text=True, vertical="top")
        ws.row_dimensions[r].height = 30
    _print_setup(ws, landscape=False, title="Summary")


def _print_setup(ws, *, landscape: bool, title: str) -> None:
    ws.page_setup.paperSize = ws.PAPERSIZE_A4
    ws.page_setup.orientation = "landscape" if landscape else "portrait"
    ws.page_setup.fitToWidth = 1
    ws.page_setup.fitToHeight = 0          # as many pages down as needed
    ws.sheet_properties.pageSetUpPr = PageSetupProperties(fitToPage=True)
    ws.print_title_rows = "1:1"
    ws.print_options.gridLines = False
    # inches: the page header and footer stand in the outer 0.3–0.6 inch, the table starts
    # below 0.9, so neither overlaps the table's header row or its last row
    ws.page_margins.left = ws.page_margins.right = 0.5
    ws.page_margins.top = ws.page_margins.bottom = 0.9
    ws.page_margins.header = ws.page_margins.footer = 0.3
    ws.freeze_panes = "A2"
    # '&' starts a header code: double it in our own text
    ws.oddHeader.left.text = "Confidential"
    ws.oddHeader.center.text = "Replenishment plan: " + title.replace("&", "&&")
    ws.oddFooter.left.text = "A person reviews the plan before any dispatch."
    ws.oddFooter.right.text = "Page &P of &N"


def _put(cell, value: Any) -> None:
    """Set a cell; text is always stored as text, never as a formula."""
    if isinstance(value, str):
        value = ILLEGAL_CHARACTERS_RE.sub("", value)
        cell.value = value
        if value.startswith(FORMULA_STARTS):
            cell.data_type = "s"
            cell.quotePrefix = True
        return
    if isinstance(value, (np.integer,)):
        value = int(value)
    elif isinstance(value, (np.floating,)):
        value = float(value)
    if isinstance(value, float) and not math.isfinite(value):
        value = None
    cell.value = value


def _sheet_names(depots: Sequence[Any]) -> list[str]:
    """Valid, unique sheet titles (≤ 31 characters, none of ``[]:*?/\\``, not 'Summary')."""
    used = {SUMMARY_SHEET.lower()}
    out = []
    for d in depots:
        base = re.sub(r"[\[\]:*?/\\]", "_", str(d)).strip("'") or "Depot"
        base = base[:31]
        name, k = base, 2
        while name.lower() in used:
            suffix = f" ({k})"
            name, k = base[: 31 - len(suffix)] + suffix, k + 1
        used.add(name.lower())
        out.append(name)
    return out


def _currency_code(currency: str) -> str:
    return re.sub(r"[^A-Za-z]", "", currency)[:3]


def _money_format(currency: str) -> str:
    code = _currency_code(currency)
    return f'#,##0 "{code}"' if code else "#,##0"


def _to_date(value: Any) -> _dt.date | None:
    if value is None:
        return None
    try:
        if pd.isna(value):
            return None
    except (TypeError, ValueError):
        pass
    return pd.Timestamp(value).date()


def _number(value: Any) -> float | None:
    try:
        v = float(value)
    except (TypeError, ValueError):
        return None
    return v if math.isfinite(v) else None


def _finite(v: Any) -> bool:
    return _number(v) is not None
