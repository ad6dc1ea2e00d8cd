"""The OpenAPI document, rendered the same way for /v1/openapi.json's checked-in copy."""

import json


def openapi_document(app):
    """The generated OpenAPI document as stable, indented JSON text."""
    api = app.extensions["flask-smorest"]["apis"][""]["ext_obj"]
    return json.dumps(api.spec.to_dict(), indent=2, sort_keys=True) + "\n"
