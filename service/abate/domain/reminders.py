"""Reminders: what each owner hears about on a day, the outbox that records it, delivery with backoff."""

import contextlib
import datetime
import json
from dataclasses import dataclass, field

import peewee as pw

from abate.db import database, lock_for_update
from abate.domain import webhooks
from abate.domain.actions import days_overdue
from abate.domain.clock import local_today
from abate.domain.scoring import Ratings, priority_band
from abate.domain.studies import policy_of
from abate.domain.versions import check_precondition, save_new_version
from abate.errors import Conflict, ValidationFailed, field_error
from abate.models import CorrectiveAction, DriftNotice, FailureMode, OwnerPreference, Reminder, Study

REMINDER_STATUSES = ("pending", "sent", "failed")
SECTIONS = ("overdue", "due_soon", "escalated", "occurrence_drift")
MAX_ATTEMPTS = 10
FIRST_RETRY = datetime.timedelta(minutes=5)
LONGEST_RETRY = datetime.timedelta(hours=6)
# A claimed row is offered to no other sender for this long; a batch is sent well within it.
CLAIM_LEASE = datetime.timedelta(minutes=15)
SEND_BATCH = 20
_INSERT_BATCH = 200
# Fixed so that every instance on the same PostgreSQL database contends for the same lock.
_RUN_LOCK_KEY = 0x4AB40004


class DeliveryFailed(Exception):
    """A message could not be handed to the mail system; the text says why."""


@dataclass(frozen=True)
class ReminderPolicy:
    """The settings a reminder run follows."""

    timezone: str
    due_soon_days: int
    escalation_days: int
    skip_weekends: bool
    base_url: str

    @classmethod
    def from_config(cls, config):
        """The policy the service's settings describe."""
        return cls(
            timezone=config["REMINDER_TIMEZONE"],
            due_soon_days=int(config["REMINDER_DUE_SOON_DAYS"]),
            escalation_days=int(config["ESCALATION_DAYS"]),
            skip_weekends=bool(config["REMINDER_SKIP_WEEKENDS"]),
            base_url=config["BASE_URL"].rstrip("/"),
        )


@dataclass
class Digest:
    """One recipient's mail for one day: their overdue and due-soon actions, and escalations from their studies."""

    recipient: str
    name: str
    day: datetime.date
    policy: ReminderPolicy
    overdue: list = field(default_factory=list)
    due_soon: list = field(default_factory=list)
    escalated: list = field(default_factory=list)
    occurrence_drift: list = field(default_factory=list)

    @property
    def dedup_key(self):
        """The outbox key: one digest per recipient and day, whatever runs record it."""
        return digest_key(self.recipient, self.day)

    def payload(self):
        """The digest as the JSON-ready dict the outbox keeps and the mail is composed from."""
        return {
            "recipient": self.recipient,
            "name": self.name,
            "day": self.day.isoformat(),
            "due_soon_days": self.policy.due_soon_days,
            "escalation_days": self.policy.escalation_days,
            "overdue": sorted(self.overdue, key=lambda line: (-line["days_overdue"], -line["rpn"], line["action_id"])),
            "due_soon": sorted(self.due_soon, key=lambda line: (line["due_date"], -line["rpn"], line["action_id"])),
            "escalated": sorted(
                self.escalated, key=lambda line: (-line["days_overdue"], -line["rpn"], line["action_id"])
            ),
            "occurrence_drift": sorted(self.occurrence_drift, key=lambda line: line["notice_id"]),
        }

    def summary(self):
        """Who the digest goes to and how many actions each section lists."""
        return digest_summary(self.dedup_key, self.recipient, self.payload())


def digest_key(recipient, day):
    """The de-duplication key of a recipient's digest for a day."""
    return f"digest:{recipient}:{day.isoformat()}"


def normalised_email(address):
    """The form an address is grouped, keyed and stored under: trimmed and lower-case."""
    return address.strip().lower()


def _candidate_actions(latest_due):
    """Unfinished actions due on or before latest_due with their mode and study, streamed, not cached."""
    return (
        CorrectiveAction.select(CorrectiveAction, FailureMode, Study)
        .join(FailureMode)
        .switch(CorrectiveAction)
        .join(Study)
        .where(CorrectiveAction.unfinished() & (CorrectiveAction.due_date <= latest_due))
        .order_by(CorrectiveAction.id)
        .iterator()
    )


def _line(action, today, base_url):
    mode, study = action.mode, action.study
    ratings = Ratings(mode.severity, mode.occurrence, mode.detection)
    return {
        "action_id": action.id,
        "title": action.title,
        "study_id": study.id,
        "study_title": study.title,
        "failure_mode": mode.failure_mode,
        "rpn": mode.rpn,
        "priority": priority_band(ratings, policy_of(study)),
        "due_date": action.due_date.isoformat(),
        "days_overdue": days_overdue(action, today),
        "days_left": max(0, (action.due_date - today).days),
        "owner_name": action.owner_name,
        "owner_email": action.owner_email,
        "link": f"{base_url}/v1/actions/{action.id}",
    }


def collect_digests(now, policy):
    """The non-empty digests of the day now falls on in the policy's time zone, by recipient.

    Overdue and due-soon are judged in each study's own time zone. Memory follows the number of
    due and overdue actions: the query streams only those (plus at most a day's worth more).
    """
    day = local_today(policy.timezone, now)
    due_soon_opted_out = {
        row.email for row in OwnerPreference.select(OwnerPreference.email).where(~OwnerPreference.due_soon_notices)
    }
    # No place on earth is more than a day ahead of UTC; each action is then judged exactly.
    latest_due = now.date() + datetime.timedelta(days=1 + policy.due_soon_days)
    todays, digests = {}, {}

    def digest_of(address, name):
        recipient = normalised_email(address)
        return digests.setdefault(recipient, Digest(recipient=recipient, name=name, day=day, policy=policy))

    for action in _candidate_actions(latest_due):
        zone = action.study.timezone
        today = todays.setdefault(zone, local_today(zone, now))
        line = _line(action, today, policy.base_url)
        owner = normalised_email(action.owner_email)
        if line["days_overdue"] > 0:
            digest_of(owner, action.owner_name).overdue.append(line)
            study_owner = normalised_email(action.study.owner_email)
            if line["days_overdue"] > policy.escalation_days and study_owner != owner:
                digest_of(study_owner, action.study.owner_name).escalated.append(line)
        elif line["days_left"] <= policy.due_soon_days and owner not in due_soon_opted_out:
            digest_of(owner, action.owner_name).due_soon.append(line)
    for notice in DriftNotice.select().where(DriftNotice.digest_key.is_null()).order_by(DriftNotice.id):
        line = {
            **json.loads(notice.payload),
            "notice_id": notice.id,
            "link": f"{policy.base_url}/v1/modes/{notice.mode_id}/occurrence-evidence",
        }
        digest_of(notice.recipient, notice.name).occurrence_drift.append(line)
    return [digests[recipient] for recipient in sorted(digests)]


def _keys_recorded_on(day):
    return {key for (key,) in Reminder.select(Reminder.dedup_key).where(Reminder.local_day == day).tuples()}


def unrecorded(digests, day):
    """The digests whose key the outbox does not hold yet."""
    recorded = _keys_recorded_on(day)
    return [digest for digest in digests if digest.dedup_key not in recorded]


def record_digests(digests, day, now):
    """Add the day's digests to the outbox in one transaction; return those that were new.

    The unique key decides: a digest another run already recorded is left as it is.
    """
    with database.atomic():
        new = unrecorded(digests, day)
        rows = [
            {
                "dedup_key": digest.dedup_key,
                "recipient": digest.recipient,
                "local_day": day,
                "status": "pending",
                "next_attempt_at": now,
                "payload": json.dumps(digest.payload()),
                "created_at": now,
            }
            for digest in new
        ]
        for start in range(0, len(rows), _INSERT_BATCH):
            Reminder.insert_many(rows[start : start + _INSERT_BATCH]).on_conflict_ignore().execute()
        _mark_drift_notices(new)
        _announce_overdue(digests, day, now)
    return new


def _mark_drift_notices(digests):
    """Note which digest carries each drift notice, so that it goes out once, in the owner's next digest."""
    for digest in digests:
        notice_ids = [line["notice_id"] for line in digest.occurrence_drift]
        if notice_ids:
            DriftNotice.update(digest_key=digest.dedup_key).where(
                DriftNotice.id.in_(notice_ids) & DriftNotice.digest_key.is_null()
            ).execute()


def _announce_overdue(digests, day, now):
    """Queue action.overdue webhooks once per action and day, with the digests that list them."""
    subscriptions = webhooks.active_subscriptions()
    if not subscriptions:
        return
    announced = set()
    for digest in digests:
        for line in digest.overdue:
            if line["action_id"] not in announced:
                announced.add(line["action_id"])
                webhooks.enqueue_event(
                    "action.overdue",
                    {key: line[key] for key in ("action_id", "study_id", "title", "due_date", "days_overdue", "rpn")},
                    occurred_at=now,
                    dedup_key=f"action.overdue:{line['action_id']}:{day.isoformat()}",
                    subscriptions=subscriptions,
                )


def _deliverable(now):
    return (
        Reminder.select()
        .where((Reminder.status == "pending") & (Reminder.next_attempt_at <= now))
        .order_by(Reminder.id)
    )


def _claim_batch(now):
    """Take up to SEND_BATCH deliverable rows for this sender: each attempt counts and is leased."""
    with database.atomic():
        query = _deliverable(now).limit(SEND_BATCH)
        if database.for_update:
            # Rows another sender holds are skipped, not waited for; SQLite's write lock serialises instead.
            query = query.for_update(skip_locked=True)
        rows = list(query)
        if rows:
            Reminder.update(attempts=Reminder.attempts + 1, next_attempt_at=now + CLAIM_LEASE).where(
                Reminder.id.in_([row.id for row in rows])
            ).execute()
    for row in rows:
        row.attempts += 1
    return rows


def retry_delay(attempts):
    """Wait before the next attempt after `attempts` failed ones: doubling from FIRST_RETRY up to LONGEST_RETRY."""
    return min(FIRST_RETRY * 2 ** (attempts - 1), LONGEST_RETRY)


def _record_outcome(row, now, error=None):
    if error is None:
        row.status, row.sent_at = "sent", now
    else:
        row.last_error = str(error)[:2000]
        if row.attempts >= MAX_ATTEMPTS:
            row.status = "failed"
        else:
            row.next_attempt_at = now + retry_delay(row.attempts)
    with database.atomic():
        row.save(only=[Reminder.status, Reminder.sent_at, Reminder.last_error, Reminder.next_attempt_at])


@dataclass
class RunReport:
    """What a reminder run recorded and delivered (with dry_run: what it would)."""

    day: datetime.date
    dry_run: bool = False
    skipped: str | None = None
    recorded: list = field(default_factory=list)
    sent: list = field(default_factory=list)
    retrying: list = field(default_factory=list)
    failed: list = field(default_factory=list)


def deliver(clock, postman, report):
    """Send every deliverable reminder through postman, batch by batch, and note each outcome in report."""
    with postman:
        while batch := _claim_batch(clock()):
            for row in batch:
                try:
                    postman.send(row)
                except DeliveryFailed as error:
                    _record_outcome(row, clock(), error)
                    (report.failed if row.status == "failed" else report.retrying).append(reminder_view(row))
                else:
                    _record_outcome(row, clock())
                    report.sent.append(reminder_view(row))
    return report


@contextlib.contextmanager
def _run_lock():
    """On PostgreSQL one reminder run at a time across all instances; yields whether this one may go."""
    if not isinstance(database.obj, pw.PostgresqlDatabase):
        yield True
        return
    acquired = database.execute_sql("SELECT pg_try_advisory_lock(%s)", (_RUN_LOCK_KEY,)).fetchone()[0]
    try:
        yield acquired
    finally:
        if acquired:
            database.execute_sql("SELECT pg_advisory_unlock(%s)", (_RUN_LOCK_KEY,))


def run(policy, clock, postman, *, record=True, dry_run=False):
    """The reminder job: record the day's digests (unless record is off), then deliver what is pending."""
    now = clock()
    report = RunReport(day=local_today(policy.timezone, now), dry_run=dry_run)
    if record and policy.skip_weekends and report.day.weekday() >= 5:
        report.skipped = "weekend"
        record = False
    if dry_run:
        new = unrecorded(collect_digests(now, policy), report.day) if record else []
        report.recorded = [digest.summary() for digest in new]
        report.sent = [reminder_view(row) for row in _deliverable(now)] + report.recorded
        return report
    with _run_lock() as acquired:
        if not acquired:
            report.skipped = "busy"
            return report
        if record:
            new = record_digests(collect_digests(now, policy), report.day, now)
            report.recorded = [digest.summary() for digest in new]
        return deliver(clock, postman, report)


def digest_summary(dedup_key, recipient, payload):
    """Who a digest goes to and how many actions each section lists."""
    return {
        "dedup_key": dedup_key,
        "recipient": recipient,
        "day": datetime.date.fromisoformat(payload["day"]),
        # Digests recorded before a section existed simply lack it.
        **{section: len(payload.get(section, [])) for section in SECTIONS},
    }


def reminder_view(row):
    """An outbox row as plain data for the API and reports."""
    return {
        "id": row.id,
        **digest_summary(row.dedup_key, row.recipient, json.loads(row.payload)),
        "status": row.status,
        "attempts": row.attempts,
        "last_error": row.last_error,
        "next_attempt_at": row.next_attempt_at if row.status == "pending" else None,
        "sent_at": row.sent_at,
        "created_at": row.created_at,
    }


def reminder_views(rows):
    """Outbox rows as plain data."""
    return [reminder_view(row) for row in rows]


def reminders_query(status=None):
    """Outbox rows, optionally of one status, for pagination by the caller."""
    query = Reminder.select()
    if status:
        query = query.where(Reminder.status == status)
    return query


def preferences_tag(row):
    """Preferences change only with their own version (0 while an owner has set none)."""
    return str(row.version)


def _owner_address(email):
    """The normalised address, or ValidationFailed if it is not one."""
    address = normalised_email(email)
    local, at, domain = address.partition("@")
    if not (local and at and domain) or "@" in domain or len(address) > 320 or any(c.isspace() for c in address):
        raise ValidationFailed(
            "not an e-mail address", errors=[field_error("email", f"{email!r} is not an e-mail address", "path")]
        )
    return address


def get_preferences(email):
    """An owner's notice preferences; an owner who never set any gets every notice."""
    address = _owner_address(email)
    row = OwnerPreference.get_or_none(OwnerPreference.email == address)
    return row or OwnerPreference(email=address, due_soon_notices=True, version=0, updated_at=None)


def set_preferences(email, due_soon_notices, expected_tags=None):
    """Store whether an owner wants due-soon notices (overdue ones always come); return the row."""
    address = _owner_address(email)
    with database.atomic():
        row = lock_for_update(OwnerPreference.select().where(OwnerPreference.email == address)).first()
        check_precondition(preferences_tag(row or get_preferences(address)), expected_tags)
        if row is not None:
            row.due_soon_notices = due_soon_notices
            save_new_version(row)
            return row
        try:
            with database.atomic():
                return OwnerPreference.create(email=address, due_soon_notices=due_soon_notices)
        except pw.IntegrityError as error:
            raise Conflict(f"the preferences of {address} were set meanwhile; read them again and retry") from error
