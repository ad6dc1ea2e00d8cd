"""`abate remind` and `abate scheduler` as real subprocesses; two schedulers on PostgreSQL send each mail once."""

import datetime
import time
import zoneinfo

from abate import db
from abate.domain.tokens import create_token
from abate.models import Reminder
from conftest import authorised_client, build_app, close_pool, make_mode, make_study
from processes import abate_environment, mail_settings, run_abate, wait_for

KAI = "kai.berg@example.com"


def _env(database_url, tmp_path, smtp_server, **settings):
    return abate_environment(database_url, tmp_path, **mail_settings(smtp_server), **settings)


def _today_utc():
    return datetime.datetime.now(datetime.UTC).date()


def _yesterday_in_berlin():
    """Yesterday in the studies' zone, from the stdlib zoneinfo (IANA time zone database)."""
    return datetime.datetime.now(zoneinfo.ZoneInfo("Europe/Berlin")).date() - datetime.timedelta(days=1)


def _overdue_actions(client, owners):
    study = make_study(client)
    mode = make_mode(client, study["id"])
    for owner in owners:
        body = {
            "title": "Check the clamp force",
            "kind": "detection",
            "owner": {"name": "Owner", "email": owner},
            "due_date": _yesterday_in_berlin().isoformat(),
        }
        assert client.post(f"/v1/modes/{mode['id']}/actions", json=body).status_code == 201


def test_remind_now_with_dry_run_reports_and_without_it_sends(client, database_url, tmp_path, smtp_server):
    _overdue_actions(client, [KAI])
    env = _env(database_url, tmp_path, smtp_server)
    key = f"digest:{KAI}:{_today_utc().isoformat()}"

    dry = run_abate(env, "remind", "--now", "--dry-run").stdout
    assert f"would be recorded {key}" in dry and f"would be sent {key}" in dry
    assert smtp_server.received == []

    real = run_abate(env, "remind", "--now").stdout
    assert f"recorded {key}" in real and f"sent {key}" in real and "1 recorded, 1 sent" in real
    assert [item.rcpt_tos for item in smtp_server.received] == [[KAI]]
    again = run_abate(env, "remind", "--now").stdout
    assert "0 recorded, 0 sent" in again and len(smtp_server.received) == 1


def test_remind_without_now_is_a_usage_error(client, database_url, tmp_path, smtp_server):
    result = run_abate(_env(database_url, tmp_path, smtp_server), "remind", check=False)
    assert result.returncode == 2 and "pass --now" in result.stderr


def test_serve_runs_the_scheduler_in_process_unless_told_not_to(client, database_url, tmp_path, processes, smtp_server):
    _overdue_actions(client, [KAI])
    env = _env(database_url, tmp_path, smtp_server, REMINDER_TIME="00:00")

    quiet = processes.serve(env)
    time.sleep(2)
    assert "reminder digests" not in quiet.stop()
    assert smtp_server.received == []

    embedded = processes.serve(env, scheduler=True)
    wait_for(lambda: smtp_server.received, seconds=20)
    assert "reminder digests daily at 00:00 UTC" in embedded.stop()
    assert [item.rcpt_tos for item in smtp_server.received] == [[KAI]]


def test_two_scheduler_processes_on_postgresql_send_every_digest_once(
    postgres_schema_url, tmp_path, processes, smtp_server
):
    app = build_app(postgres_schema_url, tmp_path)
    with db.database.connection_context():
        secret = create_token("test admin", "admin")[1]
    owners = [f"owner{number:03d}@example.com" for number in range(120)]
    _overdue_actions(authorised_client(app, secret), owners)
    # Midnight has always passed, so each scheduler runs the day's job as soon as it starts.
    env = _env(postgres_schema_url, tmp_path, smtp_server, REMINDER_TIME="00:00")
    schedulers = [processes.start(env, "scheduler") for _ in range(2)]
    wait_for(lambda: len(smtp_server.received) >= len(owners), seconds=60)
    # Give a second sender the time to (wrongly) send anything again.
    time.sleep(2)
    outputs = [process.stop() for process in schedulers]
    recipients = sorted(address for item in smtp_server.received for address in item.rcpt_tos)
    assert recipients == owners, outputs
    assert all("reminder digests daily at 00:00 UTC" in output for output in outputs)
    # Each ran the day's job; the PostgreSQL advisory lock let one of them do it.
    runs = [line for output in outputs for line in output.splitlines() if "reminder job run_reminders" in line]
    assert len(runs) == 2 and sum(f"{len(owners)} sent" in line for line in runs) == 1, outputs
    with db.database.connection_context():
        assert {row.status for row in Reminder.select()} == {"sent"}
        assert Reminder.select().count() == len(owners)
    close_pool()
