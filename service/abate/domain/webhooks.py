"""Outbound webhooks: subscriptions, the outbox of signed deliveries, retries and the destination guard."""

import base64
import datetime
import hashlib
import hmac
import ipaddress
import json
import random
import secrets
import socket
from dataclasses import dataclass
from urllib.parse import urlsplit

from abate.db import database, lock_for_update
from abate.domain.clock import utcnow
from abate.domain.versions import check_precondition, save_new_version
from abate.errors import Conflict, NotFound, ValidationFailed, field_error
from abate.models import WebhookAttempt, WebhookDelivery, WebhookSubscription

EVENT_TYPES = (
    "action.created",
    "action.updated",
    "action.closed",
    "action.reopened",
    "action.overdue",
    "mode.rerated",
    "mode.occurrence_drift",
    "study.risk_changed",
)
DELIVERY_STATUSES = ("pending", "delivered", "failed", "disabled")
# The event type each action kind of risk event announces; a cancellation is an update to status cancelled.
ACTION_EVENT_TYPES = {
    "action_created": "action.created",
    "action_updated": "action.updated",
    "action_cancelled": "action.updated",
    "action_closed": "action.closed",
    "action_reopened": "action.reopened",
}
RERATING_KINDS = ("rerated", "action_closed", "action_reopened")
SECRET_PREFIX = "whsec_"
# Standard Webhooks 1.0 asks for 24 to 64 random bytes.
SECRET_BYTES = 32
SIGNATURE_VERSION = "v1"
FIRST_RETRY = datetime.timedelta(seconds=10)
RETRY_GROWTH = 4
LONGEST_RETRY = datetime.timedelta(hours=12)
RESPONSE_EXCERPT_CHARS = 1000
# Instance-metadata services of the large clouds (from memory); the IPv4 one is link-local anyway.
METADATA_ADDRESSES = frozenset(map(ipaddress.ip_address, ("169.254.169.254", "fd00:ec2::254", "100.100.100.200")))
_NAT64_PREFIX = ipaddress.ip_network("64:ff9b::/96")


class UnsafeDestination(ValidationFailed):
    """A webhook URL that is not http(s), does not resolve, or resolves to an address webhooks may not reach."""

    slug = "unsafe-destination"


@dataclass(frozen=True)
class AttemptOutcome:
    """What one HTTP attempt came to: the receiver's status (None if there was no answer) or the error."""

    status_code: int | None
    error: str = ""
    response_excerpt: str = ""
    duration_ms: int = 0
    retry_after: datetime.timedelta | None = None

    @property
    def succeeded(self):
        """Standard Webhooks 1.0: any 2xx answer is a delivery, anything else a failure."""
        return self.status_code is not None and 200 <= self.status_code < 300


# Signing (Standard Webhooks 1.0, "Signature scheme")


def new_secret():
    """A fresh signing secret: whsec_ and the base64 of random bytes."""
    return SECRET_PREFIX + base64.b64encode(secrets.token_bytes(SECRET_BYTES)).decode()


def sign(secret, message_id, timestamp, body):
    """The webhook-signature value: v1, and the base64 HMAC-SHA256 of id.timestamp.body under the secret's key."""
    key = base64.b64decode(secret.removeprefix(SECRET_PREFIX))
    digest = hmac.new(key, f"{message_id}.{timestamp}.{body}".encode(), hashlib.sha256).digest()
    return f"{SIGNATURE_VERSION},{base64.b64encode(digest).decode()}"


def signed_headers(secret, message_id, timestamp, body):
    """The three webhook-* headers of one attempt; timestamp is the attempt's Unix time in seconds."""
    return {
        "webhook-id": message_id,
        "webhook-timestamp": str(timestamp),
        "webhook-signature": sign(secret, message_id, timestamp, body),
    }


# Where webhooks may go


def parse_allowed_hosts(text):
    """ABATE_WEBHOOK_ALLOWED_HOSTS as a set of lower-case host names and normalised IP addresses."""
    allowed = set()
    for entry in (text or "").split(","):
        entry = entry.strip().lower().strip("[]").rstrip(".")
        if entry:
            allowed.add(_normalised_ip(entry) or entry)
    return frozenset(allowed)


def _normalised_ip(text):
    try:
        return str(ipaddress.ip_address(text))
    except ValueError:
        return None


def _embedded_ipv4(address):
    """The IPv4 address an IPv6 one carries (mapped, 6to4 or NAT64), which is where packets end up."""
    if address.version == 4:
        return None
    if address in _NAT64_PREFIX:
        return ipaddress.IPv4Address(int(address) & 0xFFFFFFFF)
    return address.ipv4_mapped or address.sixtofour


def _refusal(address, host_allowed, allowed_hosts):
    """Why webhooks may not go to address, or None when they may."""
    effective = _embedded_ipv4(address) or address
    if {address, effective} & METADATA_ADDRESSES:
        return f"{address} is a cloud metadata address"
    if address.is_link_local or effective.is_link_local:
        return f"{address} is link-local"
    if effective.is_unspecified or effective.is_multicast:
        return f"{address} is not a unicast address"
    if effective.is_global or host_allowed or {str(address), str(effective)} & allowed_hosts:
        return None
    return f"{address} is loopback or private and not in ABATE_WEBHOOK_ALLOWED_HOSTS"


def check_destination(url, allowed_hosts):
    """Raise UnsafeDestination unless every address url's host resolves to may receive webhooks.

    Link-local and metadata addresses are never allowed; loopback and private ones only when
    the host name or the address is in allowed_hosts.
    """
    parts = urlsplit(url)
    try:
        port = parts.port
    except ValueError as error:
        raise _unsafe(url, "its port is not a number") from error
    if parts.scheme not in ("http", "https") or not parts.hostname:
        raise _unsafe(url, "use an http or https URL with a host")
    host = parts.hostname.rstrip(".")
    try:
        resolved = socket.getaddrinfo(host, port or (443 if parts.scheme == "https" else 80), proto=socket.IPPROTO_TCP)
    except (socket.gaierror, UnicodeError) as error:
        raise _unsafe(url, f"its host {host!r} does not resolve ({error})") from error
    host_allowed = host in allowed_hosts
    for *_, sockaddr in resolved:
        reason = _refusal(ipaddress.ip_address(sockaddr[0]), host_allowed, allowed_hosts)
        if reason:
            raise _unsafe(url, reason)


def _unsafe(url, reason):
    return UnsafeDestination(f"webhooks may not be sent to {url}: {reason}", errors=[field_error("url", reason)])


# Subscriptions


def subscription_tag(subscription):
    """A subscription changes only with its own version."""
    return str(subscription.version)


def get_subscription(subscription_id):
    """Return the subscription with this id or raise NotFound."""
    subscription = WebhookSubscription.get_or_none(WebhookSubscription.id == subscription_id)
    if subscription is None:
        raise NotFound(f"webhook subscription {subscription_id} does not exist")
    return subscription


def _checked_event_types(event_types):
    unknown = sorted(set(event_types) - set(EVENT_TYPES))
    if unknown or not event_types:
        message = f"unknown event types {', '.join(unknown)}" if unknown else "name at least one event type"
        raise ValidationFailed("the subscription's events are not valid", errors=[field_error("events", message)])
    return [name for name in EVENT_TYPES if name in event_types]


def create_subscription(data, allowed_hosts):
    """Subscribe a URL to event types; the new row holds the secret, which the caller shows once."""
    check_destination(data["url"], allowed_hosts)
    return WebhookSubscription.create(
        url=data["url"],
        events=",".join(_checked_event_types(data["events"])),
        description=data.get("description", ""),
        secret=new_secret(),
    )


def update_subscription(subscription_id, changes, expected_tags=None):
    """Change a subscription's event types, description or active flag."""
    with database.atomic():
        subscription = lock_for_update(
            WebhookSubscription.select().where(WebhookSubscription.id == subscription_id)
        ).first()
        if subscription is None:
            raise NotFound(f"webhook subscription {subscription_id} does not exist")
        check_precondition(subscription_tag(subscription), expected_tags)
        if "events" in changes:
            subscription.events = ",".join(_checked_event_types(changes["events"]))
        if "description" in changes:
            subscription.description = changes["description"]
        if changes.get("active") is True:
            subscription.active, subscription.disabled_reason = True, ""
        elif changes.get("active") is False and subscription.active:
            _disable(subscription, "deactivated by an admin")
        save_new_version(subscription)
    return subscription


def _disable(subscription, reason):
    """Turn the subscription off (unsaved) and take its undelivered messages out of the queue."""
    subscription.active, subscription.disabled_reason = False, reason
    WebhookDelivery.update(status="disabled", next_attempt_at=None).where(
        (WebhookDelivery.subscription == subscription) & (WebhookDelivery.status == "pending")
    ).execute()


def subscriptions_query():
    """Every subscription, for pagination by the caller."""
    return WebhookSubscription.select()


def subscription_view(subscription):
    """A subscription as plain data; never its secret."""
    return {
        "id": subscription.id,
        "url": subscription.url,
        "events": subscription.event_types,
        "description": subscription.description,
        "active": subscription.active,
        "disabled_reason": subscription.disabled_reason,
        "version": subscription.version,
        "created_at": subscription.created_at,
        "updated_at": subscription.updated_at,
    }


# The outbox


def _json_value(value):
    if isinstance(value, datetime.datetime):
        return value.replace(tzinfo=datetime.UTC).isoformat().replace("+00:00", "Z")
    if isinstance(value, datetime.date):
        return value.isoformat()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


def _enqueue(subscriptions, event_type, data, occurred_at, message_id):
    receivers = [subscription for subscription in subscriptions if event_type in subscription.event_types]
    if not receivers:
        return
    # Standard Webhooks payload structure: type, timestamp, data; the body is fixed here, so every retry is identical.
    body = json.dumps(
        {"type": event_type, "timestamp": occurred_at, "data": data}, default=_json_value, separators=(",", ":")
    )
    now = utcnow()
    rows = [
        {
            "subscription": subscription.id,
            "message_id": message_id,
            "event_type": event_type,
            "body": body,
            "next_attempt_at": now,
            "created_at": now,
        }
        for subscription in receivers
    ]
    WebhookDelivery.insert_many(rows).on_conflict_ignore().execute()


def active_subscriptions():
    """The subscriptions that receive events now."""
    return list(WebhookSubscription.select().where(WebhookSubscription.active))


def _message_id(dedup_key=None):
    """A webhook-id: random, or derived from dedup_key so that the same event is queued only once."""
    if dedup_key is None:
        return "msg_" + secrets.token_urlsafe(18)
    return "msg_" + hashlib.sha256(dedup_key.encode()).hexdigest()[:32]


def enqueue_event(event_type, data, *, occurred_at=None, dedup_key=None, subscriptions=None):
    """Queue one event for every active subscription to its type, inside the caller's transaction.

    data is the payload's `data` object; a second call with the same dedup_key queues nothing.
    A caller queueing many events passes the active subscriptions it read once.
    """
    if event_type not in EVENT_TYPES:
        raise ValueError(f"unknown webhook event type {event_type!r}")
    if subscriptions is None:
        subscriptions = active_subscriptions()
    _enqueue(subscriptions, event_type, data, occurred_at or utcnow(), _message_id(dedup_key))


def risk_event_types(event, previous):
    """The webhook event types one risk event (as events.event_view gives it) announces."""
    types = [ACTION_EVENT_TYPES[event["kind"]]] if event["kind"] in ACTION_EVENT_TYPES else []
    if event["kind"] in RERATING_KINDS and event["before"] != event["after"]:
        types.append("mode.rerated")
    figures = ("study_total_rpn", "study_needs_action_count")
    if any(event[name] != (previous[name] if previous else 0) for name in figures):
        types.append("study.risk_changed")
    return types


def enqueue_risk_event(event, previous, action_status=None):
    """Queue the webhooks of a risk event just recorded; event and previous are event views."""
    subscriptions = active_subscriptions()
    if not subscriptions:
        return
    data = {
        "event_id": event["id"],
        **{name: value for name, value in event.items() if name != "id"},
        "action_status": action_status,
        "previous_study_total_rpn": previous["study_total_rpn"] if previous else 0,
        "previous_study_needs_action_count": previous["study_needs_action_count"] if previous else 0,
    }
    for event_type in risk_event_types(event, previous):
        _enqueue(subscriptions, event_type, data, event["occurred_at"], _message_id())


def get_delivery(delivery_id):
    """Return the delivery with this id or raise NotFound."""
    delivery = WebhookDelivery.get_or_none(WebhookDelivery.id == delivery_id)
    if delivery is None:
        raise NotFound(f"webhook delivery {delivery_id} does not exist")
    return delivery


def deliveries_query(subscription_id, status=None):
    """A subscription's deliveries, optionally of one status, for pagination by the caller."""
    query = WebhookDelivery.select().where(WebhookDelivery.subscription == get_subscription(subscription_id))
    if status:
        query = query.where(WebhookDelivery.status == status)
    return query


def redeliver(delivery_id, now=None):
    """Queue a delivered, failed or disabled message again, with the same webhook-id and body."""
    with database.atomic():
        delivery = lock_for_update(WebhookDelivery.select().where(WebhookDelivery.id == delivery_id)).first()
        if delivery is None:
            raise NotFound(f"webhook delivery {delivery_id} does not exist")
        if delivery.status == "pending":
            raise Conflict(f"webhook delivery {delivery_id} is already queued")
        if not delivery.subscription.active:
            raise Conflict(f"webhook subscription {delivery.subscription_id} is disabled; activate it first")
        delivery.status, delivery.attempts, delivery.delivered_at = "pending", 0, None
        delivery.next_attempt_at = now or utcnow()
        delivery.save()
    return delivery


def claim_next(now, lease):
    """Take the next due delivery for this worker: its attempt counts, and no other worker sees it for lease.

    On PostgreSQL rows another worker holds are skipped, not waited for; SQLite's write lock serialises.
    """
    with database.atomic():
        query = (
            WebhookDelivery.select()
            .where((WebhookDelivery.status == "pending") & (WebhookDelivery.next_attempt_at <= now))
            .order_by(WebhookDelivery.next_attempt_at, WebhookDelivery.id)
            .limit(1)
        )
        if database.for_update:
            query = query.for_update(skip_locked=True)
        delivery = query.first()
        if delivery is not None:
            delivery.attempts += 1
            delivery.next_attempt_at = now + lease
            delivery.save(only=[WebhookDelivery.attempts, WebhookDelivery.next_attempt_at])
    return delivery


def retry_delay(attempts, rng=random):
    """The wait after `attempts` failed attempts: growing exponentially to LONGEST_RETRY, the second half jittered."""
    ceiling = min(FIRST_RETRY * RETRY_GROWTH ** (attempts - 1), LONGEST_RETRY)
    # Jitter spreads the retries of many messages failed by one outage, so they do not return together.
    return ceiling / 2 + ceiling / 2 * rng.random()


def record_attempt(delivery_id, attempted_at, outcome, max_attempts):
    """Log one attempt and move the delivery on: delivered, retried later, failed, or disabled by a 410."""
    with database.atomic():
        delivery = lock_for_update(WebhookDelivery.select().where(WebhookDelivery.id == delivery_id)).get()
        WebhookAttempt.create(
            delivery=delivery,
            attempted_at=attempted_at,
            status_code=outcome.status_code,
            error=outcome.error[:2000],
            response_excerpt=outcome.response_excerpt[:RESPONSE_EXCERPT_CHARS],
            duration_ms=outcome.duration_ms,
        )
        delivery.last_status_code, delivery.last_error = outcome.status_code, outcome.error[:2000]
        if outcome.succeeded:
            delivery.status, delivery.delivered_at, delivery.next_attempt_at = "delivered", attempted_at, None
        elif outcome.status_code == 410:
            # Standard Webhooks 1.0: 410 Gone means the receiver wants nothing more from this sender.
            delivery.status, delivery.next_attempt_at = "disabled", None
            subscription = delivery.subscription
            _disable(subscription, f"the receiver answered 410 Gone at {attempted_at.isoformat()}Z")
            save_new_version(subscription)
        # A delivery disabled while this attempt was on the wire stays disabled.
        elif delivery.status == "pending" and delivery.attempts >= max_attempts:
            delivery.status, delivery.next_attempt_at = "failed", None
        elif delivery.status == "pending":
            wait = max(retry_delay(delivery.attempts), min(outcome.retry_after or datetime.timedelta(), LONGEST_RETRY))
            delivery.next_attempt_at = attempted_at + wait
        delivery.save()
    return delivery


def delivery_views(deliveries):
    """Deliveries as plain data, each with every attempt made so far."""
    deliveries = list(deliveries)
    attempts = {delivery.id: [] for delivery in deliveries}
    query = WebhookAttempt.select().where(WebhookAttempt.delivery.in_(list(attempts))).order_by(WebhookAttempt.id)
    for attempt in query:
        attempts[attempt.delivery_id].append(
            {
                "attempted_at": attempt.attempted_at,
                "status_code": attempt.status_code,
                "error": attempt.error,
                "response_excerpt": attempt.response_excerpt,
                "duration_ms": attempt.duration_ms,
            }
        )
    return [
        {
            "id": delivery.id,
            "subscription_id": delivery.subscription_id,
            "webhook_id": delivery.message_id,
            "event_type": delivery.event_type,
            "status": delivery.status,
            "attempt_count": delivery.attempts,
            "next_attempt_at": delivery.next_attempt_at if delivery.status == "pending" else None,
            "last_status_code": delivery.last_status_code,
            "last_error": delivery.last_error,
            "delivered_at": delivery.delivered_at,
            "created_at": delivery.created_at,
            "payload": json.loads(delivery.body),
            "attempts": attempts[delivery.id],
        }
        for delivery in deliveries
    ]
