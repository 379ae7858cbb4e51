"""A catalogue of bad requests: each gets its documented status as RFC 9457 problem details,
naming the field at fault where there is one -- never a 500, never a traceback.

The hand-written table covers the kinds of damage one by one; a second table is generated
from the registry so that every calculation (including ones added later) gets the common
cases on its own endpoint.  Requests whose raw bytes matter run under both JSON parsers
(orjson when installed, and the standard library it falls back to).
"""

from __future__ import annotations

import json

import pytest

from calcservice import create_app
from calcservice.api import edge
from calcservice.registry import calculations

SB1 = "/v1/spectroscopic/sb1"
SB2 = "/v1/spectroscopic/sb2"
VISUAL = "/v1/astrometric/visual"
EPHEMERIS = "/v1/orbit/ephemeris"
RECIPE = "/v1/winds/mass-loss/recipe"
PERIOD_CHANGE = "/v1/winds/mass-loss/period-change"

GOOD_SB1 = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}
GOOD_SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
            "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01}}
GOOD_VISUAL = {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3}
GOOD_EPHEMERIS = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
                  "times": [2460400.5, 2460500.5], "count": 1}


def nested(depth: int) -> bytes:
    return b'{"period": ' + b"[" * depth + b"1" + b"]" * depth + b', "k1": 23.4, "eccentricity": 0.3}'


def with_(base: dict, **changes) -> dict:
    out = dict(base)
    for k, v in changes.items():
        if v is REMOVE:
            out.pop(k, None)
        else:
            out[k] = v
    return out


REMOVE = object()
JSON = "application/json"

# (id, method, path, body, content type, status, field named in errors or None)
# body: a dict/list/scalar is sent as JSON; bytes are sent as they are.
CATALOGUE = [
    # --- not JSON, not UTF-8, not an object ---
    ("nan-literal", "POST", SB1, b'{"period": NaN, "k1": 23.4, "eccentricity": 0.3}', JSON, 400, None),
    ("infinity-literal", "POST", SB1, b'{"period": Infinity, "k1": 23.4, "eccentricity": 0.3}', JSON, 400, None),
    ("minus-infinity-literal", "POST", SB1, b'{"period": -Infinity, "k1": 1, "eccentricity": 0.3}', JSON, 400, None),
    ("truncated-json", "POST", SB1, b'{"period": 41.6, "k1": ', JSON, 400, None),
    ("empty-body", "POST", SB1, b"", JSON, 400, None),
    ("trailing-garbage", "POST", SB1, b'{"period": 41.6} xyz', JSON, 400, None),
    ("non-utf8-bytes", "POST", SB1, b'{"period": 41.6, "k1": "\xff\xfe", "eccentricity": 0.3}', JSON, 400, None),
    ("lone-surrogate-escape", "POST", SB1, b'{"period": 41.6, "k1": {"value": 2, "unit": "\\ud800"}, '
                                          b'"eccentricity": 0.3}', JSON, 422, "k1"),
    ("deeply-nested-40", "POST", SB1, nested(40), JSON, 400, None),
    ("deeply-nested-100000", "POST", SB1, nested(100_000), JSON, 400, None),
    ("body-is-array", "POST", SB1, [GOOD_SB1], JSON, 422, "_body"),
    ("body-is-string", "POST", SB1, "period", JSON, 422, "_body"),
    ("body-is-null", "POST", SB1, None, JSON, 422, "_body"),
    # --- wrong content type ---
    ("text-plain", "POST", SB1, json.dumps(GOOD_SB1).encode(), "text/plain", 415, None),
    ("form-encoded", "POST", SB1, b"period=41.6&k1=23.4&eccentricity=0.3", "application/x-www-form-urlencoded",
     415, None),
    ("no-content-type", "POST", SB1, json.dumps(GOOD_SB1).encode(), None, 415, None),
    ("xml", "POST", SB1, b"<period>41.6</period>", "application/xml", 415, None),
    # --- wrong types ---
    ("null-value", "POST", SB1, with_(GOOD_SB1, period=None), JSON, 422, "period"),
    ("boolean-value", "POST", SB1, with_(GOOD_SB1, k1=True), JSON, 422, "k1"),
    ("boolean-in-object", "POST", SB1, with_(GOOD_SB1, k1={"value": False}), JSON, 422, "k1"),
    ("array-for-scalar", "POST", SB1, with_(GOOD_SB1, period=[41.6, 41.7]), JSON, 422, "period"),
    ("string-number", "POST", SB1, with_(GOOD_SB1, period="41.6"), JSON, 422, "period"),
    ("string-sigma", "POST", SB1, with_(GOOD_SB1, k1={"value": 23.4, "sigma": "0.3"}), JSON, 422, "k1"),
    ("object-without-value", "POST", SB1, with_(GOOD_SB1, k1={"sigma": 0.3}), JSON, 422, "k1"),
    ("unknown-key-in-quantity", "POST", SB1, with_(GOOD_SB1, k1={"value": 23.4, "sigmaa": 0.3}), JSON, 422, "k1"),
    ("negative-sigma", "POST", SB1, with_(GOOD_SB1, k1={"value": 23.4, "sigma": -0.3}), JSON, 422, "k1"),
    ("sigma-and-asymmetric", "POST", SB1,
     with_(GOOD_SB1, k1={"value": 23.4, "sigma": 0.3, "sigma_minus": 0.2, "sigma_plus": 0.4}), JSON, 422, "k1"),
    ("sigma-minus-alone", "POST", SB1, with_(GOOD_SB1, k1={"value": 23.4, "sigma_minus": 0.2}), JSON, 422, "k1"),
    ("isotropic-for-period", "POST", SB1, with_(GOOD_SB1, period="isotropic"), JSON, 422, "period"),
    # --- NaN, infinity, overflow (a decimal beyond a double is 400 at parse time, naming where it is;
    #     an integer beyond it parses exactly and its field refuses it, 422) ---
    ("overflowing-literal", "POST", SB1, b'{"period": 1e999, "k1": 23.4, "eccentricity": 0.3}', JSON, 400, "period"),
    ("overflowing-sigma", "POST", SB1, b'{"period": 41.6, "k1": {"value": 2, "sigma": -1e999}, '
                                       b'"eccentricity": 0.3}', JSON, 400, "k1.sigma"),
    ("huge-integer", "POST", SB1, b'{"period": 1' + b"0" * 400 + b', "k1": 23.4, "eccentricity": 0.3}', JSON, 422,
     "period"),
    ("huge-integer-4300-digits", "POST", SB1, b'{"period": 1' + b"0" * 5000 + b', "k1": 1, "eccentricity": 0.3}',
     JSON, 400, None),
    ("overflow-after-unit-conversion", "POST", SB1, with_(GOOD_SB1, k1={"value": 1e300, "unit": "Mpc/fs"}), JSON,
     422, "k1"),
    ("overflowing-sample", "POST", SB1, b'{"period": 41.6, "k1": {"samples": [1, 2, 1e999]}, "eccentricity": 0.3}',
     JSON, 400, "k1.samples.2"),
    ("sample-spread-overflows", "POST", SB1, with_(GOOD_SB1, k1={"samples": [1e308, -1e308, 1.7e308]}), JSON, 422,
     "k1"),
    # --- sample arrays ---
    ("empty-samples", "POST", SB1, with_(GOOD_SB1, k1={"samples": []}), JSON, 422, "k1"),
    ("one-sample", "POST", SB1, with_(GOOD_SB1, k1={"samples": [23.4]}), JSON, 422, "k1"),
    ("string-in-samples", "POST", SB1, with_(GOOD_SB1, k1={"samples": [23.4, "x", 23.5]}), JSON, 422, "k1"),
    ("booleans-as-samples", "POST", SB1, with_(GOOD_SB1, k1={"samples": [True, False, True]}), JSON, 422, "k1"),
    ("nested-samples", "POST", SB1, with_(GOOD_SB1, k1={"samples": [[1, 2], [3, 4]]}), JSON, 422, "k1"),
    ("samples-with-sigma", "POST", SB1, with_(GOOD_SB1, k1={"samples": [1, 2], "sigma": 1}), JSON, 422, "k1"),
    ("mismatched-sample-lengths", "POST", SB2,
     with_(GOOD_SB2, k1={"samples": [38.0, 38.2, 38.4]}, k2={"samples": [51.5, 51.7, 51.9, 52.0]}), JSON, 422, "k1"),
    # --- units ---
    ("unknown-unit", "POST", SB1, with_(GOOD_SB1, period={"value": 41.6, "unit": "fortnights"}), JSON, 422,
     "period"),
    ("unit-wrong-dimension", "POST", SB1, with_(GOOD_SB1, period={"value": 41.6, "unit": "km/s"}), JSON, 422,
     "period"),
    ("unit-for-dimensionless", "POST", SB1, with_(GOOD_SB1, eccentricity={"value": 0.3, "unit": "kg"}), JSON, 422,
     "eccentricity"),
    ("unit-not-a-string", "POST", SB1, with_(GOOD_SB1, period={"value": 41.6, "unit": 5}), JSON, 422, "period"),
    ("unit-code-injection", "POST", SB1, with_(GOOD_SB1, period={"value": 41.6, "unit": "__import__('os')"}), JSON,
     422, "period"),
    ("output-unit-unknown-output", "POST", SB1, with_(GOOD_SB1, units={"m7": "kg"}), JSON, 422, "units.m7"),
    ("output-unit-wrong-dimension", "POST", SB1, with_(GOOD_SB1, units={"mass_function": "km"}), JSON, 422,
     "units.mass_function"),
    # --- unknown and long fields, long strings ---
    ("unknown-field", "POST", SB1, with_(GOOD_SB1, perod=41.6), JSON, 422, "perod"),
    ("very-long-field-name", "POST", SB1, with_(GOOD_SB1, **{"x" * 100_000: 1}), JSON, 422, "x" * 80 + "..."),
    ("very-long-unit", "POST", SB1, with_(GOOD_SB1, k1={"value": 23.4, "unit": "km/s" * 50_000}), JSON, 422, "k1"),
    ("very-long-string-value", "POST", SB1, with_(GOOD_SB1, k1="9" * 200_000), JSON, 422, "k1"),
    ("very-long-time-string", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, t_periastron="2024-01-01" + " " * 10_000),
     JSON, 422, "t_periastron"),
    ("very-long-choice", "POST", RECIPE, {"recipe": "v" * 100_000, "luminosity": 3e5}, JSON, 422, "recipe"),
    # --- domain edges ---
    ("e-equals-1", "POST", SB1, with_(GOOD_SB1, eccentricity=1.0), JSON, 422, "eccentricity"),
    ("e-negative", "POST", SB1, with_(GOOD_SB1, eccentricity=-0.01), JSON, 422, "eccentricity"),
    ("i-equals-0", "POST", SB2, with_(GOOD_SB2, inclination=0.0), JSON, 422, "inclination"),
    ("i-equals-180", "POST", SB2, with_(GOOD_SB2, inclination=180.0), JSON, 422, "inclination"),
    ("i-equals-pi-rad", "POST", SB2, with_(GOOD_SB2, inclination={"value": 3.141592653589793, "unit": "rad"}), JSON,
     422, "inclination"),
    ("zero-parallax", "POST", VISUAL, with_(GOOD_VISUAL, parallax=0.0), JSON, 422, "parallax"),
    ("negative-period", "POST", SB1, with_(GOOD_SB1, period=-41.6), JSON, 422, "period"),
    ("zero-k1", "POST", SB1, with_(GOOD_SB1, k1=0), JSON, 422, "k1"),
    ("missing-required", "POST", SB1, with_(GOOD_SB1, k1=REMOVE), JSON, 422, "k1"),
    ("parallax-and-distance", "POST", VISUAL, with_(GOOD_VISUAL, distance=20.7), JSON, 422, "distance"),
    ("neither-parallax-nor-distance", "POST", VISUAL, with_(GOOD_VISUAL, parallax=REMOVE), JSON, 422, "parallax"),
    # --- correlations ---
    ("correlation-not-positive-definite", "POST", SB2,
     with_(GOOD_SB2, correlations=[{"between": ["k1", "k2"], "rho": 0.9}, {"between": ["k1", "period"], "rho": 0.9},
                                   {"between": ["k2", "period"], "rho": -0.9}]), JSON, 422, "correlations"),
    ("correlation-rho-above-1", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k2"], "rho": 1.5}]),
     JSON, 422, "correlations"),
    ("correlation-rho-as-text", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k2"], "rho": "0.3"}]),
     JSON, 422, "correlations.0.rho"),
    ("correlation-rho-boolean", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k2"], "rho": True}]),
     JSON, 422, "correlations.0.rho"),
    ("correlation-rho-infinite", "POST", SB2,
     b'{"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6}, '
     b'"eccentricity": 0.3, "correlations": [{"between": ["k1", "k2"], "rho": 1e999}]}', JSON, 400,
     "correlations.0.rho"),
    ("huge-integer-seed", "POST", SB1, b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.3, "uncertainty": '
                                       b'{"seed": 1' + b"0" * 330 + b'}}', JSON, 422, "uncertainty.seed"),
    ("overflowing-top-level", "POST", SB1, b"-1e999", JSON, 400, "_body"),
    ("correlation-with-itself", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k1"], "rho": 0.5}]),
     JSON, 422, "correlations"),
    ("correlation-unknown-input", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k9"], "rho": 0.5}]),
     JSON, 422, "correlations"),
    ("correlation-twice", "POST", SB2, with_(GOOD_SB2, correlations=[{"between": ["k1", "k2"], "rho": 0.5},
                                                                    {"between": ["k2", "k1"], "rho": 0.4}]),
     JSON, 422, "correlations"),
    ("correlation-three-names", "POST", SB2,
     with_(GOOD_SB2, correlations=[{"between": ["k1", "k2", "period"], "rho": 0.5}]), JSON, 422, "correlations"),
    ("correlation-of-samples", "POST", SB2,
     with_(GOOD_SB2, k1={"samples": [38.0, 38.2, 38.4]}, k2={"samples": [51.5, 51.7, 51.9]},
           correlations=[{"between": ["k1", "k2"], "rho": 0.5}]), JSON, 422, "correlations"),
    # --- uncertainty options ---
    ("unknown-method", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "bootstrap"}), JSON, 422,
     "uncertainty.method"),
    ("negative-seed", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "seed": -1}), JSON, 422,
     "uncertainty.seed"),
    ("seed-beyond-64-bits", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "seed": 2**70}), JSON,
     422, "uncertainty.seed"),
    ("fractional-seed", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "seed": 1.5}), JSON, 422,
     "uncertainty.seed"),
    ("zero-samples", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "samples": 0}), JSON, 422,
     "uncertainty.samples"),
    ("one-draw", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "samples": 1}), JSON, 422,
     "uncertainty.samples"),
    ("too-few-draws", "POST", SB1, with_(GOOD_SB1, uncertainty={"samples": 99}), JSON, 422, "uncertainty.samples"),
    ("draws-with-the-linear-method", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "linear", "samples": 500}),
     JSON, 422, "uncertainty.samples"),
    ("seed-with-the-linear-method", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "linear", "seed": 3}), JSON,
     422, "uncertainty.seed"),
    ("too-many-draws", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "monte_carlo", "samples": 10**9}), JSON,
     413, "uncertainty.samples"),
    ("unknown-uncertainty-key", "POST", SB1, with_(GOOD_SB1, uncertainty={"method": "linear", "draws": 5}), JSON,
     422, "uncertainty.draws"),
    # --- choices, integers, times ---
    ("unknown-recipe", "POST", RECIPE, {"recipe": "made-up-2099", "luminosity": 3e5}, JSON, 422, "recipe"),
    ("recipe-not-a-string", "POST", RECIPE, {"recipe": 7, "luminosity": 3e5}, JSON, 422, "recipe"),
    ("unknown-mode", "POST", PERIOD_CHANGE, {"period": 6.3, "period_derivative": 0.2, "m1": 27, "m2": 11,
                                             "mode": "wishful"}, JSON, 422, "mode"),
    ("empty-times", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, times=[]), JSON, 422, "times"),
    ("times-not-a-list", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, times=2460400.5), JSON, 422, "times"),
    ("bad-time-string", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, times=[2460400.5, "yesterday"]), JSON, 422,
     "times"),
    ("bad-t-periastron", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, t_periastron="the 5th of never"), JSON, 422,
     "t_periastron"),
    ("unknown-time-format", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, time_format="unix"), JSON, 422, "time_format"),
    ("fractional-count", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, count=1.5), JSON, 422, "count"),
    ("boolean-count", "POST", EPHEMERIS, with_(GOOD_EPHEMERIS, count=True), JSON, 422, "count"),
    # --- paths, methods, formats ---
    ("unknown-calculation", "POST", "/v1/spectroscopic/sb3", GOOD_SB1, JSON, 404, None),
    ("unknown-calculation-declaration", "GET", "/v1/calculations/sb3", None, None, 404, None),
    ("unknown-batch-calculation", "POST", "/v1/batch/sb3", {"systems": [GOOD_SB1]}, JSON, 404, None),
    ("get-on-post-endpoint", "GET", SB1, None, None, 405, None),
    ("delete-on-health", "DELETE", "/v1/health", None, None, 405, None),
    ("unknown-format", "POST", SB1 + "?format=docx", GOOD_SB1, JSON, 400, "format"),
    ("path-traversal", "GET", "/static/..%2f..%2fetc%2fpasswd", None, None, 404, None),
]

RAW_IDS = {row[0] for row in CATALOGUE if isinstance(row[3], bytes)}


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def send(client, method, path, body, content_type):
    headers = {}
    if isinstance(body, bytes):
        data = body
    elif body is None and method != "POST":
        data = None
    else:
        data = json.dumps(body).encode()
    if content_type:
        headers["Content-Type"] = content_type
    return client.open(path, method=method, data=data, headers=headers)


def check_problem(response, status, field):
    assert response.status_code == status, response.get_data(as_text=True)[:500]
    assert response.mimetype == "application/problem+json"
    text = response.get_data(as_text=True)
    assert "Traceback" not in text and 'File "' not in text
    problem = json.loads(text)
    assert problem["status"] == status
    assert problem["title"] and problem["detail"] and problem["type"]
    assert response.headers["X-Request-ID"]
    if field is not None:
        names = problem.get("errors", {})
        assert any(k == field or k.startswith(field + ".") for k in names), (field, names)
    return problem


def test_the_catalogue_is_big_enough():
    assert len(CATALOGUE) >= 40
    assert len({row[0] for row in CATALOGUE}) == len(CATALOGUE)


@pytest.mark.parametrize("name,method,path,body,content_type,status,field", CATALOGUE, ids=[r[0] for r in CATALOGUE])
def test_bad_request(client, name, method, path, body, content_type, status, field):
    if path.startswith("/v1/batch") and not any(r.rule.startswith("/v1/batch") for r in client.application.url_map
                                                .iter_rules()):
        pytest.skip("no batch endpoint in this build")
    check_problem(send(client, method, path, body, content_type), status, field)


@pytest.mark.parametrize("row", [r for r in CATALOGUE if r[0] in RAW_IDS], ids=sorted(RAW_IDS, key=[
    r[0] for r in CATALOGUE].index))
def test_bad_request_under_the_standard_library_parser(client, monkeypatch, row):
    """The same raw bodies when orjson is not installed (the standard library parses them)."""
    monkeypatch.setattr(edge, "orjson", None, raising=False)
    name, method, path, body, content_type, status, field = row
    check_problem(send(client, method, path, body, content_type), status, field)


# --- generated: the common damage on every calculation's own endpoint ----------------------------

def _unit_of_another_dimension(unit: str) -> str:
    return "km/s" if unit in ("solMass", "kg") else "kg"


def _generated():
    rows = []
    for calc in calculations().values():
        if not calc.example:
            continue
        example = dict(calc.example)
        required = [s for s in calc.inputs if s.required and s.default is None and s.kind == "quantity"
                    and s.name in example]
        rows.append((f"{calc.name}-unknown-field", calc.path, {**example, "no_such_input": 1}, 422, "no_such_input"))
        if not required:
            continue
        spec = required[0]
        rest = {k: v for k, v in example.items() if k != spec.name}
        rows.append((f"{calc.name}-missing-{spec.name}", calc.path, rest, 422, spec.name))
        for label, bad in (("null", None), ("true", True), ("array", [1.0, 2.0]), ("string", "abc"),
                           ("empty-object", {}), ("bogus-unit", {"value": 1.0, "unit": "bogus_unit"}),
                           ("wrong-dimension", {"value": 1.0, "unit": _unit_of_another_dimension(spec.unit)}),
                           ("nan-string", "NaN"), ("empty-samples", {"samples": []})):
            rows.append((f"{calc.name}-{spec.name}-{label}", calc.path, {**rest, spec.name: bad}, 422, spec.name))
        rows.append((f"{calc.name}-text-plain", calc.path, json.dumps(example).encode(), 415, None))
        rows.append((f"{calc.name}-truncated", calc.path, json.dumps(example).encode()[:-3], 400, None))
        rows.append((f"{calc.name}-get", calc.path, None, 405, None))
    return rows


GENERATED = _generated()


@pytest.mark.parametrize("name,path,body,status,field", GENERATED, ids=[r[0] for r in GENERATED])
def test_bad_request_on_every_endpoint(client, name, path, body, status, field):
    method = "GET" if status == 405 else "POST"
    content_type = "text/plain" if status == 415 else JSON
    r = send(client, method, path, body, content_type)
    check_problem(r, status, field)
    if status == 405:
        assert "POST" in r.headers["Allow"]


def test_every_calculation_is_in_the_generated_catalogue():
    names = {row[0].rsplit("-unknown-field", 1)[0] for row in GENERATED if row[0].endswith("-unknown-field")}
    assert names == {c.name for c in calculations().values() if c.example}


@pytest.mark.parametrize("path, body, field", [
    ("/v1/spectroscopic/sb2", b'{"\\ud800": 1, "period": 1, "k1": 2, "k2": 3, "eccentricity": 0}', "\\ud800"),
    ("/v1/spectroscopic/sb2", b'{"period": {"\\udfff": 1}, "k1": 2, "k2": 3, "eccentricity": 0}', "period"),
    ("/v1/spectroscopic/sb2", b'{"period": 1, "k1": 2, "k2": 3, "eccentricity": 0, "units": {"\\ud800": "au"}}',
     "units.\\ud800"),
])
def test_a_lone_surrogate_in_a_field_name_is_named_not_a_500(client, path, body, field):
    # json.loads keeps a lone surrogate escape (RFC 8259 sec. 8.2 leaves it to the parser); UTF-8 cannot
    # carry it back, so the answer names the field by the escape the caller wrote
    r = client.post(path, data=body, content_type="application/json")
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    errors = r.get_json()["errors"]
    assert field in errors or any(field in k or field in " ".join(v) for k, v in errors.items()), errors
    # in a batch the system's error comes back in place, the batch answered
    r = client.post("/v1/batch/sb2", data=b'{"systems": [' + body + b']}', content_type="application/json")
    assert r.status_code == 200 and "error" in r.get_json()["results"][0]


def test_a_body_in_another_charset_is_refused_saying_json_is_utf8(client):
    # RFC 8259 sect. 8.1: JSON exchanged between systems is UTF-8; a Latin-1 body (one byte 0xe9 for é) is
    # malformed, whatever the Content-Type's charset says, and a CSV body the same
    text = '{"period": 10, "k1": 20, "eccentricity": 0.1, "note": "café"}'
    r = client.post("/v1/spectroscopic/sb1", data=text.encode("latin-1"),
                    content_type="application/json; charset=latin-1")
    assert r.status_code == 400 and "UTF-8" in r.get_json()["detail"] and "RFC 8259" in r.get_json()["detail"]
    assert r.get_json()["detail"].startswith(f"the request body is not valid UTF-8 (byte {text.index('é')})")
    r = client.post("/v1/batch/sb1", data="period,k1,eccentricity\n10,20,0.1 # café\n".encode("latin-1"),
                    content_type="text/csv")
    assert r.status_code == 400 and "UTF-8" in r.get_json()["detail"]
