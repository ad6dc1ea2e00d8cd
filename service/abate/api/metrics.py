"""GET /metrics: this process's figures for Prometheus; unauthenticated like the probes, for the internal network."""

from flask import Response, current_app
from flask_smorest import Blueprint

from abate.metrics import CONTENT_TYPE, EXTENSION

blp = Blueprint("metrics", __name__, description="Metrics for Prometheus: counts and timings, no content")


@blp.route("/metrics")
@blp.response(
    200,
    {"type": "string"},
    content_type="text/plain",
    description="Prometheus text exposition format 0.0.4",
)
@blp.alt_response(503, description="The database cannot be reached")
def metrics():
    """Request counts and latencies of this process; outbox and scheduler figures of the database."""
    return Response(current_app.extensions[EXTENSION].exposition(), content_type=CONTENT_TYPE)
