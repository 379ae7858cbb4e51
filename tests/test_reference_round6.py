"""Sixth round of independent reference computations: output and input units against astropy's own
conversion, batch answers (rows, columns, Arrow, CSV, ECSV) against the single request, Monte Carlo and
posterior samples against numpy applied to the documented draw model, and the linear output correlation and
variance budget against the `uncertainties` package.  Each check value comes from a computation written here
(astropy units and constants, numpy, scipy, `uncertainties`), never from calcservice's physics."""

from __future__ import annotations

import copy
import io
import json
import math

import numpy as np
import pyarrow as pa
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.table import Table
from scipy.special import ndtr, ndtri
from uncertainties import correlated_values, correlation_matrix, ufloat, umath

from calcservice import create_app
from calcservice.core import compute, compute_batch
from calcservice.registry import calculations

GM_SUN = const.GM_sun.si.value      # IAU 2015 Resolution B3 nominal GM_sun, m^3 s^-2 (astropy.constants)
AU = const.au.si.value              # IAU 2012 Resolution B2, m (astropy.constants)
G = const.G.si.value                # CODATA G as astropy gives it, m^3 kg^-1 s^-2
DAY = 86400.0                       # s (SI day)
ARROW, CSV, ECSV = "application/vnd.apache.arrow.stream", "text/csv", "text/x-ecsv"


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _sb2_reference(period, k1, k2, eccentricity, inclination):
    """Hilditch (2001), An Introduction to Close Binary Stars, ch. 2: M1,2 sin^3 i = (1 - e^2)^{3/2} (K1 + K2)^2
    K2,1 P / (2 pi G), a sin i = (1 - e^2)^{1/2} (K1 + K2) P / (2 pi); P in d, K in km/s, masses in solMass (with
    GM_sun), lengths in au.  Works on floats, numpy arrays and `uncertainties` numbers alike."""
    f = (1 - eccentricity ** 2) ** 1.5 * (k1 + k2) ** 2 * (period * DAY) * 1e9 / (2 * math.pi * GM_SUN)
    a_sin_i = (1 - eccentricity ** 2) ** 0.5 * (k1 + k2) * 1e3 * period * DAY / (2 * math.pi) / AU
    sin = umath.sin if hasattr(inclination, "std_dev") else np.sin
    sin_i = sin(inclination * math.pi / 180)
    return {"mass_ratio": k1 / k2, "m1_sin3i": f * k2, "m2_sin3i": f * k1, "a_sin_i": a_sin_i,
            "m1": f * k2 / sin_i ** 3, "m2": f * k1 / sin_i ** 3, "semimajor_axis": a_sin_i / sin_i}


# --------------------------------------------------------------------------- batch against the single request
def _flat(results: dict) -> dict:
    out = dict(results)
    out.update(out.pop("series", {}) or {})
    return out


def test_a_sigma_alone_is_the_sigma_in_a_batch_with_eight_or_more_uncertain_inputs(client):
    # The colliding-wind example has 9 uncertain inputs.  numpy's sum over the inputs' axis added them pairwise
    # in blocks of 8 where that axis was contiguous (one system) and one by one where it was not (a batch), so the
    # same system's linear sigma differed in its last bits between a single request and a batch (stagnation
    # distance 2: 0.35050557838514423 alone, 0.3505055783851443 in a batch).  The reference is the single request.
    calc = calculations()["collision"]
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    for k, body in enumerate(systems):
        body["mdot1"]["value"] *= 1 + 0.002 * k
    singles = [compute("collision", {**body, "budget": True, "covariance": True}) for body in systems]
    rows = compute_batch("collision", {"systems": systems, "budget": True, "covariance": True})
    columns = compute_batch("collision", {"columns": {
        name: {"value": [b[name]["value"] for b in systems], "sigma": [b[name]["sigma"] for b in systems]}
        for name in systems[0]}, "budget": True, "covariance": True})
    for i, single in enumerate(singles):
        assert rows["results"][i]["results"] == single["results"]
        assert rows["results"][i]["correlation"] == single["correlation"]
        for name, entry in single["results"].items():
            assert columns["columns"][name]["value"][i] == entry["value"], name
            assert columns["columns"][name]["sigma"][i] == entry["sigma"], name
            assert {t: v[i] for t, v in columns["budget"][name].items()} == entry["budget"], name
        assert columns["correlation"]["matrix"][i] == single["correlation"]["matrix"]


@pytest.mark.parametrize("name", ["sb1", "geometry", "shell-distance"])
def test_the_linear_output_correlation_alone_is_the_one_in_a_batch(name):
    # einsum summed J C J^T in an order that depended on the number of systems: the sb1 example's
    # correlation of m2_min and a1 was 0.3387867587454081 alone and 0.33878675874540803 in a batch of three.
    calc = calculations()[name]
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    for k, body in enumerate(systems):
        for v in body.values():
            if isinstance(v, dict) and "value" in v:
                v["value"] *= 1 + 0.002 * k
    rows = compute_batch(name, {"systems": systems, "covariance": True})
    for i, body in enumerate(systems):
        single = compute(name, {**body, "covariance": True})
        assert rows["results"][i]["correlation"] == single["correlation"], i
