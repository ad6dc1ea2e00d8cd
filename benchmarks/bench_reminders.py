"""Time and peak memory of one reminder run at 10,000 and at 100,000 open actions with the same due ones.

One database holds both cases: the actions due far in the future are switched between open and
cancelled in one UPDATE, so that the two cases alternate in the same run on the same data. The
overdue and due-soon actions, and so the mails, are the same in both.
"""

import datetime
import random
import statistics
import tempfile
import time
import tracemalloc
from pathlib import Path

from harness import SEED, WRITER, Row, abate_app, fresh_database, new_study, progress, refresh_statistics

from abate import db
from abate.domain import modes
from abate.jobs import run_reminders
from abate.models import CorrectiveAction, Reminder, WebhookDelivery

FULL = {"open_small": 10_000, "open_large": 100_000, "overdue": 5_000, "due_soon": 500, "owners": 500, "rounds": 3}
QUICK = {"open_small": 2_000, "open_large": 20_000, "overdue": 500, "due_soon": 50, "owners": 50, "rounds": 1}
STUDIES = 5
MODES_PER_STUDY = 100
INSERT_BATCH = 500
# A fixed moment, so that which actions are overdue does not depend on when the benchmark runs.
NOW = datetime.datetime(2026, 6, 15, 12, 0, 0)


def _mode_ids():
    """(study id, mode id) pairs of a few invented studies on the built-in scales."""
    pairs = []
    for number in range(1, STUDIES + 1):
        study = new_study(f"Reminder benchmark study {number} (invented)", "process")
        with db.database.atomic():
            for index in range(1, MODES_PER_STUDY + 1):
                mode = modes.create_mode(
                    study.id,
                    {
                        "item": f"Station {index}",
                        "failure_mode": f"Invented failure {index}",
                        "severity": 6,
                        "occurrence": 5,
                        "detection": 4,
                    },
                    **WRITER,
                )
                pairs.append((study.id, mode.id))
    return pairs


def _action_rows(count, due_dates, pairs, owners, rng, status="open"):
    for index in range(count):
        study_id, mode_id = rng.choice(pairs)
        owner = rng.randrange(owners)
        due = due_dates(index)
        yield {
            "mode": mode_id,
            "study": study_id,
            "title": f"Invented corrective action {index}",
            "kind": "prevention",
            "owner_name": f"Invented Owner {owner}",
            "owner_email": f"owner{owner}@example.com",
            "due_date": due,
            "original_due_date": due,
            "status": status,
            "created_at": NOW,
            "updated_at": NOW,
        }


def _insert(rows):
    rows = list(rows)
    with db.database.atomic():
        for start in range(0, len(rows), INSERT_BATCH):
            CorrectiveAction.insert_many(rows[start : start + INSERT_BATCH]).execute()


def prepare(size, rng):
    """Fill the database; return the ids of the far-future actions that make the difference."""
    pairs = _mode_ids()
    today = NOW.date()
    owners = size["owners"]
    # Overdue by 1 to 60 days (some beyond the escalation threshold), due within the week, due in months.
    _insert(_action_rows(size["overdue"], lambda i: today - datetime.timedelta(days=1 + i % 60), pairs, owners, rng))
    _insert(_action_rows(size["due_soon"], lambda i: today + datetime.timedelta(days=i % 7), pairs, owners, rng))
    later = size["open_small"] - size["overdue"] - size["due_soon"]
    _insert(_action_rows(later, lambda i: today + datetime.timedelta(days=30 + i % 300), pairs, owners, rng))
    first_extra = CorrectiveAction.select(CorrectiveAction.id).order_by(CorrectiveAction.id.desc()).scalar() + 1
    extra = size["open_large"] - size["open_small"]
    _insert(_action_rows(extra, lambda i: today + datetime.timedelta(days=30 + i % 300), pairs, owners, rng))
    refresh_statistics()
    progress(f"reminders: {size['open_large']:,} actions over {owners} owners ready")
    return CorrectiveAction.id >= first_extra


def switch_extra_actions(extra, status):
    """Make the far-future extra actions open (the large case) or cancelled (the small case)."""
    with db.database.atomic():
        CorrectiveAction.update(status=status).where(extra).execute()
    refresh_statistics()


def forget_previous_run(maildir):
    """Empty the outbox and the Maildir, so that the next run records and delivers everything again."""
    with db.database.atomic():
        Reminder.delete().execute()
        WebhookDelivery.delete().execute()
    for message in (Path(maildir) / "new").glob("*"):
        message.unlink()


def one_run(app, maildir, traced=False):
    """Seconds and (when traced) peak traced bytes of one reminder run; checks that mails went out."""
    forget_previous_run(maildir)
    if traced:
        tracemalloc.start()
    started = time.perf_counter()
    report = run_reminders(app.config, clock=lambda: NOW)
    elapsed = time.perf_counter() - started
    peak = tracemalloc.get_traced_memory()[1] if traced else 0
    if traced:
        tracemalloc.stop()
    if not report.sent or report.failed or report.retrying:
        raise RuntimeError(
            f"the reminder run sent {len(report.sent)}, {len(report.retrying)} retrying, {len(report.failed)} failed"
        )
    return elapsed, peak, len(report.sent)


def main(database_url=None, quick=False):
    """Alternate the small and the large case; print both times, both peaks and their ratios."""
    size = QUICK if quick else FULL
    rng = random.Random(SEED)
    timings, peaks, mails = {"small": [], "large": []}, {}, {}
    with (
        tempfile.TemporaryDirectory(prefix="abate-maildir-") as maildir,
        fresh_database(database_url) as url,
        abate_app(url, SMTP_HOST="", MAILDIR=maildir) as app,
        db.database.connection_context(),
    ):
        extra = prepare(size, rng)
        cases = {"small": "cancelled", "large": "open"}
        for round_number in range(size["rounds"]):
            order = ("small", "large") if round_number % 2 == 0 else ("large", "small")
            for name in order:
                switch_extra_actions(extra, cases[name])
                seconds, _, mails[name] = one_run(app, maildir)
                timings[name].append(seconds)
        for name in ("small", "large"):
            switch_extra_actions(extra, cases[name])
            peaks[name] = one_run(app, maildir, traced=True)[1]
    if mails["small"] != mails["large"]:
        raise RuntimeError(f"the two cases sent different mails: {mails}")
    small_s, large_s = (statistics.median(timings[name]) for name in ("small", "large"))
    small_mb, large_mb = (peaks[name] / 2**20 for name in ("small", "large"))
    label = {name: f"{size[f'open_{name}']:,} open, {size['overdue']:,} overdue" for name in ("small", "large")}
    return [
        Row(f"one run ({mails['small']} mails), {label['small']}", small_s * 1000, "ms"),
        Row(f"one run ({mails['large']} mails), {label['large']}", large_s * 1000, "ms"),
        Row("time large / small", large_s / small_s, "ratio", ("<=", 1.5)),
        Row(f"peak traced memory, {label['small']}", small_mb, "MiB"),
        Row(f"peak traced memory, {label['large']}", large_mb, "MiB"),
        Row("peak memory large / small", large_mb / small_mb, "ratio", ("<=", 1.5)),
    ]
