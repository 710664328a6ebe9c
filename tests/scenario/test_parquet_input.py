"""dispense.parquet beside dispense.csv: the same history, the same checks and the same messages,
with data rows counted from 1 instead of lines (the bundled tiny scenario, written as Parquet
with pandas and pyarrow)."""
from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from planner.errors import InputError
from planner.scenario import load_scenario


def _as_parquet(folder, edit=None):
    frame = pd.read_csv(folder / "dispense.csv", dtype={"terminal_id": str, "status": str})
    frame["date"] = pd.to_datetime(frame["date"])
    if edit is not None:
        frame = edit(frame)
    frame.to_parquet(folder / "dispense.parquet", index=False)
    (folder / "dispense.csv").unlink()
    return frame


def test_parquet_history_equals_the_csv_one(tiny_dir):
    from_csv = load_scenario(tiny_dir)
    _as_parquet(tiny_dir)
    from_parquet = load_scenario(tiny_dir)
    pd.testing.assert_frame_equal(from_parquet.dispense, from_csv.dispense)
    assert from_parquet.fingerprint != from_csv.fingerprint   # the input differs by file


def test_dates_may_be_dates_or_text_and_amounts_any_number(tiny_dir):
    from_csv = load_scenario(tiny_dir)

    def kinds(frame):
        frame["date"] = frame["date"].dt.date                 # Parquet date32
        frame["amount"] = frame["amount"].astype("int64")
        return frame

    _as_parquet(tiny_dir, kinds)
    pd.testing.assert_frame_equal(load_scenario(tiny_dir).dispense, from_csv.dispense)


def test_problems_name_the_row_and_column(tiny_dir):
    def spoil(frame):
        frame = frame.astype({"amount": float})
        frame.loc[3, "terminal_id"] = "BRH-09"
        frame.loc[5, "amount"] = -5.0
        frame.loc[7, "status"] = "gone"
        frame.loc[8, "date"] = pd.Timestamp("2026-10-01 13:30")   # a time of day: no date
        return frame

    _as_parquet(tiny_dir, spoil)
    with pytest.raises(InputError) as info:
        load_scenario(tiny_dir)
    found = {(p.row, p.column): p.problem for p in info.value.problems}
    assert all(p.file == "dispense.parquet" and p.line is None for p in info.value.problems)
    assert "terminal 'BRH-09' is not in terminals.csv" in found[(4, "terminal_id")]
    assert "did you mean 'BRH-00" in str(info.value)
    assert "amount must be at least 0" in found[(6, "amount")]
    assert "unknown status 'gone'" in found[(8, "status")]
    assert "does not parse or does not exist" in found[(9, "date")]
    assert "dispense.parquet, row 4, column 'terminal_id'" in str(info.value)


def test_a_missing_column_both_files_or_an_unreadable_file_are_refused(tiny_dir):
    frame = pd.read_csv(tiny_dir / "dispense.csv")
    frame.to_parquet(tiny_dir / "dispense.parquet", index=False)
    with pytest.raises(InputError, match="both dispense.csv and dispense.parquet"):
        load_scenario(tiny_dir)
    (tiny_dir / "dispense.csv").unlink()
    frame.drop(columns=["status"]).to_parquet(tiny_dir / "dispense.parquet", index=False)
    with pytest.raises(InputError, match="required column 'status' is missing"):
        load_scenario(tiny_dir)
    (tiny_dir / "dispense.parquet").write_bytes(b"not parquet at all")
    with pytest.raises(InputError, match="not readable Parquet"):
        load_scenario(tiny_dir)


def test_the_command_line_reports_parquet_problems_with_exit_2(tiny_dir):
    from typer.testing import CliRunner

    from planner.cli import app

    _as_parquet(tiny_dir, lambda f: f.assign(status=np.where(np.arange(len(f)) == 2, "??",
                                                             f["status"])))
    result = CliRunner().invoke(app, ["check", str(tiny_dir)])
    assert result.exit_code == 2
    assert "dispense.parquet, row 3, column 'status'" in result.output.replace("\n", " ")
    assert "Traceback" not in result.output
