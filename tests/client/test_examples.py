"""The client's examples against a live server: the ticketing bridge and the weekly risk reduction report."""

import datetime
import importlib.util
import json
import os
import subprocess
import sys
from pathlib import Path

import pytest

from abate_client import Client
from client.conftest import OWNER, TODAY, new_mode, new_study, open_action

EXAMPLES = Path(__file__).resolve().parents[2] / "clients" / "python" / "examples"


def load_example(name):
    """The example script as a module, for calling its functions."""
    spec = importlib.util.spec_from_file_location(name, EXAMPLES / f"{name}.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


bridge = load_example("ticketing_bridge")
weekly = load_example("weekly_reduction")


def run_script(name, token, *args):
    """Run an example as a script with the token in ABATE_TOKEN; return its stdout."""
    result = subprocess.run(
        [sys.executable, str(EXAMPLES / f"{name}.py"), *args],
        env={**os.environ, "ABATE_TOKEN": token},
        capture_output=True,
        text=True,
        timeout=60,
    )
    assert result.returncode == 0, result.stderr
    return result.stdout


@pytest.fixture
def editor(live_server, make_token):
    """A client with an editor token, as a ticketing bridge would hold."""
    with Client(live_server, token=make_token("editor")) as client:
        yield client


@pytest.fixture
def store(tmp_path):
    """An empty stand-in ticket store in a file of the test's own."""
    return bridge.TicketStore(tmp_path / "tickets.json")


def ticketable_study(api):
    """A study with an open and an in-progress action, and some that the bridge must leave alone."""
    study = new_study(api)
    mode = new_mode(api, study, 7, 8, 5)
    first = open_action(api, mode, title="Fit a burr gauge")
    second = api.actions.update(open_action(api, mode, title="Train the setters"), status="in_progress")
    api.actions.cancel(open_action(api, mode, title="Dropped idea"), "superseded")
    open_action(api, mode, title="Tracked elsewhere", external_ref={"system": "plm", "key": "ECR-9"})
    open_action(api, new_mode(api, new_study(api), 5, 5, 5), title="Another study's action")
    return study, mode, first, second


def test_the_bridge_opens_one_ticket_per_unfinished_action_and_tags_the_action(api, editor, store):
    study, _, first, second = ticketable_study(api)
    opened, closed = bridge.sync(editor, store, study.id)

    assert [(ticket.key, ticket.action_id) for ticket in opened] == [("TCK-1", first.id), ("TCK-2", second.id)]
    assert closed == []
    assert api.actions.get(first.id).external_ref == {"system": "tickets", "key": "TCK-1"}
    assert api.actions.get_by_ref("tickets", "TCK-2").id == second.id
    saved = json.loads(store.path.read_text())
    assert [(item["key"], item["title"], item["assignee"], item["due_date"]) for item in saved] == [
        ("TCK-1", "Fit a burr gauge", OWNER["email"], first.due_date.isoformat()),
        ("TCK-2", "Train the setters", OWNER["email"], second.due_date.isoformat()),
    ]
    # A second round finds every action ticketed already.
    assert bridge.sync(editor, bridge.TicketStore(store.path), study.id) == ([], [])
    assert len(json.loads(store.path.read_text())) == 2


def test_closing_a_ticket_closes_its_action_with_the_evidence_once(api, editor, store):
    study, mode, first, _ = ticketable_study(api)
    bridge.sync(editor, store, study.id)
    store.close("TCK-1", "Gauge fitted; 500 parts without a burr", "QA lab", {"occurrence": 6, "detection": 4})

    _, closed = bridge.sync(editor, store, study.id)
    assert [action.id for action in closed] == [first.id]
    action = api.actions.get(first.id)
    assert (action.status, action.evidence, action.verified_by) == (
        "closed",
        "Gauge fitted; 500 parts without a burr",
        "QA lab",
    )
    # S7 O8 D5 = 280 re-rated to S7 O6 D4 = 168 (LPU DMGT524, unit 12).
    assert api.modes.get(mode.id).rpn == 168
    assert store.tickets["TCK-1"].synced
    assert bridge.sync(editor, store, study.id) == ([], [])


def test_an_action_finished_in_abate_closes_its_ticket_and_a_late_ticket_closure_is_let_go(api, editor, store):
    study, _, first, second = ticketable_study(api)
    bridge.sync(editor, store, study.id)
    api.actions.cancel(api.actions.get(second.id), "merged into another action")
    api.actions.cancel(api.actions.get(first.id), "no longer needed")
    store.close("TCK-1", "done anyway")

    assert bridge.sync(editor, store, study.id) == ([], [])
    assert (store.tickets["TCK-2"].status, store.tickets["TCK-2"].resolution) == ("closed", "cancelled in Abate")
    assert store.tickets["TCK-1"].synced and api.actions.get(first.id).status == "cancelled"


def test_the_bridge_runs_as_a_script_from_sync_to_close(api, live_server, make_token, tmp_path):
    study, _, first, second = ticketable_study(api)
    token, tickets = make_token("editor"), str(tmp_path / "script-tickets.json")
    common = ["--base-url", live_server, "--study", str(study.id), "--store", tickets]

    output = run_script("ticketing_bridge", token, *common, "sync")
    assert output.splitlines() == [
        f"opened TCK-1 for action {first.id}: Fit a burr gauge ({OWNER['email']}, {first.due_date.isoformat()})",
        f"opened TCK-2 for action {second.id}: Train the setters ({OWNER['email']}, {second.due_date.isoformat()})",
    ]
    run_script("ticketing_bridge", token, "--store", tickets, "close", "TCK-2", "--evidence", "Trained", "--by", "Lead")
    assert run_script("ticketing_bridge", token, *common, "sync").splitlines() == [f"closed action {second.id} (TCK-2)"]
    assert (api.actions.get(second.id).status, api.actions.get(first.id).status) == ("closed", "open")


def reduced_study(api):
    """A study whose RPN went 280, then 168 after an action a week ago, then 84 after a re-rating today."""
    noon = datetime.datetime.combine(datetime.datetime.now(datetime.UTC).date(), datetime.time(12), datetime.UTC)
    study = new_study(api)
    mode = new_mode(api, study, 7, 8, 5, effective_at=noon - datetime.timedelta(days=14))
    action = open_action(api, mode, due_date=TODAY, effective_at=noon - datetime.timedelta(days=8))
    api.actions.close(
        action, "Gauge fitted", {"occurrence": 6, "detection": 4}, effective_at=noon - datetime.timedelta(7)
    )
    api.modes.update(api.modes.get(mode.id), reason="six months without a defect", occurrence=3)
    return study


def test_weekly_reduction_follows_the_history_week_by_week(api):
    study = reduced_study(api)
    weeks, caution = weekly.weekly_reduction(api, study.id)
    # RPN = S x O x D (IEC 60812:2018): 7x8x5 = 280, 7x6x4 = 168 (40 % less, LPU DMGT524, unit 12), 7x3x4 = 84.
    assert [week.total_rpn for week in weeks] == [280, 168, 84]
    assert [(week.by_actions, week.by_rerating, week.reduction) for week in weeks] == [
        (0, 0, 0),
        (112, 0, 112),
        (0, 84, 84),
    ]
    assert [week.share for week in weeks] == [None, pytest.approx(0.40), pytest.approx(0.50)]
    assert [week.in_progress for week in weeks] == [False, False, True]
    assert "does not certify" in caution

    points = api.request("GET", f"/v1/studies/{study.id}/history", params={"interval": "week"}).json()["points"]
    assert [week.period for week in weeks] == [point["period"] for point in points]


def test_the_weekly_report_prints_the_figures_the_api_gives(api, live_server, make_token):
    study = reduced_study(api)
    output = run_script("weekly_reduction", make_token("reader"), "--base-url", live_server, "--study", str(study.id))
    table, _, caution = output.rstrip("\n").rpartition("\n\n")
    header, *rows, note = table.splitlines()
    assert header.split() == [
        "week",
        "total",
        "RPN",
        "by",
        "actions",
        "by",
        "re-rating",
        "reduction",
        "share",
        "cumulative",
    ]
    assert note == weekly.IN_PROGRESS_NOTE

    history = api.request("GET", f"/v1/studies/{study.id}/history", params={"interval": "week"}).json()
    printed = [row.split() for row in rows]
    expected, cumulative, start = [], 0, 0
    for point in history["points"]:
        by_actions, by_rerating = -point["change"]["actions"], -point["change"]["rerating"]
        cumulative += by_actions + by_rerating
        share = f"{(by_actions + by_rerating) / start:.0%}" if start else "-"
        period = point["period"] + ("*" if point["in_progress"] else "")
        expected.append(
            [
                period,
                *map(str, (point["total_rpn"], by_actions, by_rerating, by_actions + by_rerating)),
                share,
                str(cumulative),
            ]
        )
        start = point["total_rpn"]
    assert printed == expected
    assert [row[4:] for row in printed] == [["0", "-", "0"], ["112", "40%", "112"], ["84", "50%", "196"]]
    assert caution == history["caution"]
