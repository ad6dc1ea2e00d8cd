"""The Abate client: one requests.Session, a timeout on every call, a resource group per collection."""

import datetime
import email.utils
import time
import uuid
from urllib.parse import quote, urlsplit, urlunsplit

import requests

from abate_client.errors import AbateError, TransportError, error_for
from abate_client.models import (
    Action,
    Delivery,
    Mode,
    Observation,
    OccurrenceEvidence,
    PortfolioHistory,
    Reminder,
    ReminderRun,
    RiskEvent,
    ScaleSet,
    Study,
    StudyHistory,
    Webhook,
)

DEFAULT_TIMEOUT = 10.0
DEFAULT_RETRIES = 3
RETRY_STATUSES = frozenset({429, 503})
# The first wait when the server gives no Retry-After; it doubles with each retry.
BACKOFF_SECONDS = 0.25
# A Retry-After longer than this is cut short, so that no call hangs for minutes.
MAX_RETRY_WAIT = 30.0


class Client:
    """A connection to one Abate server; use it as a context manager or call close()."""

    def __init__(self, base_url, token=None, timeout=DEFAULT_TIMEOUT, session=None, retries=DEFAULT_RETRIES):
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self.retries = retries
        self._token = token
        self._session = session if session is not None else requests.Session()
        self._owns_session = session is None
        self.scales = ScaleSets(self)
        self.studies = Studies(self)
        self.modes = Modes(self)
        self.events = Events(self)
        self.actions = Actions(self)
        self.observations = Observations(self)
        self.history = History(self)
        self.reminders = Reminders(self)
        self.webhooks = Webhooks(self)

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()

    def close(self):
        """Close the session, unless the caller passed in one of its own."""
        if self._owns_session:
            self._session.close()

    def request(self, method, path, *, params=None, json=None, if_match=None, idempotency_key=None):
        """Send one request to a path under base_url (or a full URL, re-rooted there); return the response.

        A POST carries an Idempotency-Key (a new uuid4 unless given), the same on each retry, so the
        server applies it once. Connection errors (except on PATCH, which If-Match guards instead),
        429 and 503 are retried up to `retries` times, after what Retry-After says or a doubling backoff.
        Error statuses raise their AbateError subclass and transport failures raise TransportError.
        """
        headers = {"Accept": "application/json, application/problem+json"}
        if self._token:
            headers["Authorization"] = f"Bearer {self._token}"
        if if_match:
            headers["If-Match"] = if_match
        if method == "POST":
            headers["Idempotency-Key"] = idempotency_key or str(uuid.uuid4())
        body = _encoded(json)
        for attempt in range(self.retries + 1):
            last = attempt == self.retries
            try:
                response = self._session.request(
                    method, self._url(path), params=params, json=body, headers=headers, timeout=self.timeout
                )
            except requests.ConnectionError as error:
                if last or method == "PATCH":
                    raise TransportError(f"{method} {path} failed: {error}") from error
                self.wait_before_retry(_backoff(attempt))
                continue
            except requests.RequestException as error:
                raise TransportError(f"{method} {path} failed: {error}") from error
            if response.status_code not in RETRY_STATUSES or last:
                break
            delay = _retry_after(response)
            self.wait_before_retry(_backoff(attempt) if delay is None else delay)
        if response.status_code >= 400:
            raise error_for(response)
        return response

    def wait_before_retry(self, seconds):
        """Pause before the next attempt; a subclass may override it, e.g. to log the wait or to record it."""
        time.sleep(seconds)

    def _url(self, path):
        """The URL of path, or of a full URL's path and query, on base_url's origin.

        A server behind a proxy may build its `next` links with its own scheme or host; keeping
        ours means the token never travels to another origin or over plain HTTP.
        """
        base = urlsplit(self.base_url)
        target = urlsplit(path)
        if target.scheme:
            return urlunsplit((base.scheme, base.netloc, target.path, target.query, ""))
        return self.base_url + path


def _backoff(attempt):
    """The wait before retry number attempt + 1 when the server names none."""
    return BACKOFF_SECONDS * 2**attempt


def _retry_after(response):
    """Retry-After as seconds from now (capped, at least 0), or None when absent or unreadable.

    RFC 9110, section 10.2.3: the value is either delay-seconds (digits) or an HTTP-date.
    """
    value = response.headers.get("Retry-After", "").strip()
    if value.isascii() and value.isdigit():
        seconds = float(value)
    else:
        try:
            moment = email.utils.parsedate_to_datetime(value)
        except (TypeError, ValueError):
            return None
        if moment.tzinfo is None:
            # "-0000" means UTC with no zone stated (RFC 5322, section 3.3); HTTP-dates are GMT anyway.
            moment = moment.replace(tzinfo=datetime.UTC)
        seconds = (moment - datetime.datetime.now(datetime.UTC)).total_seconds()
    return min(max(seconds, 0.0), MAX_RETRY_WAIT)


def _encoded(value):
    """value with dates and datetimes spelled as the API reads them (YYYY-MM-DD, RFC 3339 with Z for UTC)."""
    if isinstance(value, dict):
        return {key: _encoded(item) for key, item in value.items()}
    if isinstance(value, list | tuple):
        return [_encoded(item) for item in value]
    if isinstance(value, datetime.datetime):
        if value.tzinfo is None:
            raise ValueError(f"{value!r} has no time zone; give an aware datetime, e.g. with datetime.UTC")
        return value.astimezone(datetime.UTC).isoformat().replace("+00:00", "Z")
    if isinstance(value, datetime.date):
        return value.isoformat()
    return value


def _json(response):
    """The decoded body of a successful response; a body that is not JSON is an AbateError."""
    try:
        return response.json()
    except ValueError as error:
        raise AbateError(f"the server's answer to {response.url} is not JSON", response) from error


def _query(filters, page_size):
    """Query parameters from keyword filters: None left out, booleans spelled as JSON does."""
    params = {}
    for name, value in filters.items():
        if value is not None:
            params[name] = ("true" if value else "false") if isinstance(value, bool) else value
    if page_size is not None:
        params["limit"] = page_size
    return params


def _etag_of(resource):
    """The ETag to send as If-Match; a change without one would overwrite others' changes unseen."""
    if resource.etag is None:
        raise ValueError(
            f"{type(resource).__name__} {resource.id} came from a list and has no ETag; read it with get() first"
        )
    return resource.etag


class _Resources:
    """What every resource group does: read one object with its ETag, or iterate a list page by page."""

    def __init__(self, client):
        self._client = client

    def _one(self, model, method, path, **request):
        response = self._client.request(method, path, **request)
        return model.from_json(_json(response), etag=response.headers.get("ETag"))

    def _every(self, model, path, filters, page_size=None):
        """Yield the list's items, requesting each page only when the previous one is used up."""
        params = _query(filters, page_size)
        while path:
            page = _json(self._client.request("GET", path, params=params))
            for item in page["items"]:
                yield model.from_json(item)
            # The next link already carries the filters, the page size and the cursor.
            path, params = page["next"], None


class ScaleSets(_Resources):
    """/v1/scales: the company's rating scale sets."""

    def list(self):
        """Every scale set, oldest first."""
        return self._every(ScaleSet, "/v1/scales", {})

    def get(self, scale_id):
        """The scale set with this id."""
        return self._one(ScaleSet, "GET", f"/v1/scales/{int(scale_id)}")


class Studies(_Resources):
    """/v1/studies: FMEA studies with their risk summary."""

    def list(self, *, page_size=None, **filters):
        """Studies matching the filters (status, kind, tag, owner_email), oldest first, fetched lazily."""
        return self._every(Study, "/v1/studies", filters, page_size)

    def get(self, study_id):
        """The study with this id, its Pareto ranking included."""
        return self._one(Study, "GET", f"/v1/studies/{int(study_id)}")

    def create(self, **fields):
        """Create a study from the server's fields (title, kind, owner, scale_id, timezone, ...)."""
        return self._one(Study, "POST", "/v1/studies", json=fields)

    def update(self, study, **changes):
        """Change a study as read (If-Match its ETag); PreconditionFailed if it has moved on since."""
        return self._one(Study, "PATCH", f"/v1/studies/{study.id}", json=changes, if_match=_etag_of(study))


class Modes(_Resources):
    """Failure modes: a study's list, one mode, its changes and retirement."""

    def list(self, study_id, *, page_size=None, **filters):
        """A study's modes matching the filters (status, needs_action, priority, min_rpn), fetched lazily.

        `sort` is -rpn (Pareto order, the default), rpn or created_at.
        """
        return self._every(Mode, f"/v1/studies/{int(study_id)}/modes", filters, page_size)

    def get(self, mode_id):
        """The mode with this id."""
        return self._one(Mode, "GET", f"/v1/modes/{int(mode_id)}")

    def create(self, study_id, **fields):
        """Add a mode to a study (failure_mode, severity, occurrence, detection, ...)."""
        return self._one(Mode, "POST", f"/v1/studies/{int(study_id)}/modes", json=fields)

    def update(self, mode, reason=None, **changes):
        """Change a mode as read (If-Match its ETag); a change of ratings needs a reason."""
        body = changes if reason is None else {**changes, "reason": reason}
        return self._one(Mode, "PATCH", f"/v1/modes/{mode.id}", json=body, if_match=_etag_of(mode))

    def retire(self, mode, reason):
        """Retire a mode as read (If-Match its ETag): it leaves the study's risk but stays on record."""
        body = {"reason": reason}
        return self._one(Mode, "POST", f"/v1/modes/{mode.id}/retire", json=body, if_match=_etag_of(mode))


class Events(_Resources):
    """A study's risk events."""

    def list(self, study_id, *, page_size=None, **filters):
        """The study's risk events matching the filters (mode_id, kind), oldest first, fetched lazily."""
        return self._every(RiskEvent, f"/v1/studies/{int(study_id)}/events", filters, page_size)


class Actions(_Resources):
    """Corrective actions: opened on a mode, listed with filters, changed, closed, reopened or cancelled."""

    def create(self, mode_id, **fields):
        """Open an action on a mode (title, kind, owner {name, email}, due_date, target, ...)."""
        return self._one(Action, "POST", f"/v1/modes/{int(mode_id)}/actions", json=fields)

    def list(self, *, page_size=None, **filters):
        """Actions matching the filters (study_id, mode_id, status, owner_email, overdue, due_before, ...), lazily.

        `sort` is due_date (the default) or -due_date.
        """
        return self._every(Action, "/v1/actions", filters, page_size)

    def get(self, action_id):
        """The action with this id."""
        return self._one(Action, "GET", f"/v1/actions/{int(action_id)}")

    def update(self, action, reason=None, **changes):
        """Change an unfinished action as read (If-Match its ETag): owner, due_date, status, target, ..."""
        body = changes if reason is None else {**changes, "reason": reason}
        return self._one(Action, "PATCH", f"/v1/actions/{action.id}", json=body, if_match=_etag_of(action))

    def close(self, action, evidence, result=None, **fields):
        """Close an action as read with its evidence and verified result ratings; the mode is re-rated with it.

        fields may carry verified_by and (admin tokens) effective_at.
        """
        body = {"evidence": evidence, "result": result or {}, **fields}
        return self._one(Action, "POST", f"/v1/actions/{action.id}/close", json=body, if_match=_etag_of(action))

    def reopen(self, action, reason):
        """Reopen a closed action as read: the ratings its closure changed go back."""
        return self._finish(action, "reopen", reason)

    def cancel(self, action, reason):
        """Cancel an unfinished action as read; the mode's ratings stay."""
        return self._finish(action, "cancel", reason)

    def get_by_ref(self, system, key):
        """The action carrying this reference in another system (e.g. a ticket's key)."""
        return self._one(Action, "GET", _by_ref(system, key))

    def put_by_ref(self, system, key, *, current=None, **fields):
        """Create the action with this reference, or change it; creating needs mode_id, title, kind, owner, due_date.

        current, the action as last read, sends its ETag as If-Match, so that a change made since is
        PreconditionFailed instead of overwritten.
        """
        if_match = None if current is None else _etag_of(current)
        return self._one(Action, "PUT", _by_ref(system, key), json=fields, if_match=if_match)

    def close_by_ref(self, system, key, evidence, result=None, *, current=None, **fields):
        """Close the action carrying this reference with its evidence and verified result ratings.

        The action's state guards the closure (Conflict when it is already finished); current, the
        action as last read, adds If-Match as in put_by_ref.
        """
        body = {"evidence": evidence, "result": result or {}, **fields}
        if_match = None if current is None else _etag_of(current)
        return self._one(Action, "POST", _by_ref(system, key) + "/close", json=body, if_match=if_match)

    def _finish(self, action, verb, reason):
        body = {"reason": reason}
        return self._one(Action, "POST", f"/v1/actions/{action.id}/{verb}", json=body, if_match=_etag_of(action))


def _by_ref(system, key):
    """The path of the action carrying system/key, each one path segment whatever characters it holds."""
    return f"/v1/actions/by-ref/{_segment(system)}/{_segment(key)}"


def _segment(text):
    """text as one percent-encoded path segment; "." and ".." too, which URL normalising would remove."""
    quoted = quote(text, safe="")
    return quoted.replace(".", "%2E") if quoted in (".", "..") else quoted


class Observations(_Resources):
    """Observed failures of modes from maintenance and quality systems, and the occurrence they imply."""

    def record(self, mode_id, **observation):
        """Record failures of a mode: failures, exposure, period_start, period_end, source_system, record_key
        (exposure_unit, note optional); a resend of the same source record returns the stored one."""
        path = f"/v1/modes/{int(mode_id)}/observations"
        return self._one(Observation, "POST", path, json=_encoded(observation))

    def record_by_ref(self, system, key, **observation):
        """Record failures of the mode carrying the external reference system/key (fields as record takes)."""
        path = f"/v1/modes/by-ref/{_segment(system)}/{_segment(key)}/observations"
        return self._one(Observation, "POST", path, json=_encoded(observation))

    def list(self, mode_id, *, page_size=None):
        """A mode's observations, oldest period first, fetched lazily."""
        return self._every(Observation, f"/v1/modes/{int(mode_id)}/observations", {}, page_size)

    def evidence(self, mode_id):
        """The observed rate, its upper bound, the implied occurrence and any suggestion for one mode."""
        response = self._client.request("GET", f"/v1/modes/{int(mode_id)}/occurrence-evidence")
        return OccurrenceEvidence.from_json(_json(response))

    def study_evidence(self, study_id, *, status=None):
        """The evidence of every observed active mode of a study, suggestions and drift first."""
        params = _query({"status": status}, None)
        response = self._client.request("GET", f"/v1/studies/{int(study_id)}/occurrence-evidence", params=params)
        return [OccurrenceEvidence.from_json(item) for item in _json(response)["items"]]

    def accept(self, mode_id, occurrence, reason=""):
        """Re-rate the mode's occurrence to the suggested level; Conflict if the data now says otherwise."""
        body = {"occurrence": occurrence, "reason": reason}
        return self._one(Mode, "POST", f"/v1/modes/{int(mode_id)}/occurrence-suggestion/accept", json=body)


class History(_Resources):
    """How risk moved over time: one study's burn-down, or the portfolio's."""

    def study(self, study_id, *, interval=None, from_=None, to=None, modes=None):
        """The study's history: interval day, week (default) or month; from_/to dates; modes "all" or ids."""
        if isinstance(modes, list | tuple):
            modes = ",".join(str(int(mode_id)) for mode_id in modes)
        params = _query({"interval": interval, "from": from_, "to": to, "modes": modes}, None)
        response = self._client.request("GET", f"/v1/studies/{int(study_id)}/history", params=params)
        return StudyHistory.from_json(_json(response))

    def portfolio(self, *, interval=None, from_=None, to=None, **filters):
        """Totals summed over the studies matching the filters (tag, site, kind, status, owner_email, timezone)."""
        params = _query({"interval": interval, "from": from_, "to": to, **filters}, None)
        return PortfolioHistory.from_json(_json(self._client.request("GET", "/v1/history", params=params)))


class Reminders(_Resources):
    """/v1/reminders: the reminder e-mail outbox and running the reminder job now (admin)."""

    def list(self, *, status=None, page_size=None):
        """Outbox rows, oldest first; status is pending, sent or failed."""
        return self._every(Reminder, "/v1/reminders", {"status": status}, page_size)

    def run(self, *, dry_run=False):
        """Run the reminder job now; with dry_run, report what it would record and send and change nothing."""
        response = self._client.request("POST", "/v1/reminders/run", params=_query({"dry_run": dry_run}, None))
        return ReminderRun.from_json(_json(response))


class Webhooks(_Resources):
    """/v1/webhooks: subscriptions to signed event notifications and their deliveries (admin)."""

    def create(self, url, events, **fields):
        """Subscribe url to event types; the result's `secret` (whsec_...) is shown this once."""
        return self._one(Webhook, "POST", "/v1/webhooks", json={"url": url, "events": list(events), **fields})

    def list(self, *, page_size=None):
        """Every subscription, oldest first, without secrets."""
        return self._every(Webhook, "/v1/webhooks", {}, page_size)

    def get(self, subscription_id):
        """The subscription with this id."""
        return self._one(Webhook, "GET", f"/v1/webhooks/{int(subscription_id)}")

    def update(self, subscription, **changes):
        """Change events, description or active of a subscription as read (If-Match its ETag)."""
        path = f"/v1/webhooks/{subscription.id}"
        return self._one(Webhook, "PATCH", path, json=changes, if_match=_etag_of(subscription))

    def deliveries(self, subscription_id, *, status=None, page_size=None):
        """A subscription's deliveries, newest first, each with its attempts; status filters them."""
        path = f"/v1/webhooks/{int(subscription_id)}/deliveries"
        return self._every(Delivery, path, {"status": status}, page_size)

    def redeliver(self, delivery_id):
        """Queue a delivered, failed or disabled delivery again, with the same webhook-id and payload."""
        response = self._client.request("POST", f"/v1/webhooks/deliveries/{int(delivery_id)}/redeliver")
        return Delivery.from_json(_json(response))
