"""The OpenAPI document: generated from the schemas, checked in, valid OpenAPI 3.1."""

import json
from pathlib import Path

from openapi_spec_validator import validate

from abate.openapi import openapi_document

CHECKED_IN = Path(__file__).resolve().parents[1] / "openapi" / "abate-v1.json"


def test_checked_in_document_matches_the_generated_one(app):
    # Regenerate with `make openapi` after changing a schema or route.
    assert CHECKED_IN.read_text(encoding="utf-8") == openapi_document(app)


def test_document_is_valid_openapi_3_1(app):
    # OpenAPI Specification 3.1.0, checked by openapi-spec-validator.
    document = json.loads(openapi_document(app))
    assert document["openapi"] == "3.1.0"
    validate(document)


def test_served_document_is_the_generated_one(client, app):
    response = client.get("/v1/openapi.json")
    assert response.status_code == 200
    assert response.get_json() == json.loads(openapi_document(app))


def test_errors_are_documented_as_problem_details(app):
    # RFC 9457 section 3: media type application/problem+json.
    document = json.loads(openapi_document(app))
    responses = document["components"]["responses"]
    assert responses, "error responses are documented"
    for response in responses.values():
        assert list(response["content"]) == ["application/problem+json"]
        assert response["content"]["application/problem+json"]["schema"] == {"$ref": "#/components/schemas/Problem"}
    assert {"type", "title", "status", "detail", "instance"} <= set(
        document["components"]["schemas"]["Problem"]["properties"]
    )
