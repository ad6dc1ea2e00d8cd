"""Kill -9 of `abate serve` in the middle of an import and of closes; a fresh process finds consistent data."""

import datetime
import threading

from faults.conftest import assert_consistent, reading, swallow, writer_active
from processes import abate_environment, admin_secret, wait_for
from transfer.sheets import HEADER, csv_bytes

IMPORT_ROWS = 5000
ACTIONS = 40
IN_A_MONTH = (datetime.date.today() + datetime.timedelta(days=30)).isoformat()


def _served_study(processes, http, url, tmp_path, title):
    """A served process on url, http authorised for it, and a study made through it; return (server, study)."""
    env = abate_environment(url, tmp_path)
    http.headers["Authorization"] = f"Bearer {admin_secret(env)}"
    server = processes.serve(env)
    scale_id = http.get(f"{server.base}/v1/scales", timeout=10).json()["items"][0]["id"]
    body = {
        "title": title,
        "kind": "process",
        "owner": {"name": "R. Vik", "email": "r.vik@example.com"},
        "scale_id": scale_id,
        "timezone": "UTC",
    }
    created = http.post(f"{server.base}/v1/studies", json=body, timeout=10)
    assert created.status_code == 201, created.text
    return server, created.json()


def _in_thread(send):
    thread = threading.Thread(target=lambda: swallow(send), daemon=True)
    thread.start()
    return thread


def test_a_killed_import_wrote_all_rows_or_none(tmp_path, database_url, processes, http):
    server, study = _served_study(processes, http, database_url, tmp_path, "Imported under a kill")
    rows = [HEADER[:7]] + [["Item", f"Mode {n}", "Effect", "Cause", "5", "4", "3"] for n in range(IMPORT_ROWS)]
    files = {"file": ("big.csv", csv_bytes(rows), "text/csv")}
    thread = _in_thread(lambda: http.post(f"{server.base}/v1/studies/{study['id']}/import", files=files, timeout=60))
    with reading(database_url) as database:
        # Killed while the import's transaction holds uncommitted rows (or, at the latest, just after it ended).
        writing = wait_for(lambda: writer_active(database, "failure_mode"), seconds=30)
        server.kill()
    thread.join(timeout=10)
    assert writing, "the import never started writing"

    processes.serve(abate_environment(database_url, tmp_path))  # a fresh process opens (and recovers) the database
    with reading(database_url) as database:
        count = database.execute_sql(
            f"SELECT count(*) FROM failure_mode WHERE study_id = {database.param}", (study["id"],)
        ).fetchone()[0]
        assert count in (0, IMPORT_ROWS)
        assert_consistent(database)


def test_closes_racing_a_kill_leave_no_half_closed_action(tmp_path, database_url, processes, http):
    server, study = _served_study(processes, http, database_url, tmp_path, "Closed under a kill")
    actions = []
    for n in range(ACTIONS):
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
        for action_id in ids:
            http.post(
                f"{server.base}/v1/actions/{action_id}/close",
                json={"result": {"occurrence": 2}, "evidence": "verified"},
                timeout=10,
            )

    def closed(database):
        return database.execute_sql("SELECT count(*) FROM corrective_action WHERE status = 'closed'").fetchone()[0]

    with reading(database_url) as database:
        threads = [_in_thread(lambda part=actions[n::4]: close_all(part)) for n in range(4)]
        wait_for(lambda: closed(database) > 0, seconds=30)
        server.kill()
    for thread in threads:
        thread.join(timeout=20)

    processes.serve(abate_environment(database_url, tmp_path))
    with reading(database_url) as database:
        _, checked = assert_consistent(database)
        # Some closes had landed and others not: the kill came in the middle of the work.
        assert 0 < closed(database) < ACTIONS
    assert len(checked) == ACTIONS
