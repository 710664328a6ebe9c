"""Tests of the Northvale demo scenario (scenarios/make_demo.py and scenarios/northvale)."""
from __future__ import annotations

import os
import re
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from planner.demo import make_demo
from planner.scenario import load_scenario

FOLDER = Path(make_demo.__file__).with_name("northvale")


@pytest.fixture(scope="module")
def scenario():
    return load_scenario(FOLDER)


@pytest.fixture(scope="module")
def raw() -> pd.DataFrame:
    """dispense.csv as written (load_scenario keeps it too; this keeps the file's own view)."""
    return pd.read_csv(FOLDER / "dispense.csv", parse_dates=["date"])


@pytest.fixture(scope="module")
def truth() -> pd.DataFrame:
    return pd.read_csv(FOLDER / "truth" / "true_demand.csv", parse_dates=["date"])


@pytest.fixture(scope="module")
def injected() -> pd.DataFrame:
    return pd.read_csv(FOLDER / "truth" / "injected.csv", parse_dates=["date"])


def test_loads_without_errors_or_ignored_columns(scenario):
    assert scenario.currency == "EUR"
    assert scenario.replenishment == "swap"
    assert scenario.horizon_days == 14 and scenario.lock_days == 1
    assert scenario.path_count == 500
    assert scenario.max_dry_probability == 0.02
    # the only notice is the one about the missing rows we put in on purpose
    assert not [w for w in scenario.warnings if "ignored" in w]
    assert any("missing day" in w for w in scenario.warnings)


def test_network_size_and_ids(scenario):
    assert len(scenario.terminals) == 60
    assert len(scenario.depots) == 3
    assert all(re.fullmatch(r"[A-Z]{3}-\d{3}", t) for t in scenario.terminal_ids)
    assert set(scenario.terminals["depot"]) == set(scenario.depots.index)


def test_history_length_and_planning_start(scenario):
    d = scenario.dispense["date"]
    assert (d.max() - d.min()).days + 1 >= 730
    assert d.max() == scenario.start_date - pd.Timedelta(days=1)
    assert scenario.start_date.day_of_week == 0  # planning starts on a Monday
    # every terminal reports over the full span
    span = scenario.dispense.groupby("terminal_id")["date"].agg(["min", "max"])
    assert (span["min"] == d.min()).all() and (span["max"] == d.max()).all()


def test_history_holds_every_kind_of_problem(scenario, raw):
    status = raw["status"].value_counts()
    assert status["dry"] >= 50 and status["down"] >= 50
    days = (raw["date"].max() - raw["date"].min()).days + 1
    assert len(raw) < 60 * days  # missing rows
    assert (raw.loc[raw["status"] == "down", "amount"] == 0).all()
    # outlier-like rows: far above the terminal's own upper Tukey fence (3 × IQR, "far out";
    # Tukey 1977, common practice)
    ok = raw[raw["status"] == "ok"]
    q = ok.groupby("terminal_id")["amount"].quantile([0.25, 0.75]).unstack()
    fence = (q[0.75] + 3 * (q[0.75] - q[0.25])).rename("fence")
    far = ok.join(fence, on="terminal_id").query("amount > 2 * fence")
    assert 5 <= len(far) <= 30


def test_amounts_are_banknote_multiples(raw, truth):
    assert (raw["amount"] % 10 == 0).all()
    assert (truth["demand"] % 10 == 0).all() and (truth["demand"] >= 0).all()


def test_recorded_history_agrees_with_the_truth(raw, truth, injected):
    both = raw.merge(truth, on=["terminal_id", "date"], how="left", validate="one_to_one")
    assert both["demand"].notna().all()
    errors = injected[injected["kind"] == "outlier"][["terminal_id", "date"]].assign(err=True)
    both = both.merge(errors, on=["terminal_id", "date"], how="left")
    both["err"] = both["err"].fillna(False).astype(bool)
    ok = both[(both["status"] == "ok") & ~both["err"]]
    assert (ok["amount"] == ok["demand"]).all()
    dry = both[both["status"] == "dry"]
    assert (dry["amount"] < dry["demand"]).all()  # censored: a strict lower bound
    # every injected problem is where the file says it is
    assert both["err"].sum() == len(errors)
    marked = injected[injected["kind"].isin(["dry", "down"])]
    rows = raw.merge(marked, on=["terminal_id", "date"])
    assert (rows["status"] == rows["kind"]).all()
    missing = injected[injected["kind"] == "missing"]
    assert len(missing.merge(raw, on=["terminal_id", "date"])) == 0


def test_truth_covers_history_and_the_weeks_ahead(scenario, truth):
    per = truth.groupby("terminal_id")["date"].agg(["min", "max", "size"])
    assert set(per.index) == set(scenario.terminal_ids)
    assert (per["min"] == scenario.dispense["date"].min()).all()
    assert (per["max"] >= scenario.horizon_dates[-1]).all()
    assert (per["size"] == (per["max"] - per["min"]).dt.days + 1).all()


def test_scale_limits_and_balances(scenario, truth):
    t = scenario.terminals
    hist = truth[truth["date"] < scenario.start_date]
    mean = hist.groupby("terminal_id")["demand"].mean()
    assert 2_000 <= mean.min() and mean.max() <= 25_000
    assert t["capacity"].between(80_000, 240_000).all()
    assert (t["insurance_limit"] < t["capacity"]).sum() >= 3
    assert set(t["bundle"]) <= {1000, 2000, 5000}
    assert (t["balance_now"] <= t["limit"]).all() and (t["balance_now"] % 10 == 0).all()
    assert (t["visit_days"] == "Mon|Tue|Wed|Thu|Fri").mean() > 0.5
    assert (t["visit_days"] == "Mon|Wed|Fri").any()
    assert t["visit_days"].str.contains("Sat").any()
    assert not t["visit_days"].str.contains("Sun").any()


def test_costs_and_calendar(scenario):
    c = scenario.costs
    assert 0.04 <= c.carry_rate_annual <= 0.06
    assert 100 <= c.visit_fee <= 150 and c.visit_fee_on(5) > c.visit_fee
    assert c.emergency_visit_fee == pytest.approx(3 * c.visit_fee)
    assert 0.5 <= c.handling_per_1000 <= 1.0 and 500 <= c.dry_day_penalty <= 800
    assert scenario.calendar.country == "DE"
    assert {e.lift for e in scenario.calendar.events} == {1.4}
    assert any(e.date in scenario.horizon_dates for e in scenario.calendar.events)


def test_committed_visits_on_the_first_day(scenario):
    c = scenario.committed
    assert 2 <= len(c) <= 3
    assert (c["date"] == scenario.start_date).all()
    limits = scenario.terminals.loc[c["terminal_id"]]
    assert (c["load"].to_numpy() % limits["bundle"].to_numpy() == 0).all()
    assert (c["load"].to_numpy() <= limits["limit"].to_numpy()).all()


def test_crews_bind_on_busy_days_but_fit_the_week(scenario, truth):
    ahead = truth[truth["date"].isin(scenario.horizon_dates)]
    weekly = ahead.groupby("terminal_id")["demand"].sum() / (scenario.horizon_days / 7)
    check = make_demo.crew_check(scenario.terminals, weekly)
    assert (check["need"] > check["crews"]).any()
    week = check.groupby("depot")[["need", "crews"]].sum()
    assert (week["need"] < week["crews"]).all()
    # the generator's depots are the file's depots
    crews = scenario.depots.loc[check["depot"]]
    assert (crews.to_numpy()[np.arange(len(check)), [make_demo.WEEKDAYS.index(w)
            for w in check["weekday"]]] == check["crews"].to_numpy()).all()


def test_data_files_below_10_mb():
    size = sum(p.stat().st_size for p in FOLDER.rglob("*") if p.is_file())
    assert size < 10_000_000


def test_regeneration_is_byte_identical(tmp_path):
    make_demo.main(tmp_path, verbose=False)
    written = sorted(p.relative_to(tmp_path) for p in tmp_path.rglob("*") if p.is_file())
    shipped = sorted(p.relative_to(FOLDER) for p in FOLDER.rglob("*") if p.is_file())
    assert written == shipped
    for rel in written:
        assert (tmp_path / rel).read_bytes() == (FOLDER / rel).read_bytes(), rel


# ----------------------------------------------------------------------------- the family

HOLDOUT = {name: FOLDER.parent / make_demo.NETWORKS[name].folder for name in make_demo.HOLDOUT}


# Files of a hold-out network that depend on nothing but the settings and the seed; the others
# (the routine's visit days, hence balances, dry days and where recording errors fall) also
# follow ties between gap covers whose last bits differ from one processor to another, so the
# committed folders, not a regeneration, are the frozen hold-out.
HOLDOUT_EXACT = ("depots.csv", "scenario.toml", "truth/settings.txt", "truth/true_demand.csv")


@pytest.mark.parametrize("name", make_demo.HOLDOUT)
def test_holdout_networks_are_committed_small_and_regenerate_from_their_settings(name,
                                                                                 tmp_path):
    folder = HOLDOUT[name]
    size = sum(p.stat().st_size for p in folder.rglob("*") if p.is_file())
    assert size <= 1_500_000
    first, second = tmp_path / "a", tmp_path / "b"
    for out in (first, second):
        make_demo.main(out, verbose=False, settings=make_demo.NETWORKS[name])
    written = sorted(p.relative_to(first) for p in first.rglob("*") if p.is_file())
    shipped = sorted(p.relative_to(folder) for p in folder.rglob("*") if p.is_file())
    assert written == shipped
    for rel in written:   # one machine: the generator repeats itself byte for byte
        assert (first / rel).read_bytes() == (second / rel).read_bytes(), rel
    for rel in HOLDOUT_EXACT:
        assert (first / rel).read_bytes() == (folder / rel).read_bytes(), rel
    # the rest agrees as data: the same terminals and days, within a few rows
    new = pd.read_csv(first / "dispense.csv")
    old = pd.read_csv(folder / "dispense.csv")
    assert set(new["terminal_id"]) == set(old["terminal_id"])
    assert abs(len(new) - len(old)) <= 0.005 * len(old)
    assert new["date"].min() == old["date"].min() and new["date"].max() == old["date"].max()


@pytest.mark.parametrize("name", make_demo.HOLDOUT)
def test_holdout_networks_carry_their_settings(name):
    settings = make_demo.NETWORKS[name]
    folder = HOLDOUT[name]
    scenario = load_scenario(folder)
    assert len(scenario.terminals) == sum(len(t[3]) for t in settings.towns) == 30
    assert scenario.calendar.country == settings.country != "DE"
    assert list(scenario.calendar.paydays) == [p.rule for p in settings.paydays if p.declared]
    assert scenario.start_date == settings.start_date and scenario.start_date.day_of_week == 0
    raw = pd.read_csv(folder / "dispense.csv", parse_dates=["date"])
    truth = pd.read_csv(folder / "truth" / "true_demand.csv", parse_dates=["date"])
    injected = pd.read_csv(folder / "truth" / "injected.csv", parse_dates=["date"])
    terms = pd.read_csv(folder / "truth" / "terminal_truth.csv")
    # the known list of recording errors: every kind of the settings, each where it says
    errors = injected[injected["kind"] == "outlier"]
    assert len(errors) == settings.recording_errors
    for kind in ("(x10)", "(digit typed twice)", "(/10)"):
        assert errors["detail"].str.contains(kind, regex=False).any()
    both = raw.merge(truth, on=["terminal_id", "date"]).merge(
        errors[["terminal_id", "date"]].assign(err=True), on=["terminal_id", "date"], how="left")
    wrong = both["err"].fillna(False).astype(bool)
    ratio = both.loc[wrong, "amount"] / both.loc[wrong, "demand"]
    assert ((ratio > 8) | (ratio < 0.12)).all()
    ok = both[(both["status"] == "ok") & ~wrong]
    assert (ok["amount"] == ok["demand"]).all()
    # machines dry on most Sundays, with 30-70 % of the demand recorded; the others rarely
    sundays = both[both["date"].dt.day_of_week == 6]
    dry_share = sundays.groupby("terminal_id")["status"].apply(lambda s: (s == "dry").mean())
    marked = terms.loc[terms["dry_sunday"], "terminal_id"]
    assert len(marked) == round(settings.dry_sunday_share * 30)
    assert (dry_share[marked] >= 0.8).all()
    assert (dry_share.drop(marked) < 0.2).all()
    capped = sundays[sundays["terminal_id"].isin(marked) & (sundays["status"] == "dry")]
    share = capped["amount"] / capped["demand"]
    assert share.between(0.29, 0.71).mean() > 0.9
    # level shifts are in the truth and in the list
    shifts = injected[injected["kind"] == "level_shift"]
    assert len(shifts) == len(settings.level_shifts) >= 2


@pytest.mark.parametrize("rule", ["last_business_day", "first_business_day", 25, 15, 31])
def test_generator_paydays_agree_with_the_planner_calendar(rule):
    """Two independent implementations of the payday rules of the input contract (the
    generator's and planner.calendar's) give the same days, holidays of another country
    included."""
    from planner.calendar import payday_dates, public_holidays
    from planner.scenario import CalendarSettings

    dates = pd.date_range("2024-01-01", "2026-12-31", freq="D")
    hol = make_demo.public_holidays(dates, "AT")
    ours = make_demo.payday_days(dates, hol, rule)
    theirs = payday_dates(dates[0], dates[-1], [rule],
                          public_holidays(range(2023, 2028), CalendarSettings(country="AT")))
    assert list(ours) == list(theirs[(theirs >= dates[0]) & (theirs <= dates[-1])])


def test_development_network_keeps_an_undeclared_payday_in_its_truth(tmp_path):
    settings = make_demo.NETWORKS["fenmoor"]
    assert "fenmoor" in make_demo.DEVELOPMENT and not settings.folder
    with pytest.raises(ValueError, match="out_dir"):
        make_demo.main(None, verbose=False, settings=settings)
    folder = make_demo.main(tmp_path / "fenmoor", verbose=False, settings=settings)
    scenario = load_scenario(folder)
    hidden = [p.rule for p in settings.paydays if not p.declared]
    assert hidden == ["last_business_day"]
    assert list(scenario.calendar.paydays) == [10]
    assert "declared=False" in (folder / "truth" / "settings.txt").read_text()


def test_installed_package_finds_its_bundled_scenarios(tmp_path):
    """``pip install .`` puts scenarios/ inside the package (as planner.demo): from a folder
    outside the repository, the installed command checks and plans the bundled networks."""
    import subprocess
    import sys

    root = Path(__file__).resolve().parents[1]
    target = tmp_path / "site"
    subprocess.run([sys.executable, "-m", "pip", "install", "--quiet", "--no-deps",
                    "--target", str(target), str(root)], check=True, capture_output=True)
    assert (target / "planner" / "demo" / "northvale" / "dispense.csv").is_file()
    assert (target / "planner" / "demo" / "holdout" / "brannock" / "scenario.toml").is_file()
    away = tmp_path / "elsewhere"
    away.mkdir()
    env = {**os.environ, "PYTHONPATH": str(target), "OPENBLAS_NUM_THREADS": "1"}
    checked = subprocess.run([sys.executable, "-m", "planner", "check"], cwd=away, env=env,
                             capture_output=True, text=True)
    assert checked.returncode == 0, checked.stderr
    assert "Scenario is valid" in checked.stdout
    tiny = subprocess.run([sys.executable, "-c", "from planner.demo import demo_path; "
                           "print(demo_path('tiny'))"], cwd=away, env=env,
                          capture_output=True, text=True, check=True).stdout.strip()
    assert Path(tiny).is_relative_to(target)
    planned = subprocess.run([sys.executable, "-m", "planner", "plan", tiny, "--out", "run",
                              "--quiet"], cwd=away, env=env, capture_output=True, text=True)
    assert planned.returncode == 0, planned.stderr
    assert (away / "run" / "plan.csv").is_file()
