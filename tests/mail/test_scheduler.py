"""The scheduler: when the jobs fire, catching up after a late start, and running in a real scheduler thread."""

import datetime
import time
import zoneinfo

from abate import db, jobs
from abate.config import load_config
from abate.domain import reminders

BERLIN = zoneinfo.ZoneInfo("Europe/Berlin")
KAI = "kai.berg@example.com"


def _config(**settings):
    return load_config(settings, environ={})


def _yesterday_in_berlin():
    """Yesterday in the studies' zone, from the stdlib zoneinfo (IANA time zone database)."""
    return datetime.datetime.now(BERLIN).date() - datetime.timedelta(days=1)


def test_the_daily_run_fires_at_the_reminder_time_in_its_zone_across_a_dst_change():
    config = _config(REMINDER_TIME="07:30", REMINDER_TIMEZONE="Europe/Berlin")
    # 05:00 UTC on 30 March 2030 is 06:00 in Berlin, before the reminder time: no catch-up run.
    scheduler = jobs.build_scheduler(config, clock=lambda: datetime.datetime(2030, 3, 30, 5, 0))
    daily = scheduler.get_job("daily_reminders")

    assert (daily.coalesce, daily.max_instances, daily.misfire_grace_time) == (True, 1, 6 * 3600)
    assert daily.args == (config,)
    first = daily.trigger.get_next_fire_time(None, datetime.datetime(2030, 3, 30, 6, 0, tzinfo=BERLIN))
    second = daily.trigger.get_next_fire_time(first, first + datetime.timedelta(seconds=1))
    # Berlin moves from CET (UTC+1) to CEST (UTC+2) on 31 March 2030 (zoneinfo): 07:30 local both days.
    assert first.astimezone(datetime.UTC) == datetime.datetime(2030, 3, 30, 6, 30, tzinfo=datetime.UTC)
    assert second.astimezone(datetime.UTC) == datetime.datetime(2030, 3, 31, 5, 30, tzinfo=datetime.UTC)
    assert (first.utcoffset(), second.utcoffset()) == (datetime.timedelta(hours=1), datetime.timedelta(hours=2))
    retry = scheduler.get_job("retry_deliveries")
    assert retry.trigger.interval == jobs.RETRY_INTERVAL
    assert (retry.coalesce, retry.max_instances) == (True, 1)


def test_a_scheduler_started_after_the_reminder_time_runs_the_day_s_job_at_once():
    config = _config(REMINDER_TIME="07:00", REMINDER_TIMEZONE="UTC")
    started = datetime.datetime(2030, 3, 5, 10, 0)
    scheduler = jobs.build_scheduler(config, clock=lambda: started)
    assert scheduler.get_job("daily_reminders").next_run_time == started.replace(tzinfo=datetime.UTC)


def test_a_real_background_scheduler_runs_the_job_and_sends_the_digest(open_action, smtp_server, mail_app):
    open_action(_yesterday_in_berlin(), KAI)
    # Midnight has always passed, so the started scheduler runs the day's job at once.
    mail_app.config["REMINDER_TIME"] = "00:00"
    scheduler = jobs.build_scheduler(mail_app.config)
    scheduler.start()
    try:
        deadline = time.monotonic() + 20
        while not smtp_server.received and time.monotonic() < deadline:
            time.sleep(0.05)
    finally:
        scheduler.shutdown(wait=True)
    assert [item.rcpt_tos for item in smtp_server.received] == [[KAI]]
    assert "1 day overdue" in smtp_server.received[0].message.get_body(("plain",)).get_content()


def test_the_scheduled_retry_job_delivers_what_an_outage_left_pending(open_action, smtp_server, mail_app):
    open_action(_yesterday_in_berlin(), KAI)
    smtp_server.stop()
    assert len(jobs.daily_reminders(mail_app.config).retrying) == 1
    smtp_server.start()
    # The retry time has not come on the real clock yet: nothing is tried.
    assert jobs.retry_deliveries(mail_app.config).sent == []
    later = datetime.datetime.now(datetime.UTC).replace(tzinfo=None) + reminders.FIRST_RETRY
    with db.database.connection_context():
        report = jobs.deliver_pending(mail_app.config, clock=lambda: later)
    assert [item["recipient"] for item in report.sent] == [KAI]
    assert len(smtp_server.received) == 1
