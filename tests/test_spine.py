"""The registry is the spine: a new calculation is one physics function and one declaration, and its
endpoint, request schema, spec entry, listing, batch support (rows, columns, CSV), report and linear
uncertainty follow from them with no other change.

A toy declaration is registered in a separate interpreter (the registry and the routes are built once per
process, and the other tests hold the spec to the shipped calculations), which reports what it was
answered; the numbers are held here against astropy and ``uncertainties``."""

from __future__ import annotations

import json
import math
import subprocess
import sys

import pytest
from astropy import units as u
from uncertainties import ufloat

SCRIPT = r'''
import json, sys
import numpy as np
from calcservice.registry import POSITIVE, Calculation, Input, Output, calculations, register

AU_KM_PER_DAY_IN_KM_S = 149597870.7 / 86400.0      # IAU 2012 au, SI day


def circular_speed(period, semimajor_axis, **_):
    """Mean orbital speed of a circular orbit, v = 2 pi a / P (Kepler; any mechanics text)."""
    return {"speed": 2.0 * np.pi * semimajor_axis / period * AU_KM_PER_DAY_IN_KM_S}


calculations()          # the shipped declarations first, as an import of calcservice.calculations does
register(Calculation(
    name="circular-speed", path="/v1/test/circular-speed", title="Circular orbital speed",
    summary="The mean speed of a circular orbit from its period and radius.",
    inputs=(Input("period", "d", "orbital period", POSITIVE, example=365.25),
            Input("semimajor_axis", "au", "orbit radius", POSITIVE, example=1.0)),
    outputs=(Output("speed", "km/s", "mean orbital speed", "v = 2 pi a / P"),),
    function=circular_speed, references=("J. Kepler (1609), Astronomia nova",), constants=("au", "day"),
    example={"period": 365.25, "semimajor_axis": 1.0},
))

from calcservice import create_app                  # noqa: E402  (routes from the registry as it now is)

c = create_app().test_client()
body = {"period": {"value": 365.25, "sigma": 0.5}, "semimajor_axis": {"value": 1.0, "sigma": 0.01, "unit": "au"}}
out = {}
r = c.post("/v1/test/circular-speed", json=body)
out["single"] = [r.status_code, r.get_json()]
r = c.post("/v1/test/circular-speed", json={"period": 365.25, "semimajor_axis": -1.0})
out["bad"] = [r.status_code, r.get_json()]
listing = c.get("/v1/calculations").get_json()
out["listed"] = [x for x in listing["calculations"] if x["name"] == "circular-speed"]
out["spec"] = "/v1/test/circular-speed:" in c.get("/openapi.yaml").get_data(as_text=True)
r = c.post("/v1/batch/circular-speed", json={"systems": [body, {"period": 687.0, "semimajor_axis": 1.524}]})
out["rows"] = [r.status_code, r.get_json()]
r = c.post("/v1/batch/circular-speed", json={"columns": {"period": [365.25, 687.0], "semimajor_axis": [1.0, 1.524]}})
out["columns"] = [r.status_code, r.get_json()]
r = c.post("/v1/batch/circular-speed", data="period[yr],semimajor_axis\n1.0,1.0\n", content_type="text/csv",
           headers={"Accept": "text/csv"})
out["csv"] = [r.status_code, r.get_data(as_text=True)]
r = c.post("/v1/test/circular-speed?format=markdown", json=body)
out["report"] = [r.status_code, r.get_data(as_text=True)]
print(json.dumps(out))
'''


@pytest.fixture(scope="module")
def answered():
    done = subprocess.run([sys.executable, "-c", SCRIPT], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    return json.loads(done.stdout.strip().splitlines()[-1])


def speed(period_d, radius_au):
    # v = 2 pi a / P with astropy's au and day
    return (2 * math.pi * radius_au * u.au / (period_d * u.d)).to_value(u.km / u.s)


def test_the_endpoint_and_its_linear_sigma(answered):
    status, doc = answered["single"]
    assert status == 200
    v = doc["results"]["speed"]
    assert v["unit"] == "km/s" and v["value"] == pytest.approx(speed(365.25, 1.0), rel=1e-15)
    # the engine's numerical Jacobian against uncertainties' first-order propagation
    ref = 2 * math.pi * ufloat(1.0, 0.01) / ufloat(365.25, 0.5) * (u.au / u.d).to(u.km / u.s)
    assert v["sigma"] == pytest.approx(ref.std_dev, rel=1e-8)
    assert doc["provenance"]["references"] == ["J. Kepler (1609), Astronomia nova"]


def test_the_schema_listing_and_spec(answered):
    status, doc = answered["bad"]
    assert status == 422 and list(doc["errors"]) == ["semimajor_axis"]       # the domain, from the declaration
    (listed,) = answered["listed"]
    assert [i["name"] for i in listed["inputs"]] == ["period", "semimajor_axis"]
    assert answered["spec"]


def test_batches_in_every_form(answered):
    mars = speed(687.0, 1.524)
    status, rows = answered["rows"]
    assert status == 200 and rows["results"][1]["results"]["speed"]["value"] == pytest.approx(mars, rel=1e-15)
    status, columns = answered["columns"]
    assert status == 200 and columns["columns"]["speed"]["value"] == pytest.approx([speed(365.25, 1.0), mars],
                                                                                   rel=1e-15)
    status, text = answered["csv"]
    header, line = text.strip().splitlines()[:2]
    assert status == 200 and header.startswith("speed[km/s]")
    # a period of 1 Julian year (365.25 d, IAU) given in yr
    assert float(line.split(",")[0]) == pytest.approx(speed(365.25, 1.0), rel=1e-15)


def test_the_report(answered):
    status, text = answered["report"]
    assert status == 200
    assert "v = 2 pi a / P" in text and "Astronomia nova" in text and "`speed`" in text
