"""Tenors, month arithmetic, schedules, day counts and the weekday grid (fairpath.dates).

References outside the project: hand computation with the Gregorian calendar (weekday facts
were read off a calendar), QuantLib's date arithmetic (``Date + Period`` clips to the month's end,
``WeekendsOnly().adjust(d, Following)`` rolls Saturday/Sunday to Monday, ``Actual365Fixed`` and
``Actual360`` year fractions) and numpy's business-day counter ``np.busday_count``.
"""

from __future__ import annotations

import math
from datetime import date, timedelta

import numpy as np
import pytest
import QuantLib as ql
from hypothesis import given, settings
from hypothesis import strategies as st

from fairpath import InputError
from fairpath.dates import (
    DAY_COUNTS,
    Tenor,
    add_months,
    as_date,
    parse_tenor,
    roll_weekend,
    schedule_dates,
    weekdays_between,
    year_fraction,
)

SAT, SUN = 5, 6
DATES = st.dates(min_value=date(1990, 1, 1), max_value=date(2090, 12, 31))
QL_UNITS = {"D": ql.Days, "W": ql.Weeks, "M": ql.Months, "Y": ql.Years}


def to_ql(d: date) -> ql.Date:
    return ql.Date(d.day, d.month, d.year)


def from_ql(d: ql.Date) -> date:
    return date(d.year(), d.month(), d.dayOfMonth())


# ---------------------------------------------------------------------------------------------
# Tenors
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("text, count, unit", [
    ("1D", 1, "D"), ("2W", 2, "W"), ("3M", 3, "M"), ("1Y", 1, "Y"), ("18M", 18, "M"),
    ("6m", 6, "M"), (" 10y ", 10, "Y"), ("03M", 3, "M"), ("5 D", 5, "D"), ("120M", 120, "M"),
])
def test_parse_tenor_good(text, count, unit):
    assert parse_tenor(text) == Tenor(count, unit)


@pytest.mark.parametrize("text", [
    "", "M", "3", "0D", "0M", "-1M", "1.5Y", "3MM", "1Q", "M3", "3 months", "+3M", "1Y6M",
])
def test_parse_tenor_bad_strings(text):
    with pytest.raises(InputError, match="not a tenor"):
        parse_tenor(text)


@pytest.mark.parametrize("value", [3, 3.0, None, ["3M"], date(2027, 1, 1)])
def test_parse_tenor_not_a_string(value):
    with pytest.raises(InputError, match="must be a string"):
        parse_tenor(value)


def test_parse_tenor_error_names_source_and_key():
    with pytest.raises(InputError) as ei:
        parse_tenor("6X", source="trade.toml", key="fixings.every")
    assert isinstance(ei.value, ValueError)
    assert ei.value.source == "trade.toml" and ei.value.key == "fixings.every"
    assert str(ei.value).startswith("trade.toml: fixings.every: ")
    assert "'6X'" in str(ei.value)


@given(n=st.integers(1, 999), unit=st.sampled_from("DWMY"))
def test_tenor_round_trip(n, unit):
    assert str(parse_tenor(f"{n}{unit}")) == f"{n}{unit}"
    assert str(parse_tenor(f"{n}{unit.lower()}")) == f"{n}{unit}"


def test_tenor_add_to_days_and_weeks():
    # hand computation: no weekend roll in Tenor.add_to
    d = date(2026, 12, 1)
    assert Tenor(1, "D").add_to(d) == date(2026, 12, 2)
    assert Tenor(31, "D").add_to(d) == date(2027, 1, 1)
    assert Tenor(1, "W").add_to(d) == date(2026, 12, 8)
    assert Tenor(2, "W").add_to(d, times=3) == date(2027, 1, 12)
    assert Tenor(1, "D").add_to(date(2026, 12, 4)) == date(2026, 12, 5)  # a Saturday, kept
    assert Tenor(3, "M").add_to(d, times=0) == d


# ---------------------------------------------------------------------------------------------
# Month arithmetic (hand computation with the calendar)
# ---------------------------------------------------------------------------------------------
@pytest.mark.parametrize("start, months, expected", [
    (date(2027, 1, 31), 1, date(2027, 2, 28)),    # clipped to February's end
    (date(2028, 1, 31), 1, date(2028, 2, 29)),    # leap year
    (date(2027, 1, 31), 2, date(2027, 3, 31)),    # from the start date: no drift to the 28th
    (date(2027, 3, 31), 1, date(2027, 4, 30)),
    (date(2027, 8, 31), 1, date(2027, 9, 30)),
    (date(2027, 1, 30), 1, date(2027, 2, 28)),
    (date(2027, 1, 28), 1, date(2027, 2, 28)),
    (date(2027, 2, 28), 1, date(2027, 3, 28)),    # not moved to the month's end
    (date(2026, 12, 15), 1, date(2027, 1, 15)),   # year roll
    (date(2026, 12, 1), 6, date(2027, 6, 1)),
    (date(2026, 11, 30), 3, date(2027, 2, 28)),
    (date(2028, 2, 29), 12, date(2029, 2, 28)),   # 29 Feb + 1Y
    (date(2028, 2, 29), 48, date(2032, 2, 29)),   # 29 Feb + 4Y: a leap year again
    (date(2100, 1, 31), 1, date(2100, 2, 28)),    # 2100 is not a leap year
    (date(2000, 1, 31), 1, date(2000, 2, 29)),    # 2000 is
    (date(2027, 3, 31), -1, date(2027, 2, 28)),   # backwards too
    (date(2027, 1, 15), -1, date(2026, 12, 15)),
    (date(2027, 5, 31), 0, date(2027, 5, 31)),
])
def test_add_months(start, months, expected):
    assert add_months(start, months) == expected


@pytest.mark.parametrize("start, tenor, expected", [
    (date(2027, 1, 31), "1M", date(2027, 2, 28)),
    (date(2028, 2, 29), "1Y", date(2029, 2, 28)),
    (date(2027, 8, 31), "6M", date(2028, 2, 29)),
    (date(2026, 12, 1), "5Y", date(2031, 12, 1)),
])
def test_tenor_month_and_year_steps(start, tenor, expected):
    assert parse_tenor(tenor).add_to(start) == expected


@settings(max_examples=300, deadline=None)
@given(start=DATES, months=st.integers(0, 240))
def test_add_months_matches_quantlib(start, months):
    # reference: QuantLib's Date + Period(n, Months), which clips to the end of the month
    assert add_months(start, months) == from_ql(to_ql(start) + ql.Period(months, ql.Months))


# ---------------------------------------------------------------------------------------------
# Weekend roll and as_date
# ---------------------------------------------------------------------------------------------
def test_roll_weekend():
    # 4 Dec 2026 is a Friday (calendar)
    fri = date(2026, 12, 4)
    assert roll_weekend(fri) == fri
    assert roll_weekend(fri + timedelta(days=1)) == date(2026, 12, 7)   # Saturday -> Monday
    assert roll_weekend(fri + timedelta(days=2)) == date(2026, 12, 7)   # Sunday -> Monday
    assert roll_weekend(date(2026, 12, 7)) == date(2026, 12, 7)
    assert roll_weekend(date(2027, 1, 2)) == date(2027, 1, 4)            # across a year end


@given(d=DATES)
def test_roll_weekend_matches_quantlib(d):
    # reference: QuantLib's weekends-only calendar with the Following convention
    expected = from_ql(ql.WeekendsOnly().adjust(to_ql(d), ql.Following))
    assert roll_weekend(d) == expected


def test_as_date():
    assert as_date(date(2027, 12, 1)) == date(2027, 12, 1)
    assert as_date("2027-12-01") == date(2027, 12, 1)
    assert as_date(" 2027-12-01 ") == date(2027, 12, 1)
    from datetime import datetime
    for bad in ("2027-13-01", "1 Dec 2027", 20271201, None, datetime(2027, 12, 1, 10, 0)):
        with pytest.raises(InputError, match="expected a date"):
            as_date(bad, source="p.toml", key="expiry")


# ---------------------------------------------------------------------------------------------
# Schedules
# ---------------------------------------------------------------------------------------------
def test_schedule_semiannual():
    # hand computation: 1 Jun 2027 (Tue) every 6M; 1 Jun 2028 is a Thursday, 1 Dec 2029 a Saturday
    got = schedule_dates({"first": date(2027, 6, 1), "every": "6M", "count": 6})
    assert got == (date(2027, 6, 1), date(2027, 12, 1), date(2028, 6, 1), date(2028, 12, 1),
                   date(2029, 6, 1), date(2029, 12, 3))


def test_schedule_month_end_each_from_first_and_rolled():
    # 31 Jan 2027 is a Sunday -> Mon 1 Feb; 28 Feb 2027 is a Sunday -> Mon 1 Mar;
    # 31 Mar 2027 (Wed) shows that every date is computed from `first` (no drift to the 28th)
    got = schedule_dates({"first": date(2027, 1, 31), "every": "1M", "count": 4})
    assert got == (date(2027, 2, 1), date(2027, 3, 1), date(2027, 3, 31), date(2027, 4, 30))


def test_schedule_leap_year():
    # 31 Jan 2028 is a Monday, 29 Feb 2028 a Tuesday, 31 Mar 2028 a Friday
    got = schedule_dates({"first": date(2028, 1, 31), "every": "1M", "count": 3})
    assert got == (date(2028, 1, 31), date(2028, 2, 29), date(2028, 3, 31))
    # yearly from 29 Feb 2028: 28 Feb 2029 (Wed), 28 Feb 2030 (Thu), 28 Feb 2031 (Fri),
    # 29 Feb 2032 (Sun -> Mon 1 Mar)
    got = schedule_dates({"first": date(2028, 2, 29), "every": "1Y", "count": 5})
    assert got == (date(2028, 2, 29), date(2029, 2, 28), date(2030, 2, 28), date(2031, 2, 28),
                   date(2032, 3, 1))


def test_schedule_weekly_and_count_one():
    got = schedule_dates({"first": date(2026, 12, 8), "every": "1W", "count": 52})
    assert len(got) == 52
    assert got[0] == date(2026, 12, 8) and got[-1] == date(2027, 11, 30)
    assert all((b - a).days == 7 for a, b in zip(got, got[1:], strict=False))
    assert schedule_dates({"first": date(2026, 12, 5), "every": "1Y", "count": 1}) == (
        date(2026, 12, 7),)  # a Saturday `first` rolls too


def test_schedule_first_as_string():
    assert schedule_dates({"first": "2027-06-01", "every": "6M", "count": 2}) == (
        date(2027, 6, 1), date(2027, 12, 1))


def test_schedule_daily_across_a_weekend_is_refused():
    # Fri 4 Dec 2026 + 1D = Sat -> Mon, + 2D = Sun -> Mon: the same date twice
    with pytest.raises(InputError, match="twice"):
        schedule_dates({"first": date(2026, 12, 4), "every": "1D", "count": 3})
    # Mon to Fri with 1D is fine
    got = schedule_dates({"first": date(2026, 12, 7), "every": "1D", "count": 5})
    assert got == tuple(date(2026, 12, 7 + i) for i in range(5))


def test_explicit_dates_taken_as_written():
    spec = {"dates": [date(2027, 3, 6), date(2027, 6, 1), "2027-09-01"]}  # 6 Mar 2027 is a Sat
    assert schedule_dates(spec) == (date(2027, 3, 6), date(2027, 6, 1), date(2027, 9, 1))
    # a bare list is the same as {dates = [...]}
    assert schedule_dates([date(2027, 3, 6), date(2027, 3, 7)]) == (date(2027, 3, 6),
                                                                      date(2027, 3, 7))


@pytest.mark.parametrize("dates", [
    [date(2027, 6, 1), date(2027, 3, 1)],
    [date(2027, 6, 1), date(2027, 6, 1)],
    [date(2027, 3, 1), date(2027, 6, 1), date(2027, 5, 1)],
])
def test_explicit_dates_must_increase(dates):
    with pytest.raises(InputError, match="strictly increasing"):
        schedule_dates({"dates": dates}, source="note.toml", key="observations")


@pytest.mark.parametrize("spec, fragment, key", [
    ({"every": "6M", "count": 2}, "missing ['first']", "observations"),
    ({"first": date(2027, 6, 1), "count": 2}, "missing ['every']", "observations"),
    ({"first": date(2027, 6, 1), "every": "6M"}, "missing ['count']", "observations"),
    ({}, "missing ['count', 'every', 'first']", "observations"),
    ({"first": date(2027, 6, 1), "every": "6M", "count": 0}, "positive integer",
     "observations.count"),
    ({"first": date(2027, 6, 1), "every": "6M", "count": -3}, "positive integer",
     "observations.count"),
    ({"first": date(2027, 6, 1), "every": "6M", "count": 2.0}, "positive integer",
     "observations.count"),
    ({"first": date(2027, 6, 1), "every": "6M", "count": True}, "positive integer",
     "observations.count"),
    ({"first": date(2027, 6, 1), "every": "6M", "count": 2, "step": "1M"}, "unknown schedule key",
     "observations"),
    ({"first": date(2027, 6, 1), "every": "6Q", "count": 2}, "not a tenor", "observations.every"),
    ({"first": date(2027, 6, 1), "every": 6, "count": 2}, "tenor", "observations.every"),
    ({"first": "June 2027", "every": "6M", "count": 2}, "expected a date", "observations.first"),
    ({"dates": []}, "non-empty", "observations"),
    ({"dates": "2027-06-01"}, "non-empty list", "observations"),
    ({"dates": [date(2027, 6, 1)], "count": 1}, "takes no other key", "observations"),
    ({"dates": [date(2027, 6, 1), "soon"]}, "expected a date", "observations.dates[1]"),
])
def test_bad_schedules(spec, fragment, key):
    with pytest.raises(InputError) as ei:
        schedule_dates(spec, source="note.toml", key="observations")
    msg = str(ei.value)
    assert fragment in msg
    assert ei.value.key == key
    assert msg.startswith(f"note.toml: {key}: ")
    assert "\n" not in msg


@pytest.mark.parametrize("spec", ["6M", 6, None, date(2027, 6, 1)])
def test_schedule_not_a_table(spec):
    with pytest.raises(InputError, match="a schedule must be a table"):
        schedule_dates(spec)


@settings(max_examples=200, deadline=None)
@given(first=DATES, n=st.integers(1, 24), unit=st.sampled_from("WMY"), count=st.integers(1, 25))
def test_generated_schedule_property(first, n, unit, count):
    """For steps of a week or more: no weekend date, strictly increasing, each date the rolled
    `first + i * every` (reference: QuantLib's Date + Period and WeekendsOnly/Following)."""
    if unit == "Y":
        n = 1 + n % 4  # QuantLib's dates end in 2199
    got = schedule_dates({"first": first, "every": f"{n}{unit}", "count": count})
    assert len(got) == count
    assert all(d.weekday() not in (SAT, SUN) for d in got)
    assert all(a < b for a, b in zip(got, got[1:], strict=False))
    cal = ql.WeekendsOnly()
    for i, d in enumerate(got):
        raw = to_ql(first) + ql.Period(i * n, QL_UNITS[unit])
        assert d == from_ql(cal.adjust(raw, ql.Following))


@settings(max_examples=200, deadline=None)
@given(first=DATES, n=st.integers(1, 6), count=st.integers(1, 30))
def test_daily_schedule_property(first, n, count):
    """Day steps: either a valid weekday schedule or the duplicate-after-roll refusal."""
    spec = {"first": first, "every": f"{n}D", "count": count}
    try:
        got = schedule_dates(spec)
    except InputError as exc:
        assert "twice" in str(exc)
        assert n <= 2  # a 3-day step or longer never collides after the roll
        return
    assert all(d.weekday() not in (SAT, SUN) for d in got)
    assert all(a < b for a, b in zip(got, got[1:], strict=False))


# ---------------------------------------------------------------------------------------------
# Year fractions
# ---------------------------------------------------------------------------------------------
def test_year_fraction_by_hand():
    # hand computation: 2024 is a leap year (366 days), 1 Dec 2026 -> 1 Jun 2027 is 182 days
    assert year_fraction(date(2024, 1, 1), date(2025, 1, 1)) == 366 / 365
    assert year_fraction(date(2024, 1, 1), date(2025, 1, 1), "ACT/360") == 366 / 360
    assert year_fraction(date(2026, 12, 1), date(2027, 12, 1)) == 1.0
    assert year_fraction(date(2026, 12, 1), date(2027, 12, 1), "ACT/360") == 365 / 360
    assert year_fraction(date(2026, 12, 1), date(2027, 6, 1)) == 182 / 365
    assert year_fraction(date(2026, 12, 1), date(2026, 12, 1)) == 0.0
    assert year_fraction(date(2027, 12, 1), date(2026, 12, 1)) == -1.0   # negative backwards
    assert DAY_COUNTS == ("ACT/365F", "ACT/360")


@pytest.mark.parametrize("dc", ["ACT/365", "30/360", "act/365f", ""])
def test_year_fraction_unknown_day_count(dc):
    with pytest.raises(InputError, match="unknown day count") as ei:
        year_fraction(date(2026, 12, 1), date(2027, 12, 1), dc)
    assert "ACT/365F" in str(ei.value) and "ACT/360" in str(ei.value)


@given(a=DATES, b=DATES, c=DATES, dc=st.sampled_from(DAY_COUNTS))
def test_year_fraction_additive_and_antisymmetric(a, b, c, dc):
    ab, bc, ac = year_fraction(a, b, dc), year_fraction(b, c, dc), year_fraction(a, c, dc)
    assert math.isclose(ab + bc, ac, rel_tol=0, abs_tol=1e-12)
    assert year_fraction(b, a, dc) == -ab


@given(a=DATES, b=DATES)
def test_year_fraction_matches_quantlib(a, b):
    # reference: QuantLib's Actual365Fixed and Actual360 day counters
    a, b = min(a, b), max(a, b)
    assert math.isclose(year_fraction(a, b, "ACT/365F"),
                        ql.Actual365Fixed().yearFraction(to_ql(a), to_ql(b)), abs_tol=1e-14)
    assert math.isclose(year_fraction(a, b, "ACT/360"),
                        ql.Actual360().yearFraction(to_ql(a), to_ql(b)), abs_tol=1e-14)


# ---------------------------------------------------------------------------------------------
# The weekday grid
# ---------------------------------------------------------------------------------------------
def test_weekdays_between_by_hand():
    fri, sat, mon = date(2026, 12, 4), date(2026, 12, 5), date(2026, 12, 7)
    assert weekdays_between(fri, mon) == (mon,)                      # start excluded
    assert weekdays_between(fri, sat) == ()                           # only a Saturday
    assert weekdays_between(fri, fri) == ()
    assert weekdays_between(mon, fri) == ()                           # end before start
    assert weekdays_between(sat, date(2026, 12, 12)) == tuple(
        date(2026, 12, d) for d in range(7, 12))                      # Mon..Fri, end a Sat
    assert weekdays_between(date(2026, 12, 1), date(2026, 12, 4)) == (
        date(2026, 12, 2), date(2026, 12, 3), date(2026, 12, 4))      # end included
    # one year from Tue 1 Dec 2026 to Wed 1 Dec 2027: 52 weeks + 1 day = 261 weekdays
    assert len(weekdays_between(date(2026, 12, 1), date(2027, 12, 1))) == 261


@given(start=DATES, days=st.integers(-10, 800))
def test_weekdays_between_property(start, days):
    end = start + timedelta(days=days)
    grid = weekdays_between(start, end)
    assert all(start < d <= end for d in grid)
    assert all(d.weekday() < 5 for d in grid)
    assert all(a < b for a, b in zip(grid, grid[1:], strict=False))
    # reference: numpy's business-day counter over [start + 1, end + 1)
    expected = 0 if days <= 0 else int(np.busday_count(start + timedelta(days=1),
                                                       end + timedelta(days=1)))
    assert len(grid) == expected
