"""Subprocess helpers for the fault tests: `abate` runs on a database URL, a served process, consistency checks."""

import os
import signal
import socket
import subprocess
import sys
import time
from pathlib import Path

import peewee
import pytest
import requests

ROOT = Path(__file__).resolve().parents[2]
ABATE = str(Path(sys.executable).with_name("abate"))


def environment(url, tmp_path):
    """The variables an `abate` process needs for this database and an instance folder of the test's."""
    return {**os.environ, "ABATE_DATABASE_URL": url, "ABATE_INSTANCE_PATH": str(tmp_path / "instance")}


def run_abate(url, tmp_path, *args, check=True):
    """Run `abate ARGS` to completion; return the completed process."""
    return subprocess.run(
        [ABATE, *args],
        env=environment(url, tmp_path),
        cwd=ROOT,
        capture_output=True,
        text=True,
        timeout=60,
        check=check,
    )


def admin_secret(url, tmp_path):
    """A new admin token's secret, created by `abate token create` (which also needs a migrated schema)."""
    run_abate(url, tmp_path, "db", "upgrade")
    return run_abate(url, tmp_path, "token", "create", "--name", "faults", "--role", "admin").stdout.splitlines()[-1]


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def _ready(base):
    try:
        return requests.get(f"{base}/readyz", timeout=2).status_code == 200
    except requests.ConnectionError:
        return False


class Served:
    """One `abate serve --no-scheduler` process on a free loopback port."""

    def __init__(self, url, tmp_path):
        self.base = f"http://127.0.0.1:{_free_port()}"
        port = self.base.rsplit(":", 1)[1]
        self.process = subprocess.Popen(
            [ABATE, "serve", "--port", port, "--no-scheduler"],
            env=environment(url, tmp_path),
            cwd=ROOT,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
        )
        deadline = time.monotonic() + 30
        while not _ready(self.base):
            assert self.process.poll() is None and time.monotonic() < deadline, "abate serve did not come up"
            time.sleep(0.1)

    def kill(self):
        """SIGKILL: no handler runs, no transaction is finished, as when the machine loses power."""
        self.process.send_signal(signal.SIGKILL)
        self.process.wait(timeout=10)


@pytest.fixture
def serve(tmp_path):
    """Start `abate serve --no-scheduler` processes on a URL; every one still running is killed afterwards."""
    started = []

    def start(url):
        served = Served(url, tmp_path)
        started.append(served)
        return served

    yield start
    for served in started:
        if served.process.poll() is None:
            served.kill()


def assert_consistent(database):
    """Stored totals equal the modes' sums and the last event's running total; no action is half-closed."""
    rows = database.execute_sql(
        "SELECT s.id, s.total_rpn,"
        " (SELECT coalesce(sum(m.rpn), 0) FROM failure_mode m WHERE m.study_id = s.id AND m.status = 'active'),"
        " (SELECT e.study_total_rpn FROM risk_event e WHERE e.study_id = s.id ORDER BY e.id DESC LIMIT 1)"
        " FROM study s"
    ).fetchall()
    for study_id, stored, summed, last_event in rows:
        assert stored == summed, f"study {study_id}: total_rpn {stored} but its active modes sum to {summed}"
        assert last_event in (None, stored), f"study {study_id}: last event's total {last_event} != {stored}"
    actions = database.execute_sql(
        "SELECT a.id, a.status, a.closed_at IS NOT NULL,"
        " (SELECT count(*) FROM risk_event e WHERE e.action_id = a.id AND e.kind = 'action_closed')"
        " FROM corrective_action a"
    ).fetchall()
    for action_id, status, has_closed_at, closings in actions:
        # One close per action in these tests, so closed means exactly one closing event.
        assert (status == "closed") == has_closed_at == (closings == 1), (action_id, status, has_closed_at, closings)
    return rows, actions


def open_sqlite(url):
    """A plain peewee connection to the SQLite file behind url, for reading after the server died."""
    from abate.backup import sqlite_path

    return peewee.SqliteDatabase(str(sqlite_path(url)))
