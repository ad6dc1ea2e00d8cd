"""Keyset (cursor) pagination over any peewee query with a stable, total order."""

import base64
import datetime
import json
from dataclasses import dataclass

import peewee as pw

from abate.errors import ValidationFailed, field_error
from abate.prepared import fetch_all


@dataclass
class Page:
    """One page of rows and the opaque cursor of the next page (None on the last)."""

    rows: list
    next_cursor: str | None


def _encode(values):
    plain = [value.isoformat() if isinstance(value, datetime.date) else value for value in values]
    return base64.urlsafe_b64encode(json.dumps(plain).encode()).decode().rstrip("=")


def _decode(cursor, order):
    try:
        padded = cursor + "=" * (-len(cursor) % 4)
        values = json.loads(base64.urlsafe_b64decode(padded.encode()).decode())
        if not isinstance(values, list) or len(values) != len(order):
            raise ValueError("wrong length")
        return [_decode_value(field, value) for (field, _), value in zip(order, values, strict=True)]
    except (ValueError, TypeError, OverflowError) as error:
        raise ValidationFailed(
            "the cursor is not one this list handed out",
            errors=[field_error("cursor", "malformed; pass the `next` link of a previous page as it is", "query")],
        ) from error


def _decode_value(field, value):
    if isinstance(field, pw.DateTimeField):
        return datetime.datetime.fromisoformat(value)
    if isinstance(field, pw.DateField):
        return datetime.date.fromisoformat(value)
    return int(value)


def _after(order, values):
    """Rows strictly after the cursor row in the given order (lexicographic, mixed directions)."""
    condition = None
    for position, (field, descending) in enumerate(order):
        step = field < values[position] if descending else field > values[position]
        for earlier, (earlier_field, _) in enumerate(order[:position]):
            step = step & (earlier_field == values[earlier])
        condition = step if condition is None else condition | step
    return condition


def paginate(query, order, limit, cursor=None):
    """Return a Page of query ordered by order, [(field, descending)], whose last entry is unique."""
    if cursor:
        query = query.where(_after(order, _decode(cursor, order)))
    query = query.order_by(*[field.desc() if descending else field.asc() for field, descending in order])
    rows = fetch_all(query.limit(limit + 1))
    if len(rows) <= limit:
        return Page(rows, None)
    rows = rows[:limit]
    last = rows[-1]
    return Page(rows, _encode([getattr(last, field.name) for field, _ in order]))
