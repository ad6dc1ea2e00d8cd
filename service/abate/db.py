"""The database proxy, how a URL becomes a connection, per-request connections, migrations."""

import importlib
import itertools
import pkgutil
import sqlite3
import time
from pathlib import Path
from urllib.parse import parse_qsl, unquote, urlsplit

import peewee
import psycopg2.extensions
from flask import request
from playhouse.migrate import SchemaMigrator
from playhouse.pool import PooledPostgresqlDatabase, PooledSqliteDatabase

from abate.domain.clock import utcnow

#: Bound to a real database by the app factory, the CLI or a test; unbound at import.
database = peewee.DatabaseProxy()

# Numbers the databases this process is bound to, one after another (tests bind many).
_bindings = itertools.count(1)

# A fixed number so that every instance migrating the same PostgreSQL database waits for the others.
_MIGRATION_LOCK_KEY = 0x4AB47E


class UnsupportedDatabaseURL(ValueError):
    """The database URL names a scheme Abate does not run on."""


class RestingPostgresPool(PooledPostgresqlDatabase):
    """A PostgreSQL pool that asks the server whether a connection still lives only after it has rested.

    peewee's pool sends SELECT 1 on every check-out, a round trip that costs a cached read as much again.
    A connection handed back less than PING_AFTER_REST seconds ago is trusted; if the server went away
    meanwhile, that request's first query fails (503) and the broken connection is not reused.
    """

    PING_AFTER_REST = 1.0

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._returned_at = {}

    def _is_closed(self, conn):
        rested = time.monotonic() - self._returned_at.pop(self.conn_key(conn), float("-inf"))
        if (
            not conn.closed
            and rested < self.PING_AFTER_REST
            and self._adapter.txn_status(conn) == self._adapter.txn_idle
        ):
            return False
        return super()._is_closed(conn)

    def _close(self, conn, close_conn=False):
        with self._pool_lock:
            super()._close(conn, close_conn)
            if not conn.closed:
                self._returned_at[self.conn_key(conn)] = time.monotonic()


class PreparingConnection(psycopg2.extensions.connection):
    """A psycopg2 connection that remembers the statements prepared on its server session (prepared.py)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        # A session's prepared statements outlive a rollback; they end with the connection.
        self.prepared_statements = set()


def open_database(url, config):
    """Return an (unconnected) peewee database for a sqlite:// or postgresql:// URL."""
    parts = urlsplit(url)
    if parts.scheme == "sqlite":
        # sqlite:///relative.db and sqlite:////absolute.db, as other tools spell them.
        path = unquote(parts.path[1:]) if parts.path.startswith("/") else unquote(parts.path)
        Path(path).parent.mkdir(parents=True, exist_ok=True)
        busy_seconds = int(config["SQLITE_BUSY_TIMEOUT"])
        # Pooled like PostgreSQL: opening a file and setting its pragmas on every request costs more than
        # many a request itself.
        return PooledSqliteDatabase(
            path,
            max_connections=int(config["DB_POOL_SIZE"]),
            timeout=int(config["DB_POOL_TIMEOUT"]),
            stale_timeout=300,
            # A pooled connection serves one thread at a time, but not always the thread that opened it.
            check_same_thread=False,
            pragmas={
                "journal_mode": "wal",
                "foreign_keys": 1,
                "busy_timeout": busy_seconds * 1000,
                "synchronous": "normal",
            },
            # A deferred transaction that reads and then writes can fail with "database is
            # locked" despite busy_timeout; taking the write lock at BEGIN makes writers queue.
            lock_type="IMMEDIATE",
        )
    if parts.scheme in ("postgresql", "postgres"):
        extra = {"connection_factory": PreparingConnection} if config["DB_SERVER_PREPARE"] else {}
        return RestingPostgresPool(
            unquote(parts.path.lstrip("/")),
            user=unquote(parts.username) if parts.username else None,
            password=unquote(parts.password) if parts.password else None,
            host=parts.hostname,
            port=parts.port,
            max_connections=int(config["DB_POOL_SIZE"]),
            timeout=int(config["DB_POOL_TIMEOUT"]),
            stale_timeout=300,
            **extra,
            **dict(parse_qsl(parts.query)),
        )
    raise UnsupportedDatabaseURL(f"unsupported database URL scheme {parts.scheme!r}; use sqlite or postgresql")


def bind(url, config):
    """Point the proxy at the database behind url and return that database."""
    concrete = open_database(url, config)
    concrete.binding_number = next(_bindings)
    database.initialize(concrete)
    return concrete


def binding_number():
    """Which of the databases this process has been bound to is bound now: caches of rows keep them apart."""
    return getattr(database.obj, "binding_number", 0)


def updates_return_rows():
    """Whether UPDATE ... RETURNING runs on the bound database: PostgreSQL, and SQLite from 3.35."""
    return not isinstance(database.obj, peewee.SqliteDatabase) or sqlite3.sqlite_version_info >= (3, 35)


def lock_for_update(query):
    """Add FOR UPDATE where the database has row locks (SQLite's IMMEDIATE lock covers the rest)."""
    return query.for_update() if database.for_update else query


def init_app(app):
    """Bind the configured database and open/close one connection around each request."""
    bind(app.config["DATABASE_URL"], app.config)

    @app.before_request
    def _connect():
        # Liveness must not depend on the database; readiness is the probe that checks it.
        if request.endpoint != "health.livez":
            database.connect(reuse_if_open=True)

    @app.teardown_request
    def _close(exc):
        if not database.is_closed():
            database.close()


class SchemaMigration(peewee.Model):
    """One applied migration."""

    version = peewee.IntegerField(primary_key=True)
    name = peewee.CharField()
    applied_at = peewee.DateTimeField()

    class Meta:
        database = database
        table_name = "schema_migration"


def available_migrations():
    """Return [(version, name, module)] for the numbered scripts in abate.migrations, in order."""
    from abate import migrations

    found = []
    for info in pkgutil.iter_modules(migrations.__path__):
        number, _, name = info.name.partition("_")
        if number.isdigit():
            found.append((int(number), name, importlib.import_module(f"{migrations.__name__}.{info.name}")))
    return sorted(found, key=lambda entry: entry[0])


def schema_version():
    """Return the highest applied migration number, 0 for an empty database."""
    if not database.table_exists(SchemaMigration._meta.table_name):
        return 0
    return SchemaMigration.select(peewee.fn.MAX(SchemaMigration.version)).scalar() or 0


def upgrade(target=None):
    """Apply pending migrations up to target (default: all) in one transaction; return those applied."""
    applied = []
    with database.atomic():
        if isinstance(database.obj, peewee.PostgresqlDatabase):
            database.execute_sql("SELECT pg_advisory_xact_lock(%s)", (_MIGRATION_LOCK_KEY,))
        database.create_tables([SchemaMigration], safe=True)
        done = {row.version for row in SchemaMigration.select(SchemaMigration.version)}
        migrator = SchemaMigrator.from_database(database.obj)
        for version, name, module in available_migrations():
            if version in done or (target is not None and version > target):
                continue
            module.upgrade(database.obj, migrator)
            SchemaMigration.create(version=version, name=name, applied_at=utcnow())
            applied.append((version, name))
    return applied
