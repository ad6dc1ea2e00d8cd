"""Importing a 10,000-row XLSX worksheet: time and peak memory beside a plain openpyxl read of the same file."""

import datetime
import random
import tempfile
import time
import tracemalloc
from pathlib import Path

import openpyxl
from harness import Row, abate_app, fresh_database, progress

from abate import db
from abate.domain import studies
from abate.domain.importer import import_worksheet
from abate.domain.scales import find_scale_set_by_name

FULL = {"rows": 10_000}
QUICK = {"rows": 1_000}
HEADER = [
    "Item",
    "Function",
    "Failure mode",
    "Effect",
    "Cause",
    "Prevention controls",
    "Detection controls",
    "Sev",
    "Occ",
    "Det",
    "RPN",
    "Action",
    "Owner",
    "Due date",
]
# Every tenth row carries an action, as a worksheet with a few open follow-ups would.
ACTION_EVERY = 10


def write_worksheet(path, rows, rng):
    """An invented FMEA workbook of `rows` data rows under a title row, saved by openpyxl."""
    workbook = openpyxl.Workbook(write_only=True)
    sheet = workbook.create_sheet("FMEA")
    sheet.append(["Invented benchmark line - process FMEA"])
    sheet.append(HEADER)
    due = datetime.date.today() + datetime.timedelta(days=90)
    for number in range(1, rows + 1):
        severity, occurrence, detection = (rng.randint(1, 10) for _ in range(3))
        action = (
            [f"Invented action {number}", "Invented Owner <owner@example.com>", due]
            if number % ACTION_EVERY == 0
            else [None, None, None]
        )
        sheet.append(
            [
                f"Station {number % 40}",
                f"Invented function {number}",
                f"Invented failure mode {number}",
                "Invented effect on the customer",
                "Invented cause",
                "Invented prevention control",
                "Invented detection control",
                severity,
                str(occurrence),  # numbers stored as text, as pasted sheets often hold them
                detection,
                severity * occurrence * detection,
                *action,
            ]
        )
    workbook.save(path)


def plain_read(path):
    """The yardstick: every value of the first sheet read by openpyxl in read-only mode."""
    workbook = openpyxl.load_workbook(path, read_only=True, data_only=True)
    try:
        return sum(1 for _ in workbook.worksheets[0].iter_rows(values_only=True))
    finally:
        workbook.close()


def new_study(title):
    """An active study on the 1-10 scales to import into; return its id."""
    study = studies.create_study(
        {
            "title": title,
            "kind": "process",
            "owner": {"name": "Invented Owner", "email": "owner@example.com"},
            "scale_id": find_scale_set_by_name("General 1-10").id,
            "timezone": "Europe/Berlin",
            "status": "active",
        }
    )
    return study.id


def abate_import(path, study_id, dry_run=False):
    """Import the file into the study through the domain function the API and the CLI call."""
    with path.open("rb") as stream:
        report = import_worksheet(study_id, stream, path.name, actor="benchmark", dry_run=dry_run)
    if report["problems"] or (not dry_run and not report["imported"]):
        raise RuntimeError(f"the benchmark worksheet did not import: {report['problems'][:3]}")
    return report["rows"]


def seconds_of(job):
    """Wall-clock seconds of one call."""
    started = time.perf_counter()
    job()
    return time.perf_counter() - started


def peak_mib_of(job):
    """Peak memory Python allocated during one call, in MiB (tracemalloc; run apart from the timings)."""
    tracemalloc.start()
    try:
        job()
        return tracemalloc.get_traced_memory()[1] / 2**20
    finally:
        tracemalloc.stop()


def main(database_url=None, quick=False):
    """Time and trace a plain read, a dry run and a real import of the same workbook."""
    size = QUICK if quick else FULL
    rows = size["rows"]
    with tempfile.TemporaryDirectory(prefix="abate-import-") as folder:
        path = Path(folder) / "benchmark.xlsx"
        write_worksheet(path, rows, random.Random(20251202))
        progress(f"import: workbook of {rows:,} rows written ({path.stat().st_size / 2**20:.1f} MiB)")
        with fresh_database(database_url) as url, abate_app(url), db.database.connection_context():
            timed, traced = new_study("Benchmark import, timed"), new_study("Benchmark import, traced")
            read_s = seconds_of(lambda: plain_read(path))
            check_s = seconds_of(lambda: abate_import(path, timed, dry_run=True))
            progress(f"import: plain read {read_s:.1f} s, dry run {check_s:.1f} s; importing")
            import_s = seconds_of(lambda: abate_import(path, timed))
            read_mib = peak_mib_of(lambda: plain_read(path))
            check_mib = peak_mib_of(lambda: abate_import(path, traced, dry_run=True))
            progress(f"import: imported in {import_s:.1f} s; tracing the memory of a second import")
            import_mib = peak_mib_of(lambda: abate_import(path, traced))
    return [
        Row(f"plain openpyxl read-only read, {rows:,} rows", read_s, "s"),
        Row("dry run (every row checked, nothing written)", check_s, "s"),
        Row(f"import of {rows:,} rows in one transaction", import_s, "s"),
        Row("import time / plain read time", import_s / read_s, "ratio", ("<=", 3.0)),
        Row("dry run time / plain read time", check_s / read_s, "ratio"),
        Row("plain read peak memory", read_mib, "MiB"),
        Row("import peak memory", import_mib, "MiB"),
        Row("import peak memory / plain read peak memory", import_mib / read_mib, "ratio", ("<=", 3.0)),
        Row("dry run peak memory / plain read peak memory", check_mib / read_mib, "ratio"),
    ]
