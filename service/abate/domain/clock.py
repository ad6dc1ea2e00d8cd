"""The one notion of "now": naive UTC datetimes, as stored in the database."""

import datetime


def utcnow():
    """Return the current UTC time as a naive datetime with microseconds."""
    return datetime.datetime.now(datetime.UTC).replace(tzinfo=None)
