"""The client's exceptions: one tree rooted at AbateError, keeping the response and its problem details."""


class AbateError(Exception):
    """Base of every error the client raises; keeps the response and its RFC 9457 problem details."""

    def __init__(self, message=None, response=None):
        self.response = response
        self.status = response.status_code if response is not None else None
        self.problem = _problem_of(response)
        self.title = self.problem.get("title") or (response.reason if response is not None else None)
        self.detail = self.problem.get("detail")
        if message is None:
            message = f"{self.status} {self.title}" + (f": {self.detail}" if self.detail else "")
        super().__init__(message)


class Unauthorized(AbateError):
    """401: the request carries no valid token."""


class Forbidden(AbateError):
    """403: the token's role does not allow this request."""


class NotFound(AbateError):
    """404: the resource does not exist."""


class Conflict(AbateError):
    """409: the request conflicts with the resource's current state."""


class PreconditionFailed(AbateError):
    """412: the object was read at a version that is no longer current; nothing changed."""


class ValidationFailed(AbateError):
    """422: the request breaks a rule; `errors` lists each field's problem."""

    @property
    def errors(self):
        """The per-field problems: [{"location", "field", "message"}]."""
        return self.problem.get("errors", [])


class TransportError(AbateError):
    """The server could not be reached or did not answer in time; the requests error is the cause."""


ERRORS_BY_STATUS = {
    401: Unauthorized,
    403: Forbidden,
    404: NotFound,
    409: Conflict,
    412: PreconditionFailed,
    422: ValidationFailed,
}


def error_for(response):
    """The exception for an error response: its status's class, else AbateError."""
    return ERRORS_BY_STATUS.get(response.status_code, AbateError)(response=response)


def _problem_of(response):
    """The problem-details document of response, or {} when it carries none."""
    if response is None or "json" not in response.headers.get("Content-Type", ""):
        return {}
    try:
        body = response.json()
    except ValueError:
        return {}
    return body if isinstance(body, dict) else {}
