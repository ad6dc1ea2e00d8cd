"""Schema migrations: an older database upgrades to the newest schema without losing a row."""

import pytest

from abate import db
from abate.domain.tokens import create_token
from conftest import HEAD_SCHEMA_VERSION, authorised_client, build_app

OLD_ROWS = {
    "study": (
        "INSERT INTO study (title, kind, scope, site, product_line, owner_name, owner_email, scale_set_id, timezone,"
        " status, action_threshold, severity_threshold, total_rpn, risk_revision, version, created_at, updated_at)"
        " VALUES ('Old study', 'process', '', '', '', 'Old Owner', 'old@example.com', 1, 'UTC', 'active', 100, 9,"
        " 340, 2, 1, '2025-01-02 03:04:05', '2025-01-02 03:04:05')"
    ),
    "failure_mode": (
        "INSERT INTO failure_mode (study_id, item, function, failure_mode, effect, cause, prevention_controls,"
        " detection_controls, severity, occurrence, detection, initial_severity, initial_occurrence,"
        " initial_detection, status, version, created_at, updated_at) VALUES"
        " (1, 'Press', '', 'Crack', '', '', '', '', 7, 8, 5, 7, 8, 5, 'active', 1, '2025-01-02 03:04:05', '2025-01-02 03:04:05'),"
        " (1, 'Press', '', 'Burr', '', '', '', '', 3, 5, 4, 3, 5, 4, 'active', 1, '2025-01-02 03:04:05', '2025-01-02 03:04:05')"
    ),
    "risk_event": (
        "INSERT INTO risk_event (study_id, mode_id, kind, occurred_at, recorded_at, actor, source, reason,"
        " after_severity, after_occurrence, after_detection, after_rpn, study_total_rpn, study_max_rpn,"
        " study_needs_action_count, study_revision) VALUES"
        " (1, 1, 'created', '2025-01-02 03:04:05', '2025-01-02 03:04:05', 'old', 'api', '', 7, 8, 5, 280, 280, 280, 1, 1),"
        " (1, 2, 'created', '2025-01-02 03:04:05', '2025-01-02 03:04:05', 'old', 'api', '', 3, 5, 4, 60, 340, 280, 1, 2)"
    ),
}


def _counts(database):
    tables = ["scale_set", "scale_level", "study", "failure_mode", "risk_event"]
    return {table: database.execute_sql(f"SELECT COUNT(*) FROM {table}").fetchone()[0] for table in tables}


@pytest.fixture
def version_1_database(database_url, tmp_path):
    """A database migrated only to schema version 1 and filled with rows of that time."""
    app = build_app_at_version(database_url, tmp_path, 1)
    with db.database.connection_context():
        for statement in OLD_ROWS.values():
            db.database.execute_sql(statement)
    if hasattr(db.database.obj, "close_all"):
        db.database.obj.close_all()
    return app


def build_app_at_version(url, tmp_path, version):
    """An app whose database has migrations applied up to version only."""
    from abate import create_app

    app = create_app({"DATABASE_URL": url, "INSTANCE_PATH": str(tmp_path / "instance")})
    with db.database.connection_context():
        db.upgrade(target=version)
        assert db.schema_version() == version
    return app


def test_upgrading_a_version_1_database_keeps_every_row_and_backfills_rpn(version_1_database, database_url, tmp_path):
    with db.database.connection_context():
        before = _counts(db.database)
    app = build_app(database_url, tmp_path)
    with db.database.connection_context():
        assert db.schema_version() == HEAD_SCHEMA_VERSION
        assert _counts(db.database) == before
        rpns = [row[0] for row in db.database.execute_sql("SELECT rpn FROM failure_mode ORDER BY id")]
    assert rpns == [280, 60]
    with db.database.connection_context():
        client = authorised_client(app, create_token("upgrade check", "admin")[1])
    modes = client.get("/v1/studies/1/modes").get_json()["items"]
    assert [(mode["failure_mode"], mode["rpn"]) for mode in modes] == [("Crack", 280), ("Burr", 60)]
    # The upgraded study keeps working: a new mode lands on top of the old running total.
    client.post("/v1/studies/1/modes", json={"failure_mode": "New", "severity": 2, "occurrence": 2, "detection": 2})
    assert client.get("/v1/studies/1").get_json()["risk"]["total_rpn"] == 348
    assert client.get("/v1/studies/1/events").get_json()["items"][-1]["study_total_rpn"] == 348
    if hasattr(db.database.obj, "close_all"):
        db.database.obj.close_all()


def test_upgrade_twice_applies_nothing_the_second_time(app):
    with db.database.connection_context():
        assert db.upgrade() == []
