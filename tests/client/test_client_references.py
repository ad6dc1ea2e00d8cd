"""Actions addressed by their key in another system: get_by_ref, put_by_ref and close_by_ref on a live server."""

import datetime

import pytest

from abate_client import Conflict, NotFound, PreconditionFailed, ValidationFailed
from client.conftest import OWNER, TODAY, new_mode, new_study

SYSTEM = "maintenance"
NEW_ACTION = {"title": "Replace the worn die insert", "kind": "prevention", "owner": OWNER}


def test_put_by_ref_creates_the_action_then_changes_the_same_one(api):
    mode = new_mode(api, new_study(api), 7, 8, 5)
    due = TODAY + datetime.timedelta(20)
    created = api.actions.put_by_ref(SYSTEM, "WO-1001", mode_id=mode.id, due_date=due, **NEW_ACTION)
    assert created.external_ref == {"system": SYSTEM, "key": "WO-1001"}
    assert (created.mode_id, created.status, created.due_date) == (mode.id, "open", due)
    assert api.actions.get_by_ref(SYSTEM, "WO-1001") == created

    later = due + datetime.timedelta(10)
    changed = api.actions.put_by_ref(SYSTEM, "WO-1001", due_date=later, status="in_progress", reason="parts late")
    assert changed.id == created.id and (changed.due_date, changed.status) == (later, "in_progress")
    assert (changed.original_due_date, changed.due_date_changes) == (due, 1)
    assert [action.id for action in api.actions.list(external_system=SYSTEM, external_key="WO-1001")] == [created.id]


def test_put_by_ref_for_a_new_reference_without_its_mode_names_what_is_missing(api):
    with pytest.raises(ValidationFailed) as caught:
        api.actions.put_by_ref(SYSTEM, "WO-1002", title="No mode named")
    assert sorted(error["field"] for error in caught.value.errors) == ["due_date", "kind", "mode_id", "owner"]
    with pytest.raises(NotFound):
        api.actions.get_by_ref(SYSTEM, "WO-1002")


def test_put_by_ref_with_the_action_as_read_sends_if_match_and_a_stale_read_changes_nothing(api):
    mode = new_mode(api, new_study(api), 7, 8, 5)
    read = api.actions.put_by_ref(SYSTEM, "WO-1003", mode_id=mode.id, due_date=TODAY, **NEW_ACTION)
    moved = api.actions.put_by_ref(SYSTEM, "WO-1003", current=read, title="Replace insert and guide")
    assert moved.title == "Replace insert and guide"
    # If-Match with an outdated ETag is answered 412 and changes nothing (RFC 9110, 13.1.1 and 15.5.13).
    with pytest.raises(PreconditionFailed):
        api.actions.put_by_ref(SYSTEM, "WO-1003", current=read, title="Lost update")
    assert api.actions.get_by_ref(SYSTEM, "WO-1003").title == "Replace insert and guide"


def test_close_by_ref_re_rates_the_mode_and_a_second_close_is_a_conflict(api):
    study = new_study(api)
    mode = new_mode(api, study, 7, 8, 5)
    api.actions.put_by_ref(SYSTEM, "WO-1004", mode_id=mode.id, due_date=TODAY, **NEW_ACTION)
    closed = api.actions.close_by_ref(
        SYSTEM, "WO-1004", "Insert replaced; 300 parts measured", {"occurrence": 6, "detection": 4}, verified_by="QA"
    )
    assert (closed.status, closed.evidence, closed.verified_by) == (
        "closed",
        "Insert replaced; 300 parts measured",
        "QA",
    )
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168 (LPU DMGT524, unit 12).
    assert api.modes.get(mode.id).rpn == 168 and api.studies.get(study.id).risk.total_rpn == 168
    with pytest.raises(Conflict) as caught:
        api.actions.close_by_ref(SYSTEM, "WO-1004", "again")
    assert "closed" in caught.value.detail
    with pytest.raises(Conflict):
        api.actions.put_by_ref(SYSTEM, "WO-1004", title="Too late")


def test_keys_with_spaces_accents_or_only_dots_reach_their_own_action(api):
    mode = new_mode(api, new_study(api), 5, 5, 5)
    keys = ["Störung 17 - Halle 2", ".", "..", "50%"]
    created = [api.actions.put_by_ref(SYSTEM, key, mode_id=mode.id, due_date=TODAY, **NEW_ACTION) for key in keys]
    assert [action.external_ref["key"] for action in created] == keys
    assert [api.actions.get_by_ref(SYSTEM, key).id for key in keys] == [action.id for action in created]
    assert api.actions.close_by_ref(SYSTEM, "..", "done").id == created[2].id


def test_an_unknown_reference_is_not_found_with_the_servers_detail(api):
    with pytest.raises(NotFound) as caught:
        api.actions.get_by_ref(SYSTEM, "WO-404")
    assert caught.value.detail == f"nothing carries the reference {SYSTEM}/WO-404"
    with pytest.raises(NotFound):
        api.actions.close_by_ref(SYSTEM, "WO-404", "evidence")
