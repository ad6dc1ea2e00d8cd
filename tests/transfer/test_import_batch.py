"""The import's bulk writer against the reference: every record created one by one through the domain functions."""

import datetime
import io
import json

from sheets import HEADER, ROWS, csv_bytes

from abate.domain import actions, import_writer, importer, modes, studies, webhooks
from abate.domain.clock import utcnow
from abate.domain.scales import find_scale_set_by_name
from abate.models import CorrectiveAction, FailureMode, RiskEvent, Study, WebhookDelivery
from conftest import BUILTIN_1_10

ACTOR = "test importer"
# Instants differ between any two runs; the test checks only that each is set where it should be.
TIMESTAMPS = {"created_at", "updated_at", "retired_at", "closed_at", "cancelled_at", "occurred_at", "recorded_at"}
OWNER = {"name": "Lena Roth", "email": "lena.roth@example.com"}


class OneByOneWriter:
    """The reference: each record's mode and actions created, finished and retired one call at a time."""

    def __init__(self, study_id, file_name, *, actor):
        self.study_id, self.file_name, self.actor, self.mode_ids = study_id, file_name, actor, []

    def add(self, record):
        """Write the record through the functions the API calls, with the import's source and reasons."""
        writer = {"actor": self.actor, "source": import_writer.IMPORT_SOURCE}
        reason = import_writer.import_reason(self.file_name, record.row)
        mode = modes.create_mode(self.study_id, record.mode, reason=reason, **writer)
        for data, finish in record.actions:
            action = actions.create_action(mode.id, data, reason=reason, **writer)
            if finish and finish[0] == "close":
                actions.close_action(action.id, finish[1], **writer)
            elif finish:
                actions.cancel_action(action.id, finish[1], **writer)
        if record.retire_reason:
            modes.retire_mode(mode.id, record.retire_reason, **writer)
        self.mode_ids.append(mode.id)

    def finish(self):
        """The created modes' ids in file order."""
        return self.mode_ids


def _study(title):
    """An active 1-10 study holding one mode made before the import (so the import follows earlier events)."""
    study = studies.create_study(
        {
            "title": title,
            "kind": "design",
            "owner": OWNER,
            "scale_id": find_scale_set_by_name(BUILTIN_1_10).id,
            "timezone": "Europe/Berlin",
            "status": "active",
        }
    )
    modes.create_mode(
        study.id,
        {"failure_mode": "Seal hardens", "severity": 9, "occurrence": 3, "detection": 4},
        actor=ACTOR,
        source="api",
    )
    return study.id


def _action(title, status="open", **fields):
    return {"title": title, "owner": OWNER, "due_date": "2031-03-31", "kind": "detection", "status": status, **fields}


# An export in the shape domain/exporter.py writes: every way a record can finish (open, in progress, closed,
# cancelled, several actions on one mode, a retired mode) so that each branch of the writer is compared.
EXPORT = {
    "modes": [
        {"item": "Pump", "failure_mode": "Shaft seal leaks", "severity": 8, "occurrence": 6, "detection": 7,
         "actions": [_action("Add a leak sensor", target={"detection": 3})]},
        {"item": "Pump", "failure_mode": "Bearing seizes", "severity": 10, "occurrence": 2, "detection": 2,
         "actions": [
             _action("Grease schedule", "closed", evidence="Schedule in force", verified_by="Q. Ahn"),
             _action("Vibration check", "in_progress", description="Monthly"),
             _action("Other supplier", "cancelled"),
         ]},
        {"item": "Housing", "failure_mode": "Crack at the flange", "severity": 6, "occurrence": 4, "detection": 5,
         "status": "retired",
         "actions": [_action("Thicker flange", "closed", evidence="Drawing rev C")]},
        {"item": "Housing", "failure_mode": "Paint flakes", "severity": 2, "occurrence": 5, "detection": 3},
        {"item": "Motor", "failure_mode": "Winding overheats", "severity": 9, "occurrence": 3, "detection": 6,
         "status": "retired"},
        # Text with what a bulk format must escape: tab, line breaks and a backslash.
        {"item": "Cable\tduct", "failure_mode": "Jacket splits\r\nat the C:\\ bend", "severity": 5,
         "occurrence": 5, "detection": 5, "effect": "Wire \\N exposed\n"},
    ]
}  # fmt: skip


def _import(study_id, content, file_name):
    report = importer.import_worksheet(study_id, io.BytesIO(content), file_name, actor=ACTOR)
    assert report["imported"], report["problems"]
    return report


def _rows(model, study_id, positions):
    """The study's rows of model in id order, ids replaced by positions and instants by whether they are set."""
    rows = []
    for row in model.select().where(model.study == study_id).order_by(model.id).dicts():
        for name in ("mode", "action"):
            if name in row:
                row[name] = positions[name].get(row[name])
        rows.append({name: value is not None if name in TIMESTAMPS else value for name, value in row.items()})
    for row in rows:
        del row["id"], row["study"]
    return rows


def _written(study_id):
    """Everything the imports wrote into the study, comparable across studies."""
    positions = {
        "mode": {row.id: index for index, row in enumerate(FailureMode.select().where(FailureMode.study == study_id))},
        "action": {
            row.id: index
            for index, row in enumerate(CorrectiveAction.select().where(CorrectiveAction.study == study_id))
        },
    }
    study = Study.get_by_id(study_id)
    deliveries = []
    for delivery in WebhookDelivery.select().order_by(WebhookDelivery.id):
        data = json.loads(delivery.body)["data"]
        if data["study_id"] == study_id:
            for name in ("event_id", "study_id", "mode_id", "action_id", "occurred_at", "recorded_at"):
                data.pop(name)
            deliveries.append((delivery.event_type, data))
    return {
        "study": (study.total_rpn, study.risk_revision, study.version),
        "modes": _rows(FailureMode, study_id, positions),
        "actions": _rows(CorrectiveAction, study_id, positions),
        "events": _rows(RiskEvent, study_id, positions),
        "deliveries": deliveries,
    }


def test_the_bulk_writer_writes_what_creating_each_record_one_by_one_writes(connection, monkeypatch):
    webhooks.create_subscription(
        {"url": "http://127.0.0.1:9/hook", "events": list(webhooks.EVENT_TYPES)}, allowed_hosts={"127.0.0.1"}
    )
    # Chunks of two records put chunk boundaries inside both files.
    monkeypatch.setattr(import_writer, "CHUNK_RECORDS", 2)
    sheet = csv_bytes([HEADER, *ROWS])
    export = json.dumps(EXPORT).encode()
    bulk, reference = _study("Pump, bulk"), _study("Pump, one by one")

    bulk_reports = [_import(bulk, sheet, "pump.csv"), _import(bulk, export, "pump.json")]
    with monkeypatch.context() as patch:
        patch.setattr(importer, "ImportWriter", OneByOneWriter)
        reference_reports = [_import(reference, sheet, "pump.csv"), _import(reference, export, "pump.json")]

    written, expected = _written(bulk), _written(reference)
    assert written["study"] == expected["study"]
    assert written["modes"] == expected["modes"]
    assert written["actions"] == expected["actions"]
    assert written["events"] == expected["events"]
    assert written["deliveries"] == expected["deliveries"]
    # Both ways return the modes in file order (the first mode of each study predates the imports).
    for reports, study_id in ((bulk_reports, bulk), (reference_reports, reference)):
        ids = [mode.id for mode in FailureMode.select().where(FailureMode.study == study_id).order_by(FailureMode.id)]
        assert [mode_id for report in reports for mode_id in report["mode_ids"]] == ids[1:]
    # The comparison covers what the files hold: 1 + 3 + 6 modes, 1 + 5 actions, each with its events.
    assert (len(written["modes"]), len(written["actions"])) == (10, 6)
    assert "Jacket splits\r\nat the C:\\ bend" in [mode["failure_mode"] for mode in written["modes"]]
    assert {event["kind"] for event in written["events"]} == {
        "created",
        "action_created",
        "action_closed",
        "action_cancelled",
        "retired",
    }
    assert written["deliveries"]


def test_the_bulk_writer_keeps_the_import_instant_to_the_microsecond(connection, monkeypatch):
    study_id = _study("Pump, instants")
    instant = (utcnow() + datetime.timedelta(seconds=1)).replace(microsecond=654321)
    monkeypatch.setattr(import_writer, "utcnow", lambda: instant)
    _import(study_id, json.dumps(EXPORT).encode(), "pump.json")

    imported = FailureMode.select().where((FailureMode.study == study_id) & (FailureMode.created_at == instant))
    assert imported.count() == len(EXPORT["modes"])
    assert {(mode.updated_at, mode.retired_at or instant) for mode in imported} == {(instant, instant)}
    actions_of = CorrectiveAction.select().where(CorrectiveAction.study == study_id)
    assert {(action.created_at, action.updated_at) for action in actions_of} == {(instant, instant)}
    events = RiskEvent.select().where((RiskEvent.study == study_id) & (RiskEvent.source == import_writer.IMPORT_SOURCE))
    assert {(event.occurred_at, event.recorded_at) for event in events} == {(instant, instant)}
