"""Idempotency keys: a retried POST gets the first answer instead of doing the work twice.

After draft-ietf-httpapi-idempotency-key-header: a replay returns the stored response; the
same key with another request is 422; a repeat while the first is still running is 409.
"""

import datetime
import hashlib
import json

import peewee as pw

from abate.db import database
from abate.domain.clock import utcnow
from abate.errors import Conflict, ValidationFailed, field_error
from abate.models import IdempotencyRecord

#: How long a key and its response are kept (documented in the README).
RETENTION = datetime.timedelta(hours=24)
# A request that has not finished within this time is taken to have died; its key is free again.
ABANDONED_AFTER = datetime.timedelta(minutes=2)
MAX_KEY_LENGTH = 255
_REPLAYED_HEADERS = ("Location", "ETag", "Content-Type")


def fingerprint(method, path, body):
    """What makes two requests the same request."""
    return hashlib.sha256(b"\0".join([method.encode(), path.encode(), body])).hexdigest()


def begin(token_id, key, request_fingerprint, now=None):
    """Claim key for a request (committed at once); return a stored record to replay instead, or None.

    A concurrent claim of the same key loses on the unique index, not by check-then-insert.
    """
    if not key or len(key) > MAX_KEY_LENGTH:
        raise ValidationFailed(
            "unusable Idempotency-Key",
            errors=[field_error("Idempotency-Key", f"1 to {MAX_KEY_LENGTH} characters", "header")],
        )
    now = now or utcnow()
    with database.atomic():
        IdempotencyRecord.delete().where(
            (IdempotencyRecord.token_id == token_id) & (IdempotencyRecord.expires_at < now)
        ).execute()
        try:
            with database.atomic():
                IdempotencyRecord.create(
                    token_id=token_id,
                    key=key,
                    fingerprint=request_fingerprint,
                    state="in_flight",
                    created_at=now,
                    expires_at=now + RETENTION,
                )
            return None
        except pw.IntegrityError:
            pass
        record = IdempotencyRecord.get((IdempotencyRecord.token_id == token_id) & (IdempotencyRecord.key == key))
        if record.fingerprint != request_fingerprint:
            raise ValidationFailed(
                "this Idempotency-Key was used for a different request",
                errors=[field_error("Idempotency-Key", "reused with another method, path or body", "header")],
            )
        if record.state == "in_flight":
            if now - record.created_at < ABANDONED_AFTER:
                raise Conflict("a request with this Idempotency-Key is still being processed; retry shortly")
            record.created_at = now
            record.save()
            return None
        return record


def complete(token_id, key, status, headers, body):
    """Store the response with the key; call inside the transaction that made the change."""
    kept = {name: headers[name] for name in _REPLAYED_HEADERS if name in headers}
    IdempotencyRecord.update(
        state="done", response_status=status, response_headers=json.dumps(kept), response_body=body
    ).where((IdempotencyRecord.token_id == token_id) & (IdempotencyRecord.key == key)).execute()


def release(token_id, key):
    """Free the key of a request that failed, so that a corrected retry may use it."""
    with database.atomic():
        IdempotencyRecord.delete().where(
            (IdempotencyRecord.token_id == token_id)
            & (IdempotencyRecord.key == key)
            & (IdempotencyRecord.state == "in_flight")
        ).execute()


def stored_response(record):
    """(status, headers, body) of a stored record."""
    return record.response_status, json.loads(record.response_headers), record.response_body
