"""/v1/tokens: API tokens for integrations and people (admins only)."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.common import PageArgsSchema, UTCDateTime, list_schema, page_of
from abate.domain import tokens
from abate.models import ApiToken

blp = Blueprint("tokens", __name__, url_prefix="/v1/tokens", description="API tokens (admin)")


class TokenSchema(ma.Schema):
    """An API token; its secret appears once, in the response that creates it."""

    id = ma.fields.Integer(dump_only=True)
    name = ma.fields.String(required=True, validate=ma.validate.Length(min=1, max=200))
    role = ma.fields.String(required=True, validate=ma.validate.OneOf(tokens.ROLES))
    token = ma.fields.String(dump_only=True, metadata={"description": "The secret; only when created"})
    created_at = UTCDateTime(dump_only=True)
    last_used_at = UTCDateTime(dump_only=True, allow_none=True)
    revoked_at = UTCDateTime(dump_only=True, allow_none=True)


@blp.route("")
class Tokens(MethodView):
    """The collection of tokens."""

    @blp.arguments(PageArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(TokenSchema))
    def get(self, args):
        """List tokens (never their secrets)."""
        return page_of(
            tokens.tokens_query(), [(ApiToken.id, False)], args, lambda rows: list(map(tokens.token_view, rows))
        )

    @blp.arguments(TokenSchema)
    @blp.response(201, TokenSchema)
    def post(self, data):
        """Create a token; keep the secret in `token`, it is not shown again."""
        row, secret = tokens.create_token(data["name"], data["role"])
        return {**tokens.token_view(row), "token": secret}, 201, {"Location": f"/v1/tokens/{row.id}"}


@blp.route("/<int:token_id>")
class TokenById(MethodView):
    """One token."""

    @blp.response(200, TokenSchema)
    def get(self, token_id):
        """Read a token."""
        return tokens.token_view(tokens.get_token(token_id))


@blp.route("/<int:token_id>/revoke")
class TokenRevocation(MethodView):
    """Revoking a token."""

    @blp.response(200, TokenSchema)
    @blp.alt_response(409, description="Already revoked")
    def post(self, token_id):
        """Revoke a token; requests with it are 401 from now on."""
        return tokens.token_view(tokens.revoke_token(token_id))
