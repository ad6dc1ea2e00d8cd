"""Exporting a study as XLSX, CSV and JSON, checked cell by cell, and the JSON export's round trip."""

import csv
import datetime
import io
import json

import openpyxl
import pytest
import requests
from sheets import actions_of, modes_of, upload

from abate.domain.studies import CAUTION
from conftest import BUILTIN_1_10, authorised_client, make_mode, make_study

XLSX = "application/vnd.openxmlformats-officedocument.spreadsheetml.sheet"
PAST_DUE = (datetime.date.today() - datetime.timedelta(days=40)).isoformat()
LATER_DUE = (datetime.date.today() + datetime.timedelta(days=60)).isoformat()
OWNER = {"name": "Kai Berg", "email": "kai.berg@example.com"}


def _post(client, path, body):
    response = client.post(path, json=body)
    assert response.status_code in (200, 201), response.get_json()
    return response.get_json()


def _study_with_history(client):
    """A weld study: a mode re-rated by a closed action, one with an overdue and an open action, one retired."""
    study = make_study(client, title="Bracket weld cell", status="active")
    weld = make_mode(client, study["id"], 7, 8, 5, item="Weld seam", failure_mode="Incomplete fusion")
    spatter = make_mode(client, study["id"], 10, 2, 5, item="Weld seam", failure_mode="Spatter on thread")
    old = make_mode(client, study["id"], 3, 3, 3, item="Old jig", failure_mode="Jig worn")
    fixture = _post(
        client,
        f"/v1/modes/{weld['id']}/actions",
        {
            "title": "Error-proof the fixture",
            "kind": "prevention",
            "owner": OWNER,
            "due_date": LATER_DUE,
            "target": {"occurrence": 6, "detection": 4},
        },
    )
    # Re-rating S7 O8 D5 = 280 to S7 O6 D4 = 168 (LPU DMGT524, unit 12).
    _post(
        client,
        f"/v1/actions/{fixture['id']}/close",
        {
            "result": {"occurrence": 6, "detection": 4},
            "evidence": "500 parts, no defect",
            "verified_by": "R. Inspector",
        },
    )
    _post(
        client,
        f"/v1/modes/{spatter['id']}/actions",
        {
            "title": "Nozzle cleaning station",
            "kind": "prevention",
            "owner": OWNER,
            "due_date": PAST_DUE,
            "target": {"occurrence": 1},
        },
    )
    _post(
        client,
        f"/v1/modes/{spatter['id']}/actions",
        {
            "title": "Thread gauge at unload",
            "kind": "detection",
            "description": "Go/no-go gauge",
            "owner": {"name": "Ana Lind", "email": "ana.lind@example.com"},
            "due_date": LATER_DUE,
            "target": {"detection": 2},
        },
    )
    _post(client, f"/v1/modes/{old['id']}/retire", {"reason": "Jig scrapped"})
    return study


def _export(client, study_id, file_format):
    response = client.get(f"/v1/studies/{study_id}/export", query_string={"format": file_format})
    assert response.status_code == 200, response.get_data(as_text=True)
    return response


def test_the_xlsx_export_holds_values_dates_a_frozen_header_widths_and_the_caution(client):
    study = _study_with_history(client)
    response = _export(client, study["id"], "xlsx")
    assert response.headers["Content-Type"] == XLSX
    assert response.headers["Content-Disposition"] == (
        f'attachment; filename="abate-study-{study["id"]}-bracket-weld-cell.xlsx"'
    )
    workbook = openpyxl.load_workbook(io.BytesIO(response.data))
    sheet = workbook["Modes"]
    assert workbook.sheetnames == ["Modes", "Summary"]
    assert sheet["A1"].value == "Bracket weld cell - FMEA worksheet" and sheet["A1"].font.bold
    header = [cell.value for cell in sheet[2]]
    assert header[:8] == [
        "Mode ID",
        "Item",
        "Function",
        "Failure mode",
        "Effect",
        "Cause",
        "Prevention controls",
        "Detection controls",
    ]
    assert all(cell.font.bold for cell in sheet[2])
    assert sheet.freeze_panes == "C3"
    assert sheet.column_dimensions["D"].width == 34 and sheet.column_dimensions["A"].width == 9
    column = {title: index for index, title in enumerate(header)}
    rows = [[cell for cell in row] for row in sheet.iter_rows(min_row=3, max_row=6)]
    by_action = {row[column["Action"]].value: row for row in rows}

    closed = by_action["Error-proof the fixture"]
    # RPN as a number, never a formula: S7 O6 D4 = 168 after S7 O8 D5 = 280 (LPU DMGT524, unit 12).
    assert (closed[column["Initial RPN"]].value, closed[column["RPN"]].value) == (280, 168)
    assert closed[column["RPN"]].data_type == "n"
    assert (closed[column["Action status"]].value, closed[column["Evidence"]].value) == (
        "closed",
        "500 parts, no defect",
    )
    closed_on = closed[column["Closed on"]]
    assert closed_on.is_date and closed_on.number_format == "yyyy-mm-dd"

    overdue = by_action["Nozzle cleaning station"]
    due = overdue[column["Due date"]]
    assert due.is_date and due.value.date() == datetime.date.fromisoformat(PAST_DUE)
    assert overdue[column["Overdue"]].value == "yes" and overdue[column["Needs action"]].value == "yes"
    # Severity 10 needs action whatever the RPN (common practice, no source); (10,2,5) = 100 (LPU DMGT524).
    assert (overdue[column["RPN"]].value, overdue[column["Projected RPN"]].value) == (100, 10 * 1 * 2)
    assert by_action["Thread gauge at unload"][column["Owner e-mail"]].value == "ana.lind@example.com"

    retired = by_action[None]
    assert (retired[column["Mode status"]].value, retired[column["Action ID"]].value) == ("retired", None)
    formulas = [cell.coordinate for row in sheet.iter_rows() for cell in row if cell.data_type == "f"]
    assert formulas == []
    last = sheet.max_row
    assert sheet.cell(row=last, column=1).value == f"Caution: {CAUTION}"
    assert sheet.cell(row=last - 1, column=1).value is None and last == 8

    summary = {row[0].value: row[1].value for row in workbook["Summary"].iter_rows() if row[0].value}
    risk = client.get(f"/v1/studies/{study['id']}").get_json()["risk"]
    assert summary["Total RPN"] == risk["total_rpn"] == 168 + 100
    assert summary["Initial total RPN"] == 380 and summary["Overdue actions"] == 1 == risk["overdue_actions"]
    assert summary["Projected total RPN"] == risk["projected_total_rpn"]
    assert isinstance(summary["Exported at (UTC)"], datetime.datetime)
    assert workbook["Summary"].cell(row=workbook["Summary"].max_row, column=1).value == f"Caution: {CAUTION}"


def test_the_csv_export_has_a_header_a_row_per_action_the_summary_and_the_caution_last(client):
    study = _study_with_history(client)
    response = _export(client, study["id"], "csv")
    assert response.headers["Content-Type"] == "text/csv; charset=utf-8"
    assert response.headers["Content-Disposition"].endswith('.csv"')
    # The UTF-8 byte-order mark EF BB BF (The Unicode Standard, section 23.8) tells spreadsheet programs the encoding.
    assert response.data.startswith(b"\xef\xbb\xbf")
    rows = list(csv.reader(io.StringIO(response.data.decode("utf-8-sig"))))
    header = rows[0]
    assert header[0] == "Mode ID" and header[header.index("RPN") - 1] == "Detection"
    table = rows[1:5]
    assert [row[header.index("Action")] for row in table] == [
        "Error-proof the fixture",
        "Nozzle cleaning station",
        "Thread gauge at unload",
        "",
    ]
    assert [row[header.index("RPN")] for row in table] == ["168", "100", "100", "27"]
    assert table[1][header.index("Due date")] == PAST_DUE and rows[5] == []
    summary = dict(row for row in rows[6:-1])
    assert summary["Total RPN"] == "268" and summary["Retired modes"] == "1"
    assert rows[-1] == [f"Caution: {CAUTION}"]


def test_the_json_export_holds_every_mode_with_scores_actions_and_the_risk_summary(client):
    study = _study_with_history(client)
    response = _export(client, study["id"], "json")
    assert response.headers["Content-Type"] == "application/json"
    document = json.loads(response.data)
    assert (document["format"], document["format_version"], document["caution"]) == ("abate-study-export", 1, CAUTION)
    assert document["study"]["title"] == "Bracket weld cell" and document["risk"]["total_rpn"] == 268
    weld, spatter, old = document["modes"]
    assert (weld["initial"]["rpn"], weld["rpn"], weld["priority"]) == (280, 168, "high")
    assert [action["status"] for action in weld["actions"]] == ["closed"]
    assert weld["actions"][0]["result"] == {"severity": 7, "occurrence": 6, "detection": 4}
    assert [action["overdue"] for action in spatter["actions"]] == [True, False]
    assert spatter["projected"]["rpn"] == 20 and old["status"] == "retired"


def _comparable(client, study_id):
    """What a round trip keeps: each mode's text, ratings and status, and each action's plan and outcome."""
    mode_fields = (
        "item",
        "function",
        "failure_mode",
        "effect",
        "cause",
        "prevention_controls",
        "detection_controls",
        "severity",
        "occurrence",
        "detection",
        "rpn",
        "status",
    )
    action_fields = (
        "title",
        "description",
        "kind",
        "owner",
        "due_date",
        "status",
        "target",
        "evidence",
        "verified_by",
        "overdue",
    )
    modes = [{name: mode[name] for name in mode_fields} for mode in modes_of(client, study_id)]
    position = {mode["id"]: index for index, mode in enumerate(modes_of(client, study_id))}
    actions = [
        (position[action["mode_id"]], {name: action[name] for name in action_fields})
        for action in actions_of(client, study_id)
    ]
    return modes, actions


def test_a_json_export_re_imports_into_an_empty_study_to_the_same_modes_and_actions(client):
    original = _study_with_history(client)
    exported = _export(client, original["id"], "json").data
    copy = make_study(client, title="Copy of the weld cell", status="active")

    response = upload(client, copy["id"], exported, "weld.json")

    assert response.status_code == 201, response.get_json()
    report = response.get_json()
    assert (report["format"], report["modes"], report["actions"]) == ("json", 3, 3)
    assert _comparable(client, copy["id"]) == _comparable(client, original["id"])
    copied_risk = client.get(f"/v1/studies/{copy['id']}").get_json()["risk"]
    original_risk = client.get(f"/v1/studies/{original['id']}").get_json()["risk"]
    for name in ("total_rpn", "projected_total_rpn", "open_actions", "overdue_actions", "mode_count", "retired_count"):
        assert copied_risk[name] == original_risk[name], name


def test_a_json_export_with_a_bad_mode_is_rejected_by_position_and_field(client):
    original = _study_with_history(client)
    document = json.loads(_export(client, original["id"], "json").data)
    document["modes"][1]["severity"] = 11
    document["modes"][2]["actions"] = [{"title": "", "owner": {"name": "X", "email": "x"}, "due_date": "soon"}]
    copy = make_study(client, title="Copy", status="active")
    response = upload(client, copy["id"], json.dumps(document).encode(), "edited.json")
    assert response.status_code == 422
    assert [(error["row"], error["field"]) for error in response.get_json()["errors"]] == [
        (2, "severity"),
        (3, "actions[0].title"),
        (3, "actions[0].owner"),
        (3, "actions[0].due_date"),
        (3, "status"),  # the third mode is retired, and a retired mode has no open actions
    ]
    assert modes_of(client, copy["id"]) == []


def test_an_empty_study_exports_in_every_format(client):
    study = make_study(client, title="Nothing yet")
    workbook = openpyxl.load_workbook(io.BytesIO(_export(client, study["id"], "xlsx").data))
    assert workbook["Modes"].max_row == 4 and workbook["Modes"]["A4"].value == f"Caution: {CAUTION}"
    rows = list(csv.reader(io.StringIO(_export(client, study["id"], "csv").data.decode("utf-8-sig"))))
    assert rows[1] == [] and rows[-1] == [f"Caution: {CAUTION}"]
    assert json.loads(_export(client, study["id"], "json").data)["modes"] == []


def test_a_reader_may_export_and_an_unknown_format_is_a_422(app, client, make_token):
    study = make_study(client)
    reader = authorised_client(app, make_token("reader"))
    assert reader.get(f"/v1/studies/{study['id']}/export").headers["Content-Type"] == XLSX
    response = client.get(f"/v1/studies/{study['id']}/export", query_string={"format": "pdf"})
    assert response.status_code == 422 and response.get_json()["errors"][0]["field"] == "format"
    assert client.get("/v1/studies/999/export").status_code == 404


@pytest.mark.parametrize("file_format", ["csv", "xlsx", "json"])
def test_exports_are_served_over_http_with_their_media_type(live_server, auth_headers, file_format):
    scales = requests.get(f"{live_server}/v1/scales", headers=auth_headers, timeout=10).json()["items"]
    scale_id = next(scale["id"] for scale in scales if scale["name"] == BUILTIN_1_10)
    created = requests.post(
        f"{live_server}/v1/studies",
        json={"title": "Served", "kind": "design", "owner": OWNER, "scale_id": scale_id, "timezone": "UTC"},
        headers=auth_headers,
        timeout=10,
    ).json()
    response = requests.get(
        f"{live_server}/v1/studies/{created['id']}/export",
        params={"format": file_format},
        headers=auth_headers,
        timeout=10,
    )
    assert response.status_code == 200
    assert response.headers["Content-Disposition"] == (
        f'attachment; filename="abate-study-{created["id"]}-served.{file_format}"'
    )
    assert response.headers["Content-Type"].split(";")[0] in (XLSX, "text/csv", "application/json")
