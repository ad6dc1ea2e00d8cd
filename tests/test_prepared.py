"""Rows built by abate.prepared are the instances peewee itself would build, on each database."""

import peewee
import pytest

from abate import db
from abate.domain.tokens import authenticate, create_token, revoke_token
from abate.models import ApiToken, FailureMode, Study
from abate.prepared import PreparedSelect, fetch_all
from conftest import authorised_client, build_app, close_pool, make_mode, make_study

_STUDY_BY_TITLE = PreparedSelect(Study, lambda title: Study.select().where(Study.title == title))
_MODE_OF_STUDY = PreparedSelect(FailureMode, lambda study_id: FailureMode.select().where(FailureMode.study == study_id))


def _state(instances):
    return [(instance.__data__, instance._dirty, instance.__rel__) for instance in instances]


def test_fetched_rows_equal_peewees_instances_and_are_clean(client):
    study = make_study(client, title="Prepared rows")
    for number in range(3):
        make_mode(client, study["id"], severity=number + 2, external_ref={"system": "plm", "key": f"K-{number}"})
    with db.database.connection_context():
        _compare_fetched_rows(study["id"])


def _compare_fetched_rows(study_id):
    query = FailureMode.select().where(FailureMode.study == study_id).order_by(FailureMode.id)
    fetched = fetch_all(query)
    assert len(fetched) == 3 and _state(fetched) == _state(list(query.clone()))
    assert all(not mode._dirty for mode in fetched) and fetched[0].study.id == study_id
    # Anything but whole rows of one model goes through peewee unchanged.
    assert fetch_all(query.clone().dicts()) == list(query.clone().dicts())
    joined = FailureMode.select(FailureMode, Study).join(Study).where(Study.id == study_id)
    assert _state(fetch_all(joined)) == _state(list(joined.clone()))


def test_a_prepared_select_binds_text_and_builds_the_same_study(client):
    make_study(client, title="Found by title")
    with db.database.connection_context():
        [found] = _STUDY_BY_TITLE.rows("Found by title")
        assert _state([found]) == _state([Study.get(Study.title == "Found by title")])
        assert _STUDY_BY_TITLE.first("No such title") is None


def test_a_token_revoked_in_this_process_is_refused_at_once(connection):
    token, secret = create_token("short-lived", "reader")
    assert authenticate(secret).id == token.id
    revoke_token(token.id)
    assert authenticate(secret) is None
    assert ApiToken.get_by_id(token.id).last_used_at is not None


# PostgreSQL cannot infer the type of a parameter that is only tested for NULL: PREPARE refuses it.
_UNTYPED_PARAMETER = PreparedSelect(Study, lambda value: Study.select().where(peewee.Value(value).is_null(False)))


@pytest.fixture
def postgres_app(postgres_schema_url, tmp_path):
    """Build the app on a fresh PostgreSQL schema with the given settings; its pool is closed afterwards."""
    yield lambda **settings: build_app(postgres_schema_url, tmp_path, **settings)
    close_pool()


def _statement_of(prepared, *value_types):
    """The ServerStatement that prepared renders for the bound database and these kinds of value."""
    return prepared._rendered[(type(db.database.obj), value_types)][-1]


def _server_statements():
    return {row[0] for row in db.database.execute_sql("SELECT name FROM pg_prepared_statements").fetchall()}


def test_on_postgresql_a_lookup_is_prepared_once_per_connection_and_answers_as_plain_sql(postgres_app):
    app = postgres_app()
    client = authorised_client(app, _admin_secret())
    make_study(client, title="Prepared on the server")
    with db.database.connection_context():
        connection = db.database.connection()
        assert isinstance(connection, db.PreparingConnection)
        [found] = _STUDY_BY_TITLE.rows("Prepared on the server")
        statement = _statement_of(_STUDY_BY_TITLE, str)
        assert statement.name in connection.prepared_statements and statement.name in _server_statements()
        assert _state([found]) == _state([Study.get(Study.title == "Prepared on the server")])
        # A statement prepared in a transaction that rolls back stays prepared (PostgreSQL PREPARE docs).
        with db.database.atomic() as transaction:
            _MODE_OF_STUDY.rows(found.id)
            transaction.rollback()
        assert _statement_of(_MODE_OF_STUDY, int).name in _server_statements()
        assert _MODE_OF_STUDY.rows(found.id) == []


def test_a_statement_the_server_will_not_prepare_runs_as_plain_sql_and_spoils_no_transaction(postgres_app):
    app = postgres_app()
    make_study(authorised_client(app, _admin_secret()), title="Untyped")
    with db.database.connection_context(), db.database.atomic():
        assert [study.title for study in _UNTYPED_PARAMETER.rows(7)] == ["Untyped"]
        statement = _statement_of(_UNTYPED_PARAMETER, int)
        assert statement.refused and statement.name not in _server_statements()
        assert Study.select().count() == 1  # the transaction goes on


def test_server_preparing_can_be_switched_off_for_a_transaction_pooling_proxy(postgres_app):
    app = postgres_app(DB_SERVER_PREPARE=False)
    make_study(authorised_client(app, _admin_secret()), title="Plain")
    with db.database.connection_context():
        assert not hasattr(db.database.connection(), "prepared_statements")
        assert [study.title for study in _STUDY_BY_TITLE.rows("Plain")] == ["Plain"]
        assert not {name for name in _server_statements() if name.startswith("abate_")}


def _admin_secret():
    with db.database.connection_context():
        return create_token("prepared test", "admin")[1]


def _backend_pid():
    return db.database.execute_sql("SELECT pg_backend_pid()").fetchone()[0]


def _terminate(pid):
    import psycopg2

    from conftest import POSTGRES_URL

    admin = psycopg2.connect(POSTGRES_URL)
    admin.autocommit = True
    with admin.cursor() as cursor:
        cursor.execute("SELECT pg_terminate_backend(%s)", [pid])
    admin.close()


def test_a_pooled_connection_is_pinged_only_after_a_rest_and_a_dead_one_is_never_reused(postgres_app):
    app = postgres_app(DB_POOL_SIZE=1)
    client = authorised_client(app, _admin_secret())
    study = make_study(client)
    pool = db.database.obj
    # Handed back a moment ago: trusted without a round trip, so a server-side end shows as one 503 ...
    with db.database.connection_context():
        _terminate(_backend_pid())
    response = client.get(f"/v1/studies/{study['id']}")
    assert response.status_code == 503 and response.headers["Retry-After"]
    # ... after which the broken connection is dropped and the next request gets a new one.
    assert client.get(f"/v1/studies/{study['id']}").status_code == 200
    # Rested longer than PING_AFTER_REST: pinged at check-out, so the end is noticed before any request fails.
    with db.database.connection_context():
        _terminate(_backend_pid())
    pool.PING_AFTER_REST = 0
    assert client.get(f"/v1/studies/{study['id']}").status_code == 200
