"""The command line, driven through Typer's CliRunner: exit codes and texts."""
from __future__ import annotations

import re

import pytest
from typer.testing import CliRunner

from planner import __version__
from planner.cli import app

runner = CliRunner()
COMMANDS = ["check", "plan", "forecast", "diagnose", "backtest", "compare"]
TINY = __import__("pathlib").Path(__file__).resolve().parents[1] / "planner" / "demo" / "tiny"


def _plain(text: str) -> str:
    """Help text without Rich's box drawing and colour codes, whitespace folded."""
    text = re.sub(r"\x1b\[[0-9;]*m", "", text)
    return " ".join(re.sub(r"[│╭╮╰╯─]", " ", text).split())


def test_version():
    result = runner.invoke(app, ["--version"])
    assert result.exit_code == 0
    assert result.output.strip() == f"planner {__version__}"


@pytest.mark.parametrize("command", COMMANDS)
def test_every_command_has_help(command):
    result = runner.invoke(app, [command, "--help"], terminal_width=200)
    assert result.exit_code == 0
    text = _plain(result.output)
    assert "SCENARIO" in text and "bundled demo" in text
    assert "--debug" in text


def test_plan_help_states_units_and_defaults():
    text = _plain(runner.invoke(app, ["plan", "--help"], terminal_width=200).output)
    for phrase in ("in days", "in seconds", "default: the scenario's paths.count",
                   "default: runs/plan"):
        assert phrase in text, phrase


def test_missing_scenario_folder_is_bad_input(tmp_path):
    result = runner.invoke(app, ["check", str(tmp_path / "nowhere")])
    assert result.exit_code == 2
    assert "scenario folder not found" in result.output
    assert "Traceback" not in result.output


def test_check_prints_quality_table(tiny_dir):
    result = runner.invoke(app, ["check", str(tiny_dir)], terminal_width=200)
    assert result.exit_code == 0, result.output
    for tid in ("BRH-001", "BRH-002", "BRH-003"):
        assert tid in result.output
    assert "Network totals" in result.output and "Scenario is valid" in result.output


def test_check_json(tiny_dir):
    import json

    result = runner.invoke(app, ["check", str(tiny_dir), "--json"])
    assert result.exit_code == 0, result.output
    data = json.loads(result.output)
    assert data["network"]["terminals"] == 3
    assert {r["terminal_id"] for r in data["terminals"]} == {"BRH-001", "BRH-002", "BRH-003"}


def test_compare_on_tiny_writes_tables_and_chart(tmp_path):
    out = tmp_path / "cmp"
    result = runner.invoke(app, ["compare", str(TINY), "--set", "costs.visit_fee=+15%",
                                 "--paths", "60", "--out", str(out)], terminal_width=160)
    assert result.exit_code == 0, result.output
    assert "costs.visit_fee=+15%" in result.output
    assert {"compare.csv", "compare.json", "compare.png"} <= {p.name for p in out.iterdir()}


def test_compare_with_an_unknown_setting_is_bad_input(tmp_path):
    result = runner.invoke(app, ["compare", str(TINY), "--set", "costs.visit_fees=200",
                                 "--out", str(tmp_path / "x")])
    assert result.exit_code == 2
    assert "visit_fee" in result.output and "Traceback" not in result.output


def test_backtest_on_tiny_writes_tables_and_chart(tmp_path):
    out = tmp_path / "bt"
    result = runner.invoke(app, ["backtest", str(TINY), "--weeks", "2", "--paths", "60",
                                 "--origins", "2", "--out", str(out)], terminal_width=160)
    assert result.exit_code == 0, result.output
    assert "planner" in result.output and "perfect-foresight" in result.output.lower()
    assert {"backtest.csv", "backtest.json", "backtest.png"} <= {p.name for p in out.iterdir()}
