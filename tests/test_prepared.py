"""Rows built by abate.prepared are the instances peewee itself would build, on each database."""

from abate import db
from abate.domain.tokens import authenticate, create_token, revoke_token
from abate.models import ApiToken, FailureMode, Study
from abate.prepared import PreparedSelect, fetch_all
from conftest import make_mode, make_study

_STUDY_BY_TITLE = PreparedSelect(Study, lambda title: Study.select().where(Study.title == title))


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
