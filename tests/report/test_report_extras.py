"""Direct tests of what the report reads and draws beside the plan: the readers of
:mod:`planner.report.extras` (evaluation, diagnostics, backtest, comparison, in every accepted
shape) and the replay and what-if charts of :mod:`planner.report.cost_charts` (the bars drawn
are the table's figures). All data here is invented."""
from __future__ import annotations

from dataclasses import dataclass, field

import matplotlib
import matplotlib.figure
import numpy as np
import pandas as pd
import pytest

from planner.report import cost_charts
from planner.report.extras import (as_backtest, as_comparison, as_diagnostics,
                                   as_evaluation)

matplotlib.use("Agg")


def test_evaluation_from_a_mapping_infers_plan_baseline_and_bound():
    view = as_evaluation({"plan": 900.0, "fixed weekdays Mon+Thu": 1300.0,
                          "days of cover": 1100.0, "perfect-foresight bound": 700.0})
    assert list(view.table["kind"]) == ["plan", "baseline", "baseline", "bound"]
    assert view.plan()["total"] == 900.0
    best = view.best_baseline()
    assert best["name"] == "days of cover" and best["total"] == 1100.0


def test_evaluation_from_a_frame_keeps_parts_and_labels():
    frame = pd.DataFrame({"routine": ["plan", "fixed_weekdays", "bound"],
                          "label": ["the plan", "fixed weekdays", None],
                          "kind": ["plan", "baseline", "bound"],
                          "expected_cost": [10.0, 14.0, 8.0], "carry": [4.0, 6.0, 3.0],
                          "dry_probability": [0.01, 0.05, 0.0]})
    view = as_evaluation(frame)
    assert list(view.table["name"]) == ["the plan", "fixed weekdays", "bound"]
    assert view.table["carry"].tolist() == [4.0, 6.0, 3.0]
    # rows without a finite total are left out; nothing usable gives None
    assert len(as_evaluation(frame.assign(expected_cost=[10.0, np.nan, 8.0])).table) == 2
    assert as_evaluation(pd.DataFrame({"x": [1]})) is None and as_evaluation(None) is None


def test_diagnostics_table_marks_p_values_below_five_percent():
    tidy = pd.DataFrame({"terminal_id": ["A", "A", "B", "B"],
                         "test": ["ADF", "Ljung-Box", "ADF", "Ljung-Box"],
                         "p_value": [0.01, 0.30, 0.20, np.nan],
                         "verdict": ["stationary", "white", "unit root", "not run"]})
    view = as_diagnostics(tidy)
    table = view.tests.set_index("terminal_id")
    assert table.loc["A", "ADF"] == "p 0.010 *" and table.loc["A", "Ljung-Box"] == "p 0.300"
    assert table.loc["B", "ADF"] == "p 0.200" and table.loc["B", "Ljung-Box"] == "not run"


@dataclass
class _Replay:
    """The shape of planner.evaluate.replay.BacktestResult that the report reads."""

    table: pd.DataFrame
    daily: pd.DataFrame
    terminals: pd.DataFrame
    summary: dict = field(default_factory=dict)


def _replay() -> _Replay:
    days = pd.date_range("2026-10-05", periods=14)
    policies = ["planner", "days_of_cover", "perfect_foresight"]
    daily = pd.DataFrame([(p, d, c) for p, step in zip(policies, (10.0, 16.0, 7.0))
                          for d, c in zip(days, step + np.arange(14) % 3)],
                         columns=["policy", "date", "cost"])
    total = daily.groupby("policy", sort=False)["cost"].sum()
    table = pd.DataFrame({
        "policy": policies, "label": ["planner", "days of cover", "perfect-foresight bound"],
        "total": total.to_numpy(), "carry": 0.3 * total.to_numpy(),
        "visit": 0.5 * total.to_numpy(), "emergency_fees": [0.0, 20.0, 0.0],
        "handling": 0.1 * total.to_numpy(), "dry_penalty": 0.1 * total.to_numpy(),
        "shortfall_penalty": 0.0})
    terminals = pd.DataFrame({"policy": policies * 2, "terminal_id": ["T1"] * 3 + ["T2"] * 3,
                              "total": np.r_[total.to_numpy() * 0.4, total.to_numpy() * 0.6]})
    return _Replay(table, daily, terminals, {"headline": ["planner beats days of cover"],
                                             "currency": "EUR"})


def test_backtest_view_shows_cumulative_cost_per_policy():
    result = _replay()
    view = as_backtest(result)
    x, series, _ = view.series
    assert len(x) == 14
    for policy, label in zip(result.table["policy"], result.table["label"]):
        expected = result.daily.loc[result.daily["policy"] == policy, "cost"].cumsum()
        np.testing.assert_allclose(series[label], expected.to_numpy())
    titles = [t for t, _ in view.tables]
    assert titles == ["Policies over the window", "Cost per terminal and policy"]
    per_terminal = view.tables[1][1].set_index("terminal_id")
    assert per_terminal.loc["T2", "planner"] == pytest.approx(0.6 * result.table["total"][0])
    assert view.note == "planner beats days of cover"


def test_comparison_view_from_a_plain_frame_finds_the_base():
    frame = pd.DataFrame({"variant": ["fee +20 %", "base", "target 1 %"],
                          "total": [1200.0, 1000.0, 1050.0]})
    view = as_comparison({"what-if": frame})
    names, totals, base = view.totals
    assert names == ["fee +20 %", "base", "target 1 %"] and base == "base"
    assert totals == [1200.0, 1000.0, 1050.0]


@pytest.fixture
def drawn(monkeypatch):
    """The figures the charts save, kept for inspection."""
    figures = []
    original = matplotlib.figure.Figure.savefig

    def keep(self, *args, **kwargs):
        figures.append(self)
        return original(self, *args, **kwargs)

    monkeypatch.setattr(matplotlib.figure.Figure, "savefig", keep)
    return figures


def test_backtest_chart_bars_are_the_policies_cost_parts(tmp_path, drawn):
    result = _replay()
    path = tmp_path / "replay.png"
    cost_charts.backtest_chart(result, path)
    assert path.stat().st_size > 10_000
    left = drawn[0].axes[0]
    rows = result.table[result.table["policy"] != "perfect_foresight"].iloc[::-1]
    ends = {}
    for bar in left.patches:      # stacked: the right edge of the last part is the total
        y = round(bar.get_y() + bar.get_height() / 2)
        ends[y] = max(ends.get(y, 0.0), bar.get_x() + bar.get_width())
    assert [ends[i] for i in range(len(rows))] == pytest.approx(rows["total"].tolist())
    bound = result.table.loc[result.table["policy"] == "perfect_foresight", "total"].iloc[0]
    assert left.lines[0].get_xdata()[0] == pytest.approx(bound)


@dataclass
class _WhatIf:
    table: pd.DataFrame
    base_name: str = "base"
    currency: str = "EUR"


def test_compare_chart_bars_are_the_cost_differences(tmp_path, drawn):
    table = pd.DataFrame({"variant": ["base", "fee +20 %", "target 1 %"],
                          "cost_delta": [0.0, 180.0, -40.0],
                          "cost_delta_low": [0.0, 150.0, -70.0],
                          "cost_delta_high": [0.0, 210.0, -10.0],
                          "dry_days_delta": [0.0, 0.1, -0.3],
                          "dry_days_delta_low": [0.0, -0.1, -0.5],
                          "dry_days_delta_high": [0.0, 0.3, -0.1]})
    path = tmp_path / "compare.png"
    cost_charts.compare_chart(_WhatIf(table), path)
    assert path.stat().st_size > 10_000
    cost_axis, dry_axis = drawn[0].axes
    assert [b.get_width() for b in cost_axis.patches] == [-40.0, 180.0]   # base left out
    assert [b.get_width() for b in dry_axis.patches] == pytest.approx([-0.3, 0.1])
    labels = [t.get_text() for t in cost_axis.get_yticklabels()]
    assert labels == ["target 1 %", "fee +20 %"]
