"""Every response names its request id (X-Request-Id), and problem details quote it as their instance."""

import pytest


def test_each_response_gets_an_id_of_its_own(client):
    first, second = client.get("/v1/studies"), client.get("/livez")
    assert first.status_code == 200 and second.status_code == 200
    assert first.headers["X-Request-Id"] != second.headers["X-Request-Id"]
    assert len(first.headers["X-Request-Id"]) == 32


def test_a_plain_incoming_id_is_kept_and_named_in_the_problem(client):
    response = client.get("/v1/studies/999999", headers={"X-Request-Id": "bridge-7f3a.42"})
    assert response.status_code == 404
    assert response.headers["X-Request-Id"] == "bridge-7f3a.42"
    # RFC 9457 section 3.1.5: instance is a URI reference identifying this occurrence of the problem.
    assert response.get_json()["instance"] == "urn:abate:request:bridge-7f3a.42"


@pytest.mark.parametrize("offered", ["x" * 65, "two words", "line\\nbreak", "<script>", ""])
def test_an_unplain_incoming_id_is_replaced(anonymous_client, offered):
    response = anonymous_client.get("/v1/studies", headers={"X-Request-Id": offered})
    assert response.status_code == 401
    echoed = response.headers["X-Request-Id"]
    assert echoed != offered and len(echoed) == 32
    assert response.get_json()["instance"] == f"urn:abate:request:{echoed}"
