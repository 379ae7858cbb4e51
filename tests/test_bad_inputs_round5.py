"""Bad input, fifth round: an Arrow body with bytes after its stream or its unit under another key,
options in a table's metadata, a plot asked for where no figure is drawn, columns kept under an input's or
an answer's name by the client and the command line, the command line's samples files, repeated units and
server numbers, the client's address, timeout, sigmas, units and infinities, an apsidal motion, a phase or
a true anomaly with no digits left, and options (covariance, budget, an output's unit) that had nothing to
act on.  Each case gets a 4xx problem (or the client's InvalidInput, one line and a non-zero exit, or a
warning naming the option) that names the field, never a traceback and never an answer that left an
input out without a word."""

from __future__ import annotations

import io

import astropy.units as u
import numpy as np
import pytest

from calcservice import create_app
from tests.test_bad_inputs_round2 import problem
from tests.test_bad_inputs_round4 import mass_function

SB1 = "/v1/spectroscopic/sb1"
GOOD = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}
ARROW = "application/vnd.apache.arrow.stream"


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


# --- 1. an Arrow body: bytes after the stream, a unit under another key ----------------------------

def _arrow(table, file: bool = False) -> bytes:
    import pyarrow as pa
    sink = io.BytesIO()
    with (pa.ipc.new_file if file else pa.ipc.new_stream)(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue()


def _systems(periods, unit: str | None = None, key: str = "unit"):
    import pyarrow as pa
    n = len(periods)
    fields = [pa.field("period", pa.float64(), metadata={key: unit} if unit else None),
              pa.field("k1", pa.float64()), pa.field("eccentricity", pa.float64())]
    return pa.Table.from_arrays([pa.array(periods, pa.float64()), pa.array([23.4] * n), pa.array([0.31] * n)],
                                schema=pa.schema(fields))


@pytest.mark.parametrize("file", [False, True])
def test_a_second_arrow_stream_after_the_first_is_refused_not_left_unread(client, file):
    # pyarrow stops at the first stream's end-of-stream marker (Arrow columnar format, IPC streaming format):
    # the systems of a second stream concatenated to it (cat a.arrows b.arrows) were answered as absent
    first, second = _arrow(_systems([41.6]), file), _arrow(_systems([12.0, 13.0]), file)
    p = problem(client.post("/v1/batch/sb1", data=first + second, content_type=ARROW), 400)
    assert list(p["errors"]) == ["_body"]
    assert p["errors"]["_body"][0].startswith(f"{len(second)} bytes follow the end of the Arrow IPC "
                                              f"{'file' if file else 'stream'} (its first {len(first)} bytes)")
    # one stream (or one file) alone is read
    r = client.post("/v1/batch/sb1", data=first, content_type=ARROW, headers={"Accept": "application/json"})
    assert r.status_code == 200
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                 rel=1e-6)


@pytest.mark.parametrize("key", ["units", "Unit", "UNIT"])
def test_an_arrow_unit_under_another_key_is_refused_naming_the_column(client, key):
    # the unit is read from the field metadata key "unit": 0.1 "yr" under "units" was read as 0.1 d
    p = problem(client.post("/v1/batch/sb1", data=_arrow(_systems([0.1], "yr", key)), content_type=ARROW), 422)
    assert p["errors"] == {"period": [f"its unit is under the metadata key {key!r}: the key is 'unit'"]}
    r = client.post("/v1/batch/sb1", data=_arrow(_systems([0.1], "yr")), content_type=ARROW,
                    headers={"Accept": "application/json"})
    # 0.1 Julian year = 36.525 d (IAU: a Julian year is 365.25 d)
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(mass_function(36.525, 23.4, 0.31),
                                                                                 rel=1e-6)


# --- 2. plot where no figure is drawn --------------------------------------------------------------

MC_SB1 = {"period": 41.6, "k1": {"value": 23.4, "sigma": 0.4}, "eccentricity": 0.31,
          "uncertainty": {"method": "monte_carlo", "samples": 200, "seed": 1}}


@pytest.mark.parametrize("query, fmt", [
    ("?plot=mass_function", "json"),                       # answered as JSON, the histogram asked for left out
    ("?format=json&plot=mass_function", "json"),
    ("?format=latex&plot=mass_function", "latex"),
    ("?format=markdown&plot=a1_sin_i", "markdown"),
])
def test_plot_with_a_format_that_draws_no_figure_is_refused_naming_plot(client, query, fmt):
    p = problem(client.post(SB1 + query, json=MC_SB1), 400)
    assert p["errors"] == {"plot": [f"draws a histogram with format=svg or png; format={fmt} draws none"]}


def test_plot_with_a_figure_format_is_drawn_and_an_unknown_format_is_named_first(client):
    r = client.post(SB1 + "?format=svg&plot=mass_function", json=MC_SB1)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"
    assert list(problem(client.post(SB1 + "?format=pdf&plot=mass_function", json=MC_SB1), 400)["errors"]) == ["format"]
    r = client.post("/v1/orbit/ephemeris?format=latex&plot=rv1", json={
        "period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
        "times": [2460400.5]})
    assert list(problem(r, 400)["errors"]) == ["plot"]


# --- 3. a kept column named like an input's or an answer's column (client and command line) ------

@pytest.fixture(scope="module")
def local():
    from calcservice.client import Client
    return Client("local")


CATALOGUE = {"period": [41.6, 12.0], "k1": [23.4, 30.0], "eccentricity": [0.31, 0.1]}


@pytest.mark.parametrize("kept, message", [
    ("mass_function", "'mass_function' is the name of a column of the answer: rename it"),   # its 5.0 was overwritten
    ("error", "'error' is the name of a column of the answer: rename it"),
    ("a1_sin_i_sigma", "'a1_sin_i_sigma' is the name of a column of the answer: rename it"),
    ("period", "'period' is a column of an input of sb1, not one of your own"),   # was sent without it: "is required"
])
def test_the_client_refuses_to_keep_a_column_named_like_an_input_or_an_answer_column(local, kept, message):
    from calcservice.client import InvalidInput
    data = {**CATALOGUE, kept: [5.0, 6.0]} if kept not in CATALOGUE else CATALOGUE
    with pytest.raises(InvalidInput) as e:
        local.batch("sb1", data, keep=[kept])
    assert e.value.errors == {"keep": [f"keep: {message}"]}


def test_the_client_keeps_a_column_of_its_own_and_reads_keep_as_the_services_list(local):
    out = local.batch("sb1", {**CATALOGUE, "star": ["A", "B"], "hip": [12, 13]}, keep="star, hip")
    table = out.to_table()
    assert list(table["star"]) == ["A", "B"] and list(table["hip"]) == [12, 13]
    assert out["mass_function"][1] == pytest.approx(mass_function(12.0, 30.0, 0.1), rel=1e-6)


@pytest.mark.parametrize("kept", ["mass_function", "error", "period"])
def test_the_command_line_refuses_to_keep_a_column_named_like_an_input_or_an_answer_column(tmp_path, capsys, kept):
    from calcservice.cli import main
    src = tmp_path / "cat.csv"
    src.write_text("period,k1,eccentricity" + ("" if kept == "period" else f",{kept}") + "\n41.6,23.4,0.31"
                   + ("" if kept == "period" else ",5") + "\n")
    assert main(["compute", "sb1", "--in", str(src), "--out", str(tmp_path / "out.csv"), "--keep", kept]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith(f"calcservice compute: keep: '{kept}' is ")
    assert not (tmp_path / "out.csv").exists()


# --- 4. the command line: a samples file, a repeated --unit, the server's numbers, an empty file -----

def test_a_samples_file_that_is_not_text_is_one_line_naming_the_input(tmp_path, capsys):
    # a UnicodeDecodeError escaped as a traceback
    from calcservice.cli import main
    draws = tmp_path / "draws.bin"
    draws.write_bytes(b"\xff\xfe4\x001\x00")
    assert main(["compute", "sb1", f"period=@{draws}", "k1=23.4", "eccentricity=0.31"]) == 2
    err = capsys.readouterr().err
    assert err == (f"calcservice compute: period: {draws} is not UTF-8 text (byte 0): samples are numbers "
                   "written as text\n")


def test_an_output_unit_given_twice_on_the_command_line_is_refused(capsys):
    # the last --unit was taken silently, where an input given twice is refused
    from calcservice.cli import main
    args = ["compute", "sb1", "period=41.6", "k1=23.4", "eccentricity=0.31", "--unit", "a1_sin_i=km", "--json"]
    assert main(args + ["--unit", "a1_sin_i=m"]) == 2
    assert capsys.readouterr().err == "calcservice compute: --unit: a1_sin_i is given twice, as 'km' and 'm'\n"
    assert main(args + ["--unit", "a1_sin_i=km"]) == 0
    import json
    answer = json.loads(capsys.readouterr().out)["results"]["a1_sin_i"]
    # a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2, from memory), in km with astropy
    expected = (23.4 * u.km / u.s * 41.6 * u.d * np.sqrt(1 - 0.31 ** 2) / (2 * np.pi)).to_value(u.km)
    assert answer["unit"] == "km" and answer["value"] == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("argv, message", [
    (["serve", "--port", "99999999"], "argument --port: 99999999 is not between 0 and 65535"),   # a traceback
    (["serve", "--port", "-1"], "argument --port: -1 is not between 0 and 65535"),
    (["serve", "--workers", "0"], "argument --workers: 0 is not at least 1"),   # a master with no worker, silent
    (["serve", "--workers", "-3"], "argument --workers: -3 is not at least 1"),  # gunicorn's line named no option
    (["serve", "--timeout", "0"], "argument --timeout: 0 is not at least 1"),    # gunicorn reads 0 as "never"
])
def test_a_server_number_out_of_range_is_one_line_naming_it(capsys, monkeypatch, argv, message):
    import calcservice.server
    from calcservice.cli import main

    def no_server(*args, **kwargs):
        raise AssertionError("the server was started")
    monkeypatch.setattr(calcservice.server, "serve", no_server)
    with pytest.raises(SystemExit) as info:
        main(argv)
    err = capsys.readouterr().err
    assert info.value.code == 2 and err == f"calcservice serve: {message} (see calcservice serve --help)\n"


def test_an_empty_catalogue_file_is_said_to_be_empty(tmp_path, capsys):
    from calcservice.cli import main
    (tmp_path / "empty.csv").write_text("")
    (tmp_path / "header.csv").write_text("period,k1,eccentricity\n")
    assert main(["compute", "sb1", "--in", str(tmp_path / "empty.csv"), "--out", str(tmp_path / "o.csv")]) == 2
    assert capsys.readouterr().err == f"calcservice compute: --in: {tmp_path / 'empty.csv'} is empty\n"
    assert main(["compute", "sb1", "--in", str(tmp_path / "header.csv"), "--out", str(tmp_path / "o.csv")]) == 2
    assert capsys.readouterr().err.endswith("header.csv has a header but no rows\n")


# --- 5. the client: sigmas of another length, a unit that is no string, a value JSON has not -------

@pytest.mark.parametrize("period, message", [
    (([41.6], [0.1, 0.2]), "period: 2 values of sigma where it has 1 values"),      # sent with the first sigma
    (([41.6, 42.0], [0.1]), "period: 1 values of sigma where it has 2 values"),      # pyarrow's ArrowInvalid
    (([41.6, 42.0], [0.1, 0.2], [0.1]), "period: 1 values of sigma_plus where it has 2 values"),
    ({"value": [41.6, 42.0], "sigma": [0.1]}, "period: 1 values of sigma where it has 2 values"),
])
def test_the_clients_sigmas_of_another_length_than_the_values_are_refused(local, period, message):
    from calcservice.client import InvalidInput
    n = len(period[0] if isinstance(period, tuple) else period["value"])
    with pytest.raises(InvalidInput) as e:
        local.batch("sb1", {"period": period, "k1": [23.4] * n, "eccentricity": 0.1})
    assert e.value.errors == {"period": [message]}


def test_one_sigma_for_every_system_is_taken(local):
    # an IndexError before; sigma(f) = f sigma(P) / P, f being proportional to P (Hilditch 2001, ch. 2)
    out = local.batch("sb1", {"period": ([41.6, 42.0], 0.1), "k1": [23.4, 23.4], "eccentricity": 0.1})
    for k, p in enumerate((41.6, 42.0)):
        assert out["mass_function"][k] == pytest.approx(mass_function(p, 23.4, 0.1), rel=1e-6)
        assert out.sigma["mass_function"][k] == pytest.approx(mass_function(p, 23.4, 0.1) * 0.1 / p, rel=1e-5)


def test_a_column_unit_that_is_no_string_is_refused_and_an_astropy_unit_is_taken(local):
    from calcservice.client import InvalidInput
    table = {"period": [0.1], "k1": [23.4], "eccentricity": [0.1]}
    with pytest.raises(InvalidInput) as e:       # pyarrow's TypeError "expected bytes, int found"
        local.batch("sb1", table, units={"period": 5})
    assert e.value.errors == {"units": ["units: the unit of 'period' is a string such as 'd' or an astropy unit, "
                                        "not int"]}
    # 0.1 Julian year = 36.525 d (IAU: a Julian year is 365.25 d)
    out = local.batch("sb1", table, units={"period": u.yr})
    assert out["mass_function"][0] == pytest.approx(mass_function(36.525, 23.4, 0.1), rel=1e-6)


@pytest.mark.parametrize("value, kind", [(1 + 2j, "complex"), ({41.6}, "set")])
def test_a_value_json_cannot_hold_is_refused_naming_the_input(local, value, kind):
    # the encoder's TypeError ("Type is not JSON serializable: complex") named no input
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        local.calculate("sb1", **{**GOOD, "period": value})
    assert list(e.value.errors) == ["period"] and f"a {kind} is no value of the wire contract" in str(e.value)


# --- 6. options in a request table's metadata -----------------------------------------------------

ECSV_META = ("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: period, unit: d, datatype: float64}\n"
             "# - {name: k1, unit: km / s, datatype: float64}\n# - {name: eccentricity, datatype: float64}\n"
             "# meta: {META}\n# schema: astropy-2.0\nperiod k1 eccentricity\n41.6 23.4 0.31\n")


def _options_message(where: str, name: str) -> str:
    return (f"the table's {where} gives {name!r}, which is not read there: a table's options go in the query "
            f'parameter options (?options={{"{name}": ...}}, URL-encoded JSON)')


def test_options_in_an_ecsv_header_are_refused_not_left_unread(client):
    # an answer table's meta says its uncertainty method: a request's was read as nothing (answered linearly)
    meta = "{uncertainty: {method: monte_carlo, samples: 500, seed: 1}, units: {a1_sin_i: km}, observer: K. Lund}"
    p = problem(client.post("/v1/batch/sb1", data=ECSV_META.replace("{META}", meta), content_type="text/csv"), 422)
    assert p["errors"] == {"uncertainty": [_options_message("meta", "uncertainty")],
                           "units": [_options_message("meta", "units")]}
    # meta of the caller's own is no option, and the same options in the query are taken
    from urllib.parse import quote
    r = client.post("/v1/batch/sb1?options=" + quote('{"units": {"a1_sin_i": "km"}}'),
                    data=ECSV_META.replace("{META}", "{observer: K. Lund}"), content_type="text/csv",
                    headers={"Accept": "application/json"})
    a1 = r.get_json()["columns"]["a1_sin_i"]
    # a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2, from memory), in km with astropy
    expected = (23.4 * u.km / u.s * 41.6 * u.d * np.sqrt(1 - 0.31 ** 2) / (2 * np.pi)).to_value(u.km)
    assert a1["unit"] == "km" and a1["value"][0] == pytest.approx(expected, rel=1e-9)


@pytest.mark.parametrize("calc, key", [("sb1", "uncertainty"), ("sb1", "correlations"), ("ephemeris", "times")])
def test_options_in_arrow_schema_metadata_are_refused(client, calc, key):
    table = _systems([41.6]).replace_schema_metadata({key: "{}", "source": "lab notebook"})
    p = problem(client.post(f"/v1/batch/{calc}", data=_arrow(table), content_type=ARROW), 422)
    assert p["errors"] == {key: [_options_message("schema metadata", key)]}


# --- 7. a whole-number input's sigma or unit column --------------------------------------------------

@pytest.mark.parametrize("header, cell, column, message", [
    ("count_sigma", ",1", "count_sigma", "count is a whole number: it has no uncertainty"),   # was "is a integer"
    ("count[d]", "", "count", "count is a whole number: it has no unit"),
])
def test_a_whole_number_inputs_sigma_or_unit_column_is_refused_in_words(client, header, cell, column, message):
    from urllib.parse import quote
    head = "period,eccentricity,omega,t_periastron,k1," + ("count," + header if header.endswith("sigma") else header)
    table = f"{head}\n2037.4,0.3,243.6,2458712.3,61.2,2{cell}\n"
    p = problem(client.post("/v1/batch/ephemeris?options=" + quote('{"times": [2460400.5]}'), data=table,
                            content_type="text/csv"), 422)
    assert p["errors"] == {column: [message]}


# --- 8. an apsidal motion of a turn or more per orbit --------------------------------------------------

EPHEMERIS = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
             "times": [2460400.5, 2450000.5], "count": 1}
APSIDAL = ("the apsides must turn by less than 360 deg per orbit (|omega_dot| P < 360 deg: apsidal motion is slow "
           "beside the orbit)")


@pytest.mark.parametrize("omega_dot", [1e300, -64.6, {"value": 65.0, "sigma": 0.1}])
def test_an_apsidal_motion_of_a_turn_per_orbit_or_more_is_refused_naming_omega_dot(client, omega_dot):
    # 1e300 deg/yr was answered: omega(t) = omega + omega_dot (t - T0) kept no digit of the angle, and the
    # conjunctions went missing without a word; 64.6 deg/yr over P = 2037.4 d = 5.578 Julian yr is 360.3 deg
    p = problem(client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "omega_dot": omega_dot}), 422)
    assert p["errors"] == {"omega_dot": [APSIDAL]}
    rows = client.post("/v1/batch/ephemeris", json={"systems": [{**EPHEMERIS, "omega_dot": omega_dot}, EPHEMERIS]})
    answers = rows.get_json()["results"]
    assert answers[0]["error"]["errors"] == {"omega_dot": [APSIDAL]} and "results" in answers[1]


def test_an_apsidal_motion_under_a_turn_per_orbit_is_answered(client):
    # 64.4 deg/yr x 5.578 Julian yr (2037.4 d / 365.25) = 359.2 deg per orbit; at T0 omega is as given, so the
    # velocity at a time one period after T0 is rv1 = K1 [cos(nu + omega) + e cos omega] at nu = 0 with omega
    # advanced by 359.2 deg (Hilditch 2001, ch. 2, from memory)
    r = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "omega_dot": 64.4, "times": [2458712.3 + 2037.4]})
    assert r.status_code == 200
    omega = np.radians(243.6 + 64.4 * 2037.4 / 365.25)
    rv1 = r.get_json()["results"]["series"]["rv1"]["value"][0]
    assert rv1 == pytest.approx(61.2 * (np.cos(omega) + 0.3 * np.cos(omega)), rel=1e-6)
    from calcservice.registry import get
    r = client.post("/v1/orbit/mid-eclipse", json={**get("mid-eclipse").example, "omega_dot": 13000.0})
    assert r.status_code == 200     # P = 9.73 d: 13000 deg/yr is 346 deg per orbit
    p = problem(client.post("/v1/orbit/mid-eclipse", json={**get("mid-eclipse").example, "omega_dot": 14000.0}), 422)
    assert p["errors"] == {"omega_dot": [APSIDAL]}


# --- 9. a colliding-wind phase or true anomaly beyond where its angle has digits -------------------------

@pytest.mark.parametrize("field, value, message", [
    ("phase", 1e17, "must be >= -1e+08 and <= 1e+08"),        # answered as phase 0: the fraction was lost
    ("phase", -1e300, "must be >= -1e+08 and <= 1e+08"),
    ("true_anomaly", 1e300, "must be >= -360 and <= 360 (in deg)"),   # answered as 0 deg
    ("true_anomaly", 7200.0, "must be >= -360 and <= 360 (in deg)"),  # as omega and node elsewhere
])
def test_a_phase_or_true_anomaly_without_digits_left_is_refused(client, field, value, message):
    from calcservice.registry import get
    body = {k: v for k, v in get("collision").example.items() if k != "phase"}
    p = problem(client.post("/v1/winds/collision", json={**body, field: value}), 422)
    assert p["errors"] == {field: [message]}


def test_a_phase_many_cycles_on_is_the_phase_of_its_fraction(client):
    # phase 1000000.1 is the orbit's place at phase 0.1 (M = 2 pi phase, Hilditch 2001, ch. 2, from memory)
    from calcservice.registry import get
    body = dict(get("collision").example)
    near = client.post("/v1/winds/collision", json={**body, "phase": 0.1}).get_json()["results"]["separation"]
    far = client.post("/v1/winds/collision", json={**body, "phase": 1e6 + 0.1}).get_json()["results"]["separation"]
    assert far["value"] == pytest.approx(near["value"], rel=1e-8)


# --- 10. the client's address and timeout, a list of rows with units= or keep=, an infinite value -------

@pytest.mark.parametrize("base_url", ["notaurl", "ftp://calc.example", "http://", None, 5])
def test_a_client_address_that_is_no_http_url_is_refused_naming_it(base_url):
    # "notaurl" raised AttributeError at the first request; ftp:// was spoken to in HTTP
    from calcservice.client import Client, InvalidInput
    with pytest.raises(InvalidInput) as e:
        Client(base_url)
    assert list(e.value.errors) == ["base_url"] and str(e.value).startswith(f"base_url: {base_url!r} is not the ")


@pytest.mark.parametrize("timeout", [-1, 0, "5", True])
def test_a_client_timeout_that_is_no_positive_number_is_refused_naming_it(timeout):
    # socket's "Timeout value out of range" named nothing, at the first request
    from calcservice.client import Client, InvalidInput
    with pytest.raises(InvalidInput) as e:
        Client("http://127.0.0.1:8000", timeout=timeout)
    assert list(e.value.errors) == ["timeout"]
    assert Client("https://calc.example:8443/", timeout=0.5).base_url == "https://calc.example:8443"


@pytest.mark.parametrize("option", ["units", "keep"])
def test_units_or_keep_with_a_list_of_rows_is_refused_naming_that_option(local, option):
    # units= alone was refused under "keep"
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        local.batch("sb1", [GOOD], **{option: {"period": "yr"} if option == "units" else ["star"]})
    assert list(e.value.errors) == [option]


@pytest.mark.parametrize("period", [float("inf"), np.float64(-np.inf), (41.6, float("inf"))])
def test_an_infinite_value_is_refused_by_the_client_naming_the_input(local, period):
    # JSON has no infinity: the encoder wrote null and the answer said the value (or sigma) was missing
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        local.calculate("sb1", **{**GOOD, "period": period})
    assert list(e.value.errors) == ["period"] and "is not a finite number" in str(e.value)


# --- 11. covariance or budget asked of exact inputs ----------------------------------------------------

@pytest.mark.parametrize("options, fields", [
    ({"covariance": True}, ["covariance"]),            # answered without a correlation, without a word
    ({"budget": True}, ["budget"]),
    ({"covariance": True, "budget": True, "uncertainty": {"method": "monte_carlo", "samples": 200, "seed": 1}},
     ["covariance", "budget"]),
])
def test_covariance_or_budget_of_exact_inputs_is_warned_naming_the_option(client, options, fields):
    r = client.post(SB1, json={**GOOD, **options}).get_json()
    assert "correlation" not in r and not any(v.get("budget") for v in r["results"].values())     # none, or {}
    assert [w["fields"] for w in r["warnings"] if w["code"] == "no_uncertainty"] == [fields]
    # f(M) itself is answered, exact (Hilditch 2001, ch. 2, from memory)
    assert r["results"]["mass_function"]["value"] == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-6)


def test_covariance_is_warned_only_for_the_exact_systems_of_a_batch(client):
    answer = client.post("/v1/batch/sb1", json={"columns": {
        "period": 41.6, "k1": {"value": [23.4, 23.4], "sigma": [0.0, 0.3]}, "eccentricity": 0.31},
        "covariance": True}).get_json()
    assert [(w["fields"], w["rows"]) for w in answer["warnings"] if w["code"] == "no_uncertainty"] == [(["covariance"],
                                                                                                       [0])]
    # mass_function and a1_sin_i both scale with k1 alone here: correlation 1 (K1^3 and K1, linearised)
    assert answer["correlation"]["matrix"][1] == [[1.0, 1.0], [1.0, 1.0]]
    plain = client.post(SB1, json={**GOOD, "k1": {"value": 23.4, "sigma": 0.3}, "covariance": True}).get_json()
    assert not [w for w in plain["warnings"] if w["code"] == "no_uncertainty"] and "correlation" in plain


# --- 12. an output unit for an output the inputs do not give ------------------------------------------

UNUSED = "not among the results these inputs give (the output needs other inputs), so its unit is not used"


def test_a_unit_for_an_output_these_inputs_do_not_give_is_warned_naming_it(client):
    # m2 of sb1 needs primary_mass and inclination: its unit went unused without a word
    r = client.post(SB1, json={**GOOD, "units": {"m2": "kg", "a1_sin_i": "km"}}).get_json()
    assert [(w["fields"], w["message"]) for w in r["warnings"] if w["code"] == "unit_unused"] == [
        (["units.m2"], f"units.m2: {UNUSED}")]
    # a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2, from memory), in km with astropy
    expected = (23.4 * u.km / u.s * 41.6 * u.d * np.sqrt(1 - 0.31 ** 2) / (2 * np.pi)).to_value(u.km)
    assert r["results"]["a1_sin_i"] == {"value": pytest.approx(expected, rel=1e-9), "sigma": 0.0, "unit": "km"}


def test_an_unused_unit_is_warned_for_the_systems_that_lack_the_output(client):
    answer = client.post("/v1/batch/sb1", json={"columns": {
        "period": [41.6, 41.6], "k1": 23.4, "eccentricity": 0.31, "primary_mass": [None, 1.2],
        "inclination": [None, 80.0]}, "units": {"m2": "kg"}}).get_json()
    assert [(w["fields"], w["rows"]) for w in answer["warnings"] if w["code"] == "unit_unused"] == [(["units.m2"],
                                                                                                     [0])]
    assert answer["columns"]["m2"]["unit"] == "kg" and answer["columns"]["m2"]["value"][1] > 1e29   # solar masses


@pytest.mark.parametrize("text", [" 2019-08-20T12:00:00", "2019-08-20T12:00:00 ", "2019-08-20T12:00:00\t",
                                  "\n2019-08-20T12:00:00Z\n", "2019-08-20t12:00:00z "])
def test_white_space_around_an_iso_date_is_no_part_of_it(client, text):
    # astropy took a date with a final newline and refused one with a space on either side; both now read as
    # the date itself (JD 2458716.0 for 2019-08-20T12:00 UTC, astropy.time)
    from astropy.time import Time
    jd = Time("2019-08-20T12:00:00", scale="utc").jd
    for body in ({**EPHEMERIS, "t_periastron": text}, {**EPHEMERIS, "times": [text, "2024-01-01"]}):
        r = client.post("/v1/orbit/ephemeris", json=body)
        assert r.status_code == 200, r.get_json()
        if body["t_periastron"] == text:
            same = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "t_periastron": jd}).get_json()
            assert r.get_json()["results"]["series"]["phase"]["value"] == same["results"]["series"]["phase"]["value"]
        else:
            assert r.get_json()["results"]["series"]["time"]["value"][0] == pytest.approx(jd, abs=1e-9)


def test_an_unknown_name_says_which_input_it_seems_to_mean(client, capsys):
    from calcservice import cli
    # the one input a name begins, or one within a letter or two of it; none where it is not plain ("k": k1 or k2)
    body = {"period": 41.6, "k": 38.2, "k2": 51.7, "ecc": 0.31, "inclinaton": 80.0, "uncertanty": {}}
    errors = client.post("/v1/spectroscopic/sb2", json=body).get_json()["errors"]
    assert errors["ecc"] == ["unknown field; did you mean eccentricity?"]
    assert errors["inclinaton"] == ["unknown field; did you mean inclination?"]
    assert errors["uncertanty"] == ["unknown field; did you mean uncertainty?"]
    assert errors["k"] == ["unknown field"]
    columns = {"period": [41.6], "k1": 38.2, "k2": 51.7, "eccentricty": 0.31}
    errors = client.post("/v1/batch/sb2", json={"columns": columns}).get_json()["errors"]
    assert errors == {"columns.eccentricty": ["sb2 has no input 'eccentricty'; did you mean eccentricity?"]}
    table = client.post("/v1/batch/sb2", data="period,k1,k2,eccentricty\n41.6,38.2,51.7,0.31\n",
                        content_type="text/csv").get_json()["errors"]
    assert "did you mean eccentricity?" in table["eccentricty"][0]
    assert cli.main(["compute", "sb2", "period=41.6", "k1=38.2", "k2=51.7", "ecc=0.3"]) == 2
    assert "ecc: sb2 has no input 'ecc'; did you mean eccentricity?" in capsys.readouterr().err


def test_a_date_out_of_range_is_said_as_a_date(client):
    # JD 3e8 is 8e5 years after JD 0 (3e8 / 365.25); the domain is within 1e8 d of JD 0, about 270,000 years
    assert 1e8 / 365.25 == pytest.approx(273785, rel=1e-5)
    errors = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "t_periastron": 3e8}).get_json()["errors"]
    assert errors == {"t_periastron": ["must be a Julian Date (an MJD with time_format mjd) from -1e+08 to 1e+08: "
                                       "within about 270,000 years of JD 0"]}


def test_a_series_entry_out_of_range_is_named_by_its_place(client):
    # a list of times names its first entry outside the domain, and how many are, as other list errors do
    errors = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "times": [2460400.5, "2024-01-01", 3e9]}).get_json()
    assert errors["errors"]["times"][0].startswith("entry 2: must be a Julian Date")
    errors = client.post("/v1/orbit/ephemeris", json={**EPHEMERIS, "times": [5e8, 6e8, 2460400.5]}).get_json()
    assert errors["errors"]["times"][0].startswith("entry 0: ") and errors["errors"]["times"][0].endswith(
        "(2 entries are outside)")


def test_a_formula_symbol_given_for_an_input_says_which_input_it_stands_for(client, capsys):
    from calcservice import cli
    from calcservice.registry import get
    # the symbols of the declaration's own formulas (its symbols convention): P = period, K1 = k1, e = eccentricity
    sb2 = get("sb2")
    assert sb2.symbols == {
        "P": "period", "K1": "k1", "K2": "k2", "e": "eccentricity", "i": "inclination"}
    body = {"P": 41.6, "K1": 38.2, "k2": 51.7, "e": 0.31}
    errors = client.post("/v1/spectroscopic/sb2", json=body).get_json()["errors"]
    assert errors["P"] == ["unknown field; did you mean period?"]
    assert errors["e"] == ["unknown field; did you mean eccentricity?"]
    assert errors["K1"] == ["unknown field; did you mean k1?"]
    errors = client.post("/v1/orbit/ephemeris", json={**{k: v for k, v in EPHEMERIS.items() if k != "t_periastron"},
                                                      "T0": 2458712.3}).get_json()["errors"]
    assert errors["T0"] == ["unknown field; did you mean t_periastron?"]
    table = client.post("/v1/batch/sb2", data="P,k1,k2,e\n41.6,38.2,51.7,0.31\n", content_type="text/csv").get_json()
    assert "did you mean period?" in table["errors"]["P"][0] and "did you mean eccentricity?" in table["errors"]["e"][0]
    assert cli.main(["compute", "sb2", "period=41.6", "k1=38.2", "k2=51.7", "e=0.3"]) == 2
    assert "did you mean eccentricity?" in capsys.readouterr().err


def test_an_unknown_option_member_or_output_says_which_it_seems_to_mean(client):
    body = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "inclination": 71.0,
            "uncertainty": {"metod": "linear"}, "correlations": [{"between": ["k1", "k2"], "rh": 0.3}]}
    errors = client.post("/v1/spectroscopic/sb2", json=body).get_json()["errors"]
    assert errors["uncertainty.metod"] == ["unknown field; did you mean method?"]
    assert errors["correlations.0.rh"] == ["unknown field; did you mean rho?"]
    body = {k: v for k, v in body.items() if k not in ("uncertainty", "correlations")} | {"units": {"semimajor": "km"}}
    errors = client.post("/v1/spectroscopic/sb2", json=body).get_json()["errors"]
    assert errors == {"units.semimajor": ["sb2 has no output 'semimajor'; did you mean semimajor_axis?"]}
