"""Thin Python client for the Abate FMEA service: Client, its models and its exceptions."""

from abate_client.client import Client
from abate_client.errors import (
    AbateError,
    Conflict,
    Forbidden,
    NotFound,
    PreconditionFailed,
    TransportError,
    Unauthorized,
    ValidationFailed,
)
from abate_client.models import Mode, Ratings, RiskEvent, RiskSummary, ScaleSet, Study

__all__ = [
    "AbateError",
    "Client",
    "Conflict",
    "Forbidden",
    "Mode",
    "NotFound",
    "PreconditionFailed",
    "Ratings",
    "RiskEvent",
    "RiskSummary",
    "ScaleSet",
    "Study",
    "TransportError",
    "Unauthorized",
    "ValidationFailed",
]
