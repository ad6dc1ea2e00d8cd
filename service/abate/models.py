"""Peewee models: scale sets, tokens, studies, modes, actions, risk events, observations and the outboxes."""

import peewee as pw

from abate.db import database
from abate.domain.clock import utcnow

RATING_DIMENSIONS = ("severity", "occurrence", "detection")


class BaseModel(pw.Model):
    """Base of every Abate table: bound to the database proxy."""

    class Meta:
        database = database
        legacy_table_names = False


class ScaleSet(BaseModel):
    """A company's rating scales for severity, occurrence and detection."""

    name = pw.CharField(max_length=200, unique=True)
    description = pw.TextField(default="")
    builtin = pw.BooleanField(default=False)
    severity_max = pw.SmallIntegerField()
    occurrence_max = pw.SmallIntegerField()
    detection_max = pw.SmallIntegerField()
    default_action_threshold = pw.IntegerField()
    default_severity_threshold = pw.SmallIntegerField()
    # The basis of the occurrence levels' rate bands (domain.rate_bands.RATE_BASES); null: no bands.
    occurrence_rate_basis = pw.CharField(max_length=32, null=True)
    version = pw.IntegerField(default=1)
    created_at = pw.DateTimeField(default=utcnow)
    updated_at = pw.DateTimeField(default=utcnow)

    def maximum(self, dimension):
        """Return the top value of the named dimension's scale."""
        return getattr(self, f"{dimension}_max")

    @property
    def max_rpn(self):
        """The largest RPN this scale set allows."""
        return self.severity_max * self.occurrence_max * self.detection_max

    @classmethod
    def in_use_ids(cls, ids):
        """Return the subset of scale set ids that at least one study uses."""
        query = Study.select(Study.scale_set).where(Study.scale_set.in_(list(ids))).distinct()
        return {row.scale_set_id for row in query}


class ScaleLevel(BaseModel):
    """One level of one dimension of a scale set, with its label and criteria."""

    scale_set = pw.ForeignKeyField(ScaleSet, backref="levels", on_delete="CASCADE")
    dimension = pw.CharField(max_length=16)
    value = pw.SmallIntegerField()
    label = pw.CharField(max_length=200)
    criteria = pw.TextField(default="")
    # Occurrence levels of a banded scale: the failure rate (in the set's basis) at which the level starts.
    rate_from = pw.DoubleField(null=True)

    class Meta:
        indexes = ((("scale_set", "dimension", "value"), True),)


class IdempotencyRecord(BaseModel):
    """The stored outcome of a POST sent with an Idempotency-Key, per token, kept for a while."""

    token_id = pw.IntegerField()
    key = pw.CharField(max_length=255)
    # SHA-256 of method, path and body: the same key with another request is refused.
    fingerprint = pw.CharField(max_length=64)
    state = pw.CharField(max_length=16)
    response_status = pw.IntegerField(null=True)
    response_headers = pw.TextField(default="{}")
    response_body = pw.TextField(default="")
    created_at = pw.DateTimeField(default=utcnow)
    expires_at = pw.DateTimeField(index=True)

    class Meta:
        table_name = "idempotency_record"
        indexes = ((("token_id", "key"), True),)


class ApiToken(BaseModel):
    """An API token; only the SHA-256 of its secret is kept."""

    name = pw.CharField(max_length=200)
    role = pw.CharField(max_length=16)
    secret_hash = pw.CharField(max_length=64, unique=True)
    created_at = pw.DateTimeField(default=utcnow)
    last_used_at = pw.DateTimeField(null=True)
    revoked_at = pw.DateTimeField(null=True)


class Study(BaseModel):
    """One FMEA: its scope, owner, scale set, time zone and risk policy."""

    title = pw.CharField(max_length=300)
    kind = pw.CharField(max_length=16)
    scope = pw.TextField(default="")
    site = pw.CharField(max_length=200, default="")
    product_line = pw.CharField(max_length=200, default="")
    owner_name = pw.CharField(max_length=200)
    owner_email = pw.CharField(max_length=320, index=True)
    scale_set = pw.ForeignKeyField(ScaleSet, backref="studies", on_delete="RESTRICT")
    timezone = pw.CharField(max_length=64)
    status = pw.CharField(max_length=16, index=True)
    action_threshold = pw.IntegerField()
    severity_threshold = pw.SmallIntegerField()
    # Running total of current RPN over active modes, moved by every risk event.
    total_rpn = pw.IntegerField(default=0)
    external_system = pw.CharField(max_length=100, null=True)
    external_key = pw.CharField(max_length=200, null=True)
    # Count of risk events so far; a study's ETag changes with it.
    risk_revision = pw.IntegerField(default=0)
    # Count of write transactions that locked the study: anything in it (a mode's text, an action's
    # target) may have changed since a view was built at another count.
    content_revision = pw.IntegerField(default=0)
    # Quantitative criticality (MIL-STD-1629A Task 102): off unless switched on, with the study's own
    # map from severity ratings to classes I..IV as JSON ({"I": [9, 10], ...}).
    criticality_enabled = pw.BooleanField(default=False)
    severity_classes = pw.TextField(null=True)
    # How observed failures are judged: the window in days, the confidence of the upper bound, which
    # estimate (upper_bound or observed) picks the level, and the study's own rate bands as JSON
    # ({"rate_basis": ..., "levels": [{"value", "rate_from"}]}; null: the scale set's).
    observation_window_days = pw.IntegerField(default=365)
    observation_confidence = pw.DoubleField(default=0.9)
    observation_estimate = pw.CharField(max_length=16, default="upper_bound")
    occurrence_bands = pw.TextField(null=True)
    version = pw.IntegerField(default=1)
    created_at = pw.DateTimeField(default=utcnow)
    updated_at = pw.DateTimeField(default=utcnow)

    class Meta:
        indexes = ((("external_system", "external_key"), True),)


class StudyTag(BaseModel):
    """A free-form tag on a study (product family, customer programme, audit...)."""

    study = pw.ForeignKeyField(Study, backref="tag_rows", on_delete="CASCADE")
    tag = pw.CharField(max_length=100, index=True)

    class Meta:
        indexes = ((("study", "tag"), True),)


class FailureMode(BaseModel):
    """One analysis row: item, function, failure mode, effect, cause, controls and ratings."""

    study = pw.ForeignKeyField(Study, backref="modes", on_delete="RESTRICT")
    item = pw.TextField(default="")
    function = pw.TextField(default="")
    failure_mode = pw.TextField()
    effect = pw.TextField(default="")
    cause = pw.TextField(default="")
    prevention_controls = pw.TextField(default="")
    detection_controls = pw.TextField(default="")
    severity = pw.SmallIntegerField()
    occurrence = pw.SmallIntegerField()
    detection = pw.SmallIntegerField()
    # Stored so that ranking, totals and the maximum are index work; always S x O x D.
    rpn = pw.IntegerField()
    initial_severity = pw.SmallIntegerField()
    initial_occurrence = pw.SmallIntegerField()
    initial_detection = pw.SmallIntegerField()
    # Task 102 inputs: the item's part failure rate (per hour or per cycle, as the unit's basis says; the
    # unit is the one it was entered in), the failure mode ratio alpha, the effect probability beta and
    # the operating time.
    failure_rate = pw.DoubleField(null=True)
    failure_rate_unit = pw.CharField(max_length=32, null=True)
    mode_ratio = pw.DoubleField(null=True)
    effect_probability = pw.DoubleField(null=True)
    operating_time = pw.DoubleField(null=True)
    operating_time_unit = pw.CharField(max_length=16, null=True)
    status = pw.CharField(max_length=16, default="active")
    external_system = pw.CharField(max_length=100, null=True)
    external_key = pw.CharField(max_length=200, null=True)
    version = pw.IntegerField(default=1)
    created_at = pw.DateTimeField(default=utcnow)
    updated_at = pw.DateTimeField(default=utcnow)
    retired_at = pw.DateTimeField(null=True)
    # Since when observed data has pointed above the occurrence a closed action claimed (null: not now).
    occurrence_drift_since = pw.DateTimeField(null=True)

    class Meta:
        indexes = (
            (("study", "status", "rpn"), False),
            (("external_system", "external_key"), True),
        )

    @classmethod
    def needs_action_expr(cls, action_threshold, severity_threshold):
        """SQL test of domain.scoring.needs_action_reasons; thresholds are numbers or Study columns."""
        return (cls.rpn >= action_threshold) | (cls.severity >= severity_threshold)

    @classmethod
    def priority_expr(cls, band, action_threshold, severity_threshold):
        """SQL test of domain.scoring.priority_band for one band."""
        needs = cls.needs_action_expr(action_threshold, severity_threshold)
        if band == "high":
            return needs
        half_or_more = 2 * cls.rpn >= action_threshold
        return ~needs & (half_or_more if band == "medium" else ~half_or_more)


class CorrectiveAction(BaseModel):
    """What the team decided to do about a failure mode: owner, due date, target and outcome."""

    mode = pw.ForeignKeyField(FailureMode, backref="actions", on_delete="RESTRICT")
    study = pw.ForeignKeyField(Study, backref="actions", on_delete="RESTRICT")
    title = pw.CharField(max_length=300)
    description = pw.TextField(default="")
    kind = pw.CharField(max_length=16)
    owner_name = pw.CharField(max_length=200)
    owner_email = pw.CharField(max_length=320, index=True)
    due_date = pw.DateField()
    original_due_date = pw.DateField()
    due_date_changes = pw.IntegerField(default=0)
    status = pw.CharField(max_length=16, default="open")
    target_severity = pw.SmallIntegerField(null=True)
    target_occurrence = pw.SmallIntegerField(null=True)
    target_detection = pw.SmallIntegerField(null=True)
    external_system = pw.CharField(max_length=100, null=True)
    external_key = pw.CharField(max_length=200, null=True)
    result_severity = pw.SmallIntegerField(null=True)
    result_occurrence = pw.SmallIntegerField(null=True)
    result_detection = pw.SmallIntegerField(null=True)
    # A verified new part failure rate (stored per hour or per cycle) or failure mode ratio.
    result_failure_rate = pw.DoubleField(null=True)
    result_failure_rate_unit = pw.CharField(max_length=32, null=True)
    result_mode_ratio = pw.DoubleField(null=True)
    evidence = pw.TextField(default="")
    verified_by = pw.CharField(max_length=200, default="")
    closed_at = pw.DateTimeField(null=True)
    cancelled_at = pw.DateTimeField(null=True)
    version = pw.IntegerField(default=1)
    created_at = pw.DateTimeField(default=utcnow)
    updated_at = pw.DateTimeField(default=utcnow)

    class Meta:
        table_name = "corrective_action"
        indexes = (
            (("study", "status", "due_date"), False),
            # The reminder run looks across studies for unfinished actions due soon.
            (("status", "due_date"), False),
            (("mode", "status"), False),
            (("external_system", "external_key"), True),
        )

    @classmethod
    def unfinished(cls):
        """Actions still to be done: open or in progress."""
        return cls.status.in_(("open", "in_progress"))


class RiskEvent(BaseModel):
    """An appended record of a change to a study's risk, with the study's totals after it."""

    study = pw.ForeignKeyField(Study, backref="events", on_delete="RESTRICT")
    mode = pw.ForeignKeyField(FailureMode, backref="events", null=True, on_delete="RESTRICT")
    action = pw.ForeignKeyField(CorrectiveAction, backref="events", null=True, on_delete="RESTRICT")
    kind = pw.CharField(max_length=32)
    occurred_at = pw.DateTimeField()
    recorded_at = pw.DateTimeField(default=utcnow)
    actor = pw.CharField(max_length=200)
    source = pw.CharField(max_length=32)
    reason = pw.TextField(default="")
    before_severity = pw.SmallIntegerField(null=True)
    before_occurrence = pw.SmallIntegerField(null=True)
    before_detection = pw.SmallIntegerField(null=True)
    before_rpn = pw.IntegerField(null=True)
    after_severity = pw.SmallIntegerField(null=True)
    after_occurrence = pw.SmallIntegerField(null=True)
    after_detection = pw.SmallIntegerField(null=True)
    after_rpn = pw.IntegerField(null=True)
    # The mode's criticality inputs and Cm before and after, as JSON (null where it has none).
    before_criticality = pw.TextField(null=True)
    after_criticality = pw.TextField(null=True)
    study_total_rpn = pw.IntegerField()
    study_max_rpn = pw.IntegerField()
    study_needs_action_count = pw.IntegerField()
    study_revision = pw.IntegerField()
    study_open_actions = pw.IntegerField(default=0)
    # The action's due date after the event (action events only), for overdue counts in history.
    action_due_date = pw.DateField(null=True)
    # True when a closure's verified ratings are worse than before (the fix revealed more).
    rating_raised = pw.BooleanField(default=False)
    # The observations a re-rating rests on, as a JSON list of ids (null for other changes).
    observation_ids = pw.TextField(null=True)
    # Running sums of RPN change by cause since the study began; their sum is study_total_rpn.
    change_new_modes = pw.IntegerField(default=0)
    change_rerating = pw.IntegerField(default=0)
    change_actions = pw.IntegerField(default=0)
    change_retirements = pw.IntegerField(default=0)

    class Meta:
        indexes = (
            (("study", "occurred_at"), False),
            (("study", "study_revision"), True),
        )


class Observation(BaseModel):
    """Failures of one mode counted by a maintenance or quality system over an exposure and a period."""

    mode = pw.ForeignKeyField(FailureMode, backref="observations", on_delete="RESTRICT")
    study = pw.ForeignKeyField(Study, backref="observations", on_delete="RESTRICT")
    failures = pw.IntegerField()
    exposure = pw.DoubleField()
    # units (produced) or hours (run)
    exposure_unit = pw.CharField(max_length=16)
    period_start = pw.DateField()
    period_end = pw.DateField()
    source_system = pw.CharField(max_length=100)
    record_key = pw.CharField(max_length=200)
    note = pw.TextField(default="")
    recorded_by = pw.CharField(max_length=200)
    recorded_at = pw.DateTimeField(default=utcnow)

    class Meta:
        indexes = (
            (("source_system", "record_key"), True),
            (("mode", "period_end"), False),
        )


class DriftNotice(BaseModel):
    """A note for an action owner's next digest: observed data no longer bears out their closed action."""

    mode = pw.ForeignKeyField(FailureMode, backref="drift_notices", on_delete="CASCADE")
    action = pw.ForeignKeyField(CorrectiveAction, backref="drift_notices", on_delete="CASCADE")
    recipient = pw.CharField(max_length=320)
    name = pw.CharField(max_length=200)
    # The digest line as JSON, fixed when raised.
    payload = pw.TextField()
    raised_at = pw.DateTimeField(default=utcnow)
    # The digest that carried it; null until an owner's digest is recorded.
    digest_key = pw.CharField(max_length=400, null=True)

    class Meta:
        table_name = "drift_notice"
        indexes = ((("digest_key", "recipient"), False),)


class Reminder(BaseModel):
    """One e-mail of the reminder outbox: a recipient's digest for one local day, sent at least once."""

    dedup_key = pw.CharField(max_length=400, unique=True)
    recipient = pw.CharField(max_length=320, index=True)
    local_day = pw.DateField(index=True)
    status = pw.CharField(max_length=16, default="pending")
    attempts = pw.IntegerField(default=0)
    last_error = pw.TextField(default="")
    next_attempt_at = pw.DateTimeField()
    sent_at = pw.DateTimeField(null=True)
    # The digest as JSON, fixed when recorded, so that every retry sends the same message.
    payload = pw.TextField()
    created_at = pw.DateTimeField(default=utcnow)

    class Meta:
        indexes = (
            (("status", "next_attempt_at"), False),
            (("status", "id"), False),
        )


class OwnerPreference(BaseModel):
    """What an owner (by lower-case e-mail address) wants to be sent; no row means every notice."""

    email = pw.CharField(max_length=320, unique=True)
    due_soon_notices = pw.BooleanField(default=True)
    version = pw.IntegerField(default=1)
    updated_at = pw.DateTimeField(default=utcnow)


class WebhookSubscription(BaseModel):
    """Where an admin wants which webhook event types sent, and the secret that signs them."""

    url = pw.TextField()
    # Comma-separated event types, in the order of domain.webhooks.EVENT_TYPES.
    events = pw.TextField()
    description = pw.TextField(default="")
    # Kept in full because every delivery is signed with it; shown to the admin only once.
    secret = pw.CharField(max_length=200)
    active = pw.BooleanField(default=True)
    disabled_reason = pw.TextField(default="")
    version = pw.IntegerField(default=1)
    created_at = pw.DateTimeField(default=utcnow)
    updated_at = pw.DateTimeField(default=utcnow)

    @property
    def event_types(self):
        """The event types the subscription takes, as a list."""
        return self.events.split(",")


class WebhookDelivery(BaseModel):
    """One event for one subscription in the webhook outbox: the body fixed when queued, its stable webhook-id."""

    subscription = pw.ForeignKeyField(WebhookSubscription, backref="deliveries", on_delete="CASCADE")
    message_id = pw.CharField(max_length=64)
    event_type = pw.CharField(max_length=32)
    body = pw.TextField()
    status = pw.CharField(max_length=16, default="pending")
    # Attempts since the message was queued (or queued again); the attempt log keeps every one.
    attempts = pw.IntegerField(default=0)
    next_attempt_at = pw.DateTimeField(null=True)
    last_status_code = pw.IntegerField(null=True)
    last_error = pw.TextField(default="")
    delivered_at = pw.DateTimeField(null=True)
    created_at = pw.DateTimeField(default=utcnow)

    class Meta:
        indexes = (
            (("subscription", "message_id"), True),
            (("status", "next_attempt_at"), False),
        )


class WebhookAttempt(BaseModel):
    """One HTTP attempt at a delivery: the receiver's status or the error, and how long it took."""

    delivery = pw.ForeignKeyField(WebhookDelivery, backref="attempt_log", on_delete="CASCADE")
    attempted_at = pw.DateTimeField()
    status_code = pw.IntegerField(null=True)
    error = pw.TextField(default="")
    response_excerpt = pw.TextField(default="")
    duration_ms = pw.IntegerField()


class SchedulerRun(BaseModel):
    """The last run of one scheduled job (one row per job name), read by /metrics."""

    job = pw.CharField(max_length=100, unique=True)
    started_at = pw.DateTimeField()
    finished_at = pw.DateTimeField()
    # ok or failed; error is a one-line summary of a failure, empty after a good run.
    outcome = pw.CharField(max_length=16)
    error = pw.TextField(default="")


ALL_MODELS = [
    ScaleSet,
    ScaleLevel,
    IdempotencyRecord,
    ApiToken,
    Study,
    StudyTag,
    FailureMode,
    CorrectiveAction,
    RiskEvent,
    Observation,
    DriftNotice,
    Reminder,
    OwnerPreference,
    WebhookSubscription,
    WebhookDelivery,
    WebhookAttempt,
    SchedulerRun,
]
