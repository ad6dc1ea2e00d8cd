"""The `abate` command, run as a real subprocess against a SQLite file."""

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

from conftest import HEAD_SCHEMA_VERSION

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


def test_demo_load_creates_the_scenario_once(tmp_path):
    scenario = json.loads(SCENARIO.read_text(encoding="utf-8"))
    first = run_abate(tmp_path, "demo", "load").stdout
    assert first.count("loaded demo study") == len(scenario["studies"])
    second = run_abate(tmp_path, "demo", "load").stdout
    assert second.count("already there") == len(scenario["studies"])
    for position, study in enumerate(scenario["studies"], start=1):
        final_rpns = []
        for mode in study["modes"]:
            ratings = {name: mode[name] for name in ("severity", "occurrence", "detection")}
            for change in mode.get("rerated", []):
                ratings.update({name: change[name] for name in ratings if name in change})
            final_rpns.append(ratings["severity"] * ratings["occurrence"] * ratings["detection"])
        [(total,)] = _rows(tmp_path, f"SELECT total_rpn FROM study WHERE id = {position}")
        assert total == sum(final_rpns)


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
