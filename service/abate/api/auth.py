"""Bearer-token access control for /v1: who is asking, and whether their role may do it."""

from flask import g, request

from abate.domain.tokens import authenticate
from abate.errors import AbateError

PUBLIC_ENDPOINTS = {"health.livez", "health.readyz", "metrics.metrics", "api-docs.openapi_json"}
SAFE_METHODS = {"GET", "HEAD", "OPTIONS"}
# Blueprints only admins may use at all, and those whose writes need an admin.
ADMIN_ONLY = {"tokens", "webhooks"}
ADMIN_WRITES = {"scales", "reminders"}
RANK = {"reader": 0, "editor": 1, "admin": 2}


class Unauthorized(AbateError):
    """No usable bearer token (RFC 6750 section 3)."""

    status = 401
    slug = "unauthorized"
    headers = {"WWW-Authenticate": 'Bearer realm="abate"'}


class Forbidden(AbateError):
    """The token's role may not do this."""

    status = 403
    slug = "forbidden"


def required_role(blueprint, method, body):
    """The least role that may send method to an endpoint of blueprint with this JSON body."""
    if blueprint in ADMIN_ONLY:
        return "admin"
    if method in SAFE_METHODS:
        return "reader"
    # Back-dated writes rewrite the record of when things happened; only admins bring in history.
    if blueprint in ADMIN_WRITES or (isinstance(body, dict) and "effective_at" in body):
        return "admin"
    return "editor"


def _bearer_secret():
    scheme, _, secret = request.headers.get("Authorization", "").partition(" ")
    return secret.strip() if scheme.lower() == "bearer" and secret.strip() else None


def require_token():
    """before_request: authenticate every /v1 endpoint but the public ones and check the role."""
    if request.endpoint is None or request.endpoint in PUBLIC_ENDPOINTS:
        return
    secret = _bearer_secret()
    token = authenticate(secret) if secret else None
    if token is None:
        raise Unauthorized("send Authorization: Bearer <token>; the token is missing, unknown or revoked")
    # Only a write's body can raise the role it needs; a read's is never parsed here.
    body = None if request.method in SAFE_METHODS else request.get_json(silent=True)
    needed = required_role(request.blueprint, request.method, body)
    if RANK[token.role] < RANK[needed]:
        raise Forbidden(f"this token has the {token.role} role; this request needs the {needed} role")
    g.token = token


def current_actor():
    """Who a write is recorded as: the token's name and id."""
    token = g.token
    return f"{token.name} (token {token.id})"
