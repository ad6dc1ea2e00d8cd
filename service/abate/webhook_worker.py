"""The webhook worker: a background thread that sends due outbox rows, signed, and records every attempt."""

import datetime
import logging
import threading
import time
from dataclasses import dataclass

import requests

from abate import db
from abate.domain import webhooks
from abate.domain.clock import utcnow
from abate.models import WebhookSubscription

log = logging.getLogger(__name__)

POLL_INTERVAL = 1.0
USER_AGENT = "Abate-Webhooks/1"
# A claimed row is hidden from other workers while one attempt can still be running: the
# connect, the answer and the excerpt read may each take up to the timeout.
CLAIM_MARGIN = datetime.timedelta(seconds=60)


@dataclass(frozen=True)
class DeliverySettings:
    """The settings delivery follows."""

    timeout: int
    max_attempts: int
    allowed_hosts: frozenset

    @classmethod
    def from_config(cls, config):
        """The settings the service's configuration describes."""
        return cls(
            timeout=int(config["WEBHOOK_TIMEOUT"]),
            max_attempts=int(config["WEBHOOK_MAX_ATTEMPTS"]),
            allowed_hosts=webhooks.parse_allowed_hosts(config["WEBHOOK_ALLOWED_HOSTS"]),
        )

    @property
    def lease(self):
        """How long a claimed delivery stays hidden from other workers."""
        return 3 * datetime.timedelta(seconds=self.timeout) + CLAIM_MARGIN


def new_session():
    """A requests session for deliveries, ignoring proxy settings and .netrc of the environment.

    The address the destination guard checks must be the one the request connects to.
    """
    session = requests.Session()
    session.trust_env = False
    return session


def _retry_after(response):
    """Retry-After in seconds as a timedelta (the HTTP-date form is not honoured), or None."""
    value = response.headers.get("Retry-After", "").strip()
    return datetime.timedelta(seconds=int(value)) if value.isdigit() else None


def attempt(session, delivery, subscription, settings):
    """POST one delivery to its subscription's URL once and return the AttemptOutcome; never raises for the network."""
    started = time.monotonic()

    def elapsed_ms():
        return int((time.monotonic() - started) * 1000)

    try:
        webhooks.check_destination(subscription.url, settings.allowed_hosts)
    except webhooks.UnsafeDestination as refusal:
        return webhooks.AttemptOutcome(None, error=refusal.detail)
    # The attempt's own time on the real clock, which the receiver compares with its own.
    timestamp = int(time.time())
    headers = {
        "Content-Type": "application/json",
        "User-Agent": USER_AGENT,
        **webhooks.signed_headers(subscription.secret, delivery.message_id, timestamp, delivery.body),
    }
    try:
        with session.post(
            subscription.url,
            data=delivery.body.encode(),
            headers=headers,
            timeout=settings.timeout,
            allow_redirects=False,
            stream=True,
        ) as response:
            return webhooks.AttemptOutcome(
                response.status_code,
                error="" if 200 <= response.status_code < 300 else f"the receiver answered {response.status_code}",
                response_excerpt=_excerpt(response),
                duration_ms=elapsed_ms(),
                retry_after=_retry_after(response),
            )
    except requests.RequestException as error:
        return webhooks.AttemptOutcome(None, error=f"{type(error).__name__}: {error}", duration_ms=elapsed_ms())


def _excerpt(response):
    """The start of the receiver's answer, for the attempt log; its status counts even if the body never comes."""
    try:
        return next(response.iter_content(webhooks.RESPONSE_EXCERPT_CHARS), b"").decode("utf-8", "replace")
    except requests.RequestException as error:
        return f"(the body could not be read: {type(error).__name__})"


def deliver_due(config, now=None, limit=100, session=None):
    """Send up to limit deliveries that are due at now (default: the clock), one claimed at a time; return them."""
    settings = DeliverySettings.from_config(config)
    owned = session is None
    session = session or new_session()
    delivered = []
    try:
        while len(delivered) < limit:
            claimed = webhooks.claim_next(now or utcnow(), settings.lease)
            if claimed is None:
                break
            subscription = WebhookSubscription.get_by_id(claimed.subscription_id)
            outcome = attempt(session, claimed, subscription, settings)
            recorded = webhooks.record_attempt(claimed.id, now or utcnow(), outcome, settings.max_attempts)
            log.info(
                "webhook %s %s to subscription %d: %s after attempt %d%s",
                recorded.message_id,
                recorded.event_type,
                recorded.subscription_id,
                recorded.status,
                recorded.attempts,
                f" ({outcome.error})" if outcome.error else "",
            )
            delivered.append(recorded)
    finally:
        if owned:
            session.close()
    return delivered


class WebhookWorker:
    """Delivers due webhooks in a background thread, polling the outbox about every second, until stopped."""

    def __init__(self, config, poll_interval=POLL_INTERVAL):
        self.config = config
        self.poll_interval = poll_interval
        self._stopping = threading.Event()
        self._thread = None

    def start(self):
        """Start the thread."""
        self._stopping.clear()
        self._thread = threading.Thread(target=self._run, name="abate-webhooks", daemon=True)
        self._thread.start()

    def stop(self, timeout=None):
        """Ask the thread to stop after the attempt in flight and wait for it (up to timeout seconds)."""
        self._stopping.set()
        if self._thread is not None:
            self._thread.join(timeout)

    def _run(self):
        with new_session() as session:
            while not self._stopping.is_set():
                if not self._deliver_one(session):
                    self._stopping.wait(self.poll_interval)

    def _deliver_one(self, session):
        """Send one due delivery, if any, in a connection of its own; whether there was one."""
        try:
            with db.database.connection_context():
                return bool(deliver_due(self.config, limit=1, session=session))
        # A database outage or a bug must not end delivery for the life of the process; log and poll on.
        except Exception:
            log.exception("webhook delivery failed; retrying in %s s", self.poll_interval)
            return False
