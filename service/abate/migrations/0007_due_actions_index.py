"""An index on corrective actions by status and due date, for the reminder run across all studies."""

from playhouse.migrate import migrate


def upgrade(database, migrator):
    """Add corrective_action (status, due_date): the daily run reads only unfinished actions due soon."""
    migrate(migrator.add_index("corrective_action", ("status", "due_date"), False))
