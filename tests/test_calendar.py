"""Tests of planner.calendar: holidays, paydays, the days around them, custom events."""
from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from planner.demo import demo_path
from planner.calendar import (
    FEATURE_COLUMNS,
    business_day,
    calendar_features,
    is_business_day,
    payday_dates,
    public_holidays,
)
from planner.scenario import CalendarSettings, Event, load_scenario

DE = CalendarSettings(country="DE")
T = pd.Timestamp


def features(start: str, end: str, settings: CalendarSettings = DE) -> pd.DataFrame:
    return calendar_features(pd.date_range(start, end, freq="D"), settings)


@pytest.mark.parametrize("day, name", [
    # German nationwide public holidays (Gesetzliche Feiertage; Easter 2026 = 5 April)
    ("2025-12-25", "Christmas Day"),
    ("2025-12-26", "Second Day of Christmas"),
    ("2026-01-01", "New Year's Day"),
    ("2026-04-03", "Good Friday"),
    ("2026-04-06", "Easter Monday"),
    ("2026-05-14", "Ascension Day"),
    ("2026-10-03", "German Unity Day"),
])
def test_known_german_holidays(day: str, name: str) -> None:
    f = features("2025-12-01", "2026-12-31")
    assert f.at[T(day), "holiday"] == 1.0
    assert public_holidays([2025, 2026], DE)[T(day)] == name


def test_no_holidays_without_country() -> None:
    f = features("2025-12-01", "2026-12-31", CalendarSettings(country=None))
    assert f["holiday"].sum() == 0
    assert f["holiday_eve"].sum() == 0 and f["holiday_after"].sum() == 0


def test_subdivision_adds_regional_holidays() -> None:
    # Epiphany (6 January) is a public holiday in Bavaria, not nationwide (recalled)
    by = features("2026-01-01", "2026-01-31", CalendarSettings(country="DE", subdivision="BY"))
    de = features("2026-01-01", "2026-01-31")
    assert by.at[T("2026-01-06"), "holiday"] == 1.0
    assert de.at[T("2026-01-06"), "holiday"] == 0.0


def test_holiday_neighbours() -> None:
    f = features("2026-12-01", "2026-12-31")
    assert f.at[T("2026-12-24"), "holiday_eve"] == 1.0
    # 25 December is a holiday itself, so not the eve of the 26th
    assert f.at[T("2026-12-25"), "holiday_eve"] == 0.0
    assert f.at[T("2026-12-26"), "holiday_after"] == 0.0
    assert f.at[T("2026-12-27"), "holiday_after"] == 1.0
    # 31 December is the eve of New Year's Day, which lies outside the requested range
    assert f.at[T("2026-12-31"), "holiday_eve"] == 1.0
    # first day of a range: the day after a holiday that lies before the range
    g = features("2026-10-04", "2026-10-10")
    assert g.at[T("2026-10-04"), "holiday_after"] == 1.0


def test_last_business_day_of_may_2026_is_friday_29() -> None:
    f = features("2026-05-01", "2026-06-30")
    paydays = f.index[f["payday"] == 1.0]
    # 30/31 May 2026 are Saturday/Sunday; 30 June 2026 is a Tuesday
    assert list(paydays) == [T("2026-05-29"), T("2026-06-30")]
    assert f.at[T("2026-05-30"), "payday_next"] == 1.0


def test_day_of_month_payday_on_saturday_moves_to_friday() -> None:
    # 15 August 2026 is a Saturday (and not a nationwide holiday in Germany)
    f = features("2026-08-01", "2026-08-31", CalendarSettings(country="DE", paydays=(15,)))
    assert list(f.index[f["payday"] == 1.0]) == [T("2026-08-14")]
    assert f.at[T("2026-08-15"), "payday_next"] == 1.0


def test_day_of_month_payday_on_holiday_moves_back_over_weekend() -> None:
    # 6 April 2026 is Easter Monday; the previous business day is Thursday 2 April
    # (Good Friday 3 April is a holiday too)
    days = payday_dates(T("2026-04-01"), T("2026-04-30"), (6,),
                        public_holidays([2026], DE))
    assert list(days) == [T("2026-04-02")]


def test_day_of_month_is_capped_at_month_length() -> None:
    # rule 31 in February 2026 -> 28 February is a Saturday -> Friday 27 February
    days = payday_dates(T("2026-02-01"), T("2026-02-28"), (31,), {})
    assert list(days) == [T("2026-02-27")]


def test_first_business_day_skips_new_year() -> None:
    f = features("2026-01-01", "2026-01-31",
                 CalendarSettings(country="DE", paydays=("first_business_day",)))
    # 1 January 2026 is a Thursday and a holiday -> Friday 2 January
    assert list(f.index[f["payday"] == 1.0]) == [T("2026-01-02")]


def test_several_rules_combine() -> None:
    f = features("2026-03-01", "2026-03-31",
                 CalendarSettings(country="DE", paydays=("last_business_day", 15)))
    # 15 March 2026 is a Sunday -> Friday 13 March; 31 March 2026 is a Tuesday
    assert list(f.index[f["payday"] == 1.0]) == [T("2026-03-13"), T("2026-03-31")]


def test_business_day_helpers() -> None:
    hol = public_holidays([2026], DE)
    assert is_business_day(T("2026-04-02"), hol)
    assert not is_business_day(T("2026-04-03"), hol)      # Good Friday
    assert not is_business_day(T("2026-04-04"), hol)      # Saturday
    assert business_day(T("2026-04-06"), hol) == T("2026-04-02")
    assert business_day(T("2026-04-03"), hol, direction="next") == T("2026-04-07")
    assert business_day(T("2026-04-07"), hol) == T("2026-04-07")
    with pytest.raises(ValueError):
        business_day(T("2026-04-07"), hol, direction="sideways")


def test_events_give_log_lift() -> None:
    settings = CalendarSettings(country="DE", events=(
        Event(T("2026-11-20"), 1.3, "town fair"),
        Event(T("2026-11-21"), 0.8, "road works"),
        Event(T("2026-11-21"), 1.5, "market"),
    ))
    f = features("2026-11-15", "2026-11-25", settings)
    assert f.at[T("2026-11-20"), "event_log_lift"] == pytest.approx(np.log(1.3))
    # two events on one day multiply their lifts
    assert f.at[T("2026-11-21"), "event_log_lift"] == pytest.approx(np.log(0.8 * 1.5))
    assert (f["event_log_lift"] != 0).sum() == 2


def test_frame_shape_and_types() -> None:
    dates = pd.date_range("2025-01-01", "2027-12-31", freq="D")
    f = calendar_features(dates, DE)
    assert tuple(f.columns) == FEATURE_COLUMNS
    assert f.index.equals(dates)
    assert all(f[c].dtype == np.float64 for c in f.columns)
    assert set(np.unique(f.drop(columns="event_log_lift").to_numpy())) <= {0.0, 1.0}
    # one last-business-day payday per month, always Monday to Friday
    pay = f.index[f["payday"] == 1.0]
    assert len(pay) == 36 and (pay.day_of_week < 5).all()
    assert not f.loc[pay, "holiday"].any()
    # features do not depend on the range asked for
    part = calendar_features(dates[400:430], DE)
    pd.testing.assert_frame_equal(part, f.iloc[400:430])


def test_empty_dates() -> None:
    f = calendar_features(pd.DatetimeIndex([]), DE)
    assert f.empty and tuple(f.columns) == FEATURE_COLUMNS


def test_tiny_scenario_calendar() -> None:
    scenario = load_scenario(demo_path("tiny"))
    dates = pd.date_range(scenario.dispense["date"].min(), scenario.start_date, freq="D")
    f = calendar_features(dates, scenario.calendar)
    assert f.at[T("2026-10-03"), "holiday"] == 1.0
    assert f.at[T("2026-09-30"), "payday"] == 1.0       # Wednesday
    assert f.at[T("2026-10-30"), "payday"] == 1.0       # Friday; 31 October is a Saturday
