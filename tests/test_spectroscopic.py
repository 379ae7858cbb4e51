"""Spectroscopic binaries against textbook coefficients, astropy and scipy."""

import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy.optimize import brentq

from calcservice.core import compute
from calcservice.physics import spectroscopic as sp


def test_textbook_mass_function_coefficient():
    # Hilditch (2001), An Introduction to Close Binary Stars, eq. 2.51 (from memory):
    # f(M) = 1.0361e-7 (1 - e^2)^{3/2} K^3 P  [solMass, km/s, d]
    assert sp.MASS_FUNCTION_COEFFICIENT == pytest.approx(1.0361e-7, rel=5e-5)


def test_textbook_projected_axis_coefficient():
    # Hilditch (2001), eq. 2.49 (from memory): a sin i = 1.3751e4 (1 - e^2)^{1/2} K P  [km, km/s, d]
    assert sp.PROJECTED_AXIS_COEFFICIENT_KM == pytest.approx(1.3751e4, rel=5e-5)


def test_coefficients_from_astropy_gm_sun():
    # the same numbers derived with astropy's units and IAU 2015 nominal GM_sun
    f = (1 * u.day * (1 * u.km / u.s) ** 3 / (2 * np.pi * const.GM_sun)).decompose()
    assert sp.MASS_FUNCTION_COEFFICIENT == pytest.approx(f.value, rel=1e-13)
    a = (1 * u.day * (1 * u.km / u.s) / (2 * np.pi)).to(u.km)
    assert sp.PROJECTED_AXIS_COEFFICIENT_KM == pytest.approx(a.value, rel=1e-13)


def test_sb2_masses_against_astropy_quantities():
    # M1 sin^3 i = P (1-e^2)^{3/2} (K1+K2)^2 K2 / (2 pi G), Hilditch (2001) eq. 2.52, evaluated by astropy
    P, k1, k2, e, i = 41.6 * u.d, 38.2 * u.km / u.s, 51.7 * u.km / u.s, 0.31, 71.0 * u.deg
    m1s = (P * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k2 / (2 * np.pi * const.GM_sun)).decompose().value
    m2s = (P * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k1 / (2 * np.pi * const.GM_sun)).decompose().value
    asini = ((k1 + k2) * P * np.sqrt(1 - e**2) / (2 * np.pi)).to(u.au).value
    r = compute("sb2", {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "inclination": 71.0})["results"]
    assert r["m1_sin3i"]["value"] == pytest.approx(m1s, rel=1e-12)
    assert r["m2_sin3i"]["value"] == pytest.approx(m2s, rel=1e-12)
    assert r["a_sin_i"]["value"] == pytest.approx(asini, rel=1e-12)
    s3 = np.sin(i).value ** 3
    assert r["m1"]["value"] == pytest.approx(m1s / s3, rel=1e-12)
    assert r["mass_ratio"]["value"] == pytest.approx(38.2 / 51.7, rel=1e-15)
    a = asini / np.sin(i).value
    assert r["periastron_distance"]["value"] == pytest.approx(a * (1 - e), rel=1e-12)
    assert r["apastron_distance"]["value"] == pytest.approx(a * (1 + e), rel=1e-12)
    # Kepler's third law holds for the derived a and total mass (astropy, IAU GM_sun)
    a_kepler = ((const.GM_sun * r["total_mass"]["value"] * P**2 / (4 * np.pi**2)) ** (1 / 3)).to(u.au).value
    assert r["semimajor_axis"]["value"] == pytest.approx(a_kepler, rel=1e-12)


@pytest.mark.parametrize("f", [1e-7, 1e-3, 0.05, 1.0, 30.0])
@pytest.mark.parametrize("m1", [0.08, 1.0, 45.0])
@pytest.mark.parametrize("sin_i", [0.05, 0.5, 1.0])
def test_companion_mass_root_against_brentq(f, m1, sin_i):
    # scipy's bracketing root finder on the mass-function cubic M2^3 sin^3 i - f (M1 + M2)^2 = 0
    g = lambda m2: (m2 * sin_i) ** 3 - f * (m1 + m2) ** 2
    ref = brentq(g, 1e-12, 1e9, xtol=1e-300, rtol=1e-15, maxiter=500)
    got = sp.companion_mass(np.array([f]), np.array([m1]), np.array([sin_i]))[0]
    assert got == pytest.approx(ref, rel=1e-12)


def test_companion_mass_is_vectorised():
    rng = np.random.default_rng(5)
    f = 10 ** rng.uniform(-8, 1.5, 2000)
    m1 = 10 ** rng.uniform(-1, 1.8, 2000)
    s = rng.uniform(0.02, 1, 2000)
    m2 = sp.companion_mass(f, m1, s)
    assert np.allclose((m2 * s) ** 3 / (m1 + m2) ** 2, f, rtol=1e-12, atol=0)


def test_minimum_mass_of_sb1(client):
    r = client.post("/v1/spectroscopic/sb1", json={"period": 41.6, "k1": 23.4, "eccentricity": 0.31,
                                                      "primary_mass": 1.9}).get_json()["results"]
    f = r["mass_function"]["value"]
    m2 = r["m2_min"]["value"]
    # definition of the mass function at i = 90 deg (Hilditch 2001, eq. 2.51)
    assert m2**3 / (1.9 + m2) ** 2 == pytest.approx(f, rel=1e-13)
    assert "m2" not in r        # no inclination, no actual mass


def test_isotropic_inclinations_against_the_analytic_distribution():
    # For isotropic orientations cos i is uniform on [0, 1]; the median of sin^3 i is (sqrt(3)/2)^3 (u = 1/2)
    # and the 15.87 / 84.13 % points follow from u at those quantiles (a standard result).
    body = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "inclination": "isotropic",
            "uncertainty": {"method": "monte_carlo", "samples": 20000, "seed": 11}}
    resp = compute("sb2", body, keep_draws=True)
    r = resp["results"]
    m1s = r["m1_sin3i"]["value"]
    def sin3(q):
        return (1 - q**2) ** 1.5
    assert r["m1"]["value"] == pytest.approx(m1s / sin3(0.5), rel=0.02)
    assert r["m1"]["low"] == pytest.approx(m1s / sin3(0.158655), rel=0.02)
    assert r["m1"]["high"] == pytest.approx(m1s / sin3(0.841345), rel=0.04)
    # <sin^3 i> = 3 pi / 16 over isotropic orientations (a standard result)
    draws = resp["_draws"]
    sin3i = draws["m1_sin3i"] / draws["m1"]
    assert np.mean(sin3i) == pytest.approx(3 * math.pi / 16, rel=0.01)
    assert resp["uncertainty"]["method"] == "monte_carlo"
    assert resp["uncertainty"]["rejected_fraction"] == 0.0


def test_isotropic_switches_linear_to_monte_carlo():
    body = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "inclination": "isotropic",
            "uncertainty": {"method": "linear"}}
    resp = compute("sb2", body)
    assert resp["uncertainty"]["method"] == "monte_carlo"
    assert [w["code"] for w in resp["warnings"]][0] == "method_switched"
    # draws and a seed without a method ask for Monte Carlo: nothing to switch
    resp = compute("sb2", {**body, "uncertainty": {"samples": 2000, "seed": 1}})
    assert resp["uncertainty"]["method"] == "monte_carlo" and resp["uncertainty"]["samples"] == 2000
    assert "method_switched" not in [w["code"] for w in resp["warnings"]]
