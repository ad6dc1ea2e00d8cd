"""The worker runs inside `abate serve` and `abate scheduler`, real subprocesses on a SQLite file."""

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import requests

from abate import db
from abate.domain.tokens import create_token
from conftest import authorised_client, build_app, close_pool
from webhooks.conftest import close_action, open_action, subscribe

ROOT = Path(__file__).resolve().parents[2]
ABATE = str(Path(sys.executable).with_name("abate"))


def _environment(tmp_path):
    return {
        **os.environ,
        "ABATE_DATABASE_URL": f"sqlite:///{tmp_path / 'processes.sqlite3'}",
        "ABATE_INSTANCE_PATH": str(tmp_path / "instance"),
        "ABATE_WEBHOOK_ALLOWED_HOSTS": "127.0.0.1",
    }


def _abate(tmp_path, *args):
    return subprocess.run(
        [ABATE, *args], env=_environment(tmp_path), cwd=ROOT, capture_output=True, text=True, timeout=60, check=True
    )


def _start(tmp_path, *args):
    return subprocess.Popen(
        [ABATE, *args], env=_environment(tmp_path), cwd=ROOT, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True
    )


def _stop(process):
    """Stop the process as a service manager would and return its output."""
    process.send_signal(signal.SIGTERM)
    try:
        return process.communicate(timeout=20)
    except subprocess.TimeoutExpired:
        process.kill()
        return process.communicate()


def _wait_for(condition, seconds):
    deadline = time.monotonic() + seconds
    while not condition() and time.monotonic() < deadline:
        time.sleep(0.1)
    return condition()


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_abate_serve_delivers_webhooks_within_seconds_of_a_change(tmp_path, receiver):
    _abate(tmp_path, "db", "upgrade")
    token = _abate(tmp_path, "token", "create", "--name", "bridge", "--role", "admin").stdout.strip().splitlines()[-1]
    port = _free_port()
    server = _start(tmp_path, "serve", "--port", str(port), "--no-scheduler")
    base = f"http://127.0.0.1:{port}"
    try:
        assert _wait_for(lambda: _answers(f"{base}/livez"), seconds=20), "abate serve did not come up"
        with requests.Session() as http:
            http.headers["Authorization"] = f"Bearer {token}"
            created = http.post(
                f"{base}/v1/webhooks", json={"url": receiver.url, "events": ["mode.rerated"]}, timeout=10
            )
            assert created.status_code == 201, created.text
            receiver.secret = created.json()["secret"]
            scale_id = http.get(f"{base}/v1/scales", timeout=10).json()["items"][0]["id"]
            study = http.post(
                f"{base}/v1/studies",
                json={
                    "title": "Served study",
                    "kind": "process",
                    "owner": {"name": "S. Owner", "email": "s.owner@example.com"},
                    "scale_id": scale_id,
                    "timezone": "UTC",
                },
                timeout=10,
            ).json()
            mode = http.post(
                f"{base}/v1/studies/{study['id']}/modes",
                json={"failure_mode": "Seal leaks", "severity": 6, "occurrence": 4, "detection": 3},
                timeout=10,
            ).json()
            etag = http.get(f"{base}/v1/modes/{mode['id']}", timeout=10).headers["ETag"]
            rerated = http.patch(
                f"{base}/v1/modes/{mode['id']}",
                json={"occurrence": 2, "reason": "New seal supplier"},
                headers={"If-Match": etag},
                timeout=10,
            )
            assert rerated.status_code == 200, rerated.text
        assert _wait_for(lambda: receiver.requests, seconds=5)
    finally:
        _stop(server)
    [request] = receiver.requests
    assert request.verification_error is None and request.payload["type"] == "mode.rerated"
    assert request.payload["data"]["after"] == {"severity": 6, "occurrence": 2, "detection": 3, "rpn": 36}


def _answers(url):
    try:
        return requests.get(url, timeout=1).status_code == 200
    except requests.ConnectionError:
        return False


def test_abate_scheduler_delivers_webhooks_queued_by_another_process(tmp_path, receiver):
    _abate(tmp_path, "db", "upgrade")
    scheduler = _start(tmp_path, "scheduler")
    try:
        app = build_app(_environment(tmp_path)["ABATE_DATABASE_URL"], tmp_path, WEBHOOK_ALLOWED_HOSTS="127.0.0.1")
        with db.database.connection_context():
            client = authorised_client(app, create_token("scheduler check", "admin")[1])
        _, _, action = open_action(client)
        subscribe(client, receiver, events=["action.closed"])
        close_action(client, action["id"], occurrence=6)
        assert _wait_for(lambda: receiver.requests, seconds=10)
    finally:
        close_pool()
        output, _ = _stop(scheduler)
    assert "scheduler stopped" in output
    assert receiver.types() == ["action.closed"] and receiver.requests[0].verification_error is None
