"""Delivery from the outbox: outages, retries with backoff, giving up, crash healing, Maildir and STARTTLS."""

import datetime
import email
import email.policy
import mailbox
import shutil
import ssl
import subprocess
import threading
from pathlib import Path

import pytest

from abate import db, jobs, mail
from abate.domain import reminders
from abate.models import Reminder

from .conftest import SmtpServer, free_port

MORNING = datetime.datetime(2030, 3, 5, 7, 0)
KAI, LENA = "kai.berg@example.com", "lena.vogt@example.com"


def _rows():
    with db.database.connection_context():
        return {row.recipient: row for row in Reminder.select().order_by(Reminder.id)}


def _two_overdue_owners(open_action):
    first = open_action(datetime.date(2030, 3, 1), KAI)
    open_action(datetime.date(2030, 3, 2), LENA, mode={"id": first["mode_id"]})


def _deliver_at(app, moment):
    with db.database.connection_context():
        return jobs.deliver_pending(app.config, clock=lambda: moment)


def test_a_mail_server_outage_loses_nothing_and_doubles_nothing(open_action, run_at, smtp_server, mail_app, client):
    _two_overdue_owners(open_action)
    smtp_server.stop()

    down = run_at(MORNING)
    assert [item["recipient"] for item in down.recorded] == [KAI, LENA]
    assert down.sent == [] and [item["recipient"] for item in down.retrying] == [KAI, LENA]
    rows = _rows()
    assert {row.status for row in rows.values()} == {"pending"}
    assert all(row.attempts == 1 and "ConnectionRefusedError" in row.last_error for row in rows.values())
    first_retry = MORNING + reminders.FIRST_RETRY
    assert {row.next_attempt_at for row in rows.values()} == {first_retry}
    listed = client.get("/v1/reminders", query_string={"status": "pending"}).get_json()["items"]
    assert [(item["recipient"], item["attempts"], item["next_attempt_at"]) for item in listed] == [
        (KAI, 1, "2030-03-05T07:05:00Z"),
        (LENA, 1, "2030-03-05T07:05:00Z"),
    ]
    assert "ConnectionRefusedError" in listed[0]["last_error"]

    # Before the retry time nothing is tried; the second attempt, still down, doubles the wait.
    assert _deliver_at(mail_app, first_retry - datetime.timedelta(seconds=1)).retrying == []
    assert len(_deliver_at(mail_app, first_retry).retrying) == 2
    assert {(row.attempts, row.next_attempt_at) for row in _rows().values()} == {
        (2, first_retry + 2 * reminders.FIRST_RETRY)
    }

    smtp_server.start()
    # A second daily run records nothing new and, before the retry time, sends nothing.
    again = run_at(first_retry + datetime.timedelta(minutes=1))
    assert (again.recorded, again.sent) == ([], [])
    back = _deliver_at(mail_app, first_retry + 2 * reminders.FIRST_RETRY)
    assert [item["recipient"] for item in back.sent] == [KAI, LENA]
    assert _deliver_at(mail_app, MORNING + datetime.timedelta(hours=3)).sent == []
    assert run_at(MORNING + datetime.timedelta(hours=4)).sent == []

    assert sorted(address for item in smtp_server.received for address in item.rcpt_tos) == [KAI, LENA]
    assert {row.status for row in _rows().values()} == {"sent"}
    assert {row.attempts for row in _rows().values()} == {3}
    # The Date is the recording time even though the mail went out later.
    assert smtp_server.messages_to(KAI)[0]["Date"].datetime == MORNING.replace(tzinfo=datetime.UTC)


def test_a_reminder_gives_up_after_the_last_attempt_and_is_listed_as_failed(
    open_action, run_at, smtp_server, mail_app, client
):
    open_action(datetime.date(2030, 3, 1), KAI)
    smtp_server.stop()
    moment = MORNING
    report = run_at(moment)
    for attempt in range(2, reminders.MAX_ATTEMPTS + 1):
        moment += reminders.retry_delay(attempt - 1)
        report = _deliver_at(mail_app, moment)
    assert [item["recipient"] for item in report.failed] == [KAI] and report.retrying == []
    # The waits double from five minutes and stop growing at six hours.
    assert [reminders.retry_delay(n) for n in (1, 2, 3, 7, 8, 9)] == [
        datetime.timedelta(minutes=m) for m in (5, 10, 20, 320, 360, 360)
    ]

    smtp_server.start()
    assert _deliver_at(mail_app, moment + datetime.timedelta(days=1)).sent == []
    [failed] = client.get("/v1/reminders", query_string={"status": "failed"}).get_json()["items"]
    assert (failed["recipient"], failed["attempts"], failed["next_attempt_at"]) == (
        KAI,
        reminders.MAX_ATTEMPTS,
        None,
    )
    assert "ConnectionRefusedError" in failed["last_error"]
    assert client.get("/v1/reminders", query_string={"status": "pending"}).get_json()["items"] == []
    assert smtp_server.received == []


def test_a_crash_between_recording_and_sending_is_healed_by_the_next_run(open_action, run_at, smtp_server, mail_app):
    _two_overdue_owners(open_action)
    policy = reminders.ReminderPolicy.from_config(mail_app.config)
    with db.database.connection_context():
        # What a run that died right after its recording transaction leaves behind.
        recorded = reminders.record_digests(reminders.collect_digests(MORNING, policy), MORNING.date(), MORNING)
    assert len(recorded) == 2 and smtp_server.received == []

    healed = run_at(MORNING + datetime.timedelta(minutes=30))

    assert healed.recorded == [] and [item["recipient"] for item in healed.sent] == [KAI, LENA]
    assert sorted(address for item in smtp_server.received for address in item.rcpt_tos) == [KAI, LENA]


class _DiesAfterHandingOver:
    """The real SMTP postman, in a process that dies after the server took a message, before noting it."""

    def __init__(self, config):
        self._postman = mail.SmtpPostman(config)

    def __enter__(self):
        self._postman.__enter__()
        return self

    def __exit__(self, *exc_info):
        return self._postman.__exit__(*exc_info)

    def send(self, reminder):
        self._postman.send(reminder)
        raise SystemExit("killed")


def test_a_message_the_server_accepted_but_the_run_never_marked_is_sent_again_with_the_same_message_id(
    open_action, smtp_server, mail_app
):
    # At least once: the dead run's row stays claimed until its lease runs out, then the message goes
    # again, and its Message-ID and Date let the receiver drop the repeat.
    open_action(datetime.date(2030, 3, 1), KAI)
    policy = reminders.ReminderPolicy.from_config(mail_app.config)
    with db.database.connection_context(), pytest.raises(SystemExit):
        reminders.run(policy, lambda: MORNING, _DiesAfterHandingOver(mail_app.config))
    assert len(smtp_server.received) == 1 and _rows()[KAI].status == "pending"

    assert _deliver_at(mail_app, MORNING + reminders.CLAIM_LEASE - datetime.timedelta(seconds=1)).sent == []
    assert len(_deliver_at(mail_app, MORNING + reminders.CLAIM_LEASE).sent) == 1
    first, second = smtp_server.messages_to(KAI)
    assert first["Message-ID"] == second["Message-ID"] and first["Date"] == second["Date"]
    assert _rows()[KAI].attempts == 2


def test_two_senders_at_once_never_send_the_same_reminder(client, open_action, smtp_server, mail_app):
    # Below the run lock: row claims alone (FOR UPDATE SKIP LOCKED on PostgreSQL, the write lock on SQLite).
    first = open_action(datetime.date(2030, 3, 1), KAI)
    owners = [f"owner{number:02d}@example.com" for number in range(60)]
    for owner in owners:
        open_action(datetime.date(2030, 3, 1), owner, mode={"id": first["mode_id"]})
    policy = reminders.ReminderPolicy.from_config(mail_app.config)
    with db.database.connection_context():
        reminders.record_digests(reminders.collect_digests(MORNING, policy), MORNING.date(), MORNING)
    reports, start = [], threading.Barrier(2)

    def sender():
        report = reminders.RunReport(day=MORNING.date())
        start.wait()
        with db.database.connection_context():
            reports.append(reminders.deliver(lambda: MORNING, mail.SmtpPostman(mail_app.config), report))

    threads = [threading.Thread(target=sender) for _ in range(2)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join(timeout=60)

    sent = [item["recipient"] for report in reports for item in report.sent]
    assert sorted(sent) == sorted([KAI, *owners])
    assert sorted(address for item in smtp_server.received for address in item.rcpt_tos) == sorted([KAI, *owners])
    assert {row.status for row in _rows().values()} == {"sent"}


def test_without_an_smtp_host_mail_goes_into_the_maildir(open_action, run_at, smtp_server, mail_app, tmp_path):
    mail_app.config.update(SMTP_HOST="", MAILDIR=str(tmp_path / "local" / "maildir"))
    _two_overdue_owners(open_action)

    report = run_at(MORNING)

    assert [item["recipient"] for item in report.sent] == [KAI, LENA]
    assert smtp_server.received == []
    box = mailbox.Maildir(tmp_path / "local" / "maildir", create=False)
    messages = [email.message_from_bytes(box.get_bytes(key), policy=email.policy.default) for key in box.keys()]
    assert sorted(message["To"] for message in messages) == [KAI, LENA]
    assert all(message["Message-ID"] and message["Date"] for message in messages)
    assert all("days overdue" in message.get_body(("plain",)).get_content() for message in messages)


def test_an_empty_existing_folder_serves_as_the_maildir(open_action, run_at, mail_app, tmp_path):
    folder = tmp_path / "prepared"
    folder.mkdir()
    mail_app.config.update(SMTP_HOST="", MAILDIR=str(folder))
    _two_overdue_owners(open_action)

    report = run_at(MORNING)

    assert [item["recipient"] for item in report.sent] == [KAI, LENA] and report.retrying == []
    assert len(mailbox.Maildir(folder, create=False)) == 2


def test_the_default_maildir_lies_under_the_instance_folder(mail_app):
    mail_app.config.update(SMTP_HOST="", MAILDIR=None)
    assert mail.maildir_path(mail_app.config) == Path(mail_app.config["INSTANCE_PATH"]) / "maildir"


@pytest.fixture
def tls_files(tmp_path):
    """A self-signed certificate for 127.0.0.1 and its key, made by the openssl command."""
    if shutil.which("openssl") is None:
        pytest.skip("the openssl command is not installed")
    cert, key = tmp_path / "cert.pem", tmp_path / "key.pem"
    subprocess.run(
        ["openssl", "req", "-x509", "-newkey", "rsa:2048", "-nodes", "-days", "2", "-subj", "/CN=127.0.0.1"]
        + ["-addext", "subjectAltName=IP:127.0.0.1", "-keyout", str(key), "-out", str(cert)],
        check=True,
        capture_output=True,
        timeout=60,
    )
    return cert, key


@pytest.fixture
def starttls_server(tls_files):
    """An SMTP server on loopback that requires STARTTLS with the self-signed certificate."""
    context = ssl.create_default_context(ssl.Purpose.CLIENT_AUTH)
    context.load_cert_chain(*tls_files)
    server = SmtpServer(free_port(), tls_context=context, require_starttls=True)
    server.start()
    yield server
    server.stop()


def test_starttls_refuses_a_certificate_it_cannot_verify(open_action, run_at, mail_app, starttls_server):
    mail_app.config.update(SMTP_PORT=starttls_server.port, SMTP_STARTTLS=1)
    open_action(datetime.date(2030, 3, 1), KAI)

    report = run_at(MORNING)

    assert report.sent == [] and "CERTIFICATE_VERIFY_FAILED" in report.retrying[0]["last_error"]
    assert starttls_server.received == []


def test_starttls_delivers_once_the_certificate_verifies(
    open_action, run_at, mail_app, starttls_server, tls_files, monkeypatch
):
    # OpenSSL's default verify paths honour SSL_CERT_FILE: the self-signed certificate becomes trusted.
    monkeypatch.setenv("SSL_CERT_FILE", str(tls_files[0]))
    mail_app.config.update(SMTP_PORT=starttls_server.port, SMTP_STARTTLS=1)
    open_action(datetime.date(2030, 3, 1), KAI)

    report = run_at(MORNING)

    assert [item["recipient"] for item in report.sent] == [KAI]
    assert [item.rcpt_tos for item in starttls_server.received] == [[KAI]]


def test_a_mail_server_that_never_answers_is_cut_off_and_the_reminders_wait(open_action, run_at, mail_app, client):
    import socket

    # A server that accepts the connection and never sends its greeting (RFC 5321 section 4.2 expects one).
    silent = socket.socket()
    silent.bind(("127.0.0.1", 0))
    silent.listen()
    mail_app.config.update(SMTP_PORT=silent.getsockname()[1], SMTP_TIMEOUT=0.5)
    try:
        _two_overdue_owners(open_action)
        report = run_at(MORNING)
        assert report.sent == [] and [item["recipient"] for item in report.retrying] == [KAI, LENA]
        rows = _rows()
        assert {row.status for row in rows.values()} == {"pending"}
        assert all(
            "timed out" in row.last_error.lower() or "timeout" in row.last_error.lower() for row in rows.values()
        )
        # The API answers meanwhile: the reminders are listed as waiting for their retry.
        listed = client.get("/v1/reminders", query_string={"status": "pending"}).get_json()["items"]
        assert sorted(item["recipient"] for item in listed) == [KAI, LENA]
    finally:
        silent.close()
