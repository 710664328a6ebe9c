"""The command line, driven through Typer's CliRunner: exit codes and texts."""
from __future__ import annotations

import re

import pytest
from typer.testing import CliRunner

from planner import __version__
from planner.cli import app

runner = CliRunner()
COMMANDS = ["check", "plan", "forecast", "diagnose", "backtest", "compare"]
TINY = __import__("pathlib").Path(__file__).resolve().parents[1] / "scenarios" / "tiny"


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


@pytest.mark.parametrize("command", COMMANDS)
def test_help_at_80_columns_cuts_nothing_off(command):
    # Rich ends a word too long for its column with "…"; every example must stay whole
    result = runner.invoke(app, [command, "--help"], terminal_width=80, env={"COLUMNS": "80"})
    assert result.exit_code == 0
    assert "…" not in result.output
    assert max(len(line) for line in result.output.splitlines()) <= 80


def test_compare_help_shows_its_examples_whole_at_80_columns():
    result = runner.invoke(app, ["compare", "--help"], terminal_width=80, env={"COLUMNS": "80"})
    assert "depots.Ashmere.max_visits_per_day=3" in result.output
    assert "costs.visit_fee=+15%" in result.output


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


@pytest.mark.parametrize("command, extra", [("plan", []), ("forecast", []),
                                            ("backtest", ["--weeks", "1"])])
def test_out_never_deletes_a_users_folder(tiny_dir, tmp_path, command, extra):
    precious = tmp_path / "precious"
    (precious / "sub").mkdir(parents=True)
    (precious / "thesis.txt").write_text("years of work")
    result = runner.invoke(app, [command, str(tiny_dir), "--out", str(precious), *extra])
    assert result.exit_code == 2
    assert "did not write" in _plain(result.output)
    assert (precious / "thesis.txt").read_text() == "years of work"
    assert (precious / "sub").is_dir()
    assert not list(tmp_path.glob(".precious.partial-*"))


def test_out_naming_the_scenario_or_a_file_is_refused(tiny_dir, tmp_path):
    before = sorted(p.name for p in tiny_dir.iterdir())
    for target in (tiny_dir, tiny_dir.parent):
        result = runner.invoke(app, ["plan", str(tiny_dir), "--out", str(target)])
        assert result.exit_code == 2 and "scenario folder" in _plain(result.output)
    assert sorted(p.name for p in tiny_dir.iterdir()) == before
    afile = tmp_path / "afile"
    afile.write_text("keep")
    result = runner.invoke(app, ["plan", str(tiny_dir), "--out", str(afile)])
    assert result.exit_code == 2 and "existing file" in _plain(result.output)
    assert afile.read_text() == "keep"


@pytest.mark.parametrize("command", ["check", "plan"])
def test_json_on_bad_input_prints_the_problems_as_json(tmp_path, command):
    import json

    args = [command, str(tmp_path / "missing"), "--json"]
    if command == "plan":
        args += ["--out", str(tmp_path / "run")]
    result = runner.invoke(app, args)
    assert result.exit_code == 2
    start = result.stdout.index("{")
    data = json.loads(result.stdout[start:result.stdout.rindex("}") + 1])
    assert data["ok"] is False and data["exit_code"] == 2
    assert data["problems"][0]["problem"] == "scenario folder not found"
    assert set(data["problems"][0]) == {"file", "line", "column", "problem", "fix"}


@pytest.mark.parametrize("args, text", [
    (["--horizon", "184"], "--horizon must lie between 1 and 183"),
    (["--paths", "100001"], "--paths must lie between 1 and 100,000"),
    (["--seed", "-1"], "--seed must lie between 0 and"),
    (["--max-memory", "0.05"], "more than the --max-memory limit"),
])
def test_options_keep_the_scenarios_limits_and_memory(tiny_dir, tmp_path, args, text):
    result = runner.invoke(app, ["plan", str(tiny_dir), "--out", str(tmp_path / "run"), *args])
    assert result.exit_code == 2
    assert text in _plain(result.output)
    assert not (tmp_path / "run").exists()


def test_help_texts_are_paragraphs_wrapped_by_the_terminal():
    from planner.cli import app as cli_app

    for command in cli_app.registered_commands:
        for paragraph in (command.help or "").split("\n\n"):
            assert "\n" not in paragraph, command.name


def test_long_variant_names_fold_instead_of_being_cut():
    import io

    import pandas as pd
    from rich.console import Console

    from planner.cli import _frame_table

    name = "costs.carry_rate_annual=0.0625;costs.visit_fee=+10%"
    out = io.StringIO()
    Console(file=out, width=60).print(_frame_table(pd.DataFrame({"variant": [name],
                                                                 "cost": [1.0]}), "t"))
    cells = [line.split("│")[1].strip() for line in out.getvalue().splitlines()
             if line.startswith("│")]
    assert "".join(cells) == name and "…" not in out.getvalue()


def test_check_echoes_what_it_understood_and_warns_of_crewless_commitments(tiny_dir):
    depots = (tiny_dir / "depots.csv").read_text()
    (tiny_dir / "depots.csv").write_text(depots.replace("depot,max_visits_per_day",
                                                        "depot,max_visits_per_day,Tue")
                                         .replace("Brenholm,2", "Brenholm,2,0"))
    (tiny_dir / "committed.csv").write_text("terminal_id,date,load\nBRH-001,2026-12-01,40000\n")
    result = runner.invoke(app, ["check", str(tiny_dir)], terminal_width=200)
    assert result.exit_code == 0, result.output
    text = _plain(result.output)
    for phrase in ("What the scenario says", "first planning day Mon 2026-11-30",
                   "visit fee by weekday Mon 120", "Sat 180", "paydays last_business_day",
                   "crews of Brenholm (visits per day) Mon 2 Tue 0 Wed 2",
                   "committed visits 1", "BRH-001 is committed on Tue 2026-12-01, a day depot "
                   "Brenholm has no crew"):
        assert phrase in text, phrase


@pytest.mark.parametrize("args, fragment", [
    (["--executor", "dask", "--scheduler", "tcp://10.20.30.40:8786"], "unencrypted"),
    (["--scheduler", "tls://10.20.30.40:8786"], "without --executor dask"),
    (["--executor", "cloud"], "unknown executor"),
    (["--executor", "dask", "--scheduler", "10.20.30.40"], "not a scheduler address"),
])
def test_cluster_settings_that_are_refused_before_any_work(tmp_path, args, fragment):
    """Plans and histories never go unencrypted to another machine by accident; every refusal
    is bad input (exit 2) with the fix, and nothing is written."""
    result = runner.invoke(app, ["plan", str(TINY), "--out", str(tmp_path / "run"), *args])
    assert result.exit_code == 2, result.output
    assert fragment in _plain(result.output)
    assert not (tmp_path / "run").exists()
