"""History buckets against the calendar: ISO 8601 weeks by datetime.isocalendar(), midnights by zoneinfo."""

import datetime
import zoneinfo

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from abate.domain.history import interval_start, local_midnight_utc, periods
from abate.errors import ValidationFailed

HOUR = datetime.timedelta(hours=1)
# Zones with and without daylight saving; Santiago changes its clocks at midnight itself.
ZONES = ("UTC", "Europe/Berlin", "America/New_York", "America/Santiago", "Australia/Lord_Howe", "Asia/Kolkata")


def utc_of_local_midnight(day, zone):
    """Local midnight as a naive UTC instant, straight from the IANA tz database via zoneinfo."""
    local = datetime.datetime(day.year, day.month, day.day, tzinfo=zoneinfo.ZoneInfo(zone))
    return local.astimezone(datetime.UTC).replace(tzinfo=None)


def iso_week_label(day):
    """The ISO 8601 week of day as datetime.date.isocalendar() gives it, spelled YYYY-Www."""
    year, week, _ = day.isocalendar()
    return f"{year}-W{week:02d}"


def only_period(day, interval, zone="UTC"):
    [period] = periods(day, day, interval, zone)
    return period


@pytest.mark.parametrize(
    ("day", "label"),
    [
        ("2026-12-28", "2026-W53"),  # a Monday; 2026 starts on a Thursday, so it has 53 ISO weeks
        ("2027-01-03", "2026-W53"),  # Sunday: still the old ISO year
        ("2027-01-04", "2027-W01"),  # Monday: the first week of 2027
        ("2026-01-01", "2026-W01"),  # Thursday: the week holding the year's first Thursday is week 1
        ("2024-12-30", "2025-W01"),  # a Monday in December that belongs to the next ISO year
    ],
)
def test_week_buckets_at_year_boundaries_follow_isocalendar(day, label):
    day = datetime.date.fromisoformat(day)
    week = only_period(day, "week")
    assert iso_week_label(day) == label  # datetime.date.isocalendar() is the reference (ISO 8601)
    assert week.label == label
    assert week.start == datetime.date.fromisocalendar(*day.isocalendar()[:2], 1)
    assert week.start.isoweekday() == 1 and week.end - week.start == datetime.timedelta(days=7)
    assert week.start <= day < week.end


def test_day_buckets_are_the_local_calendar_day():
    day = only_period(datetime.date(2026, 2, 28), "day")
    assert (day.label, day.start, day.end) == ("2026-02-28", datetime.date(2026, 2, 28), datetime.date(2026, 3, 1))
    assert day.end_utc - day.start_utc == 24 * HOUR


@pytest.mark.parametrize(
    ("day", "label", "start", "end"),
    [
        ("2026-02-14", "2026-02", "2026-02-01", "2026-03-01"),
        ("2028-02-29", "2028-02", "2028-02-01", "2028-03-01"),  # leap day
        ("2026-12-31", "2026-12", "2026-12-01", "2027-01-01"),  # December rolls into the next year
        ("2026-01-01", "2026-01", "2026-01-01", "2026-02-01"),
    ],
)
def test_month_buckets_run_from_the_first_to_the_first_of_the_next_month(day, label, start, end):
    month = only_period(datetime.date.fromisoformat(day), "month")
    assert (month.label, month.start.isoformat(), month.end.isoformat()) == (label, start, end)


def test_the_berlin_day_when_summer_time_ends_lasts_25_hours():
    # Summer time in the EU ends on the last Sunday of October, 2026-10-25, clocks going from
    # 03:00 CEST back to 02:00 CET (EU Directive 2000/84/EC, from memory); the instants below are
    # computed independently from the IANA tz database via zoneinfo.
    day = only_period(datetime.date(2026, 10, 25), "day", "Europe/Berlin")
    assert day.start_utc == utc_of_local_midnight(datetime.date(2026, 10, 25), "Europe/Berlin")
    assert day.end_utc == utc_of_local_midnight(datetime.date(2026, 10, 26), "Europe/Berlin")
    assert day.start_utc == datetime.datetime(2026, 10, 24, 22)  # midnight CEST is UTC+2
    assert day.end_utc == datetime.datetime(2026, 10, 25, 23)  # midnight CET is UTC+1
    assert day.end_utc - day.start_utc == 25 * HOUR


def test_the_berlin_week_holding_the_change_lasts_one_hour_more_than_seven_days():
    week = only_period(datetime.date(2026, 10, 21), "week", "Europe/Berlin")
    assert week.label == iso_week_label(datetime.date(2026, 10, 21)) == "2026-W43"
    assert (week.start, week.end) == (datetime.date(2026, 10, 19), datetime.date(2026, 10, 26))
    assert week.end_utc - week.start_utc == 7 * 24 * HOUR + HOUR


def test_the_new_york_day_when_daylight_saving_starts_lasts_23_hours():
    # US daylight saving time starts on the second Sunday of March, 2026-03-08, at 02:00 local
    # (US Energy Policy Act of 2005, from memory); instants from the IANA tz database via zoneinfo.
    day = only_period(datetime.date(2026, 3, 8), "day", "America/New_York")
    assert day.start_utc == utc_of_local_midnight(datetime.date(2026, 3, 8), "America/New_York")
    assert day.end_utc == utc_of_local_midnight(datetime.date(2026, 3, 9), "America/New_York")
    assert (day.start_utc, day.end_utc) == (datetime.datetime(2026, 3, 8, 5), datetime.datetime(2026, 3, 9, 4))
    assert day.end_utc - day.start_utc == 23 * HOUR


def test_local_midnight_utc_agrees_with_zoneinfo_on_both_sides_of_a_change():
    for day in (datetime.date(2026, 3, 28), datetime.date(2026, 3, 29), datetime.date(2026, 10, 26)):
        assert local_midnight_utc(day, "Europe/Berlin") == utc_of_local_midnight(day, "Europe/Berlin")
    # Without daylight saving the local midnight is the same hour all year (UTC+05:30, IANA tz via zoneinfo).
    assert local_midnight_utc(datetime.date(2026, 7, 1), "Asia/Kolkata") == datetime.datetime(2026, 6, 30, 18, 30)


def test_an_unknown_interval_is_refused():
    with pytest.raises(ValidationFailed) as refused:
        periods(datetime.date(2026, 5, 1), datetime.date(2026, 5, 2), "fortnight", "UTC")
    assert [error["field"] for error in refused.value.errors] == ["interval"]


def test_a_range_ending_before_it_starts_is_refused():
    with pytest.raises(ValidationFailed) as refused:
        periods(datetime.date(2026, 5, 2), datetime.date(2026, 5, 1), "day", "UTC")
    assert [error["field"] for error in refused.value.errors] == ["to"]


dates = st.dates(min_value=datetime.date(1990, 1, 1), max_value=datetime.date(2060, 12, 31))


@settings(max_examples=200, deadline=None, database=None)
@given(dates)
def test_interval_start_is_the_first_day_of_the_day_iso_week_or_month(day):
    assert interval_start(day, "day") == day
    year, week, _ = day.isocalendar()
    assert interval_start(day, "week") == datetime.date.fromisocalendar(year, week, 1)
    assert interval_start(day, "month") == datetime.date(day.year, day.month, 1)


@settings(max_examples=150, deadline=None, database=None)
@given(
    first=dates,
    span=st.integers(min_value=0, max_value=400),
    interval=st.sampled_from(["day", "week", "month"]),
    zone=st.sampled_from(ZONES),
)
def test_periods_are_contiguous_and_cover_the_range(first, span, interval, zone):
    last = first + datetime.timedelta(days=span)
    found = periods(first, last, interval, zone)
    assert found[0].start <= first < found[0].end
    assert found[-1].start <= last < found[-1].end
    for previous, period in zip(found, found[1:], strict=False):
        assert period.start == previous.end and period.start_utc == previous.end_utc
    for period in found:
        assert period.start < period.end and period.start_utc < period.end_utc
        assert period.start_utc == utc_of_local_midnight(period.start, zone)
        assert period.end_utc == utc_of_local_midnight(period.end, zone)
        if interval == "week":
            assert period.start.isoweekday() == 1 and period.label == iso_week_label(period.start)
        elif interval == "month":
            assert period.start.day == 1 and period.label == period.start.strftime("%Y-%m")
        else:
            assert period.end - period.start == datetime.timedelta(days=1)
    assert len({period.label for period in found}) == len(found)
