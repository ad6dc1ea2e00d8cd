"""Abate: FMEA follow-through as a JSON service. create_app() builds the Flask application."""

from flask import Flask, request

from abate import api, db
from abate.api import access
from abate.api.common import BoundedIntegerConverter
from abate.config import load_config


class AbateFlask(Flask):
    """Flask, deciding once per function that a view or hook is synchronous (every one here is)."""

    def __init__(self, *args, **kwargs):
        super().__init__(*args, **kwargs)
        self._checked_callables = {}

    def ensure_sync(self, func):
        """Flask's answer, kept: it inspects the function anew on each of a request's many hook calls."""
        try:
            return self._checked_callables[func]
        except KeyError:
            checked = self._checked_callables[func] = super().ensure_sync(func)
            return checked
        except TypeError:  # an unhashable callable
            return super().ensure_sync(func)


def create_app(test_config=None):
    """Build the application: configuration, database binding, API and error handling."""
    app = AbateFlask(__name__, instance_relative_config=False)
    app.config.from_mapping(load_config(test_config))
    app.config["MAX_CONTENT_LENGTH"] = int(app.config["MAX_BODY_BYTES"])
    app.json.sort_keys = False
    app.url_map.converters["int"] = BoundedIntegerConverter
    # First, so that its timing and access line cover every other hook.
    access.init_app(app)
    db.init_app(app)
    api.init_app(app)

    @app.after_request
    def _conditional_get(response):
        # If-None-Match on a GET with an ETag: 304 instead of the body (the check is skipped without one).
        if (
            request.method == "GET"
            and response.status_code == 200
            and "If-None-Match" in request.headers
            and "ETag" in response.headers
        ):
            response.make_conditional(request)
        return response

    return app
