"""API tokens: random secrets shown once, kept only as SHA-256 hashes."""

import hashlib
import secrets

from abate.errors import ValidationFailed, field_error
from abate.models import ApiToken

ROLES = ("reader", "editor", "admin")
SECRET_PREFIX = "abt_"


def hash_secret(secret):
    """The stored form of a token secret."""
    return hashlib.sha256(secret.encode()).hexdigest()


def create_token(name, role):
    """Create a token; return (row, secret). The secret is not stored and cannot be shown again."""
    if role not in ROLES:
        raise ValidationFailed("unknown role", errors=[field_error("role", f"must be one of {', '.join(ROLES)}")])
    if not name.strip():
        raise ValidationFailed("a token needs a name", errors=[field_error("name", "must not be blank")])
    secret = SECRET_PREFIX + secrets.token_urlsafe(32)
    row = ApiToken.create(name=name.strip(), role=role, secret_hash=hash_secret(secret))
    return row, secret
