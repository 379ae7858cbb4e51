"""RFC 9457 problem details: the one error type every layer raises and the HTTP edge renders."""

from __future__ import annotations

from typing import Mapping

from ..columns import naming

PROBLEM_TYPES = {
    400: ("malformed-request", "Malformed request"),
    403: ("forbidden", "Forbidden"),
    404: ("not-found", "Not found"),
    405: ("method-not-allowed", "Method not allowed"),
    406: ("not-acceptable", "Not acceptable"),
    408: ("request-timeout", "Request timeout"),
    413: ("too-large", "Request or work too large"),
    414: ("uri-too-long", "URI too long"),
    415: ("unsupported-media-type", "Unsupported media type"),
    417: ("expectation-failed", "Expectation failed"),
    422: ("invalid-input", "Invalid input"),
    431: ("header-too-large", "Request header fields too large"),
    500: ("internal-error", "Internal error"),
    501: ("not-implemented", "Not implemented"),
}


class Problem(Exception):
    """An error for the caller: HTTP status, detail, per-field messages and, for a 413, the limit."""

    def __init__(self, status: int, detail: str, errors: Mapping[str, list[str]] | None = None,
                 title: str | None = None, limit: Mapping[str, object] | None = None):
        super().__init__(detail)
        self.status = status
        self.detail = detail
        self.errors = {k: list(v) for k, v in (errors or {}).items()}
        self.title = title or PROBLEM_TYPES.get(status, ("error", "Error"))[1]
        self.limit = dict(limit) if limit else None

    def as_dict(self) -> dict:
        slug = PROBLEM_TYPES.get(self.status, ("error", ""))[0]
        d = {"type": f"/problems/{slug}", "title": self.title, "status": self.status, "detail": self.detail}
        if self.errors:
            d["errors"] = self.errors
        if self.limit:
            d["limit"] = self.limit
        return d


def invalid(errors: Mapping[str, list[str]], detail: str | None = None) -> Problem:
    """A 422 naming the offending fields."""
    if len(errors) > MAX_FIELDS_NAMED:
        # a body of a hundred thousand unknown keys is answered in a page, not in megabytes
        kept = sorted(errors)[:MAX_FIELDS_NAMED]
        errors = {**{k: errors[k] for k in kept},
                  "_more": [f"{len(errors) - MAX_FIELDS_NAMED} more fields are at fault; the first "
                            f"{MAX_FIELDS_NAMED} are named"]}
    return Problem(422, naming(errors) if detail is None else detail, errors)


MAX_FIELDS_NAMED = 100


def too_large(limit: str, value: int, detail: str, fields: Mapping[str, str]) -> Problem:
    """A 413 for work over the configured limit ``limit`` (a field of :class:`calcservice.config.Limits`):
    the detail names the limit and its environment variable, so an operator knows what to change."""
    return Problem(413, f"{detail} (limit {limit} = {value}, CALCSERVICE_{limit.upper()})",
                   {name: [message] for name, message in fields.items()}, limit={"name": limit, "value": value})
