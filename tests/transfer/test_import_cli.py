"""`abate import STUDY_ID FILE`, run as a real subprocess against a SQLite file."""

import os
import sqlite3
import subprocess
import sys
from pathlib import Path

from sheets import HEADER, ROWS, csv_bytes, xlsx_bytes

from abate import db
from abate.domain import studies
from abate.domain.scales import find_scale_set_by_name
from conftest import BUILTIN_1_10, build_app, close_pool

ABATE = str(Path(sys.executable).with_name("abate"))


def _abate(database, *args):
    env = {**os.environ, "ABATE_DATABASE_URL": f"sqlite:///{database}"}
    return subprocess.run([ABATE, *args], env=env, capture_output=True, text=True, timeout=60, check=False)


def _study(tmp_path):
    """A SQLite file under tmp_path holding one active study on the 1-10 scales; return the file."""
    database = tmp_path / "import.sqlite3"
    build_app(f"sqlite:///{database}", tmp_path)
    with db.database.connection_context():
        studies.create_study(
            {
                "title": "Weld cell",
                "kind": "process",
                "owner": {"name": "Mira Tallis", "email": "mira.tallis@example.com"},
                "scale_id": find_scale_set_by_name(BUILTIN_1_10).id,
                "timezone": "Europe/Berlin",
                "status": "active",
            }
        )
    close_pool()
    return database


def _rows(database, sql):
    with sqlite3.connect(database) as connection:
        return connection.execute(sql).fetchall()


def _header_and_rows(worksheet, workbook):
    for row in [HEADER, *ROWS]:
        worksheet.append(row)


def test_the_import_command_writes_the_rows_and_names_the_file_in_the_events(tmp_path):
    database = _study(tmp_path)
    sheet = tmp_path / "weld.xlsx"
    sheet.write_bytes(xlsx_bytes(_header_and_rows))
    result = _abate(database, "import", "1", str(sheet))
    assert result.returncode == 0, result.stderr
    assert "weld.xlsx: sheet 'FMEA', 3 rows imported: 3 modes, 1 actions, 0 problems" in result.stdout
    # 7 x 8 x 5 = 280 (LPU DMGT524, unit 12) and (10,2,5), (1,10,10) = 100 (same source).
    assert _rows(database, "SELECT rpn FROM failure_mode ORDER BY id") == [(280,), (100,), (100,)]
    assert _rows(database, "SELECT DISTINCT source, actor FROM risk_event") == [("import", "command line")]
    assert _rows(database, "SELECT reason FROM risk_event WHERE kind = 'created' ORDER BY id")[0] == (
        "imported from weld.xlsx, row 2",
    )


def test_a_dry_run_prints_each_problem_and_writes_nothing(tmp_path):
    database = _study(tmp_path)
    sheet = tmp_path / "bad.csv"
    sheet.write_bytes(csv_bytes([HEADER, ["Weld", "Porosity", "", "", "11", "2", "2"], ["Weld", "", "", "", 4, 4, 4]]))
    result = _abate(database, "import", "1", str(sheet), "--dry-run")
    assert result.returncode == 1
    lines = result.stdout.splitlines()
    assert lines[0].startswith("row 2, column 'Sev': 11 lies outside the study's scale")
    assert lines[1].startswith("row 3, column 'Failure Mode': is missing")
    assert lines[2] == "bad.csv: 2 rows checked (dry run, nothing written): 2 modes, 0 actions, 2 problems"
    assert _rows(database, "SELECT COUNT(*) FROM failure_mode") == [(0,)]


def test_a_rejected_import_exits_non_zero_with_the_problems_on_stderr(tmp_path):
    database = _study(tmp_path)
    sheet = tmp_path / "fmea.csv"
    sheet.write_bytes(csv_bytes([["Failure mode", "Sev", "Occ", "Det"], ["Burr", "4", "4", "x"]]))
    result = _abate(database, "import", "1", str(sheet), "--mapping", '{"detection": "Det"}')
    assert result.returncode == 1
    assert "row 2, column 'Det': 'x' is not a number" in result.stderr and "nothing was imported" in result.stderr
    assert _rows(database, "SELECT COUNT(*) FROM risk_event") == [(0,)]
    bad_mapping = _abate(database, "import", "1", str(sheet), "--mapping", "{severity")
    assert bad_mapping.returncode == 2 and "--mapping" in bad_mapping.stderr
