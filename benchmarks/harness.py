"""What every benchmark shares: a fresh database, waitress on loopback, timed clients, result rows."""

import contextlib
import logging
import sys
import tempfile
import threading
import time
import uuid
from dataclasses import dataclass
from pathlib import Path
from urllib.parse import quote

import peewee
import requests
from flask import Flask

from abate import create_app, db
from abate.domain.scales import find_scale_set_by_name
from abate.domain.studies import create_study
from abate.domain.tokens import create_token
from abate.serving import served_in_thread

# Both servers of a comparison run with these, so that only the application differs.
SERVER_SETTINGS = {"host": "127.0.0.1", "port": 0, "threads": 8, "ident": "abate-benchmark"}
REQUEST_TIMEOUT = 60
# Who the benchmarks' domain writes are recorded as (keyword arguments of the domain functions).
WRITER = {"actor": "benchmark", "source": "benchmark"}
OWNER = {"name": "Invented Owner", "email": "owner@example.com"}
# One seed for every generator, so that two runs write the same invented data.
SEED = 20251201
# Far above any rate a benchmark reaches: the per-token check still runs on every request, it never refuses one.
RATE_LIMIT_PER_MINUTE = 10**9


@dataclass(frozen=True)
class Row:
    """One measured figure; a goal is (">=" or "<=", threshold) and makes the row PASS or MISS."""

    measure: str
    value: float
    unit: str = ""
    goal: tuple = None

    @property
    def verdict(self):
        """PASS or MISS against the goal, empty without one."""
        if self.goal is None:
            return ""
        comparison, threshold = self.goal
        met = self.value >= threshold if comparison == ">=" else self.value <= threshold
        return "PASS" if met else "MISS"


def progress(message):
    """Say what a long setup step is doing, on stderr so that the table stays clean."""
    print(f"  {message}", file=sys.stderr, flush=True)


@contextlib.contextmanager
def fresh_database(database_url=None):
    """Yield a database URL of the benchmark's own: a temporary SQLite file or a new PostgreSQL schema.

    A sqlite:// URL given by the caller is used as it is.
    """
    if database_url is None:
        with tempfile.TemporaryDirectory(prefix="abate-benchmark-") as folder:
            yield f"sqlite:///{Path(folder) / 'abate.sqlite3'}"
        return
    if not database_url.startswith(("postgresql://", "postgres://")):
        yield database_url
        return
    import psycopg2

    schema = f"benchmark_{uuid.uuid4().hex[:12]}"
    admin = psycopg2.connect(database_url)
    admin.autocommit = True
    try:
        with admin.cursor() as cursor:
            cursor.execute(f"CREATE SCHEMA {schema}")
        separator = "&" if "?" in database_url else "?"
        yield f"{database_url}{separator}options={quote(f'-c search_path={schema}')}"
    finally:
        with admin.cursor() as cursor:
            cursor.execute(f"DROP SCHEMA {schema} CASCADE")
        admin.close()


@contextlib.contextmanager
def abate_app(database_url, **settings):
    """The Abate application on database_url with settings, migrated; its connections are closed on the way out."""
    with tempfile.TemporaryDirectory(prefix="abate-instance-") as instance:
        app = create_app(
            {
                "DATABASE_URL": database_url,
                "INSTANCE_PATH": instance,
                "RATE_LIMIT_PER_MINUTE": RATE_LIMIT_PER_MINUTE,
                **settings,
            }
        )
        with db.database.connection_context():
            db.upgrade()
        try:
            yield app
        finally:
            if hasattr(db.database.obj, "close_all"):
                db.database.obj.close_all()
            elif not db.database.is_closed():
                db.database.close()


def new_study(title, kind):
    """An active study on the built-in 1-10 scales in a time zone with daylight saving (needs a connection)."""
    scale_set = find_scale_set_by_name("General 1-10")
    return create_study(
        {
            "title": title,
            "kind": kind,
            "owner": OWNER,
            "scale_id": scale_set.id,
            "timezone": "Europe/Berlin",
            "status": "active",
        }
    )


def refresh_statistics():
    """After bulk writes, let PostgreSQL's planner see the new rows, as autovacuum soon would in service."""
    if isinstance(db.database.obj, peewee.PostgresqlDatabase):
        db.database.execute_sql("ANALYZE")


def bearer_headers(role):
    """Headers that authenticate as a new token of role (needs an open connection)."""
    _, secret = create_token(f"benchmark {role}", role)
    return {"Authorization": f"Bearer {secret}"}


def bare_app():
    """The smallest Flask JSON service: the yardstick a real route is measured against."""
    app = Flask("bare")

    @app.get("/bare")
    def bare():
        return {"status": "ok", "service": "bare"}

    return app


@contextlib.contextmanager
def served(app):
    """Serve app with waitress (SERVER_SETTINGS) in a thread; yield its base URL."""
    # Under a deliberate load every worker is busy; waitress would warn about its queue on each request.
    logging.getLogger("waitress.queue").setLevel(logging.ERROR)
    with served_in_thread(app, **SERVER_SETTINGS) as url:
        yield url


def _get_ok(session, url):
    response = session.get(url, timeout=REQUEST_TIMEOUT)
    if response.status_code != 200:
        raise RuntimeError(f"GET {url} answered {response.status_code}: {response.text[:500]}")


def throughput(url, clients, seconds, headers):
    """Requests per second that `clients` threads, each with its own session, complete on GET url."""
    deadline = time.perf_counter() + seconds
    counts, failures = [0] * clients, []

    def client(index):
        with requests.Session() as session:
            session.headers.update(headers)
            try:
                while time.perf_counter() < deadline:
                    _get_ok(session, url)
                    counts[index] += 1
            except Exception as error:  # a failed client is reported below, never measured as fast
                failures.append(error)

    threads = [threading.Thread(target=client, args=(index,)) for index in range(clients)]
    started = time.perf_counter()
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    elapsed = time.perf_counter() - started
    if failures:
        raise failures[0]
    return sum(counts) / elapsed


def side_by_side_throughput(urls, clients, seconds, rounds, headers):
    """{name: requests/second} for each {name: url}, measured in alternating rounds after a warm-up.

    Every route gets the same headers, so that the requests differ only in their path.
    """
    with requests.Session() as session:
        session.headers.update(headers)
        for url in urls.values():
            _get_ok(session, url)
    totals = dict.fromkeys(urls, 0.0)
    for _ in range(rounds):
        for name, url in urls.items():
            totals[name] += throughput(url, clients, seconds / rounds, headers)
    return {name: total / rounds for name, total in totals.items()}
