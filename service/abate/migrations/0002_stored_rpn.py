"""Store each failure mode's RPN, backfilled from its ratings, and index it for ranking."""

from playhouse.migrate import migrate


def upgrade(database, migrator):
    """Add failure_mode.rpn = S x O x D for every row and index (study, status, rpn)."""
    # ADD COLUMN ... NOT NULL DEFAULT works in place on both SQLite and PostgreSQL; a table
    # rebuild on SQLite would trip the foreign keys that risk events hold on modes.
    database.execute_sql("ALTER TABLE failure_mode ADD COLUMN rpn INTEGER NOT NULL DEFAULT 0")
    database.execute_sql("UPDATE failure_mode SET rpn = severity * occurrence * detection")
    migrate(
        migrator.drop_index("failure_mode", "failure_mode_study_id_status"),
        migrator.add_index("failure_mode", ("study_id", "status", "rpn"), False),
    )
