"""Bad input, third round: the small defects an audit left -- numbers below a double's normal range,
a non-finite output's error key, ragged catalogue rows, echo with table bodies, Accept on a single
calculation, and the client's own refusals.  Each case gets a 4xx problem (or a warning, or the
client's InvalidInput) that names the field, never a silent answer."""

from __future__ import annotations

import json

import astropy.units as u
import numpy as np
import pytest

from calcservice import create_app
from tests.test_bad_inputs_round2 import problem

SB1 = "/v1/spectroscopic/sb1"
SB2 = "/v1/spectroscopic/sb2"
GOOD = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}
# IEEE 754 binary64: the smallest normal number is 2^-1022 = 2.2250738585072014e-308 (numpy's finfo.tiny);
# below it a double is subnormal and keeps fewer significant bits (1e-320 is ~2024 times 2^-1074: 11 bits)
SMALLEST_NORMAL = 2.2250738585072014e-308


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def test_the_smallest_normal_double_is_what_the_messages_say():
    assert np.finfo(float).tiny == SMALLEST_NORMAL == 2.0 ** -1022


# --- 1. numbers below a double's normal range -------------------------------------------------

@pytest.mark.parametrize("k1, what", [
    (1e-320, "value"),                                                # a bare subnormal
    ({"value": 1e-320, "sigma": 1e-321}, "value"),
    ({"value": 5e-324}, "value"),                                     # the smallest subnormal
    ({"value": 1e-305, "unit": "mm/s"}, "value"),                     # normal as given, 1e-311 km/s converted
    ({"samples": [23.4, 1e-320, 22.9]}, "a sample"),
])
def test_a_subnormal_scale_is_refused_naming_it(client, k1, what):
    # k1 > 0: a scale, multiplied into every answer with the digits it lost
    body = problem(client.post(SB1, json={**GOOD, "k1": k1}), 422)
    assert list(body["errors"]) == ["k1"]
    message = body["errors"]["k1"][0]
    assert message.startswith(f"{what} is below the smallest normal double (about 2.2e-308) in km/s, where a "
                              "number has lost its digits")


def test_a_subnormal_where_0_is_in_the_domain_is_taken_as_the_0_it_rounds_to(client):
    # e >= 0 and a sigma >= 0: 1e-320 is 0 give or take a rounding, and the answer is that of 0
    zero = client.post(SB1, json={**GOOD, "eccentricity": 0}).get_json()["results"]
    for body in ({**GOOD, "eccentricity": 1e-320}, {**GOOD, "eccentricity": {"value": 0, "sigma": 1e-321}}):
        r = client.post(SB1, json=body)
        assert r.status_code == 200
        assert r.get_json()["results"]["mass_function"]["value"] == zero["mass_function"]["value"]
    r = client.post(SB1, json={**GOOD, "k1": {"value": 23.4, "sigma": 1e-321}})
    assert r.status_code == 200


def test_zero_and_the_smallest_normal_are_taken(client):
    for k1 in (SMALLEST_NORMAL, 1e-300):
        r = client.post(SB1, json={**GOOD, "k1": k1})
        assert r.status_code == 200, r.get_json()


def test_a_subnormal_input_in_a_batch_is_that_systems_error_in_every_body(client):
    rows = client.post("/v1/batch/sb1", json={"systems": [{**GOOD, "k1": 1e-320}, GOOD]}).get_json()["results"]
    assert list(rows[0]["error"]["errors"]) == ["k1"]
    assert "smallest normal double" in rows[0]["error"]["errors"]["k1"][0]
    assert "results" in rows[1]
    columns = client.post("/v1/batch/sb1", json={"columns": {"period": 41.6, "k1": {"value": [1e-320, 23.4]},
                                                             "eccentricity": 0.31}}).get_json()
    assert [e["index"] for e in columns["errors"]] == [0] and list(columns["errors"][0]["errors"]) == ["k1"]
    assert columns["columns"]["mass_function"]["value"][0] is None
    assert columns["columns"]["mass_function"]["value"][1] > 0
    text = client.post("/v1/batch/sb1", data="period,k1,eccentricity\n41.6,1e-320,0.31\n41.6,23.4,0.31\n",
                       content_type="text/csv").get_data(as_text=True)
    first, second = text.splitlines()[1:3]
    assert "k1: value is below the smallest normal double" in first and first.startswith(",,,,422,")
    assert second.split(",")[4] == ""


def test_an_output_that_underflows_from_normal_inputs_is_warned_naming_it(client):
    # f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G) (Hilditch 2001, ch. 2, from memory): K1 = 1e-110 km/s cubes to
    # 1e-330 (km/s)^3, below every double; a1 sin i = K1 P / (2 pi) stays a normal 9.2e-118 au
    r = client.post(SB1, json={"period": 1e-3, "k1": {"value": 1e-110, "sigma": 1e-111}, "eccentricity": 0})
    assert r.status_code == 200
    body = r.get_json()
    assert body["results"]["mass_function"]["value"] == 0.0
    underflow = [w for w in body["warnings"] if w["code"] == "underflow"]
    assert [w["fields"] for w in underflow] == [["mass_function"]]
    assert "mass_function: below the smallest normal double" in underflow[0]["message"]
    # 1e-104 km/s: f(M) ~ 1e-322 solMass, a subnormal result (a few digits left), also named
    r = client.post(SB1, json={"period": 1e-3, "k1": 1e-104, "eccentricity": 0}).get_json()
    assert 0 < r["results"]["mass_function"]["value"] < SMALLEST_NORMAL
    assert [w["fields"] for w in r["warnings"] if w["code"] == "underflow"] == [["mass_function"]]


def test_an_output_that_is_zero_by_physics_is_not_an_underflow(client):
    # Thiele-Innes B = a (cos w sin W + sin w cos W cos i) (Heintz 1978, Double Stars): 0 at w = W = 0
    r = client.post("/v1/astrometric/thiele-innes", json={"angular_semimajor_axis": {"value": 10, "sigma": 0.1},
                                                          "inclination": {"value": 60, "sigma": 1},
                                                          "omega": 0, "node": 0}).get_json()
    assert r["results"]["B"]["value"] == 0.0
    assert not [w for w in r["warnings"] if w["code"] == "underflow"]


def test_underflow_is_warned_per_system_in_a_batch(client):
    rows = client.post("/v1/batch/sb1", json={"systems": [{"period": 1e-3, "k1": 1e-110, "eccentricity": 0},
                                                          GOOD]}).get_json()["results"]
    assert [w["code"] for w in rows[0]["warnings"]] == ["underflow"]
    assert rows[1]["warnings"] == []


def test_an_output_unit_that_takes_a_value_below_a_double_is_refused_naming_it(client):
    # a1 sin i = K1 P / (2 pi) (Hilditch 2001, ch. 2, from memory) ~ 9.2e-104 au for K1 = 1e-100 km/s, P = 10 d;
    # in units of 1e210 au it is ~9e-314, a subnormal
    body = {"period": 10, "k1": {"value": 1e-100, "sigma": 1e-101}, "eccentricity": 0,
            "units": {"a1_sin_i": "1e210 au"}}
    errors = problem(client.post(SB1, json=body), 422)["errors"]
    assert list(errors) == ["units.a1_sin_i"]
    assert errors["units.a1_sin_i"][0] == ("a1_sin_i in '1e210 au' is below the smallest normal double (about "
                                           "2.2e-308), where its digits are lost: ask for a smaller unit")
    body["units"] = {"a1_sin_i": "1e100 au"}
    r = client.post(SB1, json=body).get_json()
    expected = (1e-100 * u.km / u.s * 10 * u.d / (2 * np.pi)).to_value(u.au) / 1e100     # astropy
    assert r["results"]["a1_sin_i"]["value"] == pytest.approx(expected, rel=1e-12)


# --- 2. a system whose inputs give an output beyond a double -----------------------------------

def test_an_output_overflowing_because_of_one_input_is_keyed_by_that_input(client):
    # a1 sin i = K1 P / (2 pi) (Hilditch 2001, ch. 2, from memory): P = 3e303 d, K1 = 10 km/s make ~4e309 km, beyond a
    # double; the period alone put back to an ordinary one makes it finite, so the period is at fault
    body = {"period": {"value": 3, "unit": "1e303 d"}, "k1": 10, "eccentricity": 0}
    p = problem(client.post(SB1, json=body), 422)
    assert p["errors"] == {"period": ["this value (with the others given) gives no finite value of a1_sin_i: "
                                      "it, or a number in its computation, overflows a double (beyond about 1.8e308)"]}
    assert p["detail"] == "these inputs give no finite result: invalid value for period"
    # the same by Monte Carlo, and as a row of a batch (the others answered)
    mc = problem(client.post(SB1, json={**body, "uncertainty": {"method": "monte_carlo", "samples": 100}}), 422)
    assert mc["errors"] == p["errors"]
    rows = client.post("/v1/batch/sb1", json={"systems": [body, GOOD]}).get_json()["results"]
    assert rows[0]["error"]["errors"] == p["errors"] and "results" in rows[1]


def test_an_output_overflowing_from_a_combination_names_the_inputs_under_inputs(client):
    # K1 = 1e5 km/s, P = 1e300 d: K1 P is beyond a double in km, while an ordinary K1 or an ordinary
    # P alone gives a finite a1 sin i: neither input alone is at fault
    body = {"period": {"value": 1, "unit": "1e300 d"}, "k1": 1e5, "eccentricity": 0}
    p = problem(client.post(SB1, json=body), 422)
    assert p["errors"] == {"_inputs": ["these inputs (period, k1) give no finite value of a1_sin_i: it, or a "
                                       "number in its computation, overflows a double (beyond about 1.8e308)"]}
    assert p["detail"] == "these inputs give no finite result"


# --- 3. a catalogue row with more or fewer cells than the header --------------------------------

RAGGED = "period,k1,eccentricity\n41.6,23.4\n41.6,23.4,0.31\n41.6,23.4,0.31,7\n"
ECSV_HEAD = ("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: period, datatype: float64}\n"
             "# - {name: k1, datatype: float64}\n# - {name: eccentricity, datatype: float64}\n"
             "# schema: astropy-2.0\nperiod k1 eccentricity\n")


def ragged_message(row: int, cells: int, header: int = 3) -> str:
    return (f"row {row + 1} (system {row}) has {cells} cells where the header has {header}: a cell is missing or "
            "one too many (a delimiter within a cell must be quoted), so its cells cannot be put under their columns")


def test_a_ragged_csv_row_is_that_systems_error_in_place(client):
    answer = client.post("/v1/batch/sb1", data=RAGGED, content_type="text/csv",
                         headers={"Accept": "application/json"}).get_json()
    assert [(e["index"], e["errors"]) for e in answer["errors"]] == [
        (0, {"_row": [ragged_message(0, 2)]}), (2, {"_row": [ragged_message(2, 4)]})]
    value = answer["columns"]["mass_function"]["value"]
    assert value[0] is None and value[2] is None
    # f(M) = P K^3 (1 - e^2)^1.5 / (2 pi G) (Hilditch 2001, ch. 2, from memory), with astropy's constants
    import astropy.constants as const
    expected = (41.6 * u.d * (23.4 * u.km / u.s) ** 3 * (1 - 0.31 ** 2) ** 1.5
                / (2 * np.pi * const.G)).to_value(u.M_sun)
    assert value[1] == pytest.approx(expected, rel=1e-6)
    text = client.post("/v1/batch/sb1", data=RAGGED, content_type="text/csv").get_data(as_text=True).splitlines()
    assert text[1].startswith(",,,,422,") and ragged_message(0, 2) in text[1]
    assert text[2].split(",")[4] == "" and ragged_message(2, 4) in text[3]


def test_a_ragged_ecsv_row_is_that_systems_error_in_place(client):
    # a # line is an ECSV comment wherever it is, and cells may be apart by more than one space
    body = ECSV_HEAD + "41.6 23.4\n# a comment, no row\n41.6  23.4 0.31\n"
    answer = client.post("/v1/batch/sb1", data=body, content_type="text/csv",
                         headers={"Accept": "application/json"}).get_json()
    assert [(e["index"], e["errors"]) for e in answer["errors"]] == [(0, {"_row": [ragged_message(0, 2)]})]
    assert answer["columns"]["mass_function"]["value"][1] > 0


def test_quoted_delimiters_blank_lines_and_missing_cells_are_no_ragged_rows(client):
    # a quoted comma is one cell (RFC 4180); a blank line is no row; an empty cell is a missing value
    body = 'star,period,k1,eccentricity\n"Lantern-7, A",41.6,23.4,0.31\n\n"B",41.6,,0.31\n'
    answer = client.post("/v1/batch/sb1?keep=star", data=body, content_type="text/csv",
                         headers={"Accept": "application/json"}).get_json()
    assert answer["count"] == 2 and answer["kept"]["star"] == ["Lantern-7, A", "B"]
    assert [(e["index"], list(e["errors"])) for e in answer["errors"]] == [(1, ["k1"])]


def test_the_command_line_answers_a_ragged_row_in_place(tmp_path):
    from calcservice.cli import main
    src, out = tmp_path / "ragged.csv", tmp_path / "out.csv"
    src.write_text(RAGGED)
    assert main(["compute", "sb1", "--in", str(src), "--out", str(out)]) == 0
    from astropy.table import Table
    t = Table.read(out, format="ascii.csv")
    assert list(t["error_status"].filled(0)) == [422, 0, 422]
    assert ragged_message(0, 2) in t["error"][0] and ragged_message(2, 4) in t["error"][2]
    ecsv = tmp_path / "ragged.ecsv"
    ecsv.write_text(ECSV_HEAD + "41.6 23.4 0.31\n41.6 23.4 0.31 7\n")
    assert main(["compute", "sb1", "--in", str(ecsv), "--out", str(out)]) == 0
    t = Table.read(out, format="ascii.csv")
    assert list(t["error_status"].filled(0)) == [0, 422] and ragged_message(1, 4) in t["error"][1]


# --- 4. echo with a columns batch (a JSON columns body or a table) ------------------------------

def test_echo_with_a_columns_batch_is_refused_not_ignored(client):
    from urllib.parse import quote
    columns = {"columns": {"period": [41.6], "k1": [23.4], "eccentricity": [0.31]}}
    p = problem(client.post("/v1/batch/sb1", json={**columns, "echo": True}), 422)
    assert list(p["errors"]) == ["echo"] and p["errors"]["echo"][0].startswith(
        "echo repeats each system's inputs in a rows batch")
    table = "period,k1,eccentricity\n41.6,23.4,0.31\n"
    for accept in ("text/csv", "application/json"):
        p = problem(client.post("/v1/batch/sb1?options=" + quote(json.dumps({"echo": True})), data=table,
                                content_type="text/csv", headers={"Accept": accept}), 422)
        assert list(p["errors"]) == ["echo"]
    # echo false, or left out, is what a columns answer is; rows still echo
    assert client.post("/v1/batch/sb1", json={**columns, "echo": False}).status_code == 200
    assert client.post("/v1/batch/sb1?options=" + quote('{"echo": false}'), data=table,
                       content_type="text/csv").status_code == 200
    rows = client.post("/v1/batch/sb1", json={"systems": [GOOD], "echo": True}).get_json()["results"]
    assert rows[0]["inputs"]["k1"] == {"value": 23.4, "sigma": 0.0, "unit": "km/s"}


def test_the_spec_says_a_columns_batch_takes_no_echo():
    import jsonschema
    import yaml

    from calcservice.openapi import spec_yaml
    spec = yaml.safe_load(spec_yaml())
    validator = jsonschema.Draft202012Validator({"$ref": "#/components/schemas/sb1_batch_request",
                                                 "components": spec["components"]})
    columns = {"columns": {"period": [41.6], "k1": [23.4], "eccentricity": [0.31]}}
    assert validator.is_valid({**columns, "echo": False}) and validator.is_valid({"systems": [GOOD], "echo": True})
    assert not validator.is_valid({**columns, "echo": True})


# --- 5. Accept on a single calculation (RFC 9110 section 12.5.1) --------------------------------

SB2_BODY = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31}


@pytest.mark.parametrize("accept, query", [
    ("text/html", ""),
    ("application/problem+json", ""),                  # a problem is no answer to a calculation
    ("application/json;q=0, */*", ""),                 # q=0 refuses a type (RFC 9110 section 12.4.2)
    ("text/markdown", ""),                              # a report is asked for with format
    ("image/*", "?format=latex"),
    ("*/*;q=0", ""),
    ("application/json;q=0, application/*", ""),         # the most specific range decides (RFC 9110 12.5.1)
])
def test_an_accept_that_takes_no_answer_of_a_calculation_is_406_listing_them(client, accept, query):
    p = problem(client.post(SB2 + query, json=SB2_BODY, headers={"Accept": accept}), 406)
    assert list(p["errors"]) == ["Accept"]
    assert ("a calculation answers application/json, text/x-tex (format=latex), text/markdown (format=markdown), "
            "image/svg+xml (format=svg), image/png (format=png)") in p["detail"]
    if accept == "text/markdown":
        assert p["errors"]["Accept"] == ["must accept application/json (or give format=markdown)"]


@pytest.mark.parametrize("accept, query, answered", [
    (None, "", "application/json"),
    ("*/*", "", "application/json"),                   # curl
    ("application/*", "", "application/json"),
    ("application/json, application/problem+json, */*", "", "application/json"),     # the web form's fetch
    ("text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8", "", "application/json"),   # a browser's
    ("application/json; charset=utf-8", "", "application/json"),   # JSON is UTF-8 (RFC 8259)
    ("*", "", "application/json"),                      # an old client's */*
    ("garbage", "", "application/json"),                # no readable media range: disregarded (RFC 9110 12.5.1)
    ("text/*;q=0, application/json", "", "application/json"),
    ("text/markdown", "?format=markdown", "text/markdown"),
    ("text/*", "?format=latex", "text/x-tex"),          # the Python client's report
])
def test_accepts_that_take_the_answer_are_answered(client, accept, query, answered):
    r = client.post(SB2 + query, json=SB2_BODY, headers={"Accept": accept} if accept else {})
    assert r.status_code == 200 and r.mimetype == answered
    if answered == "application/json":
        # q = K1/K2 (Hilditch 2001, ch. 2, from memory)
        assert r.get_json()["results"]["mass_ratio"]["value"] == pytest.approx(38.2 / 51.7, rel=1e-12)


def test_a_bad_body_is_still_a_problem_whatever_accept_says(client):
    # RFC 9110 allows an error in a type Accept does not list: a problem says what is wrong
    p = problem(client.post(SB2, json={**SB2_BODY, "eccentricity": 1.5}, headers={"Accept": "application/json"}), 422)
    assert list(p["errors"]) == ["eccentricity"]


# --- 6. the Python client's own refusals ----------------------------------------------------------

@pytest.fixture(scope="module")
def local():
    from calcservice.client import Client
    return Client("local")


@pytest.mark.parametrize("make, fmt, message", [
    ("figure", "latex", "format: figure draws svg or png, not 'latex' (report() gives latex and markdown)"),
    ("figure", "markdown", "format: figure draws svg or png, not 'markdown' (report() gives latex and markdown)"),
    ("report", "svg", "format: report gives latex or markdown, not 'svg' (figure() draws svg and png)"),
    ("report", "json", "format: report gives latex or markdown, not 'json' (figure() draws svg and png)"),
])
def test_the_client_refuses_a_format_the_call_does_not_make(local, make, fmt, message):
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        getattr(local, make)("sb1", format=fmt, **GOOD)
    assert e.value.errors == {"format": [message]}


def test_the_client_still_makes_its_reports_and_figures(local):
    assert local.report("sb1", format="markdown", **GOOD).startswith("#")
    assert local.figure("sb1", format="svg", plot="mass_function", period=41.6, k1=(23.4, 0.4),
                        eccentricity=0.31, method="monte_carlo", samples=200, seed=1).lstrip().startswith(b"<?xml")


@pytest.mark.parametrize("data, index, kind", [([1, 2, 3], 0, "int"), ([GOOD, 5.0], 1, "float"),
                                               ([GOOD, GOOD, [41.6, 23.4, 0.31]], 2, "list")])
def test_a_batch_row_that_is_not_a_mapping_is_named_by_its_index(local, data, index, kind):
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        local.batch("sb1", data)
    assert list(e.value.errors) == [f"systems.{index}"]
    assert str(e.value).startswith(f"systems.{index}: a system of a list of rows is a mapping of inputs to values")
    assert f"not {kind}; a batch also takes an astropy Table or QTable, a pandas DataFrame" in str(e.value)


# --- 7. a catalogue whose systems draw though the options ask for no Monte Carlo ----------------

ISOTROPIC_ROWS = 7


def _isotropic_catalogue():
    n = ISOTROPIC_ROWS
    return {"period": np.linspace(10.0, 70.0, n), "k1": np.full(n, 23.4), "eccentricity": np.full(n, 0.31),
            "primary_mass": np.full(n, 1.2), "inclination": ["isotropic"] * (n - 1) + [80.0]}


@pytest.mark.parametrize("transport", ["arrow", "json"])
def test_the_client_splits_a_catalogue_that_draws_by_the_services_draw_limit(transport):
    from calcservice.client import Client
    # 3 systems of 1000 draws per request: "isotropic" inclinations draw though no method is asked for
    svc = Client.local({"MAX_BATCH_DRAWS": 3000, "DEFAULT_SAMPLES": 1000}, transport=transport)
    sizes = []
    real = svc._request

    def spy(method, path, body=None, query=None, **kw):
        status, ctype, payload = real(method, path, body, query, **kw)
        if path.startswith("/v1/batch/"):
            sizes.append(status)
        return status, ctype, payload
    svc._request = spy
    out = svc.batch("sb1", _isotropic_catalogue())
    assert out.failed == []
    assert sizes == [200, 200, 200]                # 7 systems in slices of 3 (the first refused on the server's side)
    # m2_min depends on no draw: each system's is its single request's (the mass function's cubic,
    # Hilditch 2001, ch. 2)
    single = Client.local()
    for k, period in enumerate(np.linspace(10.0, 70.0, ISOTROPIC_ROWS)):
        expected = single.calculate("sb1", period=period, k1=23.4, eccentricity=0.31,
                                    primary_mass=1.2)["results"]["m2_min"]["value"]
        assert out["m2_min"][k] == pytest.approx(expected, rel=1e-12)


def test_the_command_line_splits_a_catalogue_that_draws_by_the_draw_limit(tmp_path, monkeypatch):
    from astropy.table import Table

    from calcservice.cli import main
    monkeypatch.setenv("CALCSERVICE_MAX_BATCH_DRAWS", "3000")
    monkeypatch.setenv("CALCSERVICE_DEFAULT_SAMPLES", "1000")
    src, out = tmp_path / "iso.csv", tmp_path / "out.csv"
    Table(_isotropic_catalogue()).write(src, format="ascii.csv")
    assert main(["compute", "sb1", "--in", str(src), "--out", str(out)]) == 0
    t = Table.read(out, format="ascii.csv")
    assert len(t) == ISOTROPIC_ROWS and not np.any(t["error_status"].filled(0))


def test_a_cell_below_a_doubles_range_is_said_in_words_without_astropys_warning(client, tmp_path, capsys):
    import warnings
    table = "period,k1,eccentricity\n41.6,1e-320,0.31\n41.6,23.4,0.31\n"
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        answer = client.post("/v1/batch/sb1", data=table, content_type="text/csv",
                             headers={"Accept": "application/json"}).get_json()
    assert [e["index"] for e in answer["errors"]] == [0]
    assert not [w for w in caught if "converting to FloatType" in str(w.message)]
    from calcservice.cli import main
    (tmp_path / "sub.csv").write_text(table)
    assert main(["compute", "sb1", "--in", str(tmp_path / "sub.csv"), "--out", str(tmp_path / "o.csv")]) == 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("1 of 2 systems computed; 1 failed: k1: value is below")
