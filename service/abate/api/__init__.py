"""The /v1 JSON API: flask-smorest set up to document every schema and answer errors as problems."""

import logging

import marshmallow as ma
import peewee
from flask import json, request
from flask_smorest import Api
from flask_smorest.utils import prepare_response
from werkzeug.exceptions import InternalServerError, UnsupportedMediaType

from abate.api.common import MAX_ID, BoundedIntegerConverter
from abate.api.requestid import problem_instance
from abate.errors import PROBLEM_MEDIA_TYPE, AbateError, ValidationFailed, field_error, problem_document

log = logging.getLogger(__name__)

API_TITLE = "Abate"
API_VERSION = "v1"
BODY_METHODS = ("POST", "PUT", "PATCH")
# Endpoints whose body is a file (multipart or raw CSV/XLSX/JSON), not a JSON document.
FILE_BODY_ENDPOINTS = {"transfer.StudyImport"}


class ProblemErrorSchema(ma.Schema):
    """One field-level problem in a request."""

    location = ma.fields.String(metadata={"description": "json, query, path or header"})
    field = ma.fields.String(metadata={"description": "Dotted path of the field, empty for the whole body"})
    message = ma.fields.String()


class ProblemSchema(ma.Schema):
    """RFC 9457 problem details."""

    type = ma.fields.String(metadata={"description": "URI of the problem type; about:blank for plain HTTP errors"})
    title = ma.fields.String()
    status = ma.fields.Integer()
    detail = ma.fields.String()
    instance = ma.fields.String()
    errors = ma.fields.List(ma.fields.Nested(ProblemErrorSchema), metadata={"description": "Per-field problems"})


class AbateApi(Api):
    """flask-smorest's Api whose errors, raised or documented, are application/problem+json."""

    ERROR_SCHEMA = ProblemSchema

    def _register_error_handlers(self):
        super()._register_error_handlers()
        self._app.register_error_handler(AbateError, _domain_problem)
        self._app.register_error_handler(peewee.OperationalError, _database_unavailable)
        self._app.register_error_handler(peewee.IntegrityError, _integrity_conflict)
        self._app.register_error_handler(peewee.InterfaceError, _database_unavailable)

    def _register_responses(self):
        super()._register_responses()
        # Re-register the lazily documented error responses under the problem media type.
        for response in self.spec.components.responses_lazy.values():
            content = response.pop("content", None)
            if content:
                response["schema"] = next(iter(content.values()))["schema"]
                prepare_response(response, self.spec, PROBLEM_MEDIA_TYPE)

    def handle_http_exception(self, error):
        """Answer any HTTP error (including unhandled exceptions as 500) with problem details."""
        if isinstance(error, InternalServerError) and error.original_exception is not None:
            log.error("unhandled error", exc_info=error.original_exception)
            return problem_response(
                problem_document(500, "an unexpected error occurred; it has been logged", problem_instance()), 500
            )
        data = getattr(error, "data", None) or {}
        detail = "the request failed validation; see errors" if "messages" in data else error.description
        body = problem_document(error.code, detail, problem_instance())
        if "messages" in data:
            body["errors"] = flatten_messages(data["messages"])
        headers = [(key, value) for key, value in error.get_headers() if key.lower() != "content-type"]
        headers += list((data.get("headers") or {}).items())
        return problem_response(body, error.code, headers)


def problem_response(body, status, headers=()):
    """A Flask response tuple carrying problem details."""
    response_headers = {"Content-Type": PROBLEM_MEDIA_TYPE}
    response_headers.update(headers)
    return json.dumps(body), status, response_headers


def _domain_problem(error):
    return problem_response(error.problem(problem_instance()), error.status, error.headers)


def _integrity_conflict(error):
    # A unique index decided a race that the domain's own checks could not see coming.
    body = problem_document(
        409, "the change collides with another write (a unique key is taken); read and retry", problem_instance()
    )
    return problem_response(body, 409)


def _database_unavailable(error):
    log.warning("database unavailable: %s", error)
    body = problem_document(503, "the database is unavailable or busy; retry shortly", problem_instance())
    return problem_response(body, 503, {"Retry-After": "2"})


def flatten_messages(messages, location=None, prefix=""):
    """Turn webargs/marshmallow messages ({location: {field: [text]}}) into [{location, field, message}]."""
    if not isinstance(messages, dict):
        texts = messages if isinstance(messages, list) else [messages]
        return [{"location": location or "", "field": prefix, "message": str(text)} for text in texts]
    flat = []
    for key, value in messages.items():
        if location is None:
            flat += flatten_messages(value, location=str(key))
        else:
            field = prefix if key == "_schema" else (f"{prefix}.{key}" if prefix else str(key))
            flat += flatten_messages(value, location, field)
    return flat


def _has_body():
    if request.content_length is not None:
        return request.content_length > 0
    return "chunked" in request.headers.get("Transfer-Encoding", "").lower()


def _require_json_body():
    """A request body must be JSON (415 otherwise); an empty body is left to the schema."""
    if request.endpoint in FILE_BODY_ENDPOINTS:
        return
    if request.method in BODY_METHODS and _has_body() and not request.is_json:
        raise UnsupportedMediaType(f"send the body as application/json, not {request.mimetype or 'untyped'}")


def _unstorable_strings(value, location, path=""):
    """(location, field) of every string holding NUL or a lone surrogate, which no database stores alike."""
    if isinstance(value, dict):
        for key, item in value.items():
            yield from _unstorable_strings(key, location, path)
            yield from _unstorable_strings(item, location, f"{path}.{key}" if path else str(key))
    elif isinstance(value, list):
        for index, item in enumerate(value):
            yield from _unstorable_strings(item, location, f"{path}.{index}" if path else str(index))
    elif isinstance(value, str):
        try:
            value.encode("utf-8")
        except UnicodeEncodeError:
            yield location, path
            return
        if "\x00" in value:
            yield location, path


def _refuse_unstorable_text():
    """422 for text PostgreSQL cannot hold (NUL) or UTF-8 cannot encode, on every database alike."""
    path_values = (request.view_args or {}).values()
    if request.method not in BODY_METHODS and not request.args and not any(isinstance(v, str) for v in path_values):
        return  # nothing that carries text: a read by numeric ids
    found = [
        *_unstorable_strings(request.view_args or {}, "path"),
        *_unstorable_strings(request.args.to_dict(flat=False), "query"),
    ]
    if request.method in BODY_METHODS and request.is_json:
        found += _unstorable_strings(request.get_json(silent=True), "json")
    if found:
        raise ValidationFailed(
            "text may not contain NUL characters or unpaired surrogates",
            errors=[field_error(field, "NUL or an unpaired surrogate", location) for location, field in found],
        )


def init_app(app):
    """Create the Api for app, register every resource's blueprint and the request checks."""
    from abate.api import (
        actions,
        criticality,
        health,
        history,
        idempotency,
        metrics,
        modes,
        observations,
        owners,
        ratelimit,
        reminders,
        requestid,
        scales,
        studies,
        tokens,
        transfer,
        webhooks,
    )
    from abate.api.auth import require_token

    app.config.update(
        API_TITLE=API_TITLE,
        API_VERSION=API_VERSION,
        OPENAPI_VERSION="3.1.0",
        OPENAPI_URL_PREFIX="/v1",
        OPENAPI_JSON_PATH="openapi.json",
        API_SPEC_OPTIONS={
            "info": {
                "description": (
                    "FMEA follow-through: studies, failure modes, ratings on a company's own scales, "
                    "risk scoring and the record of every rating change. Abate ranks and tracks risk; "
                    "it does not certify. Severity of safety or regulatory effects needs review by "
                    "qualified people."
                )
            }
        },
    )
    api = AbateApi(app)
    api.register_converter(
        BoundedIntegerConverter, lambda converter: {"type": "integer", "minimum": 0, "maximum": MAX_ID}
    )
    for module in (
        health,
        metrics,
        scales,
        studies,
        modes,
        observations,
        actions,
        history,
        criticality,
        tokens,
        reminders,
        owners,
        webhooks,
        transfer,
    ):
        api.register_blueprint(module.blp)
    requestid.init_app(app)
    app.before_request(require_token)
    ratelimit.init_app(app)
    app.before_request(_require_json_body)
    app.before_request(_refuse_unstorable_text)
    app.before_request(idempotency.start)
    app.after_request(idempotency.finish)
    app.teardown_request(idempotency.abandon)
    return api
