"""Limits: configurable (CALCSERVICE_* environment variables or the create_app mapping), with safe
defaults, and work over them refused fast -- before the engine runs.

Each limit is exercised with a small configured value; "refused before computing" is checked by
replacing the engine entry point with one that fails the test if it is called.
"""

from __future__ import annotations

import dataclasses
import io
import json
import time
from pathlib import Path

import pytest
from werkzeug.test import EnvironBuilder

from calcservice import create_app
from calcservice.core import single
from calcservice.config import Limits, load_settings
from calcservice.registry import calculations

ROOT = Path(__file__).resolve().parents[1]
SB1 = "/v1/spectroscopic/sb1"
SB2 = "/v1/spectroscopic/sb2"
EPHEMERIS = "/v1/orbit/ephemeris"
GOOD_SB1 = {"period": 41.6, "k1": {"value": 23.4, "sigma": 0.3}, "eccentricity": 0.31}
GOOD_EPHEMERIS = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3,
                  "k1": {"value": 61.2, "sigma": 1.1}, "times": [2460400.5, 2460500.5], "count": 1}


@pytest.fixture()
def no_engine(monkeypatch):
    """The engine must not run: a refused request is refused before any physics is computed."""
    def refuse(*args, **kwargs):
        raise AssertionError("the engine ran for a request that should have been refused first")
    monkeypatch.setattr(single, "evaluate", refuse)     # the one engine call of single and batch alike


def app_with(**limits):
    return create_app({k.upper(): v for k, v in limits.items()})


def has_batch(app) -> bool:
    return any(r.rule.startswith("/v1/batch/") for r in app.url_map.iter_rules())


def problem(r, status):
    assert r.status_code == status, r.get_data(as_text=True)[:400]
    assert r.mimetype == "application/problem+json"
    return r.get_json()


# --- configuration ---------------------------------------------------------------------------

def test_every_limit_reads_its_environment_variable():
    for f in dataclasses.fields(Limits):
        env = {f"CALCSERVICE_{f.name.upper()}": "1234"}
        assert getattr(load_settings(None, env).limits, f.name) == 1234, f.name


def test_the_config_mapping_overrides_the_environment():
    settings = load_settings({"MAX_SAMPLES": 77}, {"CALCSERVICE_MAX_SAMPLES": "55"})
    assert settings.limits.max_samples == 77


@pytest.mark.parametrize("text", ["lots", "-5", "0", "1.5", ""])
def test_a_bad_limit_stops_the_start_with_its_name(text):
    with pytest.raises(ValueError, match="CALCSERVICE_MAX_SERIES"):
        load_settings(None, {"CALCSERVICE_MAX_SERIES": text})


def test_create_app_reads_the_environment(monkeypatch):
    monkeypatch.setenv("CALCSERVICE_MAX_SAMPLES", "100")
    client = create_app().test_client()
    r = client.post(SB1, json={**GOOD_SB1, "uncertainty": {"method": "monte_carlo", "samples": 101}})
    assert problem(r, 413)["errors"]["uncertainty.samples"]
    r = client.post(SB1, json={**GOOD_SB1, "uncertainty": {"method": "monte_carlo"}})
    assert r.status_code == 200 and r.get_json()["uncertainty"]["samples"] == 100, "the default follows the ceiling"


def test_defaults_are_safe_and_consistent():
    d = Limits()
    assert d.default_samples <= d.max_samples <= d.max_batch_draws
    assert d.max_body_bytes <= 64 * 1024 * 1024
    assert d.max_series_evaluations <= 10_000_000          # a few seconds of the heaviest series physics
    assert 8 <= d.max_json_depth <= 100
    assert d.max_string_length <= 1024


def test_gunicorn_has_a_worker_timeout_as_the_last_line_of_defence():
    from calcservice.server import DEFAULTS
    assert 0 < DEFAULTS["timeout"] <= 120
    assert DEFAULTS["graceful_timeout"] > 0


# --- body size --------------------------------------------------------------------------------

class Untouchable(io.RawIOBase):
    """A request body that fails the test if anyone reads it."""

    def readable(self):
        return True

    def readinto(self, b):
        raise AssertionError("the body was read")


def call(app, environ):
    status = []
    body = b"".join(app(environ, lambda s, h, exc=None: status.append((s, h))))
    return int(status[0][0].split()[0]), dict(status[0][1]), body


def test_body_over_the_limit_is_refused_before_it_is_read():
    app = app_with(max_body_bytes=1000)
    env = EnvironBuilder(path=SB1, method="POST", content_type="application/json").get_environ()
    env["CONTENT_LENGTH"] = str(10**9)
    env["wsgi.input"] = Untouchable()
    status, headers, body = call(app, env)
    assert status == 413 and headers["Content-Type"] == "application/problem+json"
    assert json.loads(body)["status"] == 413


def test_streamed_body_over_the_limit_is_413_not_a_truncated_parse():
    # a chunked upload has no Content-Length; the WSGI server terminates the stream (gunicorn does)
    app = app_with(max_body_bytes=1000)
    data = json.dumps({**GOOD_SB1, "k1": {"samples": [23.4] * 2000}}).encode()
    env = EnvironBuilder(path=SB1, method="POST", content_type="application/json").get_environ()
    env.pop("CONTENT_LENGTH", None)
    env["wsgi.input"] = io.BytesIO(data)
    env["wsgi.input_terminated"] = True
    status, _, body = call(app, env)
    assert status == 413, body[:300]


def test_body_at_the_limit_is_accepted():
    body = json.dumps(GOOD_SB1).encode()
    app = app_with(max_body_bytes=len(body))
    r = app.test_client().post(SB1, data=body, content_type="application/json")
    assert r.status_code == 200
    r = app_with(max_body_bytes=len(body) - 1).test_client().post(SB1, data=body, content_type="application/json")
    problem(r, 413)


# --- work -------------------------------------------------------------------------------------

def test_monte_carlo_draws_per_request(no_engine):
    client = app_with(max_samples=1000).test_client()
    t0 = time.perf_counter()
    r = client.post(SB1, json={**GOOD_SB1, "uncertainty": {"method": "monte_carlo", "samples": 1001}})
    assert "uncertainty.samples" in problem(r, 413)["errors"]
    assert time.perf_counter() - t0 < 1.0


def test_draws_under_the_limit_are_computed():
    client = app_with(max_samples=1000).test_client()
    r = client.post(SB1, json={**GOOD_SB1, "uncertainty": {"method": "monte_carlo", "samples": 1000, "seed": 1}})
    assert r.status_code == 200 and r.get_json()["uncertainty"]["samples"] == 1000


def test_sample_array_length(no_engine):
    client = app_with(max_sample_array=100).test_client()
    r = client.post(SB1, json={**GOOD_SB1, "k1": {"samples": [23.4 + 0.01 * k for k in range(101)]}})
    assert problem(r, 413)["errors"]["k1"]


def test_ephemeris_times(no_engine):
    client = app_with(max_series=50).test_client()
    r = client.post(EPHEMERIS, json={**GOOD_EPHEMERIS, "times": [2460000.5 + k for k in range(51)]})
    assert problem(r, 413)["errors"]["times"]


def test_ephemeris_times_given_as_iso_strings(no_engine):
    client = app_with(max_series=50).test_client()
    r = client.post(EPHEMERIS, json={**GOOD_EPHEMERIS, "times": ["2024-01-01T00:00:00"] * 51})
    assert problem(r, 413)["errors"]["times"]


def test_series_times_draws_is_limited(no_engine):
    # 200 times x (1 + 2000 draws) = 400 200 evaluations > 100 000
    client = app_with(max_series_evaluations=100_000).test_client()
    r = client.post(EPHEMERIS, json={**GOOD_EPHEMERIS, "times": [2460000.5 + k for k in range(200)],
                                     "uncertainty": {"method": "monte_carlo", "samples": 2000}})
    assert problem(r, 413)["errors"]["times"]


def test_many_iso_times_parse_fast():
    # astropy parses a list at once; one by one, 20 000 strings would take ~9 s
    client = create_app().test_client()
    times = [f"2024-01-{1 + k % 28:02d}T{k % 24:02d}:00:00" for k in range(20_000)]
    t0 = time.perf_counter()
    r = client.post(EPHEMERIS, json={**GOOD_EPHEMERIS, "k1": 61.2, "times": times})
    assert r.status_code == 200
    assert time.perf_counter() - t0 < 4.0


def test_json_depth():
    client = app_with(max_json_depth=4).test_client()
    ok = {**GOOD_SB1, "correlations": [{"between": ["k1", "period"], "rho": 0.0}]}     # depth 4
    assert client.post(SB1, json=ok).status_code in (200, 422)
    deep = {**GOOD_SB1, "k1": {"value": 23.4, "unit": {"a": [[1]]}}}                 # depth 5
    assert problem(client.post(SB1, json=deep), 400)


@pytest.mark.parametrize("body,field", [
    ({**GOOD_SB1, "k1": {"value": 23.4, "unit": "k" * 41}}, "k1"),
    ({**GOOD_SB1, "units": {"mass_function": "k" * 41}}, "units"),
    ({**GOOD_EPHEMERIS, "t_periastron": "2019-08-21" + "0" * 31}, "t_periastron"),
    ({**GOOD_EPHEMERIS, "times": ["2024-01-01T00:00:00" + "0" * 31]}, "times"),
], ids=["unit", "output-unit", "time", "time-in-series"])
def test_string_lengths(no_engine, body, field):
    client = app_with(max_string_length=40).test_client()
    path = EPHEMERIS if "times" in body else SB1
    errors = problem(client.post(path, json=body), 422)["errors"]
    assert any(k == field or k.startswith(field + ".") for k in errors), errors


# --- batch ------------------------------------------------------------------------------------

def test_batch_rows(no_engine):
    app = app_with(max_batch_rows=10)
    if not has_batch(app):
        pytest.skip("no batch endpoint in this build")
    r = app.test_client().post("/v1/batch/sb1", json={"systems": [GOOD_SB1] * 11})
    assert problem(r, 413)["errors"]
    r = app.test_client().post("/v1/batch/sb1", json={"columns": {"period": [41.6] * 11, "k1": 23.4,
                                                                   "eccentricity": 0.3}})
    assert problem(r, 413)["errors"]


def test_batch_draws(no_engine):
    app = app_with(max_batch_draws=10_000)
    if not has_batch(app):
        pytest.skip("no batch endpoint in this build")
    r = app.test_client().post("/v1/batch/sb1", json={"systems": [GOOD_SB1] * 11,
                                                       "uncertainty": {"method": "monte_carlo", "samples": 1000}})
    assert problem(r, 413)["errors"]


def test_batch_series_work(no_engine):
    # each system alone is under the series budget; together they are not
    app = app_with(max_series_evaluations=100_000)
    if not has_batch(app):
        pytest.skip("no batch endpoint in this build")
    system = {**GOOD_EPHEMERIS, "times": [2460000.5 + k for k in range(100)]}
    r = app.test_client().post("/v1/batch/ephemeris", json={
        "systems": [system] * 20, "uncertainty": {"method": "monte_carlo", "samples": 500}})
    assert r.status_code == 413, r.get_data(as_text=True)[:300]


def test_every_calculation_refuses_too_many_draws(no_engine):
    client = app_with(max_samples=10).test_client()
    for calc in calculations().values():
        if not calc.example:
            continue
        r = client.post(calc.path, json={**calc.example, "uncertainty": {"method": "monte_carlo", "samples": 11}})
        assert problem(r, 413)["errors"], calc.name
