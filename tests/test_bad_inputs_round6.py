"""Bad input, sixth round: table bodies that are no table at all (a problem without an errors member), an
ECSV header naming a column twice (refused under astropy's name period_1), the command line writing its
results over the catalogue it read, keeping columns of no catalogue, and refusing an ECSV file whose
cells are aligned by several spaces, and the Python client's options of the wrong type (a traceback
of AttributeError or TypeError, a time_format dropped, an astropy unit refused, an infinite Quantity
said to be missing).  Each case gets a 4xx problem naming the field (or the client's InvalidInput, or
one line and a non-zero exit of the command line), never a traceback and never a value left out
without a word."""

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
CATALOGUE = "period,k1,eccentricity\n41.6,23.4,0.31\n"


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


def _ecsv(names: str, row: str, columns=("period", "k1", "eccentricity")) -> str:
    header = "".join(f"# - {{name: {name}, datatype: float64}}\n" for name in columns)
    return f"# %ECSV 1.0\n# ---\n# datatype:\n{header}# schema: astropy-2.0\n{names}\n{row}\n"


# --- 1. a table body that is no table: the problem names the body ------------------------------------

def _arrow_stream() -> bytes:
    import pyarrow as pa
    table = pa.table({name: pa.array([value]) for name, value in GOOD.items()})
    sink = io.BytesIO()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue()


@pytest.mark.parametrize("body, content_type, says", [
    (b"ARROW1\x00\x00garbage", ARROW, "the body is not an Apache Arrow IPC stream"),
    (b"", ARROW, "the body is not an Apache Arrow IPC stream"),
    (b"ARROW1\x00\x00" + _arrow_stream(), ARROW, "the body is not an Apache Arrow IPC file"),    # no footer
    (b"# %ECSV 1.0\n# ---\n# datatype: [\n", "text/csv", "the body is not ECSV text"),                # YAML cut short
    (b"# %ECSV 1.0\n# ---\n# datatype:\n# - {datatype: float64}\nperiod\n1\n", "text/csv",
     "the body is not ECSV text"),                                                                 # no name key
])
def test_a_table_body_that_is_no_table_is_a_400_naming_the_body(client, body, content_type, says):
    # RFC 9457 problems of this service name the field at fault in "errors"; a JSON body that is not JSON
    # names "_body", and these table bodies named nothing
    p = problem(client.post("/v1/batch/sb1", data=body, content_type=content_type), 400)
    assert p["detail"].startswith(says)
    assert list(p["errors"]) == ["_body"] and p["errors"]["_body"][0].startswith(says)


def test_a_table_body_that_reads_is_still_answered(client):
    r = client.post("/v1/batch/sb1", data=_arrow_stream(), content_type=ARROW, headers={"Accept": "application/json"})
    assert r.status_code == 200
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                 rel=1e-12)


# --- 2. an ECSV header naming a column twice --------------------------------------------------------

@pytest.mark.parametrize("names", ["period period k1 eccentricity", "period  period   k1 eccentricity "])
def test_an_ecsv_column_named_twice_is_refused_under_the_name_written(client, names):
    # astropy renames the second "period" to "period_1", and the refusal named a column the caller never wrote
    text = _ecsv(names, "41.6 41.6 23.4 0.31", ("period", "period", "k1", "eccentricity"))
    p = problem(client.post("/v1/batch/sb1", data=text, content_type="text/csv"), 422)
    assert p["errors"] == {"period": ["the column appears twice"]}
    assert "period_1" not in p["detail"]


def test_an_ecsv_header_aligned_by_spaces_is_read(client):
    # cells apart by several spaces are one delimiter in ECSV (astropy's reader), in the header too
    text = _ecsv("period   k1  eccentricity", "41.6   23.4  0.31")
    r = client.post("/v1/batch/sb1", data=text, content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 200, r.get_data()[:300]
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                 rel=1e-12)


# --- 3. the command line: --out over --in, --keep without a catalogue, an aligned ECSV file -----------

@pytest.mark.parametrize("same", ["cat.csv", "./cat.csv", "link.csv"])
def test_the_results_are_not_written_over_the_catalogue_they_come_from(tmp_path, capsys, monkeypatch, same):
    # --out naming the --in file replaced the catalogue by its results, the systems' inputs lost
    from calcservice.cli import main
    monkeypatch.chdir(tmp_path)
    (tmp_path / "cat.csv").write_text(CATALOGUE)
    (tmp_path / "link.csv").symlink_to(tmp_path / "cat.csv")
    assert main(["compute", "sb1", "--in", "cat.csv", "--out", same]) == 2
    err = capsys.readouterr().err
    assert err == f"calcservice compute: --out: {same} is the --in file: write the results to another file\n"
    assert (tmp_path / "cat.csv").read_text() == CATALOGUE
    # another file is written, as before
    assert main(["compute", "sb1", "--in", "cat.csv", "--out", "results.csv"]) == 0
    assert (tmp_path / "results.csv").read_text().startswith("mass_function[solMass],")


def test_keep_without_a_catalogue_is_refused_not_dropped(capsys):
    # --keep of one system computed on the command line was left out without a word
    from calcservice.cli import main
    assert main(["compute", "sb1", "period=41.6", "k1=23.4", "eccentricity=0.31", "--keep", "star"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("calcservice compute: --keep: --keep names columns of a catalogue")


def test_the_command_line_reads_an_ecsv_file_aligned_by_spaces_as_the_service_does(tmp_path, capsys):
    # pandas, which parses an ECSV file's lines, split at each space and refused the file naming columns
    # "Unnamed: 1"; the service reads the same text
    from calcservice.cli import main
    src = tmp_path / "cat.ecsv"
    src.write_text(_ecsv("period   k1  eccentricity", "41.6   23.4  0.31"))
    assert main(["compute", "sb1", "--in", str(src), "--out", "-"]) == 0
    out = capsys.readouterr().out.splitlines()
    assert out[0].startswith("mass_function[solMass],")
    assert float(out[1].split(",")[0]) == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


def test_the_command_line_refuses_an_ecsv_column_named_twice_under_its_name(tmp_path, capsys):
    from calcservice.cli import main
    src = tmp_path / "cat.ecsv"
    src.write_text(_ecsv("period period k1 eccentricity", "41.6 41.6 23.4 0.31", ("period", "period", "k1", "eccentricity")))
    assert main(["compute", "sb1", "--in", str(src), "--out", "-"]) == 2
    assert capsys.readouterr().err == f"calcservice compute: period: the column appears twice in the header of {src}\n"


# --- 4. the Python client: options of the wrong type, an astropy unit, an infinite Quantity -----------

@pytest.mark.parametrize("options, field, says", [
    ({"method": 5}, "uncertainty.method", "Not a valid string."),            # AttributeError: 'int' has no 'replace'
    ({"uncertainty": "monte_carlo"}, "uncertainty", "is a mapping"),         # ValueError of dict()
    ({"uncertainty": 5}, "uncertainty", "is a mapping"),                     # TypeError: 'int' is not iterable
    ({"uncertainty": [("method", "linear")]}, "uncertainty", "is a mapping"),  # taken by dict() as a mapping
])
def test_the_clients_uncertainty_of_the_wrong_type_is_refused_naming_it(local, options, field, says):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as info:
        local.calculate("sb1", **GOOD, **options)
    assert list(info.value.errors) == [field] and says in info.value.errors[field][0], info.value.errors


@pytest.mark.parametrize("time_format", ["", 0])
def test_a_time_format_that_is_falsy_is_sent_not_dropped(local, time_format):
    # "" and 0 were dropped, the times read as JDs without a word
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as info:
        local.calculate("ephemeris", period=100.0, eccentricity=0.1, omega=10.0, t_periastron=2450000.0, k1=10.0,
                        times=[2450001.0], time_format=time_format)
    assert info.value.status == 422 and list(info.value.errors) == ["time_format"]


def test_an_output_unit_given_as_an_astropy_unit_is_taken(local):
    # calculate(units={"a1_sin_i": u.km}) raised "Type is not JSON serializable: PrefixUnit", where a batch's
    # units= takes astropy units; a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2, from memory)
    r = local.calculate("sb1", **GOOD, units={"a1_sin_i": u.km})
    expected = (23.4 * u.km / u.s * 41.6 * u.d * np.sqrt(1 - 0.31 ** 2) / (2 * np.pi)).to_value(u.km)
    assert r["results"]["a1_sin_i"]["unit"] == "km"
    assert r["results"]["a1_sin_i"]["value"] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("period", [np.inf * u.yr, {"value": np.inf}, {"value": 41.6, "sigma": -np.inf}])
def test_an_infinite_quantity_or_contract_object_is_refused_by_the_client_naming_it(local, period):
    # JSON has no infinity: the encoder wrote null and the answer said the value was missing
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as info:
        local.calculate("sb1", period=period, k1=23.4, eccentricity=0.31)
    assert list(info.value.errors) == ["period"] and "is not a finite number" in str(info.value)


def test_a_correlation_keyed_by_a_set_of_two_names_is_taken(local):
    # a frozenset key raised "Type is not JSON serializable"; a correlation is symmetric, so the pair's order
    # is no matter; with one input exact it has no effect, which the answer says
    r = local.calculate("sb1", period=41.6, k1=(23.4, 0.3), eccentricity=0.31,
                        correlations={frozenset(["k1", "period"]): 0.5})
    assert [w["code"] for w in r["warnings"]] == ["correlation_without_effect"]


def test_a_batchs_column_units_that_are_no_mapping_are_refused_naming_units(local):
    # units=["d"] raised "dictionary update sequence element #0 has length 1; 2 is required"
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput) as info:
        local.batch("sb1", {"period": [41.6], "k1": [23.4], "eccentricity": [0.31]}, units=["d"])
    assert list(info.value.errors) == ["units"]


# --- 5. a CSV body sent as having no header line -----------------------------------------------------

def test_a_csv_body_said_to_have_no_header_is_refused_naming_the_content_type(client):
    # RFC 4180 section 3: header=absent says the first line is a row; it was read as the column names all
    # the same, the parameter left unread
    p = problem(client.post("/v1/batch/sb1", data=CATALOGUE, content_type="text/csv; header=absent"), 415)
    assert list(p["errors"]) == ["Content-Type"] and "header=absent" in p["errors"]["Content-Type"][0]
    # header=present, or none, is what a request table is
    r = client.post("/v1/batch/sb1", data=CATALOGUE, content_type="text/csv; header=present",
                    headers={"Accept": "application/json"})
    assert r.status_code == 200
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                 rel=1e-12)


# --- 6. an uncertainty on a bound: where a list of events begins ---------------------------------------

ECLIPSES = {"period": 9.73, "eccentricity": 0.28, "omega": 61.0, "t_periastron": 2460811.42, "inclination": 84.6,
            "after": 2461000.5, "count": 2, "total_mass": 3.9, "radius1": 2.1, "radius2": 1.6}


@pytest.mark.parametrize("after", [{"value": 2461000.5, "sigma": 30.0},
                                   {"value": 2461000.5, "sigma_minus": 1.0, "sigma_plus": 2.0}])
def test_a_sigma_on_where_a_list_begins_is_warned_not_dropped(client, after):
    # "after" is where the list of mid-eclipses begins: its sigma was read and left out without a word
    exact = client.post("/v1/orbit/mid-eclipse", json=ECLIPSES).get_json()
    r = client.post("/v1/orbit/mid-eclipse", json={**ECLIPSES, "after": after}).get_json()
    assert [w for w in r["warnings"] if w["code"] == "uncertainty_unused"] == [
        {"code": "uncertainty_unused", "fields": ["after"],
         "message": "after: a bound taken as given (where the list begins), so its uncertainty is not used: the "
                    "answer does not depend on it"}]
    assert r["results"] == exact["results"]         # as the warning says
    # the first mid-eclipse of star 1 listed follows after: the phase of conjunction is the calculation's own
    assert r["results"]["events"]["eclipse_of_star1"][0]["value"] >= 2461000.5


def test_a_sigma_on_where_the_ephemeris_events_begin_is_warned_for_the_rows_that_give_one(client):
    body = {"period": 2037.4, "eccentricity": 0.873, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
            "times": [2460400.5]}
    r = client.post("/v1/batch/ephemeris", json={"systems": [{**body, "after": 2460400.5},
                                                             {**body, "after": {"value": 2460400.5, "sigma": 2.0}},
                                                             {**body, "after": {"value": 2460400.5, "sigma": 0.0}}]})
    codes = [[w["code"] for w in row["warnings"]] for row in r.get_json()["results"]]
    assert ["uncertainty_unused" in c for c in codes] == [False, True, False]


# --- 7. the outputs' correlation asked of a table answer --------------------------------------------

UNCERTAIN = {"period": {"value": [41.6, 42.0], "sigma": [0.1, 0.1]}, "k1": {"value": [23.4, 23.4], "sigma": [0.3, 0.3]},
             "eccentricity": 0.31}


@pytest.mark.parametrize("accept", ["text/csv", "text/x-ecsv", ARROW])
def test_covariance_asked_of_a_table_answer_is_406_naming_it(client, accept):
    # a table has no place for an m x m matrix per system: the CSV, ECSV and Arrow answers left it out without a word
    p = problem(client.post("/v1/batch/sb1", json={"columns": UNCERTAIN, "covariance": True},
                            headers={"Accept": accept}), 406)
    assert set(p["errors"]) == {"covariance", "Accept"}
    # a table body's options the same
    p = problem(client.post("/v1/batch/sb1?options=%7B%22covariance%22%3Atrue%7D",
                            data="period,period_sigma,k1,eccentricity\n41.6,0.1,23.4,0.31\n", content_type="text/csv",
                            headers={"Accept": accept}), 406)
    assert set(p["errors"]) == {"covariance", "Accept"}


def test_covariance_answered_in_json_whatever_the_body(client):
    # mass_function and a1_sin_i with k1 and period alone uncertain: f ~ P K^3 and a ~ P K, so linearised
    # rho = (s_P^2/P^2 + 3 s_K^2/K^2) / sqrt((s_P^2/P^2 + 9 s_K^2/K^2)(s_P^2/P^2 + s_K^2/K^2)) (first-order
    # propagation, from memory)
    r = client.post("/v1/batch/sb1?options=%7B%22covariance%22%3Atrue%7D",
                    data="period,period_sigma,k1,k1_sigma,eccentricity\n41.6,0.1,23.4,0.3,0.31\n",
                    content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 200
    c = r.get_json()["correlation"]
    p, k = (0.1 / 41.6) ** 2, (0.3 / 23.4) ** 2
    rho = (p + 3 * k) / np.sqrt((p + 9 * k) * (p + k))
    assert c["outputs"] == ["mass_function", "a1_sin_i"]
    assert c["matrix"][0][0][1] == pytest.approx(rho, rel=1e-6)


# --- 8. an infinite cell of a catalogue: not finite, not "not given" ------------------------------------

def test_an_infinite_catalogue_cell_is_that_systems_error_as_not_finite(tmp_path, capsys):
    # the command line sent its catalogue through JSON, where an infinity is written null: the system was
    # answered "period: is required", where the service says of the same CSV or Arrow cell "not finite"
    from astropy.table import Table

    from calcservice.cli import main
    src = tmp_path / "cat.fits"
    Table({"period": [41.6, np.inf, 41.6] * u.d, "period_sigma": [0.1, 0.1, -np.inf] * u.d,
           "k1": [23.4, 23.4, 23.4] * u.km / u.s, "eccentricity": [0.31, 0.31, 0.31]}).write(src)
    assert main(["compute", "sb1", "--in", str(src), "--out", "-"]) == 0
    rows = capsys.readouterr().out.splitlines()[1:]
    assert "period: value is not finite" in rows[1] and "period: sigma is not finite" in rows[2]
    # f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G): the first system is answered
    assert float(rows[0].split(",")[0]) == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


@pytest.mark.parametrize("period, label", [(np.array([41.6, -np.inf]), "period"),
                                           ((np.array([41.6, 41.6]), np.array([0.1, np.inf])), "period_sigma")])
def test_the_clients_json_catalogue_refuses_an_infinite_cell_naming_it(period, label):
    # a JSON body (the client's transport without pyarrow, or with covariance) wrote it null: "is required"
    from calcservice.client import Client, InvalidInput
    client = Client("local")
    with pytest.raises(InvalidInput) as info:
        client.batch("sb1", {"period": period, "k1": 23.4, "eccentricity": 0.31}, covariance=True)
    assert list(info.value.errors) == ["period"]
    assert str(info.value).startswith(f"period: {label} of system 1 is ")
    # a NaN is a value not given, that system's error in place
    r = client.batch("sb1", {"period": np.array([41.6, np.nan]), "k1": 23.4, "eccentricity": 0.31}, covariance=True)
    assert r.error_text() == ["", "period: is required"]


# --- 9. a date string that is no ISO 8601 date -------------------------------------------------------

@pytest.mark.parametrize("text", ["J2000", "J2000.5", "B1950.0", "2020:001", "2020:001:12:00:00",
                                  "\uff12\uff10\uff12\uff10-01-01"])
def test_a_date_string_astropy_guesses_but_iso_8601_has_not_is_refused(client, text):
    # astropy's format guess read a Julian epoch (in UTC: J2000.0 is 2000-01-01T12:00 TT, 64.184 s earlier in
    # UTC, IAU 1976 / IERS), a Besselian epoch, a day of year and full-width digits; the contract is ISO 8601
    p = problem(client.post("/v1/orbit/mid-eclipse", json={**ECLIPSES, "after": text}), 422)
    assert p["errors"] == {"after": [f"{text!r} is not an ISO 8601 time or a Julian Date"]}
    p = problem(client.post("/v1/orbit/ephemeris", json={
        "period": 2037.4, "eccentricity": 0.873, "omega": 243.6, "t_periastron": 2458712.3, "k1": 61.2,
        "times": ["2020-01-01", text]}), 422)
    assert p["errors"] == {"times": [f"entry 1: {text!r} is not an ISO 8601 time"]}


@pytest.mark.parametrize("text", ["2000-01-01T12:00:00Z", "2000-01-01 12:00", "2000-1-1T12:00:00", "2000-01-01T12:00:00.000",
                                  "2000-01-01t12:00:00z", "2000-01-01T13:00:00+01:00"])
def test_iso_8601_dates_are_still_read(client, text):
    # each is 2000-01-01T12:00 UTC, JD 2451545.0 in UTC (astropy.time); the mid-eclipse list begins there
    r = client.post("/v1/orbit/mid-eclipse", json={**ECLIPSES, "after": text})
    assert r.status_code == 200, r.get_data()[:300]
    jd = client.post("/v1/orbit/mid-eclipse", json={**ECLIPSES, "after": 2451545.0}).get_json()
    assert r.get_json()["results"]["events"] == jd["results"]["events"]


# --- 10. the engine as a library, and over dask arrays (calcservice.distributed) -----------------------

@pytest.mark.parametrize("options, says", [
    ({"method": "bogus", "sigmas": {"k1": 0.3}}, "uncertainty.method: must be"),         # drew Monte Carlo
    ({"method": "monte_carlo", "samples": 0, "sigmas": {"k1": 0.3}}, "uncertainty.samples: must be"),  # numpy's error
    ({"sigmas": {"k1": 0.3}, "correlations": {("k1", "nope"): 0.5}}, "correlations name nope"),   # no effect
    ({"statics": {"nope": 1}}, "has no input(s) nope"),                                   # left unread
])
def test_evaluate_dask_refuses_options_it_would_take_without_a_word(options, says):
    da = pytest.importorskip("dask.array")
    from calcservice.distributed import evaluate_dask
    with pytest.raises(ValueError, match=says.replace("(", r"\(").replace(")", r"\)")):
        evaluate_dask("sb1", {"period": da.from_array(np.array([41.6, 42.0]), chunks=1), "k1": 23.4,
                              "eccentricity": 0.31}, **options)


def test_evaluate_dask_fails_a_system_whose_sigma_is_negative_or_not_finite():
    # the engine took sigma -1 (or NaN) for an exact value: sigma 0 in the answer, no word of it
    da = pytest.importorskip("dask.array")
    from calcservice.distributed import evaluate_dask
    out = evaluate_dask("sb1", {"period": da.from_array(np.array([41.6, 41.6, 41.6]), chunks=2), "k1": 23.4,
                                "eccentricity": 0.31}, {"k1": np.array([0.3, -1.0, np.nan])})
    got, failed = out.compute(scheduler="synchronous")
    assert failed.tolist() == [False, True, True]
    assert np.isnan(got["mass_function"]["sigma"][1:]).all()
    # sigma(f) = 3 f sigma(K1) / K1 for f proportional to K1^3 (first-order propagation)
    f = mass_function(41.6, 23.4, 0.31)
    assert got["mass_function"]["value"][0] == pytest.approx(f, rel=1e-12)
    assert got["mass_function"]["sigma"][0] == pytest.approx(3 * f * 0.3 / 23.4, rel=1e-6)


def test_the_engine_fails_a_system_whose_sigma_is_negative_or_not_finite():
    # calcservice.engine.evaluate, the README's library entry: a sigma of -0.3 or NaN was taken for an exact value
    from calcservice.engine import Measured, Options, evaluate
    from calcservice.registry import get
    k1 = Measured(np.full(4, 23.4), np.array([0.3, -0.3, np.nan, 0.3]), np.array([0.3, -0.3, np.nan, np.inf]))
    for method in ("linear", "monte_carlo"):
        r = evaluate(get("sb1"), {"period": Measured.exact([41.6]), "eccentricity": Measured.exact([0.31]), "k1": k1},
                     {}, Options(method=method, samples=400, seed=1))
        assert r.failed == {k: {"k1": ["sigma must be >= 0 and finite"]} for k in (1, 2, 3)}
        # the good system: sigma(f) = 3 f sigma(K1) / K1, f proportional to K1^3 (first-order propagation)
        f = mass_function(41.6, 23.4, 0.31)
        assert r.outputs["mass_function"]["sigma"][0] == pytest.approx(3 * f * 0.3 / 23.4,
                                                                       rel=1e-6 if method == "linear" else 0.15)


# --- 11. fuzz: any table body is answered, or refused by a problem naming its field ----------------------

_CELLS = ["41.6", "23.4", "0.31", "", "nan", "inf", "-1", "1e400", "0x10", "isotropic", "J2000", '"1,2"', "\u0663", "True"]
_NAMES = ["period", "k1", "eccentricity", "period_sigma", "inclination", "period[yr]", "k1[km]", "x", "period", ""]


def _fuzz_bodies():
    from hypothesis import strategies as st
    stream = _arrow_stream()
    csv_text = st.builds(
        lambda names, rows, sep: (sep.join(names) + "\n" + "".join(sep.join(r) + "\n" for r in rows)).encode(),
        st.lists(st.sampled_from(_NAMES), min_size=1, max_size=4),
        st.lists(st.lists(st.sampled_from(_CELLS), max_size=5), max_size=3), st.sampled_from([",", ";", " "]))
    return st.one_of(
        st.tuples(st.binary(max_size=64), st.sampled_from([ARROW, "text/csv"])),
        st.tuples(st.integers(0, len(stream)).map(lambda k: stream[:k]), st.just(ARROW)),
        st.tuples(st.binary(max_size=16).map(lambda b: b"ARROW1\x00\x00" + stream + b), st.just(ARROW)),
        st.tuples(csv_text, st.just("text/csv")),
        st.tuples(csv_text.map(lambda t: _ecsv("period k1 eccentricity", "").encode()[:-2] + t), st.just("text/csv")))


def test_fuzzed_table_bodies_are_answered_or_refused_naming_a_field(client):
    # derandomized, 50 bodies: no 5xx, and every refusal an RFC 9457 problem whose errors name a field
    from hypothesis import HealthCheck, given, settings

    @settings(max_examples=50, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck))
    @given(_fuzz_bodies())
    def one(case):
        body, content_type = case
        r = client.post("/v1/batch/sb1", data=body, content_type=content_type, headers={"Accept": "application/json"})
        assert r.status_code < 500, r.get_data()[:300]
        if r.status_code >= 400:
            assert r.mimetype == "application/problem+json" and r.get_json().get("errors"), r.get_data()[:300]
    one()


# --- 12. a body over the size limit names the body -----------------------------------------------------

@pytest.mark.parametrize("gzipped", [False, True])
def test_a_body_over_the_limit_names_the_body_beside_the_limit(gzipped):
    # the 413 named its limit and no field, where every other problem of a body names "_body"
    import gzip
    small = create_app({"TESTING": True, "MAX_BODY_BYTES": 1000}).test_client()
    body = b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.31}' + b" " * 2000
    p = problem(small.post(SB1, data=gzip.compress(body) if gzipped else body, content_type="application/json",
                           headers={"Content-Encoding": "gzip"} if gzipped else {}), 413)
    assert p["limit"] == {"name": "max_body_bytes", "value": 1000}
    assert list(p["errors"]) == ["_body"] and "over 1000 bytes" in p["errors"]["_body"][0]
