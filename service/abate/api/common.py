"""What every resource module shares: fields, list envelopes, ETags, If-Match and links."""

import datetime
from urllib.parse import urlencode

import marshmallow as ma
from flask import current_app, request
from werkzeug.routing import IntegerConverter

from abate.api.dumping import PlannedDump
from abate.domain.pagination import paginate
from abate.domain.versions import IF_MATCH_MISSING

# The largest id a 64-bit database column holds; a larger one names nothing (404 in paths, 422 elsewhere).
MAX_ID = 2**63 - 1
DEFAULT_PAGE_SIZE = 50
MAX_PAGE_SIZE = 500
REQUEST_SOURCE = "api"


class BoundedIntegerConverter(IntegerConverter):
    """The <int:...> path converter, limited to ids a 64-bit column can hold."""

    def __init__(self, url_map, *args, **kwargs):
        kwargs.setdefault("max", MAX_ID)
        super().__init__(url_map, *args, **kwargs)


def Id(strict=True, **kwargs):  # noqa: N802 - reads like a field class at the point of use
    """An integer id within 1..MAX_ID; strict (a JSON integer) in bodies, parsed from text in queries."""
    return ma.fields.Integer(strict=strict, validate=ma.validate.Range(min=1, max=MAX_ID), **kwargs)


def Rating(**kwargs):  # noqa: N802
    """A rating: a JSON integer 1..10 (the study's scale narrows it further)."""
    return ma.fields.Integer(strict=True, validate=ma.validate.Range(min=1, max=10), **kwargs)


# Dates the service reasons about; outside them calendar arithmetic (DST, ISO weeks) has no meaning here.
FIRST_DATE, LAST_DATE = datetime.date(1900, 1, 1), datetime.date(9000, 12, 31)
DATE_RANGE = ma.validate.Range(min=FIRST_DATE, max=LAST_DATE, error="must lie between 1900-01-01 and 9000-12-31")


class UTCDateTime(ma.fields.DateTime):
    """An RFC 3339 timestamp in UTC with a Z suffix; the database keeps naive UTC."""

    def _serialize(self, value, attr, obj, **kwargs):
        if value is None:
            return None
        return value.replace(tzinfo=datetime.UTC).isoformat().replace("+00:00", "Z")

    def _deserialize(self, value, attr, data, **kwargs):
        parsed = super()._deserialize(value, attr, data, **kwargs)
        if parsed.tzinfo is None:
            raise self.make_error("invalid", input=value, obj_type="datetime with a time zone offset")
        utc = parsed.astimezone(datetime.UTC).replace(tzinfo=None)
        DATE_RANGE(utc.date())
        return utc


class AsOf(ma.fields.Field):
    """A past moment: YYYY-MM-DD (the end of that day in the study's time zone) or an RFC 3339 timestamp."""

    def _deserialize(self, value, attr, data, **kwargs):
        if isinstance(value, str) and len(value) == 10:
            try:
                day = datetime.date.fromisoformat(value)
            except ValueError:
                pass
            else:
                return DATE_RANGE(day)
        return UTCDateTime()._deserialize(value, attr, data, **kwargs)

    def _jsonschema_type_mapping(self):
        return {"type": "string", "description": "YYYY-MM-DD or an RFC 3339 timestamp"}


class ExternalRefSchema(ma.Schema):
    """A key in another system (ticketing, maintenance, PLM); unique per system and kind of resource."""

    # A slash could never be reached through /v1/actions/by-ref/{system}/{key}: refused up front.
    system = ma.fields.String(
        required=True,
        validate=[ma.validate.Length(min=1, max=100), ma.validate.Regexp(r"^[^/]*$", error="may not contain /")],
    )
    key = ma.fields.String(
        required=True,
        validate=[ma.validate.Length(min=1, max=200), ma.validate.Regexp(r"^[^/]*$", error="may not contain /")],
    )


class PageArgsSchema(ma.Schema):
    """Cursor pagination: `limit` items from the position `cursor` names."""

    limit = ma.fields.Integer(
        load_default=DEFAULT_PAGE_SIZE,
        validate=ma.validate.Range(min=1, max=MAX_PAGE_SIZE),
        metadata={"description": f"Items per page, 1 to {MAX_PAGE_SIZE} (default {DEFAULT_PAGE_SIZE})."},
    )
    cursor = ma.fields.String(metadata={"description": "Opaque position from a previous page's `next` link."})


class ReasonSchema(ma.Schema):
    """A body that carries only the reason for a change."""

    reason = ma.fields.String(
        required=True, validate=ma.validate.Length(min=1, max=2000), metadata={"description": "Why."}
    )


def list_schema(item_schema):
    """The envelope {"items": [...], "next": URL or null} around item_schema (dumped by plan)."""
    name = item_schema.__name__.removesuffix("Schema") + "ListSchema"
    return type(
        name,
        (PlannedDump, ma.Schema),
        {
            "items": ma.fields.List(ma.fields.Nested(item_schema), required=True),
            "next": ma.fields.String(
                allow_none=True, required=True, metadata={"description": "URL of the next page, null on the last."}
            ),
            "__doc__": f"One page of {item_schema.__name__.removesuffix('Schema')} items.",
        },
    )


def next_page_url(next_cursor):
    """The URL of the request's next page at next_cursor (None on the last page)."""
    if not next_cursor:
        return None
    params = [(key, value) for key, value in request.args.items(multi=True) if key != "cursor"]
    return f"{request.base_url}?{urlencode(params + [('cursor', next_cursor)])}"


def page_of(query, order, args, to_views):
    """Paginate query by the request's limit and cursor; return the list envelope."""
    page = paginate(query, order, args["limit"], args.get("cursor"))
    return {"items": to_views(page.rows), "next": next_page_url(page.next_cursor)}


def json_bytes(dumped):
    """A dumped document as the JSON bytes a route's own response would carry."""
    return current_app.json.response(dumped).get_data()


def json_pieces(dumped, mark):
    """A dumped document's JSON bytes cut where the string mark stands, for a value known only later."""
    return json_bytes(dumped).split(current_app.json.dumps(mark).encode())


def json_joined(pieces, value):
    """The pieces of json_pieces joined with value's JSON where the mark stood."""
    return current_app.json.dumps(value).encode().join(pieces)


def serialized_response(body, headers=None):
    """A 200 response of JSON bytes serialized earlier (flask-smorest passes a Response on as it is)."""
    return current_app.response_class(body, mimetype=current_app.json.mimetype, headers=headers)


def etag(tag):
    """The ETag header value of an opaque strong tag from domain.versions."""
    return f'"{tag}"'


def if_match_tags(required=False):
    """The strong tags If-Match names (weak tags never match); None with *.

    Without the header: None, or IF_MATCH_MISSING where the request must carry it (PATCH).
    """
    if not request.headers.get("If-Match"):
        return IF_MATCH_MISSING if required else None
    if request.if_match.star_tag:
        return None
    return set(request.if_match.as_set())


IF_MATCH_PARAMETER = {
    "in": "header",
    "name": "If-Match",
    "required": False,
    "schema": {"type": "string"},
    "description": "The ETag the change is based on; 412 and no change when the resource has moved on.",
}
