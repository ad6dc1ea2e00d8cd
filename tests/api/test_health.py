"""Liveness and readiness probes."""

from conftest import HEAD_SCHEMA_VERSION


def test_readyz_reports_the_schema_version_when_the_database_answers(client):
    response = client.get("/readyz")
    assert response.status_code == 200
    assert response.get_json() == {"status": "ok", "schema_version": HEAD_SCHEMA_VERSION}


def test_without_a_database_livez_answers_and_readyz_is_503(tmp_path):
    # Nothing listens on port 1: the database is unreachable.
    app = build_unmigrated_app("postgresql://postgres@127.0.0.1:1/none", tmp_path)
    client = app.test_client()
    assert client.get("/livez").get_json() == {"status": "ok"}
    response = client.get("/readyz")
    assert response.status_code == 503
    assert response.headers["Content-Type"] == "application/problem+json"
    assert response.headers["Retry-After"] == "2"
    assert response.get_json()["status"] == 503
    assert client.get("/v1/studies").status_code == 503


def build_unmigrated_app(url, tmp_path):
    """An app bound to url without touching the database."""
    from abate import create_app

    return create_app({"DATABASE_URL": url, "INSTANCE_PATH": str(tmp_path), "DB_POOL_TIMEOUT": 1})
