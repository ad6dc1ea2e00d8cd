"""Checking Abate's webhooks on the receiving side, as Standard Webhooks 1.0 specifies; standard library only."""

import base64
import binascii
import hashlib
import hmac
import json
import time

SECRET_PREFIX = "whsec_"
DEFAULT_TOLERANCE = 300


class WebhookSignatureError(ValueError):
    """A webhook whose headers, timestamp or signature do not check out; do not act on it."""


def _header(headers, name):
    """A header by name, whatever the case (works with dicts, requests, Flask/werkzeug and http.server)."""
    for key, value in headers.items():
        if key.lower() == name:
            return value
    raise WebhookSignatureError(f"the {name} header is missing")


def verify_signature(secret, headers, body, tolerance=DEFAULT_TOLERANCE, *, now=None):
    """Check a delivery's webhook-signature against the raw body; return the decoded payload or raise.

    secret is the subscription's whsec_... value; body the raw bytes (or text) as received, not
    re-serialised JSON. The webhook-timestamp must lie within tolerance seconds of now (default:
    the clock), which keeps an old delivery from being replayed.
    """
    message_id = _header(headers, "webhook-id")
    timestamp = _header(headers, "webhook-timestamp")
    signatures = _header(headers, "webhook-signature").split()
    try:
        sent_at = int(timestamp)
    except ValueError as error:
        raise WebhookSignatureError(f"webhook-timestamp {timestamp!r} is not a Unix time") from error
    if abs((time.time() if now is None else now) - sent_at) > tolerance:
        raise WebhookSignatureError(f"webhook-timestamp {sent_at} is more than {tolerance} s from now")
    try:
        key = base64.b64decode(secret.removeprefix(SECRET_PREFIX), validate=True)
    except binascii.Error as error:
        raise WebhookSignatureError("the secret is not whsec_ and base64") from error
    raw = body.encode() if isinstance(body, str) else bytes(body)
    digest = hmac.new(key, message_id.encode() + b"." + timestamp.encode() + b"." + raw, hashlib.sha256).digest()
    expected = "v1," + base64.b64encode(digest).decode()
    # Several signatures are sent while a secret is rotated; one match is enough. Constant-time compare.
    if not any(hmac.compare_digest(expected.encode(), candidate.encode()) for candidate in signatures):
        raise WebhookSignatureError("no webhook-signature matches the body under this secret")
    return json.loads(raw)
