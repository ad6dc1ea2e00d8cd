"""/v1/owners/{email}/preferences: what an action or study owner wants to be sent."""

import marshmallow as ma
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.common import IF_MATCH_PARAMETER, UTCDateTime, etag, if_match_tags
from abate.domain import reminders

blp = Blueprint("owners", __name__, url_prefix="/v1", description="Owners' notice preferences")


class PreferencesSchema(ma.Schema):
    """An owner's notice preferences; an owner who never set any gets every notice."""

    email = ma.fields.String(dump_only=True, metadata={"description": "The owner's address, lower-case"})
    due_soon_notices = ma.fields.Boolean(
        required=True, metadata={"description": "false: leave actions that are due soon out of the daily digest"}
    )
    overdue_notices = ma.fields.Boolean(
        dump_only=True, metadata={"description": "Always true: overdue actions are always reported"}
    )
    version = ma.fields.Integer(dump_only=True, metadata={"description": "0 while the owner has set nothing"})
    updated_at = UTCDateTime(dump_only=True, allow_none=True)


def _respond(row):
    view = {
        "email": row.email,
        "due_soon_notices": row.due_soon_notices,
        "overdue_notices": True,
        "version": row.version,
        "updated_at": row.updated_at,
    }
    return view, 200, {"ETag": etag(reminders.preferences_tag(row))}


@blp.route("/owners/<email>/preferences")
class OwnerPreferences(MethodView):
    """One owner's preferences, by e-mail address (case-insensitive)."""

    @blp.response(200, PreferencesSchema)
    @blp.alt_response(422, description="Not an e-mail address")
    def get(self, email):
        """Read an owner's preferences."""
        return _respond(reminders.get_preferences(email))

    @blp.arguments(PreferencesSchema)
    @blp.response(200, PreferencesSchema)
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.alt_response(422, description="Not an e-mail address")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def put(self, data, email):
        """Set an owner's preferences: opt out of (or back into) due-soon notices; overdue ones always come."""
        return _respond(reminders.set_preferences(email, data["due_soon_notices"], if_match_tags()))
