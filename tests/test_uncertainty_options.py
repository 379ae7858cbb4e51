"""The uncertainty options mean what they say, or are refused naming the field: ``samples`` or ``seed``
without a method ask for Monte Carlo (as the command line's --samples and --seed do), with the linear
method they are a 422; a request asks for at least ``MIN_DRAWS`` draws; the user's own shorter samples
are answered with a ``few_draws`` warning, never with a false ``sigma_undefined``.  The same rules hold
in a single request, a rows batch (batch-wide and a row's own options), a columns batch and a table
body's ``?options=``."""

from __future__ import annotations

import json
import statistics

import numpy as np
import pytest
import uncertainties
from astropy.constants import GM_sun
from astropy.table import Table

from calcservice import create_app, tables
from calcservice.cli import main
from calcservice.client import rows_per_request
from calcservice.engine import MIN_DRAWS

from .conftest import post

SB1 = "/v1/spectroscopic/sb1"
BODY = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
        "eccentricity": {"value": 0.31, "sigma": 0.01}}
# f(M) = P K^3 (1 - e^2)^1.5 / (2 pi G), in solMass per d (km/s)^3, with astropy's IAU 2015 B3 nominal GM_sun
MASS_FUNCTION = (86400.0 * 1e9 / (2 * np.pi * GM_sun.si.value))


@pytest.fixture(scope="module")
def client():
    # a small default so that a request without samples stays cheap
    return create_app({"TESTING": True, "DEFAULT_SAMPLES": 400}).test_client()


def _mc(client, path, body, uncertainty):
    status, got = post(client, path, {**body, "uncertainty": uncertainty})
    assert status == 200, got
    return got


def test_the_fewest_draws_are_100():
    # 100 normal draws put the ends of the 68.27 % interval (15.87th and 84.13th percentiles) within
    # sqrt(p (1 - p) / N) / phi(1) of a sigma: the standard error of a sample quantile (Stuart & Ord,
    # Kendall's Advanced Theory of Statistics, 10.10; from memory) evaluated with scipy's normal pdf
    from scipy import stats
    p = stats.norm.cdf(-1.0)
    assert np.sqrt(p * (1 - p) / MIN_DRAWS) / stats.norm.pdf(1.0) == pytest.approx(0.151, abs=0.001)
    assert MIN_DRAWS == 100


# --- samples or a seed without a method: Monte Carlo ----------------------------------------------

def test_samples_without_a_method_are_monte_carlo_with_those_draws(client):
    implied = _mc(client, SB1, BODY, {"samples": 300, "seed": 11})
    explicit = _mc(client, SB1, BODY, {"method": "monte_carlo", "samples": 300, "seed": 11})
    assert implied["uncertainty"] == explicit["uncertainty"]
    assert implied["uncertainty"]["method"] == "monte_carlo" and implied["uncertainty"]["samples"] == 300
    assert implied["results"] == explicit["results"] and implied["warnings"] == explicit["warnings"]
    # and the numbers are a Monte Carlo's: beside first-order propagation by the `uncertainties` package
    P, K, e = (uncertainties.ufloat(BODY[k]["value"], BODY[k]["sigma"]) for k in ("period", "k1", "eccentricity"))
    f = MASS_FUNCTION * P * K**3 * (1 - e**2) ** 1.5
    got = implied["results"]["mass_function"]
    assert "low" in got and "high" in got
    assert got["value"] == pytest.approx(f.n, rel=3 * f.s / f.n / np.sqrt(300) + 2e-4)
    assert got["sigma"] == pytest.approx(f.s, rel=4 / np.sqrt(2 * 299))      # sd of a sample sd: 1/sqrt(2(N-1))


def test_a_seed_without_a_method_is_monte_carlo_with_the_default_draws(client):
    got = _mc(client, SB1, BODY, {"seed": 5})
    default = client.get("/v1/limits").get_json()["limits"]["default_samples"]["value"]
    assert got["uncertainty"]["method"] == "monte_carlo" and got["uncertainty"]["seed"] == 5
    assert got["uncertainty"]["samples"] == default == 400
    assert got["results"] == _mc(client, SB1, BODY, {"method": "monte-carlo", "seed": 5})["results"]


def test_the_command_line_and_the_service_read_samples_alike(client, capsys):
    # the CLI's --samples and --seed imply Monte Carlo; the same options in a body without a method now do too
    code = main(["compute", "sb1", "period=41.6+-0.02", "k1=23.4+-0.3", "eccentricity=0.31+-0.01",
                 "--samples", "200", "--seed", "3", "--json"])
    assert code == 0
    cli = json.loads(capsys.readouterr().out)
    http = _mc(client, SB1, BODY, {"samples": 200, "seed": 3})
    assert cli["uncertainty"] == http["uncertainty"] and cli["results"] == http["results"]


# --- refusals, each naming its field ---------------------------------------------------------------

@pytest.mark.parametrize("uncertainty, fields", [
    ({"method": "linear", "samples": 100}, {"uncertainty.samples"}),
    ({"method": "linear", "seed": 3}, {"uncertainty.seed"}),
    ({"method": "linear", "samples": 100, "seed": 3}, {"uncertainty.samples", "uncertainty.seed"}),
    ({"method": "monte_carlo", "samples": 1}, {"uncertainty.samples"}),
    ({"method": "monte_carlo", "samples": MIN_DRAWS - 1}, {"uncertainty.samples"}),
    ({"samples": 20, "seed": 3}, {"uncertainty.samples"}),
    ({"samples": 0}, {"uncertainty.samples"}),
])
def test_contradictory_or_too_few_draws_are_refused(client, uncertainty, fields):
    status, got = post(client, SB1, {**BODY, "uncertainty": uncertainty})
    assert status == 422 and set(got["errors"]) == fields, got
    text = " ".join(m for f in fields for m in got["errors"][f])
    assert ("monte_carlo" in text) if uncertainty.get("method") == "linear" else (str(MIN_DRAWS) in text)


def test_the_fewest_draws_are_answered(client):
    got = _mc(client, SB1, BODY, {"method": "monte_carlo", "samples": MIN_DRAWS, "seed": 2})
    assert got["uncertainty"]["samples"] == MIN_DRAWS
    assert not {"few_draws", "sigma_undefined"} & {w["code"] for w in got["warnings"]}


def test_linear_without_draws_is_still_linear(client):
    got = _mc(client, SB1, BODY, {"method": "linear"})
    assert got["uncertainty"] == {"method": "linear"}
    assert got == _mc(client, SB1, BODY, {}) | {"uncertainty": {"method": "linear"}}


# --- the user's own samples: their length is theirs ---------------------------------------------

def test_ten_equal_samples_are_answered_with_a_warning_not_a_false_sigma(client):
    status, got = post(client, SB1, {"period": 41.6, "k1": {"samples": [23.4] * 10}, "eccentricity": 0.31})
    assert status == 200, got
    f = got["results"]["mass_function"]
    # ten equal draws of every output: their sample standard deviation is exactly 0 (statistics.stdev)
    assert f["sigma"] == statistics.stdev([f["value"]] * 10) == 0.0 and f["low"] == f["high"] == f["value"]
    assert f["value"] == pytest.approx(MASS_FUNCTION * 41.6 * 23.4**3 * (1 - 0.31**2) ** 1.5, rel=1e-4)
    few = [w for w in got["warnings"] if w["code"] == "few_draws"]
    assert len(few) == 1 and few[0]["fields"] == ["k1"] and "10 draws" in few[0]["message"]
    assert "sigma_undefined" not in {w["code"] for w in got["warnings"]}


def test_few_normal_samples_keep_their_sample_standard_deviation(client):
    # ten normal draws whose largest squared deviation holds over half of their sum (the heavy-tail
    # test's sign of a distribution without a variance, which ten draws cannot tell): found by search
    rng = np.random.default_rng(_HEAVY_LOOKING_SEED)
    k1 = 23.4 + 0.3 * rng.standard_normal(10)
    dev = (k1 - np.median(k1)) ** 2
    assert dev.max() > 0.5 * dev.sum()
    status, got = post(client, SB1, {"period": 41.6, "k1": {"samples": k1.tolist()}, "eccentricity": 0.31})
    assert status == 200, got
    f = MASS_FUNCTION * 41.6 * k1**3 * (1 - 0.31**2) ** 1.5
    assert got["results"]["mass_function"]["sigma"] == pytest.approx(statistics.stdev(f.tolist()), rel=1e-3)
    assert got["results"]["mass_function"]["value"] == pytest.approx(statistics.median(f.tolist()), rel=1e-3)
    assert {"few_draws"} <= {w["code"] for w in got["warnings"]}
    assert "sigma_undefined" not in {w["code"] for w in got["warnings"]}


def _heavy_looking_seed() -> int:
    for seed in range(1000):
        z = np.random.default_rng(seed).standard_normal(10)
        dev = (z - np.median(z)) ** 2
        if dev.max() > 0.5 * dev.sum():
            return seed
    raise AssertionError("no seed found")


_HEAVY_LOOKING_SEED = _heavy_looking_seed()


# --- batches: the whole batch's options and a row's own -----------------------------------------

SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01}}
COLUMNS = {"period": {"value": [41.6, 12.0], "sigma": [0.02, 0.01]}, "k1": {"value": [38.2, 20.0], "sigma": 0.4},
           "k2": {"value": [51.7, 25.0], "sigma": 0.6}, "eccentricity": 0.31}


@pytest.mark.parametrize("shape", ["systems", "columns"])
def test_batch_wide_samples_without_a_method_are_monte_carlo(client, shape):
    body = {"systems": [SB2, SB2]} if shape == "systems" else {"columns": COLUMNS}
    implied = post(client, "/v1/batch/sb2", {**body, "uncertainty": {"samples": 200, "seed": 5}})
    explicit = post(client, "/v1/batch/sb2", {**body, "uncertainty": {"method": "monte_carlo", "samples": 200,
                                                                       "seed": 5}})
    assert implied[0] == explicit[0] == 200, implied
    assert implied[1] == explicit[1]
    unc = implied[1]["uncertainty"]
    assert unc["method"] == "monte_carlo" and unc["samples"] == 200 and unc["seed"] == 5
    if shape == "columns":
        assert "low" in implied[1]["columns"]["m1_sin3i"]
    else:
        assert "low" in implied[1]["results"][0]["results"]["m1_sin3i"]


@pytest.mark.parametrize("shape", ["systems", "columns"])
@pytest.mark.parametrize("uncertainty, field", [
    ({"method": "linear", "samples": 200}, "uncertainty.samples"),
    ({"method": "linear", "seed": 1}, "uncertainty.seed"),
    ({"samples": 50}, "uncertainty.samples"),
])
def test_a_bad_batch_wide_uncertainty_refuses_the_batch(client, shape, uncertainty, field):
    body = {"systems": [SB2, SB2]} if shape == "systems" else {"columns": COLUMNS}
    status, got = post(client, "/v1/batch/sb2", {**body, "uncertainty": uncertainty})
    assert status == 422 and field in got["errors"], got


def test_a_rows_own_uncertainty_is_read_by_the_same_rules(client):
    rows = [SB2, {**SB2, "uncertainty": {"method": "linear", "seed": 2}},
            {**SB2, "uncertainty": {"samples": 150, "seed": 2}}, {**SB2, "uncertainty": {"samples": 3}}]
    status, got = post(client, "/v1/batch/sb2", {"systems": rows})
    assert status == 200, got
    first, contradiction, own, few = got["results"]
    assert got["uncertainty"] == {"method": "linear"} and "uncertainty" not in first
    assert contradiction["error"]["status"] == 422 and "uncertainty.seed" in contradiction["error"]["errors"]
    assert own["uncertainty"]["method"] == "monte_carlo" and own["uncertainty"]["samples"] == 150
    single = _mc(client, "/v1/spectroscopic/sb2", SB2, {"method": "monte_carlo", "samples": 150, "seed": 2})
    assert own["results"] == single["results"]
    assert few["error"]["status"] == 422 and "uncertainty.samples" in few["error"]["errors"]


@pytest.mark.parametrize("options, status", [
    ({"uncertainty": {"samples": 200, "seed": 5}}, 200),
    ({"uncertainty": {"method": "linear", "samples": 200}}, 422),
    ({"uncertainty": {"method": "monte_carlo", "samples": 10}}, 422),
])
def test_a_table_bodys_options_are_read_by_the_same_rules(client, options, status):
    text = ("period,period_sigma,k1,k1_sigma,k2,k2_sigma,eccentricity,eccentricity_sigma\n"
            "41.6,0.02,38.2,0.4,51.7,0.6,0.31,0.01\n")
    r = client.post("/v1/batch/sb2", data=text, content_type=tables.CSV, headers={"Accept": tables.CSV},
                    query_string={"options": json.dumps(options)})
    assert r.status_code == status, r.get_data(as_text=True)[:300]
    if status == 422:
        assert "uncertainty.samples" in r.get_json()["errors"]
        return
    answer = Table.read(r.get_data(as_text=True), format="ascii.csv")
    # the same numbers as the JSON columns body with the method given (tests/test_tables.py holds the two alike)
    columns = {name: {"value": [v["value"]], "sigma": [v["sigma"]]} for name, v in SB2.items()}
    reference = post(client, "/v1/batch/sb2", {"columns": columns, "uncertainty": {"method": "monte_carlo",
                                                                                   "samples": 200, "seed": 5}})[1]
    m1 = reference["columns"]["m1_sin3i"]
    assert answer["m1_sin3i[solMass]"][0] == m1["value"][0] and answer["m1_sin3i_low[solMass]"][0] == m1["low"][0]


def test_the_client_splits_implied_monte_carlo_by_draws():
    limits = {"max_batch_rows": 100_000, "max_batch_draws": 5_000_000, "default_samples": 10_000}
    assert rows_per_request(limits, {"uncertainty": {"samples": 1000}}) == 5000
    assert rows_per_request(limits, {"uncertainty": {"seed": 1}}) == 500
    assert rows_per_request(limits, {"uncertainty": {"method": "linear"}}) == 100_000


def test_a_samples_count_the_inputs_samples_override_is_warned(client):
    # the contract: inputs given as samples are paired index by index, so their length is the number of
    # draws; an uncertainty.samples that asks for another number is not used, and the answer says so
    rng = np.random.default_rng(3)
    period = rng.normal(41.6, 0.02, 400).tolist()
    body = {"period": {"samples": period}, "k1": {"value": 23.4, "sigma": 0.3}, "eccentricity": 0.31}
    for asked, warned in ((None, False), (400, False), (20000, True)):
        options = {} if asked is None else {"uncertainty": {"method": "monte_carlo", "samples": asked, "seed": 1}}
        status, doc = post(client, "/v1/spectroscopic/sb1", {**body, **options})
        assert status == 200 and doc["uncertainty"]["samples"] == 400
        codes = [w["code"] for w in doc["warnings"]]
        assert ("samples_from_inputs" in codes) is warned, (asked, codes)
    message = next(w["message"] for w in doc["warnings"] if w["code"] == "samples_from_inputs")
    assert "20000" in message and "400" in message
    # in a batch, the rows that bring their own samples are told, the others not
    status, doc = post(client, "/v1/batch/sb1", {"systems": [body, {**body, "period": 41.6}],
                                                 "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 1}})
    assert status == 200
    assert [any(w["code"] == "samples_from_inputs" for w in row["warnings"]) for row in doc["results"]] == [True, False]


def test_a_seed_out_of_range_is_said_in_words():
    # marshmallow's "Must be greater than or equal to 0 and less than 9223372036854775808." was the message
    c = create_app().test_client()
    body = {"period": 3.4, "k1": {"value": 61.0, "sigma": 1.0}, "eccentricity": 0.0,
            "uncertainty": {"method": "monte_carlo", "seed": -3}}
    r = c.post("/v1/spectroscopic/sb1", json=body)
    assert r.status_code == 422
    assert r.get_json()["errors"] == {"uncertainty.seed": ["must be a whole number from 0 to 2^63 - 1, not -3"]}
