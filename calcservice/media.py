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
