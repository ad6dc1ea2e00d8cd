"""The last run of each scheduled job: when it started and finished, and whether it went well.

The model here is a frozen copy of the schema as it was at this migration; later changes
belong in later migrations, never here.
"""

import peewee as pw


def _models(database):
    class Base(pw.Model):
        class Meta:
            legacy_table_names = False

    class SchedulerRun(Base):
        job = pw.CharField(max_length=100, unique=True)
        started_at = pw.DateTimeField()
        finished_at = pw.DateTimeField()
        outcome = pw.CharField(max_length=16)
        error = pw.TextField(default="")

    models = [SchedulerRun]
    database.bind(models, bind_refs=False, bind_backrefs=False)
    return models


def upgrade(database, migrator):
    """Create scheduler_run, one row per job name."""
    database.create_tables(_models(database))
