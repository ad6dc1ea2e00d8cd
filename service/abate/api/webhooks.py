"""/v1/webhooks: subscriptions to signed event notifications, their deliveries and redelivery (admins only)."""

import marshmallow as ma
from flask import current_app
from flask.views import MethodView
from flask_smorest import Blueprint

from abate.api.common import (
    IF_MATCH_PARAMETER,
    PageArgsSchema,
    UTCDateTime,
    etag,
    if_match_tags,
    list_schema,
    page_of,
)
from abate.domain import webhooks
from abate.models import WebhookDelivery, WebhookSubscription

blp = Blueprint(
    "webhooks",
    __name__,
    url_prefix="/v1/webhooks",
    description="Outbound webhooks, signed as Standard Webhooks 1.0 specifies (admin)",
)

_EVENTS_DESCRIPTION = f"Event types to send: {', '.join(webhooks.EVENT_TYPES)}"


def _event_types(**kwargs):
    return ma.fields.List(
        ma.fields.String(validate=ma.validate.OneOf(webhooks.EVENT_TYPES)),
        validate=ma.validate.Length(min=1, max=len(webhooks.EVENT_TYPES)),
        metadata={"description": _EVENTS_DESCRIPTION},
        **kwargs,
    )


class WebhookSchema(ma.Schema):
    """A webhook subscription; its signing secret appears once, in the response that creates it."""

    id = ma.fields.Integer(dump_only=True)
    url = ma.fields.Url(
        required=True,
        schemes={"http", "https"},
        require_tld=False,
        validate=ma.validate.Length(max=2000),
        metadata={
            "description": "Receiver; never a link-local or metadata address, loopback or private ones only "
            "when ABATE_WEBHOOK_ALLOWED_HOSTS names them"
        },
    )
    events = _event_types(required=True)
    description = ma.fields.String(validate=ma.validate.Length(max=2000))
    active = ma.fields.Boolean(dump_only=True)
    disabled_reason = ma.fields.String(
        dump_only=True, metadata={"description": "Why deliveries stopped, e.g. the receiver answered 410 Gone"}
    )
    secret = ma.fields.String(
        dump_only=True,
        metadata={"description": "whsec_ and the base64 signing key; only when created (Standard Webhooks 1.0)"},
    )
    version = ma.fields.Integer(dump_only=True)
    created_at = UTCDateTime(dump_only=True)
    updated_at = UTCDateTime(dump_only=True)


class WebhookPatchSchema(ma.Schema):
    """A change to a subscription; every field optional."""

    events = _event_types()
    description = ma.fields.String(validate=ma.validate.Length(max=2000))
    active = ma.fields.Boolean(
        metadata={"description": "false stops deliveries (queued ones become disabled); true resumes new ones"}
    )


class AttemptSchema(ma.Schema):
    """One HTTP attempt at a delivery."""

    attempted_at = UTCDateTime()
    status_code = ma.fields.Integer(allow_none=True, metadata={"description": "null when no answer came"})
    error = ma.fields.String()
    response_excerpt = ma.fields.String(metadata={"description": "The start of the receiver's answer"})
    duration_ms = ma.fields.Integer()


class DeliverySchema(ma.Schema):
    """One event for one subscription: its fixed payload, stable webhook-id and every attempt."""

    id = ma.fields.Integer()
    subscription_id = ma.fields.Integer()
    webhook_id = ma.fields.String(metadata={"description": "The webhook-id header, the same on every attempt"})
    event_type = ma.fields.String()
    status = ma.fields.String(metadata={"description": "pending, delivered, failed (out of attempts) or disabled"})
    attempt_count = ma.fields.Integer(metadata={"description": "Attempts since it was queued or redelivered"})
    next_attempt_at = UTCDateTime(allow_none=True)
    last_status_code = ma.fields.Integer(allow_none=True)
    last_error = ma.fields.String()
    delivered_at = UTCDateTime(allow_none=True)
    created_at = UTCDateTime()
    payload = ma.fields.Dict(metadata={"description": "The body sent: type, timestamp and data"})
    attempts = ma.fields.List(ma.fields.Nested(AttemptSchema))


class DeliveryQueryArgsSchema(PageArgsSchema):
    """Filter of a subscription's deliveries."""

    status = ma.fields.String(validate=ma.validate.OneOf(webhooks.DELIVERY_STATUSES))


def _allowed_hosts():
    return webhooks.parse_allowed_hosts(current_app.config["WEBHOOK_ALLOWED_HOSTS"])


def _respond(subscription, status=200, **extra):
    headers = {"ETag": etag(webhooks.subscription_tag(subscription))}
    if status == 201:
        headers["Location"] = f"/v1/webhooks/{subscription.id}"
    return {**webhooks.subscription_view(subscription), **extra}, status, headers


def _subscription_views(rows):
    return list(map(webhooks.subscription_view, rows))


@blp.route("")
class Webhooks(MethodView):
    """The collection of subscriptions."""

    @blp.arguments(PageArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(WebhookSchema))
    def get(self, args):
        """List subscriptions (never their secrets)."""
        return page_of(webhooks.subscriptions_query(), [(WebhookSubscription.id, False)], args, _subscription_views)

    @blp.arguments(WebhookSchema)
    @blp.response(201, WebhookSchema)
    def post(self, data):
        """Subscribe a URL to event types; keep the `secret`, it is not shown again."""
        subscription = webhooks.create_subscription(data, _allowed_hosts())
        return _respond(subscription, 201, secret=subscription.secret)


@blp.route("/<int:subscription_id>")
class WebhookById(MethodView):
    """One subscription."""

    @blp.response(200, WebhookSchema)
    def get(self, subscription_id):
        """Read a subscription."""
        return _respond(webhooks.get_subscription(subscription_id))

    @blp.arguments(WebhookPatchSchema)
    @blp.response(200, WebhookSchema)
    @blp.alt_response(412, description="If-Match names an older version; nothing changed")
    @blp.doc(parameters=[IF_MATCH_PARAMETER])
    def patch(self, changes, subscription_id):
        """Change the event types, the description or whether the subscription is active."""
        return _respond(
            webhooks.update_subscription(subscription_id, changes, expected_tags=if_match_tags(required=True))
        )


@blp.route("/<int:subscription_id>/deliveries")
class WebhookDeliveries(MethodView):
    """The deliveries of one subscription."""

    @blp.arguments(DeliveryQueryArgsSchema, location="query", unknown=ma.RAISE)
    @blp.response(200, list_schema(DeliverySchema))
    def get(self, args, subscription_id):
        """List deliveries, newest first, each with every attempt made."""
        query = webhooks.deliveries_query(subscription_id, args.get("status"))
        return page_of(query, [(WebhookDelivery.id, True)], args, webhooks.delivery_views)


@blp.route("/deliveries/<int:delivery_id>/redeliver")
class WebhookRedelivery(MethodView):
    """Sending a delivery again."""

    @blp.response(202, DeliverySchema)
    @blp.alt_response(409, description="Already queued, or the subscription is disabled")
    def post(self, delivery_id):
        """Queue a delivered, failed or disabled delivery again, with the same webhook-id and payload."""
        return webhooks.delivery_views([webhooks.redeliver(delivery_id)])[0]
