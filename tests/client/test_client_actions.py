"""The client's actions and history groups against a real server on loopback."""

import datetime
import zoneinfo

import pytest

from abate_client import (
    Action,
    Client,
    Conflict,
    Forbidden,
    HistoryPoint,
    PortfolioHistory,
    PreconditionFailed,
    StudyHistory,
    ValidationFailed,
)
from client.conftest import OWNER, TODAY, open_action
from conftest import BUILTIN_1_10


def weld_mode(api, severity=7, occurrence=8, detection=5, **fields):
    """An active study on the 1-10 scales with one mode of these ratings (and fields, e.g. effective_at)."""
    scale_id = next(scale_set.id for scale_set in api.scales.list() if scale_set.name == BUILTIN_1_10)
    study = api.studies.create(
        title="Weld cell",
        kind="process",
        owner={"name": "Mira Tallis", "email": "mira.tallis@example.com"},
        scale_id=scale_id,
        timezone="Europe/Berlin",
        status="active",
    )
    mode = api.modes.create(
        study.id,
        failure_mode="Incomplete fusion",
        severity=severity,
        occurrence=occurrence,
        detection=detection,
        **fields,
    )
    return study, mode


def test_an_action_is_created_with_a_date_due_and_read_back_with_its_etag(api):
    _, mode = weld_mode(api)
    action = open_action(api, mode, target={"occurrence": 4})
    assert isinstance(action, Action) and action.etag
    assert (action.mode_id, action.status, action.overdue) == (mode.id, "open", False)
    assert action.due_date == TODAY + datetime.timedelta(30) and action.original_due_date == action.due_date
    assert action.target == {"severity": None, "occurrence": 4, "detection": None}
    assert action.created_at.utcoffset() == datetime.timedelta(0)
    assert api.actions.get(action.id) == action
    # A target changes no rating until the action is closed with its verified result.
    assert api.modes.get(mode.id).rpn == 280


def test_closing_re_rates_the_mode_and_reopening_restores_it(api):
    study, mode = weld_mode(api)
    action = open_action(api, mode)
    closed = api.actions.close(
        action, "500 parts without a defect", {"occurrence": 6, "detection": 4}, verified_by="QA"
    )
    assert (closed.status, closed.evidence, closed.verified_by) == ("closed", "500 parts without a defect", "QA")
    assert closed.result == {"severity": 7, "occurrence": 6, "detection": 4}
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168, a 40 % reduction (LPU DMGT524, unit 12).
    assert api.modes.get(mode.id).rpn == 168
    assert api.studies.get(study.id).risk.total_rpn == 168

    with pytest.raises(Conflict):
        api.actions.close(closed, "twice")
    reopened = api.actions.reopen(closed, "the monitor was switched off again")
    assert (reopened.status, reopened.result, reopened.closed_at) == ("open", None, None)
    assert api.modes.get(mode.id).rpn == 280


def test_update_sends_if_match_and_a_stale_action_is_precondition_failed(api):
    _, mode = weld_mode(api)
    action = open_action(api, mode)
    later = TODAY + datetime.timedelta(45)
    moved = api.actions.update(action, reason="supplier late", due_date=later, status="in_progress")
    assert (moved.due_date, moved.due_date_changes, moved.status) == (later, 1, "in_progress")
    assert moved.original_due_date == action.due_date
    # If-Match with an outdated ETag is answered 412 and changes nothing (RFC 9110, 13.1.1 and 15.5.13).
    with pytest.raises(PreconditionFailed):
        api.actions.update(action, title="Lost update")
    assert api.actions.get(action.id).title == "Wire feed monitor"


def test_cancel_keeps_the_ratings_and_a_listed_action_cannot_be_changed_blind(api):
    _, mode = weld_mode(api)
    open_action(api, mode)
    listed = next(iter(api.actions.list(mode_id=mode.id)))
    assert listed.etag is None
    with pytest.raises(ValueError, match="get"):
        api.actions.cancel(listed, "duplicate")
    cancelled = api.actions.cancel(api.actions.get(listed.id), "duplicate of another action")
    assert cancelled.status == "cancelled" and cancelled.cancelled_at is not None
    assert api.modes.get(mode.id).rpn == 280


def test_the_action_list_filters_by_status_overdue_and_owner_across_pages(api):
    _, mode = weld_mode(api)
    late = open_action(api, mode, due_date=TODAY - datetime.timedelta(3), title="Late one")
    for number in range(3):
        open_action(api, mode, title=f"On time {number}", owner={"name": "Ana Lind", "email": "ana.lind@example.com"})
    assert [action.id for action in api.actions.list(overdue=True)] == [late.id]
    assert late.days_overdue == 3 and late.overdue
    assert [action.title for action in api.actions.list(owner_email="ANA.LIND@example.com", page_size=2)] == [
        "On time 0",
        "On time 1",
        "On time 2",
    ]
    assert len(list(api.actions.list(status="open", mode_id=mode.id))) == 4


def test_a_bad_action_is_validation_failed_naming_the_field(api):
    _, mode = weld_mode(api)
    with pytest.raises(ValidationFailed) as caught:
        open_action(api, mode, kind="wishful thinking")
    assert [error["field"] for error in caught.value.errors] == ["kind"]


def test_a_naive_datetime_is_refused_before_anything_is_sent(api):
    _, mode = weld_mode(api)
    with pytest.raises(ValueError, match="time zone"):
        open_action(api, mode, effective_at=datetime.datetime(2026, 1, 5, 9, 0))
    assert list(api.actions.list(mode_id=mode.id)) == []


def test_back_dated_work_needs_an_admin_and_shows_in_the_study_history(api, live_server, make_token):
    now = datetime.datetime.now(datetime.UTC)
    study, mode = weld_mode(api, effective_at=now - datetime.timedelta(days=2))
    with Client(live_server, token=make_token("editor")) as editor:
        with pytest.raises(Forbidden):
            editor.actions.create(mode.id, title="x", kind="prevention", owner=OWNER, due_date=TODAY, effective_at=now)
    action = open_action(api, mode, effective_at=now - datetime.timedelta(days=1))
    api.actions.close(
        action, "verified", {"occurrence": 6, "detection": 4}, effective_at=now - datetime.timedelta(days=1)
    )

    # Days are the study's local days; the zone database is the IANA one that zoneinfo reads.
    berlin_today = now.astimezone(zoneinfo.ZoneInfo("Europe/Berlin")).date()
    history = api.history.study(study.id, interval="day", from_=berlin_today - datetime.timedelta(2), modes="all")
    assert isinstance(history, StudyHistory) and all(isinstance(point, HistoryPoint) for point in history.points)
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168 (LPU DMGT524, unit 12).
    assert [point.total_rpn for point in history.points] == [280, 168, 168]
    assert history.points[-1].in_progress and history.points[1].change["actions"] == 168 - 280
    assert history.modes[0]["rpn"] == [280, 168, 168] and "does not certify" in history.caution
    by_id = api.history.study(study.id, interval="day", from_=berlin_today, modes=[mode.id])
    assert [series["mode_id"] for series in by_id.modes] == [mode.id]

    portfolio = api.history.portfolio(interval="month", timezone="Europe/Berlin")
    assert isinstance(portfolio, PortfolioHistory) and portfolio.study_ids == [study.id]
    assert portfolio.points[-1].total_rpn == 168
