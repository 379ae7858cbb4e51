"""Bad input, eighth round: a split normal whose upper width is near the largest double (every Monte Carlo
draw put at the mode: a sigma silently dropped), an HTTP/1.1 request without a Host field (answered 200),
and numbers of less than double precision (a float32 catalogue column: 41.6 read as 41.599998474121094).
Each case gets a 4xx problem naming the field, or the answer it should have had, never a traceback."""

from __future__ import annotations

import numpy as np
import pytest

from calcservice import create_app
from tests.test_bad_inputs_round2 import problem

SB1 = "/v1/spectroscopic/sb1"
GOOD = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}


# --- 1. a split normal's width near the largest double -------------------------------------------------

@pytest.mark.parametrize("k1", [
    {"value": 23.4, "sigma_minus": 1.0, "sigma_plus": 1e308},     # 2 sigma_plus overflowed: every draw at 23.4
    {"value": 23.4, "sigma_minus": 1e308, "sigma_plus": 1.0},
    {"value": 23.4, "sigma": 1e308},                              # keyed _inputs: the blame's sum overflowed
])
def test_a_sigma_near_the_largest_double_leaves_no_draw_and_names_the_input(client, k1):
    # k1 must lie in (0, c): a half-width of 1e308 km/s puts (almost) every draw beyond the speed of light,
    # and the other half weighs sigma / (sigma_minus + sigma_plus) = 1e-308 of the draws
    r = client.post(SB1, json={**GOOD, "k1": k1, "uncertainty": {"method": "monte_carlo", "samples": 500,
                                                                  "seed": 3}})
    doc = problem(r, 422)
    assert list(doc["errors"]) == ["k1"], doc
    assert "probability" in doc["errors"]["k1"][0], doc


def test_the_split_normal_probability_of_a_half_width_near_the_largest_double_is_its_halfs_weight():
    from calcservice.engine import split_normal_within
    # a split normal puts sigma_plus / (sigma_minus + sigma_plus) of its draws above the mode (each half weighted
    # by its width; Wallis 2014, "Two-piece normal distribution"), here 1 - 1e-308, i.e. 1.0 in a double
    p = split_normal_within(np.array([0.0]), np.array([1.0]), np.array([1e308]), 0.0, np.inf)
    assert p[0] == pytest.approx(1.0, rel=1e-12)
    p = split_normal_within(np.array([0.0]), np.array([1.0]), np.array([1e308]), -np.inf, 0.0)
    assert p[0] == pytest.approx(1e-308, rel=1e-12)
    # a split normal of equal widths is the normal: within one sigma 68.27 % (scipy.stats.norm.cdf(1) - cdf(-1))
    p = split_normal_within(np.array([5.0]), np.array([1.5e308]), np.array([1.5e308]), -1.5e308, 1.5e308)
    assert p[0] == pytest.approx(0.6826894921370859, rel=1e-12)


def test_a_split_normal_of_ordinary_widths_is_still_drawn_as_one(client):
    from scipy.stats import norm

    from tests.test_bad_inputs_round4 import mass_function
    body = {**GOOD, "k1": {"value": 23.4, "sigma_minus": 0.3, "sigma_plus": 0.9},
            "uncertainty": {"method": "monte_carlo", "samples": 4000, "seed": 11}}
    mf = client.post(SB1, json=body).get_json()["results"]["mass_function"]
    # the split normal's median: P(below the mode) = 0.3 / 1.2 = 0.25, so the median lies in the upper half where
    # 0.25 + (2 * 0.9 / 1.2) (Phi(z) - 0.5) = 0.5 (Wallis 2014); f(M) goes as K1^3 (Hilditch 2001, eq. 2.51),
    # monotonic, so its median is f at K1's median; 4000 draws place a median within about 0.3 % of f
    k1_median = 23.4 + 0.9 * norm.ppf(0.5 + 0.25 * 1.2 / (2 * 0.9))
    assert mf["value"] == pytest.approx(mass_function(41.6, k1_median, 0.31), rel=0.01)
    assert mf["low"] < mf["value"] < mf["high"]


# --- 2. an HTTP/1.1 request without a Host field, or with one that names no host ----------------------

def _without_host(app, host, protocol="HTTP/1.1"):
    from werkzeug.test import EnvironBuilder, run_wsgi_app
    environ = EnvironBuilder(path=SB1, method="POST", json=GOOD).get_environ()
    environ["SERVER_PROTOCOL"] = protocol
    if host is None:
        del environ["HTTP_HOST"]
    else:
        environ["HTTP_HOST"] = host
    body, status, headers = run_wsgi_app(app, environ, buffered=True)
    return int(status.split()[0]), dict(headers), b"".join(body)


@pytest.mark.parametrize("host", [None, "a b", "example.org/v1", "user@example.org", "ex\u00e4mple.org"])
def test_an_http_11_request_without_a_host_or_with_no_host_in_it_is_400_naming_host(host):
    import json
    # RFC 9112 section 3.2: "A server MUST respond with a 400 (Bad Request) status code to any HTTP/1.1 request
    # message that lacks a Host header field ... or a Host header field with an invalid field value"
    status, headers, body = _without_host(create_app(), host)
    assert status == 400 and headers["Content-Type"] == "application/problem+json", body
    assert list(json.loads(body)["errors"]) == ["Host"]


@pytest.mark.parametrize("host, protocol", [("localhost", "HTTP/1.1"), ("127.0.0.1:8000", "HTTP/1.1"),
                                            ("[::1]:8000", "HTTP/1.1"), ("", "HTTP/1.1"),   # RFC 9110 7.2: empty
                                            (None, "HTTP/1.0")])                          # 1.0 has no Host rule
def test_a_request_with_a_host_or_of_http_10_is_answered(host, protocol):
    import json

    from tests.test_bad_inputs_round4 import mass_function
    status, _, body = _without_host(create_app(), host, protocol)
    assert status == 200, body
    assert json.loads(body)["results"]["mass_function"]["value"] == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                  rel=1e-12)


@pytest.mark.server
def test_gunicorn_answers_an_http_11_request_without_host_400_naming_it():
    import json
    import tempfile
    from pathlib import Path

    from tests.test_public import Served, assert_problem, exchange
    served = Served(Path(tempfile.mkdtemp()), {})
    try:
        for head in (b"GET /v1/health HTTP/1.1\r\n", b"GET /v1/health HTTP/1.1\r\nHost: a b\r\n"):
            # gunicorn passed both on, and the service answered 200
            status, headers, reply, _ = exchange(served.port, head + b"Connection: close\r\n\r\n")
            assert list(assert_problem(status, headers, reply, 400)["errors"]) == ["Host"]
        status, _, reply, _ = exchange(served.port, b"GET /v1/health HTTP/1.1\r\nHost: 127.0.0.1\r\n"
                                                    b"Connection: close\r\n\r\n")
        assert status == 200 and json.loads(reply)["status"] == "ok"
    finally:
        served.stop()


# --- 3. numbers of less than double precision: the decimals they print, not their binary values -------

def _f64():
    # 41.6, 23.4 and 0.31 written in float32 are 41.599998474121094, 23.399999618530273 and 0.3100000023841858 as
    # doubles: a relative change of 4e-8 in f(M), far above the 1e-12 the checks allow
    from tests.test_bad_inputs_round4 import mass_function
    return mass_function(41.6, 23.4, 0.31)


@pytest.mark.parametrize("dtype", [np.float32, np.float16])
def test_the_clients_float32_scalars_are_sent_as_the_decimals_they_print(local, dtype):
    period, k1, e = dtype(41.6), dtype(23.4), dtype(0.31)
    r = local.calculate("sb1", period=(period, dtype(0.02)), k1=k1, eccentricity=e)
    # numpy prints them 41.6 (41.59 for float16, 23.4, 0.31): what the caller (or the catalogue's writer) wrote
    assert r["inputs"]["period"]["value"] == float(str(period)) and r["inputs"]["k1"]["value"] == float(str(k1))
    assert r["inputs"]["period"]["sigma"] == float(str(dtype(0.02)))
    if dtype is np.float32:
        assert r["results"]["mass_function"]["value"] == pytest.approx(_f64(), rel=1e-12)
    r = local.calculate("sb1", period=41.6, eccentricity=0.31, k1=np.array([23.3, 23.5], np.float32))
    assert r["inputs"]["k1"]["value"] == pytest.approx(23.4, rel=1e-12)       # the mean of the samples 23.3, 23.5


def _catalogues():
    import astropy.units as u
    import pandas as pd
    from astropy.table import MaskedColumn, QTable, Table
    f32 = np.float32
    masked = Table({"period": MaskedColumn(np.array([41.6, 1.0], f32), mask=[False, True], unit="d"),
                    "k1": MaskedColumn(np.array([23.4, 1.0], f32), unit="km/s"),
                    "eccentricity": np.array([0.31, 0.1], f32)})
    return {
        "mapping": {"period": np.array([41.6, 20.0], f32), "k1": np.array([23.4, 20.0], f32),
                    "eccentricity": np.array([0.31, 0.1], f32)},
        "quantities": {"period": np.array([41.6, 20.0], f32) * u.d, "k1": np.array([23.4, 20.0], f32) * u.km / u.s,
                       "eccentricity": np.array([0.31, 0.1], f32)},
        "qtable": QTable({"period": np.array([41.6, 20.0], f32) * u.d, "k1": np.array([23.4, 20.0], f32) * u.km / u.s,
                          "eccentricity": np.array([0.31, 0.1], f32)}),
        "masked table": masked,
        "numpy masked": {"period": np.ma.masked_array(np.array([41.6, 20.0], f32), mask=[False, True]),
                         "k1": np.array([23.4, 20.0], f32), "eccentricity": np.array([0.31, 0.1], f32)},
        "pandas": pd.DataFrame({"period[d]": np.array([41.6, 20.0], f32), "k1[km/s]": np.array([23.4, 20.0], f32),
                                "eccentricity": np.array([0.31, 0.1], f32)}),
        "pandas nullable": pd.DataFrame({"period[d]": pd.array([41.6, None], dtype="Float32"),
                                         "k1[km/s]": pd.array([23.4, 20.0], dtype="Float32"),
                                         "eccentricity": np.array([0.31, 0.1], f32)}),
    }


@pytest.mark.parametrize("kind", ["mapping", "quantities", "qtable", "masked table", "numpy masked", "pandas",
                                  "pandas nullable"])
@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_a_float32_catalogue_column_is_read_as_the_decimals_it_prints(kind, transport):
    from calcservice.client import Client
    out = Client("local", transport=transport).batch("sb1", _catalogues()[kind])
    assert float(out["mass_function"][0]) == pytest.approx(_f64(), rel=1e-12)


def test_a_float32_column_of_an_ecsv_or_arrow_body_is_read_as_its_decimals(client):
    import io
    import json

    import pyarrow as pa
    ecsv = ("# %ECSV 1.0\n# ---\n# datatype:\n# - {name: period, unit: d, datatype: float32}\n"
            "# - {name: k1, unit: km / s, datatype: float32}\n# - {name: eccentricity, datatype: float16}\n"
            "period k1 eccentricity\n41.6 23.4 0.31\n\"\" 23.4 0.31\n")
    r = client.post("/v1/batch/sb1", data=ecsv, headers={"Content-Type": "text/csv", "Accept": "application/json"})
    doc = r.get_json()
    # the text says 41.6: read into float32 by its datatype, it was answered for 41.599998474121094
    assert doc["columns"]["mass_function"]["value"][0] == pytest.approx(_f64(), rel=1e-12)
    assert [e["index"] for e in doc["errors"]] == [1]                   # the masked cell: that system's error
    table = pa.table({"period": pa.array([41.6, None], pa.float32()), "k1": pa.array([23.4, 23.4], pa.float32()),
                      "eccentricity": pa.array(np.array([0.31, 0.31], np.float16))})
    sink = io.BytesIO()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    r = client.post("/v1/batch/sb1", data=sink.getvalue(),
                    headers={"Content-Type": "application/vnd.apache.arrow.stream", "Accept": "application/json"})
    doc = json.loads(r.get_data())
    assert doc["columns"]["mass_function"]["value"][0] == pytest.approx(_f64(), rel=1e-12)
    assert [e["index"] for e in doc["errors"]] == [1]


def test_the_library_reads_float32_numbers_as_their_decimals():
    from calcservice.core import compute, compute_batch
    r = compute("sb1", {"period": np.float32(41.6), "k1": {"samples": np.array([23.3, 23.5], np.float32)},
                        "eccentricity": np.float32(0.31)})
    assert r["inputs"]["period"]["value"] == 41.6 and r["inputs"]["k1"]["value"] == pytest.approx(23.4, rel=1e-12)
    out = compute_batch("sb1", {"columns": {"period": np.array([41.6], np.float32), "k1": np.float32(23.4),
                                            "eccentricity": {"value": np.array([0.31], np.float32)}}})
    assert out["columns"]["mass_function"]["value"][0] == pytest.approx(_f64(), rel=1e-12)


def test_the_command_line_reads_a_fits_catalogues_float32_columns_as_their_decimals(tmp_path):
    import astropy.units as u
    from astropy.table import QTable, Table

    from calcservice.cli import main
    QTable({"period": np.array([41.6], np.float32) * u.d, "k1": np.array([23.4], np.float32) * u.km / u.s,
            "eccentricity": np.array([0.31], np.float32)}).write(tmp_path / "cat.fits")
    assert main(["compute", "sb1", "--in", str(tmp_path / "cat.fits"), "--out", str(tmp_path / "out.ecsv")]) == 0
    assert float(Table.read(tmp_path / "out.ecsv")["mass_function"][0]) == pytest.approx(_f64(), rel=1e-12)


# --- 4. the client's astropy Masked Quantity: a masked entry is missing, not the number under the mask --

@pytest.mark.parametrize("k1", [
    lambda Masked, u: Masked([23.3, 99.0] * u.km / u.s, mask=[False, True]),     # sent as the samples 23.3, 99
    lambda Masked, u: Masked(23.4 * u.km / u.s, mask=True),                      # sent as 23.4
])
def test_a_masked_quantitys_masked_entry_is_refused_as_missing_naming_the_input(local, k1):
    import astropy.units as u
    from astropy.utils.masked import Masked

    from calcservice.client import CalcServiceError
    # a numpy masked array's masked entry goes as null, which the service refuses naming the input
    with pytest.raises(CalcServiceError) as e:
        local.calculate("sb1", period=41.6, eccentricity=0.31, k1=k1(Masked, u))
    assert list(e.value.errors) == ["k1"], e.value.errors


def test_a_masked_quantity_with_nothing_masked_is_read_in_its_unit(local):
    import astropy.units as u
    from astropy.utils.masked import Masked

    from tests.test_bad_inputs_round4 import mass_function
    r = local.calculate("sb1", period=Masked(41.6 * u.d, mask=False), eccentricity=0.31,
                        k1=Masked([23300.0, 23500.0] * u.m / u.s, mask=[False, False]))
    assert r["inputs"]["k1"]["value"] == pytest.approx(23.4, rel=1e-12) and r["inputs"]["k1"]["samples"] == 2
    r = local.calculate("sb1", period=Masked(41.6 * u.d, mask=False), eccentricity=0.31, k1=23.4)
    assert r["results"]["mass_function"]["value"] == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


# --- 5. a batch's correlation naming an input some of its systems lack --------------------------------

SB1_A = {"period": {"value": 41.6, "sigma": 0.1}, "k1": {"value": 23.4, "sigma": 0.2}, "eccentricity": 0.31}
SB1_B = {**SB1_A, "primary_mass": {"value": 1.2, "sigma": 0.1}}
K1_M1 = [{"between": ["k1", "primary_mass"], "rho": 0.5}]


def _answered_alone(client, body):
    return client.post(SB1, json=body).get_json()["results"]


def _idle(warnings):
    return [w for w in warnings if w["code"] == "correlation_without_effect"]


def test_a_batch_correlation_of_an_input_a_system_lacks_leaves_that_system_answered_and_warned(client):
    # the systems without primary_mass failed ("'primary_mass' is not an input given in this request"): a
    # catalogue whose optional column is partly empty could not be sent with its correlation at all
    doc = client.post("/v1/batch/sb1", json={"systems": [SB1_A, SB1_B], "correlations": K1_M1}).get_json()
    a, b = doc["results"]
    assert a["results"] == _answered_alone(client, SB1_A)
    assert "primary_mass is not given" in _idle(a["warnings"])[0]["message"]
    # the system that gives both inputs is answered with the correlation, as alone
    assert b["results"] == _answered_alone(client, {**SB1_B, "correlations": K1_M1}) and not _idle(b["warnings"])
    assert b["results"]["m2_min"]["sigma"] != _answered_alone(client, SB1_B)["m2_min"]["sigma"]


def test_a_columns_or_table_batch_correlation_of_an_input_some_systems_lack_is_warned_for_those_rows(client):
    import json
    body = {"columns": {"period": {"value": [41.6, 41.6], "sigma": [0.1, 0.1]},
                        "k1": {"value": [23.4, 23.4], "sigma": [0.2, 0.2]}, "eccentricity": 0.31,
                        "primary_mass": {"value": [None, 1.2], "sigma": [None, 0.1]}}, "correlations": K1_M1}
    csv = ("period,period_sigma,k1,k1_sigma,eccentricity,primary_mass,primary_mass_sigma\n"
           "41.6,0.1,23.4,0.2,0.31,,\n41.6,0.1,23.4,0.2,0.31,1.2,0.1\n")
    for r in (client.post("/v1/batch/sb1", json=body),
              client.post("/v1/batch/sb1", data=csv, query_string={"options": json.dumps({"correlations": K1_M1})},
                          headers={"Content-Type": "text/csv", "Accept": "application/json"})):
        doc = r.get_json()
        assert r.status_code == 200 and doc["errors"] == [], doc.get("errors")
        assert [w["rows"] for w in _idle(doc["warnings"])] == [[0]]
        alone = _answered_alone(client, {**SB1_B, "correlations": K1_M1})["m2_min"]
        assert doc["columns"]["m2_min"]["sigma"] == [None, alone["sigma"]]
        assert doc["columns"]["mass_function"]["sigma"][0] == _answered_alone(client, SB1_A)["mass_function"]["sigma"]


def test_a_systems_own_correlation_or_a_single_requests_still_names_the_input_it_lacks(client):
    doc = client.post("/v1/batch/sb1", json={"systems": [{**SB1_A, "correlations": K1_M1}, SB1_B],
                                             "correlations": K1_M1}).get_json()
    assert list(doc["results"][0]["error"]["errors"]) == ["correlations.0.between"]
    assert list(problem(client.post(SB1, json={**SB1_A, "correlations": K1_M1}), 422)["errors"]) == \
        ["correlations.0.between"]
    # an input the calculation does not have is still the whole batch's 422
    r = client.post("/v1/batch/sb1", json={"systems": [SB1_A], "correlations": [{"between": ["k1", "k3"], "rho": 0.5}]})
    assert list(problem(r, 422)["errors"]) == ["correlations.0.between"]


# --- 6. a CSV quote never closed ------------------------------------------------------------------------

UNCLOSED = 'star,period,k1,eccentricity\nA,41.6,23.4,0.31\n"B,41.6,23.4,0.31\nC,20.0,20.0,0.1\nD,20.0,20.0,0.1\n'


def test_a_csv_quote_never_closed_is_a_400_naming_the_body_and_its_line(client):
    # the quote swallowed every later line into one cell: three systems became one failed row, and the
    # answer counted 2 systems of the 4 sent
    r = client.post("/v1/batch/sb1", data=UNCLOSED, query_string={"keep": "star"},
                    headers={"Content-Type": "text/csv", "Accept": "application/json"})
    doc = problem(r, 400)
    assert list(doc["errors"]) == ["_body"] and "line 3" in doc["errors"]["_body"][0], doc


def test_a_quoted_cell_over_two_lines_or_a_quote_within_a_cell_is_still_read(client):
    text = 'star,period,k1,eccentricity\n"A\nsecond line",41.6,23.4,0.31\n5"x,20.0,20.0,0.1\n"B ""b""",20.0,20.0,0.1\n'
    r = client.post("/v1/batch/sb1", data=text, query_string={"keep": "star"},
                    headers={"Content-Type": "text/csv", "Accept": "application/json"})
    doc = r.get_json()
    assert r.status_code == 200 and doc["count"] == 3 and doc["errors"] == [], doc
    assert doc["kept"]["star"] == ["A\nsecond line", '5"x', 'B "b"']


def test_the_command_line_says_a_csv_quote_never_closed_in_one_line(tmp_path, capsys):
    from calcservice.cli import main
    (tmp_path / "cat.csv").write_text(UNCLOSED)
    assert main(["compute", "sb1", "--in", str(tmp_path / "cat.csv"), "--keep", "star",
                 "--out", str(tmp_path / "out.csv")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("calcservice compute: --in: ") and "line 3" in err and err.count("\n") == 1, err
    assert not (tmp_path / "out.csv").exists()


# --- 7. the command line's samples file without end ------------------------------------------------------

def test_a_samples_file_without_end_is_one_line_naming_the_input_not_a_hang(tmp_path, capsys, monkeypatch):
    import os

    from calcservice.cli import main
    if not os.path.exists("/dev/zero"):
        pytest.skip("no /dev/zero")
    # /dev/zero was read to the end, which never comes; more than a request body may hold is refused
    assert main(["compute", "sb1", "period=@/dev/zero", "k1=23.4", "eccentricity=0.31"]) == 2
    err = capsys.readouterr().err
    assert err.startswith("calcservice compute: period: ") and "max_body_bytes" in err and err.count("\n") == 1, err
    monkeypatch.setenv("CALCSERVICE_MAX_BODY_BYTES", "100")
    (tmp_path / "draws.txt").write_text("41.6\n" * 30)            # 150 bytes
    assert main(["compute", "sb1", f"period=@{tmp_path / 'draws.txt'}", "k1=23.4", "eccentricity=0.31"]) == 2
    assert "more than 100 bytes" in capsys.readouterr().err
    (tmp_path / "draws.txt").write_text("41.5 41.7\n")
    assert main(["compute", "sb1", f"period=@{tmp_path / 'draws.txt'}", "k1=23.4", "eccentricity=0.31",
                 "--format", "json"]) == 0
    import json
    assert json.loads(capsys.readouterr().out)["inputs"]["period"]["value"] == pytest.approx(41.6, rel=1e-12)


# --- 8. the client's column of complex numbers or durations ----------------------------------------------

@pytest.mark.parametrize("period", [
    lambda pd, dt: np.array([41.6 + 0j, 20.0]),
    lambda pd, dt: [41.6 + 0j, 20.0],
    lambda pd, dt: np.array([41, 20], dtype="timedelta64[D]"),
    lambda pd, dt: [dt.timedelta(days=41.6), dt.timedelta(days=20)],
    lambda pd, dt: pd.Series(pd.to_timedelta([41.6, 20.0], unit="D")),
])
@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_a_column_of_complex_numbers_or_durations_is_refused_naming_it(period, transport):
    import datetime as dt

    import pandas as pd

    from calcservice.client import Client, InvalidInput
    # JSON: a TypeError of the encoder ("Type is not JSON serializable: complex") named no column;
    # Arrow: every system failed with "value must be a number"
    with pytest.raises(InvalidInput) as e:
        Client("local", transport=transport).batch("sb1", {"period": period(pd, dt), "k1": [23.4, 20.0],
                                                           "eccentricity": [0.31, 0.1]}, units={"period": "d"})
    assert list(e.value.errors) == ["period"]


def test_a_column_with_a_list_in_some_cells_is_refused_naming_it(local):
    from calcservice.client import InvalidInput
    # numpy's "setting an array element with a sequence ... inhomogeneous shape", keyed _inputs
    with pytest.raises(InvalidInput) as e:
        local.batch("sb1", {"period": [[41.6], 20.0], "k1": [23.4, 20.0], "eccentricity": [0.31, 0.1]})
    assert list(e.value.errors) == ["period"]


# --- 9. the client's odd objects in a column, a 2-D sigma, a longdouble -----------------------------------

@pytest.mark.parametrize("column, field", [
    (lambda pd, u, Masked, ufloat: pd.Series([Masked(41.6 * u.d, mask=True), 20.0]), "period"),   # TypeError
    (lambda pd, u, Masked, ufloat: pd.Series([ufloat(41.6, 0.1), 20]), "period"),               # TypeError
    (lambda pd, u, Masked, ufloat: pd.Series([41.6 * u.d, 20.0]), "period"),
    (lambda pd, u, Masked, ufloat: ([41.6, 20.0], [np.array([0.1, 0.2]), (0.1, 0.2)]), "period"),  # ArrowInvalid
])
@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_a_column_holding_objects_that_are_no_numbers_is_refused_naming_it(column, field, transport):
    import astropy.units as u
    import pandas as pd
    from astropy.utils.masked import Masked
    from uncertainties import ufloat

    from calcservice.client import Client, InvalidInput
    with pytest.raises(InvalidInput) as e:
        Client("local", transport=transport).batch("sb1", {"period": column(pd, u, Masked, ufloat), "k1": [23.4, 20.0],
                                                           "eccentricity": [0.31, 0.1]}, units={"period": "d"})
    assert list(e.value.errors) == [field]


@pytest.mark.parametrize("period", [lambda: np.longdouble("41.6"), lambda: (np.longdouble("41.6"), 0.1),
                                   lambda: {"value": np.longdouble("41.6")}])
def test_a_longdouble_is_the_double_nearest_it(local, period):
    from tests.test_bad_inputs_round4 import mass_function
    # refused as "no value of the wire contract", or the encoder's "default serializer exceeds recursion limit"
    r = local.calculate("sb1", period=period(), k1=23.4, eccentricity=0.31)
    assert r["results"]["mass_function"]["value"] == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


@pytest.mark.parametrize("eccentricity", [
    lambda u: [0.3 * u.one, np.complex128(1 + 1j)],      # a complex Quantity: the encoder's TypeError
    lambda u: [10 ** 400, 0.3 * u.one],                  # astropy's OverflowError
])
def test_a_list_of_quantities_with_a_complex_or_a_huge_integer_is_refused_naming_the_input(local, eccentricity):
    import astropy.units as u

    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as e:
        local.calculate("sb1", period=41.6, k1=23.4, eccentricity=eccentricity(u))
    assert list(e.value.errors) == ["eccentricity"]


# --- 10. a bounded sample of the hand fuzz: every input read in another unit gives the same answer ----------

_OTHER_UNITS = {"d": ["yr", "h"], "km/s": ["m/s", "au/yr"], "deg": ["rad", "arcsec"], "mas": ["arcsec", "uas"],
                "solMass": ["kg", "jupiterMass"], "au": ["solRad", "km"], "pc": ["kpc", "lyr"], "": ["%"],
                "kpc": ["pc"], "solMass/yr": ["kg/s"], "GHz": ["MHz"], "mJy": ["Jy", "W/(m2 Hz)"], "solRad": ["km"],
                "s/yr": ["d/yr"], "deg/yr": ["rad/yr"], "solLum": ["W"]}


def _unit_cases():
    import random

    from calcservice.registry import calculations
    cases = [(calc.name, spec.name, unit) for calc in calculations().values() for spec in calc.inputs
             if spec.kind == "quantity" and not spec.time and spec.name in calc.example
             for unit in _OTHER_UNITS.get(spec.unit, [])]
    return random.Random(8).sample(cases, 24)


@pytest.mark.parametrize("name, field, unit", _unit_cases())
def test_an_input_in_another_unit_is_read_as_the_same_quantity_in_json_and_in_a_csv_header(client, name, field, unit):
    import json

    import astropy.units as u

    from calcservice.registry import calculations
    # the conversion factor is astropy's (a unit read wrongly, or not at all, changes every answer)
    calc = calculations()[name]
    ex = json.loads(json.dumps(calc.example))
    f = float((1 * u.Unit(calc.input(field).unit or "")).to_value(u.Unit(unit)))
    entry = ex[field] if isinstance(ex[field], dict) else {"value": ex[field]}
    entry = {k: (v * f if k in ("value", "sigma", "sigma_minus", "sigma_plus") else v) for k, v in entry.items()}
    ref = client.post(calc.path, json=ex).get_json()["results"]
    got = client.post(calc.path, json={**ex, field: {**entry, "unit": unit}}).get_json()["results"]
    scalar = {o: e for o, e in ref.items() if isinstance(e, dict) and isinstance(e.get("value"), float)}
    for o, e in scalar.items():
        assert got[o]["value"] == pytest.approx(e["value"], rel=1e-9), o
    if any(calc.input(k).kind != "quantity" and k not in ("recipe", "wind_type", "mode", "opening_angle_formula")
           for k in ex if k != "correlations"):
        return
    head, cells = [], []
    for k, v in {**ex, field: {**entry, "unit": unit}}.items():
        if k == "correlations":
            continue
        v = v if isinstance(v, dict) else {"value": v}
        head.append(f"{k}[{v['unit']}]" if "unit" in v else k)
        cells.append(str(v["value"]))
        if "sigma" in v:
            head.append(f"{k}_sigma")
            cells.append(repr(v["sigma"]))
    options = {"correlations": ex["correlations"]} if "correlations" in ex else {}
    r = client.post(f"/v1/batch/{name}", data=",".join(head) + "\n" + ",".join(cells) + "\n",
                    query_string={"options": json.dumps(options)} if options else None,
                    headers={"Content-Type": "text/csv", "Accept": "application/json"})
    doc = r.get_json()
    assert r.status_code == 200 and doc["errors"] == [], doc.get("errors")
    for o, e in scalar.items():
        assert doc["columns"][o]["value"][0] == pytest.approx(e["value"], rel=1e-9), o
        assert doc["columns"][o]["sigma"][0] == pytest.approx(e["sigma"], rel=1e-6, abs=1e-300), o


def test_a_member_given_as_null_is_refused_in_a_rows_batch_as_in_its_single_request(client):
    # a system of a rows batch is answered as its single request is: the optional primary_mass given as
    # null was refused alone (422) but taken as not given in a batch (a mass function without m2_min)
    system = {"period": 41.6, "k1": 23.4, "eccentricity": 0.3, "primary_mass": None}
    single = client.post("/v1/spectroscopic/sb1", json=system)
    assert single.status_code == 422
    assert "may not be null" in single.get_json()["errors"]["primary_mass"][0]
    rows = client.post("/v1/batch/sb1", json={"systems": [system, {**system, "primary_mass": 1.2}]}).get_json()
    assert rows["results"][0]["error"]["errors"] == single.get_json()["errors"]
    assert "m2_min" in rows["results"][1]["results"]


def test_the_client_gives_a_list_of_rows_missing_values_as_a_table_missing_cells(local):
    # None or NaN in a row is "not given", as a table's missing cell: the service refuses a null member, so
    # the client leaves it out (an optional input is answered without it, a required one is that row's error)
    sb1 = {"period": 41.6, "k1": 23.4, "eccentricity": 0.3}
    rows = local.batch("sb1", [{**sb1, "primary_mass": None}, {**sb1, "primary_mass": float("nan")},
                               {**sb1, "period": None}, {**sb1, "primary_mass": 1.2}])
    table = local.batch("sb1", {"period": [41.6, 41.6, float("nan"), 41.6], "k1": 23.4, "eccentricity": 0.3,
                                "primary_mass": [float("nan"), float("nan"), float("nan"), 1.2]})
    assert [e["index"] for e in rows.errors] == [e["index"] for e in table.errors] == [2]
    assert rows.errors[0]["errors"] == {"period": ["is required"]}
    assert rows.quantity("mass_function")[:2].value.tolist() == table.quantity("mass_function")[:2].value.tolist()
