"""Requests per token and minute: a token bucket per API token in each service process (429 above it)."""

import math
import threading
import time

from flask import current_app, g

from abate.errors import AbateError

EXTENSION = "abate.rate_limits"


class TooManyRequests(AbateError):
    """The token sent more requests than its rate allows (RFC 6585 section 4)."""

    status = 429
    slug = "too-many-requests"

    def __init__(self, detail, retry_after_seconds):
        super().__init__(detail, retry_after=retry_after_seconds)
        self.headers = {"Retry-After": str(retry_after_seconds)}


class TokenBuckets:
    """Each token may burst up to per_minute requests and regains per_minute / 60 of them each second."""

    def __init__(self, per_minute, clock=time.monotonic):
        self.per_minute = per_minute
        self._clock = clock
        self._buckets = {}
        self._lock = threading.Lock()

    def wait_seconds(self, token_id):
        """Take one request from token_id's bucket: 0 if it may go now, else whole seconds until it may."""
        rate = self.per_minute / 60
        now = self._clock()
        with self._lock:
            level, since = self._buckets.get(token_id, (self.per_minute, now))
            level = min(self.per_minute, level + (now - since) * rate)
            if level >= 1:
                self._buckets[token_id] = (level - 1, now)
                return 0
            self._buckets[token_id] = (level, now)
        return max(1, math.ceil((1 - level) / rate))


def init_app(app):
    """Give app its buckets (none when ABATE_RATE_LIMIT_PER_MINUTE is 0) and check each request."""
    per_minute = int(app.config["RATE_LIMIT_PER_MINUTE"])
    app.extensions[EXTENSION] = TokenBuckets(per_minute) if per_minute > 0 else None
    app.before_request(limit_rate)


def limit_rate():
    """before_request, after the token check: refuse a token over its rate before any work is done."""
    buckets = current_app.extensions[EXTENSION]
    token = g.get("token")
    if buckets is None or token is None:
        return
    wait = buckets.wait_seconds(token.id)
    if wait:
        raise TooManyRequests(
            f"this token may send {buckets.per_minute} requests a minute to this service process; retry in {wait} s",
            wait,
        )
