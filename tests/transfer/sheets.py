"""Worksheets as the tests need them, written with the csv module and openpyxl, and the calls that upload them."""

import csv
import io
import re
import zipfile

import openpyxl

# An invented bracket weld line; the ratings are worked examples whose sources the tests name.
HEADER = ["Item", "Failure Mode", "Effect", "Cause", "Sev", "Occ", "Det", "RPN", "Action", "Owner", "Due Date"]
ROWS = [
    [
        "Weld seam",
        "Incomplete fusion",
        "Bracket cracks under load",
        "Wire feed drifts",
        "7",
        "8",
        "5",
        "280",
        "Add wire feed monitor",
        "Kai Berg <kai.berg@example.com>",
        "2031-06-30",
    ],
    ["Weld seam", "Spatter on the thread", "Nut cannot be fitted", "Nozzle dirty", "10", "2", "5", "100", "", "", ""],
    ["Base plate", "Plate bent", "Bracket sits crooked", "Clamp too tight", "1", "10", "10", "100", "", "", ""],
]


def csv_bytes(rows, delimiter=",", encoding="utf-8"):
    """Rows written by the csv module with this delimiter, encoded as given."""
    buffer = io.StringIO()
    csv.writer(buffer, delimiter=delimiter).writerows(rows)
    return buffer.getvalue().encode(encoding)


def xlsx_bytes(fill, title="FMEA"):
    """A workbook whose first sheet fill(sheet, workbook) writes, saved by openpyxl."""
    workbook = openpyxl.Workbook()
    sheet = workbook.active
    sheet.title = title
    fill(sheet, workbook)
    buffer = io.BytesIO()
    workbook.save(buffer)
    return buffer.getvalue()


def with_cached_results(content, results, part="xl/worksheets/sheet1.xml"):
    """The workbook with the stored result of each formula cell in results, as a spreadsheet program saves it.

    openpyxl writes formulas without results; programs that calculate store the last result beside the formula.
    """
    source = zipfile.ZipFile(io.BytesIO(content))
    buffer = io.BytesIO()
    with zipfile.ZipFile(buffer, "w", zipfile.ZIP_DEFLATED) as target:
        for info in source.infolist():
            data = source.read(info)
            if info.filename == part:
                text = data.decode()
                for reference, value in results.items():
                    text, count = re.subn(
                        rf'(<c r="{reference}"[^>]*>)(<f>[^<]*</f>)<v ?/>', rf"\g<1>\g<2><v>{value}</v>", text
                    )
                    assert count == 1, f"no formula cell {reference}"
                data = text.encode()
            target.writestr(info, data)
    return buffer.getvalue()


def upload(client, study_id, content, file_name="fmea.csv", **query):
    """POST the file to the study's import in the multipart field `file`."""
    return client.post(
        f"/v1/studies/{study_id}/import",
        query_string=query,
        data={"file": (io.BytesIO(content), file_name)},
        content_type="multipart/form-data",
    )


def modes_of(client, study_id):
    """The study's modes in creation order."""
    return client.get(f"/v1/studies/{study_id}/modes", query_string={"sort": "created_at", "limit": 500}).get_json()[
        "items"
    ]


def actions_of(client, study_id):
    """The study's actions, oldest first."""
    items = client.get("/v1/actions", query_string={"study_id": study_id, "limit": 500}).get_json()["items"]
    return sorted(items, key=lambda action: action["id"])


def events_of(client, study_id):
    """The study's risk events, oldest first."""
    return client.get(f"/v1/studies/{study_id}/events", query_string={"limit": 500}).get_json()["items"]


def nothing_written(client, study_id):
    """True when the study has no modes, no actions and no risk events."""
    study = client.get(f"/v1/studies/{study_id}").get_json()
    return (
        modes_of(client, study_id) == []
        and actions_of(client, study_id) == []
        and events_of(client, study_id) == []
        and study["risk_revision"] == 0
    )
