"""Each answered request: one access-log line and the request metrics, from counters only (no database)."""

import logging
import time

from flask import current_app, g, request

from abate.metrics import EXTENSION, AppMetrics

access_log = logging.getLogger("abate.access")


def init_app(app):
    """Give app its metrics; register the hooks first, so that they time and see every other hook."""
    app.extensions[EXTENSION] = AppMetrics()
    app.before_request(start_timing)
    app.after_request(observe)


def start_timing():
    """before_request: note when the request began."""
    g.request_started = time.perf_counter()


def observe(response):
    """after_request, last of all: count the request under its route template and log it."""
    seconds = time.perf_counter() - g.get("request_started", time.perf_counter())
    route = request.url_rule.rule if request.url_rule else None
    current_app.extensions[EXTENSION].observe_request(route, request.method, response.status_code, seconds)
    if access_log.isEnabledFor(logging.INFO):
        token = g.get("token")
        fields = {
            "method": request.method,
            "path": request.path,
            "route": route,
            "status": response.status_code,
            "duration_ms": round(seconds * 1000, 1),
        }
        if token is not None:
            fields["token_id"] = token.id
        access_log.info("%s %s %s", request.method, request.path, response.status_code, extra=fields)
    return response
