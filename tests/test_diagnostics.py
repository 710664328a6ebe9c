"""Tests of planner.diagnostics against published tables, reference libraries and simulation."""
from __future__ import annotations

import os
import stat

import numpy as np
import pandas as pd
import pytest
from scipy import stats

from planner.demo import demo_path
from planner.cleaning import clean_history
from planner.diagnostics import (
    CONFLICTING,
    INCONCLUSIVE,
    STATIONARY,
    TOO_SHORT,
    TREND_STATIONARY,
    UNIT_ROOT,
    Diagnostics,
    correlogram,
    describe,
    diagnose_scenario,
    diagnose_series,
    durbin_watson_critical,
    durbin_watson_eigenvalues,
    durbin_watson_pvalue,
    period_name,
    periodogram,
    residual_tests,
    stationarity_tests,
    stationarity_verdict,
)
from planner.scenario import load_scenario


def ar1(n: int, phi: float, seed: int) -> np.ndarray:
    rng = np.random.default_rng(seed)
    e = rng.normal(size=n + 100)
    x = np.zeros_like(e)
    for t in range(1, len(e)):
        x[t] = phi * x[t - 1] + e[t]
    return x[100:]


def weekly_series(n: int = 364, seed: int = 3) -> np.ndarray:
    rng = np.random.default_rng(seed)
    week = np.array([0.9, 0.9, 1.0, 1.1, 1.4, 1.5, 0.5])
    return 8000 * week[np.arange(n) % 7] * np.exp(rng.normal(0, 0.15, n))


# ----------------------------------------------------------------------------- describe


def test_describe_counts_and_moments() -> None:
    d = describe(np.array([0.0, 1.0, 2.0, 3.0, 4.0, np.nan]))
    assert d["n"] == 5 and d["missing"] == 1 and d["zeros"] == 1
    assert d["mean"] == 2.0 and d["median"] == 2.0 and d["q25"] == 1.0 and d["q75"] == 3.0
    assert d["sd"] == pytest.approx(np.sqrt(2.5))
    assert d["skewness"] == pytest.approx(0.0)
    # excess kurtosis of 0..4 (population moments): m4/m2² - 3 = 6.8/4 - 3
    assert d["excess_kurtosis"] == pytest.approx(6.8 / 4 - 3)


# ----------------------------------------------------------------------------- ADF and KPSS


def test_adf_critical_values_large_sample_mackinnon_2010() -> None:
    from statsmodels.tsa.adfvalues import mackinnoncrit

    # MacKinnon, J. (2010) "Critical values for cointegration tests", QED WP 1227, Table 1
    # (N = 1, T = infinity): constant; constant + trend (1 / 5 / 10 %)
    constant = [-3.43035, -2.86154, -2.56677]
    trend = [-3.95877, -3.41049, -3.12705]
    assert mackinnoncrit(1, "c", np.inf) == pytest.approx(constant, abs=1e-5)
    assert mackinnoncrit(1, "ct", np.inf) == pytest.approx(trend, abs=1e-5)
    # the values our table reports for a long series: MacKinnon's response surface at
    # T = 1999 lies within 0.005 of the limit (its 1/T terms are at most about 9/T)
    table = stationarity_tests(np.random.default_rng(1).normal(size=2000))
    got_c = table.loc["ADF (constant)", ["crit_1", "crit_5", "crit_10"]].to_numpy(float)
    got_ct = table.loc["ADF (constant + trend)", ["crit_1", "crit_5", "crit_10"]]
    assert got_c == pytest.approx(constant, abs=0.005)
    assert got_ct.to_numpy(float) == pytest.approx(trend, abs=0.005)


def test_adf_critical_values_t100_fuller_1976() -> None:
    from statsmodels.tsa.adfvalues import mackinnoncrit

    # Fuller, W. (1976) Introduction to Statistical Time Series, Table 8.5.2, T = 100
    # (values to two decimals, hence the tolerance 0.015)
    constant = [-3.51, -2.89, -2.58]
    trend = [-4.04, -3.45, -3.15]
    assert mackinnoncrit(1, "c", 100) == pytest.approx(constant, abs=0.015)
    assert mackinnoncrit(1, "ct", 100) == pytest.approx(trend, abs=0.015)
    # adfuller counts the observations in its regression: 101 values, lag 0 -> T = 100
    table = stationarity_tests(np.random.default_rng(0).normal(size=101))
    assert table.loc["ADF (constant)", "nobs"] == 100
    assert table.loc["ADF (constant)", ["crit_1", "crit_5", "crit_10"]].to_numpy(float) \
        == pytest.approx(constant, abs=0.015)
    assert table.loc["ADF (constant + trend)", "nobs"] == 100
    assert table.loc["ADF (constant + trend)", ["crit_1", "crit_5", "crit_10"]] \
        .to_numpy(float) == pytest.approx(trend, abs=0.015)


def test_kpss_critical_values_kwiatkowski_1992() -> None:
    # Kwiatkowski, Phillips, Schmidt & Shin (1992), J. Econometrics 54, Table 1 (recalled):
    # level 0.739 / 0.463 / 0.347 and trend 0.216 / 0.146 / 0.119 at 1 / 5 / 10 %
    table = stationarity_tests(np.random.default_rng(2).normal(size=300))
    cols = ["crit_1", "crit_5", "crit_10"]
    assert table.loc["KPSS (level)", cols].to_numpy(float) == pytest.approx([0.739, 0.463,
                                                                             0.347])
    assert table.loc["KPSS (trend)", cols].to_numpy(float) == pytest.approx([0.216, 0.146,
                                                                             0.119])


@pytest.mark.parametrize("make, verdict", [
    (lambda rng: rng.normal(size=365), STATIONARY),
    (lambda rng: np.cumsum(rng.normal(size=365)), UNIT_ROOT),
    (lambda rng: 0.05 * np.arange(365) + rng.normal(size=365), TREND_STATIONARY),
])
def test_verdict_on_known_processes(make, verdict: str) -> None:
    assert diagnose_series(make(np.random.default_rng(1))).verdict == verdict


@pytest.mark.parametrize("adf_c, adf_ct, kpss_c, kpss_ct, verdict", [
    (True, True, False, False, STATIONARY),
    (False, True, True, False, TREND_STATIONARY),
    (False, False, True, True, UNIT_ROOT),
    (True, True, True, True, CONFLICTING),
    (False, False, False, False, INCONCLUSIVE),
])
def test_verdict_logic(adf_c, adf_ct, kpss_c, kpss_ct, verdict: str) -> None:
    table = pd.DataFrame({"reject": [adf_c, adf_ct, kpss_c, kpss_ct], "reading": "x"},
                         index=["ADF (constant)", "ADF (constant + trend)", "KPSS (level)",
                                "KPSS (trend)"])
    assert stationarity_verdict(table) == verdict


def test_short_or_flat_series() -> None:
    d = diagnose_series(np.arange(10.0), np.arange(10.0))
    assert d.verdict == TOO_SHORT
    assert (d.residual_tests["verdict"] == TOO_SHORT).all()
    assert diagnose_series(np.full(60, 5.0)).verdict == TOO_SHORT


# ----------------------------------------------------------------------------- ACF, PACF


def test_acf_pacf_of_ar1() -> None:
    phi, n = 0.6, 3000
    c = correlogram(ar1(n, phi, seed=4))
    assert list(c.index) == list(range(1, 29))
    band = 1.96 / np.sqrt(n)
    assert np.allclose(c["band"], band, rtol=1e-3)
    # AR(1): rho_k = phi^k; PACF cuts off after lag 1 (Box & Jenkins; common practice)
    assert c.at[1, "acf"] == pytest.approx(phi, abs=0.04)
    assert c.at[2, "acf"] == pytest.approx(phi ** 2, abs=0.05)
    assert c.at[1, "pacf"] == pytest.approx(phi, abs=0.04)
    assert (c.loc[2:, "pacf"].abs() < 2 * band).mean() > 0.9
    assert (c["acf_band_bartlett"] >= c["band"] - 1e-12).all()


def test_correlogram_of_white_noise_mostly_inside_band() -> None:
    c = correlogram(np.random.default_rng(5).normal(size=2000))
    inside = (c["acf"].abs() < c["band"]).mean()
    assert inside >= 0.85      # about 95 % expected
    assert len(correlogram(np.random.default_rng(5).normal(size=20))) == 9   # n // 2 - 1


# ----------------------------------------------------------------------------- periodogram


def test_periodogram_names_weekly_periods() -> None:
    table, peaks = periodogram(weekly_series())
    assert peaks.at[0, "period_days"] == pytest.approx(7.0)
    assert peaks.at[0, "name"] == "7.00 days (weekly)"
    assert np.any(np.isclose(peaks["period_days"], 3.5))
    assert table["frequency"].between(0, 0.5).all()
    assert np.allclose(table["period_days"] * table["frequency"], 1.0)


def test_period_names() -> None:
    assert period_name(7.1) == "7.10 days (weekly)"
    assert period_name(30.0) == "30.00 days (monthly)"
    assert period_name(5.0) == "5.00 days"


# ----------------------------------------------------------------------------- Ljung-Box


def test_ljung_box_matches_statsmodels_and_the_formula() -> None:
    from statsmodels.stats.diagnostic import acorr_ljungbox

    r = ar1(365, 0.2, seed=6)
    table = residual_tests(r)
    ref = acorr_ljungbox(r, lags=[7, 14], return_df=True)
    for h in (7, 14):
        row = table.loc[f"Ljung-Box lag {h}"]
        assert row.statistic == pytest.approx(ref.at[h, "lb_stat"], rel=1e-10)
        assert row.p_value == pytest.approx(ref.at[h, "lb_pvalue"], rel=1e-10)
        # Ljung & Box (1978), Biometrika 65: Q = n (n + 2) sum_k r_k² / (n - k), chi²(h)
        n, x = len(r), r - r.mean()
        rho = np.array([x[k:] @ x[:-k] for k in range(1, h + 1)]) / (x @ x)
        q = n * (n + 2) * np.sum(rho ** 2 / (n - np.arange(1, h + 1)))
        assert row.statistic == pytest.approx(q, rel=1e-10)
        assert row.p_value == pytest.approx(stats.chi2.sf(q, h), rel=1e-8)


def test_ljung_box_size_and_power() -> None:
    # seeded simulation: size near 5 % on white noise, high power on an AR(1) with phi = 0.3
    rng = np.random.default_rng(7)
    white = np.mean([residual_tests(rng.normal(size=365)).at["Ljung-Box lag 7", "p_value"]
                     < 0.05 for _ in range(150)])
    power = np.mean([residual_tests(ar1(365, 0.3, seed=100 + i)).at["Ljung-Box lag 7",
                                                                      "p_value"] < 0.05
                     for i in range(40)])
    assert 0.01 <= white <= 0.10
    assert power >= 0.95


# ----------------------------------------------------------------------------- Durbin-Watson


SAVIN_WHITE_5PCT = [
    # Savin, N.E. & White, K.J. (1977) Econometrica 45, 1989-1996: 5 % bounds (dL, dU)
    # for n observations and k' regressors besides the constant
    (20, 1, 1.201, 1.411),
    (20, 2, 1.100, 1.537),
    (50, 1, 1.503, 1.585),
    (100, 1, 1.654, 1.694),
]


@pytest.mark.parametrize("n, k, d_lower, d_upper", SAVIN_WHITE_5PCT)
def test_exact_dw_critical_value_lies_within_savin_white_bounds(n, k, d_lower, d_upper) -> None:
    t = np.arange(n, dtype=float)
    trend = np.column_stack([np.ones(n)] + [t ** j for j in range(1, k + 1)])
    rng = np.random.default_rng(8)
    random = np.column_stack([np.ones(n), rng.normal(size=(n, k))])
    for design in (trend, random):
        d = durbin_watson_critical(design)
        # bounds are printed to three decimals
        assert d_lower - 5e-4 <= d <= d_upper + 5e-4


def test_dw_pvalue_matches_monte_carlo() -> None:
    n = 20
    X = np.column_stack([np.ones(n), np.arange(n)])
    rng = np.random.default_rng(9)
    u = rng.normal(size=(100_000, n))
    e = u - u @ (X @ np.linalg.pinv(X))               # residuals of OLS on X (P symmetric)
    dw = (np.diff(e, axis=1) ** 2).sum(axis=1) / (e ** 2).sum(axis=1)
    for d in (1.2, 1.6, 2.0, 2.6):
        share = np.mean(dw <= d)
        se = np.sqrt(share * (1 - share) / len(dw))
        exact = durbin_watson_pvalue(d, X, alternative="positive")
        assert abs(exact - share) < 4 * se + 1e-4


def test_dw_pvalue_properties() -> None:
    n = 200
    assert np.allclose(durbin_watson_eigenvalues(None, n),
                       durbin_watson_eigenvalues(np.ones((n, 1))))
    low = durbin_watson_pvalue(1.7, None, n, alternative="positive")
    high = durbin_watson_pvalue(1.7, None, n, alternative="negative")
    assert low + high == pytest.approx(1.0)
    assert durbin_watson_pvalue(1.7, None, n) == pytest.approx(2 * low)
    assert durbin_watson_pvalue(2.0, None, n) > 0.8
    with pytest.raises(ValueError):
        durbin_watson_pvalue(2.0, None, n, alternative="both")


def test_dw_statistic_and_verdicts() -> None:
    r = ar1(365, 0.5, seed=10)
    row = residual_tests(r).loc["Durbin-Watson"]
    x = r - r.mean()
    assert row.statistic == pytest.approx(np.sum(np.diff(x) ** 2) / np.sum(x ** 2))
    # DW ≈ 2 (1 - rho1) (common practice)
    assert row.statistic == pytest.approx(1.0, abs=0.15)
    assert row.verdict == "positive first-order autocorrelation" and row.p_value < 1e-6
    neg = residual_tests(ar1(365, -0.5, seed=10)).loc["Durbin-Watson"]
    assert neg.verdict == "negative first-order autocorrelation"
    white = residual_tests(np.random.default_rng(11).normal(size=365)).loc["Durbin-Watson"]
    assert 0 <= white.statistic <= 4 and white.p_value > 0.05


# ----------------------------------------------------------------------------- Breusch-Godfrey


def test_breusch_godfrey_equals_n_r_squared() -> None:
    # LM = n R² of the residuals on the regressors and their own lags 1..7 (pre-sample lags
    # set to zero), chi²(7) (Breusch 1978; Godfrey 1978). A published figure on a textbook data
    # set is not checked here: that data set does not ship in an installed package.
    r = ar1(300, 0.25, seed=12)
    n, p = len(r), 7
    e = r - r.mean()                                   # residuals of OLS on a constant
    lags = np.column_stack([np.r_[np.zeros(k), e[:-k]] for k in range(1, p + 1)])
    X = np.column_stack([np.ones(n), lags])
    fit = np.linalg.lstsq(X, e, rcond=None)[0]
    r2 = 1 - np.sum((e - X @ fit) ** 2) / np.sum((e - e.mean()) ** 2)
    row = residual_tests(r).loc["Breusch-Godfrey lag 7"]
    assert row.statistic == pytest.approx(n * r2, rel=1e-8)
    assert row.p_value == pytest.approx(stats.chi2.sf(n * r2, p), rel=1e-6)
    assert row.verdict == "autocorrelated"
    white = residual_tests(np.random.default_rng(13).normal(size=300))
    assert white.at["Breusch-Godfrey lag 7", "p_value"] > 0.05


def test_residual_tests_with_a_design() -> None:
    n = 120
    rng = np.random.default_rng(14)
    X = np.column_stack([np.ones(n), np.arange(n) % 7 == 5])
    r = rng.normal(size=n)
    table = residual_tests(r, X)
    assert list(table.index) == ["Ljung-Box lag 7", "Ljung-Box lag 14", "Durbin-Watson",
                                 "Breusch-Godfrey lag 7"]
    assert table["p_value"].between(0, 1).all()


# ----------------------------------------------------------------------------- scenario level


def test_diagnose_scenario_writes_table_and_pages(tmp_path) -> None:
    scenario = load_scenario(demo_path("tiny"))
    clean = clean_history(scenario)
    resid = {"BRH-002": np.random.default_rng(15).normal(size=84)}
    out = tmp_path / "diag"
    results = diagnose_scenario(scenario, clean, residuals_by_terminal=resid,
                                terminal_ids=["BRH-001", "BRH-002"], out_dir=out)
    assert set(results) == {"BRH-001", "BRH-002"}
    assert all(isinstance(d, Diagnostics) for d in results.values())
    # weekly pattern of the tiny demo (make_tiny.py)
    assert results["BRH-001"].peaks.at[0, "period_days"] == pytest.approx(7.0)
    table = pd.read_csv(out / "diagnostics.csv")
    assert list(table.columns) == ["terminal_id", "on", "test", "statistic", "p_value",
                                   "verdict"]
    assert set(table["terminal_id"]) == {"BRH-001", "BRH-002"}
    assert set(table.loc[table.terminal_id == "BRH-002", "on"]) == {"series",
                                                                   "model residuals"}
    assert set(table.loc[table.terminal_id == "BRH-001", "on"]) == {"series",
                                                                   "profile residuals"}
    assert {"ADF (constant)", "KPSS (level)", "ADF and KPSS", "Ljung-Box lag 7",
            "Ljung-Box lag 14", "Durbin-Watson", "Breusch-Godfrey lag 7"} <= set(table.test)
    for name in ("diagnostics.csv", "diagnostics_BRH-001.png", "diagnostics_BRH-002.png"):
        path = out / name
        assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    assert (out / "diagnostics_BRH-001.png").read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert sorted(p.name for p in out.iterdir()) == ["diagnostics.csv",
                                                     "diagnostics_BRH-001.png",
                                                     "diagnostics_BRH-002.png"]


def test_diagnose_scenario_without_output() -> None:
    scenario = load_scenario(demo_path("tiny"))
    results = diagnose_scenario(scenario, clean_history(scenario))
    assert list(results) == ["BRH-001", "BRH-002", "BRH-003"]
    table = results["BRH-003"].table()
    assert table["p_value"].dropna().between(0, 1).all()


def test_diagnostics_on_worker_processes_equal_those_made_here():
    # the terminals are diagnosed on the run's executor, in chunks; the answer is the same
    from conftest import TINY
    from planner.executor import LocalExecutor

    scenario = load_scenario(TINY)
    clean = clean_history(scenario)
    here = diagnose_scenario(scenario, clean)
    with LocalExecutor(2) as pool:
        there = diagnose_scenario(scenario, clean, executor=pool)
    assert list(there) == list(here) and len(here) == len(scenario.terminals)
    for tid in here:
        pd.testing.assert_frame_equal(there[tid].table(), here[tid].table())
