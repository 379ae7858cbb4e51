"""The batch wire end to end: answers whose shape does not depend on which systems fail, CSV cells
that astropy's readers would take for numbers a lab never meant, the library's numpy columns.

The reference numbers are the service's own single requests and JSON columns answers (held against
outside sources by tests/test_batch.py and the physics tests); the readers are astropy's and
pyarrow's, outside the project."""

from __future__ import annotations

import io
import json

import numpy as np
import pyarrow as pa
import pytest

from calcservice import create_app, tables
from calcservice.core import Problem, compute, compute_batch
from calcservice.registry import calculations
from tests.test_tables import OPTIONS, example_batch, json_answer, post_table


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


def test_a_failed_system_keeps_the_outputs_of_the_optional_inputs_it_gave(client):
    # the only system giving primary_mass fails: m2_min is still a column, null there
    body = {"columns": {"period": [3.0, 4.0], "k1": [40.0, 50.0], "eccentricity": [0.1, 2.0],
                        "primary_mass": [None, 1.0]}}
    answer = client.post("/v1/batch/sb1", json=body).get_json()
    assert [e["index"] for e in answer["errors"]] == [1]
    assert answer["columns"]["m2_min"] == {"value": [None, None], "sigma": [None, None], "unit": "solMass"}
    text = "period,k1,eccentricity\n3,40,1.5\n4,50,2\n"
    r = post_table(client, "sb1", text.encode(), tables.CSV, {"units": {"a1_sin_i": "solRad"}})
    assert r.status_code == 200
    assert r.get_data(as_text=True).splitlines()[0] == (
        "mass_function[solMass],mass_function_sigma[solMass],a1_sin_i[solRad],a1_sin_i_sigma[solRad],"
        "error_status,error,warnings")
