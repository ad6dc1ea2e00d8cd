"""Fixtures for reminder tests: a real SMTP server on loopback, the app pointed at it, test data, runs at a time."""

import asyncio
import email
import email.policy
import socket
from dataclasses import dataclass

import pytest
from aiosmtpd.controller import Controller

from abate import db, jobs
from conftest import make_mode, make_study

BASE_URL = "https://abate.example.com"
MAIL_FROM = "Abate reminders <reminders@abate.example.com>"


@dataclass
class Received:
    """One message as the SMTP server got it: the envelope and the message parsed under email.policy.default."""

    mail_from: str
    rcpt_tos: list
    message: email.message.EmailMessage
    raw: bytes


class _Collector:
    """aiosmtpd handler that keeps every message it accepts, each after `delay` seconds (a slow server)."""

    def __init__(self, delay=0.0):
        self.received = []
        self.delay = delay

    async def handle_DATA(self, server, session, envelope):  # noqa: N802 - aiosmtpd's hook name
        # A client gone during the wait cancels this coroutine: the message is never accepted.
        await asyncio.sleep(self.delay)
        self.received.append(
            Received(
                envelope.mail_from,
                list(envelope.rcpt_tos),
                email.message_from_bytes(envelope.content, policy=email.policy.default),
                envelope.content,
            )
        )
        return "250 Message accepted for delivery"


def free_port():
    """A TCP port on loopback that nothing listens on right now."""
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


class SmtpServer:
    """An aiosmtpd server on a fixed loopback port that can be stopped and started again (an outage).

    With delay, each message is accepted only that many seconds after its data arrived.
    """

    def __init__(self, port, delay=0.0, **controller_options):
        self.port = port
        self._collector = _Collector(delay)
        self._options = controller_options
        self._controller = None

    @property
    def received(self):
        """Every message accepted so far, across restarts."""
        return self._collector.received

    def start(self):
        """Listen (again) on the port."""
        self._controller = Controller(self._collector, hostname="127.0.0.1", port=self.port, **self._options)
        self._controller.start()

    def stop(self):
        """Stop listening; connections are refused until start()."""
        if self._controller is not None:
            self._controller.stop()
            self._controller = None

    def messages_to(self, address):
        """The parsed messages whose envelope names address."""
        return [item.message for item in self.received if address in item.rcpt_tos]


@pytest.fixture
def smtp_server():
    """A running SMTP server on a free loopback port, collecting what it receives."""
    server = SmtpServer(free_port())
    server.start()
    yield server
    server.stop()


@pytest.fixture
def mail_app(app, smtp_server):
    """The app (both databases) delivering to smtp_server without TLS, with links to BASE_URL."""
    app.config.update(
        SMTP_HOST="127.0.0.1",
        SMTP_PORT=smtp_server.port,
        SMTP_STARTTLS=0,
        MAIL_FROM=MAIL_FROM,
        BASE_URL=BASE_URL,
        REMINDER_TIMEZONE="UTC",
        REMINDER_DUE_SOON_DAYS=7,
        ESCALATION_DAYS=14,
    )
    return app


@pytest.fixture
def open_action(client):
    """Make open actions through the API: open_action(due_date, owner_email, study=..., mode=..., **fields)."""

    def make(due_date, owner_email="kai.berg@example.com", *, study=None, mode=None, **fields):
        if mode is None:
            study = study or make_study(client, owner={"name": "Ada Example", "email": "ada@example.com"})
            mode = make_mode(client, study["id"], 7, 8, 5, failure_mode="Weld seam cracks")
        body = {
            "title": "Error-proof the weld fixture",
            "kind": "prevention",
            "owner": {"name": "Kai Berg", "email": owner_email},
            "due_date": due_date.isoformat(),
            **fields,
        }
        response = client.post(f"/v1/modes/{mode['id']}/actions", json=body)
        assert response.status_code == 201, response.get_json()
        return response.get_json()

    return make


@pytest.fixture
def run_at(mail_app):
    """Run the reminder job with the clock at a given naive UTC moment; return its report."""

    def run(moment, dry_run=False):
        with db.database.connection_context():
            return jobs.run_reminders(mail_app.config, clock=lambda: moment, dry_run=dry_run)

    return run
