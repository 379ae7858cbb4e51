"""The edge of the house: strict JSON in, JSON or problem+json out, headers on every response."""

from __future__ import annotations

import gzip
import json
import logging
import math
import re
import time
import uuid
import zlib

import numpy as np
from flask import Flask, Response, current_app, g, request
from werkzeug.exceptions import HTTPException, RequestEntityTooLarge

from .. import tables
from ..columns import read_number
from ..media import quality
from ..core.problems import Problem

try:    # optional: an order of magnitude faster at formatting floats, and numpy-aware
    import orjson
except ImportError:  # pragma: no cover - the standard library does the same job, slower
    orjson = None

# orjson reads an integer literal beyond 64 bits as a float (19 digits or more are looked for),
# and refuses a lone surrogate escape (its error sends the body on): such bodies (rare) go through
# the standard library so that every body means exactly the same.
# A byte translation finds them faster than a regular expression (bodies can be megabytes).
_DIGIT_RUNS = bytes.maketrans(b"0123456789.eE", b"dddddddddd.ee")
_DIGIT_RUNS = bytes(c if c in b"d.e" else 32 for c in _DIGIT_RUNS)
_LONG_INTEGER = b" " + b"d" * 19

log = logging.getLogger("calcservice.access")
_REQUEST_ID = re.compile(r"^[A-Za-z0-9._\-]{1,64}$")
# RFC 9112 section 3.2: Host = uri-host [ ":" port ] (RFC 3986: an IP literal in brackets, or a reg-name of
# unreserved, percent-encoded and sub-delimiter characters, which covers IPv4 addresses; empty is allowed)
_HOST = re.compile(r"^(?:\[[0-9A-Za-z.:_~!$&'()*+,;=-]+\]|[0-9A-Za-z._~%!$&'()*+,;=-]*)(?::[0-9]*)?$")


def _reject_constant(name: str):
    raise ValueError(f"{name} is not allowed: numbers must be finite")


DOUBLE_MAX = 1.7976931348623157e308
# a literal that may underflow to 0 (an exponent of -100 or beyond, or hundreds of digits): orjson reads it as
# 0 without a word, so such bodies are read by the standard library, whose parse_float sees the text
_TINY_EXPONENT = b"e ddd"
_MANY_DIGITS = b"d" * 300


def _overflows(x) -> bool:
    return isinstance(x, float) and abs(x) > DOUBLE_MAX


def _overflow_paths(body) -> list[str]:
    """Where in the parsed body the numbers beyond a double are, as "k1.sigma" or "correlations.0.rho"."""
    found, stack = [], [(body, "")]
    while stack and len(found) < 20:
        obj, path = stack.pop()
        if isinstance(obj, dict):
            stack.extend((v, f"{path}.{k}" if path else str(k)) for k, v in obj.items())
        elif isinstance(obj, list):
            stack.extend((v, f"{path}.{k}" if path else str(k)) for k, v in enumerate(obj))
        elif _overflows(obj):
            found.append(path[:200] or "_body")
    return sorted(found)


def _loads_checked(text: str):
    """json.loads, refusing NaN/Infinity (not JSON) and, naming where they are, decimals beyond a double (1e999)."""
    overflowed = []

    def parse_float(s: str) -> float:
        x = float(s)
        if x in (math.inf, -math.inf):
            overflowed.append(s)
        elif x == 0.0:
            x = read_number(s, x)       # 1e-400 is no 0: the smallest subnormal, refused or taken as 0 by field
        return x

    # an integer beyond a double parses exactly; the field it sits in refuses it (422)
    body = json.loads(text, parse_constant=_reject_constant, parse_float=parse_float,
                      object_pairs_hook=_unique_members)
    if overflowed:
        raise Problem(400, "a number in the request body is beyond the range of a double (about 1.8e308)",
                      {path: ["the number overflows a double"] for path in _overflow_paths(body)})
    return body


def _unique_members(pairs: list) -> dict:
    """An object whose names are unique (RFC 8259 leaves a repeated name's meaning open, and parsers
    keep the first or the last: either would be a silent guess at which number the caller meant)."""
    out = dict(pairs)
    if len(out) < len(pairs):
        seen: set = set()
        twice = next(k for k, _ in pairs if k in seen or seen.add(k))
        raise Problem(400, f"the JSON body gives {str(twice)[:200]!r} more than once in one object: "
                           "say which value is meant", {str(twice)[:200]: ["is given more than once in one object"]})
    return out


def _lost_members(data: bytes, body) -> bool:
    """Whether orjson may have dropped a repeated name (it keeps the last silently): written back it has
    a name separator per member it kept, the body one per member sent, and the strings' own colons in
    both; an escape in the body could hide a colon, so a body with one is looked at by the standard
    library too."""
    try:
        return b"\\u" in data or orjson.dumps(body).count(b":") != data.count(b":")
    except orjson.JSONEncodeError:      # deeper than orjson writes (a max_json_depth set above 254)
        return True


def _depth_exceeds(data: bytes, limit: int) -> bool:
    """Whether JSON nesting may exceed ``limit``: a fast byte scan (brackets inside strings
    can only over-count, so a hit is confirmed on the parsed document)."""
    if data.count(b"[") + data.count(b"{") <= limit:
        return False
    # "[" 0x5B and "{" 0x7B differ by the bit 0x20, as do "]" and "}"; the running depth is
    # summed over the brackets only, not over every byte of the body
    folded = np.frombuffer(data, dtype=np.uint8) | 0x20
    opens = folded == 0x7B
    where = np.flatnonzero(opens | (folded == 0x7D))
    step = np.where(opens[where], 1, -1)
    return int(np.cumsum(step).max(initial=0)) > limit


def _true_depth(obj, limit: int) -> int:
    stack = [(obj, 1)]
    deepest = 0
    while stack:
        o, d = stack.pop()
        if isinstance(o, (dict, list)):
            deepest = max(deepest, d)
            if deepest > limit:
                return deepest
            stack.extend((v, d + 1) for v in (o.values() if isinstance(o, dict) else o))
    return deepest


def _more(stream) -> bool:
    try:
        return bool(stream.read(1))
    except RequestEntityTooLarge:
        return True


def json_body(limits=None):
    """The request body as JSON: 415 unless JSON, 400 unless well-formed, finite and not too deep."""
    environ = request.environ
    if environ.get("CONTENT_TYPE") != "application/json":          # the usual header needs no parsing
        mimetype = request.mimetype or ""
        if not (mimetype == "application/json" or (mimetype.startswith("application/") and mimetype.endswith("+json"))):
            raise Problem(415, "send the request body as JSON with Content-Type: application/json",
                          {"Content-Type": ["must be application/json"]})
    limits = limits or current_app.config["CALCSERVICE_SETTINGS"].limits
    data = read_body(limits)
    return parse_json(data, limits)


def read_body(limits=None) -> bytes:
    """The request body's bytes, gunzipped when ``Content-Encoding: gzip`` (415 for another coding);
    413 when the body, or what it decompresses to, is over ``max_body_bytes``."""
    environ = request.environ
    limits = limits or current_app.config["CALCSERVICE_SETTINGS"].limits
    if "HTTP_TRANSFER_ENCODING" in environ:
        transfer = environ["HTTP_TRANSFER_ENCODING"]
        if any(c.strip().lower() not in ("chunked", "identity", "") for c in transfer.split(",")):
            # gunicorn takes gzip, deflate and compress before chunked and decodes none of them
            raise Problem(400, f"Transfer-Encoding {transfer[:60]!r} is not decoded here: send the body as it is or "
                               "chunked, and a compressed one with Content-Encoding: gzip",
                          {"Transfer-Encoding": ["only chunked is taken (Content-Encoding: gzip for a compressed "
                                                 "body)"]})
    coding = environ.get("HTTP_CONTENT_ENCODING", "").strip().lower()
    if coding and coding != "identity":
        if coding not in ("gzip", "x-gzip"):
            raise Problem(415, f"Content-Encoding {coding} is not supported: send the body as it is or with gzip",
                          {"Content-Encoding": ["must be gzip or identity"]})
        return gunzip(request.stream, limits.max_body_bytes)
    length = environ.get("CONTENT_LENGTH", "").strip()      # optional whitespace around a field value
    declared = int(length) if length.isdigit() else None
    if length and declared is None and "HTTP_TRANSFER_ENCODING" not in environ:
        # RFC 9110 section 8.6: 1*DIGIT; werkzeug reads "abc" or "-1" as no body at all, and the JSON then
        # looked empty
        raise Problem(400, f"Content-Length {length[:40]!r} is not a number of bytes (RFC 9110 section 8.6)",
                      {"Content-Length": ["must be a whole number of bytes, digits only"]})
    if declared is not None and declared <= limits.max_body_bytes and "HTTP_TRANSFER_ENCODING" not in environ:
        # a declared length within the limit: read exactly that (what werkzeug's stream would do,
        # without its wrappers, a good part of a small request's cost)
        data = environ["wsgi.input"].read(declared)
        if len(data) < declared:
            raise Problem(400, f"the request body ended after {len(data)} of its declared {declared} bytes",
                          {"Content-Length": [f"declares {declared} bytes; the body has {len(data)}"]})
    else:
        data = request.get_data(cache=False)   # 413 before reading when Content-Length is over the limit
    if len(data) > limits.max_body_bytes or (len(data) == limits.max_body_bytes and request.content_length is None
                                             and _more(request.stream)):
        # werkzeug cuts a streamed (chunked) body at the limit without a word: one more byte tells
        raise body_too_large(limits.max_body_bytes)
    return data


GZIP_CHUNK = 64 * 1024


def gunzip(stream, limit: int) -> bytes:
    """A gzip stream's content, read and inflated a chunk at a time and never past ``limit`` bytes of
    output (413 beyond: a small body inflating to gigabytes stops there); several members are one
    body, as RFC 1952 allows."""
    inflate = zlib.decompressobj(16 + zlib.MAX_WBITS)
    out, total, pending, fed = [], 0, b"", False
    while True:
        if not pending:
            pending = stream.read(GZIP_CHUNK)
            if not pending:
                break
        try:
            piece = inflate.decompress(pending, limit + 1 - total)
        except zlib.error as e:
            raise malformed(f"the gzip request body is corrupt ({e})", "is not a valid gzip stream") from None
        fed = True
        total += len(piece)
        if total > limit:
            raise body_too_large(limit, "inflates to")
        out.append(piece)
        if inflate.eof:
            pending = inflate.unused_data
            inflate, fed = zlib.decompressobj(16 + zlib.MAX_WBITS), False
        else:
            pending = inflate.unconsumed_tail
    if fed and not inflate.eof:
        raise malformed("the gzip request body ends before its end", "is a gzip stream cut short")
    return b"".join(out)


def body_too_large(limit: int, verb: str = "is") -> Problem:
    """The 413 of a body (or what it inflates to) over ``max_body_bytes``, naming the limit as every 413 does."""
    return Problem(413, f"the request body {verb} over {limit} bytes (limit max_body_bytes = {limit}, "
                        "CALCSERVICE_MAX_BODY_BYTES)", {"_body": [f"{verb} over {limit} bytes: send fewer systems "
                                                                  "per request"]},
                   limit={"name": "max_body_bytes", "value": limit})


def parse_json(data: bytes, limits):
    """Bytes to JSON: 400 unless well-formed, finite and not too deep."""
    body = _fast_loads(data)
    if body is not _UNPARSED:
        # the depth first: orjson writes back (for the check of repeated names) at most 254 levels
        if _depth_exceeds(data, limits.max_json_depth) and \
                _true_depth(body, limits.max_json_depth) > limits.max_json_depth:
            raise too_deep(limits)
        if not isinstance(body, (dict, list)) or not _lost_members(data, body):
            return body
    try:
        text = data.decode("utf-8")
    except UnicodeDecodeError as e:
        raise malformed(f"the request body is not valid UTF-8 (byte {e.start}): JSON is exchanged in UTF-8 "
                        "(RFC 8259), whatever charset the Content-Type names", "must be UTF-8 text") from None
    try:
        body = _loads_checked(text)
    except RecursionError:
        raise too_deep(limits) from None
    except ValueError as e:
        if "integer string conversion" in str(e):      # Python's guard against quadratic int parsing
            raise malformed("the request body holds an integer of more than 4300 digits",
                            "holds an integer of more than 4300 digits") from None
        raise malformed(f"the request body is not valid JSON: {str(e)[:200]}", f"is not valid JSON: {str(e)[:200]}") \
            from None
    if _depth_exceeds(data, limits.max_json_depth) and _true_depth(body, limits.max_json_depth) > limits.max_json_depth:
        raise too_deep(limits)
    return body


def malformed(detail: str, why: str) -> Problem:
    """A 400 for a request body that is not well-formed, naming the body (``_body``) as a 422 names its field."""
    return Problem(400, detail, {"_body": [why]})


def too_deep(limits) -> Problem:
    return malformed(f"the JSON body is nested deeper than {limits.max_json_depth} levels",
                     f"must be nested at most {limits.max_json_depth} levels deep")


_UNPARSED = object()


def _fast_loads(data: bytes):
    """The body parsed by orjson when it means the same as under :func:`json.loads` (else ``_UNPARSED``:
    errors, long integers and odd escapes are left to the standard library and its messages)."""
    if orjson is None:
        return _UNPARSED
    digits = data.translate(_DIGIT_RUNS)
    if _LONG_INTEGER in digits or digits.startswith(_LONG_INTEGER[1:]) or _TINY_EXPONENT in digits \
            or _MANY_DIGITS in digits:
        return _UNPARSED
    try:
        return orjson.loads(data)
    except orjson.JSONDecodeError:
        return _UNPARSED


def dumps(obj) -> bytes:
    """Compact JSON; numpy arrays and scalars are written as numbers (non-finite floats must be
    cleaned to None beforehand, as :func:`calcservice.core.render.clean_array` does)."""
    try:
        if orjson is not None:
            return orjson.dumps(obj, option=orjson.OPT_SERIALIZE_NUMPY, default=_orjson_default)
        return json.dumps(obj, allow_nan=False, separators=(",", ":"), default=_numpy_default).encode()
    except (TypeError, UnicodeEncodeError) as e:
        if "surrogate" not in str(e):
            raise
        # json.loads keeps a lone surrogate escape ("\ud800"), which UTF-8 cannot carry: a field name
        # echoed in an error is written back as the escape the caller sent
        return dumps(_without_surrogates(obj))


def _without_surrogates(obj):
    if isinstance(obj, str):
        return obj.encode("utf-8", "backslashreplace").decode("utf-8")
    if isinstance(obj, dict):
        return {_without_surrogates(k): _without_surrogates(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_without_surrogates(v) for v in obj]
    return obj


def _orjson_default(o):
    if isinstance(o, np.ndarray):       # orjson writes C-contiguous float arrays itself, non-finite as null
        return np.ascontiguousarray(o) if o.dtype.kind == "f" else o.tolist()
    raise TypeError(f"{type(o).__name__} is not JSON serialisable")


def _numpy_default(o):
    if isinstance(o, np.ndarray):
        if o.dtype.kind == "f" and not np.isfinite(o).all():
            obj = o.astype(object)
            obj[~np.isfinite(o)] = None
            return obj.tolist()
        return o.tolist()
    if isinstance(o, (np.floating, np.integer, np.bool_)):
        return o.item()
    raise TypeError(f"{type(o).__name__} is not JSON serialisable")


# ----------------------------------------------------------------------------- tables and negotiation

BATCH_QUERY = {"options": "a table body's batch options, a URL-encoded JSON object",
               "keep": "a table body's own columns carried into the answer, comma-separated"}

ECSV_AS_CSV = "text/csv+ecsv"      # an ECSV answer to an ECSV body that asked for text/csv: labelled text/csv

def body_media_type() -> str:
    """The request body's media type among :data:`calcservice.tables.MEDIA_TYPES` (415 otherwise);
    ``text/csv`` stays CSV until its text shows the ECSV signature."""
    mimetype = request.mimetype or ""
    if mimetype == tables.JSON or (mimetype.startswith("application/") and mimetype.endswith("+json")):
        return tables.JSON
    if mimetype in tables.TABLE_TYPES:
        if mimetype == tables.CSV and request.mimetype_params.get("header", "").strip().lower() == "absent":
            # RFC 4180's header=absent says the first line is a system: read as names, it would be lost
            raise Problem(415, "a CSV body's first line names its columns (inputs, NAME_sigma): send it with a header "
                               "line, and header=present or no header parameter",
                          {"Content-Type": ["header=absent is not taken: the table's columns are named by its header"]})
        return mimetype
    raise Problem(415, f"send the request body as one of {', '.join(tables.MEDIA_TYPES)} "
                       f"(Content-Type{': ' + mimetype if mimetype else ' is missing'})",
                  {"Content-Type": [f"must be one of {', '.join(tables.MEDIA_TYPES)}"]})


def answer_media_type(body_type: str) -> str:
    """The answer's media type from ``Accept`` (none, or a wildcard: the body's own type); 406
    with the list of types when none fits.  ``text/csv`` answers ECSV to an ECSV body."""
    accept = request.accept_mimetypes
    offered = list(dict.fromkeys((body_type, *tables.MEDIA_TYPES)))
    qs = [quality(accept, media) for media in offered]
    if not accept or None in qs:                # no Accept, or no media range readable in it
        return body_type
    best = max(range(len(offered)), key=qs.__getitem__)     # the first of the highest q: the body's own type first
    if qs[best] <= 0:
        raise Problem(406, f"the answer can be given as {', '.join(tables.MEDIA_TYPES)}; Accept lists none of them",
                      {"Accept": [f"must accept one of {', '.join(tables.MEDIA_TYPES)}"]})
    return offered[best]


def query_parameters(takes: dict[str, str], where: str) -> dict[str, str]:
    """The query string's parameters, each given once (or repeated with one value), among the names
    this endpoint ``takes`` (name -> what it is for).  A parameter it does not take is a 400 naming
    it: a misspelt ``format`` or an ``options`` sent to a single calculation would otherwise be
    answered as if absent, a silently different answer from the one asked for."""
    if not request.environ.get("QUERY_STRING"):
        return {}
    args = request.args
    taken = "; ".join(f"{name} ({what})" for name, what in takes.items()) or "none"
    unknown = [name for name in args if name not in takes]
    if unknown:
        shown = [name if len(name) <= 80 else name[:80] + "..." for name in unknown]
        elsewhere = {"options": "the options of a batch with a table body (a JSON body carries its own)",
                     "keep": "columns of a batch's request table carried into its answer",
                     "format": "a single calculation's report or figure (a batch's answer type is chosen by Accept)",
                     "plot": "a single calculation's histogram figure"}
        raise Problem(400, f"{where} takes no query parameter {', '.join(repr(n) for n in shown[:4])}: it takes "
                           f"{taken}", {name: [f"is not a query parameter of {where}" + (
                               f"; {name} is for {elsewhere[name]}" if name in elsewhere else "")]
                                           for name in shown[:20]})
    out = {}
    for name in takes:
        given = args.getlist(name)
        if len(set(given)) > 1:      # which one was meant is a guess: the first, the last?
            raise Problem(400, f"{name} is given {len(given)} times with different values",
                          {name: [f"give one {name}, not {', '.join(repr(v[:40]) for v in given[:4])}"]})
        if given:
            out[name] = given[0]
    return out


def batch_body(calc, limits):
    """A batch request in any media type as the JSON body :func:`compute_batch` takes, the answer's
    media type, the request table's columns the answer carries along (the ``keep`` query
    parameter) and its ragged rows (index -> reason); a table's options come from the ``options``
    query parameter."""
    query = query_parameters(BATCH_QUERY, "a batch")
    body_type = body_media_type()
    answer_type = answer_media_type(body_type)
    options = query.get("options")
    keep = query.get("keep")
    if body_type == tables.JSON:
        if options is not None:
            raise Problem(400, "a JSON body carries its options itself: the options query parameter is for tables",
                          {"options": ["put the options in the JSON body"]})
        if keep is not None:
            raise Problem(400, "keep carries columns of a request table (Arrow, CSV, ECSV) into its answer: "
                               "a JSON body's caller keeps its own", {"keep": ["is for table bodies"]})
        body = parse_json(read_body(limits), limits)
        if isinstance(body, dict) and "systems" in body and answer_type != tables.JSON:
            raise Problem(406, f"a rows batch (systems) answers in {tables.JSON}; send columns (a JSON columns "
                               f"body or a table) for an answer as {answer_type}",
                          {"Accept": [f"must accept {tables.JSON} for a rows batch"]})
        correlation_in_json(body, answer_type)
        return body, answer_type, [], {}
    names = [name.strip() for name in (keep or "").split(",") if name.strip()]
    if any(len(name) > limits.max_string_length for name in names):
        raise Problem(400, f"keep names columns of at most {limits.max_string_length} characters",
                      {"keep": [f"a column name is longer than {limits.max_string_length} characters"]})
    data = read_body(limits)
    if body_type == tables.CSV and tables.is_ecsv(data):
        body_type = tables.ECSV
        if answer_type == tables.CSV:
            answer_type = ECSV_AS_CSV
    parsed = {} if options is None else options_object(options, limits)
    try:
        refused: dict[int, str] = {}        # ragged rows: answered with their reason in place
        kept, read = tables.kept_columns(calc, tables.read_table(data, body_type, calc, names, refused), names)
        body = tables.request_body(calc, read, parsed)
    except tables.TableError as e:
        raise Problem(e.status, e.detail, e.errors) from None
    series = [spec.name for spec in calc.inputs if spec.kind == "series" and spec.name in body["columns"]]
    if series and answer_type not in (tables.JSON, tables.ARROW):     # before the work, not after
        e = tables.series_refused([f"the outputs over {', '.join(series)}"])
        raise Problem(e.status, e.detail, e.errors)
    correlation_in_json(body, answer_type)
    return body, answer_type, kept, refused


def correlation_in_json(body, answer_type: str) -> None:
    """A 406 for the outputs' correlation asked of a table answer: Arrow, CSV and ECSV have no place for an
    m x m matrix per system, so the answer would leave it out without a word."""
    if answer_type != tables.JSON and isinstance(body, dict) and body.get("covariance") is True:
        raise Problem(406, f"the outputs' correlation (covariance: true) is answered in {tables.JSON} only: a table "
                           f"answer ({answer_type}) does not carry it",
                      {"covariance": [f"is answered in {tables.JSON} only: ask for {tables.JSON}, or drop it"],
                       "Accept": [f"must accept {tables.JSON} with covariance"]})


def options_object(text: str, limits) -> dict:
    """The ``options`` query parameter as the JSON object it must be, under the body's rules (finite
    numbers, names given once, nesting within ``max_json_depth``): 400 naming ``options`` otherwise."""
    try:
        parsed = _loads_checked(text)
    except Problem as p:        # a repeated name, or a number beyond a double: said of the parameter
        raise Problem(400, p.detail.replace("the JSON body", "the options query parameter")
                      .replace("the request body", "the options query parameter"), p.errors) from None
    except RecursionError:
        parsed = None
        depth = limits.max_json_depth + 1
    except ValueError as e:
        raise Problem(400, f"the options query parameter is not JSON: {str(e)[:200]}",
                      {"options": ["must be a URL-encoded JSON object"]}) from None
    else:
        encoded = text.encode("utf-8", "surrogatepass")
        depth = _true_depth(parsed, limits.max_json_depth) if _depth_exceeds(encoded, limits.max_json_depth) else 0
    if depth > limits.max_json_depth:
        raise Problem(400, f"the options query parameter is nested deeper than {limits.max_json_depth} levels",
                      {"options": [f"must be nested at most {limits.max_json_depth} levels deep"]})
    if not isinstance(parsed, dict):
        raise Problem(400, "the options query parameter must be a JSON object", {"options": ["must be a JSON object"]})
    return parsed


def batch_response(response: dict, answer_type: str, kept=()) -> Response:
    """A batch answer in its media type (ECSV asked for as text/csv is labelled text/csv), with the
    request table's ``kept`` columns: first in a table, under ``kept`` in JSON."""
    if answer_type == tables.JSON:
        if kept:
            response["kept"] = {name: values for name, values, _ in kept}
        r = _json(response)
    else:
        table_type = tables.ECSV if answer_type == ECSV_AS_CSV else answer_type
        try:
            data = tables.encode_answer(response, table_type, kept)
        except tables.TableError as e:
            raise Problem(e.status, e.detail, e.errors) from None
        label = tables.CSV if answer_type == ECSV_AS_CSV else answer_type
        r = Response(data, mimetype=label)
    add_vary(r, "Accept")
    return r


def _json(obj, status=200, mimetype="application/json") -> Response:
    return Response(dumps(obj), status=status, mimetype=mimetype)


def problem_response(p: Problem) -> Response:
    return _json(p.as_dict(), p.status, "application/problem+json")


def add_vary(response: Response, name: str) -> None:
    """Name a request header in the answer's Vary (werkzeug's ``response.vary.add`` parses and writes
    back the whole header set, about 10 us on every answer)."""
    vary = response.headers.get("Vary")
    if not vary:
        response.headers["Vary"] = name
    elif name.lower() not in (v.strip().lower() for v in vary.split(",")):
        response.headers["Vary"] = f"{vary}, {name}"


GZIP_LEVEL = 1      # numbers in text compress ~2.5x at level 1, barely better at 6 for 3-4x the time


def compress(response: Response, threshold: int) -> None:
    """Gzip an answer of ``threshold`` bytes or more when the caller accepts gzip."""
    if response.direct_passthrough or response.is_streamed or "Content-Encoding" in response.headers \
            or response.status_code < 200 or response.status_code in (204, 304):
        return
    size = response.calculate_content_length()
    if size is None or size < threshold:
        return
    add_vary(response, "Accept-Encoding")
    offered = request.environ.get("HTTP_ACCEPT_ENCODING", "").lower()
    # the header's parse only where it can name gzip (or all codings, "*"): most callers send none
    if request.method == "HEAD" or ("gzip" not in offered and "*" not in offered) \
            or not request.accept_encodings["gzip"]:
        return
    response.set_data(gzip.compress(response.get_data(), compresslevel=GZIP_LEVEL, mtime=0))
    response.headers["Content-Encoding"] = "gzip"


def host_field(environ) -> None:
    """RFC 9112 section 3.2: a server MUST answer 400 to an HTTP/1.1 request without a Host field or with one
    whose value is no host (gunicorn refuses two Host lines itself, and passes these on)."""
    host = environ.get("HTTP_HOST")
    if host is None and environ.get("SERVER_PROTOCOL") == "HTTP/1.1":
        raise Problem(400, "an HTTP/1.1 request must carry a Host header field (RFC 9112 section 3.2)",
                      {"Host": ["is required in an HTTP/1.1 request"]})
    if host is not None and not _HOST.match(host):
        raise Problem(400, f"the Host header field {host[:80]!r} is not a host[:port] (RFC 9112 section 3.2)",
                      {"Host": ["must be a host name or address, optionally with :port"]})


def install(app: Flask) -> None:
    """Error handlers, request ids, CORS, security headers and the access log."""
    settings = app.config["CALCSERVICE_SETTINGS"]

    @app.errorhandler(Problem)
    def _problem(p: Problem):
        return problem_response(p)

    @app.errorhandler(RequestEntityTooLarge)
    def _too_large(e):
        limit = settings.limits.max_body_bytes
        return problem_response(body_too_large(limit))

    @app.errorhandler(HTTPException)
    def _http(e: HTTPException):
        # every 4xx names what is at fault, as a field would be: the path, or the method
        allowed = [m for m in getattr(e, "valid_methods", None) or () if m != "OPTIONS"]
        if e.code == 404:
            p = Problem(404, f"there is nothing at {request.path}; GET /v1/calculations lists the calculations",
                        {"_path": [f"no resource at {request.path[:200]}"]})
        elif e.code == 405:
            p = Problem(405, f"{request.method} is not allowed on {request.path}",
                        {"_method": [f"{request.method} is not allowed here; use {' or '.join(allowed)}"]})
        else:
            code = e.code or 500
            p = Problem(code, e.description or "error", {"_request": [e.description or "error"]} if code < 500 else None)
        r = problem_response(p)
        if e.code == 405 and hasattr(e, "valid_methods") and e.valid_methods:
            r.headers["Allow"] = ", ".join(e.valid_methods)
        return r

    @app.errorhandler(Exception)
    def _unexpected(e: Exception):
        logging.getLogger("calcservice").exception("unexpected error (request id %s)", getattr(g, "request_id", "-"))
        return problem_response(Problem(500, "the service failed on this request; it has been logged with "
                                             f"request id {getattr(g, 'request_id', '-')}"))

    @app.before_request
    def _start():
        g.t0 = time.perf_counter()
        rid = request.headers.get("X-Request-ID", "")
        g.request_id = rid if settings.trust_request_id and _REQUEST_ID.match(rid) else uuid.uuid4().hex
        host_field(request.environ)

    @app.after_request
    def _headers(response: Response):
        response.headers["X-Request-ID"] = getattr(g, "request_id", "-")
        response.headers["X-Content-Type-Options"] = "nosniff"
        origin = request.headers.get("Origin")
        if origin and origin in settings.cors_origins:
            response.headers["Access-Control-Allow-Origin"] = origin
            add_vary(response, "Origin")
            response.headers["Access-Control-Allow-Methods"] = "GET, POST, OPTIONS"
            response.headers["Access-Control-Allow-Headers"] = "Content-Type, X-Request-ID"
            response.headers["Access-Control-Expose-Headers"] = "X-Request-ID"
        if settings.limits.min_gzip_bytes:
            compress(response, settings.limits.min_gzip_bytes)
        if log.isEnabledFor(logging.INFO):
            ms = (time.perf_counter() - g.get("t0", time.perf_counter())) * 1e3
            # never the body: method, path, status, size and time only
            log.info("%s %s %s %d %dB %.1fms", g.get("request_id", "-"), request.method, request.path,
                     response.status_code, response.calculate_content_length() or 0, ms)
        return response


json_response = _json
