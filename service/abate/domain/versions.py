"""Entity tags and optimistic concurrency: a write names the representation it was based on."""

from abate.db import binding_number
from abate.domain.clock import local_today, utcnow
from abate.errors import PreconditionFailed, PreconditionRequired


def scale_set_tag(scale_set):
    """A scale set's representation changes only with its own version."""
    return str(scale_set.version)


def study_tag(study):
    """A study's representation changes with its own version and with every risk event."""
    return f"{study.version}.{study.risk_revision}"


def content_key(study):
    """What names one state of everything a study holds: its fields, modes and actions.

    Every write to them, its own version and risk revision included, locks the study and so moves its
    content revision (events.lock_study); the binding and the creation instant tell apart studies of
    one id in different databases.
    """
    return binding_number(), study.id, study.created_at, study.content_revision


def mode_tag(mode, study):
    """A mode's scores depend on its study's policy, so the study's version is part of its tag."""
    return f"{mode.version}.{study.version}"


def action_tag(action, study):
    """Whether an action is overdue changes with the date in its study's time zone."""
    return f"{action.version}.{local_today(study.timezone).toordinal()}"


def save_new_version(row, at=None):
    """Save a changed row as its next version, stamped at (default now)."""
    row.version += 1
    row.updated_at = at or utcnow()
    row.save()


# Passed as expected_tags when a request had to carry If-Match and did not.
IF_MATCH_MISSING = frozenset({"<missing>"})


def check_precondition(current_tag, expected_tags):
    """Raise PreconditionFailed unless expected_tags is None (no condition) or holds current_tag.

    The comparison is of whole strong tags (RFC 9110 section 13.1.1); IF_MATCH_MISSING raises
    PreconditionRequired once the resource is known to exist.
    """
    if expected_tags is IF_MATCH_MISSING:
        raise PreconditionRequired("send If-Match with the ETag of the resource as you read it, so no update is lost")
    if expected_tags is not None and current_tag not in expected_tags:
        raise PreconditionFailed("the resource has changed since the ETag your If-Match names; read it again and retry")
