"""Structured logs: one JSON object per line, with the request id, and no secret in any of them."""

import datetime
import json
import logging
import re
import sys

from flask import g, has_app_context

# Keys every LogRecord has; anything else on a record came from `extra=` and is written as a field.
_RECORD_KEYS = set(vars(logging.makeLogRecord({}))) | {"message", "asctime", "taskName"}
# What a secret looks like wherever it turns up in a message, an exception or a field.
_SECRET_PATTERNS = [
    # A password in a URL's user information (RFC 3986 section 3.2.1): keep the user, hide the rest.
    (re.compile(r"(?P<keep>[A-Za-z][A-Za-z0-9+.-]*://[^/\s:@]*:)[^/\s@]+@"), r"\g<keep>[redacted]@"),
    # Credentials of an Authorization header (RFC 9110 section 11.6.2), bearer tokens (RFC 6750) included.
    (re.compile(r"(?i)(?P<keep>\b(?:bearer|basic)\s+)[^\s\"'\\,;]+"), r"\g<keep>[redacted]"),
    # API token secrets and webhook signing secrets by their prefixes (domain.tokens, domain.webhooks).
    (re.compile(r"(?P<keep>\babt_)[A-Za-z0-9_-]+"), r"\g<keep>[redacted]"),
    (re.compile(r"(?P<keep>\bwhsec_)[A-Za-z0-9+/=]+"), r"\g<keep>[redacted]"),
]
# Settings whose values are hidden wherever they appear, however they look.
SECRET_SETTINGS = ("SMTP_PASSWORD",)
_MARK = "_abate_json_handler"


def redact(text, known_secrets=()):
    """text with URL passwords, credentials, token and signing secrets and the known secrets replaced."""
    for secret in known_secrets:
        if secret:
            text = text.replace(secret, "[redacted]")
    for pattern, replacement in _SECRET_PATTERNS:
        text = pattern.sub(replacement, text)
    return text


def rfc3339_utc(timestamp):
    """A POSIX timestamp as RFC 3339 UTC with milliseconds and Z, as the API writes times."""
    moment = datetime.datetime.fromtimestamp(timestamp, datetime.UTC)
    return moment.isoformat(timespec="milliseconds").replace("+00:00", "Z")


class JsonFormatter(logging.Formatter):
    """One JSON object a line: time, level, logger, message, request_id in a request, then the extra fields."""

    def __init__(self, known_secrets=()):
        super().__init__()
        secrets = [secret for secret in known_secrets if secret]
        # Matched in the encoded line, so also as JSON spells them.
        self.known_secrets = tuple({*secrets, *(json.dumps(secret, ensure_ascii=False)[1:-1] for secret in secrets)})

    def format(self, record):
        """The record as one line of JSON, secrets redacted."""
        entry = {
            "time": rfc3339_utc(record.created),
            "level": record.levelname,
            "logger": record.name,
            "message": record.getMessage(),
        }
        request_id = g.get("request_id") if has_app_context() else None
        if request_id:
            entry["request_id"] = request_id
        entry.update((key, value) for key, value in vars(record).items() if key not in _RECORD_KEYS)
        if record.exc_info:
            entry["exception"] = self.formatException(record.exc_info)
        if record.stack_info:
            entry["stack"] = self.formatStack(record.stack_info)
        # Redacted after encoding, so that no field, nested or not, escapes it.
        return redact(json.dumps(entry, default=str, ensure_ascii=False), self.known_secrets)


def configure_logging(config, stream=None):
    """Send every log record at LOG_LEVEL or above to stream (stderr) as JSON lines; return the handler.

    Called by the long-running commands, never at import or by the app factory, so that tests keep
    pytest's own log capture. A second call replaces the handler the first one added.
    """
    root = logging.getLogger()
    for handler in [handler for handler in root.handlers if getattr(handler, _MARK, False)]:
        root.removeHandler(handler)
    handler = logging.StreamHandler(stream or sys.stderr)
    handler.setFormatter(JsonFormatter(config[name] for name in SECRET_SETTINGS))
    setattr(handler, _MARK, True)
    root.addHandler(handler)
    root.setLevel(config["LOG_LEVEL"].upper())
    return handler
