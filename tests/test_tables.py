"""Catalogue tables on the wire: Arrow IPC streams, CSV and ECSV in and out of POST /v1/batch.

The reference for every number is the service's own JSON columns answer (held against the outside
by tests/test_batch.py and the physics tests): a table must carry exactly the same floats, since
Arrow float64 is exact and CSV/ECSV are written with the shortest repr that reads back the same double.
The readers are pyarrow's IPC reader and astropy's ECSV/CSV readers, outside the project."""

from __future__ import annotations

import io
import json
import math

import numpy as np
import pyarrow as pa
import pytest
from astropy.table import MaskedColumn, Table

from calcservice import create_app, tables
from calcservice.registry import calculations
from calcservice.units import factor

OPTIONS = ("correlations", "uncertainty", "units", "time_format")
N = 3
FORMATS = tables.TABLE_TYPES


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def example_batch(client, name: str, n: int = N) -> tuple[dict, dict]:
    """The calculation's published example (GET /v1/calculations/<name>) as n nearby systems:
    the JSON columns and the options (series inputs such as an ephemeris' times among them)."""
    calc = client.get(f"/v1/calculations/{name}").get_json()
    kinds = {i["name"]: i.get("kind", "quantity") for i in calc["inputs"]}
    dates = {i["name"] for i in calc["inputs"] if i.get("time")}     # a date moved by 1e-3 of itself is years away
    columns, options = {}, {}
    for key, v in calc["example"].items():
        if key in OPTIONS or kinds.get(key) == "series":
            options[key] = v
        elif isinstance(v, dict):
            columns[key] = {m: (x if m == "unit" else [x * (1 + 1e-3 * i) if kinds[key] == "quantity" and m == "value" and key not in dates
                                                       else x for i in range(n)]) for m, x in v.items()}
        else:
            columns[key] = [v] * n
    return columns, options


def json_answer(client, name, columns, options):
    r = client.post(f"/v1/batch/{name}", json={"columns": {**columns, **{k: v for k, v in options.items()
                                                                          if k not in OPTIONS}},
                                               **{k: v for k, v in options.items() if k in OPTIONS}})
    assert r.status_code == 200, r.get_json()
    return r.get_json()


def post_table(client, name, data, media_type, options=None, accept=None, **headers):
    query = {"options": json.dumps(options)} if options else None
    if accept:
        headers["Accept"] = accept
    return client.post(f"/v1/batch/{name}", data=data, content_type=media_type, query_string=query, headers=headers)


def same(a, b) -> bool:
    """Exactly the same floats, null/NaN in the same places (lists or arrays, any nesting)."""
    x = np.array([np.nan if v is None else v for v in np.asarray(a, dtype=object).ravel()], dtype=float)
    y = np.array([np.nan if v is None else v for v in np.asarray(b, dtype=object).ravel()], dtype=float)
    return x.shape == y.shape and bool(np.all((x == y) | (np.isnan(x) & np.isnan(y))))


def assert_same_answer(table: dict, reference: dict, with_meta: bool = True):
    for name, entry in reference["columns"].items():
        if not isinstance(entry, dict):
            assert table["columns"][name] == entry, name          # extra members (events) as JSON text
            continue
        got = table["columns"][name]
        for key in ("value", "sigma", "low", "high"):
            if key in entry:
                assert same(got[key], entry[key]), (name, key, got[key], entry[key])
    assert [e["index"] for e in table["errors"]] == [e["index"] for e in reference["errors"]]
    if with_meta:
        assert table["calculation"] == reference["calculation"]
        assert table["provenance"] == reference["provenance"]


@pytest.mark.parametrize("name", [c.name for c in calculations().values() if c.example])
def test_every_example_in_every_format_gives_the_json_numbers(client, name):
    columns, options = example_batch(client, name)
    reference = json_answer(client, name, columns, options)
    series = any(isinstance(v, list) for e in reference["columns"].values() if isinstance(e, dict) for v in e["value"])
    for fmt in FORMATS:
        data = tables.encode_request({"columns": columns}, fmt)
        # the request table read back as JSON: the same numbers
        r = post_table(client, name, data, fmt, options, accept="application/json")
        assert r.status_code == 200, (fmt, r.get_json())
        assert_same_answer({**r.get_json(), "warnings": None}, reference)
        # answered in the table's own format (the default without Accept)
        r = post_table(client, name, data, fmt, options)
        if series and fmt != tables.ARROW:
            assert r.status_code == 406, (fmt, r.get_json())
            assert tables.ARROW in r.get_json()["detail"]
            continue
        assert r.status_code == 200, (fmt, r.get_data()[:300])
        assert r.mimetype == fmt
        answer = tables.decode_answer(r.data, fmt)
        assert_same_answer(answer, reference, with_meta=fmt != tables.CSV)
        # units of the answer where the format holds them
        for out, entry in reference["columns"].items():
            if isinstance(entry, dict) and entry["unit"]:
                got = answer["columns"][out]["unit"]
                assert got and factor(got, entry["unit"]) == 1.0, (out, got, entry["unit"])


@pytest.mark.filterwarnings("ignore:OverflowError converting to FloatType")     # astropy's note on subnormals
def test_csv_and_ecsv_write_every_double_exactly():
    # 2000 doubles over 600 decades, subnormals and the extremes: repr round trip (IEEE 754 binary64)
    rng = np.random.default_rng(7)
    values = rng.standard_normal(2000) * 10.0 ** rng.integers(-300, 300, 2000)
    values[:4] = [5e-324, 1.7976931348623157e308, -2.2250738585072014e-308, 0.1 + 0.2]
    calc = calculations()["sb2"]
    for fmt in FORMATS:
        data = tables.encode_request({"columns": {"period": {"value": values, "sigma": values[::-1]}}}, fmt)
        body = tables.read_request(data, fmt, calc)
        assert np.array_equal(body["columns"]["period"]["value"], values), fmt
        assert np.array_equal(body["columns"]["period"]["sigma"], values[::-1]), fmt
    answer = {"calculation": "sb2", "count": 2000, "columns": {"m1": {"value": values, "sigma": values, "unit": "solMass"}},
              "errors": [], "warnings": [], "uncertainty": {"method": "linear"}, "provenance": {"version": "x"}}
    for fmt in FORMATS:
        back = tables.decode_answer(tables.encode_answer(answer, fmt), fmt)
        assert np.array_equal(back["columns"]["m1"]["value"], values), fmt


def _sb2_rows():
    # fictional double-lined systems; the third lacks its eccentricity, the fourth its k2 sigma
    return {"period": [41.6, 12.25, 300.0, 7.5], "period_sigma": [0.02, 0.01, 0.5, 0.001],
            "k1": [38.2, 61.0, 22.4, 90.1], "k1_sigma": [0.4, 0.5, 0.3, 1.0],
            "k2": [51.7, 70.3, 30.0, 110.0], "k2_sigma": [0.6, 0.7, 0.4, None],
            "eccentricity": [0.31, 0.0, None, 0.05], "eccentricity_sigma": [0.01, 0.02, None, 0.01]}


def _json_columns(rows: dict) -> dict:
    out = {}
    for name in ("period", "k1", "k2", "eccentricity"):
        out[name] = {"value": rows[name], "sigma": rows[name + "_sigma"]}
    return out


def test_missing_entries_answer_that_system_with_an_error_in_place(client):
    rows = _sb2_rows()
    reference = json_answer(client, "sb2", _json_columns(rows), {})
    assert [e["index"] for e in reference["errors"]] == [2]
    # Arrow nulls
    arrow = pa.table({k: pa.array(v, type=pa.float64()) for k, v in rows.items()})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, arrow.schema) as w:
        w.write_table(arrow)
    # ECSV masked entries, CSV empty cells (astropy writes both from a masked column)
    t = Table()
    for k, v in rows.items():
        t[k] = MaskedColumn([0.0 if x is None else x for x in v], mask=[x is None for x in v])
    bodies = {tables.ARROW: sink.getvalue().to_pybytes()}
    for fmt, astropy_format in ((tables.ECSV, "ascii.ecsv"), (tables.CSV, "ascii.csv")):
        out = io.StringIO()
        t.write(out, format=astropy_format)
        bodies[fmt] = out.getvalue().encode()
    assert b"300.0,0.5,22.4,0.3,30.0,0.4,,\n" in bodies[tables.CSV]        # the empty cells on the wire
    for fmt, data in bodies.items():
        r = post_table(client, "sb2", data, fmt, accept=tables.ARROW)
        assert r.status_code == 200, (fmt, r.get_data()[:300])
        answer = tables.decode_answer(r.data, tables.ARROW)
        assert_same_answer(answer, reference)
        assert [e["status"] for e in answer["errors"]] == [422]
        assert "eccentricity" in answer["errors"][0]["detail"]
        assert math.isnan(answer["columns"]["m1_sin3i"]["value"][2])
        assert not np.isnan(answer["columns"]["m1_sin3i"]["value"][[0, 1, 3]]).any()


def test_bad_rows_come_back_in_the_error_columns(client):
    # a word where a number goes, an eccentricity out of its domain, a negative sigma
    text = ("period,period_sigma,k1,k2,eccentricity\n"
            "41.6,0.02,38.2,51.7,0.31\n"
            "41.6,0.02,many,51.7,0.31\n"
            "41.6,0.02,38.2,51.7,1.2\n"
            "41.6,-0.02,38.2,51.7,0.31\n")
    for accept in (tables.CSV, tables.ARROW, tables.ECSV):
        r = post_table(client, "sb2", text.encode(), tables.CSV, accept=accept)
        assert r.status_code == 200, r.get_data()[:300]
        answer = tables.decode_answer(r.data, accept)
        errors = {e["index"]: e for e in answer["errors"]}
        assert sorted(errors) == [1, 2, 3]
        assert all(e["status"] == 422 for e in errors.values())
        assert "k1" in errors[1]["detail"] and "eccentricity" in errors[2]["detail"] and "period" in errors[3]["detail"]
        assert not math.isnan(answer["columns"]["m1_sin3i"]["value"][0])
        assert np.isnan(answer["columns"]["m1_sin3i"]["value"][1:]).all()
    # the same systems as JSON give the same errors
    reference = json_answer(client, "sb2", {"period": {"value": [41.6] * 4, "sigma": [0.02, 0.02, 0.02, -0.02]},
                                            "k1": {"value": [38.2, "many", 38.2, 38.2]}, "k2": [51.7] * 4,
                                            "eccentricity": [0.31, 0.31, 1.2, 0.31]}, {})
    assert [tables.error_text(e) for e in reference["errors"]] == [errors[i]["detail"] for i in (1, 2, 3)]


def _arrow_with_units(columns: dict[str, tuple[list, str | None]]) -> bytes:
    fields = [pa.field(k, pa.float64(), metadata={"unit": u} if u else None) for k, (v, u) in columns.items()]
    t = pa.Table.from_arrays([pa.array(v, type=pa.float64()) for v, _ in columns.values()], schema=pa.schema(fields))
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, t.schema) as w:
        w.write_table(t)
    return sink.getvalue().to_pybytes()


def test_units_in_the_table_metadata_are_honoured(client):
    days = [41.6, 365.25, 1000.0]
    base = {"k1": ([38.2] * 3, "km/s"), "k2": ([51.7] * 3, None), "eccentricity": ([0.31] * 3, None)}
    in_days = _arrow_with_units({"period": (days, "d"), "period_sigma": ([0.02] * 3, None), **base})
    # the period in Julian years (IAU: 365.25 d), its sigma in hours (a unit of its own, converted)
    in_years = _arrow_with_units({"period": ([d / 365.25 for d in days], "yr"),
                                  "period_sigma": ([0.02 * 24] * 3, "h"), **base})
    a = tables.decode_answer(post_table(client, "sb2", in_days, tables.ARROW).data, tables.ARROW)
    b = tables.decode_answer(post_table(client, "sb2", in_years, tables.ARROW).data, tables.ARROW)
    for out in ("m1_sin3i", "a_sin_i"):
        np.testing.assert_allclose(b["columns"][out]["value"], a["columns"][out]["value"], rtol=1e-13)
        np.testing.assert_allclose(b["columns"][out]["sigma"], a["columns"][out]["sigma"], rtol=1e-12)
    # a plain CSV header NAME[unit], and ECSV's own unit
    csv = "period[yr],k1[km/s],k2,eccentricity\n" + "".join(f"{d / 365.25!r},38.2,51.7,0.31\n" for d in days)
    c = tables.decode_answer(post_table(client, "sb2", csv.encode(), tables.CSV, accept=tables.ARROW).data, tables.ARROW)
    t = Table({"period": [d / 365.25 for d in days], "k1": [38.2] * 3, "k2": [51.7] * 3, "eccentricity": [0.31] * 3})
    t["period"].unit = "yr"
    out = io.StringIO()
    t.write(out, format="ascii.ecsv")
    e = tables.decode_answer(post_table(client, "sb2", out.getvalue().encode(), tables.CSV, accept=tables.ARROW).data,
                             tables.ARROW)
    for answer in (c, e):
        np.testing.assert_allclose(answer["columns"]["m1_sin3i"]["value"], a["columns"]["m1_sin3i"]["value"], rtol=1e-13)
    # a unit that is not a time is refused naming the column
    wrong = _arrow_with_units({"period": (days, "km"), **base})
    r = post_table(client, "sb2", wrong, tables.ARROW, accept="application/json")
    assert r.status_code == 422 and "period" in json.dumps(r.get_json())


def test_answer_tables_carry_units_metadata_and_error_columns(client):
    columns, _ = example_batch(client, "sb2")
    columns["eccentricity"]["value"][1] = 1.5
    data = tables.encode_request({"columns": columns}, tables.ARROW)
    mc = {"uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 11}}
    r = post_table(client, "sb2", data, tables.ARROW, mc)
    t = pa.ipc.open_stream(r.data).read_all()
    names = t.schema.names
    assert names[:4] == ["mass_ratio", "mass_ratio_sigma", "mass_ratio_low", "mass_ratio_high"]
    assert names[-4:] == ["error_status", "error", "warnings", "uncertainty_rejected_fraction"]
    assert t.schema.field("m1").metadata[b"unit"] == b"solMass"
    assert t.schema.field("a_sin_i_sigma").metadata[b"unit"] == b"au"
    meta = {k.decode(): json.loads(v) for k, v in t.schema.metadata.items()}
    assert meta["calculation"] == "sb2"
    assert meta["uncertainty"] == {"method": "monte_carlo", "samples": 2000, "seed": 11}
    assert meta["provenance"]["references"]
    assert t.column("error_status").to_pylist() == [None, 422, None]
    # the field errors alone: "invalid value for eccentricity; eccentricity: ..." said the field twice
    assert t.column("error").to_pylist()[1].startswith("eccentricity: ")
    assert t.column("m1").null_count == 1
    reference = json_answer(client, "sb2", columns, mc)
    assert_same_answer(tables.decode_answer(r.data, tables.ARROW), reference)
    # ECSV: the same in its header
    r = post_table(client, "sb2", data, tables.ARROW, mc, accept=tables.ECSV)
    e = Table.read(r.data.decode(), format="ascii.ecsv")
    assert str(e["m1"].unit) == "solMass" and e.meta["calculation"] == "sb2"
    assert e.meta["provenance"] == reference["provenance"]
    assert e["m1"].mask.tolist() == [False, True, False]
    assert e["error_status"].mask.tolist() == [True, False, True]


def test_warnings_column_holds_each_systems_codes():
    answer = {"calculation": "x", "count": 4, "columns": {}, "errors": [], "uncertainty": {"method": "linear"},
              "warnings": [{"code": "a", "message": "m", "rows": [0, 2]}, {"code": "b", "message": "m", "rows": [2]},
                           {"code": "a", "message": "other wording", "rows": [3]}]}
    assert tables.warning_codes(answer["warnings"], 4).tolist() == ["a", "", "a;b", "a"]
    for fmt in FORMATS:
        assert tables.decode_answer(tables.encode_answer(answer, fmt), fmt)["warnings"] == [["a"], [], ["a", "b"], ["a"]]


def test_a_rows_batch_or_an_unknown_accept_is_406(client):
    columns, _ = example_batch(client, "sb2")
    r = client.post("/v1/batch/sb2", json={"columns": columns}, headers={"Accept": "text/html"})
    assert r.status_code == 406 and r.mimetype == "application/problem+json"
    for t in tables.MEDIA_TYPES:
        assert t in r.get_json()["detail"]
    r = client.post("/v1/batch/sb2", json={"systems": [dict(calculations()["sb2"].example)]},
                    headers={"Accept": tables.ARROW})
    assert r.status_code == 406 and "rows" in r.get_json()["detail"]
    # a wildcard, or a list with preferences, is taken
    r = client.post("/v1/batch/sb2", json={"columns": columns}, headers={"Accept": "text/html, */*;q=0.1"})
    assert r.status_code == 200 and r.mimetype == "application/json"
    r = client.post("/v1/batch/sb2", json={"columns": columns},
                    headers={"Accept": "application/json;q=0.5, application/vnd.apache.arrow.stream"})
    assert r.mimetype == tables.ARROW


def test_unknown_request_media_types_stay_415(client):
    for ctype in ("text/plain", "application/xml", "application/x-www-form-urlencoded"):
        r = client.post("/v1/batch/sb2", data=b"period=1", content_type=ctype)
        assert r.status_code == 415, ctype
        assert tables.ARROW in r.get_json()["detail"]


@pytest.mark.parametrize("fmt,data,status,where", [
    (tables.ARROW, b"not an arrow stream", 400, None),
    (tables.CSV, b"\xff\xfe", 400, None),
    (tables.CSV, b"period,k1,k2,eccentricity,brightness\n1,2,3,0.1,7\n", 422, "brightness"),
    (tables.CSV, b"k1,k2,eccentricity,period_sigma\n2,3,0.1,7\n", 422, "period_sigma"),
    (tables.CSV, b"period,k1,k2,eccentricity,period_sigma,period_sigma_plus\n1,2,3,0.1,7,1\n", 422, "period_sigma"),
    (tables.ECSV, b"# %ECSV 1.0\n# ---\n# datatype: [oops\n", 400, None),
])
def test_unreadable_or_unfitting_tables_are_refused_naming_the_column(client, fmt, data, status, where):
    r = post_table(client, "sb2", data, fmt)
    assert r.status_code == status, r.get_json()
    problem = r.get_json()
    if where:
        assert where in problem["errors"], problem


def test_options_query_parameter(client):
    data = tables.encode_request({"columns": {"period": [41.6], "k1": [38.2], "k2": [51.7], "eccentricity": [0.3]}},
                                 tables.CSV)
    for bad in ("{not json", "[1, 2]"):
        r = client.post("/v1/batch/sb2", data=data, content_type=tables.CSV, query_string={"options": bad})
        assert r.status_code == 400 and "options" in r.get_json()["errors"]
    r = post_table(client, "sb2", data, tables.CSV, {"units": {"a_sin_i": "km"}}, accept="application/json")
    assert r.get_json()["columns"]["a_sin_i"]["unit"] == "km"
    r = post_table(client, "sb2", data, tables.CSV, {"uncertainty": {"method": "guess"}})
    assert r.status_code == 422
    r = client.post("/v1/batch/sb2", json={"columns": {"period": [1.0]}}, query_string={"options": "{}"})
    assert r.status_code == 400


def test_isotropic_inclination_and_choices_travel_as_strings(client):
    # an isotropic inclination for every system, and a choice column
    t = pa.table({"period": [41.6, 50.0], "k1": [38.2, 40.0], "k2": [51.7, 60.0], "eccentricity": [0.3, 0.1],
                  "inclination": ["isotropic", "isotropic"]})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, t.schema) as w:
        w.write_table(t)
    mc = {"uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 3}}
    r = post_table(client, "sb2", sink.getvalue().to_pybytes(), tables.ARROW, mc, accept="application/json")
    reference = json_answer(client, "sb2", {"period": [41.6, 50.0], "k1": [38.2, 40.0], "k2": [51.7, 60.0],
                                            "eccentricity": [0.3, 0.1], "inclination": "isotropic"}, mc)
    assert_same_answer({**r.get_json()}, reference)
    csv = b"flux_density,frequency,distance,vinf,wind_type\n1.8,8.4,2.1,1700,wn\n1.8,8.4,2.1,1700,oops\n"
    answer = tables.decode_answer(post_table(client, "mass-loss-radio", csv, tables.CSV).data, tables.CSV)
    assert [e["index"] for e in answer["errors"]] == [1] and "wind_type" in answer["errors"][0]["detail"]


def test_spreadsheet_csv_and_odd_columns(client):
    # a byte order mark (spreadsheets write one), a sigma column with its own unit in the header
    csv = "\ufeffperiod,period_sigma[h],k1,k2,eccentricity\n41.6,0.48,38.2,51.7,0.31\n".encode("utf-8")
    r = post_table(client, "sb2", csv, tables.CSV, accept="application/json")
    assert r.status_code == 200, r.get_json()
    reference = json_answer(client, "sb2", {"period": {"value": [41.6], "sigma": [0.02]}, "k1": [38.2],
                                            "k2": [51.7], "eccentricity": [0.31]}, {})
    # 0.48 h = 0.02 d exactly in decimal, not in binary: the same to rounding
    np.testing.assert_allclose(r.get_json()["columns"]["m1_sin3i"]["sigma"],
                               reference["columns"]["m1_sin3i"]["sigma"], rtol=1e-12)
    # booleans are not numbers (as in JSON): that system's error, in place
    t = pa.table({"period": [41.6, 41.6], "k1": [38.2, 38.2], "k2": [51.7, 51.7], "eccentricity": [0.3, 0.3],
                  "inclination": pa.array([True, None])})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, t.schema) as w:
        w.write_table(t)
    answer = tables.decode_answer(post_table(client, "sb2", sink.getvalue().to_pybytes(), tables.ARROW).data,
                                  tables.ARROW)
    assert [e["index"] for e in answer["errors"]] == [0] and "inclination" in answer["errors"][0]["detail"]
    # no rows at all
    r = post_table(client, "sb2", b"period,k1,k2,eccentricity\n", tables.CSV)
    assert r.status_code == 422


# ----------------------------------------------------------------------------- keep: the caller's own columns

KEPT_CSV = ("name,hip,period,period_sigma,k1,k2,eccentricity\n"
            "Fictional A,101,12.3,0.01,50,70,0.2\n"
            "Fictional B,,40,0.1,30,,0.1\n"           # k2 missing: answered with an error, still named
            "Fictional C,103,7.5,0.02,80,95,0.0\n")


@pytest.mark.parametrize("fmt", FORMATS)
def test_keep_carries_the_callers_columns_into_the_answer(client, fmt):
    """A catalogue's name and number come back first, as sent (a whole number stays one), beside the
    outputs of the same system, a failed system included; the numbers are those of the same table
    sent without them."""
    source = Table.read(KEPT_CSV, format="ascii.csv")
    without = source.copy()
    without.remove_columns(["name", "hip"])
    bodies = {}
    for key, table in (("kept", source), ("bare", without)):
        if fmt == tables.ARROW:
            arrow = pa.Table.from_pandas(table.to_pandas(), preserve_index=False)
            sink = pa.BufferOutputStream()
            with pa.ipc.new_stream(sink, arrow.schema) as writer:
                writer.write_table(arrow)
            bodies[key] = sink.getvalue().to_pybytes()
        else:
            out = io.StringIO()
            table.write(out, format="ascii.ecsv" if fmt == tables.ECSV else "ascii.csv")
            bodies[key] = out.getvalue().encode()
    kept = client.post("/v1/batch/sb2?keep=name,hip", data=bodies["kept"], content_type=fmt, headers={"Accept": fmt})
    bare = client.post("/v1/batch/sb2", data=bodies["bare"], content_type=fmt, headers={"Accept": fmt})
    assert kept.status_code == 200 and bare.status_code == 200, kept.get_data(as_text=True)[:300]
    got, ref = tables.decode_answer(kept.get_data(), fmt), tables.decode_answer(bare.get_data(), fmt)
    if fmt == tables.ARROW:
        answer = pa.ipc.open_stream(kept.get_data()).read_all()
        assert answer.schema.names[:2] == ["name", "hip"]
        assert answer.column("name").to_pylist() == ["Fictional A", "Fictional B", "Fictional C"]
        assert pa.types.is_integer(answer.column("hip").type) or pa.types.is_floating(answer.column("hip").type)
        hips = answer.column("hip").to_pylist()
    else:
        answer = Table.read(kept.get_data(as_text=True), format="ascii.ecsv" if fmt == tables.ECSV else "ascii.csv")
        assert answer.colnames[:2] == ["name", "hip"]
        assert list(answer["name"]) == ["Fictional A", "Fictional B", "Fictional C"]
        assert answer["hip"].dtype.kind == "i"                     # 101, not 101.0
        hips = np.ma.filled(answer["hip"].astype(float), np.nan).tolist()
    assert hips[0] == 101 and hips[2] == 103 and (hips[1] is None or math.isnan(hips[1]))
    assert got["errors"] == ref["errors"] and [e["index"] for e in got["errors"]] == [1]
    for name, entry in ref["columns"].items():
        for key, values in entry.items():
            if key != "unit":
                np.testing.assert_array_equal(got["columns"][name][key], values)


def test_keep_in_a_json_answer_and_its_refusals(client):
    answer = client.post("/v1/batch/sb2?keep=name,hip", data=KEPT_CSV, content_type="text/csv",
                         headers={"Accept": "application/json"})
    assert answer.status_code == 200
    assert answer.get_json()["kept"] == {"name": ["Fictional A", "Fictional B", "Fictional C"], "hip": [101, None, 103]}
    refused = client.post("/v1/batch/sb2", data=KEPT_CSV, content_type="text/csv")
    assert refused.status_code == 422 and set(refused.get_json()["errors"]) == {"name", "hip"}
    assert "keep" in refused.get_json()["errors"]["name"][0]             # the way out is named
    for keep, why in (("nam", "no column 'nam'"), ("period", "an input"), ("m1_sigma", "a column of the answer"),
                      ("error", "a column of the answer")):
        r = client.post(f"/v1/batch/sb2?keep=name,hip,{keep}", data=KEPT_CSV, content_type="text/csv")
        assert r.status_code == 422 and why in r.get_json()["errors"]["keep"][0], (keep, r.get_json())
    r = client.post("/v1/batch/sb2?keep=name", json={"columns": {"period": [1.0]}})
    assert r.status_code == 400 and "keep" in r.get_json()["errors"]


def test_a_missing_value_with_its_sigma_given_is_called_missing(client):
    """An empty cell (a masked ECSV entry, an Arrow null) under a sigma that is given: the system's
    error says the value is missing, not that it is no number."""
    table = Table({"period": [12.3, 12.3], "k1": [50.0, 50.0], "k2": MaskedColumn([0.0, 70.0], mask=[True, False]),
                   "k2_sigma": [0.5, 0.5], "eccentricity": [0.2, 0.2]})
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    answer = client.post("/v1/batch/sb2", data=out.getvalue(), content_type="text/csv",
                         headers={"Accept": "application/json"}).get_json()
    assert [e["index"] for e in answer["errors"]] == [0]
    assert "missing" in answer["errors"][0]["errors"]["k2"][0]
    single = client.post("/v1/spectroscopic/sb2", json={"period": 12.3, "k1": 50, "k2": {"value": None, "sigma": 0.5},
                                                        "eccentricity": 0.2})
    assert single.status_code == 422 and "missing" in single.get_json()["errors"]["k2"][0]


# fictional systems of our demo scenario: random orientations for two, measured angles for the others
MIXED = [({"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31}, "isotropic", None),
         ({"period": 10.0, "k1": 20.0, "k2": 30.0, "eccentricity": 0.1}, "80", "2"),
         ({"period": 23.9, "k1": 44.0, "k2": 52.5, "eccentricity": 0.2}, "isotropic", None),
         ({"period": 7.31, "k1": 61.5, "k2": 70.2, "eccentricity": 0.05}, "65", None)]
MIXED_OPTIONS = {}           # linear by default: the isotropic systems are drawn, with the seed the answer states


def _mixed_tables(systems=MIXED) -> dict[str, bytes]:
    """The systems as a CSV, an ECSV (text column with a unit) and an Arrow table (string column)."""
    names = ("period", "k1", "k2", "eccentricity")
    csv = ",".join(names) + ",inclination,inclination_sigma\n" + "".join(
        ",".join(str(s[n]) for n in names) + f",{inc},{sigma or ''}\n" for s, inc, sigma in systems)
    t = Table({n: [s[n] for s, _, _ in systems] for n in names})
    t["inclination"] = [inc for _, inc, _ in systems]
    t["inclination"].unit = "deg"
    t["inclination_sigma"] = MaskedColumn([float(sigma or 0) for _, _, sigma in systems],
                                          mask=[sigma is None for _, _, sigma in systems], unit="deg")
    ecsv = io.StringIO()
    t.write(ecsv, format="ascii.ecsv")
    arrow = pa.table({**{n: [s[n] for s, _, _ in systems] for n in names},
                      "inclination": [inc for _, inc, _ in systems],
                      "inclination_sigma": pa.array([None if sigma is None else float(sigma) for _, _, sigma in systems],
                                                    type=pa.float64())})
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, arrow.schema) as w:
        w.write_table(arrow)
    return {tables.CSV: csv.encode(), tables.ECSV: ecsv.getvalue().encode(), tables.ARROW: sink.getvalue().to_pybytes()}


def _mixed_rows_reference(client, seed):
    """The JSON rows form of the same systems, and each system as a single request: the isotropic ones
    drawn with ``seed``, the batch's."""
    systems = []
    for s, inc, sigma in MIXED:
        systems.append({**s, "inclination": "isotropic", "uncertainty": {"method": "monte_carlo", "seed": seed}}
                       if inc == "isotropic" else {**s, "inclination": {"value": float(inc), "sigma": float(sigma or 0)}})
    r = client.post("/v1/batch/sb2", json={"systems": systems, **MIXED_OPTIONS})
    assert r.status_code == 200, r.get_json()
    singles = [client.post("/v1/spectroscopic/sb2", json={**body, **MIXED_OPTIONS}).get_json() for body in systems]
    return [row["results"] for row in r.get_json()["results"]], singles


@pytest.mark.parametrize("fmt", FORMATS)
def test_an_inclination_column_mixing_isotropic_and_angles_answers_each_row_as_it_says(client, fmt):
    data = _mixed_tables()[fmt]
    r = post_table(client, "sb2", data, fmt, MIXED_OPTIONS, accept="application/json")
    assert r.status_code == 200, r.get_json()
    got = r.get_json()
    rows, singles = _mixed_rows_reference(client, got["uncertainty"]["seed"])
    assert got["errors"] == [], got["errors"]
    assert got["uncertainty"]["method"] == ["monte_carlo", "linear", "monte_carlo", "linear"]
    for k, reference in enumerate(rows):
        for name, entry in reference.items():
            for key in ("value", "sigma", "low", "high"):
                # the same floats as the rows form of the same systems (null where a member is absent)
                assert same([got["columns"][name][key][k]], [entry.get(key)]), (k, name, key)
    for k in (1, 3):                            # the angles: linear, exactly as alone
        assert {n: got["columns"][n]["value"][k] for n in rows[k]} == \
            {n: e["value"] for n, e in singles[k]["results"].items()}
    assert got["columns"]["m1"]["value"][0] == singles[0]["results"]["m1"]["value"]    # the first draws as alone
    # draws of cos i uniform: the median M1 is M1 sin^3 i / (sqrt(3)/2)^3 (a standard result), within a few %
    m1s = got["columns"]["m1_sin3i"]["value"][2]
    assert got["columns"]["m1"]["value"][2] == pytest.approx(m1s / 0.75 ** 1.5, rel=0.1)
    # answered as a table: low and high empty for the linear systems, the method per system
    answer = tables.decode_answer(post_table(client, "sb2", data, fmt, MIXED_OPTIONS).data, fmt)
    assert np.isnan(answer["columns"]["m1"]["low"][[1, 3]]).all() and not np.isnan(answer["columns"]["m1"]["low"][[0, 2]]).any()
    assert list(answer["uncertainty"]["method"]) == ["monte_carlo", "linear", "monte_carlo", "linear"]


@pytest.mark.parametrize("fmt", FORMATS)
def test_a_cell_neither_a_number_nor_isotropic_is_that_systems_error_naming_the_column(client, fmt):
    data = _mixed_tables([*MIXED[:3], (MIXED[3][0], "edge-on", None)])[fmt]
    answer = tables.decode_answer(post_table(client, "sb2", data, fmt, MIXED_OPTIONS).data, fmt)
    assert [e["index"] for e in answer["errors"]] == [3]
    assert 'inclination: value must be a number or "isotropic"' in answer["errors"][0]["detail"]
    assert not np.isnan(answer["columns"]["m1"]["value"][:3]).any()


def test_an_ecsv_header_without_a_datatype_says_so(client):
    # the ECSV standard (astropy APE 6, from memory) gives every column a name and a datatype; one without says which key
    body = (b"# %ECSV 1.0\n# ---\n# datatype:\n# - {name: period, unit: d}\n# - {name: k1, datatype: float64}\n"
            b"period k1\n41.6 38.2\n")
    r = client.post("/v1/batch/sb2", data=body, content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 400 and "lacks the key 'datatype'" in r.get_json()["detail"]


@pytest.mark.parametrize("header, field, message", [
    ("period,period,k1,k2,eccentricity", "period", "the column appears twice"),
    ('"period",k1,k2,eccentricity,period ', "period", "the column appears twice"),
    ("period,,k1,k2,eccentricity", "_body", "column 2 of the header has no name"),
])
def test_a_csv_header_is_judged_as_written(client, header, field, message):
    # astropy would rename a second "period" to "period_1" and an empty name to "col2": names the caller
    # never wrote; the 422 names the column as the header has it, as for an Arrow table
    body = (header + "\n" + ",".join(["41.6", "3", "38.2", "51.7", "0.3"]) + "\n").encode()
    r = client.post("/v1/batch/sb2", data=body, content_type="text/csv", headers={"Accept": "application/json"})
    assert r.status_code == 422 and r.get_json()["errors"] == {field: [message]}


def test_an_error_cell_keeps_a_detail_that_says_more_than_the_fields(client):
    # a detail that only names the fields is left out of the cell (the field errors say it, and why); one that
    # says more stays before them
    from calcservice.columns import error_text
    assert error_text({"detail": "missing k2", "errors": {"k2": ["is required"]}}) == "k2: is required"
    kept = {"detail": "these inputs give no finite result: invalid value for period",
            "errors": {"period": ["gives no finite value of m1"]}}
    assert error_text(kept) == "these inputs give no finite result: invalid value for period; period: gives no " \
                               "finite value of m1"
    assert error_text({"detail": "the body is no table"}) == "the body is no table"
