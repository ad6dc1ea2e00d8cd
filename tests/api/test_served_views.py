"""Mode reads served from JSON kept per state of the study, against a fresh dump after every kind of write."""

import json

import pytest
from test_actions import _close, make_action
from test_criticality import CLASSES

from abate import db
from abate.api.modes import ModeQueryArgsSchema, ModeSchema
from abate.domain import modes
from abate.domain.pagination import paginate
from abate.domain.studies import get_study
from abate.models import Study
from conftest import make_mode, make_study
from transfer.sheets import HEADER, csv_bytes, upload

# The list queries read before and after each write: filters, orders, a short page and the page after it.
QUERIES = [{}, {"limit": 2}, {"sort": "created_at"}, {"status": "retired"}, {"needs_action": "true"}, {"min_rpn": 100}]
FILTERS = ("status", "needs_action", "priority", "min_rpn")


def _fresh_views(app, study_id, mode_ids, query):
    """What the modes and the list page are now, computed through the domain and dumped by the schema."""
    with app.app_context(), db.database.connection_context():
        study = get_study(study_id)
        schema = ModeSchema()
        views = {mode_id: schema.dump(modes.mode_views([modes.get_mode(mode_id)], study)[0]) for mode_id in mode_ids}
        args = ModeQueryArgsSchema().load(query)
        filtered = modes.modes_query(study, *(args.get(name) for name in FILTERS))
        order = modes.MODE_SORTS[args.get("sort", "-rpn")]
        page = paginate(filtered, order, args["limit"], args.get("cursor"))
        items = [schema.dump(view) for view in modes.mode_views(page.rows, study)]
    # As the JSON on the wire carries them.
    return {mode_id: json.loads(json.dumps(view)) for mode_id, view in views.items()}, json.loads(json.dumps(items))


def _served(client, study_id, mode_ids, query):
    served_modes = {mode_id: client.get(f"/v1/modes/{mode_id}").get_json() for mode_id in mode_ids}
    return served_modes, client.get(f"/v1/studies/{study_id}/modes", query_string=query).get_json()


def _assert_served_is_fresh(app, client, study_id, mode_ids):
    for query in QUERIES:
        fresh_modes, fresh_items = _fresh_views(app, study_id, mode_ids, query)
        # The first read after a write builds the JSON, the second is served from what the first kept.
        for _ in range(2):
            served_modes, page = _served(client, study_id, mode_ids, query)
            assert served_modes == fresh_modes
            assert page["items"] == fresh_items, query
        if page["next"]:
            cursor = page["next"].split("cursor=")[1]
            following = client.get(page["next"]).get_json()
            assert following["items"] == _fresh_views(app, study_id, mode_ids, {**query, "cursor": cursor})[1]


def _content_revision(app, study_id):
    with app.app_context(), db.database.connection_context():
        return Study.get_by_id(study_id).content_revision


def _rerate(client, mode_id, **ratings):
    return client.patch(f"/v1/modes/{mode_id}", json={**ratings, "reason": "Re-rated after the line audit"})


def test_every_kind_of_write_shows_at_once_in_mode_and_list_reads(app, client):
    study = make_study(client, action_threshold=100, criticality={"enabled": True, "severity_classes": CLASSES})
    common = {"item": "Valve actuator", "failure_rate": 2e-5, "operating_time": 100}
    weld = make_mode(client, study["id"], 7, 8, 5, failure_mode="Fails closed", mode_ratio=0.5, **common)
    seal = make_mode(client, study["id"], 7, 3, 3, failure_mode="Sticks", mode_ratio=0.3, **common)
    burr = make_mode(client, study["id"], 4, 4, 4, failure_mode="Burr")
    ids = [weld["id"], seal["id"], burr["id"]]
    _assert_served_is_fresh(app, client, study["id"], ids)  # every view now kept
    fixture = make_action(client, weld["id"], target={"occurrence": 4})
    trays = make_action(client, burr["id"], target={"detection": 2})
    new_target = {"target": {"occurrence": 3}}
    writes = [
        ("text edit, no event", lambda: client.patch(f"/v1/modes/{burr['id']}", json={"cause": "Worn deburring tool"})),
        ("action opened", lambda: make_action(client, seal["id"], target={"occurrence": 2}) and None),
        ("action target moved", lambda: client.patch(f"/v1/actions/{fixture['id']}", json=new_target)),
        ("re-rating", lambda: _rerate(client, seal["id"], occurrence=9)),
        # Another mode of the same item changes this one's share of the item's failure rate.
        ("other mode's ratio", lambda: client.patch(f"/v1/modes/{seal['id']}", json={"mode_ratio": 0.5})),
        ("policy", lambda: client.patch(f"/v1/studies/{study['id']}", json={"action_threshold": 150})),
        ("closure", lambda: _close(client, fixture["id"], {"occurrence": 3})),
        ("reopening", lambda: client.post(f"/v1/actions/{fixture['id']}/reopen", json={"reason": "Came back"})),
        ("cancellation", lambda: client.post(f"/v1/actions/{trays['id']}/cancel", json={"reason": "Not needed"})),
        ("retirement", lambda: client.post(f"/v1/modes/{burr['id']}/retire", json={"reason": "Part dropped"})),
        ("import", lambda: upload(client, study["id"], csv_bytes([HEADER, ["Hub", "Cracks", "", "", 9, 9, 9]]))),
    ]
    for name, write in writes:
        before = _content_revision(app, study["id"])
        response = write()
        assert response is None or response.status_code in (200, 201), (name, response.get_json())
        assert _content_revision(app, study["id"]) > before, name
        _assert_served_is_fresh(app, client, study["id"], ids)


def test_a_refused_write_leaves_the_content_revision_and_what_reads_show(app, client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    kept = client.get(f"/v1/modes/{mode['id']}").get_json()
    before = _content_revision(app, study["id"])
    # A re-rating without a reason is refused after the study was locked: the rollback takes the move back.
    refused = client.patch(f"/v1/modes/{mode['id']}", json={"occurrence": 2})
    assert refused.status_code == 422
    assert _content_revision(app, study["id"]) == before
    assert client.get(f"/v1/modes/{mode['id']}").get_json() == kept


def test_a_kept_read_carries_the_current_etag_and_answers_if_none_match_with_304(client):
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    url = f"/v1/modes/{mode['id']}"
    first, second = client.get(url), client.get(url)
    assert first.headers["ETag"] == second.headers["ETag"] == '"1.1"'  # mode version 1, study version 1
    # RFC 9110 section 13.1.2: a matching If-None-Match on GET is 304 Not Modified, without a body
    not_modified = client.get(url, headers={"If-None-Match": first.headers["ETag"]})
    assert not_modified.status_code == 304 and not_modified.data == b""
    client.patch(url, json={"effect": "Leak at the flange"})
    changed = client.get(url, headers={"If-None-Match": first.headers["ETag"]})
    assert changed.status_code == 200 and changed.headers["ETag"] == '"2.1"'
    assert changed.get_json()["effect"] == "Leak at the flange"


@pytest.mark.parametrize("path", ["/v1/modes/{mode}", "/v1/studies/{study}/modes"])
def test_reads_of_what_does_not_exist_are_404_problems(client, path):
    study = make_study(client)
    mode = make_mode(client, study["id"])
    missing = client.get(path.format(mode=mode["id"] + 1000, study=study["id"] + 1000))
    assert missing.status_code == 404
    assert missing.headers["Content-Type"] == "application/problem+json"
    assert "does not exist" in missing.get_json()["detail"]


def test_where_updates_return_no_rows_the_lock_still_moves_the_revision(app, client, monkeypatch):
    # SQLite before 3.35 has no UPDATE ... RETURNING (sqlite.org, "RETURNING clause"): an UPDATE, then a read.
    study = make_study(client)
    mode = make_mode(client, study["id"], 7, 8, 5)
    before = _content_revision(app, study["id"])
    monkeypatch.setattr(db, "updates_return_rows", lambda: False)
    assert client.patch(f"/v1/modes/{mode['id']}", json={"effect": "Seal weeps"}).status_code == 200
    assert _content_revision(app, study["id"]) == before + 1
    assert client.get(f"/v1/modes/{mode['id']}").get_json()["effect"] == "Seal weeps"
