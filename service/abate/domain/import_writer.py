"""Writing checked import records in bulk: the rows and events that creating each mode and action one by one writes.

The study is locked once; its running totals, the events' revisions and the modes' final states are
worked out here, as events.record_event and the mode and action functions would, and inserted in
chunks. tests/transfer/test_import_batch.py holds the two ways equal, column by column.
"""

import collections
import functools
import io

import peewee as pw

from abate.db import database
from abate.domain import events as risk_events
from abate.domain import webhooks
from abate.domain.actions import new_action
from abate.domain.clock import utcnow
from abate.domain.modes import new_mode, ratings_of
from abate.domain.scoring import needs_action_reasons
from abate.domain.studies import policy_of, require_open_for_changes
from abate.models import CorrectiveAction, FailureMode, RiskEvent, Study

IMPORT_SOURCE = "import"
# Records held before their rows are inserted: memory stays flat however long the file is.
CHUNK_RECORDS = 100
# SQLite's default bound on the variables of one statement since 3.32 (sqlite.org/limits.html, from memory);
# PostgreSQL's is 65535.
MAX_STATEMENT_VARIABLES = 32766


def import_reason(file_name, row):
    """The reason every creation event of an imported row carries."""
    return f"imported from {file_name}, row {row}"


def _reserve_ids(counts):
    """{model: that many new primary keys of its table, ascending} for rows inserted with these ids.

    Neither database promises the row order of INSERT ... RETURNING, so the ids are taken first; on
    PostgreSQL every table's in one round trip.
    """
    wanted = [(model, count) for model, count in counts.items() if count]
    reserved = {model: [] for model in counts}
    if not wanted:
        return reserved
    if isinstance(database.obj, pw.PostgresqlDatabase):
        sql = " UNION ALL ".join(
            f"SELECT {position}, nextval(pg_get_serial_sequence(%s, 'id')) FROM generate_series(1, %s)"
            for position in range(len(wanted))
        )
        params = [value for model, count in wanted for value in (model._meta.table_name, count)]
        for position, new_id in database.execute_sql(sql, params):
            reserved[wanted[position][0]].append(new_id)
        return {model: sorted(ids) for model, ids in reserved.items()}
    # SQLite: the transaction began IMMEDIATE and holds the write lock, so no one else takes the next rowids.
    for model, count in wanted:
        last = model.select(pw.fn.MAX(model.id)).scalar() or 0
        reserved[model] = list(range(last + 1, last + count + 1))
    return reserved


# Backslash, tab, newline and carriage return are what COPY's text format escapes in a value
# (PostgreSQL documentation, COPY, "Text Format"; from memory).
_COPY_ESCAPES = str.maketrans({"\\": "\\\\", "\t": "\\t", "\n": "\\n", "\r": "\\r"})


def _copy_text(value):
    """A database value as COPY's text format writes it: \\N for NULL, t or f, escaped text, else str()."""
    if value is None:
        return "\\N"
    if isinstance(value, bool):
        return "t" if value else "f"
    if isinstance(value, str):
        return value.translate(_COPY_ESCAPES)
    return str(value)


@functools.cache
def _one_row_insert(model, database_kind):
    """(INSERT INTO table (columns), its VALUES group) as peewee writes a one-row insert of every field."""
    one_row, _ = model.insert(dict.fromkeys(model._meta.sorted_fields)).returning().sql()
    return tuple(one_row.rsplit(" VALUES ", 1))


def _insert(model, rows):
    """Insert row dicts (a column left out is NULL): one COPY on PostgreSQL, multi-row INSERTs on SQLite.

    peewee writes the one-row statement, which names the table and columns; the values are converted by
    each field, which costs a fraction of building a query node for every value. COPY spares PostgreSQL
    parsing a statement of every value and the driver quoting each one into it.
    """
    fields = model._meta.sorted_fields
    head, group = _one_row_insert(model, type(database.obj))
    if isinstance(database.obj, pw.PostgresqlDatabase):
        columns = [(field.name, field.db_value) for field in fields]
        lines = "".join(
            "\t".join([_copy_text(convert(row.get(name))) for name, convert in columns]) + "\n" for row in rows
        )
        database.cursor().copy_expert(f"COPY {head.removeprefix('INSERT INTO ')} FROM STDIN", io.StringIO(lines))
        return
    for chunk in pw.chunked(rows, max(1, MAX_STATEMENT_VARIABLES // len(fields))):
        values = [field.db_value(row.get(field.name)) for row in chunk for field in fields]
        database.execute_sql(f"{head} VALUES {', '.join([group] * len(chunk))}", values)


def _event_count(record):
    """The events _write_record writes for record: its creation, each action's and its finish, a retirement."""
    finished = sum(1 for _, finish in record.actions if finish)
    return 1 + len(record.actions) + finished + (1 if record.retire_reason else 0)


class ImportWriter:
    """Adds checked records to one study; use inside the import's transaction, then call finish()."""

    def __init__(self, study_id, file_name, *, actor):
        self.study = risk_events.lock_study(study_id)
        require_open_for_changes(self.study)
        self.file_name, self.actor = file_name, actor
        self.policy = policy_of(self.study)
        self.now = utcnow()
        previous = risk_events.latest_event(self.study)
        # Events stay in time order even if the latest one lies a little ahead of this machine's clock.
        self.occurred_at = max(self.now, previous.occurred_at) if previous else self.now
        self.sums = {cause: getattr(previous, cause) if previous else 0 for cause in risk_events.CAUSES}
        active = FailureMode.select().where((FailureMode.study == self.study) & (FailureMode.status == "active"))
        self.needs_action_count = (
            previous.study_needs_action_count
            if previous
            else active.where(risk_events.needs_action_condition(self.study)).count()
        )
        by_rpn = active.select(FailureMode.rpn, pw.fn.COUNT(FailureMode.id).alias("count")).group_by(FailureMode.rpn)
        self.active_rpns = collections.Counter({row.rpn: row.count for row in by_rpn})
        self.max_rpn = max(self.active_rpns, default=0)
        self.open_actions = (
            CorrectiveAction.select()
            .where((CorrectiveAction.study == self.study) & CorrectiveAction.unfinished())
            .count()
        )
        self.subscriptions = webhooks.active_subscriptions()
        self.previous_view = risk_events.event_view(previous) if previous and self.subscriptions else None
        self.pending, self.mode_ids = [], []

    def add(self, record):
        """Take one checked record; its rows are written with the chunk it belongs to."""
        self.pending.append(record)
        if len(self.pending) >= CHUNK_RECORDS:
            self._flush()

    def finish(self):
        """Write what is left and the study's totals; return the new modes' ids in file order."""
        self._flush()
        self.study.save(only=[Study.total_rpn, Study.risk_revision])
        return self.mode_ids

    def _flush(self):
        if not self.pending:
            return
        ids = _reserve_ids(
            {
                FailureMode: len(self.pending),
                CorrectiveAction: sum(len(record.actions) for record in self.pending),
                RiskEvent: sum(_event_count(record) for record in self.pending),
            }
        )
        mode_ids, action_ids = iter(ids[FailureMode]), iter(ids[CorrectiveAction])
        modes, actions, events = [], [], []
        for record in self.pending:
            self._write_record(record, next(mode_ids), action_ids, modes, actions, events)
        for event, event_id in zip(events, ids[RiskEvent], strict=True):
            event[0]["id"] = event_id
        _insert(FailureMode, [mode.__data__ for mode in modes])
        _insert(CorrectiveAction, [action.__data__ for action in actions])
        _insert(RiskEvent, [row for row, _ in events])
        if self.subscriptions:
            self._enqueue_webhooks(events)
        self.mode_ids += [mode.id for mode in modes]
        self.pending = []

    def _write_record(self, record, mode_id, action_ids, modes, actions, events):
        """The final state of one record's mode and actions, and their events in the order the domain writes them."""
        reason = import_reason(self.file_name, record.row)
        mode = new_mode(self.study, record.mode, self.now)
        mode.id = mode_id
        ratings = ratings_of(mode)
        self._enter(ratings.rpn)
        events.append(self._event("created", mode, after=ratings, reason=reason))
        for data, finish in record.actions:
            action = new_action(mode, self.study, data, self.now)
            action.id = next(action_ids)
            self.open_actions += 1
            events.append(self._event("action_created", mode, action, reason=reason))
            if finish and finish[0] == "close":
                # As close_action without result ratings: the mode is re-rated to where it stands.
                self._close(mode, action, finish[1])
                events.append(self._event("action_closed", mode, action, ratings, ratings, finish[1]["evidence"]))
            elif finish:
                action.status, action.cancelled_at = "cancelled", self.now
                action.version, action.updated_at = action.version + 1, self.now
                self.open_actions -= 1
                events.append(self._event("action_cancelled", mode, action, reason=finish[1]))
            actions.append(action)
        if record.retire_reason:
            mode.status, mode.retired_at = "retired", self.now
            mode.version, mode.updated_at = mode.version + 1, self.now
            self._leave(ratings.rpn)
            events.append(self._event("retired", mode, before=ratings, reason=record.retire_reason))
        modes.append(mode)

    def _close(self, mode, action, data):
        mode.version, mode.updated_at = mode.version + 1, self.now
        for name, value in ratings_of(mode).as_dict().items():
            if name != "rpn":
                setattr(action, f"result_{name}", value)
        action.status, action.evidence = "closed", data["evidence"]
        action.verified_by, action.closed_at = data.get("verified_by", ""), self.now
        action.version, action.updated_at = action.version + 1, self.now
        self.open_actions -= 1

    def _enter(self, rpn):
        self.active_rpns[rpn] += 1
        self.max_rpn = max(self.max_rpn, rpn)

    def _leave(self, rpn):
        self.active_rpns[rpn] -= 1
        if not self.active_rpns[rpn]:
            del self.active_rpns[rpn]
            self.max_rpn = max(self.active_rpns, default=0)

    def _needs(self, ratings):
        return int(ratings is not None and bool(needs_action_reasons(ratings, self.policy)))

    def _event(self, kind, mode, action=None, before=None, after=None, reason=""):
        """(event row, the action's status after it), moving the running totals as record_event does."""
        delta = (after.rpn if after else 0) - (before.rpn if before else 0)
        if kind in risk_events.CAUSE_OF_KIND:
            self.sums[risk_events.CAUSE_OF_KIND[kind]] += delta
        self.study.total_rpn += delta
        self.study.risk_revision += 1
        self.needs_action_count += self._needs(after) - self._needs(before)
        row = {
            "study": self.study.id,
            "mode": mode.id,
            "action": action.id if action is not None else None,
            "kind": kind,
            "occurred_at": self.occurred_at,
            "recorded_at": self.now,
            "actor": self.actor,
            "source": IMPORT_SOURCE,
            "reason": reason or "",
            **risk_events._ratings_columns("before", before),
            **risk_events._ratings_columns("after", after),
            "study_total_rpn": self.study.total_rpn,
            "study_max_rpn": self.max_rpn,
            "study_needs_action_count": self.needs_action_count,
            "study_revision": self.study.risk_revision,
            "study_open_actions": self.open_actions,
            "action_due_date": action.due_date if action is not None else None,
            "rating_raised": False,
            **self.sums,
        }
        return row, action.status if action is not None else None

    def _enqueue_webhooks(self, events):
        """Queue each event's webhooks in order, each announced against the one before it, as record_event does."""
        for row, action_status in events:
            view = risk_events.event_view(RiskEvent(**row))
            webhooks.enqueue_risk_event(view, self.previous_view, action_status)
            self.previous_view = view
