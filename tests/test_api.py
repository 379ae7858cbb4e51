"""The HTTP edge: metadata paths, the OpenAPI document, units and problem details."""

import json
from pathlib import Path

import numpy as np
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
    # a doubled slash is no path of ours either: a problem, not werkzeug's HTML redirect (308) to another URL
    r = client.post("/v1//spectroscopic/sb2", json=SB2)
    assert r.status_code == 404 and r.content_type == "application/problem+json"
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
    from calcservice.core import compute
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


def test_every_route_of_the_served_openapi_document_answers(client):
    # a route the document lists but the app lacks (a blueprint lost at start-up) would answer 404
    import yaml
    paths = yaml.safe_load(client.get("/openapi.yaml").data)["paths"]
    by_path = {c.path: c for c in calculations().values()}
    by_path.update({f"/v1/batch/{c.name}": c for c in calculations().values()})
    assert len(paths) > 2 * len(calculations())
    for path, operations in paths.items():
        for method in operations:
            if method == "get":
                r = client.get(path.replace("{name}", "sb1"))
                assert r.status_code not in (404, 405) and r.status_code < 500, (path, r.status_code)
                continue
            calc = by_path[path]
            example = dict(calc.example)
            body = {"systems": [example]} if path.startswith("/v1/batch/") else example
            status, got = post(client, path, body)
            assert status == 200, (path, got)


def test_times_are_echoed_in_the_time_format_they_were_given_in(client):
    example = dict(calculations()["ephemeris"].example)
    mjd = {**example, "t_periastron": {"value": 58711.8, "sigma": 0.8}, "times": [60400.0, 60500.0],
           "time_format": "mjd"}
    status, got = post(client, "/v1/orbit/ephemeris", mjd)
    assert status == 200, got
    assert got["time_format"] == "mjd"
    assert got["inputs"]["t_periastron"] == {"value": 58711.8, "sigma": 0.8, "unit": "d"}
    assert got["results"]["series"]["time"]["value"] == [60400.0, 60500.0]
    # the same system in Julian Dates (MJD = JD - 2400000.5, IAU 1997 Resolution B1): the same numbers, to the
    # rounding of a JD's double (4.7e-10 d at JD 2.4e6, against 7.3e-12 d at MJD 6e4: the MJDs are held as given)
    status, jd = post(client, "/v1/orbit/ephemeris", {**example, "t_periastron": {"value": 2458712.3, "sigma": 0.8},
                                                      "times": [2460400.5, 2460500.5]})
    assert "time_format" not in jd and jd["inputs"]["t_periastron"]["value"] == 2458712.3
    for key in ("value", "sigma"):
        assert jd["results"]["series"]["rv1"][key] == pytest.approx(got["results"]["series"]["rv1"][key], rel=1e-10)
    # and the events are MJD arithmetic itself: periastron n at T0 + n P, as a caller's numpy computes it
    periastra = [e["value"] for e in got["results"]["events"]["periastron"]]
    assert periastra == [58711.8 + 2037.4 * k for k in (1, 2)][:len(periastra)]
    iso = {**example, "t_periastron": "2019-08-20T19:12:00", "time_format": "mjd"}
    status, got = post(client, "/v1/orbit/ephemeris", iso)
    assert status == 200 and got["inputs"]["t_periastron"]["value"] == "2019-08-20T19:12:00"
    status, rows = post(client, "/v1/batch/ephemeris", {"systems": [{k: v for k, v in mjd.items()
                                                                     if k != "time_format"}],
                                                        "time_format": "mjd", "echo": True})
    assert status == 200 and rows["time_format"] == "mjd"
    assert rows["results"][0]["inputs"]["t_periastron"]["value"] == 58711.8


def test_imports_run_downward_from_the_http_edge_to_the_core():
    # the core, the command line, reports, plots and the dask runner work without HTTP: none of them
    # may import calcservice.api (nor Flask), so the edge can change without touching them
    import ast
    package = ROOT / "calcservice"
    below = [*(package / "core").glob("*.py"), *(package / name for name in
                                                  ("commandline.py", "report.py", "plots.py", "distributed.py",
                                                   "engine.py", "registry.py"))]
    for path in below:
        level_of_package = len(path.relative_to(package).parts)      # "from .. import" from core/x.py is level 2
        for node in ast.walk(ast.parse(path.read_text())):
            if isinstance(node, ast.Import):
                names = [alias.name for alias in node.names]
            elif isinstance(node, ast.ImportFrom):
                if node.level == level_of_package:                    # relative to calcservice/ itself
                    names = [f"calcservice.{node.module or ''}".rstrip(".")] + \
                        [f"calcservice.{alias.name}" for alias in node.names if not node.module]
                elif node.level:
                    names = [node.module or ""]
                else:
                    names = [node.module or ""]
            else:
                continue
            for name in names:
                assert not name.startswith(("calcservice.api", "flask", "werkzeug")), (path.name, name)


def test_a_figure_of_an_mjd_request_asks_for_its_curve_in_mjd(client):
    from calcservice.plots import nominal_body
    calc = calculations()["ephemeris"]
    body = {**dict(calc.example), "t_periastron": {"value": 58711.8, "sigma": 0.8}, "times": [60400.0, 60500.0],
            "time_format": "mjd"}
    status, response = post(client, calc.path, body)
    assert status == 200
    nominal = nominal_body(calc, response, body, np.array([60400.0, 60450.0]))
    assert nominal["time_format"] == "mjd" and nominal["t_periastron"] == 58711.8
    r = client.post(calc.path + "?format=svg", json=body)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"


def test_a_missing_input_is_said_missing_in_the_detail(client):
    # the detail said "invalid value for eccentricity" of an input never sent; its errors entry said "is required"
    status, body = post(client, "/v1/spectroscopic/sb2", {"period": -10, "k1": 30})
    assert status == 422
    assert body["errors"]["k2"] == ["is required"] and body["errors"]["eccentricity"] == ["is required"]
    assert body["detail"] == "missing eccentricity, k2; invalid value for period"
    status, body = post(client, "/v1/spectroscopic/sb2", {"period": 10, "k1": 30, "k2": 40})
    assert body["detail"] == "missing eccentricity"
