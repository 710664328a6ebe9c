"""Tests of planner.cleaning: daily grid, censored dry days, outliers, gap filling, flags."""
from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from planner.demo import demo_path
from planner.cleaning import CleanHistory, _tobit, clean_history
from planner.scenario import CalendarSettings, Scenario, load_scenario

TINY = load_scenario(demo_path("tiny"))
WEEK = np.array([0.9, 0.9, 1.0, 1.1, 1.4, 1.5, 0.5])   # Mon … Sun multipliers of demand
START = pd.Timestamp("2025-09-01")                       # a Monday


def scenario_with(dispense: pd.DataFrame, terminals: tuple[str, ...] = ("BRH-001",),
                  calendar: CalendarSettings | None = None) -> Scenario:
    """The tiny scenario with its history replaced by ``dispense``."""
    return dataclasses.replace(
        TINY, dispense=dispense.sort_values(["terminal_id", "date"], ignore_index=True),
        terminals=TINY.terminals.loc[list(terminals)],
        start_date=dispense["date"].max() + pd.Timedelta(days=1),
        calendar=calendar or TINY.calendar)


def true_demand(seed: int, days: int = 364, level: float = 8000.0,
                sigma: float = 0.25) -> tuple[pd.DatetimeIndex, np.ndarray]:
    """Lognormal daily demand with a weekday profile, independent days."""
    rng = np.random.default_rng(seed)
    dates = pd.date_range(START, periods=days, freq="D")
    dow = dates.day_of_week.to_numpy()
    return dates, level * WEEK[dow] * np.exp(rng.normal(0.0, sigma, days))


def frame(dates, amount, status=None, tid: str = "BRH-001") -> pd.DataFrame:
    status = np.full(len(dates), "ok", dtype=object) if status is None else status
    return pd.DataFrame({"terminal_id": tid, "date": dates, "amount": amount,
                         "status": status})


def run_dry(demand: np.ndarray, dates: pd.DatetimeIndex, load: float) -> pd.DataFrame:
    """Swap visits every Monday and Thursday with a fixed ``load``: the machine dispenses
    ``min(demand, balance)``; a day on which demand exceeded the balance is ``dry``, with the
    dispensed amount (0 once the machine is empty until the next visit)."""
    dow = dates.day_of_week.to_numpy()
    amount = np.empty(len(demand))
    status = np.empty(len(demand), dtype=object)
    balance = 0.0
    for i, d in enumerate(demand):
        if dow[i] in (0, 3):
            balance = load
        amount[i] = min(d, balance)
        balance -= amount[i]
        status[i] = "dry" if d > amount[i] else "ok"
    return frame(dates, amount, status)


# ----------------------------------------------------------------------------- tiny scenario


def test_tiny_scenario_counts_and_columns() -> None:
    clean = clean_history(TINY)
    assert isinstance(clean, CleanHistory)
    d = clean.daily
    assert list(d.columns) == ["terminal_id", "date", "observed", "demand", "expected",
                               "censored", "flag", "changed"]
    assert d["censored"].dtype == bool and d["changed"].dtype == bool
    s = clean.summary
    assert list(s.index) == ["BRH-001", "BRH-002", "BRH-003"]
    assert (s["days"] == 84).all()
    # make_tiny.py: one missing row (BRH-001, 2026-10-20), one down day (BRH-002,
    # 2026-10-14) and one dry day (BRH-003, 2026-11-07, 1,200 dispensed)
    assert s.loc["BRH-001", "gaps"] == 1 and s.loc["BRH-002", "down"] == 1
    assert s.loc["BRH-003", "dry"] == 1
    assert s[["gaps", "down", "dry"]].to_numpy().sum() == 3
    row = d[(d.terminal_id == "BRH-003") & (d.date == "2026-11-07")].iloc[0]
    assert row.flag == "dry" and row.censored and row.observed == 1200.0
    # a Saturday of a terminal dispensing about 3,900 on Saturdays: far above the lower bound
    assert 2500 < row.demand < 6000
    gap = d[(d.terminal_id == "BRH-001") & (d.date == "2026-10-20")].iloc[0]
    assert gap.flag == "gap" and np.isnan(gap.observed) and gap.demand > 0 and gap.changed
    assert clean.terminal_ids == ("BRH-001", "BRH-002", "BRH-003")
    assert clean.series("BRH-002").index.equals(clean.dates("BRH-002"))


def test_grid_and_flag_properties() -> None:
    clean = clean_history(TINY)
    for tid in clean.terminal_ids:
        f = clean.frame(tid)
        assert (f.index.to_series().diff().dropna() == pd.Timedelta(days=1)).all()
        assert (f["demand"] >= 0).all()
        plain = f["flag"] == "ok"
        assert (f.loc[plain, "demand"] == f.loc[plain, "observed"]).all()
        assert not f.loc[plain, "changed"].any()
        dry = f["censored"]
        assert (f.loc[dry, "demand"] >= f.loc[dry, "observed"]).all()
        assert f["flag"].str.split("+").map(lambda p: set(p) <= {"ok", "gap", "down", "dry",
                                                                "outlier"}).all()
    s = clean.summary
    assert (s["changed"] == clean.daily.groupby("terminal_id")["changed"].sum()).all()
    assert np.allclose(s["mean_daily"], clean.daily.groupby("terminal_id")["demand"].mean())


def test_terminal_without_history_and_bad_fill() -> None:
    dates, demand = true_demand(1, days=70)
    clean = clean_history(scenario_with(frame(dates, demand), ("BRH-001", "BRH-002")))
    assert clean.summary.loc["BRH-002", "days"] == 0
    assert pd.isna(clean.summary.loc["BRH-002", "first"])
    assert clean.terminal_ids == ("BRH-001",)
    with pytest.raises(ValueError, match="fill"):
        clean_history(TINY, fill="spline")


# ----------------------------------------------------------------------------- censoring


@pytest.mark.parametrize("seed, load", [(3, 34000.0), (4, 30000.0)])
def test_censored_dry_days_recover_true_mean(seed: int, load: float) -> None:
    """Known demand, stock-outs induced by a fixed load: the cleaned mean is within 3 % of
    the true mean while the naive mean of what was dispensed is biased low by more."""
    dates, demand = true_demand(seed)
    dispense = run_dry(demand, dates, load)
    share_dry = (dispense["status"] == "dry").mean()
    assert 0.10 < share_dry < 0.30
    clean = clean_history(scenario_with(dispense))
    true_mean = demand.mean()
    naive_bias = dispense["amount"].mean() / true_mean - 1
    clean_bias = clean.daily["demand"].mean() / true_mean - 1
    assert naive_bias < -0.03
    assert abs(clean_bias) < 0.03
    d = clean.daily
    assert (d["censored"] == (dispense["status"] == "dry").to_numpy()).all()
    assert (d.loc[d.censored, "demand"] >= d.loc[d.censored, "observed"]).all()


def test_tobit_recovers_a_known_regression() -> None:
    # known process: z = 8 + 0.3 x1 + 0.5 x2 + N(0, 0.25²), right-censored at its 70 % quantile
    rng = np.random.default_rng(5)
    n = 4000
    X = np.column_stack([np.ones(n), rng.normal(size=n), rng.integers(0, 2, n)])
    z = X @ np.array([8.0, 0.3, 0.5]) + rng.normal(0.0, 0.25, n)
    cut = np.quantile(z, 0.7)
    censored = z > cut
    beta, s = _tobit(X, np.where(censored, cut, z), censored)
    assert beta == pytest.approx([8.0, 0.3, 0.5], abs=0.03)
    assert s == pytest.approx(0.25, abs=0.01)
    # without censored rows it is least squares with the ML variance
    beta0, s0 = _tobit(X, z, np.zeros(n, dtype=bool))
    ols, *_ = np.linalg.lstsq(X, z, rcond=None)
    assert np.allclose(beta0, ols)
    assert s0 == pytest.approx(np.sqrt(np.mean((z - X @ ols) ** 2)))


# ----------------------------------------------------------------------------- outliers


def test_injected_tenfold_errors_are_flagged_and_replaced() -> None:
    dates, demand = true_demand(7, sigma=0.2)
    amount = demand.copy()
    rng = np.random.default_rng(8)
    high = rng.choice(len(dates), 8, replace=False)
    low = rng.choice(np.setdiff1d(np.arange(len(dates)), high), 4, replace=False)
    amount[high] *= 10.0
    amount[low] /= 10.0
    clean = clean_history(scenario_with(frame(dates, amount)))
    d = clean.daily
    flagged = set(np.flatnonzero(d["flag"] == "outlier"))
    assert set(high) | set(low) <= flagged
    # Tukey fences flag about 0.7 % of clean normal data (common practice); allow 2 %
    assert len(flagged - set(high) - set(low)) <= 0.02 * len(dates)
    errors = np.r_[high, low]
    ratio = d["demand"].to_numpy()[errors] / demand[errors]
    assert np.all((ratio > 0.5) & (ratio < 2.0))
    assert d["changed"].to_numpy()[errors].all()
    assert clean.summary.loc["BRH-001", "outliers"] == len(flagged)
    # the profile is not pulled by the errors
    assert abs(d["demand"].mean() / demand.mean() - 1) < 0.03


def test_calendar_effects_and_level_drift_are_not_outliers() -> None:
    dates, demand = true_demand(9, sigma=0.15)
    cal = CalendarSettings(country="DE")
    from planner.calendar import calendar_features

    feats = calendar_features(dates, cal)
    # +80 % on paydays, -60 % on holidays, and a 60 % rise of the level over the year
    lift = np.exp(np.log(1.8) * feats["payday"] + np.log(0.4) * feats["holiday"])
    amount = demand * lift.to_numpy() * np.linspace(1.0, 1.6, len(dates))
    clean = clean_history(scenario_with(frame(dates, amount), calendar=cal))
    d = clean.daily.set_index("date")
    assert not (d.loc[feats.index[feats["payday"] == 1], "flag"] == "outlier").any()
    assert not (d.loc[feats.index[feats["holiday"] == 1], "flag"] == "outlier").any()
    assert clean.summary.loc["BRH-001", "outliers"] <= 0.02 * len(dates)
    # the profile's residual spread is the simulated one
    assert clean.summary.loc["BRH-001", "log_sd"] == pytest.approx(0.15, abs=0.02)


def test_dry_day_with_recording_error_is_dry_and_outlier() -> None:
    dates, demand = true_demand(10, days=140, sigma=0.2)
    amount, status = demand.copy(), np.full(len(dates), "ok", dtype=object)
    amount[60] *= 10.0
    status[60] = "dry"
    clean = clean_history(scenario_with(frame(dates, amount, status)))
    row = clean.daily.iloc[60]
    assert row.flag == "dry+outlier" and row.censored
    assert row.demand == pytest.approx(row.expected)
    assert clean.summary.loc["BRH-001", "dry"] == 1
    assert clean.summary.loc["BRH-001", "outliers"] >= 1


# ----------------------------------------------------------------------------- gaps


def gappy() -> tuple[pd.DataFrame, np.ndarray, np.ndarray]:
    dates, demand = true_demand(11, days=126, sigma=0.15)
    status = np.full(len(dates), "ok", dtype=object)
    down = np.array([40, 41, 89])            # out of service (Thu/Fri and a Sunday)
    status[down] = "down"
    dispense = frame(dates, np.where(status == "down", 0.0, demand), status)
    missing = np.array([19, 20, 75])         # no rows at all (Sat/Sun and a Wednesday)
    return dispense.drop(index=missing), down, missing


def test_gap_filling_weekday_profile() -> None:
    dispense, down, missing = gappy()
    d = clean_history(scenario_with(dispense), fill="weekday_profile").daily
    assert len(d) == 126
    assert (d.loc[missing, "flag"] == "gap").all() and (d.loc[down, "flag"] == "down").all()
    holes = np.r_[down, missing]
    assert d.loc[holes, "observed"].isna().all()
    assert np.allclose(d.loc[holes, "demand"], d.loc[holes, "expected"])
    assert d.loc[holes, "changed"].all()
    # the filled Saturday (day 19) follows the weekday profile: well above the Sunday after it
    assert d.at[19, "demand"] > 2.0 * d.at[20, "demand"]
    s = clean_history(scenario_with(dispense)).summary.loc["BRH-001"]
    assert (s["gaps"], s["down"], s["days"]) == (3, 3, 126)


def test_gap_filling_linear_and_none() -> None:
    dispense, down, missing = gappy()
    lin = clean_history(scenario_with(dispense), fill="linear").daily
    # two missing days between day 18 and day 21: straight line between the neighbours
    a, b = lin.at[18, "demand"], lin.at[21, "demand"]
    assert lin.at[19, "demand"] == pytest.approx(a + (b - a) / 3)
    assert lin.at[20, "demand"] == pytest.approx(a + 2 * (b - a) / 3)
    assert lin["demand"].notna().all()
    none = clean_history(scenario_with(dispense), fill="none").daily
    holes = np.r_[down, missing]
    assert none.loc[holes, "demand"].isna().all()
    assert not none.loc[holes, "changed"].any()
    assert (none.loc[holes, "flag"] != "ok").all()
    other = np.setdiff1d(np.arange(126), holes)
    assert np.allclose(none.loc[other, "demand"], lin.loc[other, "demand"])


def test_down_day_at_the_end_is_filled() -> None:
    dates, demand = true_demand(12, days=56)
    status = np.full(len(dates), "ok", dtype=object)
    status[-1] = "down"
    d = clean_history(scenario_with(frame(dates, demand, status)), fill="linear").daily
    assert d["flag"].iloc[-1] == "down"
    assert d["demand"].iloc[-1] == pytest.approx(d["demand"].iloc[-2])


def test_very_short_history_without_model() -> None:
    dates = pd.date_range(START, periods=3, freq="D")
    d = clean_history(scenario_with(frame(dates, [100.0, 0.0, 50.0],
                                          np.array(["ok", "down", "dry"], dtype=object))),
                      fill="linear").daily
    assert d["expected"].isna().all()
    assert d["demand"].tolist() == [100.0, 75.0, 50.0]
    assert d["flag"].tolist() == ["ok", "down", "dry"]


def test_modified_z_score_against_scipy():
    # Iglewicz & Hoaglin (1993): M = 0.6745 (x − median) / MAD; scipy's
    # median_abs_deviation(scale="normal") is MAD / 0.6745 (reference library)
    from scipy import stats

    from planner.cleaning import modified_z, z_limit

    rng = np.random.default_rng(5)
    x = rng.standard_t(4, 400)
    season = np.arange(400) % 7
    exact = np.ones(400, bool)
    # one season: the same as scipy's over all values
    one, behind = modified_z(x, exact, np.zeros(400, int))
    assert (behind == 400).all()
    ref = (x - np.median(x)) / stats.median_abs_deviation(x, scale="normal")
    np.testing.assert_allclose(one, ref, rtol=1e-3)      # 0.6745 is Φ⁻¹(0.75) to 4 digits
    # per weekday: each day against its own weekday's median and MAD
    per, behind = modified_z(x, exact, season)
    np.testing.assert_array_equal(behind, np.bincount(season)[season])
    for s in range(7):
        days = season == s
        own = (x[days] - np.median(x[days])) / stats.median_abs_deviation(x[days],
                                                                          scale="normal")
        np.testing.assert_allclose(per[days], own, rtol=1e-3)
    # the published threshold, raised by Bonferroni for long series (scipy's normal quantile)
    assert z_limit(30) == 3.5
    assert z_limit(730) == pytest.approx(stats.norm.ppf(1 - 0.05 / 1460))
    assert 3.9 < z_limit(730) < 4.1
    # with the scale estimated from n days: Student's t at 0.37 n − 1 degrees of freedom
    # (the MAD's efficiency at the normal, Rousseeuw & Croux 1993; scipy's t quantile)
    limits = z_limit(730, np.array([104, 730]))
    np.testing.assert_allclose(limits, stats.t.ppf(1 - 0.05 / 1460,
                                                   [0.37 * 104 - 1, 0.37 * 730 - 1]))
    assert z_limit(730) < limits[1] < limits[0] < 5.0
    assert z_limit(30, 20) > 3.5


def test_genuine_series_rarely_get_a_false_flag():
    # by construction: 120 two-year series of lognormal demand with a weekday profile and no
    # recording error; the threshold promises a false flag in at most about 5 % of them
    dates, _ = true_demand(0, days=728)
    rng = np.random.default_rng(11)
    ids = [f"BRH-{k:03d}" for k in range(120)]
    dow = dates.day_of_week.to_numpy()
    rows = [frame(dates, np.round(8000.0 * WEEK[dow] * np.exp(rng.normal(0.0, 0.3, 728))),
                  tid=tid) for tid in ids]
    terminals = TINY.terminals.iloc[[0] * len(ids)].set_axis(
        pd.Index(ids, name="terminal_id"))
    scenario = dataclasses.replace(scenario_with(pd.concat(rows)), terminals=terminals)
    daily = clean_history(scenario).daily
    flagged = daily.loc[daily["flag"] == "outlier", "terminal_id"].nunique()
    assert flagged <= 13        # 5 % of 120 is 6; 13 is its binomial 99.5 % quantile (scipy)


NETWORK = ["BRH-001", "BRH-002", "BRH-003"]


def _dry_machine_in_network(seed: int, load: float, sundays_dry: bool):
    """BRH-001 runs dry under a fixed load (visits Mon and Thu), optionally dry on every
    Sunday with 30–70 % of demand recorded (a machine in a mall closed on Sundays); its two
    twins of the same weekday profile never run dry. Known demand: the answer is known by
    construction."""
    dates, demand = true_demand(seed)
    dispense = run_dry(demand, dates, load)
    if sundays_dry:
        rng = np.random.default_rng(seed + 99)
        sunday = dates.day_of_week == 6
        dispense.loc[sunday, "amount"] = np.round(demand[sunday]
                                                  * rng.uniform(0.3, 0.7, sunday.sum()))
        dispense.loc[sunday, "status"] = "dry"
    twins = [frame(dates, np.round(true_demand(seed + 1000 * (k + 1))[1]), tid=tid)
             for k, tid in enumerate(NETWORK[1:])]
    history = pd.concat([dispense] + twins, ignore_index=True)
    daily = clean_history(scenario_with(history, terminals=NETWORK)).daily
    return dates, demand, dispense, daily[daily["terminal_id"] == "BRH-001"]


@pytest.mark.parametrize("load, sundays_dry", [(28000.0, False), (30000.0, False),
                                                (34000.0, False), (40000.0, True)])
def test_cleaned_mean_holds_when_a_weekday_is_almost_always_dry(load, sundays_dry):
    # 20 seeds per setting; at 28,000 about 98 % of Sundays are dry, in the last setting all;
    # measured 2026-12-02: 19, 20, 20 and 20 of 20 within 3 % (5, 19, 20 and 0 of 20 when
    # the weekday term was dropped for want of exact days)
    within = 0
    for seed in range(20):
        dates, demand, dispense, d = _dry_machine_in_network(seed, load, sundays_dry)
        within += abs(d["demand"].mean() / demand.mean() - 1) < 0.03
    assert within >= 19


def test_a_weekday_seen_only_dry_leans_on_the_network_profile_and_says_so():
    dates, demand, dispense, d = _dry_machine_in_network(3, 40000.0, True)
    sunday = (d["date"].dt.day_of_week == 6).to_numpy()
    assert (d.loc[sunday, "flag"] == "dry+profile").all()
    assert not d.loc[~sunday, "flag"].str.contains("profile").any()
    # the Sunday estimate is near the true Sunday mean (the network's profile is the truth's);
    # measured 1.12 (seeds 0-4: 1.04-1.12; the recorded 30-70 % still pull a little, as a
    # lower bound that grows with demand is not the independent one the model assumes)
    ratio = d.loc[sunday, "demand"].mean() / demand[sunday].mean()
    assert 0.9 < ratio < 1.15
