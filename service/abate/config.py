"""Configuration: built-in defaults, then ABATE_* environment variables, then a test config."""

import os
from pathlib import Path

#: Every setting the service reads, with its default and what it means (the README's table).
SETTINGS = {
    "DATABASE_URL": (
        None,
        "Database URL: sqlite:///path/to/file.sqlite3 or postgresql://user@host:port/db. "
        "Default: a SQLite file under ./instance/.",
    ),
    "BASE_URL": ("http://127.0.0.1:8000", "Public base URL of the service, used in links."),
    "INSTANCE_PATH": ("instance", "Folder for the default SQLite file and local mail."),
    "MAX_BODY_BYTES": (1_048_576, "Largest accepted request body in bytes (413 above it)."),
    "DB_POOL_SIZE": (10, "PostgreSQL: connections kept per service process."),
    "DB_POOL_TIMEOUT": (10, "PostgreSQL: seconds to wait for a free pooled connection."),
    "SQLITE_BUSY_TIMEOUT": (15, "SQLite: seconds a writer waits for the write lock."),
}

_INTEGER_SETTINGS = {name for name, (default, _) in SETTINGS.items() if isinstance(default, int)}


def load_config(test_config=None, environ=None):
    """Return the settings dict: defaults, overridden by ABATE_* variables, then by test_config."""
    environ = os.environ if environ is None else environ
    config = {name: default for name, (default, _) in SETTINGS.items()}
    for name in SETTINGS:
        value = environ.get(f"ABATE_{name}")
        if value not in (None, ""):
            config[name] = int(value) if name in _INTEGER_SETTINGS else value
    config.update(test_config or {})
    if not config["DATABASE_URL"]:
        path = Path(config["INSTANCE_PATH"]).resolve() / "abate.sqlite3"
        config["DATABASE_URL"] = f"sqlite:///{path}"
    return config
