"""The client's reminders group on a live server: running the job, and the outbox filtered by status."""

import datetime
import email
import email.policy
import mailbox
import socket

import pytest

from abate.mail import maildir_path
from abate_client import Reminder, ReminderRun
from client.conftest import new_mode, new_study, open_action

KAI = {"name": "Kai Berg", "email": "kai.berg@example.com"}
LENA = {"name": "Lena Vogt", "email": "lena.vogt@example.com"}
THREE_DAYS_AGO = datetime.date.today() - datetime.timedelta(days=3)


@pytest.fixture
def overdue_for(api):
    """Open an action on a fresh mode that is three days overdue, owned by owner."""
    mode = new_mode(api, new_study(api), 7, 8, 5)

    def make(owner):
        return open_action(api, mode, owner=owner, due_date=THREE_DAYS_AGO)

    return make


def closed_port():
    """A loopback port nothing listens on."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_a_dry_run_reports_the_digest_and_leaves_the_outbox_empty(api, overdue_for):
    overdue_for(KAI)
    report = api.reminders.run(dry_run=True)
    assert isinstance(report, ReminderRun) and report.dry_run and report.skipped is None
    assert [(digest.recipient, digest.overdue, digest.id) for digest in report.recorded] == [(KAI["email"], 1, None)]
    assert list(api.reminders.list()) == []


def test_the_outbox_lists_sent_and_pending_digests_by_status(api, app, overdue_for):
    overdue_for(KAI)
    first = api.reminders.run()
    assert [digest.recipient for digest in first.recorded] == [KAI["email"]]
    assert [digest.recipient for digest in first.sent] == [KAI["email"]]

    # The next digest meets an SMTP port where nobody listens: it stays pending, to be retried.
    app.config.update(SMTP_HOST="127.0.0.1", SMTP_PORT=closed_port(), SMTP_STARTTLS=0)
    overdue_for(LENA)
    second = api.reminders.run()
    assert [digest.recipient for digest in second.recorded] == [LENA["email"]]
    assert [digest.recipient for digest in second.retrying] == [LENA["email"]] and second.sent == []

    [sent] = api.reminders.list(status="sent")
    assert isinstance(sent, Reminder) and sent.recipient == KAI["email"]
    assert (sent.overdue, sent.due_soon, sent.escalated, sent.attempts) == (1, 0, 0, 1)
    assert sent.dedup_key == f"digest:{KAI['email']}:{sent.day.isoformat()}" and sent.sent_at is not None
    [pending] = api.reminders.list(status="pending")
    assert (pending.recipient, pending.attempts, pending.sent_at) == (LENA["email"], 1, None)
    assert pending.last_error and pending.next_attempt_at > pending.created_at
    assert list(api.reminders.list(status="failed")) == []
    assert [digest.id for digest in api.reminders.list(page_size=1)] == sorted([sent.id, pending.id])

    # The sent digest is in the Maildir, read back with the standard library's mailbox and email parser.
    [message] = [
        email.message_from_bytes(raw.as_bytes(), policy=email.policy.default)
        for raw in mailbox.Maildir(maildir_path(app.config), create=False)
    ]
    assert message["To"].addresses[0].addr_spec == KAI["email"]
