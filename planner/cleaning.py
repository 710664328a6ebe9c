"""Clean the dispense history into one regular daily demand series per terminal.

Steps per terminal (README, "How a plan is made", step 2):

1. **Daily grid** from the terminal's first to its last dispense date (all dates lie before the
   first planning day; the scenario loader drops later rows). Days without a row are ``gap``,
   out-of-service days are ``down``; both have ``observed = NaN``.
2. **Profile model** of log demand ``z = log(1 + amount)``::

       z_t = level(t) + weekday(t) + calendar(t) + event_log_lift(t) + e_t,   e_t ~ N(0, s²)

   ``level`` is a linear spline in time (one knot every six weeks) so that slow drifts and
   seasons do not look like outliers; ``weekday`` are six dummies; ``calendar`` are the
   indicators of :func:`planner.calendar.calendar_features` (each used only when it occurs on
   at least three usable days); the stated event lift enters as a known offset.
   ``dry`` days are **right-censored**: the machine ran out, so the true demand is at least
   the dispensed amount. The model is therefore fitted as a censored-normal (Tobit)
   regression by maximum likelihood (Newton's method): an ``ok`` day
   contributes its normal density, a ``dry`` day the probability ``P(z ≥ observed)``. Fitting
   dry days as if they were true demand would bias every forecast low; dropping them would too,
   because machines run dry on the high days.
3. **Outliers**: the modified z-score of Iglewicz & Hoaglin (1993, *How to Detect and Handle
   Outliers*), ``M = 0.6745 · (r − median(r)) / MAD(r)``, with their published threshold
   ``|M| > 3.5``, on the calendar-adjusted log series, i.e. the residuals ``r = z - fitted``
   of the profile model. The scale is seasonal: median and MAD per weekday where the weekday
   has at least ``_MIN_SCALE_DAYS`` exact days, else over all days. The threshold is raised
   for long series (Bonferroni over the days) and for the scale's own uncertainty (Student's
   t with the MAD's effective degrees of freedom, :func:`z_limit`). Fit and
   flagging alternate until the flagged set no longer changes (at most five rounds), each fit
   leaving the flagged days out, so a gross error cannot hide itself by pulling the fit. Dry
   days can only be upper outliers (a low dry amount is expected: the machine was empty).
4. **Estimates** (amounts, from the lognormal profile): ``expected = E[Y] = exp(mu + s²/2) - 1``.
   A dry day gets the conditional mean given that demand reached the dispensed amount ``c``::

       E[Y | Y ≥ c] = exp(mu + s²/2) · Φ((mu + s² - a)/s) / Φ((mu - a)/s) - 1,   a = log(1 + c)

   which is never below ``c`` — a model-based version of "max(observed, expected)" that
   stays unbiased also when demand is far above the load. Outliers are replaced by
   ``expected``.

   A weekday with fewer than ``_LEAN_DAYS`` exactly observed days (a machine that is dry on
   almost every Sunday) cannot tell its own effect: its term then gets a normal prior
   centred on the network's weekday profile (:func:`network_weekday_profile`, from the
   terminals that see that weekday mostly undisturbed), with a standard deviation of
   ``_PRIOR_SD`` residual standard deviations, and its dry days are flagged
   ``dry+profile``. Without such a profile a weekday seen on fewer than two exact days has no
   term.
5. **Gap filling** (``fill``): ``"weekday_profile"`` puts ``expected`` on gap and down days,
   ``"linear"`` interpolates the cleaned demand linearly in time (ends take the nearest value),
   ``"none"`` leaves NaN.

When a terminal has too few usable days for the full model, the level, then the calendar, then
the weekday terms are dropped; with fewer than three usable days there is no model and dry days
keep their observed amount.
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import special, stats

from planner.calendar import calendar_features
from planner.scenario import Scenario

FILLS = ("weekday_profile", "linear", "none")
FLAGS = ("ok", "gap", "down", "dry", "outlier", "profile")

_CALENDAR_TERMS = ("payday", "payday_next", "holiday", "holiday_eve", "holiday_after")
_KNOT_DAYS = 42        # spacing of the level spline's knots
_MIN_OCCURRENCES = 3   # a dummy needs this many usable days to be estimated
_Z_LIMIT = 3.5         # modified z-score threshold (Iglewicz & Hoaglin 1993)
_Z_FACTOR = 0.6745     # the normal's 0.75 quantile: MAD / 0.6745 estimates σ
_MIN_SCALE_DAYS = 20   # exact days a weekday needs for a scale of its own
_SERIES_ALPHA = 0.05   # chance of a false flag in a genuine series (Bonferroni over its days)
_MAD_EFFICIENCY = 0.37  # the MAD's asymptotic efficiency at the normal (Rousseeuw & Croux 1993)
_MAX_ROUNDS = 5
_PRIOR_SD = 0.25       # weekday prior: its sd in residual standard deviations (worth 16 days)
_LEAN_DAYS = 8         # a weekday with fewer exact days leans on the network profile
_PROFILE_DAYS = 8      # exact days per weekday a terminal needs to shape the network profile
_PROFILE_DRY = 0.1     # and at most this share of them dry
_MIN_DAYS = 3          # below this many usable days no profile model is fitted


@dataclass(frozen=True)
class CleanHistory:
    """Cleaned daily history of every terminal.

    - ``daily``: long frame sorted by terminal and date, one row per terminal and grid day:
      ``terminal_id`` (str), ``date`` (datetime64), ``observed`` (float: the dispensed amount,
      NaN on gap and down days), ``demand`` (float: cleaned or estimated demand used for
      fitting; NaN on gaps only when ``fill="none"``), ``expected`` (float: the profile
      model's mean demand that day, NaN without a model), ``censored`` (bool: dry day, the
      observed amount is a lower bound), ``flag`` (str: ``ok``, ``gap``, ``down``, ``dry``,
      ``outlier``, several joined by ``+``), ``changed`` (bool: ``demand`` differs from
      ``observed``).
    - ``summary``: indexed by ``terminal_id``, one row per terminal of the scenario: ``days``
      (grid length), ``gaps`` (days without a row), ``down``, ``dry``, ``outliers``,
      ``changed`` (day counts), ``first``, ``last`` (dates, NaT without history),
      ``mean_daily`` (mean cleaned demand), ``log_sd`` (residual standard deviation of log
      demand around the profile).
    - ``fill``: the gap-filling method used.
    """

    daily: pd.DataFrame
    summary: pd.DataFrame
    fill: str

    @property
    def terminal_ids(self) -> tuple[str, ...]:
        """Terminals that have a history (those with at least one grid day)."""
        return tuple(self.summary.index[self.summary["days"] > 0])

    def frame(self, terminal_id: str) -> pd.DataFrame:
        """The daily rows of one terminal, indexed by date."""
        rows = self.daily[self.daily["terminal_id"] == terminal_id]
        return rows.drop(columns="terminal_id").set_index("date")

    def series(self, terminal_id: str, column: str = "demand") -> pd.Series:
        """One column of one terminal as a daily series indexed by date."""
        return self.frame(terminal_id)[column]

    def dates(self, terminal_id: str) -> pd.DatetimeIndex:
        """The grid days of one terminal."""
        return pd.DatetimeIndex(self.daily.loc[self.daily["terminal_id"] == terminal_id, "date"])


def clean_history(scenario: Scenario, *, fill: str = "weekday_profile") -> CleanHistory:
    """Clean the scenario's dispense history (see the module docstring for the method).

    ``fill`` is ``"weekday_profile"``, ``"linear"`` or ``"none"``. Raises ``ValueError`` for
    another value (the CLI offers only these).
    """
    if fill not in FILLS:
        raise ValueError(f"fill must be one of {', '.join(FILLS)}; got {fill!r}")
    dispense = scenario.dispense
    if len(dispense):
        all_days = pd.date_range(dispense["date"].min(), dispense["date"].max(), freq="D")
        features = calendar_features(all_days, scenario.calendar)
    else:
        features = calendar_features(pd.DatetimeIndex([]), scenario.calendar)
    frames, rows = [], []
    groups = dict(tuple(dispense.groupby("terminal_id", sort=False)))
    profile = network_weekday_profile(groups.values())
    for tid in scenario.terminal_ids:
        part = groups.get(tid)
        if part is None or part.empty:
            rows.append(_summary_row(tid, None, np.nan))
            continue
        daily, log_sd = clean_terminal(part, features, fill=fill, profile=profile)
        daily.insert(0, "terminal_id", tid)
        frames.append(daily)
        rows.append(_summary_row(tid, daily, log_sd))
    if frames:
        daily = pd.concat(frames, ignore_index=True)
    else:
        daily = pd.DataFrame({c: pd.Series(dtype=t) for c, t in _DAILY_DTYPES.items()})
    daily["terminal_id"] = daily["terminal_id"].astype(str)
    summary = pd.DataFrame(rows).set_index("terminal_id")
    return CleanHistory(daily=daily, summary=summary, fill=fill)


_DAILY_DTYPES = {"terminal_id": str, "date": "datetime64[ns]", "observed": float,
                 "demand": float, "expected": float, "censored": bool, "flag": str,
                 "changed": bool}


def network_weekday_profile(parts) -> np.ndarray:
    """``[7]`` the network's weekday effects on log demand, Monday = 0: per terminal the mean
    of ``log(1 + amount)`` on each weekday's ``ok`` days minus its Monday mean, from weekdays
    with at least ``_PROFILE_DAYS`` ok days and at most ``_PROFILE_DRY`` of their days dry
    (the ok days of an often dry weekday are its low days), on Monday and the weekday alike;
    the median over terminals (NaN where no terminal qualifies: no prior there). The prior of
    the weekday terms (module text)."""
    effects = []
    for part in parts:
        used = part[part["status"].isin(("ok", "dry"))]
        if used.empty:
            continue
        ok = (used["status"] == "ok").to_numpy()
        z = np.log1p(used["amount"].to_numpy(dtype=float))
        dow = pd.DatetimeIndex(used["date"]).day_of_week.to_numpy()
        count = np.bincount(dow[ok], minlength=7)
        dry_share = 1.0 - count / np.maximum(np.bincount(dow, minlength=7), 1)
        good = (count >= _PROFILE_DAYS) & (dry_share <= _PROFILE_DRY)
        if not good[0]:
            continue
        mean = np.bincount(dow[ok], weights=z[ok], minlength=7) / np.maximum(count, 1)
        effects.append(np.where(good, mean - mean[0], np.nan))
    out = np.full(7, np.nan)
    if not effects:
        return out
    stacked = np.array(effects)
    has = ~np.isnan(stacked)
    for d in range(7):
        if has[:, d].any():
            out[d] = float(np.median(stacked[has[:, d], d]))
    return out


def clean_terminal(rows: pd.DataFrame, features: pd.DataFrame, *,
                   fill: str = "weekday_profile",
                   profile: np.ndarray | None = None) -> tuple[pd.DataFrame, float]:
    """Clean one terminal's dispense rows (columns ``date, amount, status``).

    ``features`` are calendar features covering the terminal's dates; ``profile`` the
    network's weekday effects (:func:`network_weekday_profile`; default none). Returns the
    daily frame
    (columns as in :class:`CleanHistory` ``daily``, without ``terminal_id``) and the residual
    standard deviation of log demand (NaN without a model).
    """
    rows = rows.sort_values("date")
    dates = pd.date_range(rows["date"].iloc[0], rows["date"].iloc[-1], freq="D")
    on_grid = rows.set_index("date").reindex(dates)
    status = on_grid["status"].to_numpy(dtype=object)
    gap = pd.isna(status)
    down = status == "down"
    dry = status == "dry"
    observed = on_grid["amount"].to_numpy(dtype=float).copy()
    observed[gap | down] = np.nan
    # an ok or dry row without an amount (the loader allows it) is a gap as well
    missing = ~(gap | down) & np.isnan(observed)
    gap = gap | missing
    dry = dry & ~missing
    usable = ~(gap | down)

    feats = features.reindex(dates)
    z = np.log1p(np.where(usable, observed, 0.0))
    offset = feats["event_log_lift"].to_numpy()
    t = np.arange(len(dates), dtype=float)
    profile = np.full(7, np.nan) if profile is None else np.asarray(profile, dtype=float)
    mu, s, outlier = _profile(z - offset, dry, usable, dates, feats, t, profile)
    dow = dates.day_of_week.to_numpy()
    exact_days = np.bincount(dow[usable & ~dry], minlength=7)
    # dry days whose weekday effect comes from the network's profile (few exact days of it)
    leans = ((exact_days < _LEAN_DAYS) & np.isfinite(profile))[dow] & dry & (mu is not None)

    if mu is None:
        expected = np.full(len(dates), np.nan)
        demand = observed.copy()
        log_sd = np.nan
    else:
        mu = mu + offset
        expected = np.maximum(np.expm1(mu + 0.5 * s * s), 0.0)
        demand = observed.copy()
        a = z
        tail = np.exp(mu + 0.5 * s * s + special.log_ndtr((mu + s * s - a) / s)
                      - special.log_ndtr((mu - a) / s)) - 1.0
        is_dry = dry & ~outlier
        demand[is_dry] = np.maximum(tail[is_dry], observed[is_dry])
        demand[outlier] = expected[outlier]
        log_sd = float(s)

    filled = ~usable
    if fill == "weekday_profile" and mu is not None:
        demand[filled] = expected[filled]
    elif fill == "linear" or (fill == "weekday_profile" and mu is None):
        demand = pd.Series(demand).interpolate(method="linear", limit_direction="both") \
            .to_numpy()

    flag = np.full(len(dates), "ok", dtype=object)
    flag[gap] = "gap"
    flag[down] = "down"
    flag[dry] = "dry"
    flag[leans] = "dry+profile"
    flag[outlier & dry] = "dry+outlier"
    flag[outlier & ~dry] = "outlier"
    changed = ~((demand == observed) | (np.isnan(demand) & np.isnan(observed)))
    daily = pd.DataFrame({
        "date": dates,
        "observed": observed,
        "demand": demand,
        "expected": expected,
        "censored": dry,
        "flag": pd.array(flag, dtype="str"),
        "changed": changed,
    })
    return daily, log_sd


def _summary_row(tid: str, daily: pd.DataFrame | None, log_sd: float) -> dict:
    if daily is None:
        return {"terminal_id": tid, "days": 0, "gaps": 0, "down": 0, "dry": 0, "outliers": 0,
                "changed": 0, "first": pd.NaT, "last": pd.NaT, "mean_daily": np.nan,
                "log_sd": np.nan}
    # no flag word is part of another, so a substring test finds each in joined flags
    count = {f: int(daily["flag"].str.contains(f, regex=False).sum()) for f in FLAGS}
    return {"terminal_id": tid, "days": len(daily), "gaps": count["gap"],
            "down": count["down"], "dry": count["dry"], "outliers": count["outlier"],
            "changed": int(daily["changed"].sum()), "first": daily["date"].iloc[0],
            "last": daily["date"].iloc[-1], "mean_daily": float(daily["demand"].mean()),
            "log_sd": log_sd}


# --------------------------------------------------------------------------------------------
# Profile model
# --------------------------------------------------------------------------------------------


def _design(dates: pd.DatetimeIndex, feats: pd.DataFrame, t: np.ndarray, fit: np.ndarray,
            exact: np.ndarray, *, level: bool, calendar: bool, weekday: bool) -> np.ndarray:
    """Columns: intercept, level spline, weekday dummies, calendar indicators; and the
    ``(column, weekday)`` pairs of the weekday dummies (they get the network prior).

    A dummy is left out when it occurs on fewer than ``_MIN_OCCURRENCES`` fitting days (or on
    all but that many) — its coefficient would just reproduce those few days. A calendar
    indicator is also left out on fewer than two exactly observed days (with dry days only
    the censored likelihood has no maximum); a weekday keeps its term, held finite by the
    prior toward the network's weekday profile.
    """
    cols = [np.ones(len(t))]
    if level and len(t) > 1:
        years = t / 365.0
        cols.append(years)
        for knot in np.arange(_KNOT_DAYS, len(t) - _KNOT_DAYS // 2, _KNOT_DAYS):
            cols.append(np.maximum(years - knot / 365.0, 0.0))
    n_fit = int(fit.sum())
    prior: list[tuple[int, int]] = []          # (column, weekday) of the weekday dummies
    if weekday:
        dow = dates.day_of_week.to_numpy()
        for d in range(1, 7):
            col = (dow == d).astype(float)
            k = int(col[fit].sum())
            # with the prior, a weekday seen only on dry days still has a finite estimate
            if _MIN_OCCURRENCES <= k <= n_fit - _MIN_OCCURRENCES:
                prior.append((len(cols), d))
                cols.append(col)
    if calendar:
        for c in _CALENDAR_TERMS:
            col = feats[c].to_numpy()
            k = int(col[fit].sum())
            if _MIN_OCCURRENCES <= k <= n_fit - _MIN_OCCURRENCES and col[exact].sum() >= 2:
                cols.append(col)
    return np.column_stack(cols), prior


def _profile(z: np.ndarray, censored: np.ndarray, usable: np.ndarray,
             dates: pd.DatetimeIndex, feats: pd.DataFrame, t: np.ndarray,
             profile: np.ndarray) -> tuple[np.ndarray | None, float, np.ndarray]:
    """Fit the profile model with outlier rounds.

    Returns the fitted log mean for every day (None without a model), the residual standard
    deviation and the outlier mask.
    """
    outlier = np.zeros(len(z), dtype=bool)
    if int((usable & ~censored).sum()) < _MIN_DAYS:
        return None, np.nan, outlier
    mu, s = None, np.nan
    for _ in range(_MAX_ROUNDS):
        fit = usable & ~outlier
        X, prior = _reduced_design(dates, feats, t, fit, fit & ~censored)
        # the prior only where the data cannot tell: a weekday with few exact days
        exact_days = np.bincount(dates.day_of_week.to_numpy()[fit & ~censored], minlength=7)
        # a weekday seen exactly on fewer than two days and without a prior has no estimate
        # (the censored likelihood would have no maximum): its term is left out
        drop = [c for c, d in prior if exact_days[d] < 2 and not np.isfinite(profile[d])]
        keep = np.setdiff1d(np.arange(X.shape[1]), drop)
        X = X[:, keep]
        where = {int(c): i for i, c in enumerate(keep)}
        prior = [(where[c], d) for c, d in prior
                 if c in where and exact_days[d] < _LEAN_DAYS and np.isfinite(profile[d])]
        columns = np.array([c for c, _ in prior], dtype=int)
        means = np.array([profile[d] for _, d in prior], dtype=float)
        beta, s = _tobit(X[fit], z[fit], censored[fit], (columns, means))
        mu = X @ beta
        score, scale_days = modified_z(z - mu, usable & ~censored,
                                       dates.day_of_week.to_numpy())
        exact = usable & ~censored
        limit = z_limit(int(usable.sum()), scale_days)
        new = (exact & (np.abs(score) > limit)) | (usable & censored & (score > limit))
        if np.array_equal(new, outlier):
            break
        outlier = new
    return mu, float(s), outlier


def z_limit(days: int, scale_days: np.ndarray | int | None = None) -> np.ndarray | float:
    """The flagging threshold for a series of ``days`` days: Iglewicz & Hoaglin's 3.5, raised
    for long series to the Bonferroni bound at ``1 − α / (2 n)`` with ``α = _SERIES_ALPHA``, so
    that a genuine series of any length gets a false flag with probability at most about ``α``
    (3.98 for two years of days under a known scale).

    The scale is not known: it is the MAD of the ``scale_days`` exact days behind each day's
    score (about a hundred per weekday in two years), and a MAD from ``n`` normal values is
    as precise as a standard deviation from ``0.37 n`` (its asymptotic efficiency, Rousseeuw &
    Croux 1993, *Alternatives to the Median Absolute Deviation*, JASA 88). The bound is
    therefore Student's t quantile with ``0.37 n − 1`` degrees of freedom (at least one), as
    for a studentised residual. Without ``scale_days`` the scale counts as known (the
    normal's quantile). Returns one threshold per day when ``scale_days`` is an array."""
    p = 1.0 - _SERIES_ALPHA / (2.0 * max(days, 1))
    if scale_days is None:
        return max(_Z_LIMIT, float(stats.norm.ppf(p)))
    df = np.maximum(_MAD_EFFICIENCY * np.asarray(scale_days, float) - 1.0, 1.0)
    limit = np.maximum(_Z_LIMIT, stats.t.ppf(p, df))
    return limit if limit.ndim else float(limit)


def modified_z(resid: np.ndarray, exact: np.ndarray,
               season: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Modified z-scores ``0.6745 · (r − median) / MAD`` of every day's residual (Iglewicz &
    Hoaglin 1993), median and MAD taken over the ``exact`` days of the day's ``season`` (the
    weekday) when it has at least ``_MIN_SCALE_DAYS`` of them, else over all exact days. A
    zero MAD (more than half the residuals equal) falls back to the mean absolute deviation
    times 1.2533 (their rule for that case).

    Returns the scores and, per day, the number of exact days its median and MAD came from
    (for :func:`z_limit`)."""
    score = np.zeros(len(resid))
    behind = np.zeros(len(resid), dtype=int)

    def scale(values: np.ndarray) -> tuple[float, float]:
        centre = float(np.median(values))
        mad = float(np.median(np.abs(values - centre)))
        if mad > 0:
            return centre, mad / _Z_FACTOR
        mean_ad = float(np.mean(np.abs(values - centre)))
        return centre, max(mean_ad * 1.2533, 1e-12)

    n_exact = int(exact.sum())
    overall = scale(resid[exact]) if n_exact else (0.0, 1.0)
    for s in np.unique(season):
        days = season == s
        own = exact & days
        n_own = int(own.sum())
        centre, spread = scale(resid[own]) if n_own >= _MIN_SCALE_DAYS else overall
        score[days] = (resid[days] - centre) / spread
        behind[days] = n_own if n_own >= _MIN_SCALE_DAYS else n_exact
    return score, behind


def _reduced_design(dates: pd.DatetimeIndex, feats: pd.DataFrame, t: np.ndarray,
                    fit: np.ndarray, exact: np.ndarray) -> np.ndarray:
    """The fullest design that leaves at least two exact observations per coefficient."""
    n = int(exact.sum())
    for level, calendar, weekday in ((True, True, True), (False, True, True),
                                     (False, False, True), (False, False, False)):
        X, prior = _design(dates, feats, t, fit, exact, level=level, calendar=calendar,
                           weekday=weekday)
        if n >= 2 * X.shape[1] + 2 or not weekday:
            return X, prior
    raise AssertionError("unreachable")


def _tobit(X: np.ndarray, z: np.ndarray, censored: np.ndarray,
           prior: tuple[np.ndarray, np.ndarray] | None = None) -> tuple[np.ndarray, float]:
    """Maximum-likelihood normal regression with right-censored rows (Tobit type I).

    ``z`` on censored rows is the lower bound. Without censored rows and prior this is
    ordinary least squares with the ML variance ``RSS / n``. Returns coefficients and the
    standard deviation.

    ``prior`` ``(columns, means)``: a normal prior ``beta_j ~ N(mean_j, (_PRIOR_SD · s)²)`` on
    those coefficients (the posterior mode is returned). Its scale follows the residual
    standard deviation ``s``, which keeps the objective concave in the parametrisation below.

    Newton's method in Olsen's parametrisation ``d = beta / s``, ``t = 1 / s``, in which the
    log-likelihood is globally concave (Olsen 1978, Econometrica 46(5) 1211-1215), and so is
    the prior term ``−(d_j − mean_j t)² / (2 _PRIOR_SD²)``; the iteration from the
    least-squares start converges in a handful of steps.
    """
    exact = ~censored
    cols, means = (np.zeros(0, int), np.zeros(0)) if prior is None else prior
    weight = 1.0 / _PRIOR_SD ** 2
    # normal equations (with the prior as pseudo-observations): the design is small and well
    # scaled, and a p × p solve is far cheaper than an SVD of the n × p design
    p = X.shape[1]
    gram = X[exact].T @ X[exact]
    rhs = X[exact].T @ z[exact]
    if cols.size:
        gram[cols, cols] += weight * 1e-2
        rhs[cols] += weight * 1e-2 * means
    beta, *_ = np.linalg.lstsq(gram, rhs, rcond=None)
    resid = z[exact] - X[exact] @ beta
    s0 = max(float(np.sqrt(np.mean(resid ** 2))) if resid.size else 1.0, 1e-6)
    if not censored.any() and not cols.size:
        return beta, s0
    Xe, ze, Xc, zc = X[exact], z[exact], X[censored], z[censored]

    def loglik(d: np.ndarray, t: float) -> float:
        r = t * ze - Xe @ d
        q = d[cols] - means * t
        return float(len(ze) * np.log(t) - 0.5 * r @ r
                     + special.log_ndtr(Xc @ d - t * zc).sum() - 0.5 * weight * q @ q)

    d, t = beta / s0, 1.0 / s0
    value = loglik(d, t)
    for _ in range(100):
        r = t * ze - Xe @ d
        w = Xc @ d - t * zc
        lam = np.exp(-0.5 * w * w - 0.5 * np.log(2 * np.pi) - special.log_ndtr(w))
        h = -lam * (w + lam)                      # d(lam)/dw, always <= 0
        q = d[cols] - means * t
        grad = np.append(Xe.T @ r + Xc.T @ lam, len(ze) / t - r @ ze - lam @ zc)
        grad[cols] -= weight * q
        grad[p] += weight * means @ q
        hess = np.empty((p + 1, p + 1))
        hess[:p, :p] = -(Xe.T @ Xe) + (Xc.T * h) @ Xc
        hess[:p, p] = hess[p, :p] = Xe.T @ ze - Xc.T @ (h * zc)
        hess[p, p] = -len(ze) / t ** 2 - ze @ ze + h @ (zc * zc)
        hess[cols, cols] -= weight
        hess[cols, p] += weight * means
        hess[p, cols] += weight * means
        hess[p, p] -= weight * means @ means
        try:
            step = np.linalg.solve(hess, -grad)
        except np.linalg.LinAlgError:
            step = np.linalg.lstsq(hess, -grad, rcond=None)[0]
        size = 1.0
        while True:   # step halving keeps the likelihood rising and t positive
            d_new, t_new = d + size * step[:p], t + size * step[p]
            if t_new > 0:
                new = loglik(d_new, t_new)
                if new >= value - 1e-12:
                    break
            size /= 2
            if size < 1e-8:
                return d / t, 1.0 / t
        d, t, gain, value = d_new, t_new, new - value, new
        if gain < 1e-10:
            break
    return d / t, 1.0 / t
