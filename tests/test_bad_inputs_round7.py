"""Bad input, seventh round: a 404 or 405 without an errors member, a column of integers beyond a double
(a traceback of OverflowError from the client and the library), the client's column refusals that were
no InvalidInput, a (value, sigma) tuple with an astropy unit or of two Quantities (a TypeError and a
NotImplementedError), and the radial-velocity figure of a long orbit refused as though the caller's
times were out of range.  Each case gets a 4xx problem (or the client's InvalidInput) naming the field,
or the answer it should have had, never a traceback."""

from __future__ import annotations

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


@pytest.fixture(scope="module")
def local():
    from calcservice.client import Client
    return Client("local")


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
