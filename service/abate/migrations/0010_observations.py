"""Observed failures feed occurrence: rate bands on occurrence levels, a study's observation settings,
the observations themselves, drift notices for the owners' digests, and the observations a re-rating
rests on.

The models here are frozen copies of the schema as it was at this migration; later changes belong in
later migrations, never here.
"""

import peewee as pw

from abate.domain.builtin_scales import BUILTIN_OCCURRENCE_BANDS


def _timestamp(database):
    return "TIMESTAMP" if isinstance(database, pw.PostgresqlDatabase) else "DATETIME"


def _columns(database):
    return {
        "scale_set": (("occurrence_rate_basis", "VARCHAR(32)"),),
        "scale_level": (("rate_from", "DOUBLE PRECISION"),),
        "study": (
            ("observation_window_days", "INTEGER NOT NULL DEFAULT 365"),
            ("observation_confidence", "DOUBLE PRECISION NOT NULL DEFAULT 0.9"),
            ("observation_estimate", "VARCHAR(16) NOT NULL DEFAULT 'upper_bound'"),
            ("occurrence_bands", "TEXT"),
        ),
        "failure_mode": (("occurrence_drift_since", _timestamp(database)),),
        "risk_event": (("observation_ids", "TEXT"),),
    }


def _models(database):
    class Base(pw.Model):
        class Meta:
            legacy_table_names = False

    class ScaleSet(Base):
        name = pw.CharField(max_length=200, unique=True)

    class Study(Base):
        title = pw.CharField(max_length=300)

    class FailureMode(Base):
        study = pw.ForeignKeyField(Study, on_delete="RESTRICT")

    class CorrectiveAction(Base):
        mode = pw.ForeignKeyField(FailureMode, on_delete="RESTRICT")

        class Meta:
            table_name = "corrective_action"

    class Observation(Base):
        mode = pw.ForeignKeyField(FailureMode, on_delete="RESTRICT")
        study = pw.ForeignKeyField(Study, on_delete="RESTRICT")
        failures = pw.IntegerField()
        exposure = pw.DoubleField()
        exposure_unit = pw.CharField(max_length=16)
        period_start = pw.DateField()
        period_end = pw.DateField()
        source_system = pw.CharField(max_length=100)
        record_key = pw.CharField(max_length=200)
        note = pw.TextField(default="")
        recorded_by = pw.CharField(max_length=200)
        recorded_at = pw.DateTimeField()

        class Meta:
            indexes = (
                (("source_system", "record_key"), True),
                (("mode", "period_end"), False),
            )

    class DriftNotice(Base):
        mode = pw.ForeignKeyField(FailureMode, on_delete="CASCADE")
        action = pw.ForeignKeyField(CorrectiveAction, on_delete="CASCADE")
        recipient = pw.CharField(max_length=320)
        name = pw.CharField(max_length=200)
        payload = pw.TextField()
        raised_at = pw.DateTimeField()
        digest_key = pw.CharField(max_length=400, null=True)

        class Meta:
            table_name = "drift_notice"
            indexes = ((("digest_key", "recipient"), False),)

    database.bind([ScaleSet, Study, FailureMode, CorrectiveAction, Observation, DriftNotice], bind_refs=False)
    return [Observation, DriftNotice]


def upgrade(database, migrator):
    """Add the columns in place, create observation and drift_notice, and band the built-in scale."""
    # ADD COLUMN in place: a table rebuild on SQLite would trip the foreign keys held on these tables.
    for table, columns in _columns(database).items():
        for name, definition in columns:
            database.execute_sql(f"ALTER TABLE {table} ADD COLUMN {name} {definition}")
    database.create_tables(_models(database))
    placeholder = "%s" if isinstance(database, pw.PostgresqlDatabase) else "?"
    for name, bands in BUILTIN_OCCURRENCE_BANDS.items():
        row = database.execute_sql(
            f"SELECT id FROM scale_set WHERE name = {placeholder} AND builtin", (name,)
        ).fetchone()
        if row is None:
            continue
        database.execute_sql(
            f"UPDATE scale_set SET occurrence_rate_basis = {placeholder} WHERE id = {placeholder}",
            (bands["rate_basis"], row[0]),
        )
        for value, start in bands["starts"].items():
            database.execute_sql(
                f"UPDATE scale_level SET rate_from = {placeholder} WHERE scale_set_id = {placeholder}"
                f" AND dimension = 'occurrence' AND value = {placeholder}",
                (start, row[0], value),
            )
