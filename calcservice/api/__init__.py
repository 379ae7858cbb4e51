"""The HTTP edge: the application factory and its blueprints."""

from __future__ import annotations

from flask import Flask

from .. import registry
from ..config import load_settings
from ..memory import keep_freed_memory
from . import batch, calculations, docs, edge, form, meta


def create_app(config=None) -> Flask:
    """Build the calcservice application: configure, register blueprints, return the app."""
    keep_freed_memory()          # catalogue-sized arrays reuse freed heap instead of faulting pages in
    app = Flask(__name__, static_folder=None)
    app.url_map.merge_slashes = False    # "/v1//spectroscopic/sb2" is no path of ours: a 404 problem, not an HTML redirect
    settings = load_settings(config)
    app.config.update(
        CALCSERVICE_SETTINGS=settings,
        MAX_CONTENT_LENGTH=settings.limits.max_body_bytes,
        JSON_SORT_KEYS=False,
    )
    if config:
        app.config.update({k: v for k, v in dict(config).items() if k.isupper()})
    app.config["DEBUG"] = False
    app.config["PROPAGATE_EXCEPTIONS"] = False

    registry.calculations()      # every declaration registered (and any broken one loud) before serving
    edge.install(app)
    for blueprint in (meta.bp, calculations.bp, batch.bp, form.bp, docs.bp):
        app.register_blueprint(blueprint)
    return app
