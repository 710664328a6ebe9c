"""The README's complete input example is what the planner reads: every key of scenario.toml
is in it, its files load as written, and with a year of invented history added in the same
format it plans (so the README cannot drift from the code)."""
from __future__ import annotations

import re
import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from planner.pipeline import PlanOptions, plan_scenario
from planner.scenario import WEEKDAYS, load_scenario
from planner.scenario.settings import _SETTINGS

README = Path(__file__).resolve().parents[1] / "README.md"
# a line that starts with a file's name, then (after its explanation) the file's block
FILE_BLOCK = re.compile(r"^`([a-z_]+\.(?:toml|csv))`.*?\n```(?:toml|csv)\n(.*?)```", re.S | re.M)


def readme_example() -> dict[str, str]:
    text = README.read_text(encoding="utf-8")
    section = text.split("### A complete example", 1)[1].split("\n## ", 1)[0]
    files = dict(FILE_BLOCK.findall(section))
    assert set(files) == {"scenario.toml", "terminals.csv", "depots.csv", "dispense.csv",
                          "committed.csv"}
    return files


def _keys(table: dict, prefix: str = "") -> set[str]:
    out = set()
    for key, value in table.items():
        name = prefix + key
        if isinstance(value, dict) and name not in ("costs.visit_fee_by_weekday",):
            out |= _keys(value, name + ".")
        else:
            out.add(name)
    return out


def write_example(folder: Path) -> Path:
    files = readme_example()
    folder.mkdir(parents=True, exist_ok=True)
    for name, body in files.items():
        (folder / name).write_text(body, encoding="utf-8")
    # a year of invented history before the README's rows, in the same format
    shown = pd.read_csv(folder / "dispense.csv", dtype=str)
    start = pd.Timestamp(tomllib.loads(files["scenario.toml"])["start_date"])
    rng = np.random.default_rng(5)
    rows = []
    for tid, mean in (("OTB-001", 8000.0), ("OTB-002", 3000.0)):
        for day in pd.date_range(start - pd.Timedelta(days=365), start - pd.Timedelta(days=1)):
            if ((shown["terminal_id"] == tid) & (shown["date"] == f"{day:%Y-%m-%d}")).any():
                continue
            amount = round(mean * rng.lognormal(0.0, 0.3) * (0.6 if day.weekday() == 6 else 1),
                           -1)
            rows.append((tid, f"{day:%Y-%m-%d}", int(amount), "ok"))
    history = pd.concat([pd.DataFrame(rows, columns=shown.columns), shown])
    history.sort_values(["terminal_id", "date"]).to_csv(folder / "dispense.csv", index=False)
    return folder


def test_every_setting_of_the_planner_is_in_the_example():
    settings = tomllib.loads(readme_example()["scenario.toml"])
    assert _keys(settings) == set(_SETTINGS)


def test_the_example_loads_as_the_readme_explains(tmp_path):
    scenario = load_scenario(write_example(tmp_path / "otterby"))
    t = scenario.terminals
    # the most after a visit: the lower of capacity and insurance limit, in whole bundles
    assert t.at["OTB-001", "limit"] == 100_000 and t.at["OTB-002", "limit"] == 80_000
    # weekday columns of depots.csv; days without one take max_visits_per_day
    crews = scenario.depots.loc["Otterby"]
    assert [int(crews[d]) for d in WEEKDAYS] == [2, 2, 2, 2, 2, 1, 0]
    # a weekday fee replaces the base fee; a what-if on visit_fee leaves it alone
    assert scenario.costs.visit_fee_on(5) == 180 and scenario.costs.visit_fee_on(0) == 120
    assert list(scenario.calendar.paydays) == ["last_business_day", 15]
    assert scenario.lock_days == 1 and len(scenario.committed) == 1


def test_a_committed_visit_after_the_lock_days_is_kept_with_a_notice(tmp_path):
    folder = write_example(tmp_path / "otterby")
    (folder / "committed.csv").write_text("terminal_id,date,load\nOTB-001,2026-11-02,90000\n"
                                          "OTB-002,2026-11-05,30000\n", encoding="utf-8")
    scenario = load_scenario(folder)
    assert len(scenario.committed) == 2
    late = [n for n in scenario.warnings if "after the 1 lock day" in n]
    assert len(late) == 1 and "line 3" in late[0] and "OTB-002" in late[0]


def test_the_example_plans(tmp_path):
    folder = write_example(tmp_path / "otterby")
    run = plan_scenario(folder, options=PlanOptions(path_count=80, origins=1, evaluate=False,
                                                    diagnose=False, report=False))
    plan = run.plan
    assert len(plan) > 0 and set(plan["terminal_id"]) <= {"OTB-001", "OTB-002"}
    first = plan[plan["date"] == pd.Timestamp("2026-11-02")]
    assert list(first["terminal_id"]) == ["OTB-001"] and first["load"].iloc[0] == 90_000
    assert (plan["load"] <= plan["terminal_id"].map({"OTB-001": 100_000,
                                                     "OTB-002": 80_000})).all()
    per_day = plan.groupby("date").size()
    assert all(n <= (1 if d.weekday() == 5 else 0 if d.weekday() == 6 else 2)
               for d, n in per_day.items())
    # OTB-002 pays its own fee (150) on every visit, Saturday included
    costs = run.costs
    own = costs[(costs["terminal_id"] == "OTB-002") & (costs["period"] == "horizon")]
    visits = int((plan["terminal_id"] == "OTB-002").sum())
    assert own["visit"].sum() == pytest.approx(150 * visits)


def test_check_echoes_the_example_as_the_readme_states_it(tmp_path):
    from planner.pipeline import check_scenario

    told = dict(check_scenario(write_example(tmp_path / "otterby")).understood().values)
    assert told["visit fee by weekday"].startswith("Mon 120 Tue 120")
    assert "Sat 180" in told["visit fee by weekday"]
    assert told["own visit fees (every day)"] == "OTB-002 150 EUR"
    assert told["crews of Otterby (visits per day)"] == "Mon 2 Tue 2 Wed 2 Thu 2 Fri 2 Sat 1 Sun 0"
    assert told["holidays"] == "DE-NW" and told["paydays"] == "last_business_day, 15"
    assert told["committed visits"] == "1"
