"""Stored responses for Idempotency-Key retries, and external references on studies and modes."""

import peewee as pw
from playhouse.migrate import migrate


def _record_model(database):
    class IdempotencyRecord(pw.Model):
        token_id = pw.IntegerField()
        key = pw.CharField(max_length=255)
        fingerprint = pw.CharField(max_length=64)
        state = pw.CharField(max_length=16)
        response_status = pw.IntegerField(null=True)
        response_headers = pw.TextField(default="{}")
        response_body = pw.TextField(default="")
        created_at = pw.DateTimeField()
        expires_at = pw.DateTimeField(index=True)

        class Meta:
            table_name = "idempotency_record"
            indexes = ((("token_id", "key"), True),)

    database.bind([IdempotencyRecord], bind_refs=False, bind_backrefs=False)
    return IdempotencyRecord


def upgrade(database, migrator):
    """Create idempotency_record; add external_system/external_key, unique together, to study and failure_mode."""
    database.create_tables([_record_model(database)])
    for table in ("study", "failure_mode"):
        database.execute_sql(f"ALTER TABLE {table} ADD COLUMN external_system VARCHAR(100)")
        database.execute_sql(f"ALTER TABLE {table} ADD COLUMN external_key VARCHAR(200)")
        migrate(migrator.add_index(table, ("external_system", "external_key"), True))
