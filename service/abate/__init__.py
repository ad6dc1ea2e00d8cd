"""Abate: FMEA follow-through as a JSON service. create_app() builds the Flask application."""

from flask import Flask, request

from abate import api, db
from abate.api import access
from abate.api.common import BoundedIntegerConverter
from abate.config import load_config


def create_app(test_config=None):
    """Build the application: configuration, database binding, API and error handling."""
    app = Flask(__name__, instance_relative_config=False)
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
        # If-None-Match on a GET with an ETag: 304 instead of the body.
        if request.method == "GET" and response.status_code == 200 and response.get_etag()[0]:
            response.make_conditional(request)
        return response

    return app
