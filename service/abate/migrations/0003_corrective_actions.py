"""Corrective actions, and risk events that name their action and split RPN change by cause."""

import peewee as pw
from playhouse.migrate import migrate

from abate.domain.clock import utcnow

# Which running sum each earlier event kind moved (the kinds that existed before this migration).
_CAUSE_OF_KIND = {"created": "change_new_modes", "rerated": "change_rerating", "retired": "change_retirements"}
_CAUSES = ("change_new_modes", "change_rerating", "change_actions", "change_retirements")


def _action_model(database):
    class Study(pw.Model):
        class Meta:
            table_name = "study"

    class FailureMode(pw.Model):
        class Meta:
            table_name = "failure_mode"

    class CorrectiveAction(pw.Model):
        mode = pw.ForeignKeyField(FailureMode, on_delete="RESTRICT")
        study = pw.ForeignKeyField(Study, on_delete="RESTRICT")
        title = pw.CharField(max_length=300)
        description = pw.TextField(default="")
        kind = pw.CharField(max_length=16)
        owner_name = pw.CharField(max_length=200)
        owner_email = pw.CharField(max_length=320, index=True)
        due_date = pw.DateField()
        original_due_date = pw.DateField()
        due_date_changes = pw.IntegerField(default=0)
        status = pw.CharField(max_length=16, default="open")
        target_severity = pw.SmallIntegerField(null=True)
        target_occurrence = pw.SmallIntegerField(null=True)
        target_detection = pw.SmallIntegerField(null=True)
        external_system = pw.CharField(max_length=100, null=True)
        external_key = pw.CharField(max_length=200, null=True)
        result_severity = pw.SmallIntegerField(null=True)
        result_occurrence = pw.SmallIntegerField(null=True)
        result_detection = pw.SmallIntegerField(null=True)
        evidence = pw.TextField(default="")
        verified_by = pw.CharField(max_length=200, default="")
        closed_at = pw.DateTimeField(null=True)
        cancelled_at = pw.DateTimeField(null=True)
        version = pw.IntegerField(default=1)
        created_at = pw.DateTimeField(default=utcnow)
        updated_at = pw.DateTimeField(default=utcnow)

        class Meta:
            table_name = "corrective_action"
            indexes = (
                (("study", "status", "due_date"), False),
                (("mode", "status"), False),
                (("external_system", "external_key"), True),
            )

    database.bind([Study, FailureMode, CorrectiveAction], bind_refs=False, bind_backrefs=False)
    return CorrectiveAction


def upgrade(database, migrator):
    """Create corrective_action; add the action, due-date, flag and cause columns to risk_event."""
    action_model = _action_model(database)
    database.create_tables([action_model])
    database.execute_sql("ALTER TABLE risk_event ADD COLUMN action_id INTEGER REFERENCES corrective_action (id)")
    for column in ("study_open_actions", *_CAUSES):
        database.execute_sql(f"ALTER TABLE risk_event ADD COLUMN {column} INTEGER NOT NULL DEFAULT 0")
    database.execute_sql("ALTER TABLE risk_event ADD COLUMN action_due_date DATE")
    database.execute_sql("ALTER TABLE risk_event ADD COLUMN rating_raised BOOLEAN NOT NULL DEFAULT FALSE")
    migrate(migrator.add_index("risk_event", ("action_id",), False))
    _backfill_causes(database)


def _backfill_causes(database):
    """Give earlier events their running sums by cause, study by study in event order."""
    rows = database.execute_sql(
        "SELECT id, study_id, kind, COALESCE(after_rpn, 0) - COALESCE(before_rpn, 0)"
        " FROM risk_event ORDER BY study_id, study_revision"
    ).fetchall()
    sums, current_study = {}, None
    for event_id, study_id, kind, delta in rows:
        if study_id != current_study:
            sums, current_study = dict.fromkeys(_CAUSES, 0), study_id
        if kind in _CAUSE_OF_KIND:
            sums[_CAUSE_OF_KIND[kind]] += delta
        assignments = ", ".join(f"{cause} = {int(value)}" for cause, value in sums.items())
        database.execute_sql(f"UPDATE risk_event SET {assignments} WHERE id = {int(event_id)}")
