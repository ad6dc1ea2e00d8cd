"""External references: a study's, mode's or action's key in another system, unique per system."""

import peewee as pw

from abate.db import database
from abate.errors import Conflict, NotFound


def set_reference(row, reference):
    """Put {system, key} (or None) on an unsaved row; a key another row of its kind holds is a Conflict."""
    model = type(row)
    if reference:
        taken = model.select().where(
            (model.external_system == reference["system"]) & (model.external_key == reference["key"])
        )
        if row.id is not None:
            taken = taken.where(model.id != row.id)
        if taken.exists():
            raise Conflict(
                f"another {model.__name__} already carries the reference {reference['system']}/{reference['key']}"
            )
    row.external_system = reference["system"] if reference else None
    row.external_key = reference["key"] if reference else None


def save_referenced(row):
    """Save a row whose reference may race another writer's: the unique index has the last word."""
    try:
        with database.atomic():
            row.save()
    except pw.IntegrityError as error:
        raise Conflict(f"another {type(row).__name__} already carries this external reference") from error


def reference_view(row):
    """{system, key} or None."""
    return {"system": row.external_system, "key": row.external_key} if row.external_system else None


def find_by_reference(model, system, key):
    """The row of model carrying system/key, or NotFound."""
    row = model.get_or_none((model.external_system == system) & (model.external_key == key))
    if row is None:
        raise NotFound(f"nothing carries the reference {system}/{key}")
    return row


def reference_filter(query, model, system=None, key=None):
    """Narrow query to an external system and/or key."""
    if system is not None:
        query = query.where(model.external_system == system)
    if key is not None:
        query = query.where(model.external_key == key)
    return query
