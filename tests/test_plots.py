"""Figures: ?format=svg|png on the ephemeris (RV curves, relative orbit) and Monte Carlo histograms."""

import math
import re
import xml.etree.ElementTree as ET

import numpy as np
import pytest
from scipy.optimize import brentq

from calcservice.core import compute
from calcservice.plots import dense_times, nominal_body
from calcservice.registry import calculations

SB1_MC = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
          "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
          "inclination": {"value": 71.0, "sigma": 2.0},
          "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 11}}
# a fictional eccentric binary with a visual orbit
EPHEMERIS = {"period": {"value": 812.5, "sigma": 0.6}, "eccentricity": {"value": 0.64, "sigma": 0.01},
             "omega": {"value": 131.0, "sigma": 1.2}, "t_periastron": {"value": 2459870.4, "sigma": 0.9},
             "k1": {"value": 22.5, "sigma": 0.4}, "k2": {"value": 36.1, "sigma": 0.7}, "gamma": 4.2,
             "times": [2460100.5, 2460180.5, 2460260.5, 2460420.5]}
VISUAL = {"angular_semimajor_axis": {"value": 9.3, "sigma": 0.2}, "inclination": {"value": 62.0, "sigma": 1.5},
          "node": {"value": 48.0, "sigma": 1.0}}


def svg_text(data: bytes) -> str:
    root = ET.fromstring(data)          # well-formed XML
    return " ".join(t.strip() for t in root.itertext() if t.strip())


def test_histogram_of_monte_carlo_draws(client):
    r = client.post("/v1/spectroscopic/sb1?format=svg&plot=m2", json=SB1_MC)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"
    text = svg_text(r.data)
    assert "m2 [solMass]" in text and "number of draws" in text and "median" in text
    assert "68.27" in text and "2000 Monte Carlo draws" in text
    again = client.post("/v1/spectroscopic/sb1?format=svg&plot=m2", json=SB1_MC)
    assert again.data == r.data                     # same seed, same figure (no timestamps, stable ids)
    png = client.post("/v1/spectroscopic/sb1?format=png&plot=mass_ratio", json=SB1_MC)
    assert png.status_code == 200 and png.mimetype == "image/png" and png.data[:8] == b"\x89PNG\r\n\x1a\n"


def test_histogram_in_requested_units(client):
    body = {**SB1_MC, "units": {"semimajor_axis": "solRad"}}
    r = client.post("/v1/spectroscopic/sb1?format=svg&plot=semimajor_axis", json=body)
    assert r.status_code == 200 and "semimajor_axis [solRad]" in svg_text(r.data)


@pytest.mark.parametrize("query, status", [
    ("format=svg&plot=m2", 422),            # linear: no draws to plot
    ("format=svg&plot=nonsense", 400),      # not an output
    ("format=svg", 400),                    # sb1 has no curve: plot=NAME is needed
])
def test_figure_requests_that_cannot_be_drawn(client, query, status):
    body = {k: v for k, v in SB1_MC.items() if k != "uncertainty"}
    r = client.post(f"/v1/spectroscopic/sb1?{query}", json=body)
    assert r.status_code == status and r.mimetype == "application/problem+json"
    assert "plot" in r.get_json()["errors"]


def test_ephemeris_rv_curves(client):
    r = client.post("/v1/orbit/ephemeris?format=svg", json={**EPHEMERIS, "units": {"rv1": "m/s", "rv2": "m/s"}})
    assert r.status_code == 200, r.get_data(as_text=True)
    text = svg_text(r.data)
    assert "radial velocity [m/s]" in text                 # axes labelled with the response's units
    assert re.search(r"JD − 24\d{5} \[d\]", text)           # Julian Dates less a round offset
    assert "star 1 (rv1)" in text and "star 2 (rv2)" in text and "requested times (rv1)" in text
    assert "relative orbit" not in text


def test_ephemeris_with_visual_elements_draws_the_relative_orbit(client):
    r = client.post("/v1/orbit/ephemeris?format=png", json={**EPHEMERIS, **VISUAL})
    assert r.status_code == 200 and r.data[:4] == b"\x89PNG"
    svg = client.post("/v1/orbit/ephemeris?format=svg", json={**EPHEMERIS, **VISUAL})
    text = svg_text(svg.data)
    assert "relative orbit" in text and "east offset [mas]" in text and "north offset [mas]" in text


def test_ephemeris_histogram_of_a_series_is_refused(client):
    body = {**EPHEMERIS, "uncertainty": {"method": "monte_carlo", "samples": 200, "seed": 1}}
    r = client.post("/v1/orbit/ephemeris?format=svg&plot=rv1", json=body)
    assert r.status_code == 400 and "plot" in r.get_json()["errors"]


def _eccentric_anomaly(t, period, t0, e):
    # Kepler's equation M = E - e sin E, solved with scipy's brentq (an outside root finder)
    mean = 2 * math.pi * (t - t0) / period
    cycles = math.floor(mean / (2 * math.pi))
    m = mean - 2 * math.pi * cycles
    return brentq(lambda x: x - e * math.sin(x) - m, 0.0, 2 * math.pi) + 2 * math.pi * cycles


def test_dense_grid_is_even_in_eccentric_anomaly_and_covers_a_period():
    period, t0, e = 812.5, 2459870.4, 0.64
    grid, mode = dense_times(np.array([2460100.5, 2460180.5]), period, t0, e)
    assert mode == "time" and grid.max() - grid.min() >= period * (1 - 1e-9)
    ecc = np.array([_eccentric_anomaly(t, period, t0, e) for t in grid[::7]])
    steps = np.diff(ecc)
    # the E-spaced points dominate: no gap in E much wider than 2 pi / 720 (plus the even-in-time fill-in)
    assert steps.max() < 7 * 2 * math.pi / 720 * 1.05
    grid, mode = dense_times(np.array([2459000.5, 2463000.5]), period, t0, e)
    assert mode == "phase" and grid.min() == pytest.approx(t0) and grid.max() == pytest.approx(t0 + period)


def test_dense_curve_passes_through_the_requested_points():
    calc = calculations()["ephemeris"]
    body = {**EPHEMERIS, "time_format": "jd"}
    response = compute("ephemeris", body)
    times = np.array(response["results"]["series"]["time"]["value"])
    nominal = compute("ephemeris", nominal_body(calc, response, body, times))
    for key in ("rv1", "rv2"):
        assert nominal["results"]["series"][key]["value"] == pytest.approx(
            response["results"]["series"][key]["value"], rel=1e-12)
