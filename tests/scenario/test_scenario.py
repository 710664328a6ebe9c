"""Loading and validating a scenario folder (planner.scenario).

The heart is one table: each case breaks the tiny demo scenario in one way and names the file,
line, column and a phrase of the one message that must come back, both from ``load_scenario``
(as an InputError) and through ``planner check`` (exit code 2, no traceback).
"""
from __future__ import annotations

import csv
import io
import math
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from typer.testing import CliRunner

import planner.cli
from planner.errors import InputError, Problem
from planner.scenario import MAX_ROWS_PER_CHECK, WEEKDAYS, Scenario, load_scenario

from conftest import TINY, rewrite

runner = CliRunner()


# --------------------------------------------------------------------------------------------
# Edits of the tiny scenario (each maps a file's text to its new content)
# --------------------------------------------------------------------------------------------


def line_of(file: str, start: str) -> int:
    """Line (1-based, as an editor shows it) of the first line of a tiny file starting so."""
    lines = (TINY / file).read_text(encoding="utf-8").splitlines()
    return next(n for n, line in enumerate(lines, 1) if line.startswith(start))


def cell(line: int, column: str, value: str):
    """Set one cell of a comma-separated file (the tiny files hold no quoted commas)."""
    def edit(text: str) -> str:
        lines = text.splitlines()
        header = lines[0].split(",")
        fields = lines[line - 1].split(",")
        fields[header.index(column)] = value
        lines[line - 1] = ",".join(fields)
        return "\n".join(lines) + "\n"
    return edit


def replace(old: str, new: str):
    def edit(text: str) -> str:
        assert old in text, old
        return text.replace(old, new, 1)
    return edit


def append(*rows: str):
    return lambda text: text + "".join(row + "\n" for row in rows)


def content(new: str | bytes | None):
    return lambda text: new


def committed(*rows: str):
    return content("terminal_id,date,load\n" + "".join(row + "\n" for row in rows))


def to_cp1252(text: str) -> bytes:
    return text.encode("cp1252")


# the tiny history ends 2026-11-29, so the horizon is 2026-11-30 … 2026-12-13
FIRST_DAY = "2026-11-30"
D = "dispense.csv"
T = "terminals.csv"
S = "scenario.toml"
DOWN = line_of(D, "BRH-002,2026-10-14")  # the one `down` row
TOML = {key: line_of(S, key) for key in (
    "currency", "[planning]", "horizon_days", "replenishment", "holidays", "paydays",
    "[costs]", "carry_rate_annual", "visit_fee", "dry_day_penalty", "Sat", "[service]",
    "max_dry_probability", "[paths]", "count", "seed")}


def case(id: str, file: str, edit, line: int | None, column: str | None, phrase: str,
         where: str | None = None):
    """One malformed input: edit ``file``; expect one problem in ``where`` (default: file)."""
    return pytest.param(file, edit, where or file, line, column, phrase, id=id)


CASES = [
    # files that are missing, empty or not CSV text
    case("missing-settings", S, content(None), None, None, "file not found"),
    case("missing-terminals", T, content(None), None, None, "file not found"),
    case("missing-depots", "depots.csv", content(None), None, None, "create depots.csv"),
    case("missing-dispense", D, content(None), None, None, "file not found"),
    case("empty-dispense", D, content(""), None, None, "the file is empty"),
    case("blank-terminals", T, content(" \n\n  \n"), None, None, "the file is empty"),
    case("empty-settings", S, content(""), None, None, "the file is empty"),
    case("header-only-dispense", D, content("terminal_id,date,amount,status\n"), None, None,
         "header but no data rows"),
    case("no-header", D, lambda t: t.split("\n", 1)[1], 1, None,
         "the first line must be the header"),
    case("workbook", T, content(b"PK\x03\x04\x14\x00\x06\x00"), None, None,
         "spreadsheet workbook"),
    case("binary", D, content(b"\x00\x9f\x92\x96\x00" * 10), None, None, "binary data"),
    case("row-too-long", D, cell(5, "status", "ok,extra"), 5, None,
         "the row has 5 values but the header has 4 columns"),
    case("row-too-short", T, replace(",village", ""), 4, None, "the row has 7 values"),
    case("unclosed-quote", T, replace("station", '"station'), 3, None,
         "the row runs over lines 3–4: a double quote opens a value"),
    # columns
    case("misspelt-column", D, replace("amount", "amonut"), 1, "amount",
         "rename column 'amonut' to 'amount'"),
    case("misspelt-column-terminals", T, replace("insurance_limit", "insurance_lmit"), 1,
         "insurance_limit", "rename column 'insurance_lmit' to 'insurance_limit'"),
    case("missing-column", "depots.csv", content("depot\nBrenholm\n"), 1,
         "max_visits_per_day", "add a column 'max_visits_per_day'"),
    case("column-twice", T, replace("site", "depot"), 1, "depot", "appears twice"),
    # dates
    case("date-no-month-13", D, cell(2, "date", "2026-13-01"), 2, "date",
         "'2026-13-01' does not parse"),
    case("date-does-not-exist", D, cell(3, "date", "2026-02-30"), 3, "date",
         "does not exist"),
    case("date-slashes", D, cell(4, "date", "09/10/2026"), 4, "date",
         "write dates as YYYY-MM-DD"),
    case("date-year-typo", D, cell(3, "date", "0206-09-08"), 3, "date",
         "date 0206-09-08 lies outside the years 1970–2199"),
    case("date-empty", D, cell(4, "date", ""), 4, "date", "date is empty"),
    case("committed-date", "committed.csv", committed("BRH-001,1.12.26,40000"), 2, "date",
         "does not parse"),
    # amounts
    case("amount-text", D, cell(2, "amount", "8100 EUR"), 2, "amount",
         "'8100 EUR' does not parse as a number"),
    case("amount-thousands-comma", D, cell(3, "amount", '"8,470"'), 3, "amount",
         "no currency sign, unit or thousands separator"),
    case("amount-negative", D, cell(3, "amount", "-50"), 3, "amount",
         "amount must be at least 0, got -50"),
    case("amount-inf", D, cell(4, "amount", "inf"), 4, "amount", "not a finite number"),
    case("amount-nan", D, cell(4, "amount", "NaN"), 4, "amount", "not a finite number"),
    case("amount-overflow", D, cell(4, "amount", "1e400"), 4, "amount",
         "not a finite number"),
    case("amount-empty-on-ok-row", D, cell(5, "amount", ""), 5, "amount", "amount is empty"),
    case("amount-empty-on-dry-row", D, cell(line_of(D, "BRH-003,2026-11-07"), "amount", ""),
         line_of(D, "BRH-003,2026-11-07"), "amount", "amount is empty"),
    case("capacity-text", T, cell(3, "capacity", "80k"), 3, "capacity",
         "capacity '80k' does not parse"),
    # dispense rows
    case("duplicate-day", D, append("BRH-001,2026-09-07,100.0,ok"), line_of(D, "BRH-003") + 84,
         "date", "second row for 2026-09-07 (first on line 2)"),
    case("unknown-terminal-dispense", D, cell(2, "terminal_id", "BRH-0001"), 2, "terminal_id",
         "'BRH-0001' is not in terminals.csv"),
    case("unknown-terminal-hint", D, cell(2, "terminal_id", "BRH-0001"), 2, "terminal_id",
         "did you mean 'BRH-001'?"),
    case("terminal-missing-from-terminals", T, lambda t: t.replace(t.splitlines()[-1], ""),
         line_of(D, "BRH-003"), "terminal_id",
         "'BRH-003' is not in terminals.csv (84 rows, lines", where=D),
    case("unknown-status", D, cell(2, "status", "okay"), 2, "status",
         "unknown status 'okay'. Fix: use ok, dry or down (did you mean 'ok'?)"),
    case("empty-status", D, cell(2, "status", ""), 2, "status", "status is empty"),
    case("empty-terminal-id", D, cell(2, "terminal_id", ""), 2, "terminal_id",
         "terminal_id is empty"),
    # terminals
    case("unknown-depot", T, cell(3, "depot", "Brenhom"), 3, "depot",
         "'Brenhom' is not in depots.csv. Fix: add it to depots.csv or correct the name "
         "(did you mean 'Brenholm'?)"),
    case("unknown-weekday", T, cell(2, "visit_days", "Mon|Tue|Wdn"), 2, "visit_days",
         "unknown weekday 'Wdn' in visit_days"),
    case("unknown-weekday-hint", T, cell(3, "visit_days", "Mon|Wed|Fir"), 3, "visit_days",
         "did you mean 'Fri'?"),
    case("weekday-commas", T, cell(3, "visit_days", '"Mon,Wed"'), 3, "visit_days",
         "separated by '|'"),
    case("no-visit-day", T, cell(4, "visit_days", ""), 4, "visit_days",
         "visit_days lists no day"),
    case("capacity-zero", T, cell(2, "capacity", "0"), 2, "capacity",
         "capacity must be greater than 0, got 0"),
    case("capacity-negative", T, cell(3, "capacity", "-80000"), 3, "capacity",
         "capacity must be greater than 0"),
    case("insurance-zero", T, cell(2, "insurance_limit", "0"), 2, "insurance_limit",
         "insurance limit must be greater than 0"),
    case("bundle-zero", T, cell(4, "bundle", "0"), 4, "bundle",
         "bundle must be greater than 0"),
    case("bundle-negative", T, cell(4, "bundle", "-1000"), 4, "bundle",
         "bundle must be greater than 0"),
    case("bundle-above-limit", T, cell(4, "bundle", "70000"), 4, "bundle",
         "larger than min(capacity, insurance_limit)"),
    case("balance-above-capacity", T, cell(2, "balance_now", "130000"), 2, "balance_now",
         "balance_now 130000 is above the capacity 120000"),
    case("balance-negative", T, cell(3, "balance_now", "-1"), 3, "balance_now",
         "balance must be at least 0"),
    case("duplicate-terminal", T, cell(3, "terminal_id", "BRH-001"), 3, "terminal_id",
         "'BRH-001' appears twice (first on line 2)"),
    case("visit-fee-negative", T, lambda t: t.replace(",site", ",site,visit_fee")
         .replace("centre", "centre,-5").replace("station", "station,")
         .replace("village", "village,"), 2, "visit_fee", "visit fee must be at least 0"),
    # depots
    case("crew-fraction", "depots.csv", cell(2, "max_visits_per_day", "1.5"), 2,
         "max_visits_per_day", "crew limit 1.5 is not a whole number"),
    case("crew-negative", "depots.csv", cell(2, "max_visits_per_day", "-1"), 2,
         "max_visits_per_day", "crew limit must be at least 0"),
    case("crews-huge", "depots.csv", cell(2, "max_visits_per_day", "1e12"), 2,
         "max_visits_per_day", "above 10,000"),
    case("depot-twice", "depots.csv", append("Brenholm,3"), 3, "depot",
         "'Brenholm' appears twice"),
    # committed visits
    case("committed-unknown-terminal", "committed.csv", committed("BRH-009,2026-12-01,10000"),
         2, "terminal_id", "'BRH-009' is not in terminals.csv"),
    case("committed-off-bundle", "committed.csv",
         committed("BRH-001,2026-12-01,40000", "BRH-002,2026-12-02,41000"), 3, "load",
         "load 41000 for BRH-002 is not a multiple of its bundle 2000"),
    case("committed-above-limit", "committed.csv", committed("BRH-001,2026-12-01,110000"), 2,
         "load", "above its limit 100000"),
    case("committed-outside-horizon", "committed.csv", committed("BRH-001,2026-12-14,40000"),
         2, "date", "lies outside the horizon 2026-11-30 … 2026-12-13"),
    case("committed-twice", "committed.csv",
         committed("BRH-001,2026-12-01,40000", "BRH-001,2026-12-01,20000"), 3, "date",
         "second row for 2026-12-01 (first on line 2)"),
    case("committed-negative", "committed.csv", committed("BRH-001,2026-12-01,-2000"), 2,
         "load", "load must be at least 0"),
    # scenario.toml: syntax, keys, types, ranges
    case("toml-syntax", S, replace('currency = "EUR"', "currency = EUR"), TOML["currency"],
         None, "TOML syntax error: invalid value"),
    case("toml-syntax-twice", S, append("[paths]", "count = 3"), TOML["seed"] + 1, None,
         "TOML syntax error: cannot declare 'paths' twice"),
    case("toml-unknown-key", S, replace("horizon_days", "horizon_dayz"), TOML["horizon_days"],
         "planning.horizon_dayz", "did you mean 'planning.horizon_days'?"),
    case("toml-unknown-section", S, replace("[service]", "[servce]"), TOML["[service]"],
         "servce", "did you mean 'service'?"),
    case("toml-key-in-wrong-section", S, replace("currency", "seed = 5\ncurrency"),
         TOML["currency"], "seed", "move it under [paths]"),
    case("toml-type-text-for-int", S, replace("horizon_days = 14", 'horizon_days = "14"'),
         TOML["horizon_days"], "planning.horizon_days", "must be a whole number, got '14'"),
    case("toml-type-float-for-int", S, replace("count = 200", "count = 200.5"), TOML["count"],
         "paths.count", "must be a whole number"),
    case("toml-type-text-for-number", S, replace("visit_fee = 120", 'visit_fee = "120"'),
         TOML["visit_fee"], "costs.visit_fee", "must be a number, got '120'"),
    case("toml-type-bool-for-number", S, replace("dry_day_penalty = 600",
                                                 "dry_day_penalty = true"),
         TOML["dry_day_penalty"], "costs.dry_day_penalty", "must be a number, got True"),
    case("toml-type-section", S, lambda t: t.replace(
        "[service]\nmax_dry_probability = 0.05", "").replace("[planning]", 'service = "strict"'
                                                               "\n[planning]"),
         TOML["[planning]"], "service", "must be a section"),
    case("toml-missing-required", S, replace("dry_day_penalty = 600\n", ""), TOML["[costs]"],
         "costs.dry_day_penalty", "required setting 'costs.dry_day_penalty' is missing"),
    case("rate-above-one", S, replace("carry_rate_annual = 0.05", "carry_rate_annual = 5"),
         TOML["carry_rate_annual"], "costs.carry_rate_annual", "must lie in [0, 1), got 5"),
    case("rate-one", S, replace("carry_rate_annual = 0.05", "carry_rate_annual = 1.0"),
         TOML["carry_rate_annual"], "costs.carry_rate_annual", "must lie in [0, 1)"),
    case("rate-negative", S, replace("carry_rate_annual = 0.05", "carry_rate_annual = -0.01"),
         TOML["carry_rate_annual"], "costs.carry_rate_annual", "must lie in [0, 1)"),
    case("rate-nan", S, replace("carry_rate_annual = 0.05", "carry_rate_annual = nan"),
         TOML["carry_rate_annual"], "costs.carry_rate_annual", "must lie in [0, 1)"),
    case("dry-probability-zero", S, replace("max_dry_probability = 0.05",
                                            "max_dry_probability = 0"),
         TOML["max_dry_probability"], "service.max_dry_probability", "must lie in (0, 1)"),
    case("dry-probability-one", S, replace("max_dry_probability = 0.05",
                                           "max_dry_probability = 1"),
         TOML["max_dry_probability"], "service.max_dry_probability", "must lie in (0, 1)"),
    case("horizon-zero", S, replace("horizon_days = 14", "horizon_days = 0"),
         TOML["horizon_days"], "planning.horizon_days", "must be at least 1, got 0"),
    case("lock-days-beyond-horizon", S, replace("horizon_days = 14",
                                                "horizon_days = 14\nlock_days = 15"),
         TOML["horizon_days"] + 1, "planning.lock_days", "between 0 and horizon_days (14)"),
    case("replenishment", S, replace('"swap"', '"top-up"'), TOML["replenishment"],
         "planning.replenishment", "did you mean 'topup'?"),
    case("fee-negative", S, replace("visit_fee = 120", "visit_fee = -120"), TOML["visit_fee"],
         "costs.visit_fee", "must be a finite number ≥ 0"),
    case("fee-weekday", S, replace("Sat = 180", "Sam = 180"), TOML["Sat"],
         "costs.visit_fee_by_weekday.Sam", "did you mean 'Sat'?"),
    case("currency", S, replace('"EUR"', '"euro"'), TOML["currency"], "currency",
         "three-letter ISO 4217 code"),
    case("start-date-not-a-day", S, replace("[planning]", 'start_date = "2026-02-30"\n\n'
                                                          "[planning]"),
         TOML["[planning]"], "start_date", "is not a date"),
    case("holidays-country", S, replace('"DE"', '"XX"'), TOML["holidays"],
         "calendar.holidays", "'XX'"),
    case("payday-rule", S, replace('"last_business_day"', '"last_busines_day"'),
         TOML["paydays"], "calendar.paydays", "did you mean 'last_business_day'?"),
    case("event-lift", S, append("", "[[calendar.events]]", "date = 2026-12-24",
                                 "lift = -1"), TOML["seed"] + 4, "calendar.events",
         "calendar event 1: lift must be a number > 0"),
    case("horizon-too-long", S, replace("horizon_days = 14", "horizon_days = 10000000000"),
         TOML["horizon_days"], "planning.horizon_days", "must be at most 183"),
    case("start-date-year-typo", S, replace("[planning]", "start_date = 0026-11-30\n\n"
                                                          "[planning]"),
         TOML["[planning]"], "start_date", "lies outside the years 1970–2199"),
    case("paths-count-zero", S, replace("count = 200", "count = 0"), TOML["count"],
         "paths.count", "must lie between 1 and 100,000, got 0"),
    case("history-after-start", S, replace("[planning]", "start_date = 2026-01-05\n\n"
                                                         "[planning]"),
         None, None, "no row is dated before the first planning day 2026-01-05", where=D),
    # a ';'-separated file that writes '1.500' could mean 1.5 or 1500: refuse to guess
    case("semicolon-ambiguous", D, lambda t: cell(2, "amount", "8.100")(t).replace(",", ";"),
         2, "amount", "ambiguous in a file separated by ';': 8.1 or 8100?"),
    # slash dates: one message for the file, with the exact fix
    case("slash-dates", D, lambda t: __import__("re").sub(
        r"(\d{4})-(\d{2})-(\d{2})", r"\3/\2/\1", t), 2, "date",
         "dates are written with slashes"),
    # weekdays listed with the file's separator: the row is too long, and the message says why
    case("visit-days-with-commas", T, replace("Mon|Wed|Fri,", "Mon,Wed,Fri,"), 3, None,
         "visit_days seems to list its weekdays with ','"),
    # a mistyped year would move the whole plan; a record cannot be from the future
    case("dispense-date-in-the-future", D, append("BRH-001,2030-01-01,9000.0,ok"), 253, "date",
         "date 2030-01-01 lies after today"),
    # identifiers a spreadsheet would run as formulas are refused, so every export is safe
    case("terminal-id-as-formula", T, replace("BRH-003,", "=HYPERLINK(1),"), 4, "terminal_id",
         "begins with a character a spreadsheet reads as a formula"),
    case("depot-name-as-formula", "depots.csv", replace("Brenholm,", "@Brenholm,", ), 2,
         "depot", "begins with a character a spreadsheet reads as a formula"),
    case("decimal-point-in-comma-file", D,
         lambda t: _european(t, thousands=False).replace("8470,00", "8470.5"), 3, "amount",
         "'8470.5' has a decimal point, but this file writes decimal commas"),
]


def _one_line(text: str) -> str:
    return " ".join(text.split())


@pytest.mark.parametrize("edit_file, edit, file, line, column, phrase", CASES)
def test_malformed_input_gets_one_clear_message(tiny_dir, edit_file, edit, file, line, column,
                                                phrase):
    rewrite(tiny_dir, edit_file, edit)
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    problems = info.value.problems
    assert len(problems) == 1, "\n".join(map(str, problems))
    problem = problems[0]
    assert (problem.file, problem.line, problem.column) == (file, line, column), problem
    assert phrase in str(problem)
    assert problem.problem and problem.fix
    assert str(tiny_dir) not in str(problem)  # messages name files, not machine paths

    result = runner.invoke(planner.cli.app, ["check", str(tiny_dir)], terminal_width=200)
    assert result.exit_code == 2, result.output
    assert _one_line(str(problem)) in _one_line(result.output)
    assert "Traceback" not in result.output


def test_message_names_file_line_column_problem_and_fix(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, cell(3, "amount", "-50"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert str(info.value) == ("dispense.csv, line 3, column 'amount': amount must be at least "
                               "0, got -50. Fix: write a number of at least 0")


def test_setting_message_names_line_and_setting(rewrite_tiny, tiny_dir):
    rewrite_tiny(S, replace("horizon_days", "horizon_dayz"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert str(info.value) == (
        f"scenario.toml, line {TOML['horizon_days']}, setting 'planning.horizon_dayz': unknown "
        "setting 'planning.horizon_dayz'. Fix: did you mean 'planning.horizon_days'?")


def test_missing_folder_is_an_input_error(tmp_path):
    with pytest.raises(InputError, match="scenario folder not found"):
        load_scenario(tmp_path / "nowhere")


# --------------------------------------------------------------------------------------------
# All problems of a file in one pass
# --------------------------------------------------------------------------------------------


def test_two_bad_rows_are_both_reported(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, cell(3, "amount", "abc"))
    rewrite_tiny(D, cell(7, "amount", "-1"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    got = [(p.line, p.column) for p in info.value.problems]
    assert got == [(3, "amount"), (7, "amount")]


def test_unreadable_rows_and_bad_cells_come_together(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, cell(4, "status", "ok,extra"))
    rewrite_tiny(D, cell(9, "date", "2026-99-01"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert [(p.line, p.column) for p in info.value.problems] == [(4, None), (9, "date")]


def test_an_unreadable_committed_row_is_not_dropped(rewrite_tiny, tiny_dir):
    rewrite_tiny("committed.csv", committed("BRH-001,2026-12-01,40000,extra"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert [(p.file, p.line) for p in info.value.problems] == [("committed.csv", 2)]


def test_different_problems_of_one_file_come_together(rewrite_tiny, tiny_dir):
    rewrite_tiny(T, cell(2, "capacity", "0"))
    rewrite_tiny(T, cell(3, "depot", "Nowhere"))
    rewrite_tiny(T, cell(4, "visit_days", "Tue|Thu|Sta"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    got = sorted((p.line, p.column) for p in info.value.problems)
    assert got == [(2, "capacity"), (3, "depot"), (4, "visit_days")]


def test_settings_problems_come_together(rewrite_tiny, tiny_dir):
    rewrite_tiny(S, replace("horizon_days = 14", 'horizon_days = "two weeks"'))
    rewrite_tiny(S, replace("carry_rate_annual = 0.05", "carry_rate_annual = 5"))
    rewrite_tiny(S, replace("seed = 11", "sed = 11"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert sorted(p.column for p in info.value.problems) == [
        "costs.carry_rate_annual", "paths.sed", "planning.horizon_days"]


def test_many_bad_rows_are_counted_after_the_first_few(rewrite_tiny, tiny_dir):
    def break_amounts(text: str) -> str:
        lines = text.splitlines()
        for n in range(2, 2 + MAX_ROWS_PER_CHECK + 5):
            lines[n - 1] = lines[n - 1].replace(".0,ok", ".0x,ok")
        return "\n".join(lines) + "\n"

    rewrite_tiny(D, break_amounts)
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    problems = info.value.problems
    assert len(problems) == MAX_ROWS_PER_CHECK + 1
    assert [p.line for p in problems[:-1]] == list(range(2, 2 + MAX_ROWS_PER_CHECK))
    assert "and 5 more row(s)" in problems[-1].problem


def test_many_unreadable_rows_are_counted_after_the_first_few(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: t.replace(",ok\n", ",ok,x,y\n"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    problems = info.value.problems
    assert len(problems) == MAX_ROWS_PER_CHECK + 1
    assert problems[-1].problem.startswith("and ") and "more row(s)" in problems[-1].problem


def test_line_numbers_count_blank_lines(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: t.replace("\n", "\n\n", 3))  # blank lines after lines 1–3
    rewrite_tiny(D, cell(8, "amount", "x"))  # line 8 is the 5th data row now
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert [(p.line, p.column) for p in info.value.problems] == [(8, "amount")]


# --------------------------------------------------------------------------------------------
# A valid scenario
# --------------------------------------------------------------------------------------------


def test_tiny_scenario_loads_with_documented_frames():
    s = load_scenario(TINY)
    assert isinstance(s, Scenario)
    assert list(s.terminals.columns) == [
        "depot", "capacity", "insurance_limit", "bundle", "balance_now", "visit_days",
        "allowed_weekdays", "limit", "site", "visit_fee"]
    assert s.terminals.index.name == "terminal_id"
    assert s.terminal_ids == ["BRH-001", "BRH-002", "BRH-003"]
    dtypes = s.terminals.dtypes
    for col in ("capacity", "insurance_limit", "bundle", "balance_now", "limit", "visit_fee"):
        assert dtypes[col] == np.float64, col
    for col in ("depot", "visit_days", "site"):
        assert pd.api.types.is_string_dtype(dtypes[col]), col
    assert s.terminals.at["BRH-002", "allowed_weekdays"] == (
        True, False, True, False, True, False, False)
    assert s.terminals["limit"].tolist() == [100000.0, 80000.0, 60000.0]
    assert s.terminals["visit_fee"].isna().all()
    assert s.terminals.at["BRH-003", "site"] == "village"

    assert list(s.depots.columns) == list(WEEKDAYS)
    assert s.depots.index.name == "depot"
    assert (s.depots.dtypes == np.int64).all() and s.depots.loc["Brenholm"].tolist() == [2] * 7

    d = s.dispense
    assert list(d.columns) == ["terminal_id", "date", "amount", "status"]
    assert pd.api.types.is_string_dtype(d["terminal_id"]) and d["amount"].dtype == np.float64
    assert d["date"].dtype == "datetime64[us]" and (d["date"] == d["date"].dt.normalize()).all()
    assert set(d["status"]) == {"ok", "dry", "down"}
    assert d.equals(d.sort_values(["terminal_id", "date"], ignore_index=True))
    assert len(d) == 251 and (d["amount"] >= 0).all()

    assert list(s.committed.columns) == ["terminal_id", "date", "load"] and s.committed.empty
    assert s.committed["date"].dtype == d["date"].dtype
    assert s.committed["load"].dtype == np.float64

    assert s.start_date == pd.Timestamp(FIRST_DAY)
    assert s.horizon_dates[0] == s.start_date and len(s.horizon_dates) == s.horizon_days == 14
    assert s.replenishment == "swap" and s.lock_days == 0
    assert s.costs.carry_rate_daily == pytest.approx(0.05 / 365)
    assert s.costs.visit_fee_on(5) == 180.0 and s.costs.visit_fee_on(0) == 120.0
    assert s.calendar.country == "DE" and s.calendar.paydays == ("last_business_day",)
    assert (s.max_dry_probability, s.path_count, s.seed) == (0.05, 200, 11)
    assert len(s.fingerprint) == 16


def test_committed_visits_load(rewrite_tiny, tiny_dir):
    rewrite_tiny("committed.csv", committed("BRH-002,2026-12-02,40000",
                                            "BRH-001,2026-12-01,98000"))
    s = load_scenario(tiny_dir)
    assert s.committed["terminal_id"].tolist() == ["BRH-001", "BRH-002"]
    assert s.committed["load"].tolist() == [98000.0, 40000.0]
    assert s.committed["date"].tolist() == [pd.Timestamp("2026-12-01"),
                                            pd.Timestamp("2026-12-02")]


def test_committed_visit_outside_visit_days_is_kept_with_a_notice(rewrite_tiny, tiny_dir):
    rewrite_tiny("committed.csv", committed("BRH-002,2026-12-01,40000"))  # a Tuesday
    s = load_scenario(tiny_dir)
    assert len(s.committed) == 1
    assert any("outside its visit_days" in w for w in s.warnings)


def test_down_row_may_have_an_empty_amount(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, cell(DOWN, "amount", ""))
    d = load_scenario(tiny_dir).dispense
    down = d[d["status"] == "down"]
    assert len(down) == 1 and math.isnan(down["amount"].iloc[0])
    assert d.loc[d["status"] != "down", "amount"].notna().all()


def test_extra_columns_are_ignored_with_a_notice(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: "\n".join(line + (",note" if n == 0 else ",x")
                                        for n, line in enumerate(t.splitlines())) + "\n")
    s = load_scenario(tiny_dir)
    assert "note" not in s.dispense.columns
    assert any(w.startswith("dispense.csv:") and "extra column(s) ignored: note" in w
               for w in s.warnings)


def test_optional_committed_file_may_hold_only_its_header(rewrite_tiny, tiny_dir):
    rewrite_tiny("committed.csv", committed())
    assert load_scenario(tiny_dir).committed.empty


def test_per_weekday_crews_and_visit_fee_override(rewrite_tiny, tiny_dir):
    rewrite_tiny("depots.csv", content("depot,max_visits_per_day,Sat,Sun\nBrenholm,2,1,0\n"))
    rewrite_tiny(T, lambda t: t.replace(",site", ",site,visit_fee").replace("centre", "centre,")
                 .replace("station", "station,95.5").replace("village", "village,"))
    s = load_scenario(tiny_dir)
    assert s.depots.loc["Brenholm"].tolist() == [2, 2, 2, 2, 2, 1, 0]
    assert s.terminals["visit_fee"].tolist()[1] == 95.5
    assert s.terminals["visit_fee"].isna().tolist() == [True, False, True]


# --------------------------------------------------------------------------------------------
# Warnings, not errors
# --------------------------------------------------------------------------------------------


def test_gap_in_history_is_a_warning():
    # the tiny history lacks BRH-001 on 2026-10-20 (scenarios/make_tiny.py)
    s = load_scenario(TINY)
    gaps = [w for w in s.warnings if "missing day(s)" in w]
    assert len(gaps) == 1 and "BRH-001 (1 day(s))" in gaps[0]


def test_short_history_is_a_warning(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: "".join(line for line in t.splitlines(keepends=True)
                                      if not line.startswith("BRH-003")
                                      or line >= "BRH-003,2026-11-01"))
    s = load_scenario(tiny_dir)
    short = [w for w in s.warnings if "shorter than 8 weeks" in w]
    assert len(short) == 1 and "BRH-003" in short[0] and "BRH-001" not in short[0]


def test_terminal_without_history_is_a_warning(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: "".join(line for line in t.splitlines(keepends=True)
                                      if not line.startswith("BRH-002")))
    s = load_scenario(tiny_dir)
    assert "BRH-002" in s.terminal_ids
    assert any("no history for 1 terminal(s): BRH-002" in w for w in s.warnings)


def test_rows_after_the_first_planning_day_are_a_warning(rewrite_tiny, tiny_dir):
    rewrite_tiny(S, replace("[planning]", "start_date = 2026-11-23\n\n[planning]"))
    s = load_scenario(tiny_dir)
    assert s.start_date == pd.Timestamp("2026-11-23")
    assert s.dispense["date"].max() == pd.Timestamp("2026-11-22")
    assert any("21 row(s) dated on or after the first planning day 2026-11-23" in w
               for w in s.warnings)


def test_warnings_do_not_stop_the_cli(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: "".join(line for line in t.splitlines(keepends=True)
                                      if not line.startswith("BRH-002")))
    result = runner.invoke(planner.cli.app, ["check", str(tiny_dir)], terminal_width=200)
    assert result.exit_code == 0, result.output
    assert "no history for 1 terminal(s)" in _one_line(result.output)


# --------------------------------------------------------------------------------------------
# Files saved by spreadsheet programs: read correctly, with a notice
# --------------------------------------------------------------------------------------------


def test_windows_encoding_is_read_with_a_notice(rewrite_tiny, tiny_dir):
    rewrite_tiny(T, lambda t: t.replace("village", "Café Müller").encode("cp1252"))
    s = load_scenario(tiny_dir)
    assert s.terminals.at["BRH-003", "site"] == "Café Müller"
    assert any(w.startswith("terminals.csv:") and "read as Windows-1252" in w
               for w in s.warnings)


def test_latin1_bytes_outside_windows_1252_are_read(rewrite_tiny, tiny_dir):
    # 0x81 is unassigned in Windows-1252 but a (control) character in Latin-1
    rewrite_tiny(T, lambda t: t.replace("village", "Dorf\x81é").encode("latin-1"))
    s = load_scenario(tiny_dir)
    assert s.terminals.at["BRH-003", "site"] == "Dorf\x81é"
    assert any("read as Latin-1" in w for w in s.warnings)


def test_utf16_with_byte_order_mark_is_read(rewrite_tiny, tiny_dir):
    rewrite_tiny(T, lambda t: t.encode("utf-16"))
    s = load_scenario(tiny_dir)
    assert s.terminals.equals(load_scenario(TINY).terminals)
    assert any("UTF-16" in w for w in s.warnings)


def test_utf8_byte_order_mark_is_accepted_silently(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: t.encode("utf-8-sig"))
    s = load_scenario(tiny_dir)
    assert s.dispense.equals(load_scenario(TINY).dispense)
    assert s.warnings == load_scenario(TINY).warnings


def _european(text: str, *, thousands: bool) -> str:
    """A CSV as a spreadsheet set to German writes it: ';' separators, decimal commas."""
    rows = list(csv.reader(io.StringIO(text)))
    out = io.StringIO()
    writer = csv.writer(out, delimiter=";", lineterminator="\r\n")
    for n, row in enumerate(rows):
        if n:
            row = [_comma_number(c, thousands) for c in row]
        writer.writerow(row)
    return out.getvalue()


def _comma_number(cell: str, thousands: bool) -> str:
    try:
        value = float(cell)
    except ValueError:
        return cell
    text = f"{value:,.2f}" if thousands else f"{value:.2f}"
    return text.replace(",", " ").replace(".", ",").replace(" ", "." if thousands else "")


@pytest.mark.parametrize("thousands", [False, True], ids=["1234,50", "1.234,50"])
def test_semicolon_file_with_decimal_commas_is_read(rewrite_tiny, tiny_dir, thousands):
    rewrite_tiny(D, lambda t: _european(t, thousands=thousands))
    rewrite_tiny(T, lambda t: _european(t, thousands=thousands))
    s, reference = load_scenario(tiny_dir), load_scenario(TINY)
    assert s.dispense.equals(reference.dispense)
    assert s.terminals.equals(reference.terminals)
    for file in (D, T):
        notes = [w for w in s.warnings if w.startswith(file + ":")]
        assert any("separated by ';'" in w for w in notes)
        assert any("decimal comma" in w for w in notes)


def test_semicolon_file_with_decimal_points_is_read(rewrite_tiny, tiny_dir):
    rewrite_tiny(D, lambda t: t.replace(",", ";"))
    assert load_scenario(tiny_dir).dispense.equals(load_scenario(TINY).dispense)


def test_tab_separated_file_is_read(rewrite_tiny, tiny_dir):
    rewrite_tiny(T, lambda t: t.replace(",", "\t"))
    s = load_scenario(tiny_dir)
    assert s.terminals.equals(load_scenario(TINY).terminals)
    assert any("separated by tabs" in w for w in s.warnings)


def test_day_month_year_dates_are_read_with_a_notice(rewrite_tiny, tiny_dir):
    def dotted(text: str) -> str:
        return "".join(
            line if n == 0 else
            line.replace(line.split(",")[1], pd.Timestamp(line.split(",")[1]).strftime(
                "%d.%m.%Y"), 1)
            for n, line in enumerate(text.splitlines(keepends=True)))

    rewrite_tiny(D, dotted)
    s = load_scenario(tiny_dir)
    assert s.dispense.equals(load_scenario(TINY).dispense)
    assert any("day.month.year" in w for w in s.warnings)


# --------------------------------------------------------------------------------------------
# Garbage never escapes as anything but an InputError
# --------------------------------------------------------------------------------------------

GARBAGE_CELLS = [(D, 2, "amount"), (D, 3, "date"), (D, 4, "status"), (D, 5, "terminal_id"),
                 (T, 2, "capacity"), (T, 3, "visit_days"), (T, 4, "balance_now"),
                 (T, 2, "depot"), ("depots.csv", 2, "max_visits_per_day")]
garbage = st.text(st.characters(exclude_categories=("Cs",)), max_size=30)


def _load_or_input_error(folder: Path) -> None:
    try:
        load_scenario(folder)
    except InputError as exc:
        assert exc.problems and all(isinstance(p, Problem) and p.fix for p in exc.problems)


@settings(max_examples=150, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(where=st.sampled_from(GARBAGE_CELLS), value=garbage, quoted=st.booleans())
def test_garbage_in_a_csv_cell_raises_only_input_error(tiny_dir, where, value, quoted):
    # each example rewrites the file from the pristine tiny copy, so examples are independent
    file, line, column = where
    original = (TINY / file).read_text(encoding="utf-8")
    if quoted:
        value = '"' + value.replace('"', '""') + '"'
    rewrite(tiny_dir, file, lambda _: cell(line, column, value)(original))
    _load_or_input_error(tiny_dir)


@settings(max_examples=60, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(file=st.sampled_from([D, T, "depots.csv", S]), data=st.binary(max_size=200))
def test_garbage_bytes_in_a_file_raise_only_input_error(tiny_dir, file, data):
    original = (TINY / file).read_bytes()
    cut = len(data) % (len(original) + 1)
    rewrite(tiny_dir, file, lambda _: original[:cut] + data + original[cut:])
    _load_or_input_error(tiny_dir)


@settings(max_examples=80, deadline=None, derandomize=True,
          suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(key=st.sampled_from(["horizon_days", "carry_rate_annual", "max_dry_probability",
                            "count", "holidays", "paydays", "Sat", "currency"]),
       value=st.one_of(garbage.map(lambda v: '"' + v.replace("\\", "").replace('"', "") + '"'),
                       st.integers().map(str), st.floats().map(repr),
                       st.sampled_from(["true", "[]", "[1, 2]", "{}", "2026-01-01",
                                        "2026-01-01T10:00:00", "nan", "-inf"])))
def test_garbage_settings_raise_only_input_error(tiny_dir, key, value):
    original = (TINY / S).read_text(encoding="utf-8")
    lines = [f"{key} = {value}" if line.startswith(key + " ") else line
             for line in original.splitlines()]
    rewrite(tiny_dir, S, lambda _: "\n".join(lines) + "\n")
    _load_or_input_error(tiny_dir)


def test_a_few_rows_dated_far_after_the_rest_are_refused(tmp_path):
    # the hold-out's history ends 2025-12-28; one row typed with the next year's date
    import shutil

    from planner.demo import demo_path

    folder = Path(shutil.copytree(demo_path("holdout/brannock"), tmp_path / "net"))
    with open(folder / "dispense.csv", "a", encoding="utf-8") as fh:
        fh.write("BNK-001,2026-11-28,9000,ok\n")
    with pytest.raises(InputError) as info:
        load_scenario(folder)
    (problem,) = info.value.problems
    assert problem.column == "date" and problem.line is not None
    assert "335 days after the rest of the history (which ends 2025-12-28)" in str(problem)


def test_message_nits(tiny_dir):
    import os

    # a binary scenario.toml is told to be plain text, not CSV
    settings = (tiny_dir / S).read_bytes()
    (tiny_dir / S).write_bytes(b"\x00\x01binary\xff")
    with pytest.raises(InputError, match=r"plain text \(UTF-8\)"):
        load_scenario(tiny_dir)
    (tiny_dir / S).write_bytes(settings)
    # a blank crew limit suggests a value the validator accepts
    depots = (tiny_dir / "depots.csv").read_text()
    (tiny_dir / "depots.csv").write_text(depots.replace("Brenholm,2", "Brenholm,"))
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert "e.g. 2" in str(info.value) and "12000" not in str(info.value)
    (tiny_dir / "depots.csv").write_text(depots)
    # a pipe in place of dispense.csv is not "not found"
    dispense = (tiny_dir / D).read_bytes()
    (tiny_dir / D).unlink()
    os.mkfifo(tiny_dir / D)
    with pytest.raises(InputError, match="is not a regular file"):
        load_scenario(tiny_dir)
    (tiny_dir / D).unlink()
    (tiny_dir / D).write_bytes(dispense)
    # a file of another shape is never quoted back
    secret = tiny_dir.parent / "secret.txt"
    secret.write_text("root:$6$hash-of-a-password:19000:0:99999:7:::\n")
    (tiny_dir / T).unlink()
    (tiny_dir / T).symlink_to(secret)
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    assert "hash-of-a-password" not in str(info.value)
    assert "names none of the required columns" in str(info.value)


def test_settings_data_is_the_inverse_of_the_settings_checks():
    # what a what-if comparison writes into must read back as the scenario it came from
    from planner.demo import demo_path
    from planner.scenario.settings import _SETTINGS, check_settings, settings_data

    for folder in (TINY, demo_path()):
        sc = load_scenario(folder)
        data = settings_data(sc)
        values = check_settings(data, "scenario.toml")
        assert values["costs"] == sc.costs and values["calendar"] == sc.calendar
        assert values["start_date"] == sc.start_date
        assert (values["planning.horizon_days"], values["planning.replenishment"],
                values["planning.lock_days"], values["service.max_dry_probability"],
                values["paths.count"], values["paths.seed"]) == (
            sc.horizon_days, sc.replenishment, sc.lock_days, sc.max_dry_probability,
            sc.path_count, sc.seed)
        dotted = {f"{table}.{key}" if isinstance(sub, dict) else table
                  for table, sub in data.items()
                  for key in (sub if isinstance(sub, dict) else [None])}
        optional = {"calendar.holidays", "calendar.subdivision"}   # absent when not set
        assert set(_SETTINGS) - optional <= dotted
        assert (sc.calendar.country is None) == ("calendar.holidays" not in dotted)
