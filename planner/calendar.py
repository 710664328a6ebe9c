"""Calendar features of cash demand: paydays, public holidays and the days around them, events.

Withdrawals are multiplicative, so every feature here is meant as a regressor on the log scale:
the 0/1 indicators shift log demand by a coefficient the models estimate, and
``event_log_lift`` is the log of a lift the user states (``log(1.3)`` for +30 %).

Weekday dummies are deliberately absent: the models add weekly seasonality themselves.

A *business day* is Monday to Friday and not a public holiday of the scenario's country.
"""
from __future__ import annotations

from collections.abc import Container, Iterable

import numpy as np
import pandas as pd

from planner.scenario import CalendarSettings

FEATURE_COLUMNS = ("payday", "payday_next", "holiday", "holiday_eve", "holiday_after",
                   "event_log_lift")

# Paydays and holiday neighbours near the ends of the requested range depend on days outside
# it (the last business day of a month can lie a few days before the month's end, a holiday on
# the day after the range makes the last day its eve), so the work is done on a padded range.
_PAD_DAYS = 40


def public_holidays(years: Iterable[int], settings: CalendarSettings) -> dict[pd.Timestamp, str]:
    """Public holidays (date -> name) of ``settings.country`` / ``settings.subdivision``.

    Empty when no country is set. The country code was validated when the scenario was loaded.
    """
    if settings.country is None:
        return {}
    import holidays as hol

    table = hol.country_holidays(settings.country, subdiv=settings.subdivision,
                                 years=sorted(set(years)))
    return {pd.Timestamp(day): str(name) for day, name in sorted(table.items())}


def is_business_day(date: pd.Timestamp, holidays: Container) -> bool:
    """True when ``date`` is Monday to Friday and not in ``holidays``.

    ``holidays`` is any container of midnight :class:`pandas.Timestamp` (a set, or the dict
    from :func:`public_holidays`).
    """
    date = pd.Timestamp(date).normalize()
    return date.weekday() < 5 and date not in holidays


def business_day(date: pd.Timestamp, holidays: Container, *,
                 direction: str = "previous") -> pd.Timestamp:
    """The business day on ``date``, or the nearest one before it (``direction="previous"``)
    or after it (``direction="next"``) when ``date`` is a weekend day or a holiday.

    Raises ``ValueError`` for any other direction.
    """
    if direction not in ("previous", "next"):
        raise ValueError(f"direction must be 'previous' or 'next', got {direction!r}")
    step = pd.Timedelta(days=-1 if direction == "previous" else 1)
    day = pd.Timestamp(date).normalize()
    while not is_business_day(day, holidays):
        day += step
    return day


def payday_dates(start: pd.Timestamp, end: pd.Timestamp, rules: Iterable[str | int],
                 holidays: Container) -> pd.DatetimeIndex:
    """Paydays of every month touching ``start … end`` under the given rules.

    Rules: ``"last_business_day"``, ``"first_business_day"``, or a day of the month (capped at
    the month's length, moved to the previous business day on a weekend or holiday). The
    result may contain days just outside ``start … end``; it is sorted and unique.
    """
    months = pd.period_range(pd.Timestamp(start).to_period("M"),
                             pd.Timestamp(end).to_period("M"), freq="M")
    days: set[pd.Timestamp] = set()
    for month in months:
        first = month.start_time.normalize()
        last = month.end_time.normalize()
        for rule in rules:
            if rule == "last_business_day":
                days.add(business_day(last, holidays, direction="previous"))
            elif rule == "first_business_day":
                days.add(business_day(first, holidays, direction="next"))
            else:
                dom = min(int(rule), month.days_in_month)
                days.add(business_day(first + pd.Timedelta(days=dom - 1), holidays,
                                      direction="previous"))
    return pd.DatetimeIndex(sorted(days))


def calendar_features(dates: pd.DatetimeIndex, settings: CalendarSettings) -> pd.DataFrame:
    """Calendar regressors for each day of ``dates`` (float columns, index = ``dates``).

    Columns (0/1 unless stated):

    - ``payday``: a payday under any of ``settings.paydays``;
    - ``payday_next``: the calendar day after a payday;
    - ``holiday``: a public holiday (none when ``settings.country`` is None);
    - ``holiday_eve``: the calendar day before a holiday, itself not a holiday;
    - ``holiday_after``: the calendar day after a holiday, itself not a holiday;
    - ``event_log_lift``: sum of ``log(lift)`` of the custom events on that day (0 if none).

    Holiday neighbours exclude holidays so that runs such as 25/26 December give one eve
    (24th) and one day after (27th) instead of overlapping indicators.
    """
    index = pd.DatetimeIndex(dates).normalize()
    out = pd.DataFrame(0.0, index=pd.DatetimeIndex(dates, name="date"),
                       columns=list(FEATURE_COLUMNS))
    if len(index) == 0:
        return out
    pad = pd.Timedelta(days=_PAD_DAYS)
    lo, hi = index.min() - pad, index.max() + pad
    holidays = public_holidays(range(lo.year, hi.year + 1), settings)
    hol_days = pd.DatetimeIndex(sorted(holidays))
    pay_days = payday_dates(lo, hi, settings.paydays, holidays)
    one = pd.Timedelta(days=1)

    is_holiday = index.isin(hol_days)
    out["payday"] = index.isin(pay_days).astype(float)
    out["payday_next"] = index.isin(pay_days + one).astype(float)
    out["holiday"] = is_holiday.astype(float)
    out["holiday_eve"] = (index.isin(hol_days - one) & ~is_holiday).astype(float)
    out["holiday_after"] = (index.isin(hol_days + one) & ~is_holiday).astype(float)

    lift = np.zeros(len(index))
    for event in settings.events:
        lift += np.where(index == pd.Timestamp(event.date).normalize(), np.log(event.lift), 0.0)
    out["event_log_lift"] = lift
    return out
