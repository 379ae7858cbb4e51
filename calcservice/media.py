"""The media types the service speaks, in one place for the HTTP edge and the OpenAPI document.

``?format=`` renders a single calculation as a derivation report or a figure; a batch takes and
gives tables as JSON, Apache Arrow IPC streams, CSV or ECSV (WIRE.md, "Table media types").
"""

from __future__ import annotations

REPORTS = {
    "latex": "text/x-tex; charset=utf-8",
    "markdown": "text/markdown; charset=utf-8",
}
FIGURES = {
    "svg": "image/svg+xml",
    "png": "image/png",
}
FORMATS = (*REPORTS, *FIGURES)            # the values of ?format= besides the default json
MIMETYPES = {**REPORTS, **FIGURES}

JSON = "application/json"
PROBLEM = "application/problem+json"
ARROW = "application/vnd.apache.arrow.stream"
CSV = "text/csv"
ECSV = "text/x-ecsv"                      # accepted too; an ECSV body's answer goes out as text/csv
ANSWERS = (JSON, ARROW, CSV, ECSV)        # the answer types of a batch, by Accept


def quality(accept, media: str) -> float | None:
    """The q that Accept (werkzeug's parse of it: (media range, q) pairs) gives ``media``: that of the
    most specific media range matching it (RFC 9110 section 12.5.1; parameters other than q, such as
    a charset, do not narrow a range here, and a lone ``*`` is ``*/*`` as old clients send it), 0 where
    none matches; None where no range is readable (a malformed field, which a server may disregard)."""
    kind, sub = media.split("/")
    readable, best = False, None                # best: (specificity, q)
    for value, q in accept:
        rng = value.split(";", 1)[0].strip().lower()
        t, slash, s = ("*/*" if rng == "*" else rng).partition("/")
        if not slash or not t or not s or (t == "*" and s != "*"):
            continue
        readable = True
        if t in ("*", kind) and s in ("*", sub):
            specific = (t != "*") + (s != "*")
            if best is None or specific > best[0]:
                best = (specific, q)
            elif specific == best[0]:
                best = (specific, max(best[1], q))
    if not readable:
        return None
    return 0.0 if best is None else best[1]
