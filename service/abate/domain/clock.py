"""The one notion of "now": naive UTC datetimes, as stored in the database."""

import datetime
import zoneinfo


def utcnow():
    """Return the current UTC time as a naive datetime with microseconds."""
    return datetime.datetime.now(datetime.UTC).replace(tzinfo=None)


def local_today(timezone_name, now=None):
    """The calendar date now in an IANA time zone (a study's "today")."""
    moment = (now or utcnow()).replace(tzinfo=datetime.UTC)
    return moment.astimezone(zoneinfo.ZoneInfo(timezone_name)).date()
