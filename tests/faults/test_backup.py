"""`abate db backup` and `abate db restore` on a SQLite file, taken while a live server is writing."""

import datetime
import os
import shutil
import sqlite3
import subprocess
import sys
import threading
import uuid
from pathlib import Path
from urllib.parse import parse_qsl, urlsplit, urlunsplit

import pytest
import requests

from abate import backup, models
from conftest import build_app, close_pool, make_mode, make_study

ROOT = Path(__file__).resolve().parents[2]
ABATE = str(Path(sys.executable).with_name("abate"))
LAST_WEEK = (datetime.date.today() - datetime.timedelta(days=7)).isoformat()


def _abate(url, *args, check=True):
    env = {**os.environ, "ABATE_DATABASE_URL": url}
    return subprocess.run([ABATE, *args], env=env, cwd=ROOT, capture_output=True, text=True, timeout=60, check=check)


def _fill(client):
    """Studies, modes, open and closed actions, their risk events and reminder rows, all through the API."""
    for number in range(3):
        study = make_study(client, title=f"Backup study {number}")
        for rating in (3, 5, 7):
            mode = make_mode(client, study["id"], rating, rating, rating)
            action = client.post(
                f"/v1/modes/{mode['id']}/actions",
                json={
                    "title": "Add a poka-yoke",
                    "kind": "prevention",
                    "owner": {"name": "Ida Lund", "email": f"ida{number}@example.com"},
                    "due_date": LAST_WEEK,
                    "target": None,
                },
            ).get_json()
            if rating == 7:
                closed = client.post(
                    f"/v1/actions/{action['id']}/close", json={"result": {"occurrence": 2}, "evidence": "ok"}
                )
                assert closed.status_code == 200, closed.get_json()
    run = client.post("/v1/reminders/run")
    assert run.status_code == 200, run.get_json()


def _rows(path):
    """Every row of every table of the schema (models.ALL_MODELS), ordered, per table."""
    with sqlite3.connect(path) as connection:
        return {
            model._meta.table_name: connection.execute(f"SELECT * FROM {model._meta.table_name} ORDER BY 1").fetchall()
            for model in models.ALL_MODELS
        }


def test_a_backup_taken_while_serving_restores_every_row(tmp_path, database_url, client, live_server, admin_token):
    if not database_url.startswith("sqlite"):
        pytest.skip("PostgreSQL backups are pg_dump's (README, Backups); this row comparison reads SQLite files")
    sqlite_url = database_url
    _fill(client)
    study = make_study(client, title="Written during the backup")
    stop = threading.Event()
    written = []

    def writer():
        while not stop.is_set():
            answer = requests.post(
                f"{live_server}/v1/studies/{study['id']}/modes",
                json={"failure_mode": "Crack", "severity": 4, "occurrence": 4, "detection": 4},
                headers={"Authorization": f"Bearer {admin_token}"},
                timeout=30,
            )
            written.append(answer.status_code)

    thread = threading.Thread(target=writer)
    thread.start()
    try:
        during = tmp_path / "during.sqlite3"
        backup.backup(sqlite_url, during)
    finally:
        stop.set()
        thread.join()
    close_pool()
    assert written and set(written) == {201}
    # The snapshot taken mid-write is a consistent database: each study's stored total is its modes' sum.
    with sqlite3.connect(during) as snapshot:
        assert snapshot.execute("PRAGMA integrity_check").fetchone() == ("ok",)
        totals = snapshot.execute(
            "SELECT s.id, s.total_rpn, (SELECT coalesce(sum(m.rpn), 0) FROM failure_mode m"
            " WHERE m.study_id = s.id AND m.retired_at IS NULL) FROM study s"
        ).fetchall()
    assert totals and all(stored == summed for _, stored, summed in totals)

    source = backup.sqlite_path(sqlite_url)
    after = tmp_path / "after.sqlite3"
    assert "backup written" in _abate(sqlite_url, "db", "backup", str(after)).stdout
    fresh = f"sqlite:///{tmp_path / 'fresh' / 'restored.sqlite3'}"
    _abate(fresh, "db", "restore", str(after))
    restored = _rows(backup.sqlite_path(fresh))
    assert restored == _rows(source)
    assert len(restored["failure_mode"]) == 3 * 3 + len(written)
    assert restored["reminder"] and restored["risk_event"] and restored["corrective_action"]


def test_restore_refuses_a_database_that_holds_tables_unless_forced(tmp_path, sqlite_url):
    build_app(sqlite_url, tmp_path)
    close_pool()
    copy = tmp_path / "copy.sqlite3"
    _abate(sqlite_url, "db", "backup", str(copy))
    refused = _abate(sqlite_url, "db", "restore", str(copy), check=False)
    assert refused.returncode != 0 and "--force" in refused.stderr
    assert _abate(sqlite_url, "db", "restore", "--force", str(copy)).returncode == 0
    again = _abate(sqlite_url, "db", "backup", str(copy), check=False)
    assert again.returncode != 0 and "exists" in again.stderr


def _pg_rows(url):
    """Every row of every table in the URL's schema, ordered, per table."""
    import psycopg2

    parts = urlsplit(url)
    options = dict(parse_qsl(parts.query)).get("options")
    connection = psycopg2.connect(url.split("?")[0], options=options)
    try:
        with connection.cursor() as cursor:
            rows = {}
            for model in models.ALL_MODELS:
                cursor.execute(f"SELECT * FROM {model._meta.table_name} ORDER BY 1")
                rows[model._meta.table_name] = cursor.fetchall()
            return rows
    finally:
        connection.close()


def test_a_postgresql_backup_restores_every_row_into_a_fresh_database(tmp_path, database_url, client):
    import psycopg2

    if not database_url.startswith("postgresql"):
        pytest.skip("the SQLite case is the test above")
    if shutil.which("pg_dump") is None or shutil.which("pg_restore") is None:
        pytest.skip("pg_dump/pg_restore are not on PATH (Debian's postgresql-client has them)")
    _fill(client)
    close_pool()
    dump = tmp_path / "abate.dump"
    assert "backup written" in _abate(database_url, "db", "backup", str(dump)).stdout
    # A fresh database on the same server; the dump recreates the schema the source used.
    parts = urlsplit(database_url)
    fresh_name = f"restore_{uuid.uuid4().hex[:10]}"
    admin = psycopg2.connect(database_url.split("?")[0])
    admin.autocommit = True
    with admin.cursor() as cursor:
        cursor.execute(f"CREATE DATABASE {fresh_name}")
    fresh = urlunsplit(parts._replace(path=f"/{fresh_name}"))
    try:
        restoring = _abate(fresh, "db", "restore", str(dump), check=False)
        assert restoring.returncode == 0, restoring.stderr
        restored = _pg_rows(fresh)
        assert restored == _pg_rows(database_url)
        assert len(restored["failure_mode"]) == 9 and restored["reminder"] and restored["risk_event"]
    finally:
        with admin.cursor() as cursor:
            cursor.execute(f"DROP DATABASE IF EXISTS {fresh_name} WITH (FORCE)")
        admin.close()
