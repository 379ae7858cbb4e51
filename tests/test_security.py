"""Security basics: no debug mode or traceback in any configuration, CORS only for configured
origins, a request id on every response and in the access log, logs that never echo bodies,
and the headers the browser relies on."""

from __future__ import annotations

import dataclasses
import json
import logging

import pytest

from calcservice import create_app
from calcservice.registry import REGISTRY, calculations

SB1 = "/v1/spectroscopic/sb1"
GOOD_SB1 = {"period": 41.6, "k1": {"value": 23.4, "sigma": 0.3}, "eccentricity": 0.31}
ALLOWED = "https://binaries.example.org"
DENIED = "https://elsewhere.example.net"
SECRET = "internal-detail-/srv/secret-path-0xdeadbeef"
MARKER = "request-body-marker-5e1f"

CONFIGURATIONS = [None, {"TESTING": True}, {"DEBUG": True}, {"DEBUG": True, "PROPAGATE_EXCEPTIONS": True,
                                                           "TESTING": True}]


# --- no debug, no traceback ------------------------------------------------------------------

@pytest.mark.parametrize("config", CONFIGURATIONS, ids=["default", "testing", "debug", "debug-propagate"])
def test_no_configuration_turns_on_debug(config, monkeypatch):
    monkeypatch.setenv("FLASK_DEBUG", "1")
    app = create_app(config)
    assert app.debug is False
    assert app.config["PROPAGATE_EXCEPTIONS"] is False


def test_the_server_runs_without_reload_or_debug():
    from calcservice.server import DEFAULTS, Server
    assert not DEFAULTS.get("reload") and not DEFAULTS.get("spew")
    assert Server({}).cfg.reload is False


def _boom(**kwargs):
    raise RuntimeError(SECRET)


CALCS = [c for c in calculations().values() if c.example]


@pytest.mark.parametrize("config", CONFIGURATIONS, ids=["default", "testing", "debug", "debug-propagate"])
@pytest.mark.parametrize("calc", CALCS, ids=[c.name for c in CALCS])
def test_an_unexpected_exception_is_a_500_problem_without_traceback(calc, config, monkeypatch, caplog):
    monkeypatch.setitem(REGISTRY, calc.name, dataclasses.replace(calc, function=_boom))
    client = create_app(config).test_client()
    with caplog.at_level(logging.ERROR, logger="calcservice"):
        r = client.post(calc.path, json=calc.example, headers={"X-Request-ID": "boom-1"})
    assert r.status_code == 500
    assert r.mimetype == "application/problem+json"
    text = r.get_data(as_text=True)
    for leak in (SECRET, "Traceback", 'File "', "RuntimeError", ".py"):
        assert leak not in text
    problem = json.loads(text)
    assert problem["status"] == 500 and "boom-1" in problem["detail"]
    assert r.headers["X-Request-ID"] == "boom-1"
    # the operator gets the whole story in the log, under the same request id
    assert "boom-1" in caplog.text and SECRET in caplog.text


def test_a_failing_check_or_extra_is_also_a_clean_500(monkeypatch):
    calc = calculations()["sb1"]
    monkeypatch.setitem(REGISTRY, "sb1", dataclasses.replace(calc, check=lambda **kw: _boom()))
    r = create_app().test_client().post(SB1, json=GOOD_SB1)
    assert r.status_code == 500 and SECRET not in r.get_data(as_text=True)


def test_the_batch_endpoint_hides_tracebacks_too(monkeypatch):
    app = create_app()
    if not any(rule.rule.startswith("/v1/batch/") for rule in app.url_map.iter_rules()):
        pytest.skip("no batch endpoint in this build")
    calc = calculations()["sb1"]
    monkeypatch.setitem(REGISTRY, "sb1", dataclasses.replace(calc, function=_boom))
    r = app.test_client().post("/v1/batch/sb1", json={"systems": [GOOD_SB1, GOOD_SB1]})
    text = r.get_data(as_text=True)
    assert r.status_code == 500 and r.mimetype == "application/problem+json"
    assert SECRET not in text and "Traceback" not in text


# --- CORS ------------------------------------------------------------------------------------

def cors_app(origins=ALLOWED):
    return create_app({"CORS_ORIGINS": origins}).test_client()


def test_cors_allows_a_configured_origin():
    r = cors_app().post(SB1, json=GOOD_SB1, headers={"Origin": ALLOWED})
    assert r.status_code == 200
    assert r.headers["Access-Control-Allow-Origin"] == ALLOWED
    assert "Origin" in r.headers.get("Vary", "")
    assert "X-Request-ID" in r.headers["Access-Control-Expose-Headers"]


def test_cors_allows_each_of_several_configured_origins():
    other = "http://localhost:5173"
    client = cors_app(f"{ALLOWED}, {other}")
    for origin in (ALLOWED, other):
        assert client.get("/v1/health", headers={"Origin": origin}).headers["Access-Control-Allow-Origin"] == origin


@pytest.mark.parametrize("origin", [DENIED, "null", ALLOWED + ".evil.example", ALLOWED.upper(), "*",
                                    ALLOWED.replace("https", "http")])
def test_cors_denies_other_origins(origin):
    r = cors_app().post(SB1, json=GOOD_SB1, headers={"Origin": origin})
    assert r.status_code == 200                # the browser, not the server, enforces the refusal
    assert "Access-Control-Allow-Origin" not in r.headers
    assert "Access-Control-Allow-Methods" not in r.headers


def test_no_cors_without_configuration(monkeypatch):
    monkeypatch.delenv("CALCSERVICE_CORS_ORIGINS", raising=False)
    r = create_app().test_client().post(SB1, json=GOOD_SB1, headers={"Origin": ALLOWED})
    assert "Access-Control-Allow-Origin" not in r.headers


def test_cors_origins_from_the_environment(monkeypatch):
    monkeypatch.setenv("CALCSERVICE_CORS_ORIGINS", ALLOWED)
    r = create_app().test_client().get("/v1/health", headers={"Origin": ALLOWED})
    assert r.headers["Access-Control-Allow-Origin"] == ALLOWED


def _preflight(client, origin):
    return client.options(SB1, headers={"Origin": origin, "Access-Control-Request-Method": "POST",
                                        "Access-Control-Request-Headers": "Content-Type, X-Request-ID"})


def test_preflight_from_an_allowed_origin():
    r = _preflight(cors_app(), ALLOWED)
    assert r.status_code in (200, 204)
    assert r.headers["Access-Control-Allow-Origin"] == ALLOWED
    assert "POST" in r.headers["Access-Control-Allow-Methods"]
    allowed_headers = r.headers["Access-Control-Allow-Headers"].lower()
    assert "content-type" in allowed_headers and "x-request-id" in allowed_headers
    assert r.headers.get("Access-Control-Allow-Credentials") is None       # no cookies, no credentials


def test_preflight_from_a_denied_origin():
    r = _preflight(cors_app(), DENIED)
    assert "Access-Control-Allow-Origin" not in r.headers
    assert "Access-Control-Allow-Methods" not in r.headers


# --- request ids and logs --------------------------------------------------------------------

@pytest.mark.parametrize("method,path,body", [
    ("GET", "/v1/health", None), ("POST", SB1, GOOD_SB1), ("POST", SB1, {"period": -1}),
    ("GET", "/nowhere", None), ("GET", SB1, None), ("POST", SB1, "not an object"),
], ids=["200-get", "200-post", "422", "404", "405", "422-body"])
def test_every_response_has_a_request_id(method, path, body):
    client = create_app().test_client()
    r = client.open(path, method=method, json=body)
    rid = r.headers["X-Request-ID"]
    assert 1 <= len(rid) <= 64 and rid.isprintable()
    again = client.open(path, method=method, json=body)
    assert again.headers["X-Request-ID"] != rid, "a fresh id per request"


def test_a_sane_caller_request_id_is_echoed():
    r = create_app().test_client().get("/v1/health", headers={"X-Request-ID": "lab-script.run-42_a"})
    assert r.headers["X-Request-ID"] == "lab-script.run-42_a"


@pytest.mark.parametrize("hostile", ["x" * 65, "a b", "id\tinjected", "<script>", "ünïcode", "id;rm -rf"])
def test_a_hostile_request_id_is_replaced(hostile):
    r = create_app().test_client().get("/v1/health", headers={"X-Request-ID": hostile})
    rid = r.headers["X-Request-ID"]
    assert rid != hostile and len(rid) == 32 and all(c in "0123456789abcdef" for c in rid)


def test_access_log_line_has_the_request_id(caplog):
    client = create_app().test_client()
    with caplog.at_level(logging.INFO, logger="calcservice.access"):
        r = client.post(SB1, json=GOOD_SB1, headers={"X-Request-ID": "trace-me-123"})
        bad = client.post(SB1, json={"period": -1})
    lines = [rec.getMessage() for rec in caplog.records if rec.name == "calcservice.access"]
    assert any("trace-me-123" in line and " 200 " in line and SB1 in line for line in lines)
    assert any(bad.headers["X-Request-ID"] in line and " 422 " in line for line in lines)
    assert r.status_code == 200


@pytest.mark.parametrize("body", [
    {**GOOD_SB1, "k1": {"value": 23.4, "unit": MARKER}},                         # 422, in a unit
    {**GOOD_SB1, MARKER: 1},                                                      # 422, as a field name
    {**GOOD_SB1, "period": MARKER},                                               # 422, as a value
    {**GOOD_SB1, "uncertainty": {"method": MARKER}},                               # 422, in an option
    ('{"period": "' + MARKER + '"').encode(),                                     # 400, broken JSON
    ('{"period": 41.6, "k1": 23.4, "eccentricity": 0.3, "note": "' + MARKER + '\xff"}').encode("latin-1"),  # 400
    {**GOOD_SB1, "uncertainty": {"method": "monte_carlo", "samples": 10**12}, "x": MARKER},   # 413/422
], ids=["unit", "field-name", "value", "option", "broken-json", "non-utf8", "too-large"])
def test_logs_never_echo_request_bodies(body, caplog):
    client = create_app().test_client()
    with caplog.at_level(logging.DEBUG):
        if isinstance(body, bytes):
            r = client.post(SB1, data=body, content_type="application/json")
        else:
            r = client.post(SB1, json=body)
    assert 400 <= r.status_code < 500
    assert caplog.records, "the request was logged"
    assert MARKER not in caplog.text


def test_a_500_log_holds_the_traceback_but_not_the_body(monkeypatch, caplog):
    calc = calculations()["sb1"]
    monkeypatch.setitem(REGISTRY, "sb1", dataclasses.replace(calc, function=_boom))
    with caplog.at_level(logging.DEBUG):
        r = create_app().test_client().post(SB1, json={**GOOD_SB1, "k1": {"value": 23.4, "sigma": 0.3,
                                                                          "unit": "km/s"},
                                                      "units": {"mass_function": "kg"}},
                                           headers={"User-Agent": MARKER})
    assert r.status_code == 500
    assert "Traceback" in caplog.text and MARKER not in caplog.text


# --- headers ---------------------------------------------------------------------------------

@pytest.mark.parametrize("path", ["/v1/health", "/v1/calculations", "/openapi.yaml", "/nowhere"])
def test_nosniff_everywhere(path):
    r = create_app().test_client().get(path)
    assert r.headers["X-Content-Type-Options"] == "nosniff"


def test_the_form_page_has_a_strict_content_security_policy():
    app = create_app()
    if not any(rule.rule == "/" for rule in app.url_map.iter_rules()):
        pytest.skip("no form page in this build")
    r = app.test_client().get("/")
    assert r.status_code == 200 and r.mimetype == "text/html"
    csp = {d.split()[0]: d.split()[1:] for d in r.headers["Content-Security-Policy"].split(";") if d.strip()}
    assert csp["default-src"] in (["'self'"], ["'none'"])
    assert csp.get("frame-ancestors") == ["'none'"] or r.headers.get("X-Frame-Options") == "DENY"
    assert csp.get("object-src") == ["'none'"]
    for directive in csp.values():
        assert "'unsafe-inline'" not in directive and "'unsafe-eval'" not in directive and "*" not in directive
    assert r.headers["X-Content-Type-Options"] == "nosniff"


def test_server_header_does_not_name_versions():
    r = create_app().test_client().get("/v1/health")
    assert "Werkzeug" not in r.headers.get("Server", "") and "Python" not in r.headers.get("Server", "")


@pytest.mark.parametrize("media_type", ["text/csv", "text/x-ecsv"])
def test_a_table_body_is_never_read_as_a_path_on_the_server(client, tmp_path, media_type):
    # astropy's Table.read takes a string without a line break for a file name: a body that is a path
    # must be parsed as the (one-line) table it is, never open that file and echo its first line
    secret = tmp_path / "secret.csv"
    secret.write_text("confidential_column,another\n1,2\n")
    for body in (str(secret), str(tmp_path / "missing.csv"), "/etc/hostname", "http://example.invalid/a.csv"):
        r = client.post("/v1/batch/sb2", data=body.encode(), content_type=media_type)
        assert r.status_code == 422, (body, r.status_code)
        assert "confidential" not in r.get_data(as_text=True)
        # the body's own text is the unknown column (a long name shortened to 80 characters)
        assert [k for k in r.get_json()["errors"] if body.startswith(k.rstrip("…"))], r.get_json()["errors"]
    r = client.post("/v1/batch/sb2", data=b"", content_type=media_type)
    assert r.status_code == 422 and r.is_json
