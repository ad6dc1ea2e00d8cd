"""The database proxy, how a URL becomes a connection, per-request connections, migrations."""

import importlib
import pkgutil
from pathlib import Path
from urllib.parse import parse_qsl, unquote, urlsplit

import peewee
from flask import request
from playhouse.migrate import SchemaMigrator
from playhouse.pool import PooledPostgresqlDatabase, PooledSqliteDatabase

from abate.domain.clock import utcnow

#: Bound to a real database by the app factory, the CLI or a test; unbound at import.
database = peewee.DatabaseProxy()

# A fixed number so that every instance migrating the same PostgreSQL database waits for the others.
_MIGRATION_LOCK_KEY = 0x4AB47E


class UnsupportedDatabaseURL(ValueError):
    """The database URL names a scheme Abate does not run on."""


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
        return PooledPostgresqlDatabase(
            unquote(parts.path.lstrip("/")),
            user=unquote(parts.username) if parts.username else None,
            password=unquote(parts.password) if parts.password else None,
            host=parts.hostname,
            port=parts.port,
            max_connections=int(config["DB_POOL_SIZE"]),
            timeout=int(config["DB_POOL_TIMEOUT"]),
            stale_timeout=300,
            **dict(parse_qsl(parts.query)),
        )
    raise UnsupportedDatabaseURL(f"unsupported database URL scheme {parts.scheme!r}; use sqlite or postgresql")


def bind(url, config):
    """Point the proxy at the database behind url and return that database."""
    concrete = open_database(url, config)
    database.initialize(concrete)
    return concrete


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
