"""Statistical diagnostics of one demand series and of a model's residuals.

For the series: descriptive statistics; ADF and KPSS with one plain-language reading of both;
ACF and PACF with 95 % bands; the periodogram with its strongest periods in days. For
residuals: Ljung-Box (lags 7 and 14), Durbin-Watson with an exact p-value (Imhof's method),
Breusch-Godfrey. :func:`diagnose_scenario` runs all of it for the terminals of a scenario and
writes the tidy table ``diagnostics.csv`` plus one chart page per terminal.

Significance level: 5 % throughout (common practice). Test statistics come from statsmodels
(``adfuller``, ``kpss``, ``acf``, ``pacf``, ``acorr_ljungbox``, ``acorr_breusch_godfrey``,
``durbin_watson``) and scipy (``signal.periodogram``, ``integrate.quad``).
"""
from __future__ import annotations

import warnings
from collections.abc import Mapping
from dataclasses import dataclass, field
from typing import Any
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import integrate, optimize, signal, stats

from planner.calendar import calendar_features
from planner.cleaning import CleanHistory
from planner.executor import Executor, LocalExecutor, task_chunks
from planner.runfolder import write_private_file
from planner.scenario import Scenario

ALPHA = 0.05
MAX_LAG = 28
RESIDUAL_LAGS = (7, 14)
BG_LAGS = 7
_MIN_TEST_DAYS = 20      # below this the unit-root tests are not run
_TIDY_COLUMNS = ["terminal_id", "on", "test", "statistic", "p_value", "verdict"]

# Readings of ADF (H0: unit root) and KPSS (H0: stationary) taken together.
STATIONARY = "stationary"
TREND_STATIONARY = "trend-stationary"
UNIT_ROOT = "unit root"
CONFLICTING = "conflicting: difference-stationary or fractional"
INCONCLUSIVE = "inconclusive: neither test rejects"
TOO_SHORT = "too short to test"


@dataclass(frozen=True)
class Diagnostics:
    """Diagnostics of one series (and, when given, of residuals).

    - ``describe``: dict of ``n`` (values used), ``missing`` (NaN values dropped), ``mean``,
      ``sd``, ``cv`` (sd / mean), ``min``, ``q25``, ``median``, ``q75``, ``max``, ``skewness``,
      ``excess_kurtosis``, ``zeros`` (days with 0) — in the series' units.
    - ``stationarity``: frame indexed by test (``ADF (constant)``, ``ADF (constant + trend)``,
      ``KPSS (level)``, ``KPSS (trend)``) with ``statistic``, ``p_value``, ``lags``, ``nobs``,
      ``crit_1``, ``crit_5``, ``crit_10`` (critical values at 1/5/10 %), ``reject`` (at 5 %),
      ``reading``. KPSS p-values are interpolated in the published table and so bounded to
      [0.01, 0.10].
    - ``verdict``: ADF and KPSS read together (see :func:`stationarity_verdict`).
    - ``correlogram``: frame indexed by ``lag`` 1 … 28 with ``acf``, ``pacf``, ``band``
      (95 % white-noise band 1.96/√n, for both) and ``acf_band_bartlett`` (95 % band under an
      MA(lag - 1), Bartlett's formula).
    - ``periodogram``: frame with ``frequency`` (cycles per day), ``period_days``, ``power``.
    - ``peaks``: the strongest local maxima of the periodogram: ``period_days``, ``power``,
      ``share`` (of the total power), ``name`` (e.g. ``"7.00 days (weekly)"``).
    - ``residual_tests``: frame indexed by test with ``statistic``, ``p_value``, ``verdict``
      (empty when no residuals were given).
    """

    describe: dict[str, float]
    stationarity: pd.DataFrame
    verdict: str
    correlogram: pd.DataFrame
    periodogram: pd.DataFrame
    peaks: pd.DataFrame
    residual_tests: pd.DataFrame = field(default_factory=pd.DataFrame)

    def table(self) -> pd.DataFrame:
        """All tests as one tidy frame: ``on``, ``test``, ``statistic``, ``p_value``,
        ``verdict`` (``on`` = ``series`` or ``residuals``)."""
        rows = [{"on": "series", "test": name, "statistic": r.statistic,
                 "p_value": r.p_value, "verdict": r.reading}
                for name, r in self.stationarity.iterrows()]
        rows.append({"on": "series", "test": "ADF and KPSS", "statistic": np.nan,
                     "p_value": np.nan, "verdict": self.verdict})
        if len(self.peaks):
            top = self.peaks.iloc[0]
            rows.append({"on": "series", "test": "periodogram strongest period (days)",
                         "statistic": top.period_days, "p_value": np.nan,
                         "verdict": top["name"]})
        for name, r in self.residual_tests.iterrows():
            rows.append({"on": "residuals", "test": name, "statistic": r.statistic,
                         "p_value": r.p_value, "verdict": r.verdict})
        return pd.DataFrame(rows, columns=["on", "test", "statistic", "p_value", "verdict"])


# --------------------------------------------------------------------------------------------
# Series diagnostics
# --------------------------------------------------------------------------------------------


def describe(y: np.ndarray) -> dict[str, float]:
    """Descriptive statistics of a series (NaN values counted as ``missing`` and dropped)."""
    y = np.asarray(y, dtype=float)
    x = y[np.isfinite(y)]
    n = len(x)
    if n == 0:
        return {"n": 0, "missing": float(len(y))}
    q25, median, q75 = np.quantile(x, [0.25, 0.5, 0.75])
    mean = float(x.mean())
    sd = float(x.std(ddof=1)) if n > 1 else np.nan
    return {
        "n": n, "missing": float(len(y) - n), "mean": mean, "sd": sd,
        "cv": sd / mean if mean else np.nan, "min": float(x.min()), "q25": float(q25),
        "median": float(median), "q75": float(q75), "max": float(x.max()),
        "skewness": float(stats.skew(x)) if n > 2 and sd > 0 else np.nan,
        "excess_kurtosis": float(stats.kurtosis(x)) if n > 3 and sd > 0 else np.nan,
        "zeros": float((x == 0).sum()),
    }


def stationarity_tests(y: np.ndarray) -> pd.DataFrame:
    """ADF (H0: unit root; lag order by AIC) and KPSS (H0: stationary; automatic bandwidth),
    each with a constant and with constant + trend. See :class:`Diagnostics` for columns."""
    from statsmodels.tsa.stattools import adfuller, kpss
    from statsmodels.tools.sm_exceptions import InterpolationWarning

    x = _finite(y)
    names = ["ADF (constant)", "ADF (constant + trend)", "KPSS (level)", "KPSS (trend)"]
    cols = ["statistic", "p_value", "lags", "nobs", "crit_1", "crit_5", "crit_10", "reject",
            "reading"]
    if len(x) < _MIN_TEST_DAYS or np.ptp(x) == 0:
        out = pd.DataFrame(np.nan, index=pd.Index(names, name="test"), columns=cols)
        out["reject"] = False
        out["reading"] = TOO_SHORT
        return out
    rows = []
    for regression in ("c", "ct"):
        r = adfuller(x, regression=regression, autolag="AIC", result_object=True)
        cv = r.critical_values
        reject = bool(r.pvalue < ALPHA)
        rows.append([r.statistic, r.pvalue, r.lags, r.nobs, cv["1%"], cv["5%"], cv["10%"],
                     reject, "rejects a unit root" if reject else "cannot reject a unit root"])
    for regression in ("c", "ct"):
        with warnings.catch_warnings():
            # p-values beyond the table's range are reported at the bound (0.01 or 0.10)
            warnings.simplefilter("ignore", InterpolationWarning)
            r = kpss(x, regression=regression, nlags="auto", result_object=True)
        cv = r.critical_values
        reject = bool(r.pvalue < ALPHA)
        what = "level" if regression == "c" else "trend"
        rows.append([r.statistic, r.pvalue, r.lags, len(x), cv["1%"], cv["5%"], cv["10%"],
                     reject, f"rejects {what} stationarity" if reject
                     else f"cannot reject {what} stationarity"])
    out = pd.DataFrame(rows, index=pd.Index(names, name="test"), columns=cols)
    out["reject"] = out["reject"].astype(bool)
    return out


def stationarity_verdict(table: pd.DataFrame) -> str:
    """Read ADF and KPSS together (5 % level).

    - ADF rejects a unit root and KPSS does not reject level stationarity: ``stationary``;
    - otherwise, the same with trend (ADF with trend rejects, KPSS trend does not):
      ``trend-stationary``;
    - ADF cannot reject and KPSS rejects: ``unit root`` (difference the series);
    - both reject: ``conflicting: difference-stationary or fractional`` (long memory or
      breaks: neither model fits well);
    - neither rejects: ``inconclusive`` (too little evidence either way).
    """
    if (table["reading"] == TOO_SHORT).any():
        return TOO_SHORT
    adf_c, adf_ct = table.at["ADF (constant)", "reject"], table.at["ADF (constant + trend)",
                                                                     "reject"]
    kpss_c, kpss_ct = table.at["KPSS (level)", "reject"], table.at["KPSS (trend)", "reject"]
    if adf_c and not kpss_c:
        return STATIONARY
    if adf_ct and not kpss_ct:
        return TREND_STATIONARY
    if not adf_c and kpss_c:
        return UNIT_ROOT
    if adf_c and kpss_c:
        return CONFLICTING
    return INCONCLUSIVE


def correlogram(y: np.ndarray, max_lag: int = MAX_LAG) -> pd.DataFrame:
    """ACF and PACF up to ``max_lag`` (fewer for short series) with 95 % bands."""
    from statsmodels.tsa.stattools import acf, pacf

    x = _finite(y)
    n = len(x)
    lags = min(max_lag, n // 2 - 1)
    if lags < 1 or np.ptp(x) == 0:
        return pd.DataFrame(columns=["acf", "pacf", "band", "acf_band_bartlett"],
                            index=pd.Index([], name="lag"), dtype=float)
    a = acf(x, nlags=lags, fft=True, alpha=ALPHA, result_object=True)
    p = pacf(x, nlags=lags, method="ywadjusted")
    bartlett = a.confint[1:, 1] - a.acf[1:]
    z = stats.norm.ppf(1 - ALPHA / 2)
    return pd.DataFrame({"acf": a.acf[1:], "pacf": p[1:], "band": z / np.sqrt(n),
                         "acf_band_bartlett": bartlett},
                        index=pd.Index(np.arange(1, lags + 1), name="lag"))


def periodogram(y: np.ndarray, top: int = 3) -> tuple[pd.DataFrame, pd.DataFrame]:
    """Periodogram (linear trend removed) and its ``top`` strongest local maxima.

    Returns ``(table, peaks)``; see :class:`Diagnostics`. Periods are in days (1 / frequency).
    """
    x = _finite(y)
    empty = pd.DataFrame(columns=["period_days", "power", "share", "name"])
    if len(x) < 4 or np.ptp(x) == 0:
        return pd.DataFrame(columns=["frequency", "period_days", "power"]), empty
    freq, power = signal.periodogram(x, fs=1.0, detrend="linear", scaling="spectrum")
    freq, power = freq[1:], power[1:]          # frequency 0 carries the (removed) mean
    table = pd.DataFrame({"frequency": freq, "period_days": 1.0 / freq, "power": power})
    padded = np.r_[-np.inf, power, -np.inf]
    is_peak = (power >= padded[:-2]) & (power > padded[2:])
    order = np.flatnonzero(is_peak)[np.argsort(-power[is_peak], kind="stable")][:top]
    total = power.sum()
    peaks = pd.DataFrame({
        "period_days": 1.0 / freq[order],
        "power": power[order],
        "share": power[order] / total if total > 0 else np.nan,
    })
    peaks["name"] = [period_name(p) for p in peaks["period_days"]]
    return table, peaks.reset_index(drop=True)


def period_name(days: float) -> str:
    """A period in days with the calendar cycle it is close to (within 3 %), if any."""
    known = ((7.0, "weekly"), (3.5, "half-weekly"), (7 / 3, "third-weekly"),
             (14.0, "fortnightly"), (30.44, "monthly"), (365.25, "yearly"))
    label = f"{days:.2f} days"
    for period, word in known:
        if abs(days / period - 1) <= 0.03:
            return f"{label} ({word})"
    return label


# --------------------------------------------------------------------------------------------
# Residual diagnostics
# --------------------------------------------------------------------------------------------


def durbin_watson_pvalue(dw: float, design: np.ndarray | None = None, n: int | None = None,
                         *, alternative: str = "two-sided") -> float:
    """Exact p-value of the Durbin-Watson statistic ``dw`` under independent normal errors.

    ``design`` is the regression matrix (n × k) the residuals come from; ``None`` means a
    regression on a constant only, in which case ``n`` must be given. ``alternative``:
    ``"positive"`` (P(DW ≤ dw): positive autocorrelation), ``"negative"`` (P(DW ≥ dw)) or
    ``"two-sided"`` (twice the smaller tail, at most 1).

    Under H0, DW = u'MAMu / u'Mu with M the residual maker and A the first-difference
    matrix, so P(DW ≤ d) = P(Σ (ν_i - d) χ²_1,i ≤ 0) over the n - k non-zero eigenvalues ν_i
    of MAM. That probability is computed by Imhof's (1961, Biometrika 48, 419–426) inversion
    integral with ``scipy.integrate.quad``. Raises ``ValueError`` for a bad alternative.
    """
    if alternative not in ("two-sided", "positive", "negative"):
        raise ValueError(f"alternative must be two-sided, positive or negative; got "
                         f"{alternative!r}")
    nu = durbin_watson_eigenvalues(design, n)
    lower = _imhof_below_zero(nu - dw)
    if alternative == "positive":
        return lower
    if alternative == "negative":
        return 1.0 - lower
    return float(min(1.0, 2 * min(lower, 1.0 - lower)))


def durbin_watson_critical(design: np.ndarray | None = None, n: int | None = None,
                           level: float = ALPHA) -> float:
    """Exact lower-tail critical value d* with P(DW ≤ d*) = ``level`` (see
    :func:`durbin_watson_pvalue`)."""
    nu = durbin_watson_eigenvalues(design, n)
    return float(optimize.brentq(lambda d: _imhof_below_zero(nu - d) - level,
                                 nu.min() + 1e-9, nu.max() - 1e-9, xtol=1e-10))


def durbin_watson_eigenvalues(design: np.ndarray | None = None,
                              n: int | None = None) -> np.ndarray:
    """The n - k non-zero eigenvalues of M A M (see :func:`durbin_watson_pvalue`)."""
    if design is None:
        if n is None:
            raise ValueError("give the design matrix or the number of observations n")
        # with a constant only, MAM shares A's eigenvectors: 2(1 - cos(pi j / n)), j = 1..n-1
        return 2.0 * (1.0 - np.cos(np.pi * np.arange(1, n) / n))
    X = np.asarray(design, dtype=float)
    if X.ndim == 1:
        X = X[:, None]
    n, k = X.shape
    q, _ = np.linalg.qr(X, mode="complete")
    z = q[:, k:]                               # orthonormal basis of the residual space
    dz = np.diff(z, axis=0)                    # A = D'D with D the first differences
    return np.linalg.eigvalsh(dz.T @ dz)


def _imhof_below_zero(lam: np.ndarray) -> float:
    """P(Σ lam_i χ²_1,i < 0) by Imhof's formula 1/2 - (1/π) ∫ sin θ(u) / (u ρ(u)) du."""
    lam = lam[np.abs(lam) > 1e-12]

    def integrand(u: float) -> float:
        if u == 0.0:
            return 0.5 * lam.sum()
        theta = 0.5 * np.arctan(lam * u).sum()
        log_rho = 0.25 * np.log1p((lam * u) ** 2).sum()
        return np.sin(theta) / u * np.exp(-log_rho)

    value, _ = integrate.quad(integrand, 0.0, np.inf, limit=500, epsabs=1e-11)
    return float(np.clip(0.5 - value / np.pi, 0.0, 1.0))


def residual_tests(residuals: np.ndarray, design: np.ndarray | None = None, *,
                   model_df: int = 0) -> pd.DataFrame:
    """Ljung-Box at lags 7 and 14, Durbin-Watson (exact two-sided p-value) and
    Breusch-Godfrey (lag 7) on model residuals.

    ``design`` is the model's regression matrix (rows aligned with the finite residuals);
    ``None`` uses an OLS of the residuals on a constant. ``model_df`` (ARMA parameters of the
    model) is subtracted from the Ljung-Box degrees of freedom.
    """
    import statsmodels.api as sm
    from statsmodels.stats.diagnostic import acorr_breusch_godfrey, acorr_ljungbox
    from statsmodels.stats.stattools import durbin_watson

    r = np.asarray(residuals, dtype=float)
    keep = np.isfinite(r)
    r = r[keep]
    n = len(r)
    names = [f"Ljung-Box lag {h}" for h in RESIDUAL_LAGS] + ["Durbin-Watson",
                                                            f"Breusch-Godfrey lag {BG_LAGS}"]
    if n < 2 * max(RESIDUAL_LAGS) + 2 or np.ptp(r) == 0:
        return pd.DataFrame({"statistic": np.nan, "p_value": np.nan, "verdict": TOO_SHORT},
                            index=pd.Index(names, name="test"))
    rows = []
    lb = acorr_ljungbox(r, lags=list(RESIDUAL_LAGS), model_df=model_df, return_df=True)
    for h in RESIDUAL_LAGS:
        q, p = float(lb.at[h, "lb_stat"]), float(lb.at[h, "lb_pvalue"])
        rows.append([q, p, "autocorrelated" if p < ALPHA else "no autocorrelation found"])
    X = np.ones((n, 1)) if design is None else np.asarray(design, dtype=float)[keep]
    fit = sm.OLS(r, X).fit()
    dw = float(durbin_watson(fit.resid))
    p = durbin_watson_pvalue(dw, None if design is None else X, n)
    reading = ("no first-order autocorrelation found" if p >= ALPHA
               else "positive first-order autocorrelation" if dw < 2
               else "negative first-order autocorrelation")
    rows.append([dw, p, reading])
    bg = acorr_breusch_godfrey(fit, nlags=BG_LAGS, result_object=True)
    rows.append([float(bg.lm), float(bg.lmpval),
                 "autocorrelated" if bg.lmpval < ALPHA else "no autocorrelation found"])
    return pd.DataFrame(rows, index=pd.Index(names, name="test"),
                        columns=["statistic", "p_value", "verdict"])


def diagnose_series(y: np.ndarray | pd.Series, residuals: np.ndarray | pd.Series | None = None,
                    *, design: np.ndarray | None = None, model_df: int = 0,
                    max_lag: int = MAX_LAG) -> Diagnostics:
    """Every diagnostic of one daily series ``y`` (NaN values dropped) and, when given, of a
    model's ``residuals`` (``design``, ``model_df``: see :func:`residual_tests`)."""
    values = np.asarray(y, dtype=float)
    table = stationarity_tests(values)
    pgram, peaks = periodogram(values)
    resid = (residual_tests(residuals, design, model_df=model_df) if residuals is not None
             else pd.DataFrame(columns=["statistic", "p_value", "verdict"],
                               index=pd.Index([], name="test")))
    return Diagnostics(describe=describe(values), stationarity=table,
                       verdict=stationarity_verdict(table),
                       correlogram=correlogram(values, max_lag), periodogram=pgram,
                       peaks=peaks, residual_tests=resid)


def _finite(y: np.ndarray) -> np.ndarray:
    x = np.asarray(y, dtype=float)
    return x[np.isfinite(x)]


# --------------------------------------------------------------------------------------------
# Scenario level: tables and chart pages
# --------------------------------------------------------------------------------------------


def profile_residuals(demand: pd.Series,
                      features: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Residuals of an OLS of log(1 + demand) on a constant, weekday dummies and the calendar
    indicators, with the design used (rows of finite demand only).

    Used when no forecasting model's residuals are given: it shows how much day-to-day
    dependence is left once the weekly and calendar pattern is taken out.
    """
    keep = demand.notna().to_numpy()
    idx = pd.DatetimeIndex(demand.index)[keep]
    dow = idx.day_of_week.to_numpy()
    feats = features.reindex(idx)
    dummies = [(dow == d).astype(float) for d in range(1, 7)] + [
        feats[c].to_numpy() for c in ("payday", "payday_next", "holiday", "holiday_eve",
                                      "holiday_after")]
    # a dummy that never (or always) occurs would make the design singular
    X = np.column_stack([np.ones(len(idx))] + [c for c in dummies if 0 < c.sum() < len(c)])
    z = np.log1p(demand.to_numpy()[keep])
    beta, *_ = np.linalg.lstsq(X, z, rcond=None)
    return z - X @ beta, X


def diagnose_scenario(scenario: Scenario, clean: CleanHistory,
                      residuals_by_terminal: Mapping | None = None,
                      terminal_ids: list[str] | tuple[str, ...] | None = None,
                      out_dir: str | Path | None = None,
                      executor: Executor | None = None) -> dict[str, Diagnostics]:
    """Diagnose the cleaned demand of each terminal (all with history by default).

    ``residuals_by_terminal`` maps terminal id to a model's residuals (array or Series; NaN
    dropped); a terminal without an entry is checked on the residuals of
    :func:`profile_residuals`. When ``out_dir`` is given, writes ``diagnostics.csv`` (columns
    terminal_id, on, test, statistic, p_value, verdict; ``on`` says whether the test concerns
    the ``series``, the ``model residuals`` or the ``profile residuals``) and one PNG page
    ``diagnostics_<terminal>.png`` per terminal (:mod:`planner.report.diagnostic_charts`),
    all readable by the owner only. The terminals are diagnosed on ``executor`` (in chunks;
    default this process); the pages are drawn here.
    """
    if out_dir is not None:
        from planner.report.diagnostic_charts import diagnostics_page
    ids = list(terminal_ids) if terminal_ids is not None else list(clean.terminal_ids)
    residuals_by_terminal = residuals_by_terminal or {}
    daily = clean.daily
    if len(daily):
        days = pd.date_range(daily["date"].min(), daily["date"].max(), freq="D")
        features = calendar_features(days, scenario.calendar)
    frames = {tid: clean.frame(tid) for tid in ids}
    tasks = [_DiagnosisTask(tid, f["demand"], residuals_by_terminal.get(tid),
                            features.reindex(f["demand"].index) if len(daily) else None)
             for tid, f in frames.items() if not f.empty]
    runner = executor if executor is not None else LocalExecutor(1)
    chunks = task_chunks(tasks, runner.workers)
    done = [r for chunk in runner.map(_diagnose_chunk, chunks, weights=[len(c) for c in chunks])
            for r in chunk]
    results: dict[str, Diagnostics] = {}
    tables = []
    for task, (diag, source) in zip(tasks, done):
        tid = task.terminal_id
        results[tid] = diag
        t = diag.table()
        t["on"] = t["on"].replace({"residuals": source})
        t.insert(0, "terminal_id", tid)
        tables.append(t)
        if out_dir is not None:
            diagnostics_page(tid, frames[tid], diag,
                             Path(out_dir) / f"diagnostics_{_safe(tid)}.png")
    if out_dir is not None:
        tidy = (pd.concat(tables, ignore_index=True) if tables
                else pd.DataFrame(columns=_TIDY_COLUMNS))
        write_private_file(Path(out_dir) / "diagnostics.csv",
                       tidy[_TIDY_COLUMNS].to_csv(index=False).encode("utf-8"))
    return results


@dataclass(frozen=True)
class _DiagnosisTask:
    """One terminal's diagnosis (the executor's unit of work, in chunks)."""

    terminal_id: str
    demand: pd.Series               # cleaned demand by date
    residuals: Any                  # a model's residuals, or None: the profile's
    features: pd.DataFrame | None   # calendar features on the demand's dates


def _diagnose_chunk(chunk: list[_DiagnosisTask]) -> list[tuple[Diagnostics, str]]:
    """``(diagnostics, what the residual tests ran on)`` of every task of a chunk."""
    out = []
    for task in chunk:
        if task.residuals is not None:
            diag = diagnose_series(task.demand.to_numpy(),
                                   np.asarray(task.residuals, dtype=float))
            out.append((diag, "model residuals"))
        else:
            resid, X = profile_residuals(task.demand, task.features)
            out.append((diagnose_series(task.demand.to_numpy(), resid, design=X),
                        "profile residuals"))
    return out


def _safe(terminal_id: str) -> str:
    """A terminal id usable as part of a file name."""
    return "".join(c if c.isalnum() or c in "-_." else "_" for c in str(terminal_id))
