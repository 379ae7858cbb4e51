"""The Python client against a real HTTP server on loopback, compared with the HTTP answers."""

import socket
import threading

import numpy as np
import pytest
from werkzeug.serving import make_server

from calcservice import __version__, create_app
from calcservice.client import CalcServiceError, Client, ServiceUnavailable, problem_text

from .conftest import post

SB1 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
       "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
       "inclination": {"value": 71.0, "sigma": 2.0}}


class Recorder:
    """WSGI middleware that remembers the User-Agent of each request."""

    def __init__(self, app):
        self.app = app
        self.agents = []

    def __call__(self, environ, start_response):
        self.agents.append(environ.get("HTTP_USER_AGENT", ""))
        return self.app(environ, start_response)


@pytest.fixture(scope="module")
def server():
    app = Recorder(create_app({"TESTING": True}))
    srv = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{srv.server_port}", app
    srv.shutdown()
    thread.join(5)


@pytest.fixture()
def svc(server):
    return Client(server[0], timeout=30)


def test_calculate_with_tuples_equals_http(svc, client):
    r = svc.calculate("sb1", period=(41.6, 0.02), k1=(23.4, 0.3), eccentricity=(0.31, 0.01),
                      primary_mass=(1.9, 0.1), inclination=(71.0, 2.0))
    assert r == post(client, "/v1/spectroscopic/sb1", SB1)[1]


def test_calculate_with_contract_dicts_units_and_options(svc, client):
    body = {"period": {"value": 0.1139, "sigma": 0.00005, "unit": "yr"}, "k1": {"value": 23.4, "sigma": 0.3},
            "eccentricity": 0.31, "primary_mass": 1.9, "inclination": (71.0, 2.0)}
    r = svc.calculate("sb1", **body, units={"semimajor_axis": "solRad"}, method="monte-carlo", samples=2000, seed=4,
                      correlations={("period", "k1"): 0.2})
    http_body = {**body, "inclination": {"value": 71.0, "sigma": 2.0}, "units": {"semimajor_axis": "solRad"},
                 "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 4},
                 "correlations": [{"between": ["period", "k1"], "rho": 0.2}]}
    assert r == post(client, "/v1/spectroscopic/sb1", http_body)[1]
    assert r["results"]["semimajor_axis"]["unit"] == "solRad" and r["uncertainty"]["seed"] == 4


def test_an_aware_datetime_is_the_utc_instant_it_names(svc):
    # datetime (Python standard library): 12:00 at UTC+05:00 is 07:00 UTC; astropy.time gives its JD
    import datetime as dt
    from astropy.time import Time
    local = dt.datetime(2024, 5, 1, 12, 0, tzinfo=dt.timezone(dt.timedelta(hours=5)))
    r = svc.calculate("ephemeris", period=10.0, eccentricity=0.1, omega=30.0, t_periastron=local, k1=20.0,
                      times=[local, dt.datetime(2024, 5, 1, 7, 0)])
    jd = Time("2024-05-01T07:00:00", scale="utc").jd
    assert r["results"]["series"]["time"]["value"] == pytest.approx([jd, jd], abs=1e-9)


def test_asymmetric_samples_and_astropy_quantities(svc, client):
    from astropy import units as u
    draws = list(np.random.default_rng(3).normal(23.4, 0.3, 500))
    r = svc.calculate("sb1", period=(41.6, 0.01, 0.03), k1=draws, eccentricity=0.31 * u.one,
                      primary_mass=1.9 * u.solMass, seed=9)
    http = post(client, "/v1/spectroscopic/sb1", {
        "period": {"value": 41.6, "sigma_minus": 0.01, "sigma_plus": 0.03}, "k1": {"samples": draws},
        "eccentricity": {"value": 0.31, "unit": ""}, "primary_mass": {"value": 1.9, "unit": "solMass"},
        "uncertainty": {"method": "monte_carlo", "seed": 9}})[1]
    assert r == http
    assert r["uncertainty"]["samples"] == 500          # the user's draws set the count


def test_errors_carry_the_problem(svc):
    with pytest.raises(CalcServiceError) as info:
        svc.calculate("sb1", period=41.6, k1=23.4, eccentricity=1.5)
    e = info.value
    assert e.status == 422 and e.problem["status"] == 422 and "eccentricity" in e.errors
    assert "eccentricity" in str(e)
    with pytest.raises(CalcServiceError) as info:
        svc.calculate("sb7", period=1.0)
    assert info.value.status == 404


def test_user_agent_names_package_and_version(server, svc):
    svc.health()
    agent = server[1].agents[-1]
    assert "calcservice" in agent and __version__ in agent


def test_paths_come_from_the_listing(svc, client):
    calcs = svc.calculations()
    assert {c["name"]: c["path"] for c in calcs.values()} == {
        c["name"]: c["path"] for c in client.get("/v1/calculations").get_json()["calculations"]}
    example = calcs["ephemeris"]["example"]
    r = svc.calculate("ephemeris", **example)
    assert r == post(client, "/v1/orbit/ephemeris", example)[1]


@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_batch_columns_give_numpy_arrays(server, client, transport):
    svc = Client(server[0], timeout=30, transport=transport)
    columns = {"period": [41.6, 12.3, -5.0], "k1": ([23.4, 8.1, 8.1], [0.3, 0.2, 0.2]), "eccentricity": 0.1,
               "primary_mass": [1.9, None, 1.2]}
    out = svc.batch("sb1", columns)
    http = post(client, "/v1/batch/sb1", {"columns": {
        "period": {"value": [41.6, 12.3, -5.0]}, "k1": {"value": [23.4, 8.1, 8.1], "sigma": [0.3, 0.2, 0.2]},
        "eccentricity": 0.1, "primary_mass": {"value": [1.9, None, 1.2]}}})[1]
    assert isinstance(out["mass_function"], np.ndarray) and out["mass_function"].shape == (3,)
    expected = np.array([np.nan if v is None else v for v in http["columns"]["mass_function"]["value"]])
    np.testing.assert_array_equal(out["mass_function"], expected)
    assert np.isnan(out["m2_min"][1]) and np.isfinite(out["m2_min"][0])
    assert out.failed == [2] and "period: must be > 0" in problem_text(out.errors[0])
    assert out.error_text()[2] == "period: must be > 0 (in d)"
    assert out.unit["a1_sin_i"] == "au" and out.sigma["mass_function"].shape == (3,)


def test_batch_sigma_columns_and_rows_agree(svc):
    cols = svc.batch("sb1", {"period": [41.6, 12.3], "period_sigma": [0.02, 0.01], "k1": [23.4, 8.1],
                             "eccentricity": [0.31, 0.05]})
    rows = svc.batch("sb1", [{"period": (41.6, 0.02), "k1": 23.4, "eccentricity": 0.31},
                             {"period": (12.3, 0.01), "k1": 8.1, "eccentricity": 0.05}])
    np.testing.assert_allclose(cols["mass_function"], rows["mass_function"], rtol=1e-12)
    np.testing.assert_allclose(cols.sigma["mass_function"], rows.sigma["mass_function"], rtol=1e-9)


def test_report_and_figure(svc):
    tex = svc.report("sb1", format="latex", **{k: (v["value"], v["sigma"]) for k, v in SB1.items()})
    assert r"\begin{tabular}" in tex
    svg = svc.figure("sb1", format="svg", plot="m2", seed=2, samples=500,
                     **{k: (v["value"], v["sigma"]) for k, v in SB1.items()})
    assert svg.lstrip().startswith(b"<?xml") and b"<svg" in svg


def _free_port() -> int:
    s = socket.socket()
    s.bind(("127.0.0.1", 0))
    port = s.getsockname()[1]
    s.close()
    return port


def test_connection_errors_are_retried(server):
    svc = Client(server[0], timeout=10, retries=2, backoff=0.0)
    calls = []
    real = svc._send

    def flaky(method, target, data, headers):
        calls.append(target)
        if len(calls) <= 2:
            raise ConnectionRefusedError("refused (simulated)")
        return real(method, target, data, headers)

    svc._send = flaky
    assert svc.health()["status"] == "ok" and len(calls) == 3


def test_http_errors_are_not_retried(server):
    svc = Client(server[0], timeout=10, retries=3, backoff=0.0)
    calls = []
    real = svc._send

    def counting(method, target, data, headers):
        calls.append(target)
        return real(method, target, data, headers)

    svc._send = counting
    svc.calculations()
    calls.clear()
    with pytest.raises(CalcServiceError):
        svc.calculate("sb1", period=-1.0, k1=1.0, eccentricity=0.0)
    assert len(calls) == 1


def test_no_server_gives_service_unavailable():
    svc = Client(f"http://127.0.0.1:{_free_port()}", timeout=5, retries=1, backoff=0.0)
    with pytest.raises(ServiceUnavailable) as info:
        svc.health()
    assert info.value.status is None and "cannot connect after 2 attempt" in str(info.value)
