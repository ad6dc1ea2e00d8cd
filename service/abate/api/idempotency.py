"""Idempotency-Key on POST: the change and its stored response commit together, replays answer from it."""

from flask import g, request

from abate.db import database
from abate.domain import idempotency

HEADER = "Idempotency-Key"


def start():
    """before_request (after auth): claim the key or answer with the stored response."""
    key = request.headers.get(HEADER)
    if request.method != "POST" or key is None or "token" not in g:
        return None
    token_id = g.token.id
    record = idempotency.begin(token_id, key, idempotency.fingerprint("POST", request.full_path, request.get_data()))
    if record is not None:
        status, headers, body = idempotency.stored_response(record)
        return body, status, {**headers, "Idempotent-Replayed": "true"}
    # One transaction around the whole request: the domain's own atomic blocks become savepoints.
    g.idempotency = (token_id, key, database.atomic())
    g.idempotency[2].__enter__()
    return None


def finish(response):
    """after_request: keep a successful response with the key and commit; roll back anything else."""
    claim = g.pop("idempotency", None)
    if claim is None:
        return response
    token_id, key, transaction = claim
    if response.status_code < 400:
        idempotency.complete(token_id, key, response.status_code, response.headers, response.get_data(as_text=True))
        transaction.__exit__(None, None, None)
    else:
        transaction.__exit__(_RolledBack, _RolledBack(), None)
        idempotency.release(token_id, key)
    return response


def abandon(exc):
    """teardown_request: a request that died before after_request rolls back and frees its key."""
    claim = g.pop("idempotency", None)
    if claim is not None:
        token_id, key, transaction = claim
        transaction.__exit__(_RolledBack, _RolledBack(), None)
        idempotency.release(token_id, key)


class _RolledBack(Exception):
    """Stands for the failure that makes the request's transaction roll back."""
