"""Fault test helpers: reading a database after its server died, spotting a write in flight, checks, servers."""

import contextlib
import sqlite3

import peewee
import pytest
import requests

from abate import db
from abate.config import load_config
from mail.conftest import smtp_server  # noqa: F401 - the mail tests' SMTP server, a fixture here too
from webhooks.conftest import receiver  # noqa: F401 - the webhook tests' receiver, a fixture here too


@contextlib.contextmanager
def reading(url):
    """A connection of the test's own to the database behind url, for reading while or after servers run."""
    database = db.open_database(url, load_config(environ={}))
    try:
        with database.connection_context():
            yield database
    finally:
        database.close_all()


def writer_active(database, table):
    """Whether another connection holds an unfinished write: a row lock on table (PostgreSQL) or the SQLite lock."""
    if isinstance(database, peewee.PostgresqlDatabase):
        # pg_locks shows the locks held right now; an INSERT or UPDATE holds RowExclusiveLock on its table until the
        # transaction ends (PostgreSQL documentation, "Explicit Locking", table-level lock modes).
        held = database.execute_sql(
            "SELECT count(*) FROM pg_locks WHERE relation = to_regclass(%s)"
            " AND mode = 'RowExclusiveLock' AND pid <> pg_backend_pid()",
            (table,),
        )
        return held.fetchone()[0] > 0
    probe = sqlite3.connect(database.database, timeout=0, isolation_level=None)
    try:
        probe.execute("BEGIN IMMEDIATE")
        probe.execute("ROLLBACK")
        return False
    except sqlite3.OperationalError as error:
        # One writer at a time (https://www.sqlite.org/lockingv3.html): "database is locked" means one is writing.
        if "locked" not in str(error):
            raise
        return True
    finally:
        probe.close()


def swallow(call):
    """Run call; a connection that dies with the server is what the test expects."""
    try:
        call()
    except requests.RequestException:
        pass


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
        assert (status == "closed") == bool(has_closed_at) == (closings == 1), (action_id, status, closings)
    return rows, actions


@pytest.fixture
def http():
    """A requests session, closed afterwards."""
    with requests.Session() as session:
        yield session
