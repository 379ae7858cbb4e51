"""The web form at ``GET /``: a static page that builds itself from ``GET /v1/calculations``.

The page, its style sheet and its script ship inside the package (calcservice/static/);
nothing is loaded from elsewhere, and a strict Content-Security-Policy says so to the
browser: no inline scripts or styles, no other origins.  Images may also be ``blob:`` URLs, the
page's own copies of the figures it fetched from this service (a Monte Carlo histogram is shown
as an image so that its SVG keeps its own styles without the page allowing inline styles).
"""

from __future__ import annotations

from importlib import resources

from flask import Blueprint, Response, abort

bp = Blueprint("form", __name__)

CONTENT_SECURITY_POLICY = ("default-src 'self'; script-src 'self'; style-src 'self'; img-src 'self' blob:; "
                           "connect-src 'self'; object-src 'none'; base-uri 'none'; form-action 'self'; "
                           "frame-ancestors 'none'")
ASSETS = {
    "form.css": "text/css; charset=utf-8",
    "form.js": "text/javascript; charset=utf-8",
    "favicon.svg": "image/svg+xml",
}


def _asset(name: str) -> bytes:
    return resources.files("calcservice").joinpath("static", name).read_bytes()


def secure(r: Response) -> Response:
    """A page's headers: the strict policy (nothing from elsewhere), no referrer, no framing."""
    r.headers["Content-Security-Policy"] = CONTENT_SECURITY_POLICY
    r.headers["Referrer-Policy"] = "no-referrer"
    r.headers["X-Frame-Options"] = "DENY"
    return r


@bp.get("/")
def page():
    r = Response(_asset("index.html"), content_type="text/html; charset=utf-8")
    r.headers["Cache-Control"] = "no-cache"
    return secure(r)


@bp.get("/favicon.ico")
def favicon():
    r = Response(_asset("favicon.svg"), content_type="image/svg+xml")
    r.headers["Cache-Control"] = "max-age=86400"
    return r


@bp.get("/static/<name>")
def asset(name: str):
    if name not in ASSETS:
        abort(404)
    r = Response(_asset(name), content_type=ASSETS[name])
    r.headers["Cache-Control"] = "no-cache"
    return secure(r)
