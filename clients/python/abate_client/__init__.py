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
from abate_client.models import (
    Action,
    HistoryPoint,
    Mode,
    PortfolioHistory,
    Ratings,
    RiskEvent,
    RiskSummary,
    ScaleSet,
    Study,
    StudyHistory,
)
from abate_client.webhooks import WebhookSignatureError, verify_signature

__all__ = [
    "AbateError",
    "Action",
    "Client",
    "Conflict",
    "Forbidden",
    "HistoryPoint",
    "Mode",
    "NotFound",
    "PortfolioHistory",
    "PreconditionFailed",
    "Ratings",
    "RiskEvent",
    "RiskSummary",
    "ScaleSet",
    "Study",
    "StudyHistory",
    "TransportError",
    "Unauthorized",
    "ValidationFailed",
    "WebhookSignatureError",
    "verify_signature",
]
