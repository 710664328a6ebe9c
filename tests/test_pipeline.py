"""The main job end to end: scenario folder → run folder, through the library and the CLI."""
from __future__ import annotations

import json
import os
import signal
import stat
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

import planner
from planner.runfolder import MARKER
from planner.cli import app
from planner.pipeline import PlanOptions, run_plan
from planner.scenario import WEEKDAYS, load_scenario

REPO = Path(__file__).resolve().parents[1]
TINY = REPO / "scenarios" / "tiny"
FAST = PlanOptions(path_count=120, origins=2)
RUN_FILES = {"plan.csv", "orders.csv", "costs.csv", "summary.json", "out_of_sample.csv",
             "routines.csv", "diagnostics.csv", "report.html", "plan.xlsx", MARKER}


@pytest.fixture(scope="module")
def tiny_run(tmp_path_factory):
    out = tmp_path_factory.mktemp("runs") / "tiny"
    run = run_plan(TINY, out, options=FAST)
    return run, out


def test_run_folder_is_complete_and_owner_only(tiny_run):
    _, out = tiny_run
    assert {p.name for p in out.iterdir()} == RUN_FILES
    assert stat.S_IMODE(out.stat().st_mode) == 0o700
    assert all(stat.S_IMODE(p.stat().st_mode) == 0o600 for p in out.iterdir())


def test_plan_respects_every_hard_limit(tiny_run):
    run, out = tiny_run
    scenario = load_scenario(TINY)
    plan = pd.read_csv(out / "plan.csv", parse_dates=["date"])
    assert list(plan.columns) == ["terminal_id", "depot", "date", "load", "expected_residual",
                                  "dry_probability", "next_visit", "next_visit_in",
                                  "load_stop", "reason"]
    t = scenario.terminals.loc[plan["terminal_id"]]
    assert np.allclose(plan["load"] / t["bundle"].to_numpy(),
                       np.round(plan["load"] / t["bundle"].to_numpy()))
    assert (plan["load"].to_numpy() <= t["limit"].to_numpy() + 1e-9).all()
    assert (plan["load"] > 0).all()
    for (_, row), allowed in zip(plan.iterrows(), t["allowed_weekdays"]):
        assert allowed[row["date"].weekday()], f"{row['terminal_id']} visited on a closed day"
    per_day = plan.groupby(["depot", "date"]).size()
    for (depot, date), n in per_day.items():
        assert n <= scenario.depots.at[depot, WEEKDAYS[date.weekday()]]
    horizon = pd.date_range(scenario.start_date, periods=scenario.horizon_days)
    assert plan["date"].isin(horizon).all()


def test_summary_reports_solver_service_and_fingerprint(tiny_run):
    run, out = tiny_run
    summary = json.loads((out / "summary.json").read_text())
    assert summary["solver"]["status"] in ("optimal", "feasible", "time_limit")
    assert summary["solver"]["gap"] <= 0.005
    assert summary["input_fingerprint"] == load_scenario(TINY).fingerprint
    assert summary["paths"] == {"count": 120, "seed": 11}
    assert {"numpy", "pandas", "statsmodels", "pulp", "highspy"} <= set(summary["versions"])
    costs = pd.read_csv(out / "costs.csv")
    assert summary["costs"]["window_total"] == pytest.approx(costs["total"].sum(), abs=0.05)
    for period in ("horizon", "look_ahead"):
        assert summary["costs"][period]["total"] == pytest.approx(
            costs.loc[costs["period"] == period, "total"].sum(), abs=0.05)
    # the two periods are the window the optimizer minimised
    assert summary["costs"]["window_total"] == pytest.approx(summary["solver"]["objective"],
                                                             abs=0.05)
    routines = {r["routine"]: r for r in summary["routines"]}
    assert routines["perfect-foresight bound"]["total"] <= routines["planner"]["total"] + 1e-6
    plan_row = routines["planner"]
    assert plan_row["horizon_total"] + plan_row["look_ahead_total"] == pytest.approx(
        plan_row["total"], abs=0.05)


def test_horizon_costs_match_the_visits_plan_csv_lists(tiny_run):
    """The horizon's visit fees are the fees of plan.csv's rows, its handling is paid on their
    loads and expected residuals; whatever the look-ahead plans is costed apart."""
    run, out = tiny_run
    plan = pd.read_csv(out / "plan.csv", parse_dates=["date"])
    costs = pd.read_csv(out / "costs.csv")
    horizon = costs[costs["period"] == "horizon"]
    problem = run.problem
    index = {t: i for i, t in enumerate(problem.terminal_ids)}
    days = {d: j for j, d in enumerate(problem.dates)}
    fees = sum(problem.visit_fee[index[r.terminal_id], days[r.date]]
               for r in plan.itertuples())
    assert horizon["visit"].sum() == pytest.approx(fees, abs=0.05)
    rate = run.scenario.costs.handling_per_1000 / 1000.0
    moved = plan["load"].sum() + plan["expected_residual"].sum()
    assert horizon["handling"].sum() == pytest.approx(rate * moved, abs=0.05 * len(plan) + 0.05)
    # the look-ahead has visits of its own (the optimizer plans them) that plan.csv omits
    look = costs[costs["period"] == "look_ahead"]
    later = run.result.visits[:, problem.horizon_days:]
    assert look["visit"].sum() == pytest.approx(
        float((problem.visit_fee[:, problem.horizon_days:] * later).sum()), abs=0.05)


def test_same_inputs_and_seed_give_byte_identical_plan(tiny_run, tmp_path):
    _, out = tiny_run
    again = tmp_path / "again"
    run_plan(TINY, again, options=PlanOptions(path_count=120, origins=2, evaluate=False,
                                              report=False))
    assert (again / "plan.csv").read_bytes() == (out / "plan.csv").read_bytes()
    assert (again / "orders.csv").read_bytes() == (out / "orders.csv").read_bytes()


def test_python_api_returns_frames_and_paths(tiny_run):
    run = planner.plan_scenario(TINY, path_count=50, origins=2, evaluate=False)
    assert isinstance(run.plan, pd.DataFrame) and isinstance(run.orders, pd.DataFrame)
    assert isinstance(run.costs, pd.DataFrame) and len(run.costs) == 3 * 2   # two periods
    # the horizon and the look-ahead past it (PlanOptions.tail_for: six weeks in all)
    assert run.paths.shape == (3, 50, 14 + 28) and (run.paths >= 0).all()
    assert run.problem.horizon_days == 14 and run.summary["tail_days"] == 28
    assert isinstance(run.forecast.quantiles, pd.DataFrame)


def test_cli_plan_writes_run_folder(tmp_path):
    out = tmp_path / "cli"
    result = CliRunner().invoke(app, ["plan", str(TINY), "--out", str(out), "--paths", "60",
                                      "--quiet"])
    assert result.exit_code == 0, result.output
    assert (out / "plan.csv").is_file() and (out / "report.html").is_file()


def test_cli_plan_json(tmp_path):
    result = CliRunner().invoke(app, ["plan", str(TINY), "--out", str(tmp_path / "j"),
                                      "--paths", "60", "--json"])
    assert result.exit_code == 0, result.output
    assert json.loads(result.output)["scenario"].startswith("Kestrel Valley Bank")


# The plan command with the run folder's commit held until the test lets go: every file is
# staged, nothing is published yet (a handshake on the pipes instead of polling with sleeps).
HELD_PLAN = """
import sys
from planner import runfolder
from planner.cli import app

commit = runfolder.RunFolderWriter.commit


def held(self):
    print("staged", flush=True)
    sys.stdin.readline()
    return commit(self)


runfolder.RunFolderWriter.commit = held
app(sys.argv[1:])
"""


def test_kill_during_plan_leaves_no_half_written_run_folder(tmp_path):
    out = tmp_path / "killed"
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    proc = subprocess.Popen([sys.executable, "-c", HELD_PLAN, "plan", str(TINY), "--out",
                             str(out), "--paths", "200", "--quiet"], cwd=tmp_path, env=env,
                            stdin=subprocess.PIPE, stdout=subprocess.PIPE, text=True)
    try:
        assert proc.stdout.readline().strip() == "staged"
        assert list(tmp_path.glob(".killed.partial-*/plan.csv"))
    finally:
        os.kill(proc.pid, signal.SIGKILL)
        proc.wait()
    assert not out.exists()


def test_report_and_spreadsheet_read_the_orders_the_run_wrote(tiny_run):
    import openpyxl

    run, out = tiny_run
    orders = pd.read_csv(out / "orders.csv")
    assert list(orders.columns) == ["depot", "date", "visits", "load_total", "expected_returns"]
    assert orders["expected_returns"].sum() > 0
    book = openpyxl.load_workbook(out / "plan.xlsx")
    values = [c.value for ws in book.worksheets for row in ws.iter_rows() for c in row
              if isinstance(c.value, (int, float))]
    for amount in orders.loc[orders["expected_returns"] > 0, "expected_returns"]:
        assert any(abs(v - amount) < 0.01 for v in values), amount


def test_json_output_of_a_real_process_is_pure_json(tmp_path):
    """Solver libraries print from C code, which CliRunner cannot see: run a real process."""
    env = {**os.environ, "PYTHONPATH": str(REPO)}
    done = subprocess.run([sys.executable, "-m", "planner", "plan", str(TINY), "--out",
                           str(tmp_path / "j"), "--paths", "60", "--json"], cwd=tmp_path,
                          env=env, capture_output=True, text=True, timeout=300)
    assert done.returncode == 0, done.stderr
    assert json.loads(done.stdout)["solver"]["status"] == "optimal"


def test_plan_with_replay_and_what_if_adds_their_sections(tmp_path):
    out = tmp_path / "full"
    result = CliRunner().invoke(app, ["plan", str(TINY), "--out", str(out), "--paths", "60",
                                      "--backtest-weeks", "2", "--set", "costs.visit_fee=+15%",
                                      "--quiet"])
    assert result.exit_code == 0, result.output
    names = {p.name for p in out.iterdir()}
    assert {"backtest.csv", "backtest.png", "compare.csv", "compare.png"} <= names
    html = (out / "report.html").read_text()
    assert "Backtest: replaying past weeks" in html and "What-if variants" in html
    summary = json.loads((out / "summary.json").read_text())
    assert "backtest" in summary and "what_if" in summary


def test_progress_reports_every_stage_up_to_its_total():
    seen: dict[str, tuple[int, int]] = {}
    planner.plan_scenario(TINY, path_count=40, origins=2, diagnose=False,
                          progress=lambda stage, done, total: seen.__setitem__(stage,
                                                                               (done, total)))
    assert seen["forecast"] == (3, 3) and seen["optimize"] == (3, 3)
    assert seen["clean"] == (1, 1) and seen["evaluate"] == (1, 1)


def test_the_plan_looks_six_weeks_ahead_and_at_least_a_week_past_the_horizon():
    # README, "How a plan is made", step 5: plan a longer horizon and keep the first part
    # (planner.options.LOOKAHEAD_DAYS)
    assert [PlanOptions().tail_for(h) for h in (7, 14, 21, 35, 40)] == [35, 28, 21, 7, 7]
    assert PlanOptions(tail_days=3).tail_for(14) == 3
