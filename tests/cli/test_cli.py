"""The `abate` command, run as a real subprocess against a SQLite file."""

import datetime
import hashlib
import json
import os
import socket
import sqlite3
import subprocess
import sys
import time
from pathlib import Path

import requests

from abate import db
from abate.domain.tokens import create_token
from conftest import HEAD_SCHEMA_VERSION, authorised_client, build_app, close_pool

ROOT = Path(__file__).resolve().parents[2]
ABATE = str(Path(sys.executable).with_name("abate"))
SCENARIO = ROOT / "demo" / "scenario.json"


def run_abate(tmp_path, *args, check=True):
    """Run `abate ARGS` with its database in tmp_path; return the completed process."""
    env = {**os.environ, "ABATE_DATABASE_URL": f"sqlite:///{tmp_path / 'cli.sqlite3'}"}
    return subprocess.run([ABATE, *args], env=env, cwd=ROOT, capture_output=True, text=True, timeout=60, check=check)


def _rows(tmp_path, sql):
    with sqlite3.connect(tmp_path / "cli.sqlite3") as connection:
        return connection.execute(sql).fetchall()


def test_db_upgrade_applies_each_migration_once(tmp_path):
    first = run_abate(tmp_path, "db", "upgrade").stdout
    assert "applied migration 0001 initial" in first and f"schema at version {HEAD_SCHEMA_VERSION}" in first
    second = run_abate(tmp_path, "db", "upgrade").stdout
    assert second.strip() == f"schema at version {HEAD_SCHEMA_VERSION}"


def test_token_create_prints_the_secret_last_and_stores_only_its_hash(tmp_path):
    run_abate(tmp_path, "db", "upgrade")
    output = run_abate(tmp_path, "token", "create", "--name", "ticket bridge", "--role", "editor").stdout
    secret = output.strip().splitlines()[-1]
    assert secret.startswith("abt_") and len(secret) > 40
    [(name, role, stored)] = _rows(tmp_path, "SELECT name, role, secret_hash FROM api_token")
    assert (name, role) == ("ticket bridge", "editor")
    assert stored == hashlib.sha256(secret.encode()).hexdigest() and secret not in stored


def test_token_create_refuses_an_unknown_role(tmp_path):
    result = run_abate(tmp_path, "token", "create", "--name", "x", "--role", "owner", check=False)
    assert result.returncode == 2 and "owner" in result.stderr


def _final_totals(scenario):
    """Each study's total RPN after its timeline, replayed by hand: RPN = S x O x D (IEC 60812:2018) per active mode."""
    ratings, study_of, mode_of_action = {}, {}, {}
    for step in sorted(scenario["timeline"], key=lambda step: step["day"]):
        if step["do"] == "add_mode":
            ratings[step["key"]] = {name: step["mode"][name] for name in ("severity", "occurrence", "detection")}
            study_of[step["key"]] = step["study"]
        elif step["do"] == "open_action":
            mode_of_action[step["key"]] = step["mode"]
        elif step["do"] == "close_action":
            ratings[mode_of_action[step["action"]]].update(step["result"])
        elif step["do"] == "rerate":
            ratings[step["mode"]].update(step["changes"])
        elif step["do"] == "retire_mode":
            del ratings[step["mode"]]
    totals = dict.fromkeys(study_of.values(), 0)
    for key, values in ratings.items():
        totals[study_of[key]] += values["severity"] * values["occurrence"] * values["detection"]
    return totals


DEMO_TABLES = ("study", "failure_mode", "corrective_action", "risk_event", "api_token", "study_tag")


def test_demo_load_replays_the_timeline_once_through_the_api(tmp_path):
    scenario = json.loads(SCENARIO.read_text(encoding="utf-8"))
    first = run_abate(tmp_path, "demo", "load").stdout
    assert first.count("loaded demo study") == len(scenario["studies"]) == 3
    counts = {table: _rows(tmp_path, f"SELECT COUNT(*) FROM {table}") for table in DEMO_TABLES}
    second = run_abate(tmp_path, "demo", "load").stdout
    assert second.count("already there") == len(scenario["studies"])
    assert {table: _rows(tmp_path, f"SELECT COUNT(*) FROM {table}") for table in DEMO_TABLES} == counts

    expected = _final_totals(scenario)
    for position, spec in enumerate(scenario["studies"], start=1):
        [(title, total)] = _rows(tmp_path, f"SELECT title, total_rpn FROM study WHERE id = {position}")
        assert (title, total) == (spec["title"], expected[spec["key"]])
    added = sum(1 for step in scenario["timeline"] if step["do"] == "add_mode")
    opened = sum(1 for step in scenario["timeline"] if step["do"] == "open_action")
    assert counts["failure_mode"] == [(added,)] and counts["corrective_action"] == [(opened,)]
    # One admin token did the loading through the client, and it no longer works.
    [(name, role, revoked_at)] = _rows(tmp_path, "SELECT name, role, revoked_at FROM api_token")
    assert (name, role) == ("demo loader", "admin") and revoked_at is not None
    assert _rows(tmp_path, "SELECT DISTINCT source, actor FROM risk_event") == [("api", "demo loader (token 1)")]
    statuses = dict(_rows(tmp_path, "SELECT status, COUNT(*) FROM corrective_action GROUP BY status"))
    closed = sum(1 for step in scenario["timeline"] if step["do"] == "close_action")
    assert statuses == {"closed": closed, "open": opened - closed - 2, "in_progress": 1, "cancelled": 1}
    [(overdue,)] = _rows(
        tmp_path, "SELECT COUNT(*) FROM corrective_action WHERE status = 'open' AND due_date < date('now')"
    )
    assert overdue >= 3
    [(first_event, last_event)] = _rows(tmp_path, "SELECT MIN(occurred_at), MAX(occurred_at) FROM risk_event")
    span = datetime.datetime.fromisoformat(last_event) - datetime.datetime.fromisoformat(first_event)
    assert span >= datetime.timedelta(days=scenario["span_days"] - 1)


def test_the_demo_history_falls_in_every_study(tmp_path):
    run_abate(tmp_path, "demo", "load")
    app = build_app(f"sqlite:///{tmp_path / 'cli.sqlite3'}", tmp_path)
    try:
        with db.database.connection_context():
            client = authorised_client(app, create_token("history check", "reader")[1])
        for study_id in (1, 2, 3):
            points = client.get(f"/v1/studies/{study_id}/history", query_string={"interval": "week"}).get_json()[
                "points"
            ]
            # The quick study starts in month three; the others span the whole six months.
            assert len(points) >= 15
            assert points[0]["total_rpn"] > points[-1]["total_rpn"], study_id
            assert points[-1]["in_progress"] and sum(point["change"]["actions"] for point in points) < 0
            chart = client.get(f"/v1/studies/{study_id}/history.svg")
            assert chart.status_code == 200 and chart.mimetype == "image/svg+xml"
        # The plant's counts: one closed prevention action is not borne out by data, another is.
        evidence = client.get("/v1/studies/1/occurrence-evidence").get_json()["items"]
        assert [(item["status"], item["drift"]) for item in evidence] == [
            ("suggests_change", True),
            ("consistent", False),
        ]
        checks = [item["data_check"] for item in client.get("/v1/studies/1/actions/effect").get_json()["items"]]
        assert checks.count("not_confirmed_by_data") == 1 and "consistent_with_data" in checks
    finally:
        close_pool()


def _free_port():
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


def test_serve_migrates_and_answers_through_waitress(tmp_path):
    port = _free_port()
    env = {**os.environ, "ABATE_DATABASE_URL": f"sqlite:///{tmp_path / 'serve.sqlite3'}"}
    server = subprocess.Popen(
        [ABATE, "serve", "--port", str(port)], env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True
    )
    try:
        deadline = time.monotonic() + 20
        while True:
            try:
                response = requests.get(f"http://127.0.0.1:{port}/readyz", timeout=2)
                break
            except requests.ConnectionError:
                assert time.monotonic() < deadline, "abate serve did not start"
                time.sleep(0.2)
        assert response.json() == {"status": "ok", "schema_version": HEAD_SCHEMA_VERSION}
        assert response.headers["Server"] == "abate"  # waitress's ident, not a development server
    finally:
        server.terminate()
        output, _ = server.communicate(timeout=10)
    assert "applied migration 0002 stored_rpn" in output


def test_openapi_command_prints_the_checked_in_document(tmp_path):
    printed = run_abate(tmp_path, "openapi").stdout
    assert printed == (ROOT / "openapi" / "abate-v1.json").read_text(encoding="utf-8")


def test_token_list_shows_roles_and_revoke_marks_a_token_revoked(tmp_path):
    run_abate(tmp_path, "db", "upgrade")
    secret = run_abate(tmp_path, "token", "create", "--name", "dashboard", "--role", "reader").stdout.split()[-1]
    listed = run_abate(tmp_path, "token", "list").stdout
    assert "reader" in listed and "dashboard" in listed and "never" in listed and secret not in listed
    assert "revoked" in run_abate(tmp_path, "token", "revoke", "1").stdout
    assert "revoked 20" in run_abate(tmp_path, "token", "list").stdout
    again = run_abate(tmp_path, "token", "revoke", "1", check=False)
    assert again.returncode == 1 and "already revoked" in again.stderr
