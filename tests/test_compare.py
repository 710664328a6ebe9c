"""What-if comparison: parsing and applying overrides with clear messages, and the comparison on
common demand paths (identical variant → delta exactly zero; a fee increase never lowers the
planned cost)."""
from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from planner.runfolder import MARKER
from planner.compare import (apply_overrides, parse_override, parse_variants,
                             read_variant_file, variant_from_sets)
from planner.errors import InputError
from planner.scenario import load_scenario

TINY = Path(__file__).resolve().parents[1] / "scenarios" / "tiny"


@pytest.fixture(scope="module")
def tiny():
    return load_scenario(TINY)


def test_values_set_change_relatively_or_by_an_amount():
    assert parse_override("costs.visit_fee=+15%").change == "relative"
    assert parse_override("costs.visit_fee=+15%").value == pytest.approx(0.15)
    assert parse_override("costs.visit_fee=-10%").value == pytest.approx(-0.10)
    o = parse_override("costs.carry_rate_annual = -0.01")
    assert (o.key, o.value, o.change) == ("costs.carry_rate_annual", -0.01, "add")
    o = parse_override("costs.carry_rate_annual=0.06")
    assert (o.value, o.change) == (0.06, "set")
    assert parse_override("planning.replenishment=topup").value == "topup"
    with pytest.raises(InputError, match="KEY=VALUE"):
        parse_override("costs.visit_fee")


def test_overrides_change_costs_service_depots_and_terminals(tiny):
    v = variant_from_sets("costs.visit_fee=+15%,costs.carry_rate_annual=0.06;"
                          "service.max_dry_probability=0.01")
    assert len(v.overrides) == 3
    sc = apply_overrides(tiny, v.overrides)
    assert sc.costs.visit_fee == pytest.approx(120 * 1.15)
    assert sc.costs.carry_rate_annual == 0.06
    assert sc.max_dry_probability == 0.01
    assert tiny.costs.visit_fee == 120 and tiny.max_dry_probability == 0.05  # base unchanged
    sc = apply_overrides(tiny, [parse_override("depots.Brenholm.max_visits_per_day=3"),
                                parse_override("depots.Brenholm.Sat=+1"),
                                parse_override("costs.visit_fee_by_weekday.Sat=200"),
                                parse_override("terminals.BRH-002.capacity=+25%"),
                                parse_override("terminals.BRH-003.visit_days=Mon|Thu"),
                                parse_override("terminals.*.bundle=500")])
    assert sc.depots.loc["Brenholm"].tolist() == [3, 3, 3, 3, 3, 4, 3]
    assert sc.costs.visit_fee_by_weekday == {5: 200.0}
    assert sc.terminals.at["BRH-002", "capacity"] == 100000
    # limit = min(capacity, insurance) in whole bundles, recomputed
    assert sc.terminals.at["BRH-002", "limit"] == 80000
    assert sc.terminals.at["BRH-003", "allowed_weekdays"] == (True, False, False, True, False,
                                                              False, False)
    assert (sc.terminals["bundle"] == 500).all()


def test_unknown_keys_suggest_the_closest_and_bad_values_say_why(tiny):
    def problems(*texts):
        with pytest.raises(InputError) as info:
            apply_overrides(tiny, [parse_override(t) for t in texts])
        return str(info.value)

    assert "did you mean 'costs.visit_fee'" in problems("costs.visitfee=130")
    assert "did you mean 'service.max_dry_probability'" in problems("service.max_dry_prob=0.1")
    assert "did you mean 'Brenholm'" in problems("depots.Brenhol.max_visits_per_day=3")
    assert "did you mean 'BRH-001'" in problems("terminals.BRH-01.capacity=1")
    assert "did you mean 'capacity'" in problems("terminals.BRH-001.capacty=1")
    assert "did you mean 'Sat'" in problems("costs.visit_fee_by_weekday.Sa=1")
    # settings pass scenario.toml's own checks, each problem naming its override
    assert "--set, column 'costs.carry_rate_annual': 'costs.carry_rate_annual' must lie in " \
           "[0, 1), got 5" in problems("costs.carry_rate_annual=5")
    assert "must lie in (0, 1)" in problems("service.max_dry_probability=0")
    assert "must be a finite number ≥ 0, got -120" in problems("costs.visit_fee=-200%")
    assert "must be \"swap\" or \"topup\"" in problems("planning.replenishment=refill")
    assert "must be a number" in problems("costs.handling_per_1000=lots")
    assert "'planning.lock_days' must be a whole number" in problems("planning.lock_days=1.5")
    assert "must lie between 0 and horizon_days (14)" in problems("planning.lock_days=15")
    assert "cannot be varied" in problems("paths.count=10")
    assert "cannot be varied" in problems("planning.horizon_days=21")
    assert "above the capacity" in problems("terminals.BRH-003.capacity=1000")
    # every problem of one variant at once
    text = problems("costs.visitfee=1", "costs.carry_rate_annual=2")
    assert "visitfee" in text and "carry_rate_annual" in text


def test_variant_files_use_the_scenario_keys(tmp_path, tiny):
    path = tmp_path / "new_contract.toml"
    path.write_text('name = "new courier contract"\n[costs]\nvisit_fee = 140\n'
                    'handling_per_1000 = "+25%"\n[costs.visit_fee_by_weekday]\nSat = 210\n'
                    '[depots.Brenholm]\nmax_visits_per_day = 3\n'
                    '[terminals."BRH-001"]\ninsurance_limit = 90000\n')
    v = read_variant_file(path)
    assert v.name == "new courier contract"
    sc = apply_overrides(tiny, v.overrides)
    assert sc.costs.visit_fee == 140 and sc.costs.handling_per_1000 == pytest.approx(1.0)
    assert sc.terminals.at["BRH-001", "limit"] == 90000
    bad = tmp_path / "bad.toml"
    bad.write_text("[costs]\nvisit_fee = \n")
    with pytest.raises(InputError, match="TOML syntax error"):
        read_variant_file(bad)
    bad.write_text("[calendar]\nholidays = \"FR\"\n")
    with pytest.raises(InputError, match="cannot be varied"):
        apply_overrides(tiny, read_variant_file(bad).overrides)
    with pytest.raises(InputError, match="no variant"):
        parse_variants([], [])
    names = [v.name for v in parse_variants(["costs.visit_fee=+10%"], [path])]
    assert names == ["costs.visit_fee=+10%", "new courier contract"]


@pytest.fixture(scope="module")
def common(tiny):
    """One forecast and one set of out-of-sample paths of the tiny scenario, shared by tests."""
    from planner.cleaning import clean_history
    from planner.evaluate.simulate import fresh_paths, fresh_seed
    from planner.forecast import forecast_scenario
    from planner.optimize import build_problem
    from planner.pipeline import PlanOptions

    options = PlanOptions(path_count=40, origins=2, time_limit_s=30, tail_days=7)
    scenario = replace(tiny, path_count=40)
    clean = clean_history(scenario)
    forecast = forecast_scenario(scenario, clean, horizon_days=scenario.horizon_days + 7,
                                 path_count=40, seed=scenario.seed, origins=2)
    problem = build_problem(scenario, forecast.paths, forecast.dates, tail_days=7)
    fresh = fresh_paths(scenario, clean, problem, seed=fresh_seed(scenario.seed), path_count=60,
                        origins=2)
    return scenario, options, forecast, fresh


def test_a_variant_identical_to_the_base_has_a_delta_of_exactly_zero(common):
    from planner.compare import compare_scenario

    scenario, options, forecast, fresh = common
    same = variant_from_sets(f"costs.carry_rate_annual={scenario.costs.carry_rate_annual}")
    result = compare_scenario(scenario, [same], options=options, forecast=forecast,
                              fresh=fresh)
    row = result.table.set_index("variant").loc[same.name]
    for col in ("cost_delta", "cost_delta_low", "cost_delta_high", "in_sample_delta",
                "dry_days_delta", "dry_days_delta_low", "dry_days_delta_high", "visits_delta"):
        assert row[col] == 0.0, col
    base, variant = result.plans["base"], result.plans[same.name]
    np.testing.assert_array_equal(base[0], variant[0])
    np.testing.assert_array_equal(base[1], variant[1])
    # every cost is shown for the horizon and the look-ahead apart; together the window
    table = result.table
    assert np.allclose(table["expected_cost_horizon"] + table["expected_cost_look_ahead"],
                       table["expected_cost"])
    assert (table["expected_cost_look_ahead"] > 0).all()
    per = result.terminals
    assert np.allclose(per["expected_cost_horizon"] + per["expected_cost_look_ahead"],
                       per["expected_cost"])


def test_a_fee_increase_never_lowers_the_planned_cost(common):
    from planner.compare import compare_scenario

    scenario, options, forecast, fresh = common
    variants = [variant_from_sets(t) for t in (
        "costs.visit_fee=+10%", "costs.visit_fee=+60%", "costs.handling_per_1000=+50%",
        "costs.visit_fee_by_weekday.Sat=+100", "costs.dry_day_penalty=+100%",
        "costs.visit_fee=+10%,costs.handling_per_1000=+10%")]
    result = compare_scenario(scenario, variants, options=options, forecast=forecast,
                              fresh=fresh)
    table = result.table.set_index("variant")
    base = table.loc["base", "expected_cost_in_sample"]
    for v in variants:
        assert table.loc[v.name, "expected_cost_in_sample"] >= base, v.name
    # and a larger increase never costs less than a smaller one
    assert table.loc["costs.visit_fee=+60%", "expected_cost_in_sample"] >= \
        table.loc["costs.visit_fee=+10%", "expected_cost_in_sample"]
    # the interval brackets the mean, and the out-of-sample cost is priced on common paths
    assert (table["cost_delta_low"] <= table["cost_delta"] + 1e-9).all()
    assert (table["cost_delta"] <= table["cost_delta_high"] + 1e-9).all()
    assert result.summary["out_of_sample_paths"]["count"] == 60


def test_comparison_run_folder_files(common, tmp_path):
    from planner.compare import compare_scenario, write_compare
    from planner.runfolder import RunFolderWriter

    scenario, options, forecast, fresh = common
    result = compare_scenario(scenario, [variant_from_sets("service.max_dry_probability=0.01")],
                              options=options, forecast=forecast, fresh=fresh)
    with RunFolderWriter(tmp_path / "cmp") as writer:
        write_compare(writer, result)
    names = sorted(p.name for p in (tmp_path / "cmp").iterdir() if p.name != MARKER)
    assert names == ["compare.csv", "compare.json", "compare.png", "compare_terminals.csv"]
    assert (tmp_path / "cmp" / "compare.png").read_bytes()[:4] == b"\x89PNG"
    assert result.summary["headline"][0].startswith("service.max_dry_probability=0.01")


def test_changed_terminals_and_depots_pass_the_checks_of_their_files(tiny):
    # a change of nothing gives back the scenario's own frames
    same = apply_overrides(tiny, [parse_override("terminals.*.capacity=+0%"),
                                  parse_override("depots.*.Sat=+0")])
    pd.testing.assert_frame_equal(same.terminals, tiny.terminals)
    pd.testing.assert_frame_equal(same.depots, tiny.depots)
    # the problems are terminals.csv's and depots.csv's, naming the row and the override
    with pytest.raises(InputError) as info:
        apply_overrides(tiny, [parse_override("terminals.BRH-001.visit_fee=abc"),
                               parse_override("depots.Brenholm.Sat=1.5"),
                               parse_override("terminals.BRH-002.visit_days=Mon|Thurs")])
    found = {(p.column, p.problem.split(":")[0]) for p in info.value.problems}
    assert ("Sat", "Brenholm") in found      # depots are checked first, as when loading
    text = str(info.value)
    assert "crew limit 1.5 is not a whole number" in text
    assert all(p.file == "--set" and p.line is None for p in info.value.problems)
    with pytest.raises(InputError) as info:
        apply_overrides(tiny, [parse_override("terminals.BRH-001.visit_fee=abc"),
                               parse_override("terminals.BRH-002.visit_days=Mon|Thurs")])
    text = str(info.value)
    assert "BRH-001: visit fee 'abc' does not parse as a number" in text
    assert "BRH-002: unknown weekday 'Thurs' in visit_days" in text
