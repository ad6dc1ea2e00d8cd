"""Every operation of openapi/abate-v1.json, fed schemathesis-generated requests in-process.

No 5xx; every status, media type and body as documented; 405 carries Allow.
"""

from pathlib import Path

import schemathesis
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st
from schemathesis.checks import (
    content_type_conformance,
    not_a_server_error,
    response_schema_conformance,
    unsupported_method,
)

from abate.api.transfer import XLSX_MEDIA_TYPE

from .conftest import ADMIN_TOKEN_ID, DECOY_TOKEN_ID, SEEDED_PATH_VALUES

DOCUMENT = Path(__file__).resolve().parents[2] / "openapi" / "abate-v1.json"
# Statuses any operation may answer through its `default` problem response, listed or not:
# a body that is not a JSON object, authentication and roles, methods, body size and type,
# rate limits and an unavailable database.
ANSWERED_ANYWHERE = {400, 401, 403, 405, 413, 415, 429, 503}

# The importer reads XLSX bodies; generated ones go out as raw bytes.
schemathesis.serializer.alias(XLSX_MEDIA_TYPE, "application/octet-stream")

schema = schemathesis.openapi.from_path(DOCUMENT).exclude(
    # Subscribing resolves the generated host names through DNS: the network, not the app in-process.
    method="POST",
    path="/v1/webhooks",
)


@schema.hook
def flatmap_path_parameters(context, path_parameters):
    """Half the generated paths name seeded records instead, so that those examples get past the 404."""
    seeded = {
        name: st.sampled_from(SEEDED_PATH_VALUES[name]) if name in SEEDED_PATH_VALUES else st.just(value)
        for name, value in (path_parameters or {}).items()
    }
    return st.one_of(st.just(path_parameters), st.fixed_dictionaries(seeded))


def status_code_listed(ctx, response, case):
    """The status is one the operation lists, or one the API answers anywhere.

    Stands in for schemathesis's status_code_conformance, which accepts any status from an
    operation that documents `default`, as every operation here does.
    """
    method = case.operation.method.upper()
    if case.method.upper() != method:
        return None  # a probe with an undocumented method: unsupported_method judges it
    status = response.status_code
    listed = {int(code) for code in case.operation.responses.status_codes if code.isdigit()}
    if status in listed | ANSWERED_ANYWHERE:
        return None
    if status == 404 and "{" in case.operation.path:
        return None  # the path names nothing
    if status == 428 and method == "PATCH":
        return None  # every PATCH needs If-Match
    raise AssertionError(f"{status} is not among the statuses this operation lists: {sorted(listed)}")


CHECKS = [
    not_a_server_error,
    status_code_listed,
    content_type_conformance,
    response_schema_conformance,
    unsupported_method,
]


# Function-scoped fixture: one seeded app per operation, shared by its examples on purpose.
@settings(
    max_examples=15,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture],
)
@schema.parametrize()
def test_every_operation_answers_as_documented(case, fuzz_target):
    if case.path_parameters and case.path_parameters.get("token_id") == ADMIN_TOKEN_ID:
        case.path_parameters["token_id"] = DECOY_TOKEN_ID
    response = case.call(app=fuzz_target.app, headers={"Authorization": f"Bearer {fuzz_target.secret}"})
    case.validate_response(response, checks=CHECKS)
