"""Rolling backtest: the emergency rule by hand, the realised demand of censored days, and a short
backtest of the tiny scenario (every figure from the one accounting; the bound below every
policy)."""
from __future__ import annotations


import numpy as np
import pandas as pd
import pytest

from planner.runfolder import MARKER
from planner.costs import CostRates
from planner.evaluate.replay import execute_days, realised_demand
from conftest import TINY

RATES = CostRates(carry_rate_daily=0.01, handling_per_1000=1.0, dry_day_penalty=100.0)


def run(visits, loads, start, demand, dry_before=None):
    n = len(demand)
    return execute_days(np.array([visits], bool), np.array([loads], float), np.array([start]),
                        np.array([demand], float), np.array([10000.0]), np.full((1, n), 10.0),
                        RATES, "swap", 300.0,
                        None if dry_before is None else np.array([dry_before]))


def test_emergency_visit_the_morning_after_a_dry_day_fills_to_the_limit():
    # start 2,000, 1,000 a day, nothing planned: dry on day 2, emergency visit on day 3
    ledger, visits, loads, emergency = run([0] * 5, [0] * 5, 2000.0, [1000.0] * 5)
    assert ledger.dry[0, 0].tolist() == [False, False, True, False, False]
    assert emergency[0].tolist() == [False, False, False, True, False]
    assert loads[0, 3] == 10000.0 and ledger.balance_open[0, 0, 3] == 10000.0
    assert ledger.visit[0].tolist() == [0, 0, 0, 300.0, 0]
    # dry day 100, emergency fee 300, handling on 10,000 loaded (10), carry on end balances
    carry = 0.01 * (1000 + 0 + 0 + 9000 + 8000)
    assert ledger.total()[0, 0] == pytest.approx(100 + 300 + 10 + carry)


def test_no_emergency_when_a_visit_is_planned_the_next_morning():
    ledger, visits, loads, emergency = run([0, 0, 0, 1, 0], [0, 0, 0, 1000, 0], 2000.0,
                                           [1000.0, 1000.0, 1500.0, 2000.0, 500.0])
    # dry on day 2; the planned visit of day 3 loads too little: dry again, emergency on day 4
    assert ledger.dry[0, 0].tolist() == [False, False, True, True, False]
    assert emergency[0].tolist() == [False, False, False, False, True]
    assert ledger.visit[0].tolist() == [0, 0, 0, 10.0, 300.0]


def test_dry_on_the_last_day_of_the_week_calls_an_emergency_on_the_next_first_day():
    _, _, _, emergency = run([0, 0], [0, 0], 5000.0, [100.0, 100.0], dry_before=True)
    assert emergency[0].tolist() == [True, False]
    _, _, _, emergency = run([1, 0], [5000, 0], 0.0, [100.0, 100.0], dry_before=True)
    assert not emergency.any()


def test_realised_demand_uses_the_cleaned_estimate_on_censored_days():
    from planner.cleaning import clean_history
    from planner.scenario import load_scenario

    scenario = load_scenario(TINY)
    clean = clean_history(scenario)
    daily = clean.daily
    dates = pd.date_range(daily["date"].max() - pd.Timedelta(days=27), periods=28, freq="D")
    ids = scenario.terminal_ids
    actual, counts = realised_demand(clean, ids, dates)
    assert actual.shape == (len(ids), 28) and (actual >= 0).all()
    window = daily[daily["date"].isin(dates)]
    assert sum(counts.values()) == len(ids) * 28
    for _, row in window.iterrows():
        value = actual[ids.index(row["terminal_id"]), dates.get_loc(row["date"])]
        assert value == pytest.approx(row["demand"])
        if row["censored"]:  # a dry day: demand was at least what was dispensed
            assert value >= row["observed"]


@pytest.fixture(scope="module")
def short_backtest():
    from planner.evaluate.replay import backtest_scenario
    from planner.pipeline import PlanOptions
    from planner.scenario import load_scenario

    scenario = load_scenario(TINY)
    last = scenario.dispense["date"].max()
    # the user's own routine: every Monday and Thursday of the window, 40,000 each
    days = pd.date_range(last - pd.Timedelta(days=13), last, freq="D")
    days = days[days.day_of_week.isin([0, 3])]
    past = pd.DataFrame({"terminal_id": "BRH-001", "date": days, "load": 40000.0})
    result = backtest_scenario(scenario, 2, options=PlanOptions(path_count=30, origins=2,
                                                                time_limit_s=30),
                               past_visits=past)
    return scenario, result


def test_backtest_figures_come_from_the_one_accounting(short_backtest):
    from planner.costs import CostRates, simulate

    scenario, result = short_backtest
    table = result.table.set_index("policy")
    assert list(table.index) == ["planner", "planner_naive_forecast", "fixed_weekdays",
                                 "days_of_cover", "past_visits", "perfect_foresight"]
    parts = ["carry", "visit", "handling", "dry_penalty", "shortfall_penalty"]
    policies = table.index[:-1]
    np.testing.assert_allclose(table.loc[policies, parts].sum(axis=1),
                               table.loc[policies, "total"])
    # the whole window priced at once, from the same start balances, reproduces each total:
    # the weekly balances are carried correctly
    terminals = scenario.terminals
    fee = np.array([[scenario.costs.visit_fee_on(d.day_of_week) for d in result.dates]]
                   * len(terminals))
    for policy in policies:
        visits, loads, emergency = result.schedules[policy]
        ledger = simulate(visits, loads, result.start_balance, result.demand[:, None, :],
                          terminals["limit"].to_numpy(),
                          np.where(emergency, scenario.costs.emergency_visit_fee, fee),
                          CostRates.from_settings(scenario.costs), scenario.replenishment)
        assert ledger.total().sum() == pytest.approx(table.loc[policy, "total"], rel=1e-12)
        assert int(ledger.dry.sum()) == table.loc[policy, "dry_days"]
        # planned visits only on the terminal's visit days; emergency visits on any day
        allowed = np.array([[w[d.day_of_week] for d in result.dates]
                            for w in terminals["allowed_weekdays"]])
        if policy != "past_visits":
            assert not (visits & ~emergency & ~allowed).any()


def test_no_policy_beats_the_perfect_foresight_bound(short_backtest):
    _, result = short_backtest
    table = result.table.set_index("policy")
    bound = table.loc["perfect_foresight", "total"]
    assert (table["total"] >= bound - 1e-9).all()
    per = result.terminals
    assert (per["total"] >= per["bound"] - 1e-9).all()
    assert (table.loc[table.index[:-1], "ratio_to_bound"] >= 1.0).all()
    best = table.loc[["fixed_weekdays", "days_of_cover", "past_visits"], "total"].min()
    assert table.loc["planner", "saving_vs_best_baseline"] == pytest.approx(
        1 - table.loc["planner", "total"] / best)


def test_backtest_run_folder_files(short_backtest, tmp_path):
    from planner.evaluate.replay import write_backtest
    from planner.runfolder import RunFolderWriter

    _, result = short_backtest
    with RunFolderWriter(tmp_path / "bt") as writer:
        write_backtest(writer, result)
    names = sorted(p.name for p in (tmp_path / "bt").iterdir() if p.name != MARKER)
    assert names == ["backtest.csv", "backtest.json", "backtest.png", "backtest_daily.csv",
                     "backtest_terminals.csv"]
    assert (tmp_path / "bt" / "backtest.png").read_bytes()[:4] == b"\x89PNG"
    frame = pd.read_csv(tmp_path / "bt" / "backtest.csv")
    assert "ratio_to_bound" in frame.columns and len(frame) == 6
    assert result.summary["value_of_forecast"]["measured_on"].startswith("realised demand")


def test_a_window_longer_than_the_history_is_an_input_error():
    from planner.errors import InputError
    from planner.evaluate.replay import backtest_scenario
    from planner.scenario import load_scenario

    with pytest.raises(InputError, match="at least 8 weeks of history"):
        backtest_scenario(load_scenario(TINY), 52)


def test_compact_table_keeps_one_row_per_policy(short_backtest):
    _, result = short_backtest
    compact = result.compact()
    assert len(compact) == len(result.table)
    assert "ratio_to_bound" in compact.columns and "carry" not in compact.columns


def test_headline_counts_read_as_words():
    from planner.evaluate.replay import _count

    assert _count(1, "dry day") == "1 dry day"
    assert _count(0, "dry day") == "0 dry days"
    assert _count(2.5, "dry day") == "2.5 dry days"
    assert _count(12, "week") == "12 weeks"
