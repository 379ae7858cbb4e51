"""Configuration in one place: embedded safe defaults, overridable by environment variables.

Every limit is read from ``CALCSERVICE_<NAME>`` (e.g. ``CALCSERVICE_MAX_BODY_BYTES``) when set,
or from the ``config`` mapping given to :func:`calcservice.create_app`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field, fields, replace
from typing import Mapping


def _limit(default: int, description: str):
    """A limit's default and what it bounds (published by ``GET /v1/limits``)."""
    return field(default=default, metadata={"description": description})


@dataclass(frozen=True)
class Limits:
    max_body_bytes: int = _limit(16 * 1024 * 1024, "request body (413 beyond)")
    max_samples: int = _limit(1_000_000, "Monte Carlo draws per request")
    default_samples: int = _limit(10_000, "Monte Carlo draws when the request does not say")
    max_sample_array: int = _limit(1_000_000, "length of a user's samples array")
    max_series: int = _limit(100_000, "e.g. ephemeris times per request")
    max_batch_rows: int = _limit(100_000, "systems in one batch")
    max_batch_draws: int = _limit(5_000_000, "systems x draws in one batch (~20 s for the slowest physics on one core)")
    max_series_evaluations: int = _limit(4_000_000, "systems x draws (or linear perturbations) x series points")
    max_json_depth: int = _limit(32, "nesting of the JSON body")
    max_string_length: int = _limit(256, "any string value (units, times, choices)")
    min_gzip_bytes: int = _limit(2048, "answers this large or larger are gzipped for callers that accept it")
    max_header_bytes: int = _limit(64 * 1024, "request line and headers together (431 beyond)")
    header_timeout_seconds: int = _limit(10, "for a client to send its request line and headers (408 beyond)")
    body_timeout_seconds: int = _limit(60, "for a client to send its body once the headers are in (408 beyond)")


@dataclass(frozen=True)
class Settings:
    limits: Limits = Limits()
    cors_origins: tuple[str, ...] = ()           # allowed browser origins (default: none)
    trust_request_id: bool = True                # echo a caller's X-Request-ID when it looks sane


def _coerce(kind, text: str, name: str = "value"):
    if kind is int:
        try:
            number = int(str(text).strip().replace("_", ""))
        except ValueError:
            raise ValueError(f"{name} must be a whole number, not {text!r}") from None
        if number < 1:
            raise ValueError(f"{name} must be at least 1, not {number}")
        return number
    if kind is bool:
        return text.strip().lower() in ("1", "true", "yes", "on")
    return text


def load_settings(config: Mapping | None = None, environ: Mapping[str, str] | None = None) -> Settings:
    """Defaults, then ``CALCSERVICE_*`` environment variables, then the explicit ``config`` mapping."""
    environ = os.environ if environ is None else environ
    config = dict(config or {})
    values = {}
    for f in fields(Limits):
        key = f"CALCSERVICE_{f.name.upper()}"
        if key in environ:
            values[f.name] = _coerce(int, environ[key], key)
        if f.name.upper() in config:
            values[f.name] = _coerce(int, config[f.name.upper()], f.name.upper())
    limits = replace(Limits(), **values)
    if limits.default_samples > limits.max_samples:     # a lowered ceiling lowers the default with it
        limits = replace(limits, default_samples=limits.max_samples)
    origins = environ.get("CALCSERVICE_CORS_ORIGINS", "")
    origins = config.get("CORS_ORIGINS", origins)
    if isinstance(origins, str):
        origins = tuple(o.strip() for o in origins.split(",") if o.strip())
    return Settings(limits=limits, cors_origins=tuple(origins))


def describe_limits(limits: Limits) -> dict:
    """Every field of ``limits`` with its value, its environment variable and its description."""
    return {f.name: {"value": getattr(limits, f.name), "env": f"CALCSERVICE_{f.name.upper()}",
                     "description": f.metadata["description"]} for f in fields(Limits)}
