"""Importing XLSX: streamed read-only, formulas, merged cells, title rows, named sheets, damaged files."""

import datetime
import io
import zipfile

import pytest
from openpyxl.styles import PatternFill
from sheets import (
    HEADER,
    ROWS,
    actions_of,
    events_of,
    modes_of,
    nothing_written,
    upload,
    with_cached_results,
    xlsx_bytes,
)

from conftest import make_study

UNREADABLE = "urn:abate:problem:unreadable-worksheet"


def _active_study(client):
    return make_study(client, status="active")


def _plain_sheet(sheet, workbook):
    sheet.append(HEADER)
    for row in ROWS:
        sheet.append(row)


def _awkward_sheet(sheet, workbook):
    """Title rows merged across, items merged down, formulas, numbers as text, a date cell, styled empty rows."""
    sheet.append(["Bracket weld line - design FMEA"])
    sheet.merge_cells("A1:H1")
    sheet.append(["Prepared by the weld team"])
    sheet.append(
        ["Item", "Failure mode", "Effect", "Severity", "Occurrence", "Detection", "RPN", "Action", "Owner", "Due date"]
    )
    sheet.append(
        [
            "Weld seam",
            "Incomplete fusion",
            "Cracks",
            7,
            "8",
            5,
            "=D4*E4*F4",
            "Wire feed monitor",
            "Kai Berg <kai.berg@example.com>",
            datetime.date(2031, 6, 30),
        ]
    )
    sheet.append([None, "Spatter on thread", "Nut jams", "=5*2", 2, "5", "=D5*E5*F5"])
    sheet.append([None, "Porosity", "Leak", 5.0, 5, 5, "=D6*E6*F6"])
    sheet.merge_cells("A4:A6")
    sheet.append(["Base plate", "Plate bent", "Sits crooked", " 1 ", 10, 10, "=D7*E7*F7"])
    for row in range(8, 40):
        sheet.cell(row=row, column=1).fill = PatternFill("solid", start_color="FFFF00")


def _awkward_workbook():
    # A spreadsheet program stores each formula's last result; the import reads those, never the formulas.
    return with_cached_results(xlsx_bytes(_awkward_sheet), {"G4": 280, "D5": 10, "G5": 100, "G6": 125, "G7": 100})


def test_a_plain_workbook_imports_its_first_sheet(client):
    study = _active_study(client)
    response = upload(client, study["id"], xlsx_bytes(_plain_sheet), "weld.xlsx")
    assert response.status_code == 201, response.get_json()
    report = response.get_json()
    assert (report["format"], report["sheet"], report["header_row"], report["rows"]) == ("xlsx", "FMEA", 1, 3)
    # 7 x 8 x 5 = 280 (LPU DMGT524, unit 12); (10,2,5) and (1,10,10) give 100 (same source).
    assert [mode["rpn"] for mode in modes_of(client, study["id"])] == [280, 100, 100]


def test_formulas_merged_cells_title_rows_and_numbers_as_text_import_as_the_sheet_shows_them(client):
    study = _active_study(client)
    response = upload(client, study["id"], _awkward_workbook(), "awkward.xlsx")

    assert response.status_code == 201, response.get_json()
    report = response.get_json()
    assert (report["header_row"], report["rows"], report["actions"]) == (3, 4, 1)
    assert report["ignored_columns"] == ["RPN"]
    modes = modes_of(client, study["id"])
    # The merged item cell A4:A6 holds "Weld seam" for all three rows, as the sheet displays it.
    assert [mode["item"] for mode in modes] == ["Weld seam", "Weld seam", "Weld seam", "Base plate"]
    # (10,2,5) = 100 and (1,10,10) = 100 (LPU DMGT524, unit 12); (5,5,5) = 125 [C].
    assert [(mode["severity"], mode["occurrence"], mode["detection"], mode["rpn"]) for mode in modes] == [
        (7, 8, 5, 280),
        (10, 2, 5, 100),
        (5, 5, 5, 125),
        (1, 10, 10, 100),
    ]
    [action] = actions_of(client, study["id"])
    assert (action["due_date"], action["owner"]["email"]) == ("2031-06-30", "kai.berg@example.com")
    reasons = [event["reason"] for event in events_of(client, study["id"]) if event["kind"] == "created"]
    assert reasons == [f"imported from awkward.xlsx, row {row}" for row in (4, 5, 6, 7)]


def test_a_formula_without_a_stored_result_is_reported_as_missing(client):
    study = _active_study(client)
    response = upload(client, study["id"], xlsx_bytes(_awkward_sheet), "calculated-nowhere.xlsx")
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["row"], error["column"], error["field"]) == (5, "Severity", "severity")
    assert "missing" in error["message"]
    assert nothing_written(client, study["id"])


def test_a_date_cell_without_a_date_format_is_read_from_its_serial_number(client):
    def sheet_with_serial(sheet, workbook):
        sheet.append(["Failure mode", "Sev", "Occ", "Det", "Action", "Owner", "Due"])
        sheet.append(["Burr", 4, 4, 4, "Deburr station", "ana.lind@example.com", 45000])

    study = _active_study(client)
    assert upload(client, study["id"], xlsx_bytes(sheet_with_serial), "serial.xlsx").status_code == 201
    # Serial day 45000 of the 1900 date system is 2023-03-15 (ECMA-376 Part 1, 18.17.4; from memory).
    assert actions_of(client, study["id"])[0]["due_date"] == "2023-03-15"


def test_a_named_sheet_is_read_instead_of_the_first(client):
    def two_sheets(sheet, workbook):
        sheet.append(["Notes about this workbook"])
        _plain_sheet(workbook.create_sheet("Line 2"), workbook)

    study = _active_study(client)
    content = xlsx_bytes(two_sheets, title="Read me")
    first = upload(client, study["id"], content, "two.xlsx")
    assert first.status_code == 422 and nothing_written(client, study["id"])
    response = upload(client, study["id"], content, "two.xlsx", sheet="Line 2")
    assert response.status_code == 201, response.get_json()
    assert response.get_json()["sheet"] == "Line 2" and len(modes_of(client, study["id"])) == 3


def test_an_unknown_sheet_is_a_422_listing_the_sheets(client):
    study = _active_study(client)
    response = upload(client, study["id"], xlsx_bytes(_plain_sheet), "weld.xlsx", sheet="Line 9")
    assert response.status_code == 422
    [error] = response.get_json()["errors"]
    assert (error["location"], error["field"]) == ("query", "sheet") and "FMEA" in error["message"]


def test_a_bad_row_in_a_workbook_is_reported_with_its_spreadsheet_row(client):
    def with_bad_rows(sheet, workbook):
        sheet.append(["FMEA of the weld line"])
        sheet.append([])
        sheet.append(HEADER)
        sheet.append(ROWS[0])
        sheet.append(["Weld seam", "Burn-through", "", "", 12, 2, 2])
        sheet.append(["Weld seam", "Undercut", "", "", 5, 2, 2, None, "Grind", "Kai Berg", "2031-02-30"])

    study = _active_study(client)
    response = upload(client, study["id"], xlsx_bytes(with_bad_rows), "bad.xlsx")
    assert response.status_code == 422
    assert [(error["row"], error["column"]) for error in response.get_json()["errors"]] == [
        (5, "Sev"),
        (6, "Owner"),
        (6, "Due Date"),
    ]
    assert nothing_written(client, study["id"])


def _zip_of(name, data):
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as archive:
        archive.writestr(name, data)
    return buffer.getvalue()


@pytest.mark.parametrize(
    "content",
    [
        xlsx_bytes(_plain_sheet)[:900],
        _zip_of("notes.txt", "not a workbook"),
        b"PK\x03\x04" + b"\x00" * 64,
        b"\xd0\xcf\x11\xe0\xa1\xb1\x1a\xe1" + b"\x00" * 64,
    ],
    ids=["truncated", "zip-without-workbook", "zip-header-only", "old-xls"],
)
def test_a_damaged_or_unsupported_workbook_is_a_clear_422(client, content):
    study = _active_study(client)
    response = upload(client, study["id"], content, "broken.xlsx")
    assert response.status_code == 422, response.get_json()
    problem = response.get_json()
    assert problem["type"] == UNREADABLE and problem["detail"]
    assert nothing_written(client, study["id"])


def _with_sheet_bytes_flipped(content):
    """The workbook with bytes in the middle of its sheet's compressed data changed, as a bad disk might."""
    info = zipfile.ZipFile(io.BytesIO(content)).getinfo("xl/worksheets/sheet1.xml")
    # The member's data follows its 30-byte local header, its name and its extra field.
    start = info.header_offset + 30 + len(info.filename) + len(info.extra) + info.compress_size // 2
    return content[:start] + bytes(byte ^ 0xFF for byte in content[start : start + 16]) + content[start + 16 :]


def test_a_workbook_with_corrupted_compressed_data_is_a_422_not_a_500(client):
    study = _active_study(client)
    response = upload(client, study["id"], _with_sheet_bytes_flipped(xlsx_bytes(_plain_sheet)), "flipped.xlsx")
    assert response.status_code == 422, response.get_json()
    assert response.get_json()["type"] == UNREADABLE
    assert nothing_written(client, study["id"])


def test_a_workbook_with_a_damaged_sheet_part_is_a_422_not_a_500(client):
    study = _active_study(client)
    source = zipfile.ZipFile(io.BytesIO(xlsx_bytes(_plain_sheet)))
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w") as target:
        for info in source.infolist():
            data = source.read(info)
            target.writestr(info, data[: len(data) // 2] if info.filename == "xl/worksheets/sheet1.xml" else data)
    response = upload(client, study["id"], buffer.getvalue(), "half.xlsx")
    assert response.status_code == 422, response.get_json()
    assert response.get_json()["type"] == UNREADABLE
    assert nothing_written(client, study["id"])
