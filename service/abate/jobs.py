"""Scheduled jobs: the daily reminder run and the retry of pending deliveries; the scheduler that runs them."""

import datetime
import logging
import zoneinfo

import peewee
from apscheduler.schedulers.background import BackgroundScheduler
from apscheduler.triggers.cron import CronTrigger
from apscheduler.triggers.interval import IntervalTrigger

from abate import db, mail
from abate.domain import reminders, scheduler_runs
from abate.domain.clock import utcnow
from abate.logs import SECRET_SETTINGS, redact

log = logging.getLogger(__name__)

# One run at a time; several missed runs become one; a run started late (busy process, suspended
# machine) still happens within the grace time.
JOB_OPTIONS = {"coalesce": True, "max_instances": 1, "misfire_grace_time": 6 * 3600}
# How often pending deliveries (first tries of a busy day, retries after a mail server outage) go out.
RETRY_INTERVAL = datetime.timedelta(minutes=5)


def run_reminders(config, clock=utcnow, dry_run=False):
    """Record the day's digests and deliver whatever is pending; return the RunReport."""
    policy = reminders.ReminderPolicy.from_config(config)
    return reminders.run(policy, clock, mail.postman_for(config), dry_run=dry_run)


def deliver_pending(config, clock=utcnow):
    """Deliver the pending reminders whose (re)try time has come, recording nothing new."""
    policy = reminders.ReminderPolicy.from_config(config)
    return reminders.run(policy, clock, mail.postman_for(config), record=False)


def run_recorded(name, job, config):
    """Run job(config) in a connection of its own and record the run under name; a failure is recorded, then raised."""
    with db.database.connection_context():
        started = utcnow()
        try:
            result = job(config)
        except Exception as error:
            _record_failure(name, started, error, config)
            raise
        scheduler_runs.record_run(name, started, utcnow())
    return result


def _record_failure(name, started, error, config):
    summary = redact(f"{type(error).__name__}: {error}", [config[setting] for setting in SECRET_SETTINGS])
    try:
        scheduler_runs.record_run(name, started, utcnow(), " ".join(summary.split()) or type(error).__name__)
    except peewee.PeeweeException as recording_error:
        # The database may be what failed; the job's own error is raised either way.
        log.warning("could not record the failed run of %s: %s", name, recording_error)


def _reminder_job(name, job, config):
    report = run_recorded(name, job, config)
    log.info(
        "reminder job %s for %s: %d recorded, %d sent, %d retrying, %d failed%s",
        job.__name__,
        report.day,
        len(report.recorded),
        len(report.sent),
        len(report.retrying),
        len(report.failed),
        f", skipped ({report.skipped})" if report.skipped else "",
        extra={"job": name},
    )
    return report


def daily_reminders(config):
    """Scheduled: the daily run on the real clock, in a connection of its own."""
    return _reminder_job("daily_reminders", run_reminders, config)


def retry_deliveries(config):
    """Scheduled: the frequent delivery of pending reminders, in a connection of its own."""
    return _reminder_job("retry_deliveries", deliver_pending, config)


def reminder_time(config):
    """ABATE_REMINDER_TIME as a datetime.time."""
    return datetime.time.fromisoformat(config["REMINDER_TIME"])


def build_scheduler(config, scheduler_class=BackgroundScheduler, clock=utcnow):
    """A scheduler, not yet started, with the daily reminder run and the retry of pending deliveries.

    When the day's reminder time has already passed (a restart at noon), the daily run also
    happens at once; the outbox keys make that harmless if it ran before.
    """
    zone = zoneinfo.ZoneInfo(config["REMINDER_TIMEZONE"])
    at = reminder_time(config)
    scheduler = scheduler_class(timezone=zone)
    daily = scheduler.add_job(
        daily_reminders,
        CronTrigger(hour=at.hour, minute=at.minute, timezone=zone),
        args=[config],
        id="daily_reminders",
        name="daily reminder digests",
        **JOB_OPTIONS,
    )
    now = clock().replace(tzinfo=datetime.UTC).astimezone(zone)
    if now.time() >= at:
        daily.modify(next_run_time=now)
    scheduler.add_job(
        retry_deliveries,
        IntervalTrigger(seconds=int(RETRY_INTERVAL.total_seconds()), timezone=zone),
        args=[config],
        id="retry_deliveries",
        name="delivery of pending reminders",
        **JOB_OPTIONS,
    )
    return scheduler
