"""Orbital parallax from combined spectroscopic and astrometric orbits, against textbook
coefficients, forward models built with astropy, the `uncertainties` package and Monte Carlo."""

import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from uncertainties import correlated_values_norm, ufloat, umath

from calcservice import registry
from calcservice.core import compute
from calcservice.engine import Measured, Options, evaluate

ORBITAL_PARALLAX = registry.get("orbital-parallax")
PATH = "/v1/combined/orbital-parallax"


def post(client, path, body):
    r = client.post(path, json=body)
    return r.status_code, r.get_json(silent=True)


def forward(m1, m2, period_d, e, i_deg, distance_pc, beta=0.0):
    """A fictional binary observed both ways, by astropy: K1, K2, a'' and the photocentre's alpha''.

    a^3 = G M P^2 / (4 pi^2); a1 = a M2/M; K = 2 pi a1 sin i / (P sqrt(1 - e^2)) (Hilditch 2001, ch. 2);
    alpha = a (B - beta) (van de Kamp 1967); angle = length / distance.
    """
    p = period_d * u.day
    a = ((const.G * (m1 + m2) * u.M_sun * p**2 / (4 * np.pi**2)) ** (1 / 3)).to(u.au)
    b = m2 / (m1 + m2)
    sin_i = np.sin(np.radians(i_deg))
    k1 = (2 * np.pi * a * b * sin_i / (p * np.sqrt(1 - e**2))).to(u.km / u.s).value
    k2 = (2 * np.pi * a * (1 - b) * sin_i / (p * np.sqrt(1 - e**2))).to(u.km / u.s).value
    arcsec = (a.value / distance_pc) * 1000.0
    return {"k1": k1, "k2": k2, "angular": arcsec, "alpha": arcsec * (b - beta), "a": a.value}


SYSTEM = dict(m1=1.31, m2=0.87, period_d=41.6, e=0.31, i_deg=58.0, distance_pc=24.6)


def test_sb2_plus_visual_recovers_distance_and_masses():
    f = forward(**SYSTEM)
    r = compute("orbital-parallax", {"period": 41.6, "k1": f["k1"], "k2": f["k2"], "eccentricity": 0.31,
                                     "inclination": 58.0, "angular_semimajor_axis": f["angular"]})["results"]
    assert r["distance"]["value"] == pytest.approx(24.6, rel=1e-10)
    assert r["parallax"]["value"] == pytest.approx(1000 / 24.6, rel=1e-10)
    assert r["m1"]["value"] == pytest.approx(1.31, rel=1e-10)
    assert r["m2"]["value"] == pytest.approx(0.87, rel=1e-10)
    assert r["semimajor_axis"]["value"] == pytest.approx(f["a"], rel=1e-10)
    assert r["mass_ratio"]["value"] == pytest.approx(0.87 / 1.31, rel=1e-10)


def test_orbital_parallax_textbook_coefficient():
    # Hilditch (2001), eq. 2.49 (from memory): a sin i = 1.3751e4 (K1 + K2) P (1 - e^2)^{1/2} km, so
    # d [pc] = 1.3751e4 km (K1 + K2) P (1 - e^2)^{1/2} / (au_km a'' sin i), a'' in arcsec; the 5-digit
    # coefficient limits the agreement to ~4e-5
    k1, k2, per, e, i, a_mas = 24.6, 31.9, 41.6, 0.31, 58.0, 9.84
    a_sin_i_au = 1.3751e4 * (k1 + k2) * per * math.sqrt(1 - e**2) / 1.495978707e8
    d = a_sin_i_au / math.sin(math.radians(i)) / (a_mas / 1000)
    r = compute("orbital-parallax", {"period": per, "k1": k1, "k2": k2, "eccentricity": e, "inclination": i,
                                     "angular_semimajor_axis": a_mas})["results"]
    assert r["distance"]["value"] == pytest.approx(d, rel=1e-4)


def test_inclination_supplement_gives_the_same_answer():
    # masses and distance depend on sin i only (i and 180 - i are prograde/retrograde on the sky)
    f = forward(**SYSTEM)
    base = {"period": 41.6, "k1": f["k1"], "k2": f["k2"], "eccentricity": 0.31,
            "angular_semimajor_axis": f["angular"]}
    a = compute("orbital-parallax", {**base, "inclination": 58.0})["results"]
    b = compute("orbital-parallax", {**base, "inclination": 122.0})["results"]
    for k in ("distance", "m1", "m2"):
        assert b[k]["value"] == pytest.approx(a[k]["value"], rel=1e-12)


def test_sb1_plus_dark_photocentre_distance_needs_no_masses():
    f = forward(**SYSTEM)
    r = compute("orbital-parallax", {"period": 41.6, "k1": f["k1"], "eccentricity": 0.31, "inclination": 58.0,
                                     "photocentre_semimajor_axis": f["alpha"]})["results"]
    assert r["distance"]["value"] == pytest.approx(24.6, rel=1e-10)
    assert "m2" not in r
    with_mass = compute("orbital-parallax", {"period": 41.6, "k1": f["k1"], "eccentricity": 0.31,
                                             "inclination": 58.0, "photocentre_semimajor_axis": f["alpha"],
                                             "primary_mass": 1.31})["results"]
    assert with_mass["m2"]["value"] == pytest.approx(0.87, rel=1e-9)
    assert with_mass["semimajor_axis"]["value"] == pytest.approx(f["a"], rel=1e-9)
    assert with_mass["distance"]["value"] == pytest.approx(24.6, rel=1e-10)


@pytest.mark.parametrize("beta", [0.02, 0.2, 0.38])
def test_sb1_plus_luminous_photocentre(beta):
    f = forward(**SYSTEM, beta=beta)
    r = compute("orbital-parallax", {"period": 41.6, "k1": f["k1"], "eccentricity": 0.31, "inclination": 58.0,
                                     "photocentre_semimajor_axis": f["alpha"], "primary_mass": 1.31,
                                     "luminosity_fraction": beta})["results"]
    assert r["distance"]["value"] == pytest.approx(24.6, rel=1e-9)
    assert r["m2"]["value"] == pytest.approx(0.87, rel=1e-9)


def test_omega_is_converted_explicitly():
    f = forward(**SYSTEM)
    body = {"period": 41.6, "k1": f["k1"], "k2": f["k2"], "eccentricity": 0.31, "inclination": 58.0,
            "angular_semimajor_axis": f["angular"], "omega": 300.0}
    out = compute("orbital-parallax", body)
    # DESIGN convention: the relative orbit's omega is the primary's + 180 deg
    assert out["results"]["omega_relative"]["value"] == pytest.approx(120.0, abs=1e-12)
    assert "omega + 180" in out["provenance"]["conventions"]["combination"]


def test_sb2_covariance_against_uncertainties():
    # d = a sin i / (a'' sin i) with a sin i = (K1 + K2) P (1 - e^2)^{1/2} / (2 pi), K1 and K2 correlated
    rho = 0.3
    uk1, uk2 = correlated_values_norm([(24.6, 0.3), (31.9, 0.4)], np.array([[1, rho], [rho, 1]]))
    up, ue, ui, ua = ufloat(41.6, 0.02), ufloat(0.31, 0.01), ufloat(58.0, 0.8), ufloat(9.84, 0.07)
    au_km = const.au.to(u.km).value
    a_au = (uk1 + uk2) * up * 86400.0 * umath.sqrt(1 - ue**2) / (2 * math.pi) / au_km / umath.sin(umath.radians(ui))
    d = a_au / (ua / 1000)
    total = 4 * math.pi**2 * (a_au * const.au.value) ** 3 / (const.GM_sun.value * (up * 86400.0) ** 2)
    m2 = total * uk1 / (uk1 + uk2)
    res = evaluate(ORBITAL_PARALLAX, {"period": Measured.normal(41.6, 0.02), "k1": Measured.normal(24.6, 0.3),
                                      "k2": Measured.normal(31.9, 0.4), "eccentricity": Measured.normal(0.31, 0.01),
                                      "inclination": Measured.normal(58.0, 0.8),
                                      "angular_semimajor_axis": Measured.normal(9.84, 0.07)},
                   options=Options(correlations={("k1", "k2"): rho}))
    out = {k: (float(v["value"][0]), float(v["sigma"][0])) for k, v in res.outputs.items()}
    assert out["distance"][0] == pytest.approx(d.nominal_value, rel=1e-12)
    assert out["distance"][1] == pytest.approx(d.std_dev, rel=1e-6)
    assert out["m2"][1] == pytest.approx(m2.std_dev, rel=1e-6)
    assert out["total_mass"][1] == pytest.approx(total.std_dev, rel=1e-6)


def test_monte_carlo_agrees_with_linear():
    q = {"period": Measured.normal(41.6, 0.02), "k1": Measured.normal(24.6, 0.15), "k2": Measured.normal(31.9, 0.2),
         "eccentricity": Measured.normal(0.31, 0.005), "inclination": Measured.normal(58.0, 0.3),
         "angular_semimajor_axis": Measured.normal(9.84, 0.03)}
    lin = evaluate(ORBITAL_PARALLAX, q)
    mc = evaluate(ORBITAL_PARALLAX, q, options=Options(method="monte_carlo", samples=20000, seed=21))
    for k in ("distance", "m1", "m2"):
        assert float(mc.outputs[k]["sigma"][0]) == pytest.approx(float(lin.outputs[k]["sigma"][0]), rel=0.04), k


# ----------------------------------------------------------------------------- wrong combinations (HTTP)

BASE = {"period": 41.6, "k1": 24.6, "eccentricity": 0.31, "inclination": 58.0}


@pytest.mark.parametrize("extra, fields", [
    ({"k2": 31.9}, {"angular_semimajor_axis", "photocentre_semimajor_axis"}),                  # SB2 alone
    ({"angular_semimajor_axis": 9.8}, {"k2", "photocentre_semimajor_axis"}),                   # no k2, no photo
    ({}, {"k2", "photocentre_semimajor_axis", "angular_semimajor_axis"}),                      # nothing astrometric
    ({"k2": 31.9, "photocentre_semimajor_axis": 2.1}, {"k2", "photocentre_semimajor_axis"}),
    ({"angular_semimajor_axis": 9.8, "photocentre_semimajor_axis": 2.1},
     {"angular_semimajor_axis", "photocentre_semimajor_axis"}),
    ({"k2": 31.9, "angular_semimajor_axis": 9.8, "primary_mass": 1.3}, {"k2", "primary_mass"}),
    ({"k2": 31.9, "angular_semimajor_axis": 9.8, "luminosity_fraction": 0.1}, {"k2", "luminosity_fraction"}),
    ({"photocentre_semimajor_axis": 2.1, "luminosity_fraction": 0.1}, {"luminosity_fraction", "primary_mass"}),
])
def test_http_wrong_combinations_name_the_fields(client, extra, fields):
    status, body = post(client, PATH, {**BASE, **extra})
    assert status == 422, body
    assert fields <= set(body["errors"]), body["errors"]


def test_http_beta_at_or_above_fractional_mass(client):
    f = forward(**SYSTEM)
    b = 0.87 / (1.31 + 0.87)
    for beta in (b, b + 0.1):
        status, body = post(client, PATH, {**BASE, "k1": f["k1"], "photocentre_semimajor_axis": 2.1,
                                           "primary_mass": 1.31, "luminosity_fraction": beta})
        assert status == 422 and "luminosity_fraction" in body["errors"]
    status, _ = post(client, PATH, {**BASE, "k1": f["k1"], "photocentre_semimajor_axis": 2.1,
                                    "primary_mass": 1.31, "luminosity_fraction": b - 0.05})
    assert status == 200


@pytest.mark.parametrize("field, value", [("inclination", 0.0), ("inclination", 180.0), ("k2", -1.0),
                                          ("angular_semimajor_axis", 0.0), ("eccentricity", 1.0)])
def test_http_out_of_domain(client, field, value):
    body = {**BASE, "k2": 31.9, "angular_semimajor_axis": 9.84, field: value}
    status, out = post(client, PATH, body)
    assert status == 422 and field in out["errors"]


def test_http_monte_carlo_and_units(client):
    f = forward(**SYSTEM)
    body = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": f["k1"], "sigma": 0.2},
            "k2": {"value": f["k2"], "sigma": 0.3}, "eccentricity": {"value": 0.31, "sigma": 0.01},
            "inclination": {"value": 58.0, "sigma": 0.5},
            "angular_semimajor_axis": {"value": f["angular"] / 1000, "sigma": 5e-5, "unit": "arcsec"},
            "uncertainty": {"method": "monte_carlo", "samples": 4000, "seed": 8}}
    status, out = post(client, PATH, body)
    assert status == 200
    d = out["results"]["distance"]
    assert d["low"] < 24.6 < d["high"]
    assert out["uncertainty"]["rejected_fraction"] == 0.0


def test_http_listed(client):
    assert PATH in client.get("/v1/calculations").get_data(as_text=True)
    assert PATH in client.get("/openapi.yaml").get_data(as_text=True)
