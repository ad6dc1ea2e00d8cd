"""The reminder outbox and owners' notice preferences.

The models here are a frozen copy of the schema as it was at this migration; later changes
belong in later migrations, never here.
"""

import peewee as pw


def _models(database):
    class Base(pw.Model):
        class Meta:
            legacy_table_names = False

    class Reminder(Base):
        dedup_key = pw.CharField(max_length=400, unique=True)
        recipient = pw.CharField(max_length=320, index=True)
        local_day = pw.DateField(index=True)
        status = pw.CharField(max_length=16, default="pending")
        attempts = pw.IntegerField(default=0)
        last_error = pw.TextField(default="")
        next_attempt_at = pw.DateTimeField()
        sent_at = pw.DateTimeField(null=True)
        payload = pw.TextField()
        created_at = pw.DateTimeField()

        class Meta:
            indexes = (
                (("status", "next_attempt_at"), False),
                (("status", "id"), False),
            )

    class OwnerPreference(Base):
        email = pw.CharField(max_length=320, unique=True)
        due_soon_notices = pw.BooleanField(default=True)
        version = pw.IntegerField(default=1)
        updated_at = pw.DateTimeField()

    models = [Reminder, OwnerPreference]
    database.bind(models, bind_refs=False, bind_backrefs=False)
    return models


def upgrade(database, migrator):
    """Create reminder and owner_preference."""
    database.create_tables(_models(database))
