"""Calendar effects the scenario does not declare: found in the cleaned history, told to the user.

The forecast uses only the calendar the scenario declares (``[calendar]`` in scenario.toml). A
monthly effect left out — a payday on a day of the month nobody wrote down — makes narrow
bands around a wrong centre, and nothing in the forecast itself would hint at it. This check
looks for such effects and says what it found, how strong, in how many months, and the line to
add; it never adds the effect by itself.

Method: the calendar-adjusted log residuals of the cleaning stage's profile model
(``log(1 + demand) − log(1 + expected)`` on ``ok`` days, :mod:`planner.cleaning`), pooled over
the network. For every candidate rule — each day of the month (moved to the previous business
day as paydays are), the first and the last business day — not already declared (nor falling
mostly on a declared payday or the day after one), the candidate days' mean residual is
compared with the other days':

- the lift ``exp(mean difference) − 1``;
- a z-statistic with the residual standard deviation, the residuals' lag-1 autocorrelation
  counted in (an AR(1) variance inflation ``(1 + ρ) / (1 − ρ)``, common practice);
- in how many months the network's mean residual on that rule's day was above the month's
  mean.

An effect is reported when ``z`` passes the Bonferroni bound over all candidates at
``ALPHA`` (one-sided), the lift is at least ``MIN_LIFT`` and it showed in at least
``MIN_MONTH_SHARE`` of the months. A weaker find on the day before a stronger one or up to
``SHADOW_DAYS`` after it (where a payday's lift lingers) is the same effect and is not listed.
"""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import stats

from planner.calendar import payday_dates, public_holidays

ALPHA = 0.001            # family-wise false alarm rate over all candidate rules
MIN_LIFT = 0.05          # smallest lift worth a line in scenario.toml
MIN_MONTH_SHARE = 0.7    # months in which it must show
SHADOW_DAYS = 3          # days after a found effect where a weaker find is the same effect
CANDIDATES: tuple[str | int, ...] = ("first_business_day", "last_business_day",
                                     *range(1, 32))


def _rule_text(rule: str | int) -> str:
    return rule.replace("_", " ") if isinstance(rule, str) else f"day {rule} of the month"


def undeclared_effects(scenario, clean) -> pd.DataFrame:
    """Monthly effects in the cleaned history that ``scenario.calendar`` does not declare.

    One row per effect found, strongest first: ``effect`` (plain words), ``rule`` (as
    scenario.toml writes it), ``lift`` (share above other days), ``z``, ``months_shown``,
    ``months``, ``add`` (the setting to write). Empty when there is nothing to tell.
    """
    columns = ["effect", "rule", "lift", "z", "months_shown", "months", "add"]
    daily = clean.daily
    ok = daily[(daily["flag"] == "ok") & daily["expected"].notna()]
    if ok.empty:
        return pd.DataFrame(columns=columns)
    resid = (np.log1p(ok["demand"].to_numpy(dtype=float))
             - np.log1p(ok["expected"].to_numpy(dtype=float)))
    dates = pd.DatetimeIndex(ok["date"])
    lo, hi = dates.min(), dates.max()
    settings = scenario.calendar
    holidays = public_holidays(range(lo.year, hi.year + 1), settings)
    declared = payday_dates(lo, hi, settings.paydays, holidays)
    near = declared
    for k in range(-1, SHADOW_DAYS + 1):
        near = near.union(declared + pd.Timedelta(days=k))
    month = dates.to_period("M")
    month_mean = pd.Series(resid).groupby(month).transform("mean").to_numpy()
    # the residuals' own dependence: lag-1 autocorrelation within terminals
    frame = pd.DataFrame({"t": ok["terminal_id"].to_numpy(), "r": resid})
    lag = frame.groupby("t")["r"].shift(1).to_numpy()
    both = ~np.isnan(lag)
    rho = float(np.corrcoef(resid[both], lag[both])[0, 1]) if both.sum() > 10 else 0.0
    inflation = (1 + max(rho, 0.0)) / (1 - max(rho, 0.0))
    sd = float(np.std(resid))
    candidates = [r for r in CANDIDATES if r not in tuple(settings.paydays)]
    bound = float(stats.norm.ppf(1 - ALPHA / max(len(candidates), 1)))
    rule_days = {r: payday_dates(lo, hi, [r], holidays) for r in candidates}
    rows = []
    # greedy: the strongest effect first; its days and the days its lift lingers then leave
    # the comparison, so a weaker rule that shares some of its days is not the same effect
    # found twice
    shadow = near
    while True:
        best = None
        for rule in candidates:
            days = rule_days[rule]
            if len(days) == 0 or days.isin(shadow).mean() > 0.5:
                continue
            free = ~dates.isin(shadow)
            on = dates.isin(days) & free
            off = ~dates.isin(days) & free
            n_on, n_off = int(on.sum()), int(off.sum())
            if n_on < 3 or n_off < 3:
                continue
            diff = float(resid[on].mean() - resid[off].mean())
            se = sd * np.sqrt(inflation * (1 / n_on + 1 / n_off))
            z = diff / se if se > 0 else 0.0
            by_month = pd.Series(resid[on] - month_mean[on]).groupby(month[on]).mean()
            shown = int((by_month > 0).sum())
            lift = float(np.exp(diff) - 1)
            if (z > bound and lift >= MIN_LIFT and shown >= MIN_MONTH_SHARE * len(by_month)
                    and (best is None or z > best["z"])):
                rule_toml = f'"{rule}"' if isinstance(rule, str) else str(rule)
                best = {"effect": f"{_rule_text(rule)}: demand {lift:+.0%} on that day",
                        "rule": rule, "lift": lift, "z": z, "months_shown": shown,
                        "months": int(len(by_month)),
                        "add": f"add {rule_toml} to calendar.paydays in scenario.toml"}
        if best is None:
            break
        rows.append(best)
        candidates.remove(best["rule"])
        for k in range(-1, SHADOW_DAYS + 1):
            shadow = shadow.union(rule_days[best["rule"]] + pd.Timedelta(days=k))
    return pd.DataFrame(rows, columns=columns)
