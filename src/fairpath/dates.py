"""Tenors, schedules, day counts and the weekday grid.

Conventions (docs/products.md): a tenor is ``"<n>D|W|M|Y"``; month and year steps keep the day of
month and clip it to the month's end (31 Jan + 1M = 28/29 Feb). A date generated from a schedule
that falls on a Saturday or Sunday rolls to the following Monday; explicit dates are taken as
written. There are no holiday calendars.
"""

from __future__ import annotations

import calendar
import re
from dataclasses import dataclass
from datetime import date, timedelta

from fairpath.errors import InputError
from fairpath.inputs import as_date, did_you_mean, show

DAY_COUNTS = ("ACT/365F", "ACT/360")
_TENOR = re.compile(r"^\s*(\d+)\s*([DWMY])\s*$", re.IGNORECASE)
#: Most dates a ``{first, every, count}`` schedule may generate (a weekly schedule over a
#: century is about 5,200; far more is a typo, and would only fill memory).
MAX_SCHEDULE_COUNT = 100_000
SCHEDULE_KEYS = ("first", "every", "count", "dates")


@dataclass(frozen=True, slots=True)
class Tenor:
    """A period such as 3 months: ``Tenor(3, "M")``."""

    count: int
    unit: str  # one of D W M Y

    def __str__(self) -> str:
        return f"{self.count}{self.unit}"

    def add_to(self, d: date, times: int = 1) -> date:
        """Return ``d`` moved forward by ``times`` of this tenor (no weekend roll).

        A date past the end of the calendar (year 9999) is an :class:`InputError`."""
        n = self.count * times
        try:
            if self.unit == "D":
                return d + timedelta(days=n)
            if self.unit == "W":
                return d + timedelta(weeks=n)
            months = n if self.unit == "M" else 12 * n
            return add_months(d, months)
        except (OverflowError, ValueError):
            raise InputError(f"{d} + {n}{self.unit} is past the end of the calendar (year 9999)"
                             ) from None


def add_months(d: date, months: int) -> date:
    """``d`` plus a number of months, the day clipped to the end of the target month."""
    y, m = divmod(d.month - 1 + months, 12)
    year, month = d.year + y, m + 1
    day = min(d.day, calendar.monthrange(year, month)[1])
    return date(year, month, day)


def parse_tenor(text: object, *, source: str | None = None, key: str | None = None) -> Tenor:
    """Parse ``"1D"``, ``"2W"``, ``"3M"``, ``"1Y"``.

    Examples
    --------
    >>> parse_tenor("6M")
    Tenor(count=6, unit='M')
    """
    if not isinstance(text, str):
        raise InputError(f"a tenor must be a string like \"6M\", got {show(text)}",
                         source=source, key=key)
    m = _TENOR.match(text)
    if m and len(m.group(1).lstrip("0")) > 6:
        raise InputError(f"tenor {show(text)} is longer than any calendar (at most 999999 "
                         "units)", source=source, key=key)
    if not m or int(m.group(1)) <= 0:
        raise InputError(f"not a tenor: {show(text)} (expected e.g. \"1D\", \"2W\", \"3M\", "
                         "\"1Y\")", source=source, key=key)
    return Tenor(int(m.group(1)), m.group(2).upper())


def roll_weekend(d: date) -> date:
    """Saturday and Sunday roll to the following Monday (an InputError past year 9999)."""
    wd = d.weekday()
    if wd >= 5 and d > date.max - timedelta(days=2):
        raise InputError(f"{d} would roll to a Monday past the end of the calendar (year 9999)")
    if wd == 5:
        return d + timedelta(days=2)
    if wd == 6:
        return d + timedelta(days=1)
    return d


def schedule_dates(spec: object, *, source: str | None = None, key: str | None = None
                   ) -> tuple[date, ...]:
    """Dates of a schedule given as ``{first, every, count}`` or ``{dates = [...]}``.

    Generated dates are ``first + i * every`` (each computed from ``first``, so month-end clipping
    does not drift), rolled off weekends. Explicit dates must be strictly increasing.

    Examples
    --------
    >>> schedule_dates({"first": date(2027, 6, 1), "every": "6M", "count": 2})
    (datetime.date(2027, 6, 1), datetime.date(2027, 12, 1))
    """
    if isinstance(spec, list | tuple):
        spec = {"dates": list(spec)}
    if not isinstance(spec, dict):
        raise InputError("a schedule must be a table {first, every, count} or {dates = [...]}, "
                         f"got {show(spec)}", source=source, key=key)
    keys = set(spec)
    if "dates" in keys:
        extra = keys - {"dates"}
        if extra:
            raise InputError(f"a schedule with 'dates' takes no other key, found {sorted(extra)}",
                             source=source, key=key)
        raw = spec["dates"]
        if not isinstance(raw, list) or not raw:
            raise InputError(f"'dates' must be a non-empty list of dates, got {show(raw)}",
                             source=source, key=key)
        out = []
        for i, d in enumerate(raw):
            out.append(as_date(d, source=source, key=f"{key}.dates[{i}]" if key else None))
        for a, b in zip(out, out[1:], strict=False):
            if b <= a:
                raise InputError(f"dates must be strictly increasing, {b} follows {a}",
                                 source=source, key=key)
        return tuple(out)
    required = {"first", "every", "count"}
    missing = required - keys
    extra = sorted(str(k) for k in keys - required)
    hint = "".join(f"; unknown {k!r}{did_you_mean(k, SCHEDULE_KEYS)}" for k in extra)
    if missing:
        raise InputError(f"a schedule needs {sorted(required)} or 'dates'; missing "
                         f"{sorted(missing)}{hint}", source=source, key=key)
    if extra:
        raise InputError(f"unknown schedule key(s) {extra}"
                         f"{did_you_mean(extra[0], SCHEDULE_KEYS)}; known: first, every, count, "
                         "dates", source=source, key=key)
    first = as_date(spec["first"], source=source, key=f"{key}.first" if key else "first")
    every = parse_tenor(spec["every"], source=source, key=f"{key}.every" if key else "every")
    count = spec["count"]
    count_key = f"{key}.count" if key else "count"
    if isinstance(count, bool) or not isinstance(count, int) or count < 1:
        raise InputError(f"count must be a positive integer, got {show(count)}", source=source,
                         key=count_key)
    if count > MAX_SCHEDULE_COUNT:
        raise InputError(f"count {count if count < 10**12 else show(count)} is more dates than "
                         f"any trade needs (at most {MAX_SCHEDULE_COUNT:,})", source=source,
                         key=count_key)
    try:
        out = [roll_weekend(every.add_to(first, i)) for i in range(count)]
    except InputError as exc:  # a date past year 9999
        raise InputError(exc.problem, source=source, key=key) from None
    for a, b in zip(out, out[1:], strict=False):
        if b <= a:  # only possible with a 1D step across a weekend
            raise InputError(f"the schedule generates {b} twice after the weekend roll; use a "
                             "longer step or explicit dates", source=source, key=key)
    return tuple(out)


def year_fraction(start: date, end: date, day_count: str = "ACT/365F") -> float:
    """Year fraction between two dates (negative when ``end`` precedes ``start``).

    Examples
    --------
    >>> year_fraction(date(2026, 12, 1), date(2027, 12, 1))
    1.0
    """
    days = (end - start).days
    if day_count == "ACT/365F":
        return days / 365.0
    if day_count == "ACT/360":
        return days / 360.0
    raise InputError(f"unknown day count {day_count!r}; known: {', '.join(DAY_COUNTS)}")


def weekdays_between(start: date, end: date) -> tuple[date, ...]:
    """Every weekday strictly after ``start`` up to and including ``end`` (the daily grid)."""
    out = []
    d = start + timedelta(days=1)
    while d <= end:
        if d.weekday() < 5:
            out.append(d)
        d += timedelta(days=1)
    return tuple(out)
