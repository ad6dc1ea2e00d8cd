"""Shared fixtures: a real database per test (SQLite file or a PostgreSQL schema), the app, clients."""

import os
import uuid
from urllib.parse import quote

import pytest
from flask.testing import FlaskClient

from abate import create_app, db
from abate.serving import served_in_thread

POSTGRES_URL = os.environ.get("ABATE_TEST_POSTGRES_URL", "postgresql://postgres@127.0.0.1:5432/test")
REQUIRE_POSTGRES = os.environ.get("ABATE_TEST_REQUIRE_POSTGRES") == "1"


def _postgres_reachable():
    import psycopg2

    try:
        psycopg2.connect(POSTGRES_URL, connect_timeout=3).close()
    except psycopg2.OperationalError as error:
        return str(error).strip()
    return None


_POSTGRES_PROBLEM = None


def pytest_configure(config):
    """Find out once whether PostgreSQL answers; CI requires it (ABATE_TEST_REQUIRE_POSTGRES=1)."""
    global _POSTGRES_PROBLEM
    _POSTGRES_PROBLEM = _postgres_reachable()
    if _POSTGRES_PROBLEM and REQUIRE_POSTGRES:
        raise pytest.UsageError(f"PostgreSQL is required but unreachable at {POSTGRES_URL}: {_POSTGRES_PROBLEM}")


@pytest.fixture
def postgres_schema_url():
    """A PostgreSQL URL whose search_path is a fresh schema, dropped afterwards."""
    import psycopg2

    if _POSTGRES_PROBLEM:
        pytest.skip(f"PostgreSQL unreachable at {POSTGRES_URL} ({_POSTGRES_PROBLEM}); CI runs it")
    schema = f"test_{uuid.uuid4().hex[:12]}"
    admin = psycopg2.connect(POSTGRES_URL)
    admin.autocommit = True
    with admin.cursor() as cursor:
        cursor.execute(f"CREATE SCHEMA {schema}")
    separator = "&" if "?" in POSTGRES_URL else "?"
    yield f"{POSTGRES_URL}{separator}options={quote(f'-c search_path={schema}')}"
    with admin.cursor() as cursor:
        cursor.execute(f"DROP SCHEMA {schema} CASCADE")
    admin.close()


@pytest.fixture(params=["sqlite", "postgresql"])
def database_url(request, tmp_path):
    """The same test on a SQLite file and on a PostgreSQL schema."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'abate.sqlite3'}"
    return request.getfixturevalue("postgres_schema_url")


@pytest.fixture
def sqlite_url(tmp_path):
    """A SQLite file of the test's own."""
    return f"sqlite:///{tmp_path / 'abate.sqlite3'}"


def build_app(url, tmp_path, **settings):
    """An app on url with the schema migrated to the newest version."""
    app = create_app({"DATABASE_URL": url, "INSTANCE_PATH": str(tmp_path / "instance"), **settings})
    with db.database.connection_context():
        db.upgrade()
    return app


@pytest.fixture
def app(database_url, tmp_path):
    """The application on the parametrised database."""
    application = build_app(database_url, tmp_path)
    yield application
    close_pool()


def close_pool():
    """Close the pooled PostgreSQL connections (or the SQLite connection) of the bound database."""
    if hasattr(db.database.obj, "close_all"):
        db.database.obj.close_all()
    elif not db.database.is_closed():
        db.database.close()


@pytest.fixture
def make_token(app):
    """Create an API token of a role; return its secret."""
    from abate.domain.tokens import create_token

    def make(role="admin", name=None):
        with db.database.connection_context():
            return create_token(name or f"test {role}", role)[1]

    return make


@pytest.fixture
def admin_token(make_token):
    """The secret of an admin token."""
    return make_token("admin")


class ReadBeforeWriteClient(FlaskClient):
    """A test client that, like the thin client, sends If-Match on PATCH from a fresh read.

    Tests that want to send If-Match themselves (or leave it out) pass the header explicitly;
    None leaves it out.
    """

    def open(self, *args, **kwargs):
        method = kwargs.get("method", "GET")
        headers = dict(kwargs.get("headers") or {})
        if method == "PATCH" and "If-Match" not in headers and args:
            current = super().open(args[0], method="GET")
            if current.status_code == 200:
                headers["If-Match"] = current.headers["ETag"]
            kwargs["headers"] = headers
        elif headers.get("If-Match", "") is None:
            del headers["If-Match"]
            kwargs["headers"] = headers
        return super().open(*args, **kwargs)


def authorised_client(app, secret):
    """A test client sending Authorization: Bearer secret on every request (and If-Match on PATCH)."""
    app.test_client_class = ReadBeforeWriteClient
    test_client = app.test_client()
    test_client.environ_base["HTTP_AUTHORIZATION"] = f"Bearer {secret}"
    return test_client


@pytest.fixture
def client(app, admin_token):
    """Flask's test client on the app, with an admin token."""
    return authorised_client(app, admin_token)


@pytest.fixture
def anonymous_client(app):
    """Flask's test client without any token."""
    return app.test_client()


@pytest.fixture
def auth_headers(admin_token):
    """Headers for raw HTTP calls to live_server."""
    return {"Authorization": f"Bearer {admin_token}"}


@pytest.fixture
def connection(app):
    """A database connection for tests that read or write through the domain layer directly."""
    with db.database.connection_context():
        yield db.database


@pytest.fixture
def live_server(app):
    """The app served by waitress on a free loopback port; yields its base URL."""
    with served_in_thread(app, threads=8, ident="abate-test") as url:
        yield url


@pytest.fixture
def processes(tmp_path):
    """Start `abate` subprocesses (see processes.py); whatever still runs is killed afterwards."""
    from processes import Processes

    started = Processes(tmp_path)
    yield started
    started.kill_all()


HEAD_SCHEMA_VERSION = max(version for version, _, _ in db.available_migrations())
BUILTIN_1_10 = "General 1-10"
BUILTIN_1_5 = "Compact 1-5"


def scale_id_named(client, name):
    """The id of the scale set with this name."""
    return next(item["id"] for item in client.get("/v1/scales").get_json()["items"] if item["name"] == name)


def make_study(client, **overrides):
    """Create a study through the API (1-10 scales unless scale_id says otherwise); return its JSON."""
    body = {
        "title": "Test study",
        "kind": "process",
        "owner": {"name": "Test Owner", "email": "owner@example.com"},
        "scale_id": overrides.pop("scale_id", None) or scale_id_named(client, BUILTIN_1_10),
        "timezone": "Europe/Berlin",
        **overrides,
    }
    response = client.post("/v1/studies", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def make_mode(client, study_id, severity=5, occurrence=5, detection=5, **overrides):
    """Create a failure mode through the API; return its JSON."""
    body = {
        "failure_mode": "Test failure mode",
        "severity": severity,
        "occurrence": occurrence,
        "detection": detection,
        **overrides,
    }
    response = client.post(f"/v1/studies/{study_id}/modes", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()
