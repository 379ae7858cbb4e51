"""``POST /v1/batch/<calculation>``: many systems of one calculation (see :mod:`calcservice.core.batch`)."""

from __future__ import annotations

from flask import Blueprint, current_app

from ..core import compute_batch
from .edge import json_body, json_response

bp = Blueprint("batch", __name__)


@bp.post("/v1/batch/<name>")
def batch(name: str):
    limits = current_app.config["CALCSERVICE_SETTINGS"].limits
    # numpy arrays straight to the JSON encoder: no Python float per number on the way out
    return json_response(compute_batch(name, json_body(limits), limits, for_json=True))
