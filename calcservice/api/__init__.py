"""The HTTP edge: the application factory and its blueprints."""

from __future__ import annotations

from flask import Flask

from ..config import load_settings


def create_app(config=None) -> Flask:
    """Build the calcservice application: configure, register blueprints, return the app."""
    from ..memory import keep_freed_memory
    keep_freed_memory()          # catalogue-sized arrays reuse freed heap instead of faulting pages in
    app = Flask(__name__, static_folder=None)
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

    from . import calculations, edge, meta
    edge.install(app)
    app.register_blueprint(meta.bp)
    app.register_blueprint(calculations.bp)
    from . import docs
    app.register_blueprint(docs.bp)
    try:
        from . import batch
        app.register_blueprint(batch.bp)
    except ImportError:
        pass
    try:
        from . import form
        app.register_blueprint(form.bp)
    except ImportError:
        pass
    return app
