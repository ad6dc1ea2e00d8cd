"""Optimistic concurrency: the version a client read must still be current when it writes."""

from abate.errors import PreconditionFailed


def check_version(current, expected_versions):
    """Raise PreconditionFailed unless expected_versions is None (no condition) or holds current."""
    if expected_versions is not None and current not in expected_versions:
        raise PreconditionFailed(
            f"the resource is at version {current}, not the one your If-Match names; read it again and retry"
        )
