"""Importing CSV: any delimiter, UTF-8 with or without BOM or Windows-1252, title rows, mapping, all or nothing."""

import io

import pytest
from sheets import HEADER, ROWS, actions_of, csv_bytes, events_of, modes_of, nothing_written, upload

from abate.domain.importer import safe_file_name
from conftest import BUILTIN_1_5, authorised_client, make_study, scale_id_named

REJECTED = "urn:abate:problem:worksheet-rejected"
UNREADABLE = "urn:abate:problem:unreadable-worksheet"


def _active_study(client, **fields):
    return make_study(client, status="active", **fields)


def test_a_semicolon_csv_with_bom_and_title_rows_imports_each_row_as_a_mode(client):
    study = _active_study(client)
    content = csv_bytes([["Bracket weld line - FMEA"], ["Team: welding"], [], HEADER, *ROWS, [], []], ";", "utf-8-sig")
    # The UTF-8 byte-order mark is EF BB BF (The Unicode Standard, section 23.8).
    assert content.startswith(b"\xef\xbb\xbf")

    response = upload(client, study["id"], content, "weld line.csv")

    assert response.status_code == 201, response.get_json()
    assert response.headers["Location"] == f"/v1/studies/{study['id']}/modes"
    report = response.get_json()
    assert (report["format"], report["file"], report["header_row"]) == ("csv", "weld line.csv", 4)
    assert (report["rows"], report["modes"], report["actions"], report["imported"]) == (3, 3, 1, True)
    assert report["columns"]["severity"] == "Sev" and report["columns"]["action_due_date"] == "Due Date"
    assert report["ignored_columns"] == ["RPN"] and report["problems"] == []
    modes = modes_of(client, study["id"])
    assert [mode["id"] for mode in modes] == report["mode_ids"]
    assert [(mode["item"], mode["failure_mode"], mode["cause"]) for mode in modes] == [
        (row[0], row[1], row[3]) for row in ROWS
    ]
    # 7 x 8 x 5 = 280 (LPU DMGT524, unit 12); (10,2,5) and (1,10,10) both give 100 (same source).
    assert [mode["rpn"] for mode in modes] == [280, 100, 100]
    assert [mode["initial"]["rpn"] for mode in modes] == [280, 100, 100]
    [action] = actions_of(client, study["id"])
    assert action["mode_id"] == modes[0]["id"] and action["title"] == "Add wire feed monitor"
    assert action["owner"] == {"name": "Kai Berg", "email": "kai.berg@example.com"}
    assert (action["due_date"], action["status"], action["kind"]) == ("2031-06-30", "open", "prevention")
    assert client.get(f"/v1/studies/{study['id']}").get_json()["risk"]["total_rpn"] == 480


def test_imported_creation_events_carry_the_source_import_and_the_file_name(client):
    study = _active_study(client)
    upload(client, study["id"], csv_bytes([HEADER, *ROWS]), "line 2.csv")
    created = [event for event in events_of(client, study["id"]) if event["kind"] == "created"]
    assert [event["source"] for event in created] == ["import"] * 3
    assert [event["reason"] for event in created] == [f"imported from line 2.csv, row {row}" for row in (2, 3, 4)]
    assert all(event["actor"].startswith("test admin") for event in created)
    [action_event] = [event for event in events_of(client, study["id"]) if event["kind"] == "action_created"]
    # The action's creation names the file and row as its mode's does.
    assert (action_event["source"], action_event["reason"]) == ("import", "imported from line 2.csv, row 2")


@pytest.mark.parametrize("delimiter", [",", ";", "\t", "|"])
def test_any_common_delimiter_is_found_by_the_sniffer(client, delimiter):
    study = _active_study(client)
    response = upload(client, study["id"], csv_bytes([HEADER, *ROWS], delimiter))
    assert response.status_code == 201, response.get_json()
    assert [mode["failure_mode"] for mode in modes_of(client, study["id"])] == [row[1] for row in ROWS]


def test_a_windows_1252_file_is_read_when_it_is_not_utf_8(client):
    study = _active_study(client)
    rows = [HEADER, ["Schweißnaht – Lage 2", "Pore im Übergang", "Undicht bei 6 €/Teil Nacharbeit", "", 6, 4, 3]]
    content = csv_bytes(rows, ";", "cp1252")
    # In Windows-1252, the en dash is 0x96 and the euro sign 0x80 (Microsoft code page 1252 table).
    assert b"\x96" in content and b"\x80" in content
    assert upload(client, study["id"], content).status_code == 201
    [mode] = modes_of(client, study["id"])
    assert (mode["item"], mode["failure_mode"], mode["effect"]) == tuple(rows[1][:3])


def test_utf_8_without_bom_keeps_its_characters(client):
    study = _active_study(client)
    rows = [HEADER, ["Ventil – Sitz", "Dichtfläche verkratzt", "", "", 6, 4, 3]]
    assert upload(client, study["id"], csv_bytes(rows, ",", "utf-8")).status_code == 201
    assert modes_of(client, study["id"])[0]["failure_mode"] == "Dichtfläche verkratzt"


def test_numbers_stored_as_text_and_quoted_line_breaks_import_as_values(client):
    study = _active_study(client)
    rows = [
        ["Failure mode", "Effect", "Severity", "Occurrence", "Detection"],
        ["Burr on edge", "Cuts the fitter's glove\nand the seal", " 7 ", "8.0", "5,0"],
        [" ", "", "", "", ""],
    ]
    response = upload(client, study["id"], csv_bytes(rows, ";"))
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["rows"] == 1
    [mode] = modes_of(client, study["id"])
    assert mode["effect"] == "Cuts the fitter's glove\nand the seal"
    assert (mode["severity"], mode["occurrence"], mode["detection"], mode["rpn"]) == (7, 8, 5, 280)


def test_a_bad_row_writes_nothing_and_every_problem_is_listed_by_row_and_column(client):
    study = _active_study(client)
    rows = [
        HEADER,
        ROWS[0],
        ["Weld seam", "Undercut", "", "", "11", "3", "2", "", "", "", ""],
        ["Weld seam", "", "", "", "5", "high", "2", "", "", "", ""],
        [
            "Base plate",
            "Plate bent",
            "",
            "",
            "4",
            "4",
            "4",
            "",
            "Re-shim clamp",
            "Kai Berg <kai.berg@@example.com>",
            "next week",
        ],
        ["Base plate", "Hole missing", "", "", "4", "2", "2.5", "", "Add sensor", "", "2031-01-31"],
    ]
    response = upload(client, study["id"], csv_bytes(rows), "weld.csv")

    assert response.status_code == 422
    problem = response.get_json()
    assert problem["type"] == REJECTED and "weld.csv" in problem["detail"]
    assert [(error["row"], error["column"], error["field"]) for error in problem["errors"]] == [
        (3, "Sev", "severity"),
        (4, "Failure Mode", "failure_mode"),
        (4, "Occ", "occurrence"),
        (5, "Owner", "action_owner"),
        (5, "Due Date", "action_due_date"),
        (6, "Det", "detection"),
        (6, "Owner", "action_owner"),
    ]
    messages = [error["message"] for error in problem["errors"]]
    assert "between 1 and 10" in messages[0] and "General 1-10" in messages[0]
    assert "missing" in messages[1] and "'high' is not a number" in messages[2]
    assert "not an e-mail address" in messages[3] and "YYYY-MM-DD" in messages[4]
    assert "not a whole number" in messages[5] and "missing" in messages[6]
    assert all(error["location"] == "file" for error in problem["errors"])
    assert nothing_written(client, study["id"])


def test_ratings_are_checked_against_the_study_scale(client):
    study = _active_study(client, scale_id=scale_id_named(client, BUILTIN_1_5))
    response = upload(client, study["id"], csv_bytes([HEADER, ["Clip", "Clip snaps", "", "", "4", "6", "5"]]))
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["row"], error["column"]) == (2, "Occ") and "between 1 and 5 on 'Compact 1-5'" in error["message"]
    assert nothing_written(client, study["id"])


def test_a_dry_run_reports_without_writing(client):
    study = _active_study(client)
    good = upload(client, study["id"], csv_bytes([HEADER, *ROWS]), dry_run="true")
    assert good.status_code == 200
    report = good.get_json()
    assert (report["dry_run"], report["imported"], report["rows"], report["actions"]) == (True, False, 3, 1)
    assert report["mode_ids"] == [] and report["problems"] == []
    bad = upload(client, study["id"], csv_bytes([HEADER, ["Weld", "", "", "", "0", "1", "1"]]), dry_run="true")
    assert bad.status_code == 200
    assert [(error["row"], error["field"]) for error in bad.get_json()["problems"]] == [
        (2, "failure_mode"),
        (2, "severity"),
    ]
    assert nothing_written(client, study["id"])


def test_a_mapping_names_the_columns_the_common_titles_miss(client):
    study = _active_study(client)
    rows = [
        ["Step", "Description", "Consequence", "S", "Likelihood", "Detectability", "Task", "Who", "By"],
        ["Paint", "Runs on the door", "Rework", "4", "6", "3", "Slow the robot", "ana.lind@example.com", "2031-03-01"],
    ]
    mapping = (
        '{"failure_mode": "Description", "effect": "consequence", "occurrence": "LIKELIHOOD", '
        '"action_title": "Task", "action_owner": "Who", "action_due_date": "By"}'
    )
    response = upload(client, study["id"], csv_bytes(rows), mapping=mapping)
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["columns"]["occurrence"] == "Likelihood"
    [mode] = modes_of(client, study["id"])
    assert (mode["item"], mode["failure_mode"], mode["effect"], mode["rpn"]) == (
        "Paint",
        "Runs on the door",
        "Rework",
        72,
    )
    [action] = actions_of(client, study["id"])
    assert action["owner"] == {"name": "ana.lind@example.com", "email": "ana.lind@example.com"}


def test_a_mapping_to_a_column_the_header_lacks_is_rejected(client):
    study = _active_study(client)
    response = upload(client, study["id"], csv_bytes([HEADER, *ROWS]), mapping='{"function": "Purpose of step"}')
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["row"], error["column"]) == (1, "Purpose of step")
    assert nothing_written(client, study["id"])


@pytest.mark.parametrize(
    ("mapping", "message"),
    [("not json", "JSON object"), ('["a"]', "JSON object"), ('{"colour": "Farbe"}', "not a field")],
)
def test_a_malformed_mapping_is_a_422_naming_the_query_parameter(client, mapping, message):
    study = _active_study(client)
    response = upload(client, study["id"], csv_bytes([HEADER, *ROWS]), mapping=mapping)
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["location"], error["field"]) == ("query", "mapping") and message in error["message"]
    assert nothing_written(client, study["id"])


def test_a_sheet_without_a_recognisable_header_is_rejected(client):
    study = _active_study(client)
    response = upload(client, study["id"], csv_bytes([["Colour", "Size"], ["red", "L"]]))
    assert response.status_code == 422
    assert response.get_json()["type"] == REJECTED
    assert "Failure Mode" in response.get_json()["errors"][0]["message"]


def test_a_header_missing_a_rating_column_names_it(client):
    study = _active_study(client)
    response = upload(client, study["id"], csv_bytes([["Failure mode", "Sev", "Occ"], ["Burr", "4", "4"]]))
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["row"], error["field"]) == (1, "detection")


def test_a_path_in_the_uploaded_file_name_is_reduced_to_its_last_part(client, tmp_path):
    study = _active_study(client)
    before = sorted(path.name for path in tmp_path.rglob("*"))
    for name in ("../../../etc/passwd.csv", "/", ""):
        response = upload(client, study["id"], csv_bytes([HEADER, ROWS[1]]), name)
        assert response.status_code == 201, response.get_json()
    reasons = [event["reason"] for event in events_of(client, study["id"]) if event["kind"] == "created"]
    assert reasons == [
        "imported from passwd.csv, row 2",
        "imported from upload, row 2",
        "imported from upload, row 2",
    ]
    # The upload is read in memory and never stored, so nothing appears on disk under any name.
    assert sorted(path.name for path in tmp_path.rglob("*")) == before


@pytest.mark.parametrize(
    ("name", "kept"),
    [("..\\..\\windows\\system.ini", "system.ini"), ("C:evil.csv", "evil.csv"), ("a/b\x00c.csv", "bc.csv")],
)
def test_windows_paths_and_control_characters_leave_only_a_plain_name(name, kept):
    assert safe_file_name(name) == kept


def test_a_raw_csv_body_imports_with_its_name_from_content_disposition(client):
    study = _active_study(client)
    response = client.post(
        f"/v1/studies/{study['id']}/import",
        data=csv_bytes([HEADER, *ROWS]),
        content_type="text/csv",
        headers={"Content-Disposition": 'attachment; filename="raw.csv"'},
    )
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["file"] == "raw.csv" and len(modes_of(client, study["id"])) == 3


def test_a_multipart_request_without_the_file_field_is_a_422(client):
    study = _active_study(client)
    response = client.post(
        f"/v1/studies/{study['id']}/import",
        data={"upload": (io.BytesIO(csv_bytes([HEADER, *ROWS])), "fmea.csv")},
        content_type="multipart/form-data",
    )
    assert response.status_code == 422
    assert response.get_json()["errors"][0]["field"] == "file"


@pytest.mark.parametrize(
    "content",
    [b"", b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR\x00\x00", "Fehler\n".encode("utf-16")],
    ids=["empty", "png", "utf-16"],
)
def test_an_empty_or_binary_upload_is_a_clear_422(client, content):
    study = _active_study(client)
    response = upload(client, study["id"], content, "fmea.csv")
    assert response.status_code == 422
    assert response.get_json()["type"] == UNREADABLE and response.get_json()["detail"]
    assert nothing_written(client, study["id"])


def test_importing_needs_the_editor_role_and_an_open_study(app, client, make_token):
    study = _active_study(client)
    reader = authorised_client(app, make_token("reader"))
    assert upload(reader, study["id"], csv_bytes([HEADER, *ROWS])).status_code == 403
    editor = authorised_client(app, make_token("editor"))
    assert upload(editor, study["id"], csv_bytes([HEADER, ROWS[1]])).status_code == 201
    assert client.patch(f"/v1/studies/{study['id']}", json={"status": "archived"}).status_code == 200
    archived = upload(editor, study["id"], csv_bytes([HEADER, ROWS[2]]))
    assert archived.status_code == 409
    assert len(modes_of(client, study["id"])) == 1


def test_importing_into_a_missing_study_is_a_404(client):
    assert upload(client, 999, csv_bytes([HEADER, *ROWS])).status_code == 404
