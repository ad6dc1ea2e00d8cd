"""The Abate client: one requests.Session, a timeout on every call, a resource group per collection."""

from urllib.parse import urlsplit, urlunsplit

import requests

from abate_client.errors import AbateError, TransportError, error_for
from abate_client.models import Mode, RiskEvent, ScaleSet, Study

DEFAULT_TIMEOUT = 10.0


class Client:
    """A connection to one Abate server; use it as a context manager or call close()."""

    def __init__(self, base_url, token=None, timeout=DEFAULT_TIMEOUT, session=None):
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self._token = token
        self._session = session if session is not None else requests.Session()
        self._owns_session = session is None
        self.scales = ScaleSets(self)
        self.studies = Studies(self)
        self.modes = Modes(self)
        self.events = Events(self)

    def __enter__(self):
        return self

    def __exit__(self, *exc_info):
        self.close()

    def close(self):
        """Close the session, unless the caller passed in one of its own."""
        if self._owns_session:
            self._session.close()

    def request(self, method, path, *, params=None, json=None, if_match=None):
        """Send one request to a path under base_url (or a full URL, re-rooted there); return the response.

        Error statuses raise their AbateError subclass and transport failures raise TransportError.
        """
        headers = {"Accept": "application/json, application/problem+json"}
        if self._token:
            headers["Authorization"] = f"Bearer {self._token}"
        if if_match:
            headers["If-Match"] = if_match
        try:
            response = self._session.request(
                method, self._url(path), params=params, json=json, headers=headers, timeout=self.timeout
            )
        except requests.RequestException as error:
            raise TransportError(f"{method} {path} failed: {error}") from error
        if response.status_code >= 400:
            raise error_for(response)
        return response

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
