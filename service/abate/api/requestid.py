"""A request id for every request: taken from a sane X-Request-Id or made here, echoed, and named in problems."""

import re
import uuid

from flask import g, request

HEADER = "X-Request-Id"
# A caller's (or proxy's) id is kept when it is short and plain; anything else could forge log lines.
_SANE = re.compile(r"[A-Za-z0-9._:-]{1,64}")


def init_app(app):
    """Register the hooks first, so that even a request refused by a later check has its id."""
    app.before_request(assign_request_id)
    app.after_request(echo_request_id)


def assign_request_id():
    """before_request: the caller's X-Request-Id if it is sane, else a new random one."""
    offered = request.headers.get(HEADER, "")
    g.request_id = offered if _SANE.fullmatch(offered) else uuid.uuid4().hex


def current_request_id():
    """This request's id (a new one if the hooks did not run, as for an error raised before them)."""
    if "request_id" not in g:
        g.request_id = uuid.uuid4().hex
    return g.request_id


def problem_instance():
    """The RFC 9457 `instance` of a problem in this request: a URI naming this occurrence."""
    return f"urn:abate:request:{current_request_id()}"


def echo_request_id(response):
    """after_request: tell the caller which id to quote."""
    response.headers[HEADER] = current_request_id()
    return response
