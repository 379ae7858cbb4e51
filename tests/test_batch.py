"""Batch requests, rows and columns: the same answers as single requests, bad systems in place, limits."""

import copy
import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u

from calcservice import create_app
from calcservice.registry import calculations

from .conftest import post

OPTIONS = ("correlations", "uncertainty", "units", "time_format")
TOP = ("calculation", "count", "uncertainty", "provenance", "results")
WITH_EXAMPLE = [c for c in calculations().values() if c.example]


def _variants(calc, count=4):
    """The declaration's example and nearby systems: values nudged, sigmas scaled (some variants may
    leave the physical domain; then the single request's error is what the batch must give)."""
    out = []
    for k in range(count):
        body = copy.deepcopy(dict(calc.example))
        for name, v in body.items():
            if name in OPTIONS or calc.input(name).kind != "quantity" or calc.input(name).time:
                continue
            if isinstance(v, dict) and isinstance(v.get("value"), (int, float)) and not isinstance(v["value"], bool):
                v["value"] = v["value"] * (1.0 + 0.003 * k)
                for s in ("sigma", "sigma_minus", "sigma_plus"):
                    if s in v:
                        v[s] = v[s] * (1.0 + 0.5 * k)
            elif isinstance(v, (int, float)) and not isinstance(v, bool):
                body[name] = v * (1.0 + 0.003 * k)
        out.append(body)
    # two systems that must fail as single requests do: a value below its domain, a value of the wrong type
    quantity = [s for s in calc.inputs if s.kind == "quantity" and not s.time and s.name in calc.example]
    bounded = next((s for s in quantity if math.isfinite(s.domain.low)), None)
    if bounded is not None:
        out.insert(1, {**copy.deepcopy(dict(calc.example)), bounded.name: bounded.domain.low - 1.0})
    if quantity:
        out.insert(3, {**copy.deepcopy(dict(calc.example)), quantity[0].name: {"value": "many"}})
    return out


def _single(client, calc, body):
    status, answer = post(client, calc.path, body)
    return (answer if status == 200 else {"error": answer}), status


def _shared(calc):
    return {k: v for k, v in calc.example.items() if k in OPTIONS}


def _rows(calc, bodies):
    return [{k: v for k, v in b.items() if k not in OPTIONS} for b in bodies]


@pytest.mark.parametrize("calc", WITH_EXAMPLE, ids=lambda c: c.name)
def test_rows_match_single_requests(client, calc):
    bodies = _variants(calc)
    status, got = post(client, f"/v1/batch/{calc.name}", {"systems": _rows(calc, bodies), **_shared(calc),
                                                          "echo": True})
    assert status == 200, got
    assert list(got) == [*TOP[:3], *(["time_format"] if "time_format" in got else []), *TOP[3:]]
    assert got["count"] == len(bodies) == len(got["results"])
    assert got["provenance"] == _single(client, calc, calc.example)[0]["provenance"]
    for body, row in zip(bodies, got["results"]):
        want, _ = _single(client, calc, body)
        if "error" in want:
            assert row == want
            continue
        # a row carries what is its own; with the batch's, it is the single response
        assert set(row) <= {"results", "warnings", "uncertainty", "inputs"} and "provenance" not in row
        assert {**got["uncertainty"], **row.get("uncertainty", {})} == want["uncertainty"]
        assert row["inputs"] == want["inputs"] and row["warnings"] == want["warnings"]
        _assert_results_equal(row["results"], want["results"])


def test_rows_are_lean_and_echo_only_when_asked(client):
    rows = [SB2, {**SB2, "inclination": "isotropic"}]
    status, got = post(client, "/v1/batch/sb2", {"systems": rows})
    assert status == 200
    assert got["uncertainty"] == {"method": "linear"} and got["provenance"]["calculation"] == "sb2"
    assert set(got["results"][0]) == {"results", "warnings"}                 # linear like the batch
    own = got["results"][1]["uncertainty"]                                   # isotropic: its own method
    assert own["method"] == "monte_carlo" and set(own) == {"method", "samples", "seed", "rejected_fraction"}
    status, mc = post(client, "/v1/batch/sb2", {"systems": [SB2] * 2,
                                                "uncertainty": {"method": "monte_carlo", "samples": 500}})
    assert mc["uncertainty"]["method"] == "monte_carlo" and mc["uncertainty"]["samples"] == 500
    assert isinstance(mc["uncertainty"]["seed"], int)
    assert all(set(r["uncertainty"]) == {"rejected_fraction"} for r in mc["results"])
    status, bad = post(client, "/v1/batch/sb2", {"systems": [SB2], "echo": "yes"})
    assert status == 422 and "echo" in bad["errors"]


@pytest.mark.parametrize("options, field", [
    ({"uncertainty": {"samples": 0}}, "uncertainty.samples"),
    ({"uncertainty": {"method": "monte_carlo", "samples": -3}}, "uncertainty.samples"),
    ({"correlations": [{"between": ["k1", "nothing"], "rho": 0.3}]}, "correlations.0.between"),
    ({"correlations": [{"between": ["k1", "k2"], "rho": 0.3}, {"between": ["k2", "k1"], "rho": 0.2}]},
     "correlations.1.between"),
    ({"correlations": [{"between": ["k1", "k2"], "rho": 0.99}, {"between": ["k2", "period"], "rho": 0.99},
                       {"between": ["k1", "period"], "rho": -0.99}]}, "correlations"),
    ({"units": {"m1": "km/s"}}, "units.m1"),
    ({"time_format": "gregorian"}, "time_format"),
])
@pytest.mark.parametrize("shape", ["systems", "columns"])
def test_a_bad_batch_wide_option_refuses_the_whole_batch(client, options, field, shape):
    # an option of the whole batch is the batch's error (422), never an error in every row
    body = {"systems": [SB2] * 2} if shape == "systems" else \
        {"columns": {"period": [41.6, 12.0], "k1": 38.2, "k2": 51.7, "eccentricity": 0.3}}
    if field == "time_format":
        status, got = post(client, "/v1/batch/ephemeris", {"columns": {
            "period": 100.0, "eccentricity": 0.1, "omega": 30.0, "t_periastron": 2460000.0, "k1": 20.0,
            "times": [2460001.0]}, **options})
    else:
        status, got = post(client, "/v1/batch/sb2", {**body, **options})
    assert status == 422, got
    assert field in got["errors"], got["errors"]


def _assert_results_equal(a, b):
    assert a.keys() == b.keys()
    for name in a:
        if isinstance(a[name], dict) and "value" in a[name]:
            for key in a[name]:
                x, y = a[name][key], b[name][key]
                if isinstance(x, (float, list)) and not isinstance(x, bool):
                    np.testing.assert_allclose(np.array(x, dtype=float), np.array(y, dtype=float),
                                               rtol=1e-12, atol=0, err_msg=f"{name}.{key}")
                else:
                    assert x == y, f"{name}.{key}"
        elif name == "series":
            _assert_results_equal(a[name], b[name])
        else:
            assert a[name] == b[name], name


def _columns_of(calc, bodies):
    """The bodies' inputs as columns: value and sigma arrays per input (null where not given)."""
    cols = {}
    for spec in calc.inputs:
        entries = [b.get(spec.name) for b in bodies]
        if all(e is None for e in entries):
            continue
        if spec.kind == "series":
            cols[spec.name] = entries[0]
        elif spec.kind != "quantity" or all(not isinstance(e, dict) for e in entries):
            cols[spec.name] = entries
        else:
            entries = [e if isinstance(e, dict) or e is None else {"value": e} for e in entries]
            col = {"value": [None if e is None else e.get("value") for e in entries]}
            for key in ("sigma", "sigma_minus", "sigma_plus"):
                if any(e is not None and key in e for e in entries):
                    col[key] = [None if e is None else e.get(key) for e in entries]
            units = {e.get("unit") for e in entries if e is not None}
            if units - {None}:
                col["unit"] = units.pop()
            cols[spec.name] = col
    return cols


@pytest.mark.parametrize("calc", WITH_EXAMPLE, ids=lambda c: c.name)
def test_columns_match_single_requests(client, calc):
    bodies = _variants(calc)
    status, got = post(client, f"/v1/batch/{calc.name}", {"columns": _columns_of(calc, bodies), **_shared(calc)})
    assert status == 200, got
    assert got["count"] == len(bodies)
    errors = {e["index"]: e for e in got["errors"]}
    for i, body in enumerate(bodies):
        want, status = _single(client, calc, body)
        if "error" in want:
            assert {k: v for k, v in errors[i].items() if k != "index"} == want["error"]
            assert all(col["value"][i] is None for col in got["columns"].values() if isinstance(col, dict)
                       and "value" in col)
            continue
        assert i not in errors
        results = dict(want["results"])
        results.update(results.pop("series", {}))
        for name, entry in results.items():
            if isinstance(entry, dict) and "value" in entry and name in got["columns"]:
                col = got["columns"][name]
                assert col["unit"] == entry["unit"]
                for key in entry:
                    if key != "unit" and key in col:
                        np.testing.assert_allclose(np.array(col[key][i], dtype=float),
                                                   np.array(entry[key], dtype=float), rtol=1e-12, atol=0,
                                                   err_msg=f"{name}.{key}[{i}]")
            elif name in got["columns"]:
                assert got["columns"][name][i] == entry, name
        for w in want["warnings"]:
            assert any(w["code"] == x["code"] and i in x["rows"] for x in got["warnings"]), w


SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0}}


def test_a_bad_row_is_answered_in_place(client):
    rows = [SB2, {**SB2, "eccentricity": 1.2}, {**SB2, "k1": "fast"}, 7, {**SB2, "bogus": 1}, SB2]
    status, got = post(client, "/v1/batch/sb2", {"systems": rows})
    assert status == 200
    r = got["results"]
    assert "results" in r[0] and "results" in r[5]
    assert r[1]["error"]["status"] == 422 and "eccentricity" in r[1]["error"]["errors"]
    assert "k1" in r[2]["error"]["errors"]
    assert r[3]["error"]["errors"] == {"_body": ["must be a JSON object"]}
    assert r[4]["error"]["errors"] == {"bogus": ["unknown field"]}
    assert r[0] == r[5]
    assert got["count"] == 6 and "provenance" in got and all("provenance" not in row for row in r)


def test_a_bad_row_in_columns_is_listed_with_its_index_and_null_everywhere(client):
    cols = {"period": {"value": [41.6, 10.0, 41.6], "sigma": 0.02}, "k1": [38.2, 30.0, 38.2],
            "k2": [51.7, 40.0, -51.7], "eccentricity": [0.31, 1.5, 0.31]}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols})
    assert status == 200
    assert [e["index"] for e in got["errors"]] == [1, 2]
    assert "eccentricity" in got["errors"][0]["errors"] and "k2" in got["errors"][1]["errors"]
    assert got["errors"][0]["status"] == 422
    for col in got["columns"].values():
        assert col["value"][0] is not None and col["value"][1] is None and col["value"][2] is None
    # Hilditch (2001) eq. 2.52, M1 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2 / (2 pi G), with astropy
    # constants (G M_sun from IAU 2015 B3 via astropy's GM_sun)
    p, k1, k2, e = 41.6 * u.d, 38.2 * u.km / u.s, 51.7 * u.km / u.s, 0.31
    m1 = (p * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k2 / (2 * math.pi * const.GM_sun)).decompose().value
    assert got["columns"]["m1_sin3i"]["value"][0] == pytest.approx(m1, rel=1e-9)


def test_asymmetric_columns_and_a_unit_per_column(client):
    cols = {"period": {"value": [41.6 / 365.25, 12.0 / 365.25], "sigma": [0.02 / 365.25, 0.01 / 365.25],
                       "unit": "yr"},
            "k1": {"value": [38.2, 20.0], "sigma": [0.4, 0.3]},
            "k2": {"value": [51.7, 25.0], "sigma": [0.6, 0.3]},
            "eccentricity": {"value": [0.31, 0.05], "sigma_minus": [0.01, 0.02], "sigma_plus": [0.02, 0.03]},
            "inclination": {"value": [71.0, 80.0], "sigma": [2.0, 1.0], "unit": "deg"}}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols, "units": {"m1": "kg"}})
    assert status == 200 and not got["errors"]
    for i in range(2):
        single = {"period": {"value": cols["period"]["value"][i] * 365.25, "sigma": cols["period"]["sigma"][i] * 365.25},
                  "k1": {"value": cols["k1"]["value"][i], "sigma": cols["k1"]["sigma"][i]},
                  "k2": {"value": cols["k2"]["value"][i], "sigma": cols["k2"]["sigma"][i]},
                  "eccentricity": {"value": cols["eccentricity"]["value"][i],
                                   "sigma_minus": cols["eccentricity"]["sigma_minus"][i],
                                   "sigma_plus": cols["eccentricity"]["sigma_plus"][i]},
                  "inclination": {"value": cols["inclination"]["value"][i], "sigma": cols["inclination"]["sigma"][i]},
                  "units": {"m1": "kg"}}
        _, want = post(client, "/v1/spectroscopic/sb2", single)
        assert got["columns"]["m1"]["unit"] == "kg" == want["results"]["m1"]["unit"]
        for name in ("m1", "m2", "semimajor_axis"):
            for key in ("value", "sigma"):
                assert got["columns"][name][key][i] == pytest.approx(want["results"][name][key], rel=1e-12)
        assert any(w["code"] == "asymmetric_linearised" and i in w["rows"] for w in got["warnings"])


def test_null_in_a_column_leaves_the_input_out_for_that_system(client):
    cols = {"period": [41.6, 41.6], "k1": [38.2, 38.2], "k2": [51.7, 51.7], "eccentricity": [0.31, 0.31],
            "inclination": [71.0, None]}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols})
    assert status == 200 and not got["errors"]
    assert got["columns"]["m1"]["value"][0] > 0 and got["columns"]["m1"]["value"][1] is None
    assert got["columns"]["m1_sin3i"]["value"][0] == got["columns"]["m1_sin3i"]["value"][1]


def test_one_engine_call_per_shape(client, monkeypatch):
    from calcservice.core import batch
    calls = []
    real = batch.run

    def counting(parsed):
        calls.append(max(len(q.value) for q in parsed.quantities.values()))
        return real(parsed)

    monkeypatch.setattr(batch, "run", counting)
    no_i = {k: v for k, v in SB2.items() if k != "inclination"}
    rows = [SB2] * 50 + [no_i] * 30 + [{**SB2, "period": {"value": "41.6"}}] + [SB2] * 20
    status, got = post(client, "/v1/batch/sb2", {"systems": rows})
    assert status == 200
    assert sorted(calls) == [30, 70]
    assert "error" in got["results"][80]


def test_monte_carlo_batch_is_seeded_once_and_reproducible(client):
    body = {"systems": [SB2, {**SB2, "inclination": "isotropic"}, SB2], "uncertainty": {"method": "monte_carlo",
                                                                                         "samples": 2000}}
    status, a = post(client, "/v1/batch/sb2", body)
    assert status == 200
    assert all("seed" not in r["uncertainty"] for r in a["results"])      # the batch's one seed, at the top
    _, b = post(client, "/v1/batch/sb2", {**body, "uncertainty": {**body["uncertainty"], "seed": a["uncertainty"]["seed"]}})
    assert a["results"] == b["results"]
    # small errors: Monte Carlo agrees with linear propagation (common practice: ~1/sqrt(samples) noise)
    _, lin = post(client, "/v1/spectroscopic/sb2", SB2)
    assert a["results"][0]["results"]["m1"]["value"] == pytest.approx(lin["results"]["m1"]["value"], rel=0.01)


@pytest.fixture()
def small_limits_client():
    return create_app({"TESTING": True, "MAX_BATCH_ROWS": 5, "MAX_BATCH_DRAWS": 10_000}).test_client()


def test_too_many_rows_is_413(small_limits_client):
    status, got = post(small_limits_client, "/v1/batch/sb2", {"systems": [SB2] * 6})
    assert status == 413 and "systems" in got["errors"]
    assert got["limit"] == {"name": "max_batch_rows", "value": 5} and "max_batch_rows" in got["detail"]
    status, got = post(small_limits_client, "/v1/batch/sb2",
                       {"columns": {"period": [41.6] * 6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.3}})
    assert status == 413


def test_monte_carlo_over_the_draw_budget_is_413_before_computing(small_limits_client, monkeypatch):
    from calcservice.core import batch
    monkeypatch.setattr(batch, "run", lambda *a: pytest.fail("computed before checking the budget"))
    body = {"systems": [SB2] * 3, "uncertainty": {"method": "monte_carlo", "samples": 4000}}
    status, got = post(small_limits_client, "/v1/batch/sb2", body)
    assert status == 413 and "uncertainty.samples" in got["errors"]
    assert got["limit"] == {"name": "max_batch_draws", "value": 10_000} and "max_batch_draws" in got["detail"]
    cols = {"period": {"value": [41.6] * 3, "sigma": 0.1}, "k1": 38.2, "k2": 51.7, "eccentricity": 0.3,
            "inclination": "isotropic"}
    status, got = post(small_limits_client, "/v1/batch/sb2", {"columns": cols})   # isotropic: Monte Carlo
    assert status == 413


def test_malformed_batches(client):
    assert post(client, "/v1/batch/no-such-thing", {"systems": [SB2]})[0] == 404
    assert post(client, "/v1/batch/sb2", {"systems": []})[0] == 422
    assert post(client, "/v1/batch/sb2", {"systems": SB2})[0] == 422
    assert post(client, "/v1/batch/sb2", {"systems": [SB2], "columns": {"period": 1}})[0] == 422
    assert post(client, "/v1/batch/sb2", {"rows": [SB2]})[0] == 422
    status, got = post(client, "/v1/batch/sb2", {"columns": {"period": [1.0, 2.0], "k1": [1.0, 2.0, 3.0],
                                                             "k2": 3.0, "eccentricity": 0.1}})
    assert status == 422 and "columns.k1" in got["errors"]
    status, got = post(client, "/v1/batch/sb2", {"columns": {"period": {"value": [1.0], "unit": "furlong"},
                                                             "k1": 1.0, "k2": 3.0, "eccentricity": 0.1}})
    assert status == 422 and "columns.period.unit" in got["errors"]
    status, got = post(client, "/v1/batch/sb2", {"columns": {"period": [1.0], "k1": 1.0, "k2": 3.0}})
    assert status == 422 and "columns.eccentricity" in got["errors"]
    status, got = post(client, "/v1/batch/sb2", {"systems": [SB2], "uncertainty": {"method": "guess"}})
    assert status == 422 and "uncertainty.method" in got["errors"]
    assert client.get("/v1/batch/sb2").status_code == 405


def test_library_use_without_http():
    from calcservice.core import compute_batch
    out = compute_batch("sb1", {"columns": {"period": [10.0, 20.0], "k1": 30.0, "eccentricity": 0.0}})
    # Hilditch (2001) eq. 2.51: f(M) = P K^3 (1 - e^2)^{3/2} / (2 pi G), with astropy constants
    want = (10 * u.d * (30 * u.km / u.s) ** 3 / (2 * math.pi * const.GM_sun)).decompose().value
    assert out["columns"]["mass_function"]["value"][0] == pytest.approx(want, rel=1e-9)
    assert out["columns"]["mass_function"]["value"][1] == pytest.approx(2 * want, rel=1e-9)


def test_a_system_with_its_own_options_is_answered_as_its_own_request(client):
    own = {**SB2, "uncertainty": {"method": "monte_carlo", "samples": 3000, "seed": 11}, "units": {"m1": "kg"}}
    status, got = post(client, "/v1/batch/sb2", {"systems": [SB2, own], "units": {"m2": "kg"}})
    assert status == 200
    _, shared = post(client, "/v1/spectroscopic/sb2", {**SB2, "units": {"m2": "kg"}})
    _, alone = post(client, "/v1/spectroscopic/sb2", own)
    assert got["results"][0]["results"]["m2"]["unit"] == "kg"
    # the system's own members replace the shared ones whole (its units: m1 in kg, m2 in solMass)
    assert got["results"][1]["results"]["m2"]["unit"] == "solMass"
    assert {**got["results"][1], "uncertainty": {**got["uncertainty"], **got["results"][1]["uncertainty"]}} == \
        {k: alone[k] for k in ("results", "warnings", "uncertainty")}
    _assert_results_equal(got["results"][0]["results"], shared["results"])


def test_samples_in_a_column_are_one_list_of_draws_per_system(client):
    rng = np.random.default_rng(4)
    draws = [list(41.6 + 0.02 * rng.standard_normal(500)), list(12.3 + 0.01 * rng.standard_normal(500))]
    cols = {"period": {"samples": draws}, "k1": [38.2, 20.0], "k2": [51.7, 25.0], "eccentricity": 0.2}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols})
    assert status == 200 and not got["errors"] and got["uncertainty"]["method"] == "monte_carlo"
    for i in range(2):
        one = {"period": {"samples": draws[i]}, "k1": cols["k1"][i], "k2": cols["k2"][i], "eccentricity": 0.2}
        _, want = post(client, "/v1/spectroscopic/sb2", one)
        for key in ("value", "sigma", "low", "high"):
            # the user's draws alone (every other input exact): no random numbers, the same answer
            assert got["columns"]["m1_sin3i"][key][i] == pytest.approx(want["results"]["m1_sin3i"][key], rel=1e-12)


def _reference_floats(items):
    # reference: Python's own float() entry by entry (None: not given; a bool, string, list or
    # object, or an integer beyond a double: not a number)
    out, bad = [], []
    for v in items:
        if v is None:
            out.append(float("nan")); bad.append(False)
        elif type(v) in (int, float):
            try:
                out.append(float(v)); bad.append(False)
            except OverflowError:
                out.append(float("nan")); bad.append(True)
        else:
            out.append(float("nan")); bad.append(True)
    return out, bad


@pytest.mark.parametrize("items", [
    [1.5, 2, 3.25], [1, 2, 3], [True, 1.0], [1.0, False], [False, True], [None, 1.0], [None], ["1.5", 2.0],
    [2**64, 1.5], [10**400, 1.0], [[1.0], 2.0], [{"a": 1}], [0.0, 1.0, 1], [2**63, 1], [2**53 + 1, 0.5],
    [-0.0, 1e308, -1e-320], [0, 1, True, 0.0],
])
def test_columns_read_numbers_as_python_float_does(items):
    from calcservice.core.batch import number_column
    values, bad = number_column(items)
    want, want_bad = _reference_floats(items)
    assert bad.tolist() == want_bad
    assert np.array_equal(values, np.array(want), equal_nan=True)
    assert [math.copysign(1, v) for v in values.tolist() if v == 0] == [math.copysign(1, v) for v in want if v == 0]


def test_columnar_warnings_name_their_fields_and_rows(client):
    # asymmetric errors in k1 for system 0 and in eccentricity for system 1: one warning per field
    cols = {"period": [41.6, 12.0], "k2": 51.7,
            "k1": {"value": [38.2, 30.0], "sigma_minus": [0.4, 0.3], "sigma_plus": [0.8, 0.3]},
            "eccentricity": {"value": [0.31, 0.2], "sigma_minus": [0.01, 0.01], "sigma_plus": [0.01, 0.03]}}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols})
    assert status == 200
    asymmetric = {tuple(w["fields"]): w for w in got["warnings"] if w["code"] == "asymmetric_linearised"}
    assert asymmetric[("k1",)]["rows"] == [0] and asymmetric[("eccentricity",)]["rows"] == [1]
    assert all("{" not in w["message"] for w in got["warnings"])
    assert asymmetric[("k1",)]["message"].startswith("k1:")


# ----------------------------------------------------------------------------- isotropic beside numbers

# fictional systems of our demo scenario, exact elements: only the inclination is uncertain
ISO_SYSTEMS = {"period": [41.6, 10.0, 23.9, 7.31], "k1": [38.2, 20.0, 44.0, 61.5], "k2": [51.7, 30.0, 52.5, 70.2],
               "eccentricity": [0.31, 0.1, 0.2, 0.05]}
MC = {"method": "monte_carlo", "samples": 4000, "seed": 7}


def _sin3(cos_i):
    return (1.0 - cos_i**2) ** 1.5


def _system(k, inclination):
    return {**{name: v[k] for name, v in ISO_SYSTEMS.items()}, **({} if inclination is None else
                                                                   {"inclination": inclination})}


def _rows_reference(client, inclinations, uncertainty, own=None):
    """The rows form and the single requests of the same systems, one answer per system; ``own`` gives
    systems their own uncertainty options (by index)."""
    systems = [_system(k, inc) for k, inc in enumerate(inclinations)]
    for k, options in (own or {}).items():
        systems[k]["uncertainty"] = options
    shared = {} if uncertainty is None else {"uncertainty": uncertainty}
    status, rows = post(client, "/v1/batch/sb2", {"systems": systems, **shared})
    assert status == 200, rows
    singles = []
    for body in systems:
        status, single = post(client, "/v1/spectroscopic/sb2", {**shared, **body})
        assert status == 200, single
        singles.append(single)
    return rows["results"], singles


def _column_system(got, k):
    """System k of a columns answer, as a single answer's results (null members left out)."""
    out = {}
    for name, entry in got["columns"].items():
        if entry["value"][k] is not None:
            out[name] = {key: v[k] for key, v in entry.items() if key != "unit" and v[k] is not None}
    return out


@pytest.mark.parametrize("second", [80, None, {"value": 80, "sigma": 2}])
def test_isotropic_beside_a_number_in_a_columns_batch_answers_each_system_by_its_own_method(client, second):
    # the audit's case: a 500 before (the linear system has no low/high to scatter)
    cols = {name: v[:2] for name, v in ISO_SYSTEMS.items()}
    # linear by default (a seed would ask for Monte Carlo for all): the isotropic system is drawn with
    # the batch's seed, which the answer states
    status, got = post(client, "/v1/batch/sb2", {"columns": {**cols, "inclination": ["isotropic", second]}})
    assert status == 200, got
    assert got["errors"] == []
    assert got["uncertainty"]["method"] == ["monte_carlo", "linear"]
    assert got["uncertainty"]["rejected_fraction"] == [0.0, None]
    drawn = {"method": "monte_carlo", "seed": got["uncertainty"]["seed"]}
    rows, singles = _rows_reference(client, ["isotropic", second], None, own={0: drawn})
    for k in range(2):
        system = _column_system(got, k)
        # the single request of the same system (the one isotropic system draws as it would alone)
        assert system == {name: {key: v for key, v in entry.items() if key != "unit" and v is not None}
                          for name, entry in singles[k]["results"].items()}, k
        assert rows[k]["results"] == singles[k]["results"], k
    assert rows[0]["uncertainty"]["method"] == "monte_carlo" and "uncertainty" not in rows[1]
    assert got["columns"]["m1"]["low"][1] is None and got["columns"]["m1"]["high"][1] is None
    switched = [w for w in got["warnings"] if w["code"] == "method_switched"]
    assert [w["rows"] for w in switched] == [[0]]


def test_several_isotropic_systems_among_numbers_against_the_analytic_distribution(client):
    # cos i uniform on [0, 1] (isotropic orientations): the median of M1 is M1 sin^3 i / sin^3 i at cos i = 1/2,
    # the 68.27 % interval M1 sin^3 i / sin^3 i at cos i = 0.158655 and 0.841345 (a standard result)
    inclinations = ["isotropic", 80.0, "isotropic", {"value": 70.0, "sigma": 2.0}]
    cols = {**ISO_SYSTEMS, "inclination": inclinations}
    status, got = post(client, "/v1/batch/sb2", {"columns": cols, "uncertainty": MC})
    assert status == 200, got
    assert got["uncertainty"]["method"] == "monte_carlo" and got["uncertainty"]["samples"] == 4000
    rows, singles = _rows_reference(client, inclinations, MC)
    for k in (1, 3):                           # the angles: Monte Carlo as asked, one group, seeded alike
        assert rows[k]["results"]["m1"]["value"] == got["columns"]["m1"]["value"][k]
    for k in (0, 2):
        m1 = {key: got["columns"]["m1"][key][k] for key in ("value", "low", "high")}
        assert m1 == {key: rows[k]["results"]["m1"][key] for key in m1}          # rows and columns: the same group
        m1s = got["columns"]["m1_sin3i"]["value"][k]
        # 4000 draws: the median's cos i is within 0.5/sqrt(4000) = 0.008 (1 sigma), about 1.6 % in sin^3 i
        assert m1["value"] == pytest.approx(m1s / _sin3(0.5), rel=0.08)
        assert m1["low"] == pytest.approx(m1s / _sin3(0.158655), rel=0.08)
        assert m1["high"] == pytest.approx(m1s / _sin3(0.841345), rel=0.15)
        assert m1["value"] == pytest.approx(singles[k]["results"]["m1"]["value"], rel=0.1)
    # the first isotropic system draws what it would alone
    assert got["columns"]["m1"]["value"][0] == singles[0]["results"]["m1"]["value"]


def test_isotropic_in_a_value_array_with_sigmas_and_a_unit(client):
    # the form a table's text column arrives in: value array with "isotropic" entries, a sigma array beside
    cols = {name: v[:2] for name, v in ISO_SYSTEMS.items()}
    list_form = {**cols, "inclination": ["isotropic", {"value": 80.0, "sigma": 2.0}]}
    status, reference = post(client, "/v1/batch/sb2", {"columns": list_form, "uncertainty": {"seed": 3}})
    assert status == 200, reference
    for inclination in ({"value": ["isotropic", 80.0], "sigma": [None, 2.0]},
                        {"value": ["isotropic", 80.0], "sigma": [0.0, 2.0]},          # a float column's 0: no sigma
                        {"value": ["isotropic", math.radians(80.0)], "sigma": [None, math.radians(2.0)],
                         "unit": "rad"}):
        status, got = post(client, "/v1/batch/sb2", {"columns": {**cols, "inclination": inclination},
                                                     "uncertainty": {"seed": 3}})
        assert status == 200, got
        assert got["errors"] == [] and got["uncertainty"] == reference["uncertainty"]
        for name, entry in reference["columns"].items():
            for key in ("value", "low", "high"):
                x, y = (np.array(e[key], dtype=float) for e in (got["columns"][name], entry))     # null: NaN
                np.testing.assert_allclose(x, y, rtol=1e-12, err_msg=f"{name} {key}")


def test_a_bad_entry_beside_isotropic_says_what_the_column_may_hold(client):
    inclination = {"value": ["isotropic", "edge-on", "isotropic", "isotropic"], "sigma": [None, None, 1.0, "wide"]}
    status, got = post(client, "/v1/batch/sb2", {"columns": {**ISO_SYSTEMS, "inclination": inclination}})
    assert status == 200, got
    errors = {e["index"]: e["errors"] for e in got["errors"]}
    assert set(errors) == {1, 2, 3}
    assert errors[1] == {"inclination": ['value must be a number or "isotropic"']}
    assert "no sigma" in errors[2]["inclination"][0] and "no sigma" in errors[3]["inclination"][0]
    assert got["columns"]["m1"]["value"][0] is not None and got["columns"]["m1"]["value"][1] is None
