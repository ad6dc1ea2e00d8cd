"""The first schema: scale sets with the built-in sets, tokens, studies, modes and risk events.

The models here are a frozen copy of the schema as it was at this migration; later changes
belong in later migrations, never here.
"""

import peewee as pw

from abate.domain.builtin_scales import BUILTIN_SCALE_SETS
from abate.domain.clock import utcnow


def _models(database):
    class Base(pw.Model):
        class Meta:
            legacy_table_names = False

    class ScaleSet(Base):
        name = pw.CharField(max_length=200, unique=True)
        description = pw.TextField(default="")
        builtin = pw.BooleanField(default=False)
        severity_max = pw.SmallIntegerField()
        occurrence_max = pw.SmallIntegerField()
        detection_max = pw.SmallIntegerField()
        default_action_threshold = pw.IntegerField()
        default_severity_threshold = pw.SmallIntegerField()
        version = pw.IntegerField(default=1)
        created_at = pw.DateTimeField(default=utcnow)
        updated_at = pw.DateTimeField(default=utcnow)

    class ScaleLevel(Base):
        scale_set = pw.ForeignKeyField(ScaleSet, on_delete="CASCADE")
        dimension = pw.CharField(max_length=16)
        value = pw.SmallIntegerField()
        label = pw.CharField(max_length=200)
        criteria = pw.TextField(default="")

        class Meta:
            indexes = ((("scale_set", "dimension", "value"), True),)

    class ApiToken(Base):
        name = pw.CharField(max_length=200)
        role = pw.CharField(max_length=16)
        secret_hash = pw.CharField(max_length=64, unique=True)
        created_at = pw.DateTimeField()
        last_used_at = pw.DateTimeField(null=True)
        revoked_at = pw.DateTimeField(null=True)

    class Study(Base):
        title = pw.CharField(max_length=300)
        kind = pw.CharField(max_length=16)
        scope = pw.TextField(default="")
        site = pw.CharField(max_length=200, default="")
        product_line = pw.CharField(max_length=200, default="")
        owner_name = pw.CharField(max_length=200)
        owner_email = pw.CharField(max_length=320, index=True)
        scale_set = pw.ForeignKeyField(ScaleSet, on_delete="RESTRICT")
        timezone = pw.CharField(max_length=64)
        status = pw.CharField(max_length=16, index=True)
        action_threshold = pw.IntegerField()
        severity_threshold = pw.SmallIntegerField()
        total_rpn = pw.IntegerField(default=0)
        risk_revision = pw.IntegerField(default=0)
        version = pw.IntegerField(default=1)
        created_at = pw.DateTimeField()
        updated_at = pw.DateTimeField()

    class StudyTag(Base):
        study = pw.ForeignKeyField(Study, on_delete="CASCADE")
        tag = pw.CharField(max_length=100, index=True)

        class Meta:
            indexes = ((("study", "tag"), True),)

    class FailureMode(Base):
        study = pw.ForeignKeyField(Study, on_delete="RESTRICT")
        item = pw.TextField(default="")
        function = pw.TextField(default="")
        failure_mode = pw.TextField()
        effect = pw.TextField(default="")
        cause = pw.TextField(default="")
        prevention_controls = pw.TextField(default="")
        detection_controls = pw.TextField(default="")
        severity = pw.SmallIntegerField()
        occurrence = pw.SmallIntegerField()
        detection = pw.SmallIntegerField()
        initial_severity = pw.SmallIntegerField()
        initial_occurrence = pw.SmallIntegerField()
        initial_detection = pw.SmallIntegerField()
        status = pw.CharField(max_length=16, default="active")
        version = pw.IntegerField(default=1)
        created_at = pw.DateTimeField()
        updated_at = pw.DateTimeField()
        retired_at = pw.DateTimeField(null=True)

        class Meta:
            indexes = ((("study", "status"), False),)

    class RiskEvent(Base):
        study = pw.ForeignKeyField(Study, on_delete="RESTRICT")
        mode = pw.ForeignKeyField(FailureMode, null=True, on_delete="RESTRICT")
        kind = pw.CharField(max_length=32)
        occurred_at = pw.DateTimeField()
        recorded_at = pw.DateTimeField()
        actor = pw.CharField(max_length=200)
        source = pw.CharField(max_length=32)
        reason = pw.TextField(default="")
        before_severity = pw.SmallIntegerField(null=True)
        before_occurrence = pw.SmallIntegerField(null=True)
        before_detection = pw.SmallIntegerField(null=True)
        before_rpn = pw.IntegerField(null=True)
        after_severity = pw.SmallIntegerField(null=True)
        after_occurrence = pw.SmallIntegerField(null=True)
        after_detection = pw.SmallIntegerField(null=True)
        after_rpn = pw.IntegerField(null=True)
        study_total_rpn = pw.IntegerField()
        study_max_rpn = pw.IntegerField()
        study_needs_action_count = pw.IntegerField()
        study_revision = pw.IntegerField()

        class Meta:
            indexes = (
                (("study", "occurred_at"), False),
                (("study", "study_revision"), True),
            )

    models = [ScaleSet, ScaleLevel, ApiToken, Study, StudyTag, FailureMode, RiskEvent]
    database.bind(models, bind_refs=False, bind_backrefs=False)
    return models


def upgrade(database, migrator):
    """Create the tables and the built-in scale sets."""
    models = _models(database)
    database.create_tables(models)
    scale_set_model, level_model = models[0], models[1]
    for builtin in BUILTIN_SCALE_SETS:
        scale_set = scale_set_model.create(
            name=builtin["name"],
            description=builtin["description"],
            builtin=True,
            severity_max=len(builtin["severity"]),
            occurrence_max=len(builtin["occurrence"]),
            detection_max=len(builtin["detection"]),
            default_action_threshold=builtin["default_action_threshold"],
            default_severity_threshold=builtin["default_severity_threshold"],
        )
        level_model.insert_many(
            [
                {"scale_set": scale_set.id, "dimension": dimension, "value": value, "label": label, "criteria": text}
                for dimension in ("severity", "occurrence", "detection")
                for value, label, text in builtin[dimension]
            ]
        ).execute()
