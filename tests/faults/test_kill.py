"""Kill -9 of `abate serve` in the middle of an import and of closes; a fresh process finds consistent data."""

import datetime
import threading
import time

import requests

from faults.conftest import admin_secret, assert_consistent, open_sqlite
from transfer.sheets import HEADER, csv_bytes

IMPORT_ROWS = 5000
IN_A_MONTH = (datetime.date.today() + datetime.timedelta(days=30)).isoformat()


def _session(secret):
    http = requests.Session()
    http.headers["Authorization"] = f"Bearer {secret}"
    return http


def _study(http, base, title):
    scale_id = http.get(f"{base}/v1/scales", timeout=10).json()["items"][0]["id"]
    body = {
        "title": title,
        "kind": "process",
        "owner": {"name": "R. Vik", "email": "r.vik@example.com"},
        "scale_id": scale_id,
        "timezone": "UTC",
    }
    created = http.post(f"{base}/v1/studies", json=body, timeout=10)
    assert created.status_code == 201, created.text
    return created.json()


def _in_flight(send):
    """Start send() in a thread, give the server a moment to be inside it, and return the thread."""
    thread = threading.Thread(target=send, daemon=True)
    thread.start()
    time.sleep(0.5)  # not a timing assertion: the kill may land before, during or after; each must stay consistent
    return thread


def _swallow(call):
    try:
        call()
    except requests.RequestException:
        pass  # the connection dies with the server


def test_a_killed_import_wrote_all_rows_or_none(tmp_path, sqlite_url, serve):
    secret = admin_secret(sqlite_url, tmp_path)
    server = serve(sqlite_url)
    http = _session(secret)
    study = _study(http, server.base, "Imported under a kill")
    rows = [HEADER[:7]] + [["Item", f"Mode {n}", "Effect", "Cause", "5", "4", "3"] for n in range(IMPORT_ROWS)]
    files = {"file": ("big.csv", csv_bytes(rows), "text/csv")}
    thread = _in_flight(
        lambda: _swallow(lambda: http.post(f"{server.base}/v1/studies/{study['id']}/import", files=files, timeout=60))
    )
    server.kill()
    thread.join(timeout=10)

    serve(sqlite_url)  # a fresh process opens (and recovers) the file
    database = open_sqlite(sqlite_url)
    count = database.execute_sql("SELECT count(*) FROM failure_mode WHERE study_id = ?", (study["id"],)).fetchone()[0]
    assert count in (0, IMPORT_ROWS)
    assert_consistent(database)


def test_closes_racing_a_kill_leave_no_half_closed_action(tmp_path, sqlite_url, serve):
    secret = admin_secret(sqlite_url, tmp_path)
    server = serve(sqlite_url)
    http = _session(secret)
    study = _study(http, server.base, "Closed under a kill")
    actions = []
    for n in range(40):
        mode = http.post(
            f"{server.base}/v1/studies/{study['id']}/modes",
            json={"failure_mode": f"Mode {n}", "severity": 6, "occurrence": 5, "detection": 4},
            timeout=10,
        ).json()
        action = http.post(
            f"{server.base}/v1/modes/{mode['id']}/actions",
            json={
                "title": "Fit a guard",
                "kind": "prevention",
                "owner": {"name": "R. Vik", "email": "r.vik@example.com"},
                "due_date": IN_A_MONTH,
                "target": None,
            },
            timeout=10,
        )
        assert action.status_code == 201, action.text
        actions.append(action.json()["id"])

    def close_all(ids):
        closer = _session(secret)
        for action_id in ids:
            _swallow(
                lambda action_id=action_id: closer.post(
                    f"{server.base}/v1/actions/{action_id}/close",
                    json={"result": {"occurrence": 2}, "evidence": "verified"},
                    timeout=10,
                )
            )

    threads = [_in_flight(lambda part=actions[n::4]: close_all(part)) for n in range(4)]
    server.kill()
    for thread in threads:
        thread.join(timeout=20)

    serve(sqlite_url)
    _, checked = assert_consistent(open_sqlite(sqlite_url))
    assert len(checked) == len(actions)
