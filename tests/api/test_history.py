"""Risk history, projection, as_of reads and the portfolio view, checked against a past the test builds."""

import datetime
import json
import zoneinfo

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from conftest import make_mode, make_study

BERLIN = "Europe/Berlin"
# The risk policy the tests' arithmetic assumes: act at RPN 100 or at severity 9 (common practice, no source).
POLICY = {"action_threshold": 100, "severity_threshold": 9}
FIGURES = ("total_rpn", "max_rpn", "needs_action_count", "open_actions", "overdue_actions")
EVIDENCE = "Verified on a run of 200 parts"
VALIDATION_FAILED = "urn:abate:problem:validation-failed"


def _utc(moment):
    """An aware instant as an RFC 3339 UTC string, the way the API writes it."""
    return moment.astimezone(datetime.UTC).isoformat().replace("+00:00", "Z")


def _local(day, hour=10, zone=BERLIN):
    """A local wall-clock hour as an aware UTC instant (IANA tz database via zoneinfo)."""
    return datetime.datetime.combine(day, datetime.time(hour), tzinfo=zoneinfo.ZoneInfo(zone)).astimezone(datetime.UTC)


def _iso_week(day):
    """The ISO 8601 week label of day, from datetime.date.isocalendar()."""
    year, week, _ = day.isocalendar()
    return f"{year}-W{week:02d}"


def _today(zone=BERLIN):
    return datetime.datetime.now(zoneinfo.ZoneInfo(zone)).date()


def _read(client, path, **query):
    response = client.get(path, query_string=query)
    assert response.status_code == 200, response.get_json()
    return response.get_json()


def _risk(client, study_id, **query):
    return _read(client, f"/v1/studies/{study_id}", **query)["risk"]


def _figures(risk, names=FIGURES):
    return {name: risk[name] for name in names}


def _open_action(client, mode_id, due_date, target=None, at=None):
    body = {
        "title": "Add a poka-yoke to the fixture",
        "kind": "prevention",
        "owner": {"name": "Mira Holt", "email": "mira.holt@example.com"},
        "due_date": due_date.isoformat(),
        "target": target,
    }
    if at is not None:
        body["effective_at"] = _utc(at)
    response = client.post(f"/v1/modes/{mode_id}/actions", json=body)
    assert response.status_code == 201, response.get_json()
    return response.get_json()


def _close(client, action_id, result, at=None):
    body = {"result": result, "evidence": EVIDENCE, "verified_by": "Q. Lab"}
    if at is not None:
        body["effective_at"] = _utc(at)
    return client.post(f"/v1/actions/{action_id}/close", json=body)


def _rerate(client, mode_id, at=None, **ratings):
    body = {**ratings, "reason": "New field data"}
    if at is not None:
        body["effective_at"] = _utc(at)
    return client.patch(f"/v1/modes/{mode_id}", json=body)


def _assert_problem(response, status, fields=()):
    """RFC 9457 problem details with this status, naming these query fields."""
    assert response.status_code == status, response.get_data(as_text=True)
    assert response.mimetype == "application/problem+json"  # RFC 9457 section 3
    body = json.loads(response.get_data(as_text=True))
    assert body["status"] == status and body["title"]
    assert {error["field"] for error in body.get("errors", [])} >= set(fields)
    return body


def _build_past(client):
    """A Berlin study whose past runs over five ISO weeks before this one, recorded with effective_at.

    Returns the study, its modes by letter, the Monday of the first week and, after every write,
    (instant, the risk summary a GET showed right after it).
    """
    study = make_study(client, **POLICY)
    first_monday = _today() - datetime.timedelta(days=_today().weekday() + 35)
    observed = []

    def on(week, weekday, hour=10):
        return _local(first_monday + datetime.timedelta(weeks=week, days=weekday), hour)

    def seen(instant):
        observed.append((instant, _risk(client, study["id"])))

    modes = {}
    for letter, ratings, weekday in (("A", (7, 8, 5), 1), ("B", (5, 5, 5), 2), ("C", (3, 3, 3), 3)):
        modes[letter] = make_mode(client, study["id"], *ratings, effective_at=_utc(on(0, weekday)))
        seen(on(0, weekday))
    weld = _open_action(client, modes["A"]["id"], on(3, 4).date(), {"occurrence": 6, "detection": 4}, on(1, 1))
    seen(on(1, 1))
    # Due on the Friday of week 1 but closed on the Thursday of week 2: overdue at the end of week 1.
    seal = _open_action(client, modes["B"]["id"], on(1, 4).date(), {"detection": 2}, on(1, 2))
    seen(on(1, 2))
    assert _rerate(client, modes["C"]["id"], on(2, 0), occurrence=4).status_code == 200
    seen(on(2, 0))
    assert _close(client, seal["id"], {"detection": 2}, on(2, 3)).status_code == 200
    seen(on(2, 3))
    assert _close(client, weld["id"], {"occurrence": 6, "detection": 4}, on(3, 1)).status_code == 200
    seen(on(3, 1))
    modes["D"] = make_mode(client, study["id"], 9, 2, 2, effective_at=_utc(on(4, 2)))
    seen(on(4, 2))
    _open_action(client, modes["D"]["id"], _today() + datetime.timedelta(days=10), {"severity": 8}, on(4, 2, 11))
    seen(on(4, 2, 11))
    # Retiring has no effective_at: it happens now, after everything above.
    retired = client.post(f"/v1/modes/{modes['C']['id']}/retire", json={"reason": "Variant dropped"})
    assert retired.status_code == 200
    seen(datetime.datetime.now(datetime.UTC))
    return study, modes, first_monday, observed


# Worked by hand from _build_past, one row per ISO week: total, max, needs action, open, overdue, change.
EXPECTED_WEEKS = [
    # A 280 + B 125 + C 27 created; A and B reach RPN 100.
    ((432, 280, 2, 0, 0), {"new_modes": 432, "rerating": 0, "actions": 0, "retirements": 0}),
    # Two actions opened; the seal action's due date (Friday) has passed by Monday.
    ((432, 280, 2, 2, 1), {"new_modes": 0, "rerating": 0, "actions": 0, "retirements": 0}),
    # C re-rated 27 -> 36; the seal action closes, B 125 -> 50.
    ((366, 280, 1, 1, 0), {"new_modes": 0, "rerating": 9, "actions": -75, "retirements": 0}),
    # The weld action closes, A S7 O8 D5 = 280 -> S7 O6 D4 = 168 (LPU, DMGT524 Total Quality Management, Unit 12).
    ((254, 168, 1, 0, 0), {"new_modes": 0, "rerating": 0, "actions": -112, "retirements": 0}),
    # D (9, 2, 2) = 36 added; it needs action by its severity 9; an action opened on it.
    ((290, 168, 2, 1, 0), {"new_modes": 36, "rerating": 0, "actions": 0, "retirements": 0}),
    # This week: C retired, which removes 36 points without reducing any risk.
    ((254, 168, 2, 1, 0), {"new_modes": 0, "rerating": 0, "actions": 0, "retirements": -36}),
]


def test_weekly_history_follows_the_recorded_past_and_ends_at_the_current_summary(client):
    study, modes, first_monday, observed = _build_past(client)
    before = datetime.datetime.now(datetime.UTC)
    body = _read(
        client,
        f"/v1/studies/{study['id']}/history",
        interval="week",
        modes="all",
        **{"from": first_monday.isoformat(), "to": _today().isoformat()},
    )
    after = datetime.datetime.now(datetime.UTC)
    mondays = [first_monday + datetime.timedelta(weeks=week) for week in range(7)]
    points = body["points"]
    assert (body["interval"], body["timezone"], body["study_id"]) == ("week", BERLIN, study["id"])
    # Week labels are ISO 8601 weeks as datetime.date.isocalendar() gives them.
    assert [point["period"] for point in points] == [_iso_week(monday) for monday in mondays[:6]]
    # A closed week's point stands at the next local Monday's midnight (IANA tz database via zoneinfo).
    assert [point["at"] for point in points[:-1]] == [_utc(_local(monday, 0)) for monday in mondays[1:6]]
    assert [point["in_progress"] for point in points] == [False] * 5 + [True]
    for point, (figures, change) in zip(points, EXPECTED_WEEKS, strict=True):
        assert (_figures(point), point["change"]) == (dict(zip(FIGURES, figures, strict=True)), change)
    last = points[-1]
    assert before <= datetime.datetime.fromisoformat(last["at"]) <= after
    assert _figures(last) == _figures(_risk(client, study["id"])) == _figures(observed[-1][1])
    # A history that starts later counts its first point's change from that start, not from the beginning.
    later = _read(client, f"/v1/studies/{study['id']}/history", **{"from": mondays[2].isoformat()})["points"]
    assert [(_figures(point), point["change"]) for point in later] == [
        (dict(zip(FIGURES, figures, strict=True)), change) for figures, change in EXPECTED_WEEKS[2:]
    ]
    series = {entry["mode_id"]: entry["rpn"] for entry in body["modes"]}
    assert series == {
        modes["A"]["id"]: [280, 280, 280, 168, 168, 168],
        modes["B"]["id"]: [125, 125, 50, 50, 50, 50],
        modes["C"]["id"]: [27, 27, 36, 36, 36, None],  # null once retired
        modes["D"]["id"]: [None, None, None, None, 36, 36],  # null before it was created
    }
    # Every week's total is the sum of its modes' RPN.
    assert [point["total_rpn"] for point in points] == [
        sum(values[index] or 0 for values in series.values()) for index in range(len(points))
    ]


def test_daily_history_across_a_clock_change_cuts_at_local_midnights(client):
    zone, day = "America/New_York", _today("America/New_York") - datetime.timedelta(days=2)
    one_day = datetime.timedelta(days=1)
    # The latest past day that is not 24 hours long there, found in the IANA tz database via zoneinfo.
    while _local(day + one_day, 0, zone) - _local(day, 0, zone) == datetime.timedelta(hours=24):
        day -= one_day
    study = make_study(client, timezone=zone, **POLICY)
    mode = make_mode(client, study["id"], 4, 4, 4, effective_at=_utc(_local(day - one_day, 10, zone)))
    # Half an hour either side of the midnight that ends the short or long day.
    late = datetime.datetime.combine(day, datetime.time(23, 30), tzinfo=zoneinfo.ZoneInfo(zone))
    assert _rerate(client, mode["id"], late, severity=5).status_code == 200
    make_mode(
        client, study["id"], 2, 2, 2, effective_at=_utc(_local(day + one_day, 0, zone) + datetime.timedelta(minutes=30))
    )
    query = {"interval": "day", "from": (day - one_day).isoformat(), "to": (day + one_day).isoformat()}
    points = _read(client, f"/v1/studies/{study['id']}/history", **query)["points"]
    days = [day - one_day, day, day + one_day]
    assert [point["period"] for point in points] == [each.isoformat() for each in days]
    assert [point["at"] for point in points] == [_utc(_local(each + one_day, 0, zone)) for each in days]
    instants = [datetime.datetime.fromisoformat(point["at"]) for point in points]
    assert instants[1] - instants[0] in (datetime.timedelta(hours=23), datetime.timedelta(hours=25))
    assert instants[2] - instants[1] == datetime.timedelta(hours=24)
    assert [point["total_rpn"] for point in points] == [64, 80, 88]
    assert [point["change"]["new_modes"] for point in points] == [64, 0, 8]
    assert [point["change"]["rerating"] for point in points] == [0, 16, 0]


def test_chosen_mode_series_come_in_the_order_asked_for(client):
    study, modes, first_monday, _ = _build_past(client)
    wanted = f"{modes['D']['id']},{modes['C']['id']}"
    body = _read(client, f"/v1/studies/{study['id']}/history", interval="week", modes=wanted)
    assert [(entry["mode_id"], entry["failure_mode"]) for entry in body["modes"]] == [
        (modes["D"]["id"], modes["D"]["failure_mode"]),
        (modes["C"]["id"], modes["C"]["failure_mode"]),
    ]
    # Without from, the history starts at the week of the first event.
    assert body["points"][0]["period"] == _iso_week(first_monday)
    assert body["modes"][0]["rpn"] == [None, None, None, None, 36, 36]
    assert body["modes"][1]["rpn"] == [27, 27, 36, 36, 36, None]
    assert _read(client, f"/v1/studies/{study['id']}/history")["modes"] == []


def test_unknown_modes_bad_intervals_and_unknown_studies_are_refused(client):
    study = make_study(client, **POLICY)
    other = make_study(client, title="Other line")
    foreign = make_mode(client, other["id"])
    url = f"/v1/studies/{study['id']}/history"
    for query in ({"modes": "999999"}, {"modes": str(foreign["id"])}, {"modes": "one,two"}):
        body = _assert_problem(client.get(url, query_string=query), 422, ["modes"])
        assert body["type"] == VALIDATION_FAILED
    _assert_problem(client.get(url, query_string={"interval": "fortnight"}), 422, ["interval"])
    _assert_problem(client.get(url, query_string={"from": "2026-05-02", "to": "2026-05-01"}), 422, ["to"])
    assert _assert_problem(client.get("/v1/studies/999999/history"), 404)["type"] == "urn:abate:problem:not-found"


@pytest.mark.parametrize("interval", ["day", "week"])
def test_the_projection_drops_after_each_due_date_and_names_the_day_nothing_needs_action(client, interval):
    study = make_study(client, **POLICY)
    today = _today()
    weld = make_mode(client, study["id"], 7, 8, 5)  # 280, needs action by RPN
    guard = make_mode(client, study["id"], 9, 2, 2)  # 36, needs action by severity 9
    seal = make_mode(client, study["id"], 5, 5, 5)  # 125, needs action by RPN
    # (mode, due date, target, RPN once the target is reached); the last one is five days overdue.
    plans = [
        (weld, today + datetime.timedelta(days=3), {"occurrence": 4, "detection": 3}, 7 * 4 * 3),
        (guard, today + datetime.timedelta(days=10), {"severity": 8}, 8 * 2 * 2),
        (seal, today - datetime.timedelta(days=5), {"detection": 3}, 5 * 5 * 3),
    ]
    for mode, due, target, _ in plans:
        _open_action(client, mode["id"], due, target)
    body = _read(client, f"/v1/studies/{study['id']}/history", interval=interval)
    assert _figures(body["points"][-1]) == _figures(_risk(client, study["id"]))
    assert body["points"][-1]["overdue_actions"] == 1
    projection = body["projection"]
    first, *later = projection["points"]
    assert (first["total_rpn"], first["needs_action_count"]) == (441, 3)
    assert later, "a projection reaches the last due date"
    for point in later:
        # A point stands at local midnight ending its interval; an action counts as closed by the end of
        # its due day, and an overdue one from today.
        end = datetime.datetime.fromisoformat(point["at"]).astimezone(zoneinfo.ZoneInfo(BERLIN)).date()
        done = [rpn for mode, due, _, rpn in plans if max(due, today) < end]
        left = [mode["rpn"] for mode, due, _, _ in plans if max(due, today) >= end]
        assert point["total_rpn"] == sum(done) + sum(left), point
        assert point["needs_action_count"] == 3 - len(done), point
    labels = [point["period"] for point in later]
    label = _iso_week if interval == "week" else datetime.date.isoformat
    weld_done = labels.index(label(today + datetime.timedelta(days=3)))
    assert later[weld_done]["total_rpn"] == 84 + 36 + 75
    # Before the weld action's interval only the overdue seal action counts as done: from today.
    assert [point["total_rpn"] for point in later[:weld_done]] == [280 + 36 + 75] * weld_done
    assert labels[-1] == label(today + datetime.timedelta(days=10))
    assert (later[-1]["total_rpn"], later[-1]["needs_action_count"]) == (84 + 32 + 75, 0)
    assert projection["done_date"] == (today + datetime.timedelta(days=10)).isoformat()
    make_mode(client, study["id"], 6, 6, 6)  # 216 with no action: something will always need action
    assert _read(client, f"/v1/studies/{study['id']}/history", interval=interval)["projection"]["done_date"] is None


def test_a_new_target_moves_the_projection_and_is_recorded_as_a_change_of_plan(client):
    study = make_study(client, **POLICY)
    weld = make_mode(client, study["id"], 7, 8, 5)  # 280
    action = _open_action(client, weld["id"], _today() + datetime.timedelta(days=3), {"occurrence": 6})
    path = f"/v1/studies/{study['id']}/history"
    assert _read(client, path)["projection"]["points"][-1]["total_rpn"] == 7 * 6 * 5
    changed = client.patch(f"/v1/actions/{action['id']}", json={"target": {"occurrence": 4, "detection": 4}})
    assert changed.status_code == 200, changed.get_json()

    assert _read(client, path)["projection"]["points"][-1]["total_rpn"] == 7 * 4 * 4
    updates = _read(client, f"/v1/studies/{study['id']}/events", kind="action_updated")["items"]
    assert [event["reason"] for event in updates] == ["target O6 -> O4 D4"]
    assert _risk(client, study["id"])["total_rpn"] == 280  # a plan moves no rating


def test_each_read_stamps_the_point_in_progress_and_the_projection_start_anew(client):
    study = make_study(client, **POLICY)
    make_mode(client, study["id"], 7, 8, 5)
    path = f"/v1/studies/{study['id']}/history"
    first, second = _read(client, path), _read(client, path)
    assert first["points"][-1]["in_progress"] and second["points"][-1]["in_progress"]
    assert second["points"][-1]["at"] > first["points"][-1]["at"]
    assert second["projection"]["points"][0]["at"] == second["points"][-1]["at"]
    assert {**second, "points": second["points"][:-1], "projection": None} == {
        **first,
        "points": first["points"][:-1],
        "projection": None,
    }
    make_mode(client, study["id"], 5, 5, 5)  # a new event: the next read is computed afresh
    assert _read(client, path)["points"][-1]["total_rpn"] == 280 + 125


def test_as_of_a_moment_equals_what_was_observed_then(client):
    study = make_study(client, **POLICY)
    study_id, snapshots = study["id"], []

    def snapshot():
        risk = _risk(client, study_id)
        modes = _read(client, f"/v1/studies/{study_id}/modes", sort="created_at")["items"]
        snapshots.append((datetime.datetime.now(datetime.UTC), risk, modes))

    snapshot()
    weld = make_mode(client, study_id, 7, 8, 5)
    snapshot()
    label = make_mode(client, study_id, 4, 4, 4)
    action = _open_action(client, weld["id"], _today() + datetime.timedelta(days=20), {"occurrence": 6})
    snapshot()
    assert _close(client, action["id"], {"occurrence": 6, "detection": 4}).status_code == 200
    snapshot()
    assert _rerate(client, label["id"], severity=9).status_code == 200
    snapshot()
    reopened = client.post(f"/v1/actions/{action['id']}/reopen", json={"reason": "Defects came back"})
    assert reopened.status_code == 200
    snapshot()
    assert client.post(f"/v1/modes/{label['id']}/retire", json={"reason": "Label dropped"}).status_code == 200
    snapshot()
    for moment, risk, modes in snapshots:
        past = _risk(client, study_id, as_of=_utc(moment))
        assert _figures(past) == _figures(risk), moment
        assert past["as_of"] == _utc(moment)
        listed = _read(client, f"/v1/studies/{study_id}/modes", as_of=_utc(moment))["items"]
        rated = ("id", "severity", "occurrence", "detection", "rpn", "status")
        assert [{name: mode[name] for name in rated} for mode in listed] == [
            {name: mode[name] for name in rated} for mode in modes
        ], moment
    assert _read(client, f"/v1/studies/{study_id}/modes", as_of=_utc(snapshots[0][0]))["items"] == []
    last = _read(client, f"/v1/studies/{study_id}/modes", as_of=_utc(snapshots[-1][0]))["items"]
    assert [(mode["id"], mode["status"], mode["rpn"]) for mode in last] == [
        (weld["id"], "active", 280),
        (label["id"], "retired", 9 * 4 * 4),  # a retired mode keeps its last ratings
    ]


def test_as_of_a_date_means_the_end_of_that_local_day(client):
    study, modes, first_monday, observed = _build_past(client)
    by_instant = dict(observed)
    # Week 2: C re-rated on Monday, the seal action closed on Thursday at 10:00 Berlin time.
    wednesday, thursday = first_monday + datetime.timedelta(days=16), first_monday + datetime.timedelta(days=17)
    rerated_at, closed_at = _local(first_monday + datetime.timedelta(days=14)), _local(thursday)
    for day, state in ((wednesday, by_instant[rerated_at]), (thursday, by_instant[closed_at])):
        past = _risk(client, study["id"], as_of=day.isoformat())
        assert _figures(past, FIGURES[:4]) == _figures(state, FIGURES[:4])
        # The last microsecond before the next local midnight (IANA tz database via zoneinfo).
        end_of_day = _local(day + datetime.timedelta(days=1), 0) - datetime.timedelta(microseconds=1)
        assert past["as_of"] == _utc(end_of_day)
    listed = _read(client, f"/v1/studies/{study['id']}/modes", as_of=wednesday.isoformat())["items"]
    assert [(mode["id"], mode["rpn"], mode["status"]) for mode in listed] == [
        (modes["A"]["id"], 280, "active"),
        (modes["B"]["id"], 125, "active"),
        (modes["C"]["id"], 36, "active"),
    ]
    day_before = (first_monday - datetime.timedelta(days=1)).isoformat()
    assert _figures(_risk(client, study["id"], as_of=day_before), FIGURES[:4]) == dict.fromkeys(FIGURES[:4], 0)


def test_as_of_with_other_mode_filters_is_422(client):
    study = make_study(client, **POLICY)
    make_mode(client, study["id"])
    query = {"as_of": _today().isoformat(), "needs_action": "true"}
    body = _assert_problem(client.get(f"/v1/studies/{study['id']}/modes", query_string=query), 422, ["needs_action"])
    assert body["type"] == VALIDATION_FAILED
    _assert_problem(client.get(f"/v1/studies/{study['id']}", query_string={"as_of": "last tuesday"}), 422, ["as_of"])


def test_the_portfolio_sums_the_tagged_studies_by_month(client):
    now = datetime.datetime.now(datetime.UTC)
    earlier = (now - datetime.timedelta(days=40)).replace(hour=12, minute=0, second=0, microsecond=0)
    press = make_study(client, title="Press line", tags=["plant-north"], **POLICY)
    paint = make_study(client, title="Paint shop", tags=["plant-north", "coating"], **POLICY)
    other = make_study(client, title="Elsewhere", **POLICY)
    make_mode(client, press["id"], 7, 8, 5, effective_at=_utc(earlier))
    make_mode(client, paint["id"], 5, 5, 5)
    make_mode(client, other["id"], 9, 9, 9, effective_at=_utc(earlier))
    body = _read(client, "/v1/history", tag="plant-north", interval="month")
    assert (body["study_ids"], body["timezone"], body["interval"]) == ([press["id"], paint["id"]], "UTC", "month")
    months, month = [], earlier.date().replace(day=1)
    while month <= now.date():
        months.append(month.strftime("%Y-%m"))
        month = (month + datetime.timedelta(days=32)).replace(day=1)
    points = body["points"]
    assert [point["period"] for point in points] == months
    assert [point["total_rpn"] for point in points] == [280] * (len(months) - 1) + [280 + 125]
    assert points[-1]["in_progress"] is True and points[-1]["max_rpn"] == 280
    assert points[-1]["needs_action_count"] == 2 and points[-1]["change"]["new_modes"] == 125
    assert points[0]["change"] == {"new_modes": 280, "rerating": 0, "actions": 0, "retirements": 0}
    assert "does not certify" in body["caution"]
    refused = client.get("/v1/history", query_string={"timezone": "Mars/Olympus_Mons"})
    _assert_problem(refused, 422, ["timezone"])


steps = st.lists(
    st.tuples(
        st.sampled_from(["close", "reopen", "rerate"]),
        st.integers(min_value=0, max_value=2),
        st.tuples(*[st.integers(min_value=1, max_value=10)] * 3),
    ),
    max_size=8,
)


@settings(max_examples=15, deadline=None, database=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(steps=steps)
def test_any_closes_and_reopens_keep_the_total_the_sum_of_the_modes(client, steps):
    # The client (and its database) lives across examples, so each example works on a study of its own.
    study = make_study(client, **POLICY)
    modes = [make_mode(client, study["id"], *ratings) for ratings in ((7, 8, 5), (5, 5, 5), (2, 3, 4))]
    due = _today() + datetime.timedelta(days=30)
    actions = [_open_action(client, mode["id"], due, {"occurrence": 2})["id"] for mode in modes]
    closed = set()
    for verb, index, (severity, occurrence, detection) in steps:
        ratings = {"severity": severity, "occurrence": occurrence, "detection": detection}
        if verb == "rerate":
            response = _rerate(client, modes[index]["id"], **ratings)
            assert response.status_code == 200, response.get_json()
            continue
        if verb == "close":
            response = _close(client, actions[index], ratings)
        else:
            response = client.post(f"/v1/actions/{actions[index]}/reopen", json={"reason": "Escapes found"})
        legal = (index not in closed) if verb == "close" else (index in closed)
        assert response.status_code == (200 if legal else 409), response.get_json()
        if legal:
            closed.symmetric_difference_update({index})
    current = _read(client, f"/v1/studies/{study['id']}/modes")["items"]
    assert all(mode["rpn"] == mode["severity"] * mode["occurrence"] * mode["detection"] for mode in current)
    risk = _risk(client, study["id"])
    assert risk["total_rpn"] == sum(mode["rpn"] for mode in current)
    assert risk["open_actions"] == 3 - len(closed)
    last = _read(client, f"/v1/studies/{study['id']}/history", interval="day")["points"][-1]
    assert last["in_progress"] is True and _figures(last) == _figures(risk)
