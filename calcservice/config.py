"""Configuration in one place: embedded safe defaults, overridable by environment variables.

Every limit is read from ``CALCSERVICE_<NAME>`` (e.g. ``CALCSERVICE_MAX_BODY_BYTES``) when set,
or from the ``config`` mapping given to :func:`calcservice.create_app`.
"""

from __future__ import annotations

import inspect
import os
import re
from dataclasses import dataclass, fields, replace
from functools import lru_cache
from typing import Mapping


@dataclass(frozen=True)
class Limits:
    max_body_bytes: int = 16 * 1024 * 1024      # request body (413 beyond)
    max_samples: int = 1_000_000                 # Monte Carlo draws per request
    default_samples: int = 10_000                # Monte Carlo draws when the request does not say
    max_sample_array: int = 1_000_000            # length of a user's samples array
    max_series: int = 100_000                    # e.g. ephemeris times per request
    max_batch_rows: int = 100_000                # systems in one batch
    max_batch_draws: int = 5_000_000             # systems x draws in one batch (~25 s for the slowest physics)
    max_series_evaluations: int = 4_000_000      # systems x draws (or linear perturbations) x series points
    max_json_depth: int = 32                     # nesting of the JSON body
    max_string_length: int = 256                 # any string value (units, times, choices)
    min_gzip_bytes: int = 2048                   # answers this large or larger are gzipped for callers that accept it
    max_header_bytes: int = 64 * 1024            # request line and headers together (431 beyond)
    header_timeout_seconds: int = 10             # for a client to send its request line and headers (408 beyond)
    body_timeout_seconds: int = 60               # for a client to send its body once the headers are in (408 beyond)


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
    """Every field of ``limits`` with its value, its environment variable and its description (the
    comment beside the field in this module's source: a new field is described where it is declared)."""
    described = _field_comments()
    return {f.name: {"value": getattr(limits, f.name), "env": f"CALCSERVICE_{f.name.upper()}",
                     "description": described.get(f.name, f.name.replace("_", " "))} for f in fields(Limits)}


@lru_cache(maxsize=1)
def _field_comments() -> dict[str, str]:
    try:
        source = inspect.getsource(Limits)
    except (OSError, TypeError):        # no source at hand (a frozen build): the names say enough
        return {}
    out = {}
    for line in source.splitlines():
        m = re.match(r"^\s+(\w+)\s*:[^#]*#\s*(.+?)\s*$", line)
        if m:
            out[m.group(1)] = m.group(2)
    return out
