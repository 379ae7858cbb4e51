"""``POST /v1/batch/<calculation>``: many systems of one calculation (see :mod:`calcservice.core.batch`)."""

from __future__ import annotations

from flask import Blueprint, current_app

from ..core import compute_batch, find
from ..tables import ARROW
from .edge import batch_body, batch_response

bp = Blueprint("batch", __name__)


@bp.post("/v1/batch/<name>")
def batch(name: str):
    limits = current_app.config["CALCSERVICE_SETTINGS"].limits
    body, answer_type, kept, refused = batch_body(find(name), limits)    # JSON, Arrow, CSV or ECSV
    # numpy arrays straight to the encoder: no Python float per number on the way out; an Arrow
    # answer's series as arrays (systems, points), one list type whichever systems fail
    answer = compute_batch(name, body, limits, for_json=True, series_arrays=answer_type == ARROW, refused=refused)
    return batch_response(answer, answer_type, kept)
