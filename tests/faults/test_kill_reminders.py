"""Kill -9 of `abate remind` while it sends through a slow SMTP server; later runs deliver every digest once."""

import datetime

import pytest

from abate import db, jobs
from abate.domain import reminders
from abate.domain.clock import utcnow
from abate.domain.tokens import create_token
from abate.models import Reminder
from conftest import authorised_client, build_app, close_pool, make_mode, make_study
from mail.conftest import SmtpServer
from processes import abate_environment, free_port, run_abate, wait_for

OWNERS = [f"owner{number:02d}@example.com" for number in range(30)]
assert len(OWNERS) > reminders.SEND_BATCH  # a second batch that the killed run never claimed


@pytest.fixture
def slow_smtp_server():
    """An SMTP server that takes a tenth of a second to accept each message, so a run lasts some seconds."""
    server = SmtpServer(free_port(), delay=0.1)
    server.start()
    yield server
    server.stop()


def _overdue_actions(client, owners):
    study = make_study(client, timezone="UTC")
    mode = make_mode(client, study["id"], 7, 6, 5)
    due = (datetime.date.today() - datetime.timedelta(days=3)).isoformat()
    for owner in owners:
        body = {"title": "Recalibrate the gauge", "kind": "detection", "owner": {"name": "O", "email": owner}}
        assert client.post(f"/v1/modes/{mode['id']}/actions", json={**body, "due_date": due}).status_code == 201


def test_a_reminder_run_killed_mid_send_loses_and_doubles_no_digest(
    tmp_path, database_url, processes, slow_smtp_server
):
    smtp = {"SMTP_HOST": "127.0.0.1", "SMTP_PORT": slow_smtp_server.port, "SMTP_STARTTLS": 0}
    app = build_app(database_url, tmp_path, REMINDER_TIMEZONE="UTC", **smtp)
    with db.database.connection_context():
        secret = create_token("faults", "admin")[1]
    _overdue_actions(authorised_client(app, secret), OWNERS)
    close_pool()
    env = abate_environment(database_url, tmp_path, REMINDER_TIMEZONE="UTC", **smtp)

    run = processes.start(env, "remind", "--now")
    assert wait_for(lambda: len(slow_smtp_server.received) >= 3, seconds=30), run.output
    run.kill()
    before_kill = len(slow_smtp_server.received)
    assert before_kill < len(OWNERS)  # the kill landed while the run was sending

    # A second run records nothing new and sends what the dead run never claimed ...
    again = run_abate(env, "remind", "--now").stdout
    assert f": 0 recorded, {len(OWNERS) - reminders.SEND_BATCH} sent, 0 retrying, 0 failed" in again, again
    with db.database.connection_context():
        leased = Reminder.select().where(Reminder.status == "pending").count()
    # The dead run's first batch less what it marked sent (all it handed over, or all but the last one).
    assert leased - (reminders.SEND_BATCH - before_kill) in (0, 1)
    # ... and the rows it had claimed go out once their lease has run out.
    with db.database.connection_context():
        late = jobs.deliver_pending(app.config, clock=lambda: utcnow() + reminders.CLAIM_LEASE)
    assert len(late.sent) == leased

    with db.database.connection_context():
        rows = list(Reminder.select())
    close_pool()
    assert sorted(row.recipient for row in rows) == OWNERS and {row.status for row in rows} == {"sent"}
    received = slow_smtp_server.received
    assert sorted({address for item in received for address in item.rcpt_tos}) == OWNERS
    # A message the server accepted in the instant before the run could mark it sent goes again, with the same
    # Message-ID (RFC 5322 section 3.6.4) so the receiver can drop it; the server drops a cancelled one itself.
    assert len({item.message["Message-ID"] for item in received}) == len(OWNERS)
    assert len(received) - len(OWNERS) in (0, 1)
