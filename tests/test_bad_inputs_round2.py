"""Bad input, second round: what the first catalogue (test_bad_inputs.py) left -- repeated JSON
names, the Python client's own refusals, the command line's argument errors.  Each case gets a
4xx problem (or the client's CalcServiceError, or one line and a non-zero exit) naming the field."""

from __future__ import annotations

import json

import pytest

from calcservice import create_app

SB1 = "/v1/spectroscopic/sb1"
GOOD = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def problem(r, status):
    assert r.status_code == status, r.get_data()[:300]
    assert r.headers["Content-Type"].startswith("application/problem+json")
    return r.get_json()


# RFC 8259 section 4: names SHOULD be unique, and a repeated one leaves the meaning to the parser
# (orjson and the standard library both keep the last); the service refuses to guess.
@pytest.mark.parametrize("raw, field", [
    (b'{"period": 41.6, "period": 42, "k1": 23.4, "eccentricity": 0.31}', "period"),
    (b'{"period": {"value": 41.6, "value": 42}, "k1": 23.4, "eccentricity": 0.31}', "value"),
    (b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.31, "uncertainty": {"samples": 200, "seed": 1, "seed": 2}}',
     "seed"),
    # the same name written once with an escape: the standard library's path
    (b'{"p\\u0065riod": 41.6, "period": 42, "k1": 23.4, "eccentricity": 0.31}', "period"),
    # an integer beyond 64 bits sends the body to the standard library too
    (b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.31, "period": 1' + b"0" * 30 + b"}", "period"),
])
def test_a_name_given_twice_in_one_object_is_refused_naming_it(client, raw, field):
    body = problem(client.post(SB1, data=raw, content_type="application/json"), 400)
    assert field in body["errors"] and field in body["detail"]


def test_a_name_given_twice_in_a_batch_row_is_refused(client):
    raw = b'{"systems": [{"period": 41.6, "k1": 23.4, "eccentricity": 0.31, "k1": 3}]}'
    assert "k1" in problem(client.post("/v1/batch/sb1", data=raw, content_type="application/json"), 400)["errors"]


def test_colons_inside_strings_do_not_look_like_repeated_names(client):
    # ISO dates carry colons; an escaped colon too: neither is a second member
    body = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": "2019-08-20T19:12:00",
            "k1": 61.2, "times": ["2024-03-30T00:00:00", "2024-07-08T12:30:00"]}
    r = client.post("/v1/orbit/ephemeris", data=json.dumps(body), content_type="application/json")
    assert r.status_code == 200, r.get_data()[:300]
    raw = json.dumps(body).replace("T19:12:00", "T19\\u003a12:00").encode()
    assert client.post("/v1/orbit/ephemeris", data=raw, content_type="application/json").status_code == 200


# --------------------------------------------------------------------------- the Python client
@pytest.fixture(scope="module")
def local():
    from calcservice.client import Client
    return Client("local")


@pytest.mark.parametrize("options, field", [
    ({"seed": 2 ** 70}, "uncertainty.seed"),             # beyond 64 bits: orjson could not write it
    ({"seed": -1}, "uncertainty.seed"),
    ({"samples": "x"}, "uncertainty.samples"),           # int("x") raised a bare ValueError
    ({"samples": 300.5}, "uncertainty.samples"),         # int(300.5) sent 300
    ({"correlations": {"k1": 0.5}}, "correlations.0.between"),   # a name, not a pair: it went as ["k", "1"]
    ({"correlations": 5}, "correlations"),
    ({"units": "AU"}, "units"),
    ({"covariance": "yes"}, "covariance"),               # sent as true
])
def test_the_clients_bad_options_are_the_services_problem_naming_them(local, options, field):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as info:
        local.calculate("sb1", **GOOD, **options)
    assert info.value.status == 422 and field in info.value.errors, (info.value.status, info.value.errors)


def test_a_whole_number_given_as_a_float_is_still_a_count(local):
    # numpy's and Python's floats that are whole numbers go as integers (a column with a gap is float)
    a = local.calculate("sb1", **GOOD, samples=300.0, seed=7.0, inclination="isotropic")
    b = local.calculate("sb1", **GOOD, samples=300, seed=7, inclination="isotropic")
    assert a["results"] == b["results"] and a["uncertainty"]["samples"] == 300


def test_the_clients_own_refusals_are_its_error_naming_the_input(local):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as info:
        local.calculate("sb1", period=(41.6, 0.1, 0.2, 0.3), k1=23.4, eccentricity=0.31)
    assert "period" in info.value.errors and isinstance(info.value, ValueError)
    with pytest.raises(CalcServiceError) as info:
        local.batch("sb1", {"period": [41.6, 42.0], "k1": [23.4, 23.5, 23.6], "eccentricity": 0.3})
    assert "k1" in info.value.errors


EPHEMERIS_COLUMNS = {"period": [2037.4, 2037.4], "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3,
                     "k1": 61.2, "times": [2460400.5]}


def test_a_count_column_of_fractions_is_refused_not_cut(local):
    # int(3.5) sent 3 events for a count of 3.5; the service refuses a fraction naming count
    out = local.batch("ephemeris", {**EPHEMERIS_COLUMNS, "count": [3.5, 2.0]})
    assert list(out.failed) == [0] and "count" in out.error_text()[0]
    whole = local.batch("ephemeris", {**EPHEMERIS_COLUMNS, "count": [3.0, 2.0]})
    assert list(whole.failed) == []


# --------------------------------------------------------------------------- the command line
@pytest.mark.parametrize("argv, named", [
    (["compute", "sb1", "period=41.6", "k1=23.4", "eccentricity=0.31", "--units", "a1_sin_i=km"], "--units"),
    (["serve", "--port", "x"], "--port"),
    (["--bogus"], "--bogus"),
])
def test_an_argument_the_command_does_not_know_is_one_line_naming_it(capsys, argv, named):
    from calcservice.cli import main
    with pytest.raises(SystemExit) as info:
        main(argv)
    err = capsys.readouterr().err
    assert info.value.code == 2 and err.count("\n") == 1 and named in err and "usage:" not in err, err


# --------------------------------------------------------------------------- times
EPHEMERIS_ONE = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
                 "count": 1}


@pytest.mark.parametrize("text", [
    "2015-12-31T23:59:60",      # leap seconds were inserted at 2015-06-30 and 2016-12-31, not here (IERS Bulletin C)
    "2024-01-01T12:00:60",      # astropy read it as 12:01:00, silently
    "2024-01-01T12:00:61",
    "2015-06-30T23:59:60+02:00",  # a leap second in local time: 21:59:60 UTC is none
])
def test_a_60th_second_where_utc_had_no_leap_second_is_refused(client, text):
    r = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS_ONE, "times": [2460400.5, text]})
    assert "entry 1" in problem(r, 422)["errors"]["times"][0]
    r = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS_ONE, "t_periastron": text, "times": [2460400.5]})
    assert "second" in problem(r, 422)["errors"]["t_periastron"][0]


def test_a_real_leap_second_is_read(client):
    # 2016-12-31T23:59:60 UTC was a leap second (IERS Bulletin C 52): astropy's JD for it, one SI second
    # before the JD of 2017-01-01T00:00:00
    from astropy.time import Time
    r = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS_ONE, "times": ["2016-12-31T23:59:60Z"]})
    assert r.status_code == 200, r.get_data()[:300]
    got = r.get_json()["results"]["series"]["time"]["value"][0]
    assert got == Time("2016-12-31T23:59:60", scale="utc").jd
    assert got == pytest.approx(2457754.5 - 1 / 86400, abs=1e-9)


# --------------------------------------------------------------------------- output units
BIG_SB1 = {"period": 1e6, "k1": 2.0e5, "eccentricity": 0.31}       # a1 sin i of about 1.7e7 au


@pytest.mark.parametrize("path, body", [
    (SB1, {**GOOD, "units": {"a1_sin_i": "1e-320 au"}}),     # au in it is 1e320: the answer's factor was inf (a 500)
    (SB1, {**BIG_SB1, "units": {"a1_sin_i": "1e-308 au"}}),  # a finite answer beyond a double there: was a bare null
])
def test_an_output_unit_the_answer_cannot_be_written_in_is_refused_naming_it(client, path, body):
    assert "units.a1_sin_i" in problem(client.post(path, json=body), 422)["errors"]


@pytest.mark.parametrize("body", [
    {"systems": [GOOD, BIG_SB1], "units": {"a1_sin_i": "1e-308 au"}},
    {"columns": {"period": [41.6, 1e6], "k1": [23.4, 2e5], "eccentricity": 0.31}, "units": {"a1_sin_i": "1e-308 au"}},
])
def test_in_a_batch_the_system_an_output_unit_cannot_hold_is_its_error_in_place(client, body):
    # the unit holds GOOD's answer, as its single request shows: only BIG_SB1's system is refused
    r = client.post("/v1/batch/sb1", json=body)
    assert r.status_code == 200, r.get_data()[:300]
    got = r.get_json()
    errors = [row.get("error") for row in got["results"]] if "results" in got else \
        [next((e for e in got["errors"] if e["index"] == i), None) for i in range(2)]
    assert errors[0] is None and "units.a1_sin_i" in errors[1]["errors"]


def test_a_series_in_a_unit_beyond_a_double_is_refused_naming_it(client):
    body = {**EPHEMERIS_ONE, "times": [2460400.5, 2460500.5], "units": {"rv1": "1e-307 km/s"}}
    assert "units.rv1" in problem(client.post("/v1/orbit/ephemeris", json=body), 422)["errors"]


def test_a_small_unit_that_holds_the_answer_is_answered(client):
    # 1e-300 au: the factor is 1e300, exact enough for a double (astropy's conversion, the reference)
    from astropy import units as u
    plain = client.post(SB1, json=GOOD).get_json()["results"]["a1_sin_i"]["value"]
    r = client.post(SB1, json={**GOOD, "units": {"a1_sin_i": "1e-300 au"}})
    assert r.status_code == 200
    got = r.get_json()["results"]["a1_sin_i"]
    assert got["unit"] == "1e-300 au"
    assert got["value"] == pytest.approx((plain * u.au).to_value(u.Unit("1e-300 au")), rel=1e-14)


# --------------------------------------------------------------------------- the problem itself
@pytest.mark.parametrize("units, field", [
    ({"a1_sin_i": 5}, "units.a1_sin_i"),              # was units.a1_sin_i.value, marshmallow's half of a Dict
    ({"a1_sin_i": None}, "units.a1_sin_i"),
    ({"a1_sin_i": "x" * 300}, "units.a1_sin_i"),
])
def test_a_bad_output_unit_is_named_by_its_output(client, units, field):
    assert list(problem(client.post(SB1, json={**GOOD, "units": units}), 422)["errors"]) == [field]


def test_a_body_of_many_unknown_names_is_answered_in_a_page(client):
    # 20000 unknown keys were each named in the detail and the errors (an answer larger than the body)
    body = {**GOOD, **{f"k{i}": 1 for i in range(20000)}}
    r = client.post(SB1, data=json.dumps(body), content_type="application/json")
    answer = problem(r, 422)
    assert len(r.get_data()) < 20_000
    # k1 of the 20000 is an input: 19999 unknown, 100 named
    assert "_more" in answer["errors"] and "19899 more" in answer["errors"]["_more"][0]
    assert len(answer["errors"]) == 101 and answer["errors"]["k0"] == ["unknown field"]


def test_a_false_leap_second_on_the_command_line_is_one_line(capsys):
    # ERFA's own warning of the 60th second went to stderr above the line: under "error" it shows
    import warnings

    from calcservice.cli import main
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        code = main(["compute", "ephemeris", "period=10", "eccentricity=0.1", "omega=10", "k1=10",
                     "t_periastron=2015-12-31T23:59:60", "times=2460400.5"])
    err = capsys.readouterr().err
    assert code == 1 and err.count("\n") == 1 and "no leap second" in err, err
    assert err.startswith("calcservice compute: t_periastron:")


# --------------------------------------------------------------------------- query parameters
@pytest.mark.parametrize("query, field", [
    ("?format=latex&format=svg", "format"),     # the first was served silently
    ("?format=json&format=markdown", "format"),
    ("?format=svg&plot=mass_function&plot=a1_sin_i", "plot"),
])
def test_a_query_parameter_given_twice_with_different_values_is_refused(client, query, field):
    assert field in problem(client.post(SB1 + query, json=GOOD), 400)["errors"]


def test_a_query_parameter_repeated_with_one_value_is_that_value(client):
    r = client.post(SB1 + "?format=markdown&format=markdown", json=GOOD)
    assert r.status_code == 200 and r.headers["Content-Type"].startswith("text/markdown")


def test_a_log10_output_takes_no_unit(client):
    # a log10 is a pure number whose unit sits inside the logarithm: "%" made log Mdot = -5.92 read -591.76 %
    from calcservice.registry import get
    body = dict(get("mass-loss-recipe").example)
    for unit in ("%", "", "dex"):
        r = client.post("/v1/winds/mass-loss/recipe", json={**body, "units": {"log_mass_loss_rate": unit}})
        assert r.status_code == 422 and "units.log_mass_loss_rate" in r.get_json()["errors"], (unit, r.get_json())
    # the rate itself converts (astropy: 1 solMass/yr = 1.98841e30 kg / 3.15576e7 s)
    plain = client.post("/v1/winds/mass-loss/recipe", json=body).get_json()["results"]["mass_loss_rate"]
    kg_s = client.post("/v1/winds/mass-loss/recipe", json={**body, "units": {"mass_loss_rate": "kg/s"}}).get_json()
    import astropy.units as u
    assert kg_s["results"]["mass_loss_rate"]["value"] == pytest.approx(
        (plain["value"] * u.solMass / u.yr).to_value(u.kg / u.s), rel=1e-12)
