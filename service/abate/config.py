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
    "RATE_LIMIT_PER_MINUTE": (
        6000,
        "Requests a minute one API token may send to one service process (429 with Retry-After above); 0: no limit.",
    ),
    "DB_POOL_SIZE": (10, "Database connections kept per service process."),
    "DB_POOL_TIMEOUT": (10, "Seconds to wait for a free pooled database connection."),
    "DB_SERVER_PREPARE": (
        True,
        "PostgreSQL: prepare the hottest lookups on the server once per connection; "
        "false behind a proxy that pools by transaction.",
    ),
    "SQLITE_BUSY_TIMEOUT": (15, "SQLite: seconds a writer waits for the write lock."),
    "REMINDER_TIME": ("07:00", "Local time (HH:MM) of the daily reminder run."),
    "REMINDER_TIMEZONE": ("UTC", "IANA time zone of REMINDER_TIME; the digest's day is the date there."),
    "REMINDER_DUE_SOON_DAYS": (7, "A digest lists the actions due within this many days (today included)."),
    "ESCALATION_DAYS": (14, "An action overdue by more than this many days also goes to its study's owner."),
    "REMINDER_SKIP_WEEKENDS": (False, "true: record no digests on Saturdays and Sundays (pending mail still goes)."),
    "SMTP_HOST": ("", "SMTP server for reminders; empty: mail goes into the Maildir instead."),
    "SMTP_PORT": (587, "SMTP server port."),
    "SMTP_TIMEOUT": (30, "Seconds the SMTP server has to connect and to answer each command."),
    "SMTP_USER": ("", "SMTP login name; empty: no login."),
    "SMTP_PASSWORD": ("", "SMTP password."),
    "SMTP_STARTTLS": (True, "true: upgrade the SMTP connection with STARTTLS, verifying the server's certificate."),
    "MAIL_FROM": ("Abate <abate@localhost>", "From address of reminder e-mails."),
    "MAILDIR": (None, "Maildir for reminders when no SMTP host is set. Default: maildir under INSTANCE_PATH."),
    "WEBHOOK_ALLOWED_HOSTS": (
        "",
        "Comma-separated host names or IP addresses webhooks may reach although they are loopback or private "
        "(link-local and cloud metadata addresses are refused always).",
    ),
    "WEBHOOK_TIMEOUT": (15, "Seconds a webhook receiver has to connect and to answer, per attempt."),
    "WEBHOOK_MAX_ATTEMPTS": (10, "Attempts at one webhook delivery (backing off exponentially) before it fails."),
    "LOG_LEVEL": (
        "INFO",
        "Least level logged by `abate serve` and `abate scheduler` (DEBUG, INFO, WARNING, ERROR), as JSON lines.",
    ),
}

_BOOLEAN_SETTINGS = {name for name, (default, _) in SETTINGS.items() if isinstance(default, bool)}
_INTEGER_SETTINGS = {name for name, (default, _) in SETTINGS.items() if isinstance(default, int)} - _BOOLEAN_SETTINGS
_TRUE, _FALSE = {"1", "true", "yes", "on"}, {"0", "false", "no", "off"}


def _parse(name, value):
    """An environment variable's text as the setting's type."""
    if name in _BOOLEAN_SETTINGS:
        if value.strip().lower() not in _TRUE | _FALSE:
            raise ValueError(f"ABATE_{name} must be one of {sorted(_TRUE | _FALSE)}, not {value!r}")
        return value.strip().lower() in _TRUE
    return int(value) if name in _INTEGER_SETTINGS else value


def load_config(test_config=None, environ=None):
    """Return the settings dict: defaults, overridden by ABATE_* variables, then by test_config."""
    environ = os.environ if environ is None else environ
    config = {name: default for name, (default, _) in SETTINGS.items()}
    for name in SETTINGS:
        value = environ.get(f"ABATE_{name}")
        if value not in (None, ""):
            config[name] = _parse(name, value)
    config.update(test_config or {})
    if not config["DATABASE_URL"]:
        path = Path(config["INSTANCE_PATH"]).resolve() / "abate.sqlite3"
        config["DATABASE_URL"] = f"sqlite:///{path}"
    return config
