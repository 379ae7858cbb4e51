"""The batch wire end to end: answers whose shape does not depend on which systems fail, CSV cells
that astropy's readers would take for numbers a lab never meant, the library's numpy columns.

The reference numbers are the service's own single requests and JSON columns answers (held against
outside sources by tests/test_batch.py and the physics tests); the readers are astropy's and
pyarrow's, outside the project."""

from __future__ import annotations

import json

import numpy as np
import pyarrow as pa
import pytest

from calcservice import create_app, tables
from calcservice.core import Problem, compute, compute_batch
from calcservice.registry import calculations
from tests.test_tables import example_batch, json_answer, post_table


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _first_required(name: str) -> str:
    calc = calculations()[name]
    return next(s.name for s in calc.inputs if s.kind == "quantity" and s.required and s.default is None)


def _shape(answer: dict) -> dict:
    """An answer's output columns, each with its members and unit."""
    return {name: (sorted(k for k in entry if k != "unit"), entry.get("unit"))
            for name, entry in answer["columns"].items() if isinstance(entry, dict)}


@pytest.mark.parametrize("method", ["linear", "monte_carlo"])
@pytest.mark.parametrize("name", [c.name for c in calculations().values() if c.example])
def test_a_batch_whose_every_system_fails_has_the_columns_of_one_that_succeeds(client, name, method):
    columns, options = example_batch(client, name, n=2)
    if method == "monte_carlo":
        options = {**options, "uncertainty": {"method": "monte_carlo", "samples": 200, "seed": 3}}
    good = json_answer(client, name, columns, options)
    assert not good["errors"], good["errors"]
    missing = _first_required(name)
    bad = json_answer(client, name, {**columns, missing: [None, None]}, options)
    assert [e["index"] for e in bad["errors"]] == [0, 1]
    assert _shape(bad) == _shape(good)
    for entry in bad["columns"].values():
        if isinstance(entry, dict):
            assert all(v is None for key, vs in entry.items() if key != "unit" for v in vs)
    assert bad["uncertainty"]["method"] == good["uncertainty"]["method"] == method
    # and as tables, the same header (the names, units and types of the columns)
    for fmt in (tables.ARROW, tables.ECSV):
        bodies = [tables.encode_request({"columns": c}, fmt) for c in (columns, {**columns, missing: [None, None]})]
        table_options = {k: v for k, v in options.items()}
        answers = [post_table(client, name, data, fmt, table_options, accept=tables.ARROW) for data in bodies]
        assert [r.status_code for r in answers] == [200, 200], [r.get_data()[:300] for r in answers]
        schemas = [pa.ipc.open_stream(r.data).read_all().schema for r in answers]
        assert schemas[0].names == schemas[1].names
        assert [f.metadata for f in schemas[0]] == [f.metadata for f in schemas[1]]
        assert schemas[0].types == schemas[1].types             # a series stays a list of its points


def test_an_arrow_series_column_has_one_type_whichever_systems_fail(client):
    body = {"columns": {"period": [10.0, 12.0], "omega": [30.0, 40.0], "t_periastron": [2460000.5, 2460001.5],
                        "k1": [30.0, 40.0], "times": [2460400.5, 2460500.5, 2460600.5]}}
    types = []
    for eccentricity in ([0.1, 0.2], [0.1, 1.2], [1.1, 1.2]):
        body["columns"]["eccentricity"] = eccentricity
        r = client.post("/v1/batch/ephemeris", json=body, headers={"Accept": tables.ARROW})
        table = pa.ipc.open_stream(r.data).read_all()
        types.append(table.schema.field("rv1").type)
        failed = [e >= 1 for e in eccentricity]
        assert [x is None for x in table.column("rv1").to_pylist()] == failed
    assert types == [pa.list_(pa.float64(), 3)] * 3


def test_a_failed_system_keeps_the_outputs_of_the_optional_inputs_it_gave(client):
    # the only system giving primary_mass fails: m2_min is still a column, null there
    body = {"columns": {"period": [3.0, 4.0], "k1": [40.0, 50.0], "eccentricity": [0.1, 2.0],
                        "primary_mass": [None, 1.0]}}
    answer = client.post("/v1/batch/sb1", json=body).get_json()
    assert [e["index"] for e in answer["errors"]] == [1]
    assert answer["columns"]["m2_min"] == {"value": [None, None], "sigma": [None, None], "unit": "solMass"}
    # an optional input given unreadably (a word, a sigma without its value) is given all the same
    for primary_mass in (["heavy", "heavy"], {"value": [None, None], "sigma": [0.1, 0.1]}):
        body = {"columns": {"period": [3.0, 4.0], "k1": [40.0, 50.0], "eccentricity": [0.1, 0.2],
                            "primary_mass": primary_mass}}
        answer = client.post("/v1/batch/sb1", json=body).get_json()
        assert [e["index"] for e in answer["errors"]] == [0, 1]
        assert sorted(answer["columns"]) == ["a1_sin_i", "m2_min", "mass_function"]
    text = "period,k1,eccentricity\n3,40,1.5\n4,50,2\n"
    r = post_table(client, "sb1", text.encode(), tables.CSV, {"units": {"a1_sin_i": "solRad"}})
    assert r.status_code == 200
    assert r.get_data(as_text=True).splitlines()[0] == (
        "mass_function[solMass],mass_function_sigma[solMass],a1_sin_i[solRad],a1_sin_i_sigma[solRad],"
        "error_status,error,warnings")


# ----------------------------------------------------------------------------- cells that are not numbers as written

def _sb1_csv(k1: str, k1_sigma: str = "0.5") -> bytes:
    # fictional single-lined systems; the first row's cells are the ones under test
    return (f"period,k1,k1_sigma,eccentricity\n41.6,{k1},{k1_sigma},0.1\n12.5,38.2,0.4,0.31\n").encode()


def _sb1_ecsv(k1: str) -> bytes:
    header = ["# %ECSV 1.0", "# ---", "# datatype:", "# - {name: period, datatype: float64}",
              "# - {name: k1, unit: km / s, datatype: float64}", "# - {name: eccentricity, datatype: float64}",
              "# schema: astropy-2.0", "period k1 eccentricity"]
    return "\n".join(header + [f'41.6 "{k1}" 0.1', "12.5 38.2 0.31"]).encode() + b"\n"


def _arrow_strings(k1: str) -> bytes:
    table = pa.table({"period": [41.6, 12.5], "k1": pa.array([k1, "38.2"], type=pa.string()),
                      "eccentricity": [0.1, 0.31]})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as w:
        w.write_table(table)
    return sink.getvalue().to_pybytes()


@pytest.mark.parametrize("cell", ["0x10", "4_1.6", "1_000", "\uff11\uff12", "\u0661\u0662", "\u00a012"])
def test_a_cell_python_reads_as_a_number_but_no_table_writes_so_is_refused_naming_column_and_row(client, cell):
    # Python's float() reads 4_1.6 as 41.6 and C's strtod 0x10 as 16 (PEP 515; C99 7.20.1.3): a lab's
    # table never means them so
    bodies = [(tables.CSV, _sb1_csv(cell)), (tables.CSV, _sb1_csv("30", cell)), (tables.CSV, _sb1_ecsv(cell)),
              (tables.ARROW, _arrow_strings(cell))]
    for k, (fmt, data) in enumerate(bodies):
        r = post_table(client, "sb1", data, fmt, accept="application/json")
        if fmt == tables.ARROW and r.status_code == 200:
            # a string Python's float() does not take either: that system's error, in place
            assert [(e["index"], list(e["errors"])) for e in r.get_json()["errors"]] == [(0, ["k1"])]
            continue
        assert r.status_code == 422, (k, cell, r.get_json())
        problem = r.get_json()
        column = "k1_sigma" if k == 1 else "k1"
        assert list(problem["errors"]) == [column], problem
        assert "row 1 (system 0)" in problem["errors"][column][0] and repr(cell) in problem["errors"][column][0]


def test_numbers_as_tables_write_them_are_the_numbers_of_a_single_request(client):
    single = compute("sb1", {"period": 41.6, "k1": {"value": 12.0, "sigma": 0.5}, "eccentricity": 0.1})
    for cell in (" 12 ", "+12", "12.", "1.2e1", "12.000"):
        r = post_table(client, "sb1", _sb1_csv(cell), tables.CSV, accept="application/json")
        assert r.status_code == 200, (cell, r.get_json())
        got = r.get_json()["columns"]["mass_function"]
        assert got["value"][0] == single["results"]["mass_function"]["value"], cell
        assert got["sigma"][0] == single["results"]["mass_function"]["sigma"], cell


@pytest.mark.filterwarnings("ignore:OverflowError converting to FloatType")
@pytest.mark.parametrize("column", ["k1", "k1_sigma"])
@pytest.mark.parametrize("cell, reason", [("inf", "not finite"), ("-inf", "not finite"), ("1e999", "not finite"),
                                          ("Infinity", "not finite"), ("TRUE", "must be a number"),
                                          ('"1,5"', "must be a number"), ("nan", None)])
def test_a_cell_that_is_not_a_finite_number_is_that_systems_error_never_a_number(client, column, cell, reason):
    data = _sb1_csv(cell) if column == "k1" else _sb1_csv("30", cell)
    r = post_table(client, "sb1", data, tables.CSV, accept="application/json")
    assert r.status_code == 200, r.get_json()
    answer = r.get_json()
    other = compute("sb1", {"period": 12.5, "k1": {"value": 38.2, "sigma": 0.4}, "eccentricity": 0.31})
    assert answer["columns"]["mass_function"]["value"][1] == other["results"]["mass_function"]["value"]
    if column == "k1_sigma" and cell == "nan":
        # an empty or NaN sigma cell is no sigma given: that system is exact, as in a JSON null
        exact = compute("sb1", {"period": 41.6, "k1": 30, "eccentricity": 0.1})
        assert answer["columns"]["mass_function"]["value"][0] == exact["results"]["mass_function"]["value"]
        assert answer["columns"]["mass_function"]["sigma"][0] == 0.0
        return
    assert [e["index"] for e in answer["errors"]] == [0]
    assert list(answer["errors"][0]["errors"]) == ["k1"]
    if reason:
        assert reason in answer["errors"][0]["errors"]["k1"][0]
    assert answer["columns"]["mass_function"]["value"][0] is None


# ----------------------------------------------------------------------------- the command line and the client read alike

def _cli(capsys, *argv):
    from calcservice.cli import main
    code = main(["compute", *argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.mark.parametrize("header, field, says", [
    ("period,k1,period,eccentricity", "period", "the column appears twice"),
    ("period;k1;k1;eccentricity", "k1", "the column appears twice"),
    ("period,k1,,eccentricity", "--in", "column 3 of the header has no name"),
])
def test_the_command_line_checks_a_csv_header_as_the_service_does(tmp_path, capsys, client, header, field, says):
    sep = ";" if ";" in header else ","
    path = tmp_path / "catalogue.csv"
    path.write_text(header + "\n" + sep.join(["41.6", "30", "5", "0.1"]) + "\n")
    code, out, err = _cli(capsys, "sb1", "--in", str(path), "--out", str(tmp_path / "out.csv"))
    assert code != 0 and not out
    assert err.strip().splitlines() == [f"calcservice compute: {field}: {err.split(': ', 2)[2].strip()}"]
    assert says in err and str(path) in err
    # the service says the same of the same header (as comma-separated text)
    r = post_table(client, "sb1", (header.replace(";", ",") + "\n41.6,30,5,0.1\n").encode(), tables.CSV)
    assert r.status_code == 422 and says in json.dumps(r.get_json()["errors"])


def test_the_command_line_and_the_client_refuse_lenient_numbers_as_the_service_does(tmp_path, capsys):
    import pandas as pd

    from calcservice.client import Client
    for sep in (",", ";"):
        path = tmp_path / "catalogue.csv"
        path.write_text(sep.join(["period", "k1", "eccentricity"]) + "\n" + sep.join(["41.6", "4_1.6", "0.1"]) +
                        "\n" + sep.join(["12.5", "38.2", "0.31"]) + "\n")
        code, out, err = _cli(capsys, "sb1", "--in", str(path), "--out", str(tmp_path / "out.csv"))
        assert code == 2 and "k1: row 1 (system 0): '4_1.6'" in err, err
    local = Client("local")
    frame = pd.DataFrame({"period[d]": [41.6, 12.5], "k1[km/s]": ["4_1.6", "38.2"], "eccentricity": [0.1, 0.31]})
    with pytest.raises(ValueError, match=r"k1\[km/s\]: row 1 \(system 0\): '4_1.6'"):
        local.batch("sb1", frame)
    frame = pd.DataFrame({"period[d]": [41.6, 12.5], "k1[km/s]": [30.0, 38.2], "eccentricity": [True, False]})
    with pytest.raises(ValueError, match="eccentricity: a column of true and false"):
        local.batch("sb1", frame)


# ----------------------------------------------------------------------------- the library's numpy columns

def _reference_sb1() -> dict:
    # fictional single-lined systems as JSON lists, the wire's own form
    return compute_batch("sb1", {"columns": {"period": {"value": [3.0, 4.0, 7.5], "sigma": [0.1, 0.1, 0.2]},
                                             "k1": {"value": [40.0, 50.0, 22.0], "sigma": [0.5, 0.4, 0.3]},
                                             "eccentricity": [0.1, 0.0, 0.3]}})


def test_the_library_takes_numpy_columns_as_the_json_lists_they_hold():
    import pandas as pd
    from astropy import units as u
    from uncertainties import unumpy

    reference = _reference_sb1()["columns"]["mass_function"]
    period, period_sigma = np.array([3.0, 4.0, 7.5]), np.array([0.1, 0.1, 0.2])
    k1 = np.array([40, 50, 22])                                         # integers
    forms = [
        {"period": {"value": period, "sigma": period_sigma}, "k1": {"value": k1, "sigma": np.array([0.5, 0.4, 0.3])},
         "eccentricity": np.array([0.1, 0.0, 0.3])},
        {"period": {"value": period * u.d, "sigma": period_sigma * 24 * u.h},   # a sigma in its own unit
         "k1": {"value": k1 * 1000.0 * u.m / u.s, "sigma": pd.Series([0.5, 0.4, 0.3]), "unit": "km/s"},
         "eccentricity": pd.Series([0.1, 0.0, 0.3])},
        {"period": unumpy.uarray(period, period_sigma), "k1": unumpy.uarray(k1, [0.5, 0.4, 0.3]),
         "eccentricity": [np.float64(0.1), 0.0, 0.3]},
    ]
    for k, columns in enumerate(forms):
        got = compute_batch("sb1", {"columns": columns})
        assert not got["errors"], (k, got["errors"])
        # the same doubles (a unit conversion of the sigma: to 1e-15)
        np.testing.assert_allclose(got["columns"]["mass_function"]["value"], reference["value"], rtol=1e-15, err_msg=k)
        np.testing.assert_allclose(got["columns"]["mass_function"]["sigma"], reference["sigma"], rtol=1e-12, err_msg=k)
    # masked entries are missing: that system's error in place, the others answered
    got = compute_batch("sb1", {"columns": {"period": np.ma.array(period, mask=[0, 1, 0]), "k1": k1,
                                            "eccentricity": np.array([0.1, 0.0, 0.3])}})
    assert [(e["index"], list(e["errors"])) for e in got["errors"]] == [(1, ["period"])]
    exact = compute("sb1", {"period": 7.5, "k1": 22, "eccentricity": 0.3})
    assert got["columns"]["mass_function"]["value"][2] == exact["results"]["mass_function"]["value"]


def test_the_library_takes_each_systems_own_draws_as_a_numpy_array():
    # an orbit fit's posterior draws, (systems, draws): the same answer as the JSON lists of lists
    draws = np.random.default_rng(1).normal(40.0, 1.0, (2, 200))
    columns = {"period": 3.0, "eccentricity": 0.1}
    listed = compute_batch("sb1", {"columns": {**columns, "k1": {"samples": draws.tolist()}}})
    arrays = compute_batch("sb1", {"columns": {**columns, "k1": {"samples": draws}}})
    assert not arrays["errors"] and arrays["columns"]["mass_function"] == listed["columns"]["mass_function"]


@pytest.mark.parametrize("column, kind", [(np.array(["3", "4"]), "text"), (np.array([True, False]), "booleans"),
                                          (np.array([3 + 0j, 4]), "complex"),
                                          (np.array(["3", None], dtype=object), "text or other objects"),
                                          (np.array([[3.0, 4.0]]), "2 dimensions")])
def test_the_library_refuses_an_array_that_holds_no_numbers_naming_the_column(column, kind):
    with pytest.raises(Problem) as e:
        compute_batch("sb1", {"columns": {"period": column, "k1": [40.0, 50.0], "eccentricity": 0.1}})
    assert e.value.status == 422
    assert list(e.value.errors) == ["columns.period"] and kind in e.value.errors["columns.period"][0]
    with pytest.raises(Problem) as e:
        compute_batch("sb1", {"columns": {"period": {"value": [3.0, 4.0], "sigma": column}, "k1": [40.0, 50.0],
                                          "eccentricity": 0.1}})
    assert list(e.value.errors) == ["columns.period.sigma"]


def test_correlated_uncertainties_numbers_are_refused_not_taken_as_independent():
    from uncertainties import correlated_values

    from calcservice.client import Client
    # k1 and k2 correlated with rho 0.5 (uncertainties' correlated_values): one batch-wide rho cannot carry it
    k1, k2 = correlated_values([40.0, 50.0], np.array([[0.25, 0.1], [0.1, 0.16]]))
    columns = {"period": [3.0], "k1": np.array([k1]), "k2": np.array([k2]), "eccentricity": 0.1}
    with pytest.raises(Problem) as e:
        compute_batch("sb2", {"columns": columns})
    assert "correlated with those of k2" in e.value.errors["columns.k1"][0]
    with pytest.raises(ValueError, match="k1: its uncertainties numbers are correlated with those of k2"):
        Client("local").batch("sb2", columns)


# ----------------------------------------------------------------------------- Arrow and CSV bodies a lab sends

def _arrow(table) -> bytes:
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as w:
        w.write_table(table)
    return sink.getvalue().to_pybytes()


def _answer(client, data, fmt, **kw):
    r = post_table(client, "sb1", data, fmt, accept="application/json", **kw)
    assert r.status_code == 200, r.get_data()[:400]
    return r.get_json()


def test_arrow_columns_of_every_numeric_and_text_type_give_the_json_numbers(client):
    reference = compute("sb1", {"period": 41.6, "k1": 30.0, "eccentricity": 0.1})["results"]["mass_function"]["value"]
    base = {"period": [41.6, 3.2], "eccentricity": [0.1, 0.2]}
    columns = [pa.array([30, 40], pa.uint64()), pa.array([30, 40], pa.int8()), pa.array(["30", "40"]).dictionary_encode(),
               pa.array(["30", "40"], pa.large_string())]
    if hasattr(pa, "string_view"):
        columns.append(pa.array(["30", "40"], pa.string_view()))
    for k1 in columns:
        answer = _answer(client, _arrow(pa.table({**base, "k1": k1})), tables.ARROW)
        assert answer["columns"]["mass_function"]["value"][0] == reference, k1.type
    # an integer beyond 2**53 is the nearest double, as the JSON number would be: here out of k1's domain
    answer = _answer(client, _arrow(pa.table({**base, "k1": pa.array([2**63 + 5, 40], pa.uint64())})), tables.ARROW)
    assert [(e["index"], list(e["errors"])) for e in answer["errors"]] == [(0, ["k1"])]
    # a column of nulls only (pyarrow's null type) is missing in every system, as a float column of nulls
    for k1 in (pa.array([None, None]), pa.array([None, None], pa.float64())):
        answer = _answer(client, _arrow(pa.table({**base, "k1": k1})), tables.ARROW)
        assert [(e["index"], e["errors"]) for e in answer["errors"]] == [(0, {"k1": ["is required"]}),
                                                                         (1, {"k1": ["is required"]})]


def test_csv_comment_lines_semicolons_and_tabs_are_read_as_a_lab_writes_them(client):
    reference = client.post("/v1/batch/sb1", json={"columns": {"period": [41.6, 3.2], "k1": [30.0, 40.0],
                                                               "eccentricity": [0.1, 0.2]}}).get_json()["columns"]
    for text in ("# fictional catalogue, Lantern survey\n#\nperiod,k1,eccentricity\n41.6,30,0.1\n3.2,40,0.2\n",
                 "period;k1;eccentricity\n41.6;30;0.1\n3.2;40;0.2\n",
                 "period\tk1\teccentricity\r\n41.6\t30\t0.1\r\n3.2\t40\t0.2\r\n"):
        answer = _answer(client, text.encode(), tables.CSV)
        assert answer["columns"]["mass_function"] == reference["mass_function"], text
    # after the header a line is a system whatever its first cell: an identifier #12 is never dropped
    r = client.post("/v1/batch/sb1?keep=star", data=b"# survey\nstar,period,k1,eccentricity\n#12,41.6,30,0.1\nB,3.2,40,0.2\n",
                    content_type="text/csv", headers={"Accept": "application/json"})
    assert r.get_json()["kept"] == {"star": ["#12", "B"]}
    assert r.get_json()["columns"]["mass_function"] == reference["mass_function"]
    # a decimal comma beside semicolons is no number: that system's error, never 41 or 416
    answer = _answer(client, b"period;k1;eccentricity\n41,6;30;0,1\n3.2;40;0.2\n", tables.CSV)
    assert [(e["index"], sorted(e["errors"])) for e in answer["errors"]] == [(0, ["eccentricity", "period"])]


def test_a_nul_byte_in_a_csv_body_is_refused_not_cut_short(client):
    r = post_table(client, "sb1", b"period,k1,eccentricity\n41.6,30\x005,0.1\n", tables.CSV)
    assert r.status_code == 400 and "line 2" in r.get_json()["detail"]


def test_a_kept_csv_column_comes_back_as_written(client):
    # an identifier such as 0012 is text to its catalogue; 101 stays a whole number, 12.50 the number 12.5
    text = b"period,k1,eccentricity,hip,code\n41.6,30,0.1,0012,12.50\n3.2,40,0.2,101,\n"
    answer = client.post("/v1/batch/sb1?keep=hip,code", data=text, content_type="text/csv",
                         headers={"Accept": "application/json"}).get_json()
    assert answer["kept"] == {"hip": ["0012", "101"], "code": [12.5, None]}
    r = client.post("/v1/batch/sb1?keep=hip", data=b"period,k1,eccentricity,hip\n41.6,30,0.1,7\n3.2,40,0.2,101\n",
                    content_type="text/csv", headers={"Accept": "application/json"})
    assert r.get_json()["kept"] == {"hip": [7, 101]}
    csv = client.post("/v1/batch/sb1?keep=hip,code", data=text, content_type="text/csv").get_data(as_text=True)
    assert [line.split(",")[:2] for line in csv.splitlines()[1:]] == [["0012", "12.5"], ["101", ""]]


def test_a_variance_budget_asked_of_a_table_answer_comes_in_its_columns(client):
    # the shares of each output's variance by input (and the k1,period correlation term): as the JSON answer's
    text = b"period,period_sigma,k1,k1_sigma,eccentricity\n41.6,0.1,30,1,0.1\n3.2,0.01,40,1,0.2\n"
    options = {"budget": True, "correlations": [{"between": ["k1", "period"], "rho": 0.2}]}
    reference = _answer(client, text, tables.CSV, options=options)["budget"]
    assert sorted(reference["mass_function"]) == ["k1", "period", "period,k1"]
    for fmt in tables.TABLE_TYPES:
        r = post_table(client, "sb1", text, tables.CSV, options, accept=fmt)
        assert r.status_code == 200
        budget = tables.decode_answer(r.data, fmt)["budget"]
        assert budget.keys() == reference.keys(), fmt
        for name, terms in reference.items():
            assert budget[name].keys() == terms.keys(), (fmt, name)
            for term, shares in terms.items():
                assert np.array_equal(np.asarray(budget[name][term], dtype=float), np.asarray(shares, dtype=float))


def test_unknown_columns_are_echoed_shortly_and_a_few_at_a_time(client):
    # a caller's unknown name is echoed in at most 80 characters, as for a JSON field (README, Limits)
    r = post_table(client, "sb1", ("period,k1,eccentricity," + "x" * 5000 + "\n41.6,30,0.1,1\n").encode(), tables.CSV)
    assert r.status_code == 422 and len(r.data) < 2000
    assert [len(k) for k in r.get_json()["errors"]] == [80]
    header = ",".join(f"c{k}" for k in range(3000))
    r = post_table(client, "sb1", (header + "\n" + ",".join("1" * 3000) + "\n").encode(), tables.CSV)
    assert r.status_code == 422 and len(r.get_json()["errors"]) == 20 and "and 2980 more columns" in r.get_json()["detail"]


def test_an_arrow_ipc_file_is_read_as_the_stream_would_be(client):
    # pyarrow.feather.write_feather writes the IPC file format (compressed by default), not the stream
    import pyarrow.feather as feather
    table = pa.table({"period": [41.6, 3.2], "k1": [30.0, 40.0], "eccentricity": [0.1, 0.2]})
    sink = pa.BufferOutputStream()
    feather.write_feather(table, sink)
    as_file = _answer(client, sink.getvalue().to_pybytes(), tables.ARROW)
    as_stream = _answer(client, _arrow(table), tables.ARROW)
    assert as_file["columns"] == as_stream["columns"] and not as_file["errors"]


# ----------------------------------------------------------------------------- one catalogue, every way in

def _rows_of(columns: dict, n: int) -> list[dict]:
    """The systems of a JSON columns body as the rows of a rows body (null: not given)."""
    rows = []
    for i in range(n):
        row = {}
        for name, column in columns.items():
            if isinstance(column, dict):
                entry = {k: (v[i] if isinstance(v, list) else v) for k, v in column.items()}
                if entry["value"] is None:
                    continue
                row[name] = "isotropic" if entry["value"] == "isotropic" else \
                    {k: v for k, v in entry.items() if v is not None}
            elif column[i] is not None:
                row[name] = column[i]
        rows.append(row)
    return rows


CATALOGUES = [
    # fictional systems: asymmetric sigmas, an optional input in some systems, isotropic in one (drawn with the seed)
    ("sb1", {"period": {"value": [41.6, 3.2, 10.0], "sigma_minus": [0.1, 0.01, 0.2], "sigma_plus": [0.3, 0.02, 0.2]},
             "k1": {"value": [30.0, 40.0, 50.0], "sigma": [0.5, 0.5, 1.0]}, "eccentricity": [0.1, 0.0, 0.3],
             "primary_mass": {"value": [1.2, None, 2.0], "sigma": [0.1, None, 0.1]},
             "inclination": {"value": [80.0, None, "isotropic"]}}, {"uncertainty": {"seed": 5, "samples": 400}}),
    ("sb2", {"period": {"value": [41.6, 3.2], "sigma": [0.1, 0.01]}, "k1": {"value": [30.0, 40.0], "sigma": [0.5, 0.5]},
             "k2": {"value": [35.0, 60.0], "sigma": [0.5, 0.3]}, "eccentricity": [0.1, 0.0],
             "inclination": {"value": [70.0, 85.0], "sigma": [1.0, 2.0]}},
     {"correlations": [{"between": ["k1", "k2"], "rho": 0.3}], "units": {"semimajor_axis": "solRad"}}),
    ("mass-loss-recipe", {"recipe": ["vink-2001", "nugis-lamers-2000"], "luminosity": {"value": [3.2e5, 2e5], "sigma": [1e4, 1e4]},
                          "mass": [38.0, None], "teff": [40000.0, None], "helium_fraction": [None, 0.8],
                          "metal_fraction": [None, 0.1]}, {}),
    ("visual", {"period": {"value": [3650.0, 1000.0], "sigma": [10.0, 5.0]},
                "angular_semimajor_axis": {"value": [100.0, 50.0], "sigma": [1.0, 1.0]}, "parallax": [10.0, None],
                "distance": [None, 120.0]}, {}),
    ("collision", {"mdot1": {"value": [1e-5, 2e-6], "sigma": [1e-6, 1e-7]}, "mdot2": [1e-6, 1e-7],
                   "vinf1": [2000.0, 1500.0], "vinf2": [1000.0, 800.0], "separation": [2.0, 5.0]},
     {"uncertainty": {"method": "monte_carlo", "seed": 1, "samples": 200}}),
]


@pytest.mark.parametrize("name, columns, options", CATALOGUES, ids=[c[0] for c in CATALOGUES])
def test_one_catalogue_gives_the_same_doubles_every_way_in(client, name, columns, options):
    n = len(next(v["value"] if isinstance(v, dict) else v for v in columns.values()))
    reference = client.post(f"/v1/batch/{name}", json={"columns": columns, **options}).get_json()
    assert not reference["errors"], reference["errors"]
    rows = client.post(f"/v1/batch/{name}", json={"systems": _rows_of(columns, n), **options}).get_json()
    answers = {"rows": None}
    for fmt in tables.TABLE_TYPES:
        answers[fmt] = _answer_of(client, name, tables.encode_request({"columns": columns}, fmt), fmt, options)
    monte_carlo = (options.get("uncertainty") or {}).get("method") == "monte_carlo"
    for i, row in enumerate(_rows_of(columns, n)):
        single = compute(name, {**row, **options})
        for output, entry in reference["columns"].items():
            for key in ("value", "sigma", "low", "high"):
                if key not in entry:
                    continue
                expected = entry[key][i]
                assert rows["results"][i]["results"].get(output, {}).get(key) == expected, (i, output, key, "rows")
                for fmt in tables.TABLE_TYPES:
                    assert answers[fmt]["columns"][output][key][i] == expected, (i, output, key, fmt)
                # a Monte Carlo batch draws for all its systems at once: only its first matches a single request
                if not monte_carlo or i == 0:
                    assert single["results"].get(output, {}).get(key) == expected, (i, output, key, "single")


def _answer_of(client, name, data, fmt, options):
    r = client.post(f"/v1/batch/{name}", data=data, content_type=fmt, headers={"Accept": "application/json"},
                    query_string={"options": json.dumps(options)} if options else None)
    assert r.status_code == 200, r.get_data()[:300]
    return r.get_json()


def test_a_kept_arrow_column_of_dates_or_decimals_comes_back_as_its_text(client):
    # an observation date or a decimal magnitude of the caller's own: carried, not refused
    import datetime
    import decimal
    table = pa.table({"period": [41.6, 3.2], "k1": [30.0, 40.0], "eccentricity": [0.1, 0.2],
                      "observed": pa.array([datetime.datetime(2024, 3, 1, 12), None]),
                      "vmag": pa.array([decimal.Decimal("7.50"), decimal.Decimal("11.25")], pa.decimal128(5, 2))})
    r = client.post("/v1/batch/sb1?keep=observed,vmag", data=_arrow(table), content_type=tables.ARROW,
                    headers={"Accept": "application/json"})
    assert r.status_code == 200, r.get_json()
    assert r.get_json()["kept"] == {"observed": ["2024-03-01 12:00:00.000000", None], "vmag": ["7.50", "11.25"]}


def test_the_command_line_keeps_a_csv_column_as_written_as_the_service_does(tmp_path, capsys, client):
    text = "star,hip,period,k1,eccentricity\nA,0012,41.6,30,0.1\nB,101,3.2,40,0.2\n"
    path = tmp_path / "catalogue.csv"
    path.write_text(text)
    code, out, err = _cli(capsys, "sb1", "--in", str(path), "--out", "-", "--keep", "star,hip")
    assert code == 0, err
    served = client.post("/v1/batch/sb1?keep=star,hip", data=text.encode(), content_type="text/csv").get_data(as_text=True)
    assert [line.split(",")[:2] for line in out.splitlines()] == [line.split(",")[:2] for line in served.splitlines()]
    assert out.splitlines()[1].startswith("A,0012,")


@pytest.mark.parametrize("accept, answer", [
    ("application/json; charset=utf-8", "application/json"),     # a parameter does not narrow the range
    ("*", "application/json"),                                    # a lone * as old clients send it: */*
    ("application/json;q=0, */*", tables.ARROW),                  # q=0 refuses JSON: the next type offered
    ("text/*", "text/csv"),
    ("text/html", None),                                          # none of the answer types: 406
])
def test_a_batch_answer_type_is_picked_by_the_same_accept_rule_as_a_calculation(client, accept, answer):
    # RFC 9110 section 12.5.1: the most specific matching range gives a type its q
    body = {"columns": {"period": [41.6], "k1": [23.4], "k2": [30.1], "eccentricity": [0.1]}}
    r = client.post("/v1/batch/sb2", json=body, headers={"Accept": accept})
    if answer is None:
        assert r.status_code == 406 and "Accept" in r.get_json()["errors"]
    else:
        assert r.status_code == 200 and r.mimetype == answer


def test_an_empty_unit_in_a_table_is_dimensionless_as_in_json(client):
    # period[] in a CSV header, or an Arrow field's unit "", says dimensionless, as {"unit": ""} does in JSON: refused
    # for a period, naming it; it was read in days. For the eccentricity it is its own unit
    import pandas as pd
    from calcservice.client import Client, CalcServiceError
    refused = client.post("/v1/spectroscopic/sb2", json={"period": {"value": 41.6, "unit": ""}, "k1": 38.2,
                                                          "k2": 51.7, "eccentricity": 0.3}).get_json()
    message = refused["errors"]["period"][0]
    csv = "period[],k1,k2,eccentricity\n41.6,38.2,51.7,0.3\n"
    r = client.post("/v1/batch/sb2", data=csv, content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 422 and r.get_json()["errors"] == {"columns.period.unit": [message]}
    field = pa.field("period", pa.float64(), metadata={"unit": ""})
    arrow = pa.Table.from_arrays([pa.array([41.6]), pa.array([38.2]), pa.array([51.7]), pa.array([0.3])],
                                 schema=pa.schema([field, pa.field("k1", pa.float64()), pa.field("k2", pa.float64()),
                                                   pa.field("eccentricity", pa.float64())]))
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, arrow.schema) as writer:
        writer.write_table(arrow)
    r = client.post("/v1/batch/sb2", data=sink.getvalue().to_pybytes(), content_type="application/vnd.apache.arrow.stream",
                    headers={"Accept": "application/json"})
    assert r.status_code == 422 and r.get_json()["errors"] == {"columns.period.unit": [message]}
    ok = client.post("/v1/batch/sb2", data="period,k1,k2,eccentricity[]\n41.6,38.2,51.7,0.3\n", content_type="text/csv",
                     headers={"Accept": "application/json"})
    assert ok.status_code == 200
    with pytest.raises(CalcServiceError) as e:        # the client's table, sent as Arrow, is refused the same way
        Client("local").batch("sb2", pd.DataFrame({"period[]": [41.6], "k1[km/s]": [38.2], "k2[km/s]": [51.7],
                                                   "eccentricity": [0.3]}))
    assert e.value.status == 422 and "columns.period.unit" in str(e.value)
