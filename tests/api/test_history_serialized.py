"""The history served from its kept serialized form against a fresh dump through the schema, byte for byte."""

import datetime
import json

import pytest
from test_history import POLICY, _open_action, _today, _utc

from abate import db
from abate.api.history import HistoryArgsSchema, StudyHistorySchema, history_json, study_history
from abate.domain.clock import utcnow
from abate.domain.studies import get_study
from conftest import make_mode, make_study

WEEKS_3 = datetime.timedelta(days=21)


def _served_and_dumped(app, study_id, args, now):
    """(the bytes history_json serves, what jsonify writes for the document dumped afresh through the schema)."""
    with app.app_context(), db.database.connection_context():
        study = get_study(study_id)
        served = history_json(study, args, now)
        dumped = app.json.response(StudyHistorySchema().dump(study_history(study, args, now))).get_data()
    return served, dumped


def _study_with_past_and_plans(client):
    """A study with a rating back-dated three weeks, one of today and an open action due next week."""
    study = make_study(client, **POLICY)
    weld = make_mode(client, study["id"], 7, 8, 5, effective_at=_utc(datetime.datetime.now(datetime.UTC) - WEEKS_3))
    make_mode(client, study["id"], 4, 4, 4)
    _open_action(client, weld["id"], _today() + datetime.timedelta(days=7), {"occurrence": 4})
    return study["id"]


@pytest.mark.parametrize(
    ("interval", "days_back"),
    [("week", None), ("day", None), ("month", None), ("week", 8)],  # the last: a range ended, no point in progress
)
def test_the_kept_form_answers_the_bytes_the_schema_writes_at_each_read(app, client, interval, days_back):
    study_id = _study_with_past_and_plans(client)
    query = {"interval": interval}
    if days_back:
        query["to"] = (_today() - datetime.timedelta(days=days_back)).isoformat()
    args = HistoryArgsSchema().load(query)
    first = utcnow()
    # The second read is served from what the first one kept, stamped with its own instant.
    for now in (first, first + datetime.timedelta(milliseconds=3)):
        served, dumped = _served_and_dumped(app, study_id, args, now)
        assert served == dumped


def test_a_new_event_or_a_new_day_gives_a_new_document_still_equal_to_the_schema(app, client):
    study_id = _study_with_past_and_plans(client)
    args = HistoryArgsSchema().load({"interval": "day"})
    before, _ = _served_and_dumped(app, study_id, args, utcnow())
    make_mode(client, study_id, 6, 6, 6)
    now = utcnow()
    served, dumped = _served_and_dumped(app, study_id, args, now)
    assert served == dumped
    assert json.loads(served)["points"][-1]["total_rpn"] == json.loads(before)["points"][-1]["total_rpn"] + 216
    tomorrow, dumped_tomorrow = _served_and_dumped(app, study_id, args, now + datetime.timedelta(days=1))
    assert tomorrow == dumped_tomorrow
    assert len(json.loads(tomorrow)["points"]) == len(json.loads(served)["points"]) + 1
