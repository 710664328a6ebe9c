"""Baseline routines: rules computed by hand on small problems, and limits, bundles, allowed days
and committed visits kept on random problems."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from planner.costs import CostRates
from planner.errors import InputError
from planner.scenario import read_past_visits
from planner.evaluate.baselines import (crew_overruns, days_of_cover, fixed_weekdays,
                                        past_visits, trailing_weekday_mean)
from planner.optimize.problem import PlanningProblem

RATES = CostRates(carry_rate_daily=0.05 / 365, handling_per_1000=0.8, dry_day_penalty=600.0)


def problem_of(demand, *, allowed=None, start=5000.0, limit=20000.0, bundle=1000.0,
               mode="swap", fixed=None, start_date="2026-12-07", crews=5) -> PlanningProblem:
    """One or more terminals with given demand ``[T, P, D]`` (2026-12-07 is a Monday)."""
    demand = np.asarray(demand, float)
    t_count, _, d_count = demand.shape
    allowed = np.ones((t_count, d_count), bool) if allowed is None else np.asarray(allowed)
    fixed = np.full((t_count, d_count), np.nan) if fixed is None else np.asarray(fixed, float)
    return PlanningProblem(
        terminal_ids=tuple(f"ASH-{i + 1:03d}" for i in range(t_count)), depots=("Ashmere",),
        depot_of=np.zeros(t_count, int),
        dates=pd.date_range(start_date, periods=d_count, freq="D"), horizon_days=d_count,
        demand=demand, start_balance=np.full(t_count, start), limit=np.full(t_count, limit),
        bundle=np.full(t_count, bundle), allowed=allowed | ~np.isnan(fixed), fixed_load=fixed,
        visit_fee=np.full((t_count, d_count), 120.0), crew_limit=np.full((1, d_count), crews),
        rates=RATES, mode=mode, max_dry_probability=0.05)


def test_fixed_weekdays_moves_to_the_next_allowed_day_and_fills_to_the_limit():
    # two weeks from Monday; the terminal may be visited Tue, Thu, Sat only
    week = np.array([False, True, False, True, False, True, False])
    problem = problem_of(np.full((1, 1, 14), 1000.0), allowed=np.tile(week, 2)[None])
    visits, loads = fixed_weekdays(problem)
    # Mon -> Tue, Thu stays: days 1, 3, 8, 10
    assert np.flatnonzero(visits[0]).tolist() == [1, 3, 8, 10]
    np.testing.assert_allclose(loads[0][visits[0]], 20000.0)
    # Mon and Wed both land on Thu: one visit
    visits, _ = fixed_weekdays(problem, weekdays=(0, 2))
    assert np.flatnonzero(visits[0]).tolist() == [1, 3, 8, 10]
    visits, _ = fixed_weekdays(problem, weekdays=(2,))
    assert np.flatnonzero(visits[0]).tolist() == [3, 10]


def test_fixed_weekdays_topup_loads_what_fits_by_the_expected_balance():
    # top-up, start 5,000, 1,000 a day: Monday fills 15,000 (to 20,000), Thursday after three
    # days of 1,000 fills 3,000
    problem = problem_of(np.full((1, 3, 7), 1000.0), mode="topup")
    visits, loads = fixed_weekdays(problem)
    assert np.flatnonzero(visits[0]).tolist() == [0, 3]
    np.testing.assert_allclose(loads[0, [0, 3]], [15000.0, 3000.0])


def test_days_of_cover_by_hand():
    # 1,000 a day, start 5,000, daily visits allowed, trigger 3 days, cover 7 days + 25 %:
    # balances before the visit 5, 4, 3 (not below 3 days), 2 -> visit on day 3 loading
    # 8,750 rounded up to 9,000; then 9, 8, 7, 6, 5, 4, 3 -> next visit on day 10 (balance 2)
    problem = problem_of(np.full((1, 2, 14), 1000.0))
    visits, loads = days_of_cover(problem)
    assert np.flatnonzero(visits[0]).tolist() == [3, 10]
    np.testing.assert_allclose(loads[0, [3, 10]], 9000.0)
    # the estimate may be given (e.g. trailing weekday means): twice the demand, twice the load
    visits, loads = days_of_cover(problem, daily_demand=np.full((1, 14), 2000.0))
    assert loads[0][visits[0]][0] == 18000.0


def test_days_of_cover_does_not_wait_for_a_visit_day_it_cannot_reach():
    # visits only on Mon and Fri: on Friday with 3.5 days of cash the gap to Monday (3 days)
    # is covered, but on Monday with 3.5 days the next visit day is 4 days away -> visit
    allowed = np.tile([True, False, False, False, True, False, False], 2)[None]
    problem = problem_of(np.full((1, 1, 14), 1000.0), allowed=allowed, start=3500.0)
    visits, _ = days_of_cover(problem)
    assert visits[0, 0]


@pytest.mark.parametrize("mode", ["swap", "topup"])
def test_routines_keep_limits_bundles_allowed_days_and_committed_visits(mode):
    rng = np.random.default_rng(2)
    t_count, d_count = 5, 21
    demand = rng.lognormal(np.log(4000), 0.5, size=(t_count, 10, d_count))
    allowed = rng.random((t_count, d_count)) < 0.5
    fixed = np.full((t_count, d_count), np.nan)
    fixed[1, 2] = 7000.0
    problem = problem_of(demand, allowed=allowed, fixed=fixed, mode=mode, bundle=2000.0,
                         limit=30000.0, start=12000.0)
    for routine in (fixed_weekdays, days_of_cover):
        visits, loads = routine(problem)
        assert not (visits & ~problem.allowed).any()
        assert visits[1, 2] and loads[1, 2] == 7000.0
        free = visits & ~problem.committed
        assert np.allclose(loads[free] / 2000.0, np.round(loads[free] / 2000.0))
        assert (loads <= 30000.0).all() and (loads >= 0).all()
        assert (loads[~visits] == 0).all()


def test_crew_overruns_lists_depot_days_over_the_limit():
    problem = problem_of(np.full((3, 1, 4), 1000.0), crews=2)
    visits = np.array([[1, 1, 0, 0], [1, 0, 0, 1], [1, 1, 0, 0]], bool)
    over = crew_overruns(problem, visits)
    assert over[["visits", "crew_limit", "over"]].to_numpy().tolist() == [[3, 2, 1]]
    assert over["date"].iloc[0] == pd.Timestamp("2026-12-07")
    assert crew_overruns(problem, visits & False).empty


def test_past_visits_read_and_placed_on_the_problem_days(tmp_path):
    terminals = pd.DataFrame({"bundle": [1000.0, 2000.0], "limit": [20000.0, 40000.0]},
                             index=pd.Index(["ASH-001", "ASH-002"], name="terminal_id"))
    path = tmp_path / "visits.csv"
    path.write_text("terminal_id,date,load\nASH-001,2026-12-08,12000\n"
                    "ASH-002,2026-12-09,30000\nASH-001,2026-11-01,5000\n")
    frame = read_past_visits(path, terminals)
    problem = problem_of(np.full((2, 1, 7), 1000.0))
    visits, loads = past_visits(problem, frame)
    assert np.argwhere(visits).tolist() == [[0, 1], [1, 2]]
    assert loads[0, 1] == 12000.0 and loads[1, 2] == 30000.0


def test_past_visits_bad_rows_are_named(tmp_path):
    terminals = pd.DataFrame({"bundle": [1000.0], "limit": [20000.0]},
                             index=pd.Index(["ASH-001"], name="terminal_id"))
    path = tmp_path / "visits.csv"
    path.write_text("terminal_id,date,load\nASH-009,2026-12-08,1000\nASH-001,2026-13-08,1000\n"
                    "ASH-001,2026-12-09,1500\nASH-001,2026-12-10,25000\n")
    with pytest.raises(InputError) as info:
        read_past_visits(path, terminals)
    found = {(p.line, p.column): p.problem for p in info.value.problems}
    assert "is not in terminals.csv" in found[(2, "terminal_id")]
    assert "did you mean 'ASH-001'" in str(info.value)
    assert (3, "date") in found
    assert "multiple of its bundle" in found[(4, "load")]
    assert "above its limit" in found[(5, "load")]
    path.write_text("terminal_id,date,load\nASH-001,2026-12-08,1000\nASH-001,2026-12-08,2000\n")
    with pytest.raises(InputError, match="second row for 2026-12-08"):
        read_past_visits(path, terminals)
    path.write_text("terminal_id,day,load\n")
    with pytest.raises(InputError, match="required column 'date'"):
        read_past_visits(path, terminals)


def test_trailing_weekday_mean_by_hand():
    days = pd.date_range("2026-11-09", "2026-12-06", freq="D")     # four weeks, Mon … Sun
    amount = np.where(days.day_of_week == 4, 3000.0, 1000.0)       # Fridays busier
    amount[days == pd.Timestamp("2026-11-13")] = 5000.0            # one Friday higher
    daily = pd.DataFrame({"terminal_id": "ASH-001", "date": days, "demand": amount})
    out = trailing_weekday_mean(daily, ["ASH-001", "ASH-002"],
                                pd.date_range("2026-12-07", periods=7, freq="D"))
    # Fridays: (5000 + 3 · 3000) / 4 = 3500; other days 1000; no history: 0
    np.testing.assert_allclose(out[0], [1000, 1000, 1000, 1000, 3500, 1000, 1000])
    np.testing.assert_allclose(out[1], 0.0)
