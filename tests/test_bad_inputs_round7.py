"""Bad input, seventh round: a 404 or 405 without an errors member, a column of integers beyond a double
(a traceback of OverflowError from the client and the library), the client's column refusals that were
no InvalidInput, a (value, sigma) tuple with an astropy unit or of two Quantities (a TypeError and a
NotImplementedError), and the radial-velocity figure of a long orbit refused as though the caller's
times were out of range.  Each case gets a 4xx problem (or the client's InvalidInput) naming the field,
or the answer it should have had, never a traceback."""

from __future__ import annotations

import warnings
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest

from calcservice import create_app
from tests.test_bad_inputs_round2 import problem
from tests.test_bad_inputs_round4 import mass_function

SB1 = "/v1/spectroscopic/sb1"
EPHEMERIS = "/v1/orbit/ephemeris"
GOOD = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31}


@pytest.fixture(scope="module")
def client():
    return create_app().test_client()


# --- 1. every 4xx of the service names what is at fault, a wrong path or method too ---------------

@pytest.mark.parametrize("method, path, field", [
    ("POST", "/v1/spectroscopic/sb3", "_path"),          # no such route
    ("GET", "/v1/nothing-here", "_path"),
    ("GET", "/static/not-an-asset.js", "_path"),
    ("GET", "/v1/calculations/sb3", "calculation"),      # the route's <calculation> names none
    ("POST", "/v1/batch/sb3", "calculation"),
    ("GET", SB1, "_method"),                             # a calculation is POSTed
    ("PUT", "/v1/batch/sb1", "_method"),
    ("DELETE", "/v1/health", "_method"),
    ("PATCH", "/openapi.yaml", "_method"),
    ("POST", "/", "_method"),
])
def test_a_wrong_path_or_method_is_named_in_errors(client, method, path, field):
    r = client.open(path, method=method, json=GOOD if method in ("POST", "PUT") else None)
    doc = problem(r, 405 if field == "_method" else 404)
    assert list(doc["errors"]) == [field] and doc["errors"][field][0], doc
    if field == "_method":
        allowed = r.headers["Allow"]
        assert all(m in doc["errors"][field][0] for m in allowed.split(", ") if m != "OPTIONS"), (allowed, doc)


def test_the_library_names_an_unknown_calculation():
    from calcservice.core import Problem, compute
    with pytest.raises(Problem) as e:
        compute("sb3", GOOD)
    assert e.value.status == 404 and list(e.value.errors) == ["calculation"]


# --- 2. a column of integers beyond a double: that system's error, no OverflowError ------------------

def test_a_library_column_with_an_integer_beyond_a_double_is_that_systems_error():
    from calcservice.core import compute_batch
    period = np.array([10 ** 400, 41.6], dtype=object)        # what numpy makes of Python integers past 64 bits
    answer = compute_batch("sb1", {"columns": {"period": period, "k1": [23.4, 23.4], "eccentricity": [0.31, 0.31]}})
    assert [e["index"] for e in answer["errors"]] == [0]
    assert "not finite" in answer["errors"][0]["errors"]["period"][0]
    assert answer["columns"]["mass_function"]["value"][1] == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_the_clients_column_with_an_integer_beyond_a_double_is_refused_or_that_systems_error(transport):
    from calcservice.client import Client, InvalidInput
    c = Client("local", transport=transport)
    data = {"period": [10 ** 400, 41.6], "k1": [23.4, 23.4], "eccentricity": [0.31, 0.31]}
    if transport == "json":
        # JSON has no number beyond a double: refused before sending, naming the column and the system
        with pytest.raises(InvalidInput, match=r"^period: .*system 0"):
            c.batch("sb1", data)
        return
    out = c.batch("sb1", data)
    assert out.failed == [0] and "not finite" in out.error_text()[0]
    f = float(out.to_table()["mass_function"].unmasked[1].value)
    assert f == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)


# --- 3. the client's refusal of a column is its InvalidInput (a CalcServiceError), naming it ----------

@pytest.mark.parametrize("column, says", [
    ([True, False], "eccentricity: a column of true and false"),
    (["0.31", "0_1"], "eccentricity: row 2 (system 1): '0_1'"),
])
def test_the_clients_refusal_of_a_column_is_an_invalid_input(local, column, says):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as e:
        local.batch("sb1", {"period": [41.6, 12.5], "k1": [23.4, 38.2], "eccentricity": column})
    assert str(e.value).startswith(says) and list(e.value.errors) == ["eccentricity"]


# --- 4. a (value, sigma) tuple with an astropy unit, or of two Quantities ----------------------------

@pytest.mark.parametrize("k1", [
    (23.4, 0.1, u.km / u.s),
    (23400.0, 100.0, u.m / u.s),
    (23.4 * u.km / u.s, 0.1 * u.km / u.s),
    (23.4 * u.km / u.s, 100.0 * u.m / u.s),          # the sigma in its own unit, converted to the value's
    (23400.0 * u.m / u.s, 0.1 * u.km / u.s),
])
def test_a_tuple_with_an_astropy_unit_or_of_quantities_is_taken(local, k1):
    r = local.calculate("sb1", period=41.6, eccentricity=0.31, k1=k1)
    assert r["inputs"]["k1"]["value"] == pytest.approx(23.4, rel=1e-12)
    assert r["inputs"]["k1"]["sigma"] == pytest.approx(0.1, rel=1e-12)
    # f(M) goes as K1^3: its relative sigma is three times K1's (first order)
    f = r["results"]["mass_function"]
    assert f["value"] == pytest.approx(mass_function(41.6, 23.4, 0.31), rel=1e-12)
    assert f["sigma"] / f["value"] == pytest.approx(3 * 0.1 / 23.4, rel=1e-6)


@pytest.mark.parametrize("k1, says", [
    ((23.4 * u.km / u.s, 0.1 * u.s), "k1: "),                   # a sigma that is no speed
    ((23.4 * u.km / u.s, 0.1, "km/s"), "k1: "),                  # a Quantity and a unit besides
    ((23.4, 0.1 * u.km / u.s), "k1: "),                         # a bare value beside a sigma Quantity
])
def test_a_tuple_whose_parts_do_not_agree_is_refused_naming_the_input(local, k1, says):
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput, match="^" + says):
        local.calculate("sb1", period=41.6, eccentricity=0.31, k1=k1)


@pytest.mark.parametrize("k1", [
    ([23.4, 20.0], [0.1, 0.2], u.km / u.s),
    ([23400.0, 20000.0], [100.0, 200.0], u.m / u.s),
    ([23.4, 20.0] * u.km / u.s, [100.0, 200.0] * u.m / u.s),
])
def test_a_tuple_column_with_an_astropy_unit_is_taken(local, k1):
    out = local.batch("sb1", {"period": [41.6, 20.0], "eccentricity": [0.31, 0.1], "k1": k1})
    table = out.to_table()
    for k, (period, k1_kms, e, sigma) in enumerate([(41.6, 23.4, 0.31, 0.1), (20.0, 20.0, 0.1, 0.2)]):
        f = float(table["mass_function"].unmasked[k].value)
        assert f == pytest.approx(mass_function(period, k1_kms, e), rel=1e-12)
        # f(M) goes as K1^3: its relative sigma is three times K1's (first order)
        assert float(table["mass_function_sigma"].unmasked[k].value) / f == pytest.approx(3 * sigma / k1_kms, rel=1e-6)


# --- 5. the figure of a long orbit: the curve's own grid stays within the dates a request may give ----

@pytest.mark.parametrize("period, t_periastron, times", [
    (3.6525e8, 2460400.5, [2460400.5, 2460500.5]),     # a million-year orbit (a wide pair), observed twice
    (2037.4, 9.9999e7, [9.9999e7]),                    # a date near the end of the range, a period's curve around it
    (1e6, 9.99e7, [2.4e6, 9.9e7]),                     # many periods (drawn by phase) from a periastron near the end
])
def test_the_figure_of_an_orbit_whose_curve_would_leave_the_date_range_is_drawn(client, period, t_periastron, times):
    body = {"period": period, "eccentricity": 0.3, "omega": 243.6, "t_periastron": t_periastron, "k1": 61.2,
            "times": times}
    assert client.post(EPHEMERIS, json=body).status_code == 200
    r = client.post(EPHEMERIS + "?format=svg", json=body)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml", r.get_data()[:300]


# --- 6. the client's keep= and a DataFrame's attrs["units"] of the wrong type -------------------------

def test_keep_none_is_no_kept_column(local):
    out = local.batch("sb1", {"period": [41.6], "k1": [23.4], "eccentricity": [0.31]}, keep=None)
    assert float(out.to_table()["mass_function"].unmasked[0].value) == pytest.approx(mass_function(41.6, 23.4, 0.31),
                                                                                     rel=1e-12)


@pytest.mark.parametrize("keep", [5, [5], ["star", None], b"star"])
def test_keep_that_names_no_columns_is_refused_naming_keep(local, keep):
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput, match="^keep: ") as e:
        local.batch("sb1", {"period": [41.6], "k1": [23.4], "eccentricity": [0.31], "star": ["a"]}, keep=keep)
    assert list(e.value.errors) == ["keep"]


@pytest.mark.parametrize("attrs", ["d", ["d"], 5])
def test_a_dataframes_units_attribute_that_is_no_mapping_is_refused_naming_units(local, attrs):
    import pandas as pd
    from calcservice.client import InvalidInput
    frame = pd.DataFrame({"period": [41.6], "k1[km/s]": [23.4], "eccentricity": [0.31]})
    frame.attrs["units"] = attrs
    with pytest.raises(InvalidInput, match="^units: ") as e:
        local.batch("sb1", frame)
    assert list(e.value.errors) == ["units"]


# --- 7. a table's unit or options where the reader does not look: refused, not left unread -----------

ARROW = "application/vnd.apache.arrow.stream"


def _ecsv_with(period_entry: str, meta: str = "") -> bytes:
    return ("# %ECSV 1.0\n# ---\n# datatype:\n"
            f"# - {{name: period, datatype: float64{period_entry}}}\n"
            "# - {name: k1, unit: km / s, datatype: float64}\n# - {name: eccentricity, datatype: float64}\n"
            f"{meta}period k1 eccentricity\n0.1139 23.4 0.31\n").encode()


@pytest.mark.parametrize("entry", [", units: yr", ", Unit: yr", ", unit_: yr", ", meta: {unit: yr}",
                                   ", meta: {units: yr}"])
def test_an_ecsv_columns_unit_under_another_key_is_refused_naming_the_column(client, entry):
    # astropy's ECSV reader drops a column's keys it does not know: the period of 0.1139 yr was read as 0.1139 d
    r = client.post("/v1/batch/sb1", data=_ecsv_with(entry), content_type="text/csv")
    doc = problem(r, 422)
    assert list(doc["errors"]) == ["period"] and "'unit'" in doc["errors"]["period"][0], doc


def test_an_ecsv_columns_unit_is_read_and_other_keys_are_left_alone(client):
    r = client.post("/v1/batch/sb1", data=_ecsv_with(", unit: yr, description: orbital period, meta: {ref: fit 3}"),
                    content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 200, r.get_data()[:300]
    # 0.1139 Julian years of 365.25 d (IAU) = 41.600475 d
    assert r.get_json()["columns"]["mass_function"]["value"][0] == pytest.approx(
        mass_function(0.1139 * 365.25, 23.4, 0.31), rel=1e-12)


@pytest.mark.parametrize("key, value", [("seed", "7"), ("samples", "500"), ("method", "monte_carlo"), ("unit", "yr")])
def test_an_option_member_or_a_unit_in_a_tables_metadata_is_refused_naming_it(client, key, value):
    import io

    import pyarrow as pa
    # the uncertainty option's members and a table-wide unit were left unread: a linear answer, a period in days
    r = client.post("/v1/batch/sb1", data=_ecsv_with(", unit: d", f"# meta: {{{key}: {value}}}\n"),
                    content_type="text/csv")
    assert list(problem(r, 422)["errors"]) == [key]
    table = pa.table({"period": [41.6], "k1": [23.4], "eccentricity": [0.31]})
    table = table.replace_schema_metadata({key: value})
    sink = io.BytesIO()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    r = client.post("/v1/batch/sb1?options=" + '{"units":{}}', data=sink.getvalue(), content_type=ARROW)
    assert list(problem(r, 422)["errors"]) == [key]


@pytest.mark.parametrize("entry, meta, field", [
    (", units: yr", "", "period"),
    (", unit: d", "# meta: {seed: 7}\n", "seed"),
    (", unit: d", "# meta: {uncertainty: {method: monte_carlo}}\n", "uncertainty"),   # answered linearly before
])
def test_the_command_line_refuses_an_ecsv_unit_or_options_it_would_not_read(tmp_path, capsys, entry, meta, field):
    from calcservice.cli import main
    src = tmp_path / "cat.ecsv"
    src.write_bytes(_ecsv_with(entry, meta))
    assert main(["compute", "sb1", "--in", str(src), "--out", str(tmp_path / "out.csv")]) == 2
    err = capsys.readouterr().err
    assert err.startswith(f"calcservice compute: {field}: ") and str(src) in err and err.count("\n") == 1, err
    assert not (tmp_path / "out.csv").exists()


# --- 8. a query parameter a GET endpoint does not take -------------------------------------------------

@pytest.mark.parametrize("path, query", [
    ("/v1/calculations", "?name=sb1"),             # answered every calculation, as though no filter was asked for
    ("/v1/calculations/sb1", "?format=yaml"),
    ("/v1/constants", "?name=G"),
    ("/v1/limits", "?refresh=1"),
    ("/v1/health", "?verbose"),
    ("/openapi.yaml", "?format=json"),             # answered YAML
])
def test_a_query_parameter_a_get_endpoint_does_not_take_is_refused_naming_it(client, path, query):
    name = query[1:].split("=")[0]
    doc = problem(client.get(path + query), 400)
    assert list(doc["errors"]) == [name] and "takes no query parameter" in doc["detail"], doc
    assert client.get(path).status_code == 200


def test_the_pages_for_people_take_any_query(client):
    # a browser's link may carry a tracking or cache-busting parameter; the form reads its state from the hash
    for path in ("/", "/docs", "/static/form.js"):
        assert client.get(path + "?utm_source=mail").status_code == 200


# --- 9. a list of dates with the unit days, as a single date takes it ----------------------------------

def test_a_list_of_dates_in_days_is_taken_as_a_single_date_is(client, local):
    body = {"period": 2037.4, "eccentricity": 0.3, "omega": 243.6, "t_periastron": {"value": 2458712.3, "unit": "d"},
            "k1": 61.2, "times": {"value": [2460400.5, 2460500.5], "unit": "d"}}
    r = client.post(EPHEMERIS, json=body)
    assert r.status_code == 200, r.get_data()[:300]
    assert r.get_json()["results"]["series"]["time"]["value"] == [2460400.5, 2460500.5]
    # a Quantity of dates in days from the client, as its single date in days is taken
    q = local.calculate("ephemeris", period=2037.4, eccentricity=0.3, omega=243.6, t_periastron=2458712.3 * u.d,
                        k1=61.2, times=[2460400.5, 2460500.5] * u.d)
    assert q["results"]["series"]["rv1"]["value"] == r.get_json()["results"]["series"]["rv1"]["value"]
    # another unit is refused, as for a single date: a day count cannot be converted
    r = client.post(EPHEMERIS, json={**body, "times": {"value": [6736.4], "unit": "yr"}})
    assert "Julian Date in days" in problem(r, 422)["errors"]["times"][0]


# --- 10. a catalogue file's unit astropy cannot parse: one line naming the column ---------------------

@pytest.mark.parametrize("unit", ["blah", "yrs", "dex(d)"])
def test_a_fits_catalogues_unit_astropy_cannot_read_is_one_line_naming_the_column(tmp_path, capsys, unit):
    from astropy.io import fits

    from calcservice.cli import main
    src = tmp_path / "cat.fits"
    fits.BinTableHDU.from_columns([
        fits.Column(name="period", format="D", unit=unit, array=np.array([41.6])),
        fits.Column(name="k1", format="D", unit="km/s", array=np.array([23.4])),
        fits.Column(name="eccentricity", format="D", array=np.array([0.31]))]).writeto(src)
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        assert main(["compute", "sb1", "--in", str(src), "--out", str(tmp_path / "out.csv")]) == 1
    err = capsys.readouterr().err
    assert err.startswith("calcservice compute: columns.period.unit: ") and err.count("\n") == 1, err
    # astropy's UnitsWarning was printed before that line (a terminal shows it): a second line naming no field of ours
    assert not [w for w in caught if "did not parse" in str(w.message)], [str(w.message) for w in caught]


@pytest.mark.parametrize("sigma_unit, value_unit", [("blah", "km/s"), ("m/s", "blah")])
def test_a_sigma_columns_unit_astropy_cannot_read_is_refused_naming_the_column(local, tmp_path, capsys, sigma_unit,
                                                                                value_unit):
    from astropy.io import fits
    from astropy.table import Table

    from calcservice.cli import main
    from calcservice.client import InvalidInput
    src = tmp_path / "cat.fits"
    fits.BinTableHDU.from_columns([
        fits.Column(name="period", format="D", unit="d", array=np.array([41.6])),
        fits.Column(name="k1", format="D", unit=value_unit, array=np.array([23.4])),
        fits.Column(name="eccentricity", format="D", array=np.array([0.31])),
        fits.Column(name="k1_sigma", format="D", unit=sigma_unit, array=np.array([0.1]))]).writeto(src)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        table = Table.read(src)
    # a ValueError of astropy's that named no column
    with pytest.raises(InvalidInput, match="^k1_sigma: .*'blah'"):
        local.batch("sb1", table)
    assert main(["compute", "sb1", "--in", str(src), "--out", str(tmp_path / "out.csv")]) == 2
    err = capsys.readouterr().err
    assert err.startswith("calcservice compute: k1_sigma: ") and "'blah'" in err and err.count("\n") == 1, err


# --- 11. fuzzed bodies: every calculation, single and batch, JSON and table bodies ---------------------

def _fuzz_strategies():
    from hypothesis import strategies as st
    units = ["d", "yr", "km/s", "m/s", "deg", "rad", "mas", "solMass", "kg", "au", "pc", "%", "dex", "mag", "AU2/AU",
             "", " ", "km s-1", "1e300 d", "solRad", "K", "GHz", "mJy", "cycle", "µas", "-1 d"]
    numbers = st.one_of(st.floats(allow_nan=False, allow_infinity=False),
                        st.sampled_from([0.0, -0.0, 1e308, -1e308, 1e-320, 5e-324, 1.0, 0.5, 90.0, 2460400.5, 1e8]),
                        st.integers(-10 ** 30, 10 ** 30))
    scalars = st.one_of(numbers, st.booleans(), st.none(), st.text(max_size=6),
                        st.sampled_from(["isotropic", "2024-05-01", "vink-2001", "jeans", "wr"]))
    measured = st.one_of(
        scalars, st.lists(scalars, max_size=4),
        st.fixed_dictionaries({"value": numbers}, optional={"sigma": numbers, "unit": st.sampled_from(units)}),
        st.fixed_dictionaries({"value": numbers, "sigma_minus": numbers, "sigma_plus": numbers}),
        st.fixed_dictionaries({"samples": st.lists(numbers, max_size=5)}, optional={"unit": st.sampled_from(units)}),
        st.dictionaries(st.sampled_from(["value", "sigma", "samples", "unit", "x"]), scalars, max_size=3))
    options = st.fixed_dictionaries({}, optional={
        "uncertainty": st.one_of(st.fixed_dictionaries({}, optional={
            "method": st.sampled_from(["linear", "monte_carlo", "x"]), "samples": st.integers(-5, 300),
            "seed": st.integers(-2, 2 ** 64)}), scalars),
        "correlations": st.lists(st.fixed_dictionaries({
            "between": st.lists(st.sampled_from(["period", "k1", "k2", "eccentricity", "x"]), max_size=3),
            "rho": st.one_of(numbers, scalars)}), max_size=2),
        "units": st.dictionaries(st.sampled_from(["m1", "mass_function", "distance", "x", "rv1"]),
                                 st.one_of(st.sampled_from(units), scalars), max_size=2),
        "covariance": st.one_of(st.booleans(), scalars), "budget": st.one_of(st.booleans(), scalars),
        "time_format": st.sampled_from(["jd", "mjd", "iso"])})
    return st, measured, options


def _answered_or_named(r) -> None:
    assert r.status_code < 500, r.get_data()[:500]
    if r.status_code >= 400:
        assert r.mimetype == "application/problem+json", r.get_data()[:300]
        doc = r.get_json()
        assert doc["errors"] and all(isinstance(v, list) and v for v in doc["errors"].values()), doc


def test_fuzzed_json_bodies_are_answered_or_refused_naming_a_field(client):
    import json

    from hypothesis import HealthCheck, given, settings

    from calcservice.registry import calculations
    st, measured, options = _fuzz_strategies()
    calcs = list(calculations().values())

    @st.composite
    def bodies(draw):
        calc = draw(st.sampled_from(calcs))
        body = json.loads(json.dumps(calc.example))
        for _ in range(draw(st.integers(1, 3))):
            name = draw(st.sampled_from([spec.name for spec in calc.inputs] + ["extra"]))
            if name in body and draw(st.booleans()):
                del body[name]
            else:
                body[name] = draw(measured)
        return calc, {**body, **draw(options)}, draw(st.sampled_from(["single", "rows", "columns"]))

    @settings(max_examples=50, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck))
    @given(bodies())
    def check(case):
        calc, body, mode = case
        if mode == "single":
            r = client.post(calc.path, data=json.dumps(body), content_type="application/json")
        elif mode == "rows":
            r = client.post(f"/v1/batch/{calc.name}", data=json.dumps({"systems": [body, calc.example]}),
                            content_type="application/json")
        else:
            columns = {k: ({m: ([x, x] if m != "unit" else x) for m, x in v.items()} if isinstance(v, dict) else [v, v])
                       for k, v in body.items() if k not in ("uncertainty", "correlations", "units", "covariance",
                                                             "budget", "time_format")}
            r = client.post(f"/v1/batch/{calc.name}", content_type="application/json",
                            data=json.dumps({"columns": columns,
                                             **{k: v for k, v in body.items() if k not in columns}}))
        _answered_or_named(r)

    check()


def test_fuzzed_catalogue_tables_are_answered_or_refused_naming_a_field(client):
    import io
    import json

    import pyarrow as pa
    from hypothesis import HealthCheck, given, settings

    from calcservice.registry import calculations
    st, _, _ = _fuzz_strategies()
    calcs = list(calculations().values())
    cells = st.one_of(st.floats(0.01, 100), st.floats(width=64), st.integers(-2 ** 63, 2 ** 63 - 1), st.none(),
                      st.sampled_from(["isotropic", "nan", "inf", "1e999", "1e-320", "4_1", "٤", " 1.5 ", "x"]))

    @st.composite
    def tables(draw):
        calc = draw(st.sampled_from(calcs))
        names = [spec.name for spec in calc.inputs]
        pool = names + [n + "_sigma" for n in names] + ["star", "period[yr]", "error"]
        columns = draw(st.lists(st.sampled_from(pool), min_size=1, max_size=len(names) + 1, unique=True))
        rows = draw(st.integers(1, 3))
        data = {name: draw(st.lists(cells, min_size=rows, max_size=rows)) for name in columns}
        units = {name: draw(st.sampled_from(["d", "yr", "km/s", "%", "dex", "blah", ""])) for name in columns
                 if draw(st.booleans())}
        return calc, data, units, draw(st.sampled_from(["arrow", "csv", "ecsv"])), \
            draw(st.sampled_from([None, "application/json", "text/csv", "application/vnd.apache.arrow.stream"]))

    def text(data, units, ecsv):
        def cell(v):
            s = "" if v is None else str(v)
            return '"' + s.replace('"', '""') + '"' if any(ch in s for ch in ', "') else s
        n = len(next(iter(data.values())))
        if ecsv:
            head = "# %ECSV 1.0\n# ---\n# datatype:\n" + "".join(
                f"# - {{name: {json.dumps(k)}, " + (f"unit: {json.dumps(units[k])}, " if k in units else "")
                + "datatype: string}\n" for k in data)
            return head + " ".join(data) + "\n" + "".join(
                " ".join(cell(data[k][i]) or '""' for k in data) + "\n" for i in range(n))
        return ",".join(f"{k}[{units[k]}]" if k in units else k for k in data) + "\n" + "".join(
            ",".join(cell(data[k][i]) for k in data) + "\n" for i in range(n))

    @settings(max_examples=50, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck))
    @given(tables())
    def check(case):
        calc, data, units, kind, accept = case
        if kind == "arrow":
            arrays = [pa.array([None if v is None else str(v) for v in vals]) if any(isinstance(v, str) for v in vals)
                      else pa.array([None if v is None else float(v) for v in vals], pa.float64())
                      for vals in data.values()]
            schema = pa.schema([pa.field(k, a.type, metadata={"unit": units[k]} if k in units else None)
                                for k, a in zip(data, arrays)])
            sink = io.BytesIO()
            with pa.ipc.new_stream(sink, schema) as writer:
                writer.write_table(pa.Table.from_arrays(arrays, schema=schema))
            body, media = sink.getvalue(), ARROW
        else:
            body, media = text(data, units, kind == "ecsv").encode(), "text/csv"
        r = client.post(f"/v1/batch/{calc.name}", data=body,
                        headers={"Content-Type": media, **({"Accept": accept} if accept else {})})
        _answered_or_named(r)

    check()


# --- 12. the client's options that are NaN or infinite -------------------------------------------------

@pytest.mark.parametrize("options, field", [
    ({"samples": float("nan")}, "uncertainty.samples"),
    ({"seed": float("inf")}, "uncertainty.seed"),
    ({"uncertainty": {"samples": float("nan")}}, "uncertainty.samples"),
    ({"correlations": {("k1", "period"): float("nan")}}, "correlations.0.rho"),
    ({"correlations": [{"between": ["k1", "period"], "rho": np.float64("-inf")}]}, "correlations.0.rho"),
])
@pytest.mark.parametrize("call", ["calculate", "batch"])
def test_the_clients_nan_or_infinite_option_is_refused_naming_it(local, options, field, call):
    from calcservice.client import InvalidInput
    # JSON has no NaN: sent as null, the service said the option "may not be null"; a batch failed on int(nan)
    with pytest.raises(InvalidInput, match=f"^{field}: ") as e:
        if call == "calculate":
            local.calculate("sb1", period=(41.6, 0.1), k1=(23.4, 0.1), eccentricity=0.31, **options)
        else:
            local.batch("sb1", {"period": ([41.6], [0.1]), "k1": ([23.4], [0.1]), "eccentricity": [0.31]}, **options)
    assert list(e.value.errors) == [field]


# --- 13. the client's tuple or contract object holding what JSON cannot carry --------------------------

@pytest.mark.parametrize("k1", [
    lambda pd, Decimal: (23.4, pd.NA),
    lambda pd, Decimal: (pd.NA, 0.1),
    lambda pd, Decimal: (Decimal("23.4"), 0.1),
    lambda pd, Decimal: {"value": pd.NA},
    lambda pd, Decimal: {"value": 23.4, "sigma": Decimal("0.1")},
    lambda pd, Decimal: {"value": 23.4 * u.km / u.s},                # a NotImplementedError of Quantity.tolist
    lambda pd, Decimal: {"value": 23.4, "sigma": 0.1 * u.km / u.s},
    lambda pd, Decimal: {"samples": [23.3, 23.5] * u.km / u.s},      # a TypeError of the encoder
])
def test_a_tuple_or_object_holding_no_json_value_is_refused_naming_the_input(local, k1):
    from decimal import Decimal

    import pandas as pd

    from calcservice.client import InvalidInput
    # a TypeError of the JSON encoder ("Type is not JSON serializable: NAType") named no input; alone, each is refused
    with pytest.raises(InvalidInput, match="^k1: ") as e:
        local.calculate("sb1", period=41.6, eccentricity=0.31, k1=k1(pd, Decimal))
    assert list(e.value.errors) == ["k1"]


# --- 14. the client's contract column object holding Quantities: their units, not the default ----------

@pytest.mark.parametrize("k1", [
    {"value": [23400.0, 20000.0] * u.m / u.s},                                   # was read as 23400 km/s
    {"value": [23400.0, 20000.0] * u.m / u.s, "sigma": [100.0, 200.0] * u.m / u.s},
    {"value": [23.4, 20.0], "sigma": [100.0, 200.0] * u.m / u.s},                 # sigma was read as 100 km/s
    {"value": [23.4, 20.0], "sigma": [0.1, 0.2] * u.km / u.s, "unit": "km/s"},
    {"value": [23400.0, 20000.0] * u.m / u.s, "sigma": [0.1, 0.2], "unit": "km/s"},   # the object's unit: sigma's
])
@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_a_column_object_of_quantities_is_read_in_their_units(k1, transport):
    from calcservice.client import Client
    out = Client("local", transport=transport).batch("sb1", {"period": [41.6, 20.0], "eccentricity": [0.31, 0.1],
                                                             "k1": k1})
    table = out.to_table()
    sigmas = [0.1, 0.2] if "sigma" in k1 else [0.0, 0.0]
    for k, (period, k1_kms, e) in enumerate([(41.6, 23.4, 0.31), (20.0, 20.0, 0.1)]):
        f = float(table["mass_function"].unmasked[k].value)
        assert f == pytest.approx(mass_function(period, k1_kms, e), rel=1e-12)
        # f(M) goes as K1^3: its relative sigma is three times K1's (first order)
        assert float(table["mass_function_sigma"].unmasked[k].value) / f == pytest.approx(3 * sigmas[k] / k1_kms,
                                                                                          rel=1e-6, abs=1e-15)


def test_a_column_objects_quantity_of_the_wrong_kind_is_refused_naming_it(local):
    from calcservice.client import InvalidInput
    with pytest.raises(InvalidInput, match="^k1"):
        local.batch("sb1", {"period": [41.6], "eccentricity": [0.31],
                            "k1": {"value": [23.4] * u.km / u.s, "sigma": [0.1] * u.s}})


# --- 15. the server: a transfer coding it does not take ------------------------------------------------

@pytest.mark.server
def test_a_transfer_coding_the_server_does_not_take_is_a_4xx_naming_the_header():
    import tempfile

    from tests.test_public import Served, assert_problem, exchange
    served = Served(Path(tempfile.mkdtemp()), {})
    try:
        body = b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.31}'
        # foo: gunicorn's 501, answered "the server failed on this request; it has been logged", naming nothing;
        # compress before chunked: passed on de-chunked, not decoded, and answered as if it were not compressed
        for coding in (b"foo", b"compress, chunked"):
            status, headers, reply, _ = exchange(served.port, b"POST /v1/spectroscopic/sb1 HTTP/1.1\r\n"
                                                 b"Host: localhost\r\nContent-Type: application/json\r\n"
                                                 b"Transfer-Encoding: " + coding + b"\r\nConnection: close\r\n\r\n"
                                                 + b"%x\r\n" % len(body) + body + b"\r\n0\r\n\r\n")
            doc = assert_problem(status, headers, reply, 400)
            assert list(doc["errors"]) == ["Transfer-Encoding"] and "chunked" in doc["detail"], doc
    finally:
        served.stop()


@pytest.mark.parametrize("coding", ["gzip, chunked", "compress, chunked", "deflate"])
def test_a_transfer_coding_other_than_chunked_is_refused_naming_it(client, coding):
    # gunicorn passes a body "gzip, chunked" de-chunked but not inflated: its bytes were read as they came
    r = client.post(SB1, data=b'{"period": 41.6, "k1": 23.4, "eccentricity": 0.31}',
                    headers={"Content-Type": "application/json", "Transfer-Encoding": coding})
    assert list(problem(r, 400)["errors"]) == ["Transfer-Encoding"]


# --- 16. the client's catalogue of no systems ------------------------------------------------------------

@pytest.mark.parametrize("data, field", [
    ([], "systems"),
    ({"period": [], "k1": [], "eccentricity": []}, "columns"),
    ("empty frame", "columns"),
])
def test_a_catalogue_of_no_systems_is_refused_as_the_service_refuses_it(local, data, field):
    import pandas as pd

    from calcservice.client import InvalidInput
    if data == "empty frame":
        data = pd.DataFrame({"period[d]": [], "k1[km/s]": [], "eccentricity": []})
    # nothing was sent: an empty answer came back without its outputs' columns, and bad options were never checked
    with pytest.raises(InvalidInput, match=f"^{field}: ") as e:
        local.batch("sb1", data, method="bootstrap")
    assert list(e.value.errors) == [field]
    # the service says the same of the same batch
    r = create_app().test_client().post("/v1/batch/sb1", json={"systems": []} if field == "systems" else
                                        {"columns": {"period": [], "k1": [], "eccentricity": []}})
    assert list(problem(r, 422)["errors"]) == [field]


# --- 17. the client's dates from numpy and pandas -------------------------------------------------------

@pytest.mark.parametrize("t_periastron", [
    lambda np, pd: pd.Timestamp("2019-08-20T12:00"),                   # an AttributeError: taken for a Quantity
    lambda np, pd: pd.Timestamp("2019-08-20T14:00", tz="Europe/Paris"),  # the same instant, two hours east
    lambda np, pd: np.datetime64("2019-08-20T12:00"),                  # refused: "a datetime is no value"
    lambda np, pd: np.datetime64("2019-08-20T12:00:00.000000000"),     # sent as an integer of nanoseconds
])
def test_a_date_from_numpy_or_pandas_is_taken_as_the_datetime_it_holds(local, t_periastron):
    import datetime as dt
    G = dict(period=2037.4, eccentricity=0.3, omega=243.6, k1=61.2, times=[2460400.5])
    expected = local.calculate("ephemeris", **G, t_periastron=dt.datetime(2019, 8, 20, 12))
    r = local.calculate("ephemeris", **G, t_periastron=t_periastron(np, __import__("pandas")))
    assert r["results"]["series"]["rv1"]["value"] == pytest.approx(expected["results"]["series"]["rv1"]["value"],
                                                                   rel=1e-12)


def test_a_missing_numpy_date_is_said_to_be_missing(local):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as e:
        local.calculate("ephemeris", period=2037.4, eccentricity=0.3, omega=243.6, k1=61.2, times=[2460400.5],
                        t_periastron=np.datetime64("NaT"))
    assert list(e.value.errors) == ["t_periastron"]


# --- 18. the client's one-number conversions of what is no one number -----------------------------------

@pytest.mark.parametrize("name", ["series", "events"])
@pytest.mark.parametrize("convert", ["quantity", "ufloat"])
def test_a_series_or_events_asked_for_as_one_number_is_refused_naming_it(local, name, convert):
    r = local.calculate("ephemeris", period=2037.4, eccentricity=0.3, omega=243.6, t_periastron=2458712.3,
                        k1=(61.2, 1.0), times=[2460400.5, 2460401.5])
    # a NaN (nan+/-0 for ufloat) came back, as though the service had answered one
    with pytest.raises(KeyError, match=name):
        getattr(r, convert)(name)


# --- 19. the client's lists of Quantities and options JSON cannot carry ---------------------------------

def test_a_list_of_quantities_is_read_in_their_units(local):
    # a TypeError of numpy ("only dimensionless scalar quantities can be converted") and of the JSON encoder
    out = local.batch("sb1", {"period": [0.1139 * u.yr, 20.0 * u.d], "k1": [23.4, 20.0], "eccentricity": [0.31, 0.1]})
    # 0.1139 Julian years of 365.25 d (IAU)
    assert list(out["mass_function"]) == pytest.approx([mass_function(0.1139 * 365.25, 23.4, 0.31),
                                                        mass_function(20.0, 20.0, 0.1)], rel=1e-12)
    r = local.calculate("sb1", period=41.6, eccentricity=0.31, k1=[23.4 * u.km / u.s, 23500.0 * u.m / u.s])
    assert r["inputs"]["k1"]["samples"] == 2 and r["inputs"]["k1"]["value"] == pytest.approx(23.45, rel=1e-12)


@pytest.mark.parametrize("call, kwargs, field", [
    ("batch", {"period": [41.6 * u.d, 20.0]}, "period"),                   # a Quantity beside a plain number
    ("batch", {"period": [41.6 * u.d, 20.0 * u.km]}, "period"),
    ("calculate", {"seed": 3 * u.s}, "uncertainty.seed"),                  # a TypeError of the encoder
    ("calculate", {"correlations": {("k1", "period"): 0.5 * u.km}}, "correlations.0.rho"),  # a NotImplementedError
    ("batch", {"samples": 200 * u.d}, "uncertainty.samples"),              # a TypeError of int() on the Quantity
    ("batch", {"method": 5}, "uncertainty.method"),                       # an AttributeError ('int' has no replace)
    ("calculate", {"k1": [23.4, 1 + 2j]}, "k1"),                           # samples: a TypeError of the encoder
])
def test_the_clients_quantity_or_value_of_the_wrong_kind_is_refused_naming_it(local, call, kwargs, field):
    from calcservice.client import CalcServiceError
    inputs = {"period": [41.6, 20.0], "k1": ([23.4, 20.0], [0.1, 0.1]), "eccentricity": [0.31, 0.1]}
    options = {k: v for k, v in kwargs.items() if k not in inputs}
    with pytest.raises(CalcServiceError) as e:
        if call == "batch":
            local.batch("sb1", {**inputs, **{k: v for k, v in kwargs.items() if k in inputs}}, **options)
        else:
            local.calculate("sb1", **{"period": (41.6, 0.1), "k1": (23.4, 0.1), "eccentricity": 0.31, **kwargs})
    assert list(e.value.errors) == [field], e.value.errors


@pytest.mark.parametrize("transport", ["json", "arrow"])
def test_a_column_of_decimals_or_fractions_is_read_as_the_numbers_they_are(transport):
    from decimal import Decimal
    from fractions import Fraction

    from calcservice.client import Client
    # the JSON transport failed with the encoder's TypeError (Arrow read them)
    out = Client("local", transport=transport).batch(
        "sb1", {"period": [Decimal("41.6"), Fraction(20)], "k1": [23.4, 20.0], "eccentricity": [0.31, 0.1]})
    assert list(out["mass_function"]) == pytest.approx([mass_function(41.6, 23.4, 0.31), mass_function(20.0, 20.0, 0.1)],
                                                       rel=1e-12)


def test_fuzzed_client_inputs_are_answered_or_refused_as_its_errors(local):
    import datetime as dt
    import decimal

    import pandas as pd
    from hypothesis import HealthCheck, given, settings
    from hypothesis import strategies as st
    from uncertainties import ufloat

    from calcservice.client import CalcServiceError
    from calcservice.registry import calculations
    calcs = list(calculations().values())
    units = [u.d, u.km / u.s, u.m / u.s, u.deg, u.kg, u.percent, u.mas, u.yr]
    atoms = st.one_of(
        st.floats(), st.integers(-10 ** 30, 10 ** 30), st.booleans(), st.none(), st.text(max_size=4),
        st.sampled_from([np.nan, np.float32(1.5), np.int64(3), decimal.Decimal("1.5"), pd.NA, pd.NaT, 1 + 2j,
                         np.datetime64("2020-01-01"), pd.Timestamp("2020-01-01"), dt.date(2020, 1, 1), b"x",
                         np.array(1.5), np.array([1.5, 2.5]), "isotropic", ufloat(1.5, 0.1)]),
        st.builds(lambda v, unit: v * unit, st.floats(-1e3, 1e3), st.sampled_from(units)))
    values = st.one_of(atoms, st.tuples(atoms, atoms), st.tuples(atoms, atoms, st.sampled_from(["km/s", u.d])),
                       st.lists(atoms, max_size=3),
                       st.dictionaries(st.sampled_from(["value", "sigma", "unit", "samples", "x"]), atoms, max_size=3))
    options = st.fixed_dictionaries({}, optional={"samples": atoms, "seed": atoms, "method": atoms, "covariance": atoms,
                                                  "time_format": atoms, "correlations": atoms})

    @settings(max_examples=50, derandomize=True, deadline=None, suppress_health_check=list(HealthCheck))
    @given(st.sampled_from(calcs), st.data())
    def check(calc, data):
        body = {k: v for k, v in calc.example.items() if k != "correlations"}
        name = data.draw(st.sampled_from([spec.name for spec in calc.inputs]))
        body[name] = data.draw(values)
        opts = data.draw(options)
        try:
            if data.draw(st.booleans()):
                local.calculate(calc.name, **opts, **body)
            else:
                local.batch(calc.name, [body, dict(body)], **opts)
        except CalcServiceError as e:       # the service's problem, or the client's InvalidInput: named
            assert e.errors, e
    check()
