"""The record of scheduled jobs: each job's last run, replaced by every run that finishes."""

from abate.db import database
from abate.models import SchedulerRun

#: Longest error summary kept; the full traceback goes to the log.
ERROR_SUMMARY_LENGTH = 500


def record_run(job, started_at, finished_at, error=""):
    """Note a finished run of job: ok without an error summary, failed with one."""
    row = {
        "job": job,
        "started_at": started_at,
        "finished_at": finished_at,
        "outcome": "failed" if error else "ok",
        "error": error[:ERROR_SUMMARY_LENGTH],
    }
    # The unique job name decides between two processes recording at once: the later write wins.
    with database.atomic():
        SchedulerRun.insert(**row).on_conflict(
            conflict_target=[SchedulerRun.job],
            preserve=[SchedulerRun.started_at, SchedulerRun.finished_at, SchedulerRun.outcome, SchedulerRun.error],
        ).execute()


def last_runs():
    """Every job's last run, by job name."""
    return list(SchedulerRun.select().order_by(SchedulerRun.job))
