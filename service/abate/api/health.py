"""Liveness and readiness probes for load balancers and orchestrators."""

import marshmallow as ma
from flask_smorest import Blueprint

from abate.db import database, schema_version

blp = Blueprint("health", __name__, description="Liveness and readiness probes")


class HealthSchema(ma.Schema):
    """The probe's answer."""

    status = ma.fields.String(metadata={"description": "ok, or the reason it is not"})
    schema_version = ma.fields.Integer(metadata={"description": "Applied migration number"})


@blp.route("/livez")
@blp.response(200, HealthSchema)
def livez():
    """The process answers requests."""
    return {"status": "ok"}


@blp.route("/readyz")
@blp.response(200, HealthSchema)
@blp.alt_response(503, description="The database cannot be reached")
def readyz():
    """The database answers; a failure becomes 503 problem details."""
    database.execute_sql("SELECT 1")
    return {"status": "ok", "schema_version": schema_version()}
