"""Every visit's reason in plan.csv holds: each fact it states is checked again here against
the plan (plan.csv, orders.csv and the look-ahead visits), the problem's limits, crews and
visit days, and a plain day-by-day loop over the paths written in the tests."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from planner.optimize import solve_plan
from planner.optimize.frames import LOAD_STOPS, plan_frame
from planner.optimize.problem import WEEKDAY_NAMES, target_dry_paths
from planner.demo.synthetic import synthetic_problem
from planner.pipeline import PlanOptions, run_plan
from plain import expected_cost_plain

from conftest import TINY


def _day(date) -> str:
    return f"{WEEKDAY_NAMES[pd.Timestamp(date).weekday()]} {pd.Timestamp(date):%d %b}"


def _one_terminal(problem, t: int, visits_row: np.ndarray, loads_row: np.ndarray,
                  start: int, end: int) -> tuple[int, float]:
    """Plain loop: (paths with a dry day on days start … end − 1, expected cost) of terminal
    ``t`` under this row of visits and loads."""
    one = problem.subset([t])
    p_count, d_count = one.shape[1:]
    dry_paths = 0
    for p in range(p_count):
        balance = float(one.start_balance[0])
        dry = False
        for d in range(d_count):
            if visits_row[d]:
                if one.mode == "swap":
                    balance = float(loads_row[d])
                else:
                    balance = min(balance + float(loads_row[d]), float(one.limit[0]))
            demand = float(one.demand[0, p, d])
            if demand > balance:
                dry |= start <= d < end
                balance = 0.0
            else:
                balance -= demand
        dry_paths += dry
    cost = expected_cost_plain(one, visits_row[None, :], loads_row[None, :])
    return dry_paths, cost


def check_reasons(problem, result, plan: pd.DataFrame, orders: pd.DataFrame | None = None,
                  limit_names: dict[str, str] | None = None) -> set[str]:
    """Check every row of ``plan``; returns the load stops and over-target causes seen."""
    seen: set[str] = set()
    horizon, (t_count, p_count, d_count) = problem.horizon_days, problem.shape
    dates = list(problem.dates)
    target = problem.max_dry_probability
    allowance = (np.full(t_count, target_dry_paths(problem)) if problem.dry_allowance is None
                 else problem.dry_allowance)
    used = np.zeros_like(problem.crew_limit)
    np.add.at(used, problem.depot_of, result.visits.astype(int))
    if orders is not None:   # the crews used in the horizon are those orders.csv lists
        for k, depot in enumerate(problem.depots):
            listed = orders[orders["depot"] == depot].sort_values("date")["visits"].to_numpy()
            assert (listed == used[k, :horizon]).all()
    for _, row in plan.iterrows():
        t = problem.terminal_ids.index(row["terminal_id"])
        d = dates.index(pd.Timestamp(row["date"]))
        reason, stop = str(row["reason"]), str(row["load_stop"])
        assert stop in LOAD_STOPS
        seen.add(stop)
        later = np.flatnonzero(result.visits[t, d + 1:]) + d + 1
        e = int(later[0]) if later.size else d_count
        own_rows = plan[plan["terminal_id"] == row["terminal_id"]]["date"]
        after = sorted(pd.Timestamp(x) for x in own_rows if pd.Timestamp(x) > row["date"])
        # the next visit: a row of plan.csv in the horizon, otherwise planned after it
        if e < horizon:
            assert row["next_visit_in"] == "horizon" and after[0] == dates[e]
            assert f"next visit {_day(dates[e])}" in reason and "after the horizon" not in reason
        elif e < d_count:
            assert row["next_visit_in"] == "look_ahead" and not after
            assert f"next visit {_day(dates[e])}, after the horizon" in reason
        else:
            assert row["next_visit_in"] == "none" and not after
            assert "no further visit planned" in reason
        if e < d_count:
            assert pd.Timestamp(row["next_visit"]) == dates[e]
        else:
            assert pd.isna(row["next_visit"])
        load, bundle, limit = float(row["load"]), problem.bundle[t], problem.limit[t]
        dry, _ = _one_terminal(problem, t, result.visits[t], result.loads[t], d, e)
        assert row["dry_probability"] == pytest.approx(dry / p_count, abs=5e-5)  # 4 decimals
        # why the load stops where it does
        if stop == "committed":
            assert problem.committed[t, d] and load == problem.fixed_load[t, d]
            assert reason.startswith("committed load")
        else:
            assert not problem.committed[t, d]
        if stop == "limit":
            assert load > limit - bundle / 2
            name = limit_names[row["terminal_id"]] if limit_names else "balance limit"
            assert reason.startswith(f"loaded to the {name} ({limit:,.0f})")
        elif stop in ("target", "cost", "solver"):
            assert bundle / 2 <= load <= limit - bundle / 2
            less = result.loads[t].copy()
            less[d] -= bundle
            _, now = _one_terminal(problem, t, result.visits[t], result.loads[t], d, e)
            fewer, then = _one_terminal(problem, t, result.visits[t], less, d, e)
            if stop == "target":
                assert dry <= allowance[t] < fewer
                assert reason.startswith("least load that keeps the dry risk within the target")
            elif stop == "cost":
                assert then >= now - 1e-6
                assert f"raise the expected cost by {then - now:,.0f}" in reason
            else:
                assert then < now
                assert f"lower the expected cost by {now - then:,.0f}" in reason
        # above the target: what stood in the way, day by day
        if dry / p_count > target + 1e-12:
            assert f"dry risk {dry / p_count:.1%} is above the {target:.1%} target" in reason
            k = problem.depot_of[t]
            causes = []
            for j in range(d + 1, e):
                if not problem.allowed[t, j]:
                    closed = ("a lock day" if j < problem.lock_days else
                              "not a visit day"
                              if not problem.visit_weekdays[t, dates[j].weekday()] else
                              "no crew" if problem.crew_limit[k, j] == 0 else
                              "crews taken by committed visits")
                elif used[k, j] >= problem.crew_limit[k, j]:
                    closed = "crew busy"
                else:
                    closed = None
                causes.append((j, closed))
            free = [j for j, c in causes if c is None]
            if free:
                assert "a visit was possible on " + _day(dates[free[0]]) in reason
                seen.add("open day")
            elif causes:
                assert "no sooner visit could be made" in reason
                seen.update(c for _, c in causes)
                runs: list[list] = []      # spells of days closed for the same cause
                for j, c in causes:
                    if runs and runs[-1][2] == c:
                        runs[-1][1] = j
                    else:
                        runs.append([j, j, c])
                words = {"a lock day": "lock", "not a visit day": "visit day",
                         "crew busy": "busy", "no crew": "no crew",
                         "crews taken by committed visits": "committed visits"}
                if len(runs) <= 4:
                    told = reason.split("no sooner visit could be made: ")[1].split("; ")
                    assert len(told) == len(runs)
                    for (a, b, c), text in zip(runs, told):
                        assert text.startswith(_day(dates[a]))
                        assert a == b or f"–{_day(dates[b])}" in text
                        assert words[c] in text.replace("visit days", "visit day")
                else:
                    assert f"of the {len(causes)} days" in reason
                    for c in {c for _, c in causes}:
                        n = sum(1 for _, x in causes if x == c)
                        assert f"{n} {'day' if n == 1 else 'days'} " in reason
            if stop not in ("committed", "limit"):
                full = result.loads[t].copy()
                full[d] = limit
                full_dry, _ = _one_terminal(problem, t, result.visits[t], full, d, e)
                assert f"{full_dry / p_count:.1%}" in reason
                seen.add("room left")
    return seen


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_reasons_hold_with_tight_crews_lock_days_and_commitments(mode):
    # invented network, tight on purpose: few crews, small machines, two lock days
    problem = synthetic_problem(terminals=16, depots=2, paths=60, seed=1, crew_share=0.12,
                                lock_days=2, committed_share=0.25, max_dry_probability=0.02,
                                days_of_cash=(2.0, 5.0), mode=mode)
    result = solve_plan(problem, time_limit_s=30)
    plan = plan_frame(problem, result)
    seen = check_reasons(problem, result, plan, limit_names={t: "capacity" for t in
                                                             problem.terminal_ids})
    # the plan meets the cases the reasons are built for
    assert {"committed", "limit", "cost"} <= seen
    assert {"a lock day", "not a visit day", "crew busy"} <= seen
    assert set(plan["next_visit_in"]) == {"horizon", "look_ahead", "none"}


def test_reasons_in_the_run_folder_hold(tmp_path):
    out = tmp_path / "run"
    run = run_plan(TINY, out, options=PlanOptions(path_count=120, origins=2, evaluate=False,
                                                  diagnose=False, report=False))
    plan = pd.read_csv(out / "plan.csv", parse_dates=["date", "next_visit"])
    orders = pd.read_csv(out / "orders.csv", parse_dates=["date"])
    terminals = run.scenario.terminals
    names = {tid: "insurance limit" if r["insurance_limit"] < r["capacity"] else "capacity"
             for tid, r in terminals.iterrows()}
    assert len(plan) == len(run.plan) > 0
    seen = check_reasons(run.problem, run.result, plan, orders, names)
    assert "target" in seen or "cost" in seen
