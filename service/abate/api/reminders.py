"""/v1/reminders: the reminder outbox, and running the reminder job on demand."""

import marshmallow as ma
from flask import current_app
from flask.views import MethodView
from flask_smorest import Blueprint

from abate import jobs
from abate.api.common import PageArgsSchema, UTCDateTime, list_schema, page_of
from abate.domain import reminders
from abate.models import Reminder

blp = Blueprint("reminders", __name__, url_prefix="/v1", description="Reminder e-mails")


class ReminderSchema(ma.Schema):
    """One digest e-mail of the outbox; delivery is at least once, de-duplicated by dedup_key."""

    id = ma.fields.Integer(metadata={"description": "The outbox row; absent where a run reports what it recorded"})
    dedup_key = ma.fields.String(metadata={"description": "digest:<recipient>:<day>; one digest per recipient and day"})
    recipient = ma.fields.String()
    day = ma.fields.Date(metadata={"description": "The local day (ABATE_REMINDER_TIMEZONE) the digest is for"})
    overdue = ma.fields.Integer(metadata={"description": "How many of the recipient's own overdue actions it lists"})
    due_soon = ma.fields.Integer(metadata={"description": "How many actions due within ABATE_REMINDER_DUE_SOON_DAYS"})
    escalated = ma.fields.Integer(
        metadata={"description": "How many actions of the recipient's studies overdue beyond ABATE_ESCALATION_DAYS"}
    )
    occurrence_drift = ma.fields.Integer(
        metadata={"description": "How many of the recipient's closed actions observed data no longer bears out"}
    )
    status = ma.fields.String(metadata={"description": "pending, sent or failed (gave up after the last attempt)"})
    attempts = ma.fields.Integer()
    last_error = ma.fields.String(metadata={"description": "Why the latest failed attempt failed"})
    next_attempt_at = UTCDateTime(allow_none=True, metadata={"description": "When a pending row is tried (again)"})
    sent_at = UTCDateTime(allow_none=True)
    created_at = UTCDateTime()


class ReminderQueryArgsSchema(PageArgsSchema):
    """Filter of the outbox list."""

    status = ma.fields.String(validate=ma.validate.OneOf(reminders.REMINDER_STATUSES))


class RunArgsSchema(ma.Schema):
    """How to run the job."""

    dry_run = ma.fields.Boolean(
        load_default=False, metadata={"description": "true: report what would be recorded and sent; change nothing"}
    )


class RunReportSchema(ma.Schema):
    """What one run of the reminder job did (with dry_run: would do)."""

    day = ma.fields.Date()
    dry_run = ma.fields.Boolean()
    skipped = ma.fields.String(
        allow_none=True,
        metadata={"description": "weekend: no digests recorded today; busy: another run holds the lock, nothing done"},
    )
    recorded = ma.fields.List(ma.fields.Nested(ReminderSchema), metadata={"description": "Digests new in the outbox"})
    sent = ma.fields.List(ma.fields.Nested(ReminderSchema), metadata={"description": "Handed to the mail system"})
    retrying = ma.fields.List(ma.fields.Nested(ReminderSchema), metadata={"description": "Failed, to be retried"})
    failed = ma.fields.List(ma.fields.Nested(ReminderSchema), metadata={"description": "Failed for the last time"})


@blp.route("/reminders")
class Reminders(MethodView):
    """The reminder outbox."""

    @blp.arguments(ReminderQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(ReminderSchema))
    def get(self, args):
        """List outbox rows, oldest first; status=failed shows what needs a look."""
        query = reminders.reminders_query(args.get("status"))
        return page_of(query, [(Reminder.id, False)], args, reminders.reminder_views)


@blp.route("/reminders/run")
class ReminderRun(MethodView):
    """Running the reminder job now."""

    @blp.arguments(RunArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, RunReportSchema)
    def post(self, args):
        """Record today's digests and deliver what is pending, as the daily job does; report what happened."""
        return jobs.run_reminders(current_app.config, dry_run=args["dry_run"])
