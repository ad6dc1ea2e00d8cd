"""Fixtures for webhook tests: a real HTTP receiver on loopback that verifies signatures, the app allowing it."""

import datetime
import threading
import time
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest

from abate import db
from abate.domain.clock import utcnow
from abate.domain.webhooks import EVENT_TYPES
from abate.webhook_worker import deliver_due
from abate_client.webhooks import WebhookSignatureError, verify_signature
from conftest import build_app, close_pool, make_mode, make_study

# Loopback receivers are allowed only because the allow-list names 127.0.0.1; attempts give up quickly.
WEBHOOK_SETTINGS = {"WEBHOOK_ALLOWED_HOSTS": "127.0.0.1", "WEBHOOK_TIMEOUT": 1, "WEBHOOK_MAX_ATTEMPTS": 3}
HANG = "hang"
STALL_BODY = "stall body"


@dataclass
class ReceivedRequest:
    """One request as the receiver got it, and what verifying its signature gave."""

    path: str
    headers: dict
    body: bytes
    payload: dict | None = None
    verification_error: str | None = None


@dataclass
class Receiver:
    """An HTTP server on a loopback port that records every request and answers as scripted (200 otherwise).

    An answer is a status, (status, headers), HANG (no answer until the test ends) or STALL_BODY
    (200 and its headers, then nothing). Each answer comes after `delay` seconds.
    """

    secret: str | None = None
    delay: float = 0.0
    requests: list = field(default_factory=list)
    answers: list = field(default_factory=list)
    release: threading.Event = field(default_factory=threading.Event)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def __post_init__(self):
        self.server = ThreadingHTTPServer(("127.0.0.1", 0), _handler_for(self))
        self.server.daemon_threads = True
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)

    @property
    def url(self):
        """The URL a subscription points at."""
        return f"http://127.0.0.1:{self.server.server_address[1]}/hooks/abate"

    def answer(self, *answers):
        """Answer the next requests so, one answer each."""
        with self.lock:
            self.answers.extend(answers)

    def record(self, request):
        """Keep a request; return the answer it gets."""
        with self.lock:
            self.requests.append(request)
            return self.answers.pop(0) if self.answers else 200

    def types(self):
        """The event types received, in order."""
        return [request.payload["type"] for request in self.requests]


def _handler_for(receiver):
    class Handler(BaseHTTPRequestHandler):
        def do_POST(self):  # noqa: N802 - http.server's hook name
            body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
            request = ReceivedRequest(self.path, {key.lower(): value for key, value in self.headers.items()}, body)
            try:
                request.payload = verify_signature(receiver.secret or "", self.headers, body)
            except WebhookSignatureError as error:
                request.verification_error = str(error)
            answer = receiver.record(request)
            time.sleep(receiver.delay)
            if answer == HANG:
                receiver.release.wait(30)
                return
            if isinstance(answer, tuple):
                status, headers = answer
            else:
                status, headers = (200 if answer == STALL_BODY else answer), {}
            self.send_response(401 if request.verification_error else status)
            for name, value in headers.items():
                self.send_header(name, value)
            self.send_header("Content-Length", "8")
            self.end_headers()
            if answer == STALL_BODY:
                self.wfile.flush()
                receiver.release.wait(30)
                return
            self.wfile.write(b"received")

        def log_message(self, *args):
            """Quiet: the test reads the requests, not a log."""

    return Handler


@pytest.fixture
def receiver():
    """A running receiver, stopped (and any hanging answer released) afterwards."""
    server = Receiver()
    server.thread.start()
    yield server
    server.release.set()
    server.server.shutdown()
    server.server.server_close()


@pytest.fixture
def app(database_url, tmp_path):
    """The application on the parametrised database, with loopback receivers allowed and short timeouts."""
    application = build_app(database_url, tmp_path, **WEBHOOK_SETTINGS)
    yield application
    close_pool()


def subscribe(client, receiver, events=EVENT_TYPES, **fields):
    """Subscribe the receiver through the API and give it the secret; return the subscription's JSON."""
    response = client.post("/v1/webhooks", json={"url": receiver.url, "events": list(events), **fields})
    assert response.status_code == 201, response.get_json()
    receiver.secret = response.get_json()["secret"]
    return response.get_json()


def deliver(app, now=None):
    """Run the worker's delivery once, in a connection of its own, at now (default: the clock)."""
    with db.database.connection_context():
        return deliver_due(app.config, now=now)


def later(minutes):
    """The clock this many minutes from now, for driving retries without sleeping."""
    return utcnow() + datetime.timedelta(minutes=minutes)


def open_action(client, severity=7, occurrence=8, detection=5):
    """A study, a mode with these ratings and an open action on it; return (study, mode, action) JSON."""
    study = make_study(client)
    mode = make_mode(client, study["id"], severity, occurrence, detection)
    response = client.post(
        f"/v1/modes/{mode['id']}/actions",
        json={
            "title": "Add a poka-yoke fixture",
            "kind": "prevention",
            "owner": {"name": "A. Owner", "email": "a.owner@example.com"},
            "due_date": "2030-01-31",
        },
    )
    assert response.status_code == 201, response.get_json()
    return study, mode, response.get_json()


def close_action(client, action_id, **result):
    """Close an action with these verified result ratings; return the response."""
    return client.post(f"/v1/actions/{action_id}/close", json={"result": result, "evidence": "Trial run of 500 parts"})
