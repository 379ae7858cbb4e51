"""Service metadata: health, constants, the registry of calculations and the OpenAPI spec."""

from __future__ import annotations

from flask import Blueprint, Response, current_app, request

from .. import __version__
from ..constants import CONSTANTS
from ..registry import calculations
from .edge import json_response, query_parameters

bp = Blueprint("meta", __name__)


@bp.before_request
def _no_query():
    # none of these takes a parameter: one given (?name=sb1, ?format=json) would be answered as if absent
    query_parameters({}, f"{request.method} {request.path[:80]}")


@bp.get("/v1/health")
def health():
    return json_response({"status": "ok", "version": __version__})


@bp.get("/v1/ready")
def ready():
    # ready once the registry is importable and the spec builds: the worker can serve calculations;
    # not ready from the moment the server begins to drain (TERM), so that a balancer stops sending
    if request.environ.get("calcservice.draining"):
        return json_response({"status": "draining", "version": __version__}, 503)
    from ..openapi import spec_yaml
    return json_response({"status": "ready", "version": __version__, "calculations": len(calculations()),
                          "spec_bytes": len(spec_yaml())})


@bp.get("/v1/limits")
def limits():
    # the limits in force, so that a client can split a catalogue before sending it
    from ..config import describe_limits
    return json_response({"limits": describe_limits(current_app.config["CALCSERVICE_SETTINGS"].limits)})


@bp.get("/v1/constants")
def constants():
    return json_response({"constants": {k: c.as_dict() for k, c in CONSTANTS.items()}})


@bp.get("/v1/calculations")
def list_calculations():
    return json_response({"calculations": [c.as_dict() for c in calculations().values()]})


@bp.get("/v1/calculations/<name>")
def one_calculation(name: str):
    from ..core import find
    return json_response(find(name).as_dict())


@bp.get("/openapi.yaml")
def openapi():
    from ..openapi import spec_yaml
    return Response(spec_yaml(), mimetype="application/yaml")
