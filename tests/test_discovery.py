"""Calendar effects the scenario does not declare (planner.discovery), on invented histories
whose true calendar is known by construction, and on the hold-out networks."""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from planner.calendar import payday_dates, public_holidays
from planner.cleaning import clean_history
from planner.demo import demo_path
from planner.discovery import undeclared_effects
from planner.pipeline import check_scenario
from test_cleaning import frame, scenario_with, true_demand

IDS = ["BRH-001", "BRH-002", "BRH-003"]


def history(lift: float, day: int | str = 15, seed: int = 0) -> pd.DataFrame:
    """Three machines, a year of independent lognormal days with a weekday profile; demand
    ``× (1 + lift)`` on the paydays of rule ``day`` (none when ``lift`` is 0)."""
    parts = []
    for k, tid in enumerate(IDS):
        dates, demand = true_demand(seed + 10 * k)
        if lift:
            scenario = scenario_with(frame(dates, demand, tid=tid), terminals=[tid])
            holidays = public_holidays(range(dates[0].year, dates[-1].year + 1),
                                       scenario.calendar)
            pay = payday_dates(dates[0], dates[-1], [day], holidays)
            demand = np.where(dates.isin(pay), demand * (1 + lift), demand)
        parts.append(frame(dates, np.round(demand), tid=tid))
    return pd.concat(parts, ignore_index=True)


def test_an_undeclared_payday_is_found_and_named():
    scenario = scenario_with(history(0.25), terminals=IDS)
    assert 15 not in scenario.calendar.paydays
    found = undeclared_effects(scenario, clean_history(scenario))
    assert list(found["rule"]) == [15]
    row = found.iloc[0]
    assert 0.15 < row["lift"] < 0.35                     # +25 % by construction
    assert row["months_shown"] >= 0.7 * row["months"]
    assert row["add"] == "add 15 to calendar.paydays in scenario.toml"


def test_history_without_an_undeclared_effect_gives_nothing():
    for seed in range(3):
        scenario = scenario_with(history(0.0, seed=seed), terminals=IDS)
        assert undeclared_effects(scenario, clean_history(scenario)).empty


def test_a_declared_payday_is_not_reported():
    base = scenario_with(history(0.25, day=10), terminals=IDS)
    declared = replace(base, calendar=replace(base.calendar,
                                              paydays=("last_business_day", 10)))
    assert undeclared_effects(declared, clean_history(declared)).empty
    found = undeclared_effects(base, clean_history(base))
    assert list(found["rule"]) == [10]


@pytest.mark.parametrize("name, drop, expect", [("holdout/brannock", 15, 15),
                                                ("holdout/saltreach", 25, 25)])
def test_hold_out_networks_declared_and_with_a_payday_left_out(name, drop, expect):
    scenario = check_scenario(demo_path(name)).scenario
    assert undeclared_effects(scenario, clean_history(scenario)).empty   # all declared
    left = tuple(r for r in scenario.calendar.paydays if r != drop)
    missing = replace(scenario, calendar=replace(scenario.calendar, paydays=left))
    found = undeclared_effects(missing, clean_history(missing))
    assert list(found["rule"]) == [expect]
