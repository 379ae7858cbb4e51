"""The HTTP edge: metadata paths, the OpenAPI document, units and problem details."""

import json
from pathlib import Path

import pytest
from astropy import units as u

from calcservice import __version__
from calcservice.openapi import spec_yaml
from calcservice.registry import calculations

from .conftest import post

ROOT = Path(__file__).resolve().parents[1]
SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0}}


def test_health(client):
    r = client.get("/v1/health")
    assert r.status_code == 200 and r.get_json() == {"status": "ok", "version": __version__}
    assert r.headers["X-Content-Type-Options"] == "nosniff"
    assert r.headers["X-Request-ID"]


def test_calculations_lists_the_registry(client):
    body = client.get("/v1/calculations").get_json()["calculations"]
    assert [c["name"] for c in body] == list(calculations())
    sb1 = next(c for c in body if c["name"] == "sb1")
    ecc = next(i for i in sb1["inputs"] if i["name"] == "eccentricity")
    assert ecc["domain"] == "must be >= 0 and < 1"
    assert any("Hilditch" in r for r in sb1["references"])


def test_openapi_served_matches_the_repository_file(client):
    served = client.get("/openapi.yaml")
    assert served.status_code == 200
    assert served.data.decode() == spec_yaml()
    on_disk = (ROOT / "openapi.yaml").read_text()
    assert on_disk == spec_yaml(), "openapi.yaml drifted: run `python -m calcservice.openapi > openapi.yaml`"


def test_openapi_has_every_calculation_path():
    import yaml
    spec = yaml.safe_load(spec_yaml())
    for calc in calculations().values():
        assert "post" in spec["paths"][calc.path]
        req = spec["components"]["schemas"][f"{calc.name.replace('-', '_')}_request"]
        assert set(i.name for i in calc.inputs) <= set(req["properties"])


def test_sb2_response_shape(client):
    status, body = post(client, "/v1/spectroscopic/sb2", SB2)
    assert status == 200
    assert body["calculation"] == "sb2"
    assert body["uncertainty"] == {"method": "linear"}
    assert body["results"]["m1"]["unit"] == "solMass"
    assert set(body["results"]["m1"]) == {"value", "sigma", "unit"}
    assert body["inputs"]["period"] == {"value": 41.6, "sigma": 0.02, "unit": "d"}
    prov = body["provenance"]
    assert prov["version"] == __version__
    assert prov["constants"]["GM_sun"]["value"] == 1.3271244e20
    assert "omega" in prov["conventions"] and prov["references"]


def test_monte_carlo_response_shape(client):
    status, body = post(client, "/v1/spectroscopic/sb2",
                        {**SB2, "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 7}})
    assert status == 200
    assert set(body["results"]["m1"]) == {"value", "sigma", "low", "high", "unit"}
    assert body["uncertainty"]["seed"] == 7 and body["uncertainty"]["samples"] == 2000
    m1 = body["results"]["m1"]
    assert m1["low"] < m1["value"] < m1["high"]


def _strip(d):
    return {k: v["value"] for k, v in d["results"].items()}


def test_unit_invariance_against_astropy(client):
    # the same orbit in other units, converted by astropy, gives the same numbers
    base = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "inclination": 71.0}
    other = {"period": {"value": (41.6 * u.d).to_value(u.yr), "unit": "yr"},
             "k1": {"value": (38.2 * u.km / u.s).to_value(u.m / u.s), "unit": "m/s"},
             "k2": {"value": 51.7e3, "unit": "m / s"},
             "eccentricity": 0.31,
             "inclination": {"value": (71.0 * u.deg).to_value(u.rad), "unit": "rad"}}
    a = _strip(post(client, "/v1/spectroscopic/sb2", base)[1])
    b = _strip(post(client, "/v1/spectroscopic/sb2", other)[1])
    for k in a:
        assert b[k] == pytest.approx(a[k], rel=1e-12), k


def test_output_units_on_request(client):
    status, body = post(client, "/v1/spectroscopic/sb2", {**SB2, "units": {"semimajor_axis": "solRad",
                                                                           "m1": "kg"}})
    assert status == 200
    ref = post(client, "/v1/spectroscopic/sb2", SB2)[1]["results"]
    a = body["results"]["semimajor_axis"]
    assert a["unit"] == "solRad"
    assert a["value"] == pytest.approx((ref["semimajor_axis"]["value"] * u.au).to_value(u.R_sun), rel=1e-12)
    assert a["sigma"] == pytest.approx((ref["semimajor_axis"]["sigma"] * u.au).to_value(u.R_sun), rel=1e-12)
    assert body["results"]["m1"]["value"] == pytest.approx((ref["m1"]["value"] * u.M_sun).to_value(u.kg), rel=1e-12)


@pytest.mark.parametrize("units,field", [({"nope": "au"}, "units.nope"), ({"m1": "km"}, "units.m1")])
def test_bad_output_units(client, units, field):
    status, body = post(client, "/v1/spectroscopic/sb2", {**SB2, "units": units})
    assert status == 422 and field in body["errors"]


def test_problem_details(client):
    r = client.post("/v1/spectroscopic/sb2", data="{", content_type="application/json")
    assert r.status_code == 400 and r.content_type == "application/problem+json"
    r = client.post("/v1/spectroscopic/sb2", data=json.dumps(SB2), content_type="text/plain")
    assert r.status_code == 415
    assert client.get("/v1/spectroscopic/sb2").status_code == 405
    assert client.post("/v1/spectroscopic/nope", json=SB2).status_code == 404
    status, body = post(client, "/v1/spectroscopic/sb2", {**SB2, "eccentricity": 1.0, "k1": -3, "extra": 1})
    assert status == 422
    assert body["errors"]["eccentricity"] == ["must be >= 0 and < 1"]
    assert "k1" in body["errors"] and body["errors"]["extra"] == ["unknown field"]
    status, body = post(client, "/v1/spectroscopic/sb2", {"period": 41.6})
    assert status == 422 and body["errors"]["k1"] == ["is required"]


def test_refuses_non_finite_and_overflowing_numbers(client):
    for text in ('{"period": NaN}', '{"period": Infinity}', '{"period": 1e999}'):
        r = client.post("/v1/spectroscopic/sb1", data=text, content_type="application/json")
        assert r.status_code == 400, text
    status, body = post(client, "/v1/spectroscopic/sb1", {"period": 10**400, "k1": 3, "eccentricity": 0})
    assert status == 422 and "period" in body["errors"]


def test_body_size_limit():
    from calcservice import create_app
    small = create_app({"MAX_BODY_BYTES": 200}).test_client()
    r = small.post("/v1/spectroscopic/sb2", json={**SB2, "correlations": [{"between": ["k1", "k2"], "rho": 0.1}] * 5})
    assert r.status_code == 413 and r.content_type == "application/problem+json"


def test_cors_is_off_by_default_and_allowlisted_when_configured():
    from calcservice import create_app
    r = create_app().test_client().get("/v1/health", headers={"Origin": "https://example.org"})
    assert "Access-Control-Allow-Origin" not in r.headers
    app = create_app({"CORS_ORIGINS": "https://example.org"})
    r = app.test_client().get("/v1/health", headers={"Origin": "https://example.org"})
    assert r.headers["Access-Control-Allow-Origin"] == "https://example.org"


def test_readme_lists_every_calculation():
    readme = (ROOT / "README.md").read_text()
    for calc in calculations().values():
        assert f"`POST {calc.path}`" in readme, calc.path


def test_every_declaration_example_computes():
    from calcservice.api.service import compute
    for calc in calculations().values():
        assert calc.example, f"{calc.name} has no example"
        r = compute(calc.name, calc.example)
        assert r["results"], calc.name


@pytest.mark.parametrize("query", ["plot=nope&format=svg", "plot=nope", "plot=nope&format=latex", "format=xml"])
def test_bad_query_parameters(client, query):
    r = client.post(f"/v1/spectroscopic/sb2?{query}", json=SB2)
    assert r.status_code == 400 and r.content_type == "application/problem+json"
    assert set(r.get_json()["errors"]) <= {"plot", "format"}


@pytest.mark.parametrize("text", [
    '"\\ud83d\\ude00"',                 # a surrogate pair: one character
    '"\\ud800"', '"\\udc00x"', '"\\ud800\\u0041"',     # lone surrogates: the standard library keeps them
    '12345678901234567890123',          # an integer beyond 64 bits: exact, not a float
    '-9223372036854775809', '[1234567890123456789, 0.12345678901234567890123]',
])
def test_bodies_mean_what_the_standard_library_reads(text):
    # reference: Python's json module, the meaning the service promises (orjson only where it agrees)
    import json
    from calcservice.api.edge import _UNPARSED, _fast_loads, _loads_checked
    fast = _fast_loads(text.encode())
    got = _loads_checked(text) if fast is _UNPARSED else fast
    assert got == json.loads(text) and type(got) is type(json.loads(text))


def test_a_body_shorter_than_its_declared_length_is_refused(client):
    # RFC 9110 sec. 8.6: Content-Length is the body's length; a body that ends early is incomplete
    body = b'{"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31}'
    r = client.post("/v1/spectroscopic/sb2", data=body, content_type="application/json",
                    environ_overrides={"CONTENT_LENGTH": str(len(body) + 10)})
    assert r.status_code == 400 and r.content_type == "application/problem+json"
    assert f"ended after {len(body)} of its declared {len(body) + 10} bytes" in r.get_json()["detail"]
    exact = client.post("/v1/spectroscopic/sb2", data=body, content_type="application/json")
    assert exact.status_code == 200


def _loaded_equal(a, b) -> bool:
    import dataclasses

    import numpy as np
    if dataclasses.is_dataclass(a):
        return type(a) is type(b) and all(_loaded_equal(getattr(a, f.name), getattr(b, f.name))
                                          for f in dataclasses.fields(a))
    if isinstance(a, np.ndarray) or isinstance(b, np.ndarray):
        return np.array_equal(np.asarray(a), np.asarray(b), equal_nan=True)
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(_loaded_equal(a[k], b[k]) for k in a)
    if isinstance(a, list):
        return isinstance(b, list) and len(a) == len(b) and all(map(_loaded_equal, a, b))
    return type(a) is type(b) and a == b


def _load_variants(example: dict) -> list:
    """An example body and the same with each form of the contract, options, and damage."""
    out = [example, {**example, "uncertainty": {"method": "monte_carlo", "samples": 50, "seed": 1}},
           {**example, "units": {}}, {**example, "uncertainty": {"method": "nope"}}, {**example, "zzz": 1}]
    for name, v in example.items():
        x = v.get("value") if isinstance(v, dict) else v
        if type(x) not in (int, float):
            continue
        out += [{**example, name: None}, {**example, name: True}, {**example, name: "1"},
                {**example, name: {"value": x, "sigma": -1.0}}, {**example, name: {"value": x, "sigma": 0.1 * abs(x)}},
                {**example, name: {"value": x, "sigma_minus": 0.1, "sigma_plus": 0.2}},
                {**example, name: {"value": x, "sigma_minus": 0.1}}, {**example, name: {"value": x, "bogus": 1}},
                {**example, name: {"samples": [x, x * 1.01, x * 0.99]}}, {**example, name: -1e300},
                {k: w for k, w in example.items() if k != name}]
    return out


def test_the_direct_field_load_is_the_schemas_own_load():
    # service._load_fields skips marshmallow's per-load machinery for bodies the schema accepts:
    # where it answers, its answer must be the schema's, and where the schema refuses, it must not answer
    from marshmallow import ValidationError

    from calcservice.api.schemas import request_schema
    from calcservice.api.service import _load_fields
    from calcservice.config import Limits
    answered = refused = 0
    for calc in calculations().values():
        schema = request_schema(calc, Limits())
        assert not schema._hooks or not any(schema._hooks.values())   # nothing the direct load would skip
        for body in _load_variants(dict(calc.example)):
            direct = _load_fields(schema, body)
            try:
                full = schema.load(body)
            except ValidationError:
                assert direct is None, (calc.name, body)
                refused += 1
                continue
            except Exception:                     # e.g. a 413 Problem: raised the same way on either path
                continue
            assert direct is not None and list(direct) == list(full) and _loaded_equal(direct, full), (calc.name, body)
            answered += 1
    assert answered > 100 and refused > 100
