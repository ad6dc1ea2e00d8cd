"""A study's content revision: moved by every write that locks the study, so that a cached view of its
modes can tell it is current with one read of the study's row."""


def upgrade(database, migrator):
    """Add study.content_revision (0 for every existing study) in place on SQLite and PostgreSQL."""
    database.execute_sql("ALTER TABLE study ADD COLUMN content_revision INTEGER NOT NULL DEFAULT 0")
