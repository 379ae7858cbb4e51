"""A Python client for a running calcservice, standard library only (plus numpy for batches).

    >>> from calcservice.client import Client
    >>> svc = Client("http://127.0.0.1:8000", timeout=30)
    >>> r = svc.calculate("sb1", period=(41.6, 0.02), k1=(23.4, 0.3), eccentricity=0.31)
    >>> r["results"]["mass_function"]["value"]
    >>> cat = svc.batch("sb1", {"period": [41.6, 12.3], "k1": ([23.4, 8.1], [0.3, 0.2]), "eccentricity": 0.1})
    >>> cat["mass_function"], cat.sigma["mass_function"], cat.errors

Inputs may be numbers, ``(value, sigma)`` or ``(value, sigma_minus, sigma_plus)`` tuples,
objects of the wire contract (``{"value": 1.2, "sigma": 0.1, "unit": "yr"}``), astropy
quantities, strings ("isotropic", ISO 8601 dates, choices), ``datetime`` objects for times,
and lists or arrays: the user's own draws for a measured input, the list itself for a
series input (such as an ephemeris's ``times``).

Paths come from ``GET /v1/calculations``, so every calculation of the service is
reachable without a client update.  Errors raise :class:`CalcServiceError` carrying the
RFC 9457 problem details; connection failures (refused, reset) are retried, nothing else is.
"""

from __future__ import annotations

import datetime as _dt
import json
import math
import platform
import socket
import time
import urllib.error
import urllib.parse
import urllib.request
from typing import Any, Mapping, Sequence

from . import __version__

USER_AGENT = f"calcservice-client/{__version__} (calcservice {__version__}; Python {platform.python_version()})"


class CalcServiceError(Exception):
    """A request the service refused (or could not be reached for).

    ``status`` is the HTTP status (None when no answer came), ``problem`` the RFC 9457
    problem details as sent, ``errors`` the per-field messages ({field: [message, ...]}).
    """

    def __init__(self, message: str, status: int | None = None, problem: Mapping[str, Any] | None = None):
        self.status = status
        self.problem = dict(problem or {})
        self.errors: dict[str, list[str]] = dict(self.problem.get("errors") or {})
        self.detail = self.problem.get("detail", message)
        super().__init__(message)

    def __str__(self) -> str:
        head = f"{self.status} {self.detail}" if self.status else str(self.args[0])
        if self.errors:
            head += " (" + "; ".join(f"{k}: {' '.join(v)}" for k, v in self.errors.items()) + ")"
        return head


class ServiceUnavailable(CalcServiceError):
    """No answer: the connection was refused or reset on every try, or the request timed out."""


def _is_connection_error(e: BaseException) -> bool:
    """Refused, reset or dropped before an answer came (worth another try); not timeouts or HTTP errors."""
    if isinstance(e, urllib.error.HTTPError):
        return False
    if isinstance(e, urllib.error.URLError):
        e = e.reason if isinstance(e.reason, BaseException) else e
    if isinstance(e, (socket.timeout, TimeoutError)):
        return False
    # RemoteDisconnected is a ConnectionResetError: the server closed a kept-alive socket
    return isinstance(e, (ConnectionError, socket.gaierror))


def _is_timeout(e: BaseException) -> bool:
    if isinstance(e, urllib.error.URLError) and isinstance(e.reason, BaseException):
        e = e.reason
    return isinstance(e, (socket.timeout, TimeoutError))


class BatchResult(dict):
    """Batch results as numpy arrays, one per output, in input order (NaN where a row failed).

    ``sigma``, ``low`` and ``high`` hold the uncertainties (``low``/``high`` for Monte
    Carlo), ``unit`` the unit of each output, ``errors`` the problem details of the
    failed rows ({"index": i, "detail": ..., "errors": {...}}), ``response`` the raw answer.
    """

    def __init__(self, values, sigma, low, high, unit, errors, response, warnings=None):
        super().__init__(values)
        self.sigma = sigma
        self.low = low
        self.high = high
        self.unit = unit
        self.errors = errors
        self.warnings = warnings
        self.response = response

    @property
    def failed(self) -> list[int]:
        return sorted(e["index"] for e in self.errors if isinstance(e.get("index"), int))


class Client:
    """calcservice over HTTP.

    ``base_url`` is where the service answers (``GET {base_url}/v1/health``); ``timeout``
    is seconds per request; connection errors are retried ``retries`` times with
    exponential back-off starting at ``backoff`` seconds.
    """

    def __init__(self, base_url: str = "http://127.0.0.1:8000", timeout: float = 60.0, retries: int = 3,
                 backoff: float = 0.25, headers: Mapping[str, str] | None = None):
        self.base_url = base_url.rstrip("/")
        self.timeout = timeout
        self.retries = max(0, int(retries))
        self.backoff = backoff
        self.headers = {"User-Agent": USER_AGENT, **dict(headers or {})}
        self._catalogue: dict[str, dict] | None = None
        self._opener = urllib.request.build_opener()

    def __repr__(self) -> str:
        return f"Client({self.base_url!r}, timeout={self.timeout})"

    # ------------------------------------------------------------------ transport
    def _request(self, method: str, path: str, body: Any = None, query: Mapping[str, str] | None = None,
                 accept: str = "application/json") -> tuple[int, str, bytes]:
        url = self.base_url + path + ("?" + urllib.parse.urlencode(query) if query else "")
        data = None
        headers = {**self.headers, "Accept": accept}
        if body is not None:
            data = json.dumps(body, allow_nan=False, default=_json_default).encode("utf-8")
            headers["Content-Type"] = "application/json"
        attempt = 0
        while True:
            req = urllib.request.Request(url, data=data, method=method, headers=headers)
            try:
                with self._opener.open(req, timeout=self.timeout) as r:
                    return r.status, r.headers.get("Content-Type", ""), r.read()
            except urllib.error.HTTPError as e:
                payload = e.read()
                raise _problem_error(e.code, e.headers.get("Content-Type", ""), payload, method, path) from None
            except Exception as e:          # noqa: BLE001 - sorted into retry / timeout / other below
                if _is_timeout(e):
                    raise ServiceUnavailable(f"{method} {path}: no answer within {self.timeout} s") from e
                if not _is_connection_error(e) or attempt >= self.retries:
                    if _is_connection_error(e):
                        raise ServiceUnavailable(f"{method} {url}: cannot connect after {attempt + 1} "
                                                 f"attempt(s): {_reason(e)}") from e
                    raise
                time.sleep(self.backoff * (2 ** attempt))
                attempt += 1

    def _json(self, method: str, path: str, body: Any = None, query=None) -> Any:
        status, ctype, payload = self._request(method, path, body, query)
        try:
            return json.loads(payload.decode("utf-8"))
        except (UnicodeDecodeError, json.JSONDecodeError):
            raise CalcServiceError(f"{method} {path}: the answer is not JSON ({ctype})", status) from None

    # ------------------------------------------------------------------ metadata
    def health(self) -> dict:
        return self._json("GET", "/v1/health")

    def constants(self) -> dict:
        return self._json("GET", "/v1/constants")["constants"]

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
            raise CalcServiceError(f"the service has no calculation {name!r}; it has {', '.join(calcs)}", 404,
                                   {"status": 404, "detail": f"there is no calculation {name!r}",
                                    "errors": {"calculation": [f"unknown: {name!r}"]}})
        return calcs[name]

    # ------------------------------------------------------------------ one system
    def request_body(self, name: str, inputs: Mapping[str, Any], **options) -> dict:
        """The JSON body the client would send for ``inputs`` and options."""
        decl = self.declaration(name)
        kinds = {i["name"]: i for i in decl["inputs"]}
        body = {k: _encode(v, kinds.get(k)) for k, v in inputs.items()}
        body.update(_options(**options))
        return body

    def calculate(self, name: str, /, *, uncertainty: Any = None, correlations: Any = None,
                  units: Mapping[str, str] | None = None, time_format: str | None = None, method: str | None = None,
                  samples: int | None = None, seed: int | None = None, **inputs) -> dict:
        """One calculation on one system: the response dict of the wire contract.

        ``uncertainty`` is the contract's object (or give ``method``/``samples``/``seed``);
        ``correlations`` a list of {"between": [a, b], "rho": r} or a mapping {(a, b): r};
        ``units`` asks for outputs in other units.
        """
        body = self.request_body(name, inputs, uncertainty=uncertainty, correlations=correlations, units=units,
                                 time_format=time_format, method=method, samples=samples, seed=seed)
        return self._json("POST", self.declaration(name)["path"], body)

    def report(self, name: str, /, format: str = "latex", **kwargs) -> str:
        """The derivation report (``format`` "latex" or "markdown") as text."""
        body, path = self._body_and_path(name, kwargs)
        _, _, payload = self._request("POST", path, body, {"format": format}, accept="text/*")
        return payload.decode("utf-8")

    def figure(self, name: str, /, format: str = "svg", plot: str | None = None, **kwargs) -> bytes:
        """A figure (``format`` "svg" or "png"): the time-series curve, or the histogram of output ``plot``."""
        body, path = self._body_and_path(name, kwargs)
        query = {"format": format, **({"plot": plot} if plot else {})}
        _, _, payload = self._request("POST", path, body, query, accept="image/*")
        return payload

    def _body_and_path(self, name, kwargs):
        opts = {k: kwargs.pop(k) for k in ("uncertainty", "correlations", "units", "time_format", "method",
                                           "samples", "seed") if k in kwargs}
        return self.request_body(name, kwargs, **opts), self.declaration(name)["path"]

    # ------------------------------------------------------------------ many systems
    def batch(self, name: str, data: Mapping[str, Any] | Sequence[Mapping[str, Any]], /, *,
              uncertainty: Any = None, correlations: Any = None, units: Mapping[str, str] | None = None,
              time_format: str | None = None, method: str | None = None, samples: int | None = None,
              seed: int | None = None) -> BatchResult:
        """Many systems at once: ``data`` is columns ({input: values}) or rows ([{input: value}, ...]).

        A column is a list or array of values, a ``(values, sigmas)`` tuple, a contract
        column object ({"value": [...], "sigma": [...], "unit": ...}) or one value for all
        rows; keys ``NAME_sigma`` add sigmas to column ``NAME`` (as in a CSV catalogue;
        a pandas DataFrame works too).  Returns numpy arrays per output.
        """
        decl = self.declaration(name)
        path = "/v1/batch/" + name
        opts = _options(uncertainty=uncertainty, correlations=correlations, units=units, time_format=time_format,
                        method=method, samples=samples, seed=seed)
        kinds = {i["name"]: i for i in decl["inputs"]}
        if isinstance(data, Mapping) or hasattr(data, "columns") and hasattr(data, "to_dict"):
            columns = _columns_body(data, kinds)
            answer = self._json("POST", path, {"columns": columns, **opts})
            return _from_columns(answer)
        rows = [{k: _encode(v, kinds.get(k)) for k, v in row.items()} for row in data]
        answer = self._json("POST", path, {"systems": rows, **opts})
        return _from_rows(answer, decl)


# --------------------------------------------------------------------------- encoding
def _json_default(o):
    try:
        import numpy as np
        if isinstance(o, np.generic):
            return o.item()
        if isinstance(o, np.ndarray):
            return o.tolist()
    except ImportError:
        pass
    if isinstance(o, (_dt.datetime, _dt.date)):
        return o.isoformat()
    raise TypeError(f"cannot send {type(o).__name__} as JSON")


def _plain(x):
    """numpy scalars and arrays as Python numbers and lists."""
    if hasattr(x, "tolist") and not isinstance(x, (str, bytes)):
        return x.tolist()
    return x


def _encode(value: Any, decl: Mapping[str, Any] | None) -> Any:
    """One input in a form of the wire contract."""
    kind = (decl or {}).get("kind", "quantity")
    if hasattr(value, "unit") and hasattr(value, "value") and not isinstance(value, Mapping):
        # an astropy Quantity: its number in its own unit
        v = _plain(value.value)
        unit = value.unit.to_string()
        if kind == "series":
            return {"value": v, "unit": unit}
        return {"samples": v, "unit": unit} if isinstance(v, list) else {"value": v, "unit": unit}
    if isinstance(value, (_dt.datetime, _dt.date)):
        return value.isoformat()
    if isinstance(value, tuple):
        parts = [_plain(p) for p in value]
        unit = None
        if parts and isinstance(parts[-1], str):
            unit = parts.pop()
        if len(parts) == 2:
            out = {"value": parts[0], "sigma": parts[1]}
        elif len(parts) == 3:
            out = {"value": parts[0], "sigma_minus": parts[1], "sigma_plus": parts[2]}
        else:
            raise ValueError(f"{decl.get('name') if decl else 'an input'}: a tuple is (value, sigma) or "
                             "(value, sigma_minus, sigma_plus), optionally with a unit string last")
        if unit:
            out["unit"] = unit
        return out
    value = _plain(value)
    if isinstance(value, list) and kind == "quantity":
        return {"samples": value}
    return value


def _options(uncertainty=None, correlations=None, units=None, time_format=None, method=None, samples=None,
             seed=None) -> dict:
    out: dict[str, Any] = {}
    unc = dict(uncertainty or {})
    if method is not None:
        unc["method"] = method.replace("-", "_")
    if samples is not None:
        unc["samples"] = int(samples)
        unc.setdefault("method", "monte_carlo")
    if seed is not None:
        unc["seed"] = int(seed)
        unc.setdefault("method", "monte_carlo")
    if unc:
        out["uncertainty"] = unc
    if correlations:
        if isinstance(correlations, Mapping):
            correlations = [{"between": list(pair), "rho": float(rho)} for pair, rho in correlations.items()]
        out["correlations"] = [dict(c) for c in correlations]
    if units:
        out["units"] = dict(units)
    if time_format:
        out["time_format"] = time_format
    return out


def _columns_body(data: Any, kinds: Mapping[str, Any]) -> dict:
    if hasattr(data, "columns") and hasattr(data, "to_dict") and not isinstance(data, Mapping):
        data = {str(k): data[k].to_numpy() for k in data.columns}     # a pandas DataFrame
    columns: dict[str, Any] = {}
    sigmas: dict[str, Any] = {}
    for key, col in data.items():
        base = key
        for suffix in ("_sigma_minus", "_sigma_plus", "_sigma"):
            if key not in kinds and key.endswith(suffix) and key[: -len(suffix)] in kinds:
                sigmas.setdefault(key[: -len(suffix)], {})[suffix[1:]] = _plain(col)
                base = None
                break
        if base is None:
            continue
        if isinstance(col, tuple):
            parts = [_plain(p) for p in col]
            unit = parts.pop() if parts and isinstance(parts[-1], str) else None
            entry = {"value": parts[0]}
            if len(parts) == 2:
                entry["sigma"] = parts[1]
            elif len(parts) == 3:
                entry["sigma_minus"], entry["sigma_plus"] = parts[1], parts[2]
            if unit:
                entry["unit"] = unit
            columns[key] = entry
        elif isinstance(col, Mapping):
            columns[key] = {k: _plain(v) for k, v in col.items()}
        elif hasattr(col, "unit") and hasattr(col, "value"):
            columns[key] = {"value": _plain(col.value), "unit": col.unit.to_string()}
        else:
            v = _plain(col)
            columns[key] = {"value": v} if isinstance(v, list) else v
    for base, extra in sigmas.items():
        if base not in columns:
            raise ValueError(f"{base}: sigmas given without the column {base}")
        if not isinstance(columns[base], dict):
            columns[base] = {"value": columns[base]}
        columns[base].update(extra)
    return columns


# --------------------------------------------------------------------------- decoding
def _array(values):
    import numpy as np
    return np.array([np.nan if v is None else v for v in values], dtype=float)


def _from_columns(answer: Mapping[str, Any]) -> BatchResult:
    values, sigma, low, high, unit = {}, {}, {}, {}, {}
    for name, col in (answer.get("columns") or {}).items():
        if not isinstance(col, Mapping) or not isinstance(col.get("value"), list):
            continue
        try:
            values[name] = _array(col["value"])
        except (TypeError, ValueError):
            continue            # not numeric (e.g. nested series)
        unit[name] = col.get("unit", "")
        for store, key in ((sigma, "sigma"), (low, "low"), (high, "high")):
            if isinstance(col.get(key), list):
                store[name] = _array(col[key])
    return BatchResult(values, sigma, low, high, unit, list(answer.get("errors") or []), answer,
                       answer.get("warnings"))


def _from_rows(answer: Mapping[str, Any], decl: Mapping[str, Any]) -> BatchResult:
    import numpy as np
    results = answer.get("results") or []
    n = len(results)
    names = [o["name"] for o in decl["outputs"]]
    values = {k: np.full(n, np.nan) for k in names}
    sigma, low, high, unit = {}, {}, {}, {}
    errors, warnings = [], []
    for i, r in enumerate(results):
        if "error" in r:
            errors.append({"index": i, **r["error"]})
            warnings.append([])
            continue
        warnings.append(r.get("warnings", []))
        for k, entry in (r.get("results") or {}).items():
            if k not in values or not isinstance(entry, Mapping) or isinstance(entry.get("value"), list):
                continue
            values[k][i] = math.nan if entry.get("value") is None else entry["value"]
            unit[k] = entry.get("unit", "")
            for store, key in ((sigma, "sigma"), (low, "low"), (high, "high")):
                if key in entry:
                    store.setdefault(k, np.full(n, np.nan))[i] = math.nan if entry[key] is None else entry[key]
    values = {k: v for k, v in values.items() if k in unit}
    return BatchResult(values, sigma, low, high, unit, errors, answer, warnings)


def _problem_error(status: int, ctype: str, payload: bytes, method: str, path: str) -> CalcServiceError:
    problem: dict = {}
    try:
        problem = json.loads(payload.decode("utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError):
        pass
    if not isinstance(problem, dict):
        problem = {}
    detail = problem.get("detail") or payload[:200].decode("utf-8", "replace") or f"HTTP {status}"
    return CalcServiceError(f"{method} {path}: {status} {detail}", status, problem or {"status": status,
                                                                                        "detail": detail})


def _reason(e: BaseException) -> str:
    if isinstance(e, urllib.error.URLError) and e.reason is not None:
        return str(e.reason)
    return f"{type(e).__name__}: {e}"


__all__ = ["Client", "CalcServiceError", "ServiceUnavailable", "BatchResult", "USER_AGENT"]

