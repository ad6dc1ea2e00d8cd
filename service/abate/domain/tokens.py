"""API tokens: random secrets shown once, kept only as SHA-256 hashes, with roles and a last-used time."""

import datetime
import hashlib
import secrets
import time

from abate.domain.clock import utcnow
from abate.errors import Conflict, NotFound, ValidationFailed, field_error
from abate.models import ApiToken
from abate.prepared import PreparedSelect

ROLES = ("reader", "editor", "admin")
SECRET_PREFIX = "abt_"
# last_used_at is written at most this often per token, so reads do not all turn into writes.
LAST_USED_RESOLUTION = datetime.timedelta(minutes=1)
# A live token, once found, is believed live this many seconds without asking the database again. A
# revocation in this process takes effect at once; one made elsewhere (the CLI, another instance) within this.
TRUST_SECONDS = 2.0

_LIVE_TOKEN_BY_HASH = PreparedSelect(
    ApiToken,
    lambda secret_hash: ApiToken.select().where((ApiToken.secret_hash == secret_hash) & ApiToken.revoked_at.is_null()),
)
# secret hash -> (live token, time.monotonic() when the database last said so); unknown secrets never enter.
_recently_live = {}


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


def _live_token(secret_hash):
    checked = time.monotonic()
    known = _recently_live.get(secret_hash)
    if known is not None and checked - known[1] < TRUST_SECONDS:
        return known[0]
    token = _LIVE_TOKEN_BY_HASH.first(secret_hash)
    if token is None:
        _recently_live.pop(secret_hash, None)
    else:
        _recently_live[secret_hash] = (token, checked)
    return token


def authenticate(secret, now=None):
    """The live token with this secret, its last use noted; None for an unknown or revoked one (TRUST_SECONDS)."""
    token = _live_token(hash_secret(secret))
    if token is None:
        return None
    now = now or utcnow()
    if token.last_used_at is None or now - token.last_used_at >= LAST_USED_RESOLUTION:
        ApiToken.update(last_used_at=now).where(ApiToken.id == token.id).execute()
        token.last_used_at = now
    return token


def get_token(token_id):
    """Return the token with this id or raise NotFound."""
    token = ApiToken.get_or_none(ApiToken.id == token_id)
    if token is None:
        raise NotFound(f"token {token_id} does not exist")
    return token


def revoke_token(token_id):
    """Revoke a token for good; revoking it twice is a Conflict."""
    token = get_token(token_id)
    if token.revoked_at is not None:
        raise Conflict(f"token {token_id} is already revoked")
    token.revoked_at = utcnow()
    token.save()
    _recently_live.pop(token.secret_hash, None)
    return token


def tokens_query():
    """Every token, for pagination by the caller."""
    return ApiToken.select()


def token_view(token):
    """A token as plain data; never its secret or hash."""
    return {
        "id": token.id,
        "name": token.name,
        "role": token.role,
        "created_at": token.created_at,
        "last_used_at": token.last_used_at,
        "revoked_at": token.revoked_at,
    }
