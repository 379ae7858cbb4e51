"""A Python client for calcservice, over HTTP or in-process, with the lab's own tables in and out.

    >>> from calcservice.client import Client
    >>> svc = Client("http://127.0.0.1:8000", timeout=30)        # or Client("local"): the service in-process
    >>> r = svc.calculate("sb1", period=(41.6, 0.02), k1=(23.4, 0.3), eccentricity=0.31)
    >>> r.quantity("mass_function"), r.ufloat("mass_function")
    >>> out = svc.batch("sb1", catalogue)          # an astropy Table/QTable, a DataFrame, a mapping of columns
    >>> out.to_table()                             # a QTable: units, NAME_sigma, masked failures, an error column

Inputs of one system may be numbers, ``(value, sigma)`` or ``(value, sigma_minus, sigma_plus)``
tuples, objects of the wire contract (``{"value": 1.2, "sigma": 0.1, "unit": "yr"}``), astropy
quantities, ``uncertainties`` numbers (those correlated with one another, as ``correlated_values`` of a
fit's covariance gives them, are sent with their correlations), strings ("isotropic", ISO 8601 dates,
choices), ``datetime`` objects for times, and
lists or arrays: the user's own draws for a measured input, the list itself for a series input.

A catalogue is split to the service's published limits (``GET /v1/limits``) and put back
together in input order.  Paths come from ``GET /v1/calculations``, so every calculation of the
service is reachable without a client update.  Errors raise :class:`CalcServiceError` carrying
the RFC 9457 problem details; connection failures (refused, reset before an answer) are retried,
nothing else is.  JSON is decoded with orjson; astropy, pandas, pyarrow, tqdm and uncertainties
are used when the caller's data or the asked-for conversion needs them.
"""

from __future__ import annotations

import datetime as _dt
import html
import json
import http.client
import math
import os
import platform
import socket
import sys
import time
import urllib.parse
from typing import Any, Iterable, Mapping, Sequence

import numpy as np
import orjson

from . import __version__
from .columns import as_doubles, column_array, plain_number
from .columns import column_name, column_role, correlated_columns, error_text, infinite_cells, kept_name_errors, \
    split_unit, uncertain_parts
from .columns import unit_of as _unit_of
from .media import FIGURES, REPORTS

USER_AGENT = f"calcservice-client/{__version__} (calcservice {__version__}; Python {platform.python_version()})"
ARROW = "application/vnd.apache.arrow.stream"

# What the service allowed before it published its limits (calcservice.config.Limits defaults).
DEFAULT_LIMITS = {"max_body_bytes": 16 * 1024 * 1024, "max_batch_rows": 100_000, "max_batch_draws": 5_000_000,
                  "default_samples": 10_000}


class CalcServiceError(Exception):
    """A request the service refused (or could not be reached for).

    ``status`` is the HTTP status (None when no answer came), ``problem`` the RFC 9457
    problem details as sent, ``errors`` the per-field messages ({field: [message, ...]}),
    ``limit`` the limit a 413 names ({"name": ..., "value": ...}) when it names one.
    """

    def __init__(self, message: str, status: int | None = None, problem: Mapping[str, Any] | None = None):
        self.status = status
        self.problem = dict(problem or {})
        self.errors: dict[str, list[str]] = dict(self.problem.get("errors") or {})
        self.detail = self.problem.get("detail", message)
        self.limit: dict | None = self.problem.get("limit") if isinstance(self.problem.get("limit"), dict) else None
        super().__init__(message)

    def __str__(self) -> str:
        head = f"{self.status} {self.detail}" if self.status else str(self.args[0])
        if self.limit and str(self.limit.get("name")) not in head:
            head += f" (limit {self.limit.get('name')}" + (
                f" = {self.limit['value']})" if self.limit.get("value") is not None else ")")
        if self.errors:
            head += " (" + "; ".join(f"{k}: {' '.join(v)}" for k, v in self.errors.items()) + ")"
        return head


class InvalidInput(CalcServiceError, ValueError):
    """An input the client refuses before sending anything (a ValueError too); ``errors`` names it, as
    the service's problem would: the message reads "FIELD: what is wrong"."""

    def __init__(self, message: str):
        field = message.split(": ", 1)[0] if ": " in message else "_inputs"
        super().__init__(message, None, {"detail": message, "errors": {field: [message]}})

    def __str__(self) -> str:
        return str(self.args[0])


class _NoUnit(InvalidInput):
    """A dimensional column a table gives no unit (collected, so that every such column is named at once)."""

    def __init__(self, label: str, spec: Mapping[str, Any]):
        self.label, self.spec = label, spec
        super().__init__(f"{label}: {spec['name']} is a dimensional input (default unit {spec['unit']!r}) and the "
                         "table gives it no unit: give the column a unit, name it "
                         f"{spec['name']}[{spec['unit']}], or pass units={{{spec['name']!r}: ...}}")


class ServiceUnavailable(CalcServiceError):
    """No answer: the connection was refused or reset on every try, or the request timed out."""


def _is_connection_error(e: BaseException) -> bool:
    """Refused, reset or dropped before an answer came (worth another try); not timeouts."""
    if isinstance(e, (socket.timeout, TimeoutError)):
        return False
    # RemoteDisconnected is a ConnectionResetError: the server closed a kept-alive socket
    return isinstance(e, (ConnectionError, socket.gaierror, http.client.BadStatusLine))


def _is_timeout(e: BaseException) -> bool:
    return isinstance(e, (socket.timeout, TimeoutError))


# --------------------------------------------------------------------------- results
class Result(dict):
    """One system's answer: the response dict of the wire contract, plus conversions.

    ``quantity(name)`` an astropy Quantity, ``ufloat(name)`` an ``uncertainties`` number,
    ``ufloats()`` every output as correlated ``uncertainties`` numbers (ask with ``covariance=True``).
    """

    def _entry(self, name: str) -> Mapping[str, Any]:
        results = self.get("results") or {}
        if name not in results or not isinstance(results[name], Mapping):
            raise KeyError(f"no output {name!r}; this answer has {', '.join(results)}")
        if isinstance(results[name].get("value"), (list, Mapping)) or "value" not in results[name]:
            # a series or a list of events: read as one number, its missing value was NaN
            raise KeyError(f"{name!r} is no one number (a series or events): read it from result['results'][{name!r}]")
        return results[name]

    def quantity(self, name: str):
        """Output ``name`` as an astropy Quantity in its unit (the value; Monte Carlo: the median)."""
        from astropy import units as u
        e = self._entry(name)
        return _float(e.get("value")) * u.Unit(e.get("unit") or "")

    def ufloat(self, name: str):
        """Output ``name`` as ``uncertainties.ufloat(value, sigma)`` (independent of the other outputs).

        Where the service gives no sigma (a Monte Carlo distribution without a finite variance, warned as
        ``sigma_undefined``) the standard deviation is nan: the median and ``low``/``high`` are the answer.
        """
        from uncertainties import ufloat
        e = self._entry(name)
        return ufloat(_float(e.get("value")), _float(e.get("sigma", 0.0)), name)

    def ufloats(self) -> dict:
        """Every output in the correlation matrix as correlated ``uncertainties`` numbers, by name.

        Needs the outputs' correlation (``covariance=True`` in the request): sums and ratios of
        outputs then carry the right sigma (m1 + m2 agrees with the service's total mass).
        """
        corr = self.get("correlation")
        if not isinstance(corr, Mapping):
            raise ValueError("this answer has no correlation of its outputs: ask with covariance=True")
        names = list(corr["outputs"])
        return _correlated(names, [_float(self._entry(n).get("value")) for n in names],
                           [_float(self._entry(n).get("sigma")) for n in names], corr["matrix"])

    def _summary(self) -> tuple[str, tuple[str, ...], list[tuple[str, str, str]]]:
        rows = []
        for name, e in (self.get("results") or {}).items():
            if isinstance(e, Mapping) and isinstance(e.get("value"), (int, float)):
                rows.append((name, _pm(e.get("value"), e.get("sigma"), e.get("low"), e.get("high")),
                             e.get("unit", "")))
        title = f"{self.get('calculation', '')} ({(self.get('uncertainty') or {}).get('method', '')})"
        return title, ("output", "value ± sigma", "unit"), rows

    @property
    def _scale(self) -> str:
        """What the answer's date numbers are: MJD where the request said so, else JD."""
        return "MJD" if self.get("time_format") == "mjd" else "JD"

    def _repr_html_(self) -> str:
        title, header, rows = self._summary()
        return "".join([_html_table(title, header, rows) if rows else f"<p>{html.escape(title)}</p>"]
                       + [_html_table(*table) for table in _series_and_events(self.get("results") or {}, self._scale)]
                       + [f"<p>{html.escape(note)}</p>" for note in _event_notes(self.get("results") or {})]
                       + [f"<p>warning [{html.escape(str(w.get('code')))}]: {html.escape(str(w.get('message')))}</p>"
                          for w in self.get("warnings") or [] if isinstance(w, Mapping)])

    def __str__(self) -> str:
        """``print(result)``: the outputs as a text table, value ± sigma rounded as the reports round them
        (``repr`` stays the mapping's, every digit)."""
        title, header, rows = self._summary()
        lines = [title, *_text_rows([header, *rows])] if rows else [title]
        warnings = [f"warning [{w.get('code')}]: {w.get('message')}" for w in self.get("warnings") or []
                    if isinstance(w, Mapping)]
        return "\n".join(lines + _series_and_events_text(self.get("results") or {}, self._scale) + ([""] if warnings else [])
                         + warnings)


def _series_and_events(results: Mapping[str, Any], scale: str = "JD") -> list[tuple[str, list[str], list[list[str]]]]:
    """An answer's series (an ephemeris' times, a shell forecast's shells) and its dated events as
    (title, header, rows) tables, printed as the reports print them (dates to what their sigma supports)."""
    from .report import STYLES, event_tables, series_header, series_table
    style, tables = STYLES["text"], []
    if isinstance(results.get("series"), Mapping):
        names, units, body = series_table(results["series"], style)
        tables.append(("series", series_header(names, units, style, scale), body))
    tables += [(label.replace("_", " "), header, body) for label, header, body in event_tables(results, style)]
    return tables


def _series_and_events_text(results: Mapping[str, Any], scale: str = "JD") -> list[str]:
    lines: list[str] = []
    for title, header, body in _series_and_events(results, scale):
        lines += [""] + ([] if title == "series" else [title]) + _text_rows([header, *body])
    notes = _event_notes(results)
    return lines + ([""] + notes if notes else [])


def _event_notes(results: Mapping[str, Any]) -> list[str]:
    """What the events say of themselves (the light-travel amplitudes), a line each, as the report's notes."""
    from .report import STYLES, event_notes, notes_line
    return [f"{label}: {notes_line(values, STYLES['text'])}" for label, values in event_notes(results)]


def _float(x) -> float:
    return math.nan if x is None else float(x)


def _correlated(names, values, sigmas, matrix) -> dict:
    from uncertainties import correlated_values
    s = np.asarray(sigmas, dtype=float)
    cov = np.asarray(matrix, dtype=float) * np.outer(s, s)
    return dict(zip(names, correlated_values(np.asarray(values, dtype=float), cov, tags=list(names))))


class BatchResult(dict):
    """Batch results as numpy arrays, one per output, in input order (NaN where a system failed).

    ``sigma``, ``low`` and ``high`` hold the uncertainties (``low``/``high`` for Monte Carlo),
    ``unit`` the unit of each output, ``errors`` the problem details of the failed systems
    ({"index": i, "status": ..., "detail": ..., "errors": {...}}), ``warnings`` the warnings
    (columns: each with the ``rows`` it applies to), ``correlation`` the outputs' correlation
    ({"outputs": [...], "matrix": [m x m or None per system]}, with ``covariance=True``),
    ``kept`` the caller's columns carried along (``keep=``), ``extras`` other members per system (an
    ephemeris' events), ``responses`` the raw answers (one per request).  A series output is (N, T).
    """

    def __init__(self, values, sigma, low, high, unit, errors, responses, warnings=None, correlation=None,
                 count=None, kept=None, extras=None):
        super().__init__(values)
        self.sigma = sigma
        self.low = low
        self.high = high
        self.unit = unit
        self.errors = errors
        self.warnings = warnings
        self.correlation = correlation
        self.responses = responses
        self.count = count if count is not None else (len(next(iter(values.values()))) if values else 0)
        self.kept = dict(kept or {})
        self.extras = dict(extras or {})

    @property
    def response(self):
        """The service's answer (the first one when the catalogue went in several requests)."""
        return self.responses[0] if self.responses else {}

    @property
    def failed(self) -> list[int]:
        return sorted(e["index"] for e in self.errors if isinstance(e.get("index"), int))

    def error_text(self, short: bool = False) -> list[str]:
        """For each system, what was wrong (``detail; field: message; ...``; ``short``: the field errors
        only), or "" when it was answered."""
        out = [""] * self.count
        for e in self.errors:
            if isinstance(e.get("index"), int) and 0 <= e["index"] < self.count:
                out[e["index"]] = problem_reason(e) if short else problem_text(e)
        return out

    def warning_codes(self) -> list[list[str]]:
        """For each system, the codes of its warnings."""
        out: list[list[str]] = [[] for _ in range(self.count)]
        for k, w in enumerate(self.warnings or []):
            if isinstance(w, Mapping):              # a columns answer: a warning names its rows (none: all)
                rows = w["rows"] if "rows" in w else range(self.count)
                for i in rows:
                    if 0 <= i < self.count and w.get("code") not in out[i]:
                        out[i].append(str(w.get("code")))
            elif k < self.count:                    # rows, or an answer table: one list per system
                out[k] = [str(c.get("code") if isinstance(c, Mapping) else c) for c in w]
        return out

    def quantity(self, name: str):
        """Output ``name`` as an astropy Quantity array (NaN where a system failed)."""
        from astropy import units as u
        return self[name] * u.Unit(self.unit.get(name) or "")

    def ufloats(self, index: int) -> dict:
        """System ``index``'s outputs as correlated ``uncertainties`` numbers (ask with ``covariance=True``)."""
        if not self.correlation:
            raise ValueError("this answer has no correlation of its outputs: ask with covariance=True")
        names = list(self.correlation["outputs"])
        matrix = self.correlation["matrix"][index]
        if matrix is None:
            raise ValueError(f"system {index} was not answered: {self.error_text()[index]}")
        return _correlated(names, [self[n][index] for n in names], [self.sigma[n][index] for n in names], matrix)

    def to_table(self):
        """An astropy ``QTable``: the caller's kept columns, then per output ``NAME`` (a Quantity), ``NAME_sigma``
        (``NAME_low``, ``NAME_high`` for Monte Carlo), masked where there is no number (a failed system), then
        ``error`` (what was wrong, "" when answered)."""
        from astropy import units as u
        from astropy.table import QTable
        from astropy.utils.masked import Masked
        t = QTable()
        for name, col in self.kept.items():
            t[name] = col
        for name, values in self.items():
            unit = u.Unit(self.unit.get(name) or "")
            for member, store in (("value", self), ("sigma", self.sigma), ("low", self.low), ("high", self.high)):
                if name in store:
                    arr = np.asarray(store[name], dtype=float)
                    t[column_name(name, member)] = Masked(arr * unit, mask=np.isnan(arr))
        for name, entries in self.extras.items():
            t[name] = [_json_text(x) for x in entries]
        t["error"] = self.error_text()
        t["warnings"] = [";".join(codes) for codes in self.warning_codes()]
        t.meta["calculation"] = (self.response or {}).get("calculation")
        return t

    def to_pandas(self):
        """A pandas ``DataFrame`` with the columns of :meth:`to_table` (NaN where a system failed); the units
        are in ``df.attrs["units"]`` ({column: unit}), which :meth:`Client.batch` reads back."""
        import pandas as pd
        data: dict[str, Any] = dict(self.kept)
        units = {}
        for name, values in self.items():
            for member, store in (("value", self), ("sigma", self.sigma), ("low", self.low), ("high", self.high)):
                if name in store:
                    key = column_name(name, member)
                    arr = np.asarray(store[name], dtype=float)
                    data[key] = arr if arr.ndim == 1 else list(arr)     # a series: an array per system
                    units[key] = self.unit.get(name, "")
        for name, entries in self.extras.items():
            data[name] = [_json_text(x) for x in entries]
        data["error"] = self.error_text()
        data["warnings"] = [";".join(codes) for codes in self.warning_codes()]
        df = pd.DataFrame(data)
        df.attrs["units"] = units
        return df

    def _summary(self, limit: int) -> tuple[str, list[str], list[list[str]]]:
        """Title, header and the first ``limit`` rows of both reprs: value ± sigma per scalar output, then
        the warnings' codes where some system has any, then the error."""
        names = [n for n in self if np.ndim(self[n]) == 1]
        series = [n for n in self if np.ndim(self[n]) == 2]      # an ephemeris' curves: a row of values per system
        rows = []
        errors = self.error_text()
        codes = [", ".join(c) for c in self.warning_codes()]
        warned = sum(1 for c in codes if c)
        kept = list(self.kept)          # the caller's own columns (a star's name) say which system a row is
        for i in range(min(self.count, limit)):
            rows.append([str(i)] + [_json_text(self.kept[k][i]) if not isinstance(self.kept[k][i], str)
                                    else self.kept[k][i] for k in kept]
                        + [_pm(self[n][i], *(part.get(n, [None] * self.count)[i]
                                             for part in (self.sigma, self.low or {}, self.high or {})))
                           for n in names]
                        + [self._series_cell(n, i) for n in series]
                        + ([codes[i]] if warned else []) + [errors[i]])
        header = (["#"] + kept + [f"{n} [{self.unit.get(n)}]" if self.unit.get(n) else n for n in names + series]
                  + (["warnings"] if warned else []) + ["error"])
        more = f", first {limit} shown" if self.count > limit else ""
        title = (f"{(self.response or {}).get('calculation', '')}: {self.count} systems, "
                 f"{len(self.failed)} failed" + (f", {warned} with warnings" if warned else "") + more)
        return title, header, rows

    def _series_cell(self, name: str, i: int) -> str:
        """System ``i``'s series ``name`` in one cell: its first and last values (value ± sigma) and their count,
        so that a printed batch of ephemerides shows its curves, where it showed no column at all."""
        parts = [np.asarray(self[name])[i]] + [np.asarray(part[name])[i] if part and name in part else None
                                               for part in (self.sigma, self.low, self.high)]
        cells = [_pm(*(None if p is None else p[k] for p in parts)) for k in range(len(parts[0]))]
        if all(c == "—" for c in cells):
            return "—"
        return "; ".join(cells) if len(cells) <= 2 else f"{cells[0]} … {cells[-1]} ({len(cells)} values)"

    def _repr_html_(self, limit: int = 20) -> str:
        return _html_table(*self._summary(limit))

    def __repr__(self) -> str:
        """The first systems as a text table, value ± sigma (the arrays are the mapping's values)."""
        title, header, rows = self._summary(10)
        if not any(r[-1] for r in rows):
            header, rows = header[:-1], [r[:-1] for r in rows]        # no error column when none failed
        return "\n".join([f"<BatchResult {title}>", *_text_rows([header, *rows])])


def _text_rows(rows: Sequence[Sequence[str]]) -> list[str]:
    widths = [max(len(c) for c in column) for column in zip(*rows)]
    return ["  ".join(c.ljust(w) for c, w in zip(r, widths)).rstrip() for r in rows]


def _json_text(x) -> str:
    return "" if x is None else orjson.dumps(x, option=orjson.OPT_SERIALIZE_NUMPY).decode("utf-8")


def problem_text(problem: Mapping[str, Any]) -> str:
    """A problem as the ``error`` column of the service's answer tables (:func:`calcservice.columns.error_text`)."""
    return error_text(problem)


def problem_reason(problem: Mapping[str, Any]) -> str:
    """What was wrong, shortly: the field errors ``field: message; ...`` (the detail when it names no field)."""
    errs = problem.get("errors") or {}
    if errs:
        return "; ".join(f"{k}: {' '.join(map(str, v)) if isinstance(v, list) else v}" for k, v in errs.items())
    return str(problem.get("detail", ""))


def _pm(value, sigma, low=None, high=None) -> str:
    """value ± sigma as the reports and the command line print it (Particle Data Group rounding); a Monte
    Carlo value with its interval's ends, and where its sigma is undefined (masses from isotropic
    inclinations) the 68.27 % interval written out, never a bare median that reads as exact."""
    from .report import STYLES, measured_cell
    if value is None or (isinstance(value, float) and math.isnan(value)):
        return "—"
    entry: dict[str, Any] = {"value": float(value), "sigma": _or_none(sigma)}
    if _or_none(low) is not None and _or_none(high) is not None:
        entry.update(low=float(low), high=float(high))
    return measured_cell(entry, STYLES["text"])


def _or_none(x):
    return None if x is None or (isinstance(x, (float, np.floating)) and math.isnan(x)) else float(x)


def _html_table(title: str, header: Sequence[str], rows: Iterable[Sequence[str]]) -> str:
    esc = html.escape
    head = "".join(f"<th>{esc(str(h))}</th>" for h in header)
    body = "".join("<tr>" + "".join(f"<td>{esc(str(c))}</td>" for c in r) + "</tr>" for r in rows)
    return f"<table><caption>{esc(title)}</caption><thead><tr>{head}</tr></thead><tbody>{body}</tbody></table>"


# --------------------------------------------------------------------------- the client
class Client:
    """calcservice over HTTP, or in-process.

    ``base_url`` is where the service answers (``GET {base_url}/v1/health``); ``"local"``
    runs the service in this process (a Flask app of :func:`calcservice.create_app`, no
    network), as does ``app=`` with an app of your own.  ``timeout`` is seconds per request;
    connection errors are retried ``retries`` times with exponential back-off starting at
    ``backoff`` seconds.  ``progress`` shows a progress bar on catalogues sent in several
    requests (default: when standard error is a terminal).  ``transport`` is how catalogues
    travel: "arrow" (Apache Arrow IPC streams; the default when pyarrow is installed) or "json".
    """

    def __init__(self, base_url: str = "http://127.0.0.1:8000", timeout: float = 60.0, retries: int = 3,
                 backoff: float = 0.25, headers: Mapping[str, str] | None = None, *, app=None,
                 progress: bool | None = None, transport: str | None = None):
        if base_url == "local" and app is None:
            from . import create_app
            app = create_app()
        self.app = app
        if app is None:
            url = urllib.parse.urlsplit(base_url) if isinstance(base_url, str) else None
            # "notaurl" failed at the first request with an AttributeError; "ftp://" was spoken to in HTTP
            if url is None or url.scheme not in ("http", "https") or not url.hostname:
                raise InvalidInput(f"base_url: {base_url!r} is not the service's address: give http://HOST[:PORT] "
                                   "or https://HOST[:PORT], or \"local\" for the service in this process")
        self.base_url = "local" if app is not None else base_url.rstrip("/")
        if timeout is not None and (isinstance(timeout, bool) or not isinstance(timeout, (int, float))
                                    or not timeout > 0):
            raise InvalidInput(f"timeout: {timeout!r} is not a number of seconds above 0 (None: wait without end)")
        self.timeout = timeout
        self.retries = max(0, int(retries))
        self.backoff = backoff
        self.progress = progress
        if transport is None:
            try:
                import pyarrow  # noqa: F401
                transport = "arrow"
            except ImportError:
                transport = "json"
        if transport not in ("arrow", "json"):
            raise ValueError(f"transport is 'arrow' or 'json', not {transport!r}")
        self.transport = transport
        self.headers = {"User-Agent": USER_AGENT, **dict(headers or {})}
        self._catalogue: dict[str, dict] | None = None
        self._limits: dict[str, int] | None = None
        self._local = app.test_client() if app is not None else None

    @classmethod
    def local(cls, config: Mapping[str, Any] | None = None, **kwargs) -> "Client":
        """The service in this process, configured like :func:`calcservice.create_app` (limits and all)."""
        from . import create_app
        return cls(app=create_app(dict(config or {})), **kwargs)

    def __repr__(self) -> str:
        return f"Client({self.base_url!r}, timeout={self.timeout})"

    # ------------------------------------------------------------------ transport
    def _send(self, method: str, target: str, data: bytes | None, headers: Mapping[str, str]) -> tuple[int, str, bytes]:
        """One exchange: (status, content type, body).  Raises what the socket raises."""
        if self._local is not None:
            r = self._local.open(target, method=method, data=data, headers=dict(headers))
            return r.status_code, r.headers.get("Content-Type", ""), r.get_data()
        url = urllib.parse.urlsplit(self.base_url)
        cls = http.client.HTTPSConnection if url.scheme == "https" else http.client.HTTPConnection
        conn = cls(url.hostname, url.port, timeout=self.timeout)
        try:
            try:
                conn.request(method, url.path + target, body=data, headers=dict(headers))
            except (BrokenPipeError, ConnectionResetError):
                # a server may answer (413) and close before reading a large body: its answer is still there
                try:
                    r = conn.getresponse()
                except Exception:       # noqa: BLE001 - no answer after all: the send's own error is the story
                    raise ConnectionResetError("the connection closed while the request was sent") from None
            else:
                r = conn.getresponse()
            return r.status, r.getheader("Content-Type", ""), r.read()
        finally:
            conn.close()

    def _request(self, method: str, path: str, body: Any = None, query: Mapping[str, str] | None = None,
                 accept: str = "application/json", content_type: str = "application/json") -> tuple[int, str, bytes]:
        target = path + ("?" + urllib.parse.urlencode(query) if query else "")
        data = None
        headers = {**self.headers, "Accept": accept}
        if body is not None:
            data = body if isinstance(body, bytes) else dumps(body)
            headers["Content-Type"] = content_type
        attempt = 0
        while True:
            try:
                status, ctype, payload = self._send(method, target, data, headers)
            except Exception as e:          # noqa: BLE001 - sorted into retry / timeout / other below
                if _is_timeout(e):
                    raise ServiceUnavailable(f"{method} {path}: no answer within {self.timeout} s") from e
                if not _is_connection_error(e):
                    raise
                if attempt >= self.retries:
                    raise ServiceUnavailable(f"{method} {self.base_url}{target}: cannot connect after {attempt + 1} "
                                             f"attempt(s): {type(e).__name__}: {e}") from e
                time.sleep(self.backoff * (2 ** attempt))
                attempt += 1
                continue
            if status >= 400:
                raise _problem_error(status, payload, method, path, len(data or b""), self._limits)
            return status, ctype, payload

    def _json(self, method: str, path: str, body: Any = None, query=None) -> Any:
        status, ctype, payload = self._request(method, path, body, query)
        try:
            return orjson.loads(payload)
        except orjson.JSONDecodeError:
            raise CalcServiceError(f"{method} {path}: the answer is not JSON ({ctype})", status) from None

    # ------------------------------------------------------------------ metadata
    def health(self) -> dict:
        return self._json("GET", "/v1/health")

    def constants(self) -> dict:
        return self._json("GET", "/v1/constants")["constants"]

    def limits(self, refresh: bool = False) -> dict[str, int]:
        """The service's published limits by name (``GET /v1/limits``), fetched once; the defaults of a
        service that does not publish them."""
        if self._limits is None or refresh:
            limits = dict(DEFAULT_LIMITS)
            try:
                published = self._json("GET", "/v1/limits").get("limits") or {}
            except CalcServiceError as e:
                if e.status != 404:
                    raise
                published = {}
            for name, entry in published.items():
                value = entry.get("value") if isinstance(entry, Mapping) else entry
                if isinstance(value, int) and not isinstance(value, bool):
                    limits[name] = value
            self._limits = limits
        return self._limits

    def calculations(self, refresh: bool = False) -> dict[str, dict]:
        """Every calculation's declaration by name (fetched once, then cached)."""
        if self._catalogue is None or refresh:
            listing = self._json("GET", "/v1/calculations")["calculations"]
            self._catalogue = {c["name"]: c for c in listing}
        return self._catalogue

    def declaration(self, name: str) -> dict:
        calcs = self.calculations()
        if name not in calcs:
            calcs = self.calculations(refresh=True)
        if name not in calcs:
            # the names it has are said where str() shows them (the detail), not only in an unprinted message
            known = f"the service has {', '.join(calcs)}"
            raise CalcServiceError(f"the service has no calculation {name!r}; {known}", 404,
                                   {"status": 404, "detail": f"there is no calculation {name!r}; {known}",
                                    "errors": {"calculation": [f"unknown: {name!r}"]}})
        return calcs[name]

    # ------------------------------------------------------------------ one system
    def request_body(self, name: str, inputs: Mapping[str, Any], **options) -> dict:
        """The JSON body the client would send for ``inputs`` and options."""
        decl = self.declaration(name)
        kinds = {i["name"]: i for i in decl["inputs"]}
        body = {k: _encode(v, kinds.get(k)) for k, v in inputs.items()}
        body.update(_options(**options))
        implied = _ufloat_correlations(inputs, body.get("correlations"))
        if implied:
            body["correlations"] = [*(body.get("correlations") or []), *implied]
        return body

    def calculate(self, name: str, /, *, uncertainty: Any = None, correlations: Any = None,
                  units: Mapping[str, str] | None = None, time_format: str | None = None, method: str | None = None,
                  samples: int | None = None, seed: int | None = None, covariance: bool = False,
                  **inputs) -> Result:
        """One calculation on one system: the response dict of the wire contract (a :class:`Result`).

        ``uncertainty`` is the contract's object (or give ``method``/``samples``/``seed``);
        ``correlations`` a list of {"between": [a, b], "rho": r} or a mapping {(a, b): r};
        ``units`` asks for outputs in other units; ``covariance=True`` for the outputs'
        correlation (then ``.ufloats()`` gives correlated values); ``budget=True`` adds to each output
        its ``budget``, the share of its variance from each input (any other top-level member of the
        wire contract goes into the body as given).
        """
        body = self.request_body(name, inputs, uncertainty=uncertainty, correlations=correlations, units=units,
                                 time_format=time_format, method=method, samples=samples, seed=seed,
                                 covariance=covariance)
        return Result(self._json("POST", self.declaration(name)["path"], body))

    def report(self, name: str, /, format: str = "latex", **kwargs) -> str:
        """The derivation report (``format`` "latex" or "markdown") as text, computed again from the inputs.

        Monte Carlo draws again: give ``seed=`` (an earlier answer's ``["uncertainty"]["seed"]``) for the
        numbers of that answer.
        """
        _one_of("format", format, REPORTS, "report gives", "figure() draws svg and png")
        body, path = self._body_and_path(name, kwargs)
        _, _, payload = self._request("POST", path, body, {"format": format}, accept="text/*")
        return payload.decode("utf-8")

    def figure(self, name: str, /, format: str = "svg", plot: str | None = None, **kwargs) -> bytes:
        """A figure (``format`` "svg" or "png"): the time-series curve, or the histogram of output ``plot``."""
        _one_of("format", format, FIGURES, "figure draws", "report() gives latex and markdown")
        body, path = self._body_and_path(name, kwargs)
        query = {"format": format, **({"plot": plot} if plot else {})}
        _, _, payload = self._request("POST", path, body, query, accept="image/*")
        return payload

    def _body_and_path(self, name, kwargs):
        opts = {k: kwargs.pop(k) for k in ("uncertainty", "correlations", "units", "time_format", "method",
                                           "samples", "seed") if k in kwargs}
        return self.request_body(name, kwargs, **opts), self.declaration(name)["path"]

    # ------------------------------------------------------------------ many systems
    def batch(self, name: str, data: Any, /, *, units: Mapping[str, str] | None = None,
              output_units: Mapping[str, str] | None = None, uncertainty: Any = None, correlations: Any = None,
              time_format: str | None = None, method: str | None = None, samples: int | None = None,
              seed: int | None = None, covariance: bool = False, keep: Sequence[str] = (), strict: bool = True,
              progress: bool | None = None) -> BatchResult:
        """Many systems in one call; the catalogue is split to the service's limits and put back in order.

        ``data`` is an astropy ``Table``/``QTable`` (units from the columns, masked entries missing),
        a pandas ``DataFrame`` (units from ``units=``, from ``NAME[unit]`` column names or from
        ``df.attrs["units"]``), a mapping of columns (Quantity arrays, plain arrays in the inputs'
        default units, ``(values, sigmas)`` tuples, contract column objects, or one value for all),
        or a list of rows (one mapping per system).  ``NAME_sigma`` (``NAME_sigma_minus`` and
        ``NAME_sigma_plus``) columns hold uncertainties, in NAME's unit unless they carry their own.
        A table that gives no unit for a dimensional input is refused before anything is sent.
        Missing values (NaN, masked, None) are not given: a system missing a required input gets its error
        in place, one missing an optional input is answered without it.

        ``units`` gives the unit of a table's columns ({column: unit}); ``output_units`` asks
        for outputs in other units (the contract's ``units`` option).  ``keep`` names columns of
        the caller's table to carry into the result (an identifier); other columns that are no
        input are refused unless ``strict=False``.  ``covariance=True`` adds the outputs' correlation.
        """
        decl = self.declaration(name)
        opts = _options(uncertainty=uncertainty, correlations=correlations, units=output_units,
                        time_format=time_format, method=method, samples=samples, seed=seed, covariance=covariance)
        path = "/v1/batch/" + name
        show = self.progress if progress is None else progress
        if _is_list(data) and not _is_rows(data):
            k, row = next((k, row) for k, row in enumerate(data) if not isinstance(row, Mapping))
            raise InvalidInput(f"systems.{k}: a system of a list of rows is a mapping of inputs to values "
                               f"({{\"period\": 41.6, \"k1\": (38.2, 0.4), ...}}), not {type(row).__name__}; a batch "
                               "also takes an astropy Table or QTable, a pandas DataFrame or a mapping of columns")
        if _is_rows(data):
            if not data:        # as the service refuses it: nothing would be sent, nor any option checked
                raise InvalidInput("systems: the list of rows is empty: give at least one system")
            if units:
                raise InvalidInput("units: units= gives the units of a table's columns; a list of rows gives each "
                                   "input's unit in its row (output_units= asks for outputs in other units)")
            if keep:
                raise InvalidInput("keep: keep= carries columns of a table into the answer; a list of rows has none")
            return self._batch_rows(path, decl, list(data), opts, show)
        table = InputTable.from_data(data, decl, units=units, keep=keep, strict=strict)
        if table.count == 0:
            raise InvalidInput("columns: the table has no rows: give at least one system")
        return self._batch_columns(path, table, opts, show)

    def _rows_per_request(self, opts: Mapping[str, Any]) -> int:
        return rows_per_request(self.limits(), opts)

    def _sliced(self, n: int, encode, opts, post, bar) -> list[tuple[int, int, Any]]:
        """Consecutive slices of ``n`` systems, each within the row and body limits, as (start, stop,
        ``post(encode(start, stop))``).

        The options say whether a request draws Monte Carlo (:func:`rows_per_request`); its systems may
        too (an inclination "isotropic", inputs given as samples), which the service knows and the
        client does not guess: where it refuses a slice for its draws (413, ``max_batch_draws``), the
        slices are cut again for the draws of a Monte Carlo request and the slice is sent again."""
        per = self._rows_per_request(opts)
        max_bytes = self.limits()["max_body_bytes"]
        parts: list[tuple[int, int, Any]] = []
        start = 0
        while start < n:
            stop = min(n, start + per)
            body = encode(start, stop)
            while len(body) > max_bytes and stop - start > 1:
                # shrink to what fits, with a margin for rows longer than the average
                per = max(1, min(stop - start - 1, int((stop - start) * 0.9 * max_bytes / len(body))))
                stop = start + per
                body = encode(start, stop)
            try:
                answer = post(body)
            except CalcServiceError as e:
                per = slice_for_draws(e, stop - start, self.limits(), opts)
                if per is None:
                    raise
                continue
            parts.append((start, stop, answer))
            if bar is not None:
                bar.update(stop - start)
            start = stop
        return parts

    def _bar(self, n: int, show: bool | None, opts: Mapping[str, Any]):
        """A tqdm bar when asked for, or by default on a terminal for a catalogue of several requests."""
        if show is None:
            show = (n > self._rows_per_request(opts) and sys.stderr is not None
                    and hasattr(sys.stderr, "isatty") and sys.stderr.isatty())
        if not show:
            return None
        try:
            from tqdm.auto import tqdm
        except ImportError:
            return None
        return tqdm(total=n, unit="system", desc="calcservice", leave=False)

    def _batch_columns(self, path: str, table: "InputTable", opts: dict, show) -> BatchResult:
        n = table.count
        # the outputs' correlation travels in JSON answers only
        arrow = self.transport == "arrow" and not opts.get("covariance")
        if arrow:
            from .tables import decode_answer, encode_request
            # one value for every system (and a series) goes with the options, as a table holds a value per system
            shared = table.shared()

            def encode(a, b):
                return encode_request({"columns": {k: v for k, v in table.json(a, b).items() if k not in shared}},
                                      ARROW)
            query = {"options": dumps({**opts, **shared}).decode("utf-8")} if opts or shared else None
        else:
            _no_infinity(table)
            encode = lambda a, b: dumps({"columns": table.json(a, b), **opts})  # noqa: E731
        sent = []

        def post(body):
            if not arrow:
                return self._json("POST", path, body)
            _, _, payload = self._request("POST", path, body, query, accept=ARROW, content_type=ARROW)
            sent.append(True)
            return decode_answer(payload, ARROW)

        bar = self._bar(n, show, opts)
        try:
            parts = self._sliced(n, encode, opts, post, bar)
        except CalcServiceError as e:
            if not arrow or e.status not in (406, 415) or sent:
                raise
            # a service that does not take tables: the catalogue goes as JSON (a new request, not a retry)
            self.transport = "json"
            return self._batch_columns(path, table, opts, show)
        finally:
            if bar is not None:
                bar.close()
        out = merge_results([(a, b, from_columns_answer(answer, b - a)) for a, b, answer in parts], n)
        out.kept = table.kept
        return out

    def _batch_rows(self, path: str, decl: Mapping, rows: list, opts: dict, show) -> BatchResult:
        kinds = {i["name"]: i for i in decl["inputs"]}
        # a missing value (None, NaN, masked) is not given, as a table's missing cell is: the service refuses null
        encoded = [{k: e for k, v in row.items() if (e := _encode(v, kinds.get(k))) is not None} for row in rows]
        bar = self._bar(len(rows), show, opts)
        try:
            parts = self._sliced(len(rows), lambda a, b: dumps({"systems": encoded[a:b], **opts}), opts,
                                 lambda body: _from_rows(self._json("POST", path, body), decl), bar)
        finally:
            if bar is not None:
                bar.close()
        return merge_results(parts, len(rows))


def slice_for_draws(error, sent: int, limits: Mapping[str, int], opts: Mapping[str, Any]) -> int | None:
    """The smaller slice to send again after ``error`` refused a slice of ``sent`` systems for its
    Monte Carlo draws (413, ``max_batch_draws``): systems may draw whatever the options say (an
    inclination "isotropic", inputs given as samples), which the service knows and a caller does not
    guess, so the slices are cut for the draws of a Monte Carlo request.  None for any other error, or
    where such a slice is no smaller (the refusal stands)."""
    if error.status != 413 or (error.limit or {}).get("name") != "max_batch_draws":
        return None
    mc = {**opts, "uncertainty": {**(opts.get("uncertainty") or {}), "method": "monte_carlo"}}
    per = rows_per_request(limits, mc)
    return per if per < sent else None


def rows_per_request(limits: Mapping[str, int], opts: Mapping[str, Any]) -> int:
    """How many systems one batch request may hold under ``limits`` with these options (rows, and for
    Monte Carlo systems x draws)."""
    rows = int(limits.get("max_batch_rows", DEFAULT_LIMITS["max_batch_rows"]))
    unc = opts.get("uncertainty") if isinstance(opts.get("uncertainty"), Mapping) else {}
    implied = "monte_carlo" if "samples" in unc or "seed" in unc else "linear"     # as the service reads it
    method = unc.get("method", implied)
    if isinstance(method, str) and method.replace("-", "_") == "monte_carlo":
        # a count that is no whole number is the service's to refuse, naming it: the default here
        samples = unc.get("samples")
        draws = samples if type(samples) is int and samples > 0 else \
            int(limits.get("default_samples", DEFAULT_LIMITS["default_samples"]))
        rows = min(rows, int(limits.get("max_batch_draws", DEFAULT_LIMITS["max_batch_draws"])) // max(1, draws))
    return max(1, rows)


# --------------------------------------------------------------------------- tables in
def _is_list(data) -> bool:
    return isinstance(data, Sequence) and not isinstance(data, (str, bytes, Mapping))


def _is_rows(data) -> bool:
    return _is_list(data) and all(isinstance(r, Mapping) for r in data)


def _one_of(field: str, value: Any, allowed: Iterable[str], does: str, instead: str) -> None:
    """:class:`InvalidInput` naming ``field`` unless ``value`` is one of ``allowed``."""
    allowed = list(allowed)
    if value not in allowed:
        raise InvalidInput(f"{field}: {does} {' or '.join(allowed)}, not {str(value)[:40]!r} ({instead})")


def _is_astropy_table(data) -> bool:
    return hasattr(data, "colnames") and hasattr(data, "columns") and hasattr(data, "meta")


def _is_dataframe(data) -> bool:
    return hasattr(data, "columns") and hasattr(data, "dtypes") and hasattr(data, "to_numpy") and hasattr(data, "attrs")


class InputTable:
    """A catalogue in the service's columns, ready to be sent in slices.

    ``columns`` maps each input to {"value": array, "sigma"/"sigma_minus"/"sigma_plus": float array,
    "unit": str} (NaN or None where missing), or to one value for every system.
    """

    def __init__(self, count: int, columns: dict[str, Any], kept: dict[str, Any] | None = None):
        self.count = count
        self.columns = columns
        self.kept = kept or {}
        # rows a text file's reader could not read (more or fewer cells than the header), by index:
        # answered with the reason in place (calcservice.tables.ragged_rows)
        self.refused: dict[int, str] = {}

    @classmethod
    def from_data(cls, data: Any, decl: Mapping[str, Any], units: Mapping[str, str] | None = None,
                  keep: Sequence[str] = (), strict: bool = True, require_units: bool | None = None) -> "InputTable":
        """``data`` (see :meth:`Client.batch`) for the calculation declared by ``decl`` (its entry of
        ``/v1/calculations``).  ``require_units``: refuse a dimensional column with no unit (default: for
        Tables and DataFrames; a file read by the command line takes the input's default unit instead)."""
        inputs = {i["name"]: i for i in decl["inputs"]}
        if isinstance(keep, str):
            keep = [name.strip() for name in keep.split(",")]      # as the service's ?keep=star,hip
        keep = list(keep) if isinstance(keep, (list, tuple, set, frozenset)) else [] if keep is None else keep
        if not isinstance(keep, list) or not all(isinstance(name, str) for name in keep):
            raise InvalidInput(f"keep: keep= names columns of the table, as a list of names or 'star,hip', not "
                               f"{keep!r:.60}")
        refused = kept_name_errors(decl["name"], inputs, [o["name"] for o in decl.get("outputs", ())], keep)
        if refused:
            # an input's column kept would go unread; one named like an answer's column would be overwritten
            raise InvalidInput("keep: " + "; ".join(refused))
        if units is not None and not isinstance(units, Mapping):
            raise InvalidInput(f"units: units= maps a column to its unit ({{'period': 'd'}}), not {type(units).__name__}")
        units = dict(units or {})
        is_table = _is_astropy_table(data) or _is_dataframe(data)
        if require_units is None:
            require_units = is_table
        if _is_astropy_table(data):
            items = [(str(k), data[k]) for k in data.colnames]
        elif _is_dataframe(data):
            items = [(str(k), data[k]) for k in data.columns]
            given = data.attrs.get("units") or {}
            if not isinstance(given, Mapping):
                raise InvalidInput("units: the DataFrame's attrs['units'] maps a column to its unit "
                                   f"({{'period': 'd'}}), "
                                   f"not {type(given).__name__}")
            units = {**given, **units}
        elif isinstance(data, Mapping):
            items = [(str(k), v) for k, v in data.items()]
        else:
            # a file name: the table is one line away, and astropy reads its units, which a guess would not
            hint = (f": read the file first, QTable.read({str(data)!r}) (astropy.table; its units come along)"
                    if isinstance(data, (str, os.PathLike)) else "")
            raise TypeError(f"a batch takes a Table, a DataFrame, a mapping of columns or a list of rows, "
                            f"not {type(data).__name__}{hint}")
        for label, unit in units.items():
            units[label] = unit_text(unit, "units", f"the unit of {label!r}")
            if split_unit(label)[0] not in inputs and column_role(split_unit(label)[0], inputs) is None:
                raise InvalidInput(f"units: {label!r} is no input of {decl['name']} (inputs: {', '.join(inputs)}); "
                                 "ask for outputs in other units with output_units=")
        kept: dict[str, Any] = {}
        parts: dict[str, dict[str, tuple[str, Any, str | None]]] = {}
        scalars: dict[str, Any] = {}
        unknown = []
        for label, col in items:
            col = _quantity_list(col, label)
            if label in keep:
                kept[label] = col
                continue
            name, label_unit = split_unit(label)
            role = column_role(name, inputs)
            if role is None:
                unknown.append(label)
                continue
            base, member = role
            if member in parts.get(base, {}):
                raise InvalidInput(f"{label}: the column {column_name(base, member)!r} is given twice")
            spec = inputs[base]
            if member != "value" and spec.get("kind", "quantity") != "quantity":
                raise InvalidInput(f"{label}: {base} takes no uncertainty")
            # a header's empty brackets (period[]) say dimensionless, as a unit of "" does, not "no unit given"
            unit = _unit_of(col) or (label_unit if label_unit is not None else units.get(label) or units.get(name))
            if member == "value" and unit is None:
                unit = units.get(base)
            # in a mapping, a series input's list is the series, the same for every system
            if not is_table and member == "value" and (not _is_column(col) or spec.get("kind") == "series"):
                scalars[base] = col
                continue
            parts.setdefault(base, {})[member] = (label, col, unit)
        missing_keep = [k for k in keep if k not in kept]
        if missing_keep:
            raise InvalidInput(f"keep: the table has no column {missing_keep[0]!r}")
        if unknown and strict:
            raise InvalidInput(f"{unknown[0]}: {decl['name']} has no input {split_unit(unknown[0])[0]!r} "
                             f"(inputs: {', '.join(inputs)}; NAME_sigma for uncertainties; keep= to carry a column "
                             "along, strict=False to leave the others out)")
        correlated = correlated_columns({base: list(members["value"][1]) for base, members in parts.items()
                                         if "value" in members and uncertain_parts(members["value"][1]) is not None})
        if correlated:
            raise InvalidInput(f"{correlated[0]}: {correlated[1]}")
        count = None
        columns: dict[str, Any] = {}
        no_unit: list[_NoUnit] = []
        for base, members in parts.items():
            if "value" not in members:
                if base in scalars:
                    raise InvalidInput(f"{base}: sigmas of a column need the column itself, not one value for all")
                raise InvalidInput(f"{next(iter(members.values()))[0]}: sigmas given without the column {base}")
            label, col, unit = members["value"]
            spec = inputs[base]
            try:
                entry = _column_entry(spec, label, col, unit, require_units)
            except _NoUnit as e:
                no_unit.append(e)          # every such column is named at once, not one per try
                continue
            n = len(entry["value"])
            for member in ("sigma", "sigma_minus", "sigma_plus"):
                # a tuple's or a column object's sigmas: one for every system, or one per system
                if member in entry and np.ndim(entry[member]) == 0:
                    entry[member] = np.full(n, entry[member], dtype=float)
                elif member in entry and len(entry[member]) != n:
                    raise InvalidInput(f"{label}: {len(entry[member])} values of {member} where it has {n} values")
            if count is not None and n != count:
                raise InvalidInput(f"{label}: {n} values where the other columns have {count}")
            count = n
            missing = _is_missing(entry["value"])
            for member in ("sigma", "sigma_minus", "sigma_plus"):
                if member in members:
                    s_label, s_col, s_unit = members[member]
                    sig = _sigma_array(s_label, s_col, s_unit, entry.get("unit"))
                    if len(sig) != n:
                        raise InvalidInput(f"{s_label}: {len(sig)} values where {label} has {n}")
                    sig[missing] = np.nan     # no sigma without a value: the service then says the value is missing
                    entry[member] = sig
            columns[base] = entry
        if len(no_unit) == 1:
            raise no_unit[0]
        if no_unit:
            names = [e.spec["name"] for e in no_unit]
            message = (f"{no_unit[0].label}: the table gives no unit to {len(no_unit)} dimensional inputs, "
                       + ", ".join(f"{e.spec['name']} (default unit {e.spec['unit']!r})" for e in no_unit)
                       + ": give the columns units, name them " + ", ".join(f"{e.spec['name']}[{e.spec['unit']}]"
                                                                          for e in no_unit)
                       + ", or pass units={" + ", ".join(f"{n!r}: ..." for n in names) + "}")
            error = InvalidInput(message)
            error.errors = {e.label: [str(e)] for e in no_unit}
            error.problem["errors"] = error.errors
            raise error
        for base, value in scalars.items():
            columns[base] = _encode(value, inputs[base])
        if count is None:
            raise InvalidInput(f"no column of {decl['name']}'s inputs in the table ({', '.join(inputs)})")
        for label, col in kept.items():
            if len(col) != count:
                raise InvalidInput(f"{label}: {len(col)} values where the inputs have {count}")
        return cls(count, columns, kept)

    def shared(self) -> dict:
        """The inputs given once for every system (as the JSON of the wire contract)."""
        return {k: v for k, v in self.columns.items()
                if not (isinstance(v, dict) and isinstance(v.get("value"), np.ndarray))}

    def json(self, start: int, stop: int) -> dict:
        """Systems ``start:stop`` as the ``columns`` member of a JSON batch body (NaN as null)."""
        out = {}
        for name, entry in self.columns.items():
            if not isinstance(entry, dict) or not isinstance(entry.get("value"), np.ndarray):
                out[name] = entry
                continue
            col = {k: (v[start:stop] if isinstance(v, np.ndarray) else v) for k, v in entry.items()}
            if col["value"].dtype == object:
                col["value"] = col["value"].tolist()
            out[name] = col
        return out


def _no_infinity(table: "InputTable") -> None:
    """An infinite cell refused before a JSON body is sent, naming its column and system: JSON has no infinity,
    the encoder writes null, and the service would say the value was not given (an Arrow body carries it, and the
    service answers that system as not finite)."""
    for name, member, v, where in infinite_cells(table.columns):
        k = int(where[0])
        label = name if member == "value" else f"{name}_{member}"
        raise InvalidInput(f"{name}: {label} of system {k} is {v[k]}, not a finite number (JSON has no "
                           "infinity): give a finite number, or NaN for a value not given")


def _is_column(col) -> bool:
    if isinstance(col, (str, bytes, Mapping)):
        return isinstance(col, Mapping) and isinstance(col.get("value"), (list, np.ndarray))
    if isinstance(col, tuple):
        return len(col) > 0 and _is_column(col[0])
    if hasattr(col, "shape"):
        return len(getattr(col, "shape")) >= 1
    return isinstance(col, (list, Sequence))


def _to_array(col: Any, label: str) -> np.ndarray:
    """A caller's column as :func:`calcservice.columns.column_array` reads it; what it refuses (booleans, a
    number only lenient readers take) is the client's InvalidInput, named by ``label``."""
    try:
        return column_array(col, label)
    except InvalidInput:
        raise
    except ValueError as e:
        raise InvalidInput(str(e)) from None
    except TypeError:           # numpy's, of entries it cannot hold (lists of Quantities in a list)
        raise InvalidInput(f"{label}: a column is one number (or text) per system") from None


def _is_missing(arr: np.ndarray) -> np.ndarray:
    if arr.dtype.kind == "f":
        return np.isnan(arr)
    return np.array([v is None for v in arr.tolist()], dtype=bool)


def _column_entry(spec: Mapping[str, Any], label: str, col: Any, unit: str | None, require_unit: bool) -> dict:
    entry: dict[str, Any] = {}
    parts = uncertain_parts(col) if spec.get("kind", "quantity") == "quantity" else None
    if parts is not None:               # uncertainties numbers: their nominal values and standard deviations
        col = (parts[0], parts[1], unit) if unit else parts
    if isinstance(col, tuple):          # (values, sigmas[, sigma_plus][, unit])
        parts = list(col)
        if parts and (isinstance(parts[-1], str) or _is_unit(parts[-1])):
            unit = unit_text(parts.pop(), label)
        if len(parts) not in (1, 2, 3):
            raise InvalidInput(f"{label}: a tuple column is (values, sigmas) or (values, sigma_minus, sigma_plus)")
        col = parts[0]
        unit = _unit_of(col) or unit
        for member, extra in zip(("sigma", ) if len(parts) == 2 else ("sigma_minus", "sigma_plus"), parts[1:]):
            entry[member] = _sigma_array(label, extra, _unit_of(extra), unit)
    elif isinstance(col, Mapping):       # a contract column object
        col = _object_quantities(col, label, spec)
        entry = {k: (_to_array(v, label) if isinstance(v, (list, np.ndarray)) else v) for k, v in col.items()}
        if "value" not in entry:
            raise InvalidInput(f"{label}: a column object needs \"value\"")
        return entry
    values = _to_array(col, label)
    if values.ndim != 1:
        raise InvalidInput(f"{label}: a column is one value per system (got shape {values.shape})")
    kind = spec.get("kind", "quantity")
    if kind == "series":
        raise InvalidInput(f"{label}: {spec['name']} is a list for each system; give it as one value for all")
    if kind == "integer" and values.dtype.kind == "f":
        # a whole count read as a float (a column with a missing entry) goes as the integer; 3.5 goes as it
        # is, for the service to refuse naming the input, never cut to 3
        values = np.array([None if math.isnan(v) else int(v) if v.is_integer() and abs(v) < 2 ** 53 else v
                           for v in values.tolist()], dtype=object)
    # a time is a Julian Date (or MJD with time_format) without a unit: nothing to guess there
    if (require_unit and unit is None and kind == "quantity" and spec.get("unit") and not spec.get("time")
            and not (values.dtype == object and all(v is None or isinstance(v, str) for v in values.tolist()))):
        raise _NoUnit(label, spec)
    entry["value"] = values
    if unit is not None and kind == "quantity":
        entry["unit"] = unit
    return entry


def _object_quantities(col: Mapping[str, Any], label: str, spec: Mapping[str, Any]) -> dict:
    """A contract column object's Quantity members in numbers of the object's unit: the value's (its own unit
    where the object gives none), each sigma's converted to the value's (the input's default unit without one)."""
    col = dict(col)
    if col.get("unit") is not None:
        col["unit"] = unit_text(col["unit"], label, "its unit")
    value = col.get("value")
    if _unit_of(value) is not None:
        from astropy import units as u
        col.setdefault("unit", _unit_of(value))
        try:
            col["value"] = value.to(u.Unit(col["unit"]))
        except (u.UnitConversionError, ValueError, TypeError):
            raise InvalidInput(f"{label}: its value's unit {_unit_of(value)!r} does not convert to its unit "
                               f"{col['unit']!r}") from None
    for member in ("sigma", "sigma_minus", "sigma_plus"):
        if _unit_of(col.get(member)) is not None:
            target = col.get("unit") if col.get("unit") is not None else spec.get("unit")
            col[member] = _sigma_array(label, col[member], _unit_of(col[member]), target)
    return col


def _sigma_array(label: str, col: Any, unit: str | None, value_unit: str | None) -> np.ndarray:
    arr = _to_array(col, label)
    if arr.dtype.kind != "f" or arr.ndim > 1:       # a 2-D one was a pyarrow ArrowInvalid, or a sigma per cell refused
        raise InvalidInput(f"{label}: a sigma column holds numbers, one per system")
    arr = np.array(arr, dtype=float)
    if unit is not None and unit != (value_unit or ""):
        from astropy import units as u
        try:
            arr = arr * u.Unit(unit).to(u.Unit(value_unit or ""))
        except u.UnitConversionError:
            raise InvalidInput(f"{label}: its unit {unit!r} does not convert to the value's "
                             f"{value_unit or 'dimensionless'!r}") from None
        except (ValueError, TypeError):         # a unit astropy cannot read ('blah' in a file), either one
            raise InvalidInput(f"{label}: its unit {unit!r} or its value's {value_unit!r} is not a unit astropy "
                               "can read") from None
    return arr


# --------------------------------------------------------------------------- encoding
def _json_default(o):
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, np.generic):
        return plain_number(o)
    if isinstance(o, (_dt.datetime, _dt.date)):
        return o.isoformat()
    raise TypeError(f"cannot send {type(o).__name__} as JSON")


def dumps(body: Any) -> bytes:
    """A request body as JSON bytes: numpy arrays as lists, NaN as null (a missing value)."""
    try:
        return orjson.dumps(body, default=_json_default, option=orjson.OPT_SERIALIZE_NUMPY | orjson.OPT_NON_STR_KEYS)
    except TypeError as e:
        if "64-bit" not in str(e):
            raise
        # an integer beyond 64 bits (a seed of 2**70): sent exactly, for the service to name the field
        return json.dumps(body, default=_json_default, separators=(",", ":")).encode()


def _plain(x):
    """numpy scalars and arrays as Python numbers and lists (an astropy Quantity as it is: its numbers alone
    would lose its unit)."""
    if isinstance(x, np.generic):
        return plain_number(x)
    if hasattr(x, "tolist") and not isinstance(x, (str, bytes)) and not _is_quantity(x):
        dtype = getattr(x, "dtype", None)
        if isinstance(dtype, np.dtype) and dtype.kind == "f" and dtype.itemsize < 8:     # float16, float32
            if np.ma.isMaskedArray(x):
                return np.ma.masked_array(as_doubles(np.ma.getdata(x)), mask=np.ma.getmaskarray(x)).tolist()
            return as_doubles(x).tolist()
        return x.tolist()
    return x


def _is_quantity(x: Any) -> bool:
    return hasattr(x, "unit") and hasattr(x, "value") and hasattr(getattr(x, "unit"), "to_string")


def _quantity_list(col: Any, label: str) -> Any:
    """A list of astropy Quantities (one per system, or a system's samples) as one Quantity array, in the
    first one's unit (what astropy makes of it); one that mixes Quantities with plain numbers, or units of
    different kinds, is refused naming ``label``.  Anything else as it is."""
    if not isinstance(col, list) or not any(_is_quantity(v) and np.ndim(v) == 0 for v in col):
        return col
    from astropy import units as u
    try:
        out = u.Quantity(list(col))
    except (u.UnitsError, TypeError, ValueError, OverflowError):     # an integer beyond a double among them too
        out = None
    if out is None or np.iscomplexobj(out):       # a complex number among them: no JSON value (the encoder's TypeError)
        raise InvalidInput(f"{label}: a list of Quantities must give each entry as a Quantity of one kind of unit "
                           "(or give one Quantity array)")
    return out


def _encode(value: Any, decl: Mapping[str, Any] | None) -> Any:
    """One input in a form of the wire contract."""
    kind = (decl or {}).get("kind", "quantity")
    if isinstance(value, list) and kind != "series":
        value = _quantity_list(value, (decl or {}).get("name", "an input"))
    if isinstance(value, (_dt.datetime, _dt.date)):          # pandas' Timestamp too, whose unit is no astropy unit
        return value.isoformat()
    if isinstance(value, np.datetime64):        # numpy's date: its ISO text (NaT: not given); its tolist() counts ns
        return None if np.isnat(value) else str(np.datetime_as_string(value))
    if hasattr(value, "unit") and hasattr(value, "value") and not isinstance(value, Mapping):
        # an astropy Quantity: its number in its own unit; a Masked one's masked entries are missing (null), as a
        # numpy masked array's are, not the numbers under the mask
        numbers = value.value
        if hasattr(value, "unmasked") and hasattr(value, "mask"):
            numbers = np.ma.masked_array(value.unmasked.value, mask=np.asarray(value.mask))
        v = _plain(numbers)
        _finite(v, decl)            # an infinite Quantity would be written as null, said to be missing
        unit = unit_text(value.unit, (decl or {}).get("name", "an input"))
        if kind == "series":
            return {"value": v, "unit": unit}
        return {"samples": v, "unit": unit} if isinstance(v, list) else {"value": v, "unit": unit}
    if _is_ufloat(value) and kind == "quantity":
        # an uncertainties number (a fit's result): its nominal value and standard deviation
        _finite(value.nominal_value, decl)
        _finite(value.std_dev, decl)
        # to 15 significant digits: a sigma of sqrt(0.25) arrives as 0.49999999999999994, binary noise the
        # report would print as the caller's own digits
        return {"value": _digits15(value.nominal_value), "sigma": _digits15(value.std_dev)}
    if isinstance(value, tuple):
        parts, unit = _tuple_parts(value, decl)
        for p in parts:
            _finite(p, decl)
            _json_number(p, decl)
        if len(parts) == 2:
            out = {"value": parts[0], "sigma": parts[1]}
        elif len(parts) == 3:
            out = {"value": parts[0], "sigma_minus": parts[1], "sigma_plus": parts[2]}
        else:
            raise InvalidInput(f"{decl.get('name') if decl else 'an input'}: a tuple is (value, sigma) or "
                             "(value, sigma_minus, sigma_plus), optionally with a unit string last")
        if unit:
            out["unit"] = unit
        return out
    value = _plain(value)
    if isinstance(value, float) and math.isnan(value):
        return None
    _finite(value, decl)
    if isinstance(value, Mapping):          # the contract's object: its numbers are no more infinite than a bare one
        if value.get("unit") is not None and not isinstance(value["unit"], str):
            value = {**value, "unit": unit_text(value["unit"], (decl or {}).get("name", "an input"), "its unit")}
        for member in ("value", "sigma", "sigma_minus", "sigma_plus", "samples"):
            if hasattr(value.get(member), "unit") and hasattr(value.get(member), "value"):
                raise InvalidInput(f"{(decl or {}).get('name', 'an input')}: its {member} is an astropy Quantity "
                                   "inside the contract's object: give the Quantity as the input itself, a (value, sigma) "
                                   'tuple of Quantities, or plain numbers with "unit"')
            if member != "samples":
                _finite(_plain(value.get(member)), decl)
                _json_number(_plain(value.get(member)), decl)
        _json_values({k: _plain(v) for k, v in value.items()}, (decl or {}).get("name", "an input"))
    if isinstance(value, list):
        for v in value:
            _json_number(_plain(v), decl)
    if isinstance(value, list) and kind == "quantity":
        return {"samples": value}
    if value is not None and not isinstance(value, (str, int, float, list, Mapping)):
        # a complex number, a set: JSON has no such value (the encoder's TypeError named no input)
        raise InvalidInput(f"{(decl or {}).get('name', 'an input')}: a {type(value).__name__} is no value of the wire "
                           "contract (a number, a (value, sigma) tuple, a Quantity, a list of samples or a string)")
    return value


def _tuple_parts(value: tuple, decl: Mapping[str, Any] | None) -> tuple[list, str | None]:
    """A (value, sigma[, sigma_plus][, unit]) tuple's numbers and unit: the unit a string or an astropy unit,
    or the parts all Quantities (each sigma in the value's unit)."""
    name = (decl or {}).get("name", "an input")
    parts, unit = list(value), None
    if parts and (isinstance(parts[-1], str) or _is_unit(parts[-1])):
        unit = unit_text(parts.pop(), name)
    quantities = [hasattr(p, "unit") and hasattr(p, "value") for p in parts]
    if any(quantities):
        if not all(quantities) or unit is not None:
            raise InvalidInput(f"{name}: a tuple of Quantities carries its units: give each part as a Quantity "
                               "(value, sigma), or plain numbers and a unit last")
        from astropy import units as u
        first = parts[0].unit
        try:
            parts = [parts[0].value] + [p.to_value(first) for p in parts[1:]]
        except u.UnitConversionError:
            raise InvalidInput(f"{name}: the sigma's unit does not convert to the value's "
                               f"{first.to_string()!r}") from None
        unit = first.to_string()
    return [_plain(p) for p in parts], unit


def _is_unit(x: Any) -> bool:
    """An astropy unit (not a Quantity, which has a unit of its own)."""
    return not isinstance(x, str) and hasattr(x, "to_string") and hasattr(x, "physical_type") and not hasattr(x, "unit")


def _digits15(x: float) -> float:
    """A double to the 15 significant digits every double keeps (DBL_DIG): 0.49999999999999994 is 0.5."""
    return float(f"{float(x):.15g}")


def _is_ufloat(x: Any) -> bool:
    return hasattr(x, "nominal_value") and hasattr(x, "std_dev") and hasattr(x, "derivatives")


def _ufloat_correlations(inputs: Mapping[str, Any], given: Any) -> list[dict]:
    """The correlations between the ``uncertainties`` numbers among one system's inputs (K1 and K2 of one
    orbit fit, from ``correlated_values``), so that they travel with their numbers rather than be
    dropped; a pair the caller's ``correlations`` already names is left to the caller's value."""
    names = [k for k, v in inputs.items() if _is_ufloat(v) and v.std_dev > 0]
    if len(names) < 2:
        return []
    from uncertainties import correlation_matrix
    named = {frozenset(c.get("between", ())) for c in (given or []) if isinstance(c, Mapping)
             and isinstance(c.get("between"), (list, tuple))}
    rho = correlation_matrix([inputs[k] for k in names])
    out = []
    for a in range(len(names)):
        for b in range(a + 1, len(names)):
            r = float(rho[a, b])
            if abs(r) > 1e-12 and frozenset((names[a], names[b])) not in named:
                out.append({"between": [names[a], names[b]], "rho": max(-1.0, min(1.0, _digits15(r)))})
    return out


def _finite(x: Any, decl: Mapping[str, Any] | None) -> None:
    """JSON has no infinity: the encoder writes null, and the service would say the number was missing."""
    if isinstance(x, float) and math.isinf(x):
        raise InvalidInput(f"{(decl or {}).get('name', 'an input')}: {x} is not a finite number")


def _options(uncertainty=None, correlations=None, units=None, time_format=None, method=None, samples=None,
             seed=None, covariance=False) -> dict:
    out: dict[str, Any] = {}
    if uncertainty is not None and not isinstance(uncertainty, Mapping):
        raise InvalidInput(f"uncertainty: the uncertainty option is a mapping such as {{\"method\": \"monte_carlo\", "
                           f"\"samples\": 20000}} (or give method=, samples=, seed=), not {type(uncertainty).__name__}")
    unc = dict(uncertainty or {})
    if method is not None:
        # a method that is no string goes as it is: the service refuses it naming uncertainty.method
        unc["method"] = method.replace("-", "_") if isinstance(method, str) else method
    # what is not a whole number goes as it is: the service refuses it naming the option
    if samples is not None:
        unc["samples"] = _whole(samples)
        unc.setdefault("method", "monte_carlo")
    if seed is not None:
        unc["seed"] = _whole(seed)
        unc.setdefault("method", "monte_carlo")
    for key in ("samples", "seed"):
        _finite_option(unc.get(key), f"uncertainty.{key}")
    if unc:
        out["uncertainty"] = unc
    if correlations is not None:
        if isinstance(correlations, Mapping):
            correlations = [{"between": list(pair) if isinstance(pair, (tuple, list, set, frozenset)) else pair,
                             "rho": _plain(rho)}
                            for pair, rho in correlations.items()]
        if isinstance(correlations, (list, tuple)):
            correlations = [dict(c) if isinstance(c, Mapping) else c for c in correlations]
            for k, c in enumerate(correlations):
                _finite_option(_plain(c.get("rho")) if isinstance(c, Mapping) else None, f"correlations.{k}.rho")
        if not (isinstance(correlations, list) and not correlations):
            out["correlations"] = correlations
    if units is not None:
        # an astropy unit is sent as its string, as a batch's column units= takes it
        out["units"] = ({k: unit_text(v, f"units.{k}", f"the unit of {k!r}") for k, v in units.items()}
                        if isinstance(units, Mapping) else units)
    if time_format is not None:             # "" or "MJD" go as they are, for the service to refuse naming them
        out["time_format"] = time_format
    if covariance is not False and covariance is not None:
        out["covariance"] = True if isinstance(covariance, (bool, np.bool_)) and covariance else covariance
    _json_values(out, "")
    return out


def _json_values(x: Any, where: str) -> None:
    """An option's value JSON cannot carry (a Quantity, a Decimal, a date), refused naming it (``where``): the
    encoder's TypeError named none; what JSON carries goes as it is, for the service to judge."""
    if isinstance(x, Mapping):
        for k, v in x.items():
            _json_values(v, f"{where}.{k}" if where else str(k))
    elif isinstance(x, (list, tuple)):
        for k, v in enumerate(x):
            _json_values(v, f"{where}.{k}")
    elif x is not None and not isinstance(x, (str, int, float, np.bool_, np.integer, np.floating, _dt.date)):
        raise InvalidInput(f"{where}: a {type(x).__name__} is no value of this option (give a number, a string, "
                           "true or false, a list or a mapping, as the request's JSON takes them)")


def _json_number(x: Any, decl: Mapping[str, Any] | None) -> None:
    """A part of a tuple or a member of the contract's object that JSON cannot carry (pandas' NA, a Decimal)
    refused naming the input, as the same given alone is (the encoder's TypeError named none)."""
    if x is not None and not isinstance(x, (str, int, float, list, np.generic, _dt.date)):   # a date: its ISO text
        raise InvalidInput(f"{(decl or {}).get('name', 'an input')}: a {type(x).__name__} is no number of the wire "
                           "contract (give a float, or NaN or None for a value not given)")


def _finite_option(x: Any, field: str) -> None:
    """An option's NaN or infinity, which JSON has not (the encoder writes null, which the service would say
    was null), refused naming the option."""
    if isinstance(x, (float, np.floating)) and not math.isfinite(x):
        raise InvalidInput(f"{field}: {float(x)} is not a finite number")


def unit_text(unit: Any, field: str, what: str = "a unit") -> str:
    """A unit as the service reads it: a string as it is, an astropy unit (``u.km``, ``u.km / u.s``, ``u.dex``) as
    the string astropy writes for it.  Anything else is refused naming ``field``: a number, or a Quantity such
    as ``1000 * u.km``, whose string "1000.0 km" would be read as a unit 1000 times larger."""
    if isinstance(unit, str):
        return unit
    units = sys.modules.get("astropy.units")        # an astropy unit comes with astropy already imported
    if units is not None and isinstance(unit, (units.UnitBase, units.FunctionUnitBase)):
        return unit.to_string()
    hint = f" (its unit alone is {unit.unit.to_string()!r})" if units is not None and isinstance(unit, units.Quantity) \
        else ""
    raise InvalidInput(f"{field}: {what} is a string such as 'd' or an astropy unit, not {type(unit).__name__}{hint}")


def _whole(x):
    """A count or a seed as an int where it is one (numpy's, a float such as 1e4); anything else as it is."""
    if isinstance(x, (bool, np.bool_)):
        return x
    if isinstance(x, (int, np.integer)):
        return int(x)
    if isinstance(x, (float, np.floating)) and float(x).is_integer() and abs(x) < 2 ** 63:
        return int(x)
    return x


# --------------------------------------------------------------------------- decoding
def _array(values) -> np.ndarray:
    return np.array(values, dtype=float)        # null (None) becomes NaN; an Arrow answer's arrays as they are


def from_columns_answer(answer: Mapping[str, Any], n: int) -> BatchResult:
    """A columns answer (JSON, or an answer table decoded by :func:`calcservice.tables.decode_answer`) of
    ``n`` systems as a :class:`BatchResult`."""
    values, sigma, low, high, unit, extras = {}, {}, {}, {}, {}, {}
    for name, col in (answer.get("columns") or {}).items():
        if isinstance(col, list) and len(col) == n:
            extras[name] = col                      # a member per system (an ephemeris' events)
            continue
        if not isinstance(col, Mapping) or not isinstance(col.get("value"), (list, np.ndarray)):
            continue
        arr = _numbers(col["value"])
        if arr is None:
            continue
        values[name] = arr                          # (N,), or (N, T) for a series per system
        unit[name] = col.get("unit", "")
        for store, key in ((sigma, "sigma"), (low, "low"), (high, "high")):
            if isinstance(col.get(key), (list, np.ndarray)):
                member = _numbers(col[key])
                if member is not None:
                    store[name] = member
    return BatchResult(values, sigma, low, high, unit, list(answer.get("errors") or []), [answer],
                       list(answer.get("warnings") or []), answer.get("correlation"), count=n, extras=extras)


def _numbers(values) -> np.ndarray | None:
    """Numbers per system as a float array, NaN where null: (N,) or, for series, (N, T); None if not numbers."""
    try:
        return np.array(values, dtype=float)
    except (TypeError, ValueError):
        pass
    rows = [v for v in values if v is not None]
    if not rows or not all(isinstance(v, (list, np.ndarray)) for v in rows):
        return None
    width = len(rows[0])
    try:
        return np.array([np.full(width, np.nan) if v is None else v for v in values], dtype=float)
    except (TypeError, ValueError):
        return None


def _from_rows(answer: Mapping[str, Any], decl: Mapping[str, Any]) -> BatchResult:
    results = answer.get("results") or []
    n = len(results)
    names = [o["name"] for o in decl["outputs"]]
    values = {k: np.full(n, np.nan) for k in names}
    sigma, low, high, unit = {}, {}, {}, {}
    errors, warnings, matrices = [], [], []
    outputs = None
    for i, r in enumerate(results):
        if "error" in r:
            errors.append({"index": i, **r["error"]})
            warnings.append([])
            matrices.append(None)
            continue
        warnings.append(r.get("warnings", []))
        corr = r.get("correlation")
        if isinstance(corr, Mapping):
            outputs = outputs or list(corr["outputs"])
            matrices.append(corr["matrix"] if list(corr["outputs"]) == outputs else None)
        else:
            matrices.append(None)
        for k, entry in (r.get("results") or {}).items():
            if k not in values or not isinstance(entry, Mapping) or isinstance(entry.get("value"), list):
                continue
            values[k][i] = math.nan if entry.get("value") is None else entry["value"]
            unit[k] = entry.get("unit", "")
            for store, key in ((sigma, "sigma"), (low, "low"), (high, "high")):
                if key in entry:
                    store.setdefault(k, np.full(n, np.nan))[i] = math.nan if entry[key] is None else entry[key]
    values = {k: v for k, v in values.items() if k in unit}
    correlation = {"outputs": outputs, "matrix": matrices} if outputs else None
    return BatchResult(values, sigma, low, high, unit, errors, [answer], warnings, correlation, count=n)


def merge_results(parts: list[tuple[int, int, BatchResult]], n: int) -> BatchResult:
    """The answers to consecutive slices as one result over all ``n`` systems, in input order."""
    if len(parts) == 1 and parts[0][:2] == (0, n):
        return parts[0][2]

    def stitched(store_of) -> dict:
        names = {k: None for _, _, r in parts for k in store_of(r)}
        out = {}
        for k in names:
            shape = next(np.shape(store_of(r)[k])[1:] for _, _, r in parts if k in store_of(r))
            arr = np.full((n, *shape), np.nan)
            for start, stop, r in parts:
                if k in store_of(r):
                    arr[start:stop] = store_of(r)[k]
            out[k] = arr
        return out

    unit = {k: v for _, _, r in parts for k, v in r.unit.items()}
    errors = [{**e, "index": e["index"] + start} for start, _, r in parts for e in r.errors
              if isinstance(e.get("index"), int)]
    warnings: list = []
    if any(isinstance(w, Mapping) for _, _, r in parts for w in r.warnings or []):
        for start, stop, r in parts:            # columns: each warning names its rows (none: all of its request)
            warnings += [{**w, "rows": [i + start for i in w.get("rows", range(stop - start))]}
                         for w in r.warnings or []]
    else:
        for start, stop, r in parts:            # rows, or answer tables: one list per system
            own = list(r.warnings or [])
            warnings += own + [[] for _ in range(stop - start - len(own))]
    correlation = None
    outputs = next((r.correlation["outputs"] for _, _, r in parts if r.correlation), None)
    if outputs:
        matrix: list = []
        for start, stop, r in parts:
            same = r.correlation and list(r.correlation["outputs"]) == list(outputs)
            matrix += list(r.correlation["matrix"]) if same else [None] * (stop - start)
        correlation = {"outputs": list(outputs), "matrix": matrix}
    extras: dict[str, list] = {}
    for name in {k: None for _, _, r in parts for k in r.extras}:
        extras[name] = [x for start, stop, r in parts for x in r.extras.get(name, [None] * (stop - start))]
    return BatchResult(stitched(lambda r: r), stitched(lambda r: r.sigma), stitched(lambda r: r.low),
                       stitched(lambda r: r.high), unit, errors, [a for _, _, r in parts for a in r.responses],
                       warnings, correlation, count=n, extras=extras)


def _problem_error(status: int, payload: bytes, method: str, path: str, sent: int,
                   limits: Mapping[str, int] | None) -> CalcServiceError:
    problem: Any = {}
    try:
        problem = orjson.loads(payload)
    except orjson.JSONDecodeError:
        pass
    if not isinstance(problem, dict):
        problem = {}
    detail = problem.get("detail") or payload[:200].decode("utf-8", "replace") or f"HTTP {status}"
    problem = problem or {"status": status, "detail": detail}
    if status == 413 and not isinstance(problem.get("limit"), dict) and "body" in detail:
        # a service that does not yet name the limit it applied: the body's is the one in question
        problem["limit"] = {"name": "max_body_bytes", "sent": sent}
        if (limits or {}).get("max_body_bytes") is not None:
            problem["limit"]["value"] = limits["max_body_bytes"]
    message = f"{method} {path}: {status} {detail}"
    limit = problem.get("limit")
    if status == 413 and isinstance(limit, dict) and limit.get("name") not in detail:
        message += f" (limit {limit.get('name')}" + (f" = {limit['value']})" if "value" in limit else ")")
    return CalcServiceError(message, status, problem)


__all__ = ["Client", "CalcServiceError", "InvalidInput", "ServiceUnavailable", "Result", "BatchResult", "InputTable", "USER_AGENT",
           "DEFAULT_LIMITS", "problem_text", "problem_reason", "dumps",
           "rows_per_request", "slice_for_draws", "from_columns_answer", "merge_results"]
