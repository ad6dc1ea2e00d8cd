"""Domain exceptions and their one mapping to RFC 9457 problem details."""

from http import HTTPStatus

PROBLEM_MEDIA_TYPE = "application/problem+json"


class AbateError(Exception):
    """Base of every error the domain raises on purpose; carries its HTTP status and problem type."""

    status = 400
    slug = "bad-request"
    headers = {}

    def __init__(self, detail, errors=None, **extra):
        super().__init__(detail)
        self.detail = detail
        self.errors = errors
        self.extra = extra

    @property
    def title(self):
        """A short human-readable summary of the problem type (RFC 9457 section 3.1.3)."""
        return self.slug.replace("-", " ").capitalize()

    def problem(self, instance=None):
        """Return the problem-details document for this error."""
        body = problem_document(self.status, self.detail, instance, slug=self.slug, title=self.title)
        if self.errors:
            body["errors"] = self.errors
        body.update(self.extra)
        return body


class NotFound(AbateError):
    """The named resource does not exist."""

    status = 404
    slug = "not-found"


class Conflict(AbateError):
    """The request conflicts with the resource's current state."""

    status = 409
    slug = "conflict"


class InvalidTransition(Conflict):
    """A status change that the resource's life cycle does not allow."""

    slug = "invalid-transition"


class ScaleInUse(Conflict):
    """A scale set that studies use cannot change; a new version must be made."""

    slug = "scale-in-use"


class PreconditionFailed(AbateError):
    """If-Match named a version that is no longer current."""

    status = 412
    slug = "precondition-failed"


class PreconditionRequired(AbateError):
    """A change that must name the version it is based on came without If-Match (RFC 6585 section 3)."""

    status = 428
    slug = "precondition-required"


class ValidationFailed(AbateError):
    """The request is well-formed but its content breaks a rule; errors lists each field."""

    status = 422
    slug = "validation-failed"


class RatingOutOfScale(ValidationFailed):
    """A rating lies outside the study's scale."""

    slug = "rating-out-of-scale"


def field_error(field, message, location="json"):
    """One entry of a problem's `errors` list."""
    return {"location": location, "field": field, "message": message}


# RFC 9110 renamed these; Python's HTTPStatus still carries the older phrases on 3.11.
_RFC_9110_PHRASES = {413: "Content Too Large", 422: "Unprocessable Content"}


def problem_document(status, detail=None, instance=None, slug=None, title=None):
    """Build an RFC 9457 body; plain HTTP statuses use type about:blank and their phrase as title."""
    phrase = _RFC_9110_PHRASES.get(status) or HTTPStatus(status).phrase
    body = {
        "type": f"urn:abate:problem:{slug}" if slug else "about:blank",
        "title": title if slug else phrase,
        "status": status,
    }
    if detail:
        body["detail"] = detail
    if instance:
        body["instance"] = instance
    return body
