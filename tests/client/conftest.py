"""Fixtures for the client's tests: a client of the live server, and a scripted proxy in front of it."""

import datetime
import threading
from dataclasses import dataclass, field
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer

import pytest
import requests

from abate_client import Client
from conftest import BUILTIN_1_10

# Sent on to Abate, and back to the client: what the client and the server read of each other.
_FORWARDED_REQUEST_HEADERS = ("Authorization", "Content-Type", "Idempotency-Key", "If-Match", "Accept")
_FORWARDED_RESPONSE_HEADERS = ("Content-Type", "ETag", "Location", "Retry-After", "Idempotent-Replayed")
# Forward the request to Abate, then hang up without answering: the change is made, the answer lost.
LOSE_ANSWER = "lose answer"


class WaitRecordingClient(Client):
    """A client that notes each wait before a retry instead of sleeping, so that tests can read the delays."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self.waits = []

    def wait_before_retry(self, seconds):
        """Record the wait; the test's own server decides what the next attempt meets."""
        self.waits.append(seconds)


@dataclass
class SeenRequest:
    """One request as the proxy received it."""

    method: str
    path: str
    headers: dict
    body: bytes


@dataclass
class ScriptedProxy:
    """An HTTP server on a loopback port in front of Abate: it answers from its script, then forwards.

    A script entry is a status, (status, headers) or LOSE_ANSWER; once the script is used up every
    request is forwarded to upstream and Abate's answer returned.
    """

    upstream: str
    script: list = field(default_factory=list)
    seen: list = field(default_factory=list)
    lock: threading.Lock = field(default_factory=threading.Lock)

    def __post_init__(self):
        self.server = ThreadingHTTPServer(("127.0.0.1", 0), _proxy_handler(self))
        self.server.daemon_threads = True
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.session = requests.Session()

    @property
    def url(self):
        """The base URL a client talks to."""
        return f"http://127.0.0.1:{self.server.server_address[1]}"

    def answer(self, *entries):
        """Answer the next requests so, one entry each."""
        with self.lock:
            self.script.extend(entries)

    def next_entry(self, request):
        """Keep a request; return its script entry (None: forward it)."""
        with self.lock:
            self.seen.append(request)
            return self.script.pop(0) if self.script else None

    def forward(self, request):
        """Send request on to Abate; return its answer."""
        headers = {name: request.headers[name] for name in _FORWARDED_REQUEST_HEADERS if name in request.headers}
        return self.session.request(
            request.method, self.upstream + request.path, headers=headers, data=request.body or None, timeout=10
        )


def _proxy_handler(proxy):
    class Handler(BaseHTTPRequestHandler):
        protocol_version = "HTTP/1.1"

        def _handle(self):
            body = self.rfile.read(int(self.headers.get("Content-Length", 0)))
            request = SeenRequest(self.command, self.path, dict(self.headers.items()), body)
            entry = proxy.next_entry(request)
            if entry == LOSE_ANSWER:
                proxy.forward(request)
                self.close_connection = True
                return
            if entry is None:
                upstream = proxy.forward(request)
                status, content = upstream.status_code, upstream.content
                headers = {
                    name: upstream.headers[name] for name in _FORWARDED_RESPONSE_HEADERS if name in upstream.headers
                }
            else:
                status, headers = entry if isinstance(entry, tuple) else (entry, {})
                content = b'{"title": "scripted answer"}'
                headers = {"Content-Type": "application/problem+json", **headers}
            self.send_response(status)
            for name, value in headers.items():
                self.send_header(name, value)
            self.send_header("Content-Length", str(len(content)))
            self.end_headers()
            self.wfile.write(content)

        do_GET = do_POST = do_PUT = do_PATCH = _handle  # noqa: N815 - http.server's hook names

        def log_message(self, *args):
            """Quiet: the test reads the requests, not a log."""

    return Handler


@pytest.fixture
def proxy(live_server):
    """A running scripted proxy in front of the live server, stopped afterwards."""
    server = ScriptedProxy(live_server)
    server.thread.start()
    yield server
    server.server.shutdown()
    server.server.server_close()
    server.session.close()


@pytest.fixture
def api(live_server, admin_token):
    """A client of the live server with an admin token."""
    with Client(live_server, token=admin_token) as client:
        yield client


def study_fields(api, scale=BUILTIN_1_10, **fields):
    """The fields of a new study on the named built-in scale set."""
    scale_id = next(scale_set.id for scale_set in api.scales.list() if scale_set.name == scale)
    return {
        "title": "Client study",
        "kind": "process",
        "owner": {"name": "Q. Owner", "email": "q.owner@example.com"},
        "scale_id": scale_id,
        "timezone": "Europe/Berlin",
        **fields,
    }


def new_study(api, scale=BUILTIN_1_10, **fields):
    """Create a study on the named built-in scale set through the client."""
    return api.studies.create(**study_fields(api, scale, **fields))


def new_mode(api, study, severity, occurrence, detection, **fields):
    """Add a failure mode with these ratings through the client."""
    ratings = {"severity": severity, "occurrence": occurrence, "detection": detection}
    return api.modes.create(study.id, **{"failure_mode": "Burr on the edge", **ratings, **fields})


OWNER = {"name": "Kai Berg", "email": "kai.berg@example.com"}
TODAY = datetime.date.today()


def open_action(api, mode, **fields):
    """An open prevention action on the mode, due in a month unless fields say otherwise."""
    body = {
        "title": "Wire feed monitor",
        "kind": "prevention",
        "owner": OWNER,
        "due_date": TODAY + datetime.timedelta(30),
    }
    return api.actions.create(mode.id, **{**body, **fields})
