"""Schema-driven fuzzing: schemathesis over the service's own OpenAPI document, against the WSGI app.

Every operation of the generated spec is exercised (new endpoints are picked up from the spec
itself), with a fixed seed and a bounded number of cases:

* the coverage phase sends the schema's boundary and edge values (positive mode: requests the
  spec calls valid), on every single-calculation endpoint;
* the fuzzing phase sends Hypothesis-generated requests, valid and schema-violating, on every
  operation (batch included).

Each response must be documented (status code, content type, body schema), never a 5xx, and
every problem response must be RFC 9457 problem details without a traceback.  Requests the
spec calls valid may still be refused with 422 (the physics has cross-field conditions JSON
Schema cannot say, e.g. beta < M2/(M1+M2)) or 413 (deployment limits), but never with a
400 or 415: those would mean the spec and the parser disagree on the form of a request.
"""

from __future__ import annotations

import collections
import json

import pytest
from hypothesis import HealthCheck, settings

import schemathesis
from schemathesis.specs.openapi.checks import positive_data_acceptance

from calcservice import create_app

# Small limits keep each case fast; the fuzzer still reaches them (413 is documented).
APP = create_app({"MAX_SAMPLES": 5000, "DEFAULT_SAMPLES": 500, "MAX_SAMPLE_ARRAY": 5000, "MAX_SERIES": 2000,
                  "MAX_BATCH_ROWS": 200, "MAX_BATCH_DRAWS": 200_000, "MIN_GZIP_BYTES": 1 << 62})  # its client reads no gzip
CONFIG = schemathesis.Config.from_dict({
    "seed": 20240611,
    "phases": {
        "examples": {"enabled": True},
        "coverage": {"enabled": True, "generation": {"mode": "positive"}},
        "fuzzing": {"enabled": True},
        "stateful": {"enabled": False},
    },
    # a batch takes the single request's forms in rows or columns: its coverage-phase cases (a few
    # hundred per batch path) would mostly repeat the single endpoints' and double the run time
    "operations": [{"include-path-regex": "^/v1/batch/", "phases": {"coverage": {"enabled": False}}}],
})
SCHEMA = schemathesis.openapi.from_wsgi("/openapi.yaml", APP, config=CONFIG)

SEEN: collections.Counter = collections.Counter()        # (operation, status) -> cases
TRACEBACK_MARKERS = ("Traceback (most recent call last)", 'File "/', "line ")


def _mode(case) -> str:
    meta = getattr(case, "meta", None)
    try:
        return "negative" if meta.generation.mode.is_negative else "positive"
    except AttributeError:
        return "positive"


@SCHEMA.parametrize()
@settings(max_examples=25, derandomize=True, deadline=None, database=None,
          suppress_health_check=list(HealthCheck))
def test_operation_conforms(case):
    response = case.call()
    SEEN[(case.operation.label, response.status_code)] += 1
    # schemathesis' own checks: no 5xx, documented status, content type, headers and body schema,
    # schema-violating requests rejected.  Schema-valid requests refused as unphysical are allowed
    # (see the module docstring) and checked below instead.
    case.validate_response(response, excluded_checks=[positive_data_acceptance])

    status = response.status_code
    headers = {k.lower(): v[0] for k, v in response.headers.items()}     # lower-case keys, list values
    assert status < 500, response.text[:500]
    assert headers.get("x-request-id"), "every response carries a request id"
    assert headers.get("x-content-type-options") == "nosniff"
    if status >= 400:
        assert headers.get("content-type", "").startswith("application/problem+json")
        problem = json.loads(response.content)
        assert problem["status"] == status
        assert not any(m in problem["detail"] for m in TRACEBACK_MARKERS[:1])
        if status == 422:
            assert problem.get("errors"), "a 422 names the fields at fault"
    if _mode(case) == "positive" and case.operation.method.upper() == "POST":
        # the spec and the parser agree on the form of a request
        assert status in (200, 413, 422), (status, response.text[:500])


def test_fuzzing_reached_every_operation():
    """The run above touched each operation of the spec with a useful number of cases."""
    if not SEEN:
        pytest.skip("the fuzzing test did not run in this session (selected out)")
    operations = {label for label, _ in SEEN}
    # schemathesis leaves out the operation that serves the schema itself (test_api checks that one)
    spec_operations = {f"{method.upper()} {path}" for path, item in SCHEMA.raw_schema["paths"].items()
                       for method in item if method in ("get", "post", "put", "delete", "patch")
                       and path != "/openapi.yaml"}
    assert spec_operations <= operations, spec_operations - operations
    per_op = collections.Counter()
    for (label, status), n in SEEN.items():
        per_op[label] += n
    posts = [label for label in operations if label.startswith("POST")]
    assert all(per_op[label] >= 20 for label in posts), {label: per_op[label] for label in posts}
    assert not any(status >= 500 for _, status in SEEN)
    total = sum(SEEN.values())
    statuses = collections.Counter()
    for (_, status), n in SEEN.items():
        statuses[status] += n
    print(f"\nfuzz: {total} cases over {len(operations)} operations; statuses {dict(sorted(statuses.items()))}")
