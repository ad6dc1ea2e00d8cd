"""Webhook subscriptions, the outbox of their deliveries and the log of every attempt.

The models here are a frozen copy of the schema as it was at this migration; later changes
belong in later migrations, never here.
"""

import peewee as pw


def _models(database):
    class Base(pw.Model):
        class Meta:
            legacy_table_names = False

    class WebhookSubscription(Base):
        url = pw.TextField()
        events = pw.TextField()
        description = pw.TextField(default="")
        secret = pw.CharField(max_length=200)
        active = pw.BooleanField(default=True)
        disabled_reason = pw.TextField(default="")
        version = pw.IntegerField(default=1)
        created_at = pw.DateTimeField()
        updated_at = pw.DateTimeField()

    class WebhookDelivery(Base):
        subscription = pw.ForeignKeyField(WebhookSubscription, on_delete="CASCADE")
        message_id = pw.CharField(max_length=64)
        event_type = pw.CharField(max_length=32)
        body = pw.TextField()
        status = pw.CharField(max_length=16, default="pending")
        attempts = pw.IntegerField(default=0)
        next_attempt_at = pw.DateTimeField(null=True)
        last_status_code = pw.IntegerField(null=True)
        last_error = pw.TextField(default="")
        delivered_at = pw.DateTimeField(null=True)
        created_at = pw.DateTimeField()

        class Meta:
            indexes = (
                (("subscription", "message_id"), True),
                (("status", "next_attempt_at"), False),
            )

    class WebhookAttempt(Base):
        delivery = pw.ForeignKeyField(WebhookDelivery, on_delete="CASCADE")
        attempted_at = pw.DateTimeField()
        status_code = pw.IntegerField(null=True)
        error = pw.TextField(default="")
        response_excerpt = pw.TextField(default="")
        duration_ms = pw.IntegerField()

    models = [WebhookSubscription, WebhookDelivery, WebhookAttempt]
    database.bind(models, bind_refs=False, bind_backrefs=False)
    return models


def upgrade(database, migrator):
    """Create webhook_subscription, webhook_delivery and webhook_attempt."""
    database.create_tables(_models(database))
