"""Orbit geometry: Kepler's third law, vis-viva speeds and Roche lobes, against published values and independent code."""

import astropy.units as u
import numpy as np
import pytest
from astropy.constants import GM_sun, R_sun
from numpy.polynomial.legendre import leggauss
from scipy.optimize import brentq
from uncertainties import ufloat

from calcservice.constants import CONSTANTS
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics import orbit
from calcservice.registry import get

from .conftest import post

GEOMETRY = get("geometry")
PATH = "/v1/orbit/geometry"


def run(options=None, **kw):
    q = {k: v if isinstance(v, Measured) else Measured.exact(v) for k, v in kw.items()}
    return evaluate(GEOMETRY, q, {}, options or Options())


def value(result, name):
    return float(result.outputs[name]["value"][0])


# ------------------------------------------------------------------ Roche lobes
def test_eggleton_value_at_equal_masses():
    # Eggleton (1983) ApJ 268, 368: r_L/a = 0.49 q^{2/3}/(0.6 q^{2/3} + ln(1 + q^{1/3})) = 0.3789 at q = 1
    assert orbit.roche_lobe_fraction(1.0) == pytest.approx(0.3789, abs=5e-5)


def test_eggleton_limits():
    # limits of the Eggleton (1983) formula itself: small q, ln(1 + q^{1/3}) ~ q^{1/3} dominates, r_L/a -> 0.49 q^{1/3};
    # large q, r_L/a -> 0.49/0.6 = 0.8167; and r_L/a grows with q
    assert orbit.roche_lobe_fraction(1e-9) / 1e-3 == pytest.approx(0.49, rel=1e-3)
    assert orbit.roche_lobe_fraction(1e15) == pytest.approx(0.49 / 0.6, rel=2e-3)
    assert np.all(np.diff(orbit.roche_lobe_fraction(np.geomspace(1e-3, 1e3, 100))) > 0)


def _roche_volume_radius(q, n_mu=32, n_phi=32, n_r=150):
    """Volume-equivalent radius (units of a) of the Roche lobe of a star of mass q beside a companion of mass 1.

    Independent numerical check: the lobe is bounded by the Roche equipotential through L1,
    Phi = -q/r1 - 1/r2 - (1 + q)/2 ((x - x_cm)^2 + y^2) (G = a = M2 = 1, co-rotating frame);
    its volume is integrated over directions from the star (Gauss-Legendre in cos theta about the line
    of centres, where the lobe's conical point at L1 falls on an endpoint; trapezoid in azimuth).
    """
    xcm = 1.0 / (1.0 + q)

    def phi(x, y, z):
        r1 = np.sqrt(x * x + y * y + z * z)
        r2 = np.sqrt((x - 1.0) ** 2 + y * y + z * z)
        return -q / r1 - 1.0 / r2 - 0.5 * (1.0 + q) * ((x - xcm) ** 2 + y * y)

    xl1 = brentq(lambda x: q / x**2 - 1 / (1 - x) ** 2 - (1 + q) * (x - xcm), 1e-9, 1 - 1e-9, xtol=1e-15)
    level = phi(xl1, 0.0, 0.0)
    mu, w_mu = leggauss(n_mu)
    az = np.linspace(0, 2 * np.pi, n_phi, endpoint=False)
    mu_g, az_g = np.meshgrid(mu, az, indexing="ij")
    s = np.sqrt(1 - mu_g**2)
    d = (mu_g, s * np.cos(az_g), s * np.sin(az_g))
    rs = np.linspace(0, xl1, n_r + 1)[1:]
    above = phi(*(c[..., None] * rs for c in d)) >= level
    first = np.where(above.any(-1), above.argmax(-1), n_r - 1)
    hi = rs[first]
    lo = np.where(first > 0, rs[np.maximum(first - 1, 0)], 1e-12)
    for _ in range(60):
        mid = 0.5 * (lo + hi)
        inside = phi(d[0] * mid, d[1] * mid, d[2] * mid) < level
        lo, hi = np.where(inside, mid, lo), np.where(inside, hi, mid)
    r = 0.5 * (lo + hi)
    volume = (w_mu[:, None] * r**3 / 3).sum() * (2 * np.pi / n_phi)
    return (3 * volume / (4 * np.pi)) ** (1 / 3)


def test_numerical_roche_lobe_at_equal_masses():
    # from memory: the exact volume-equivalent Roche-lobe radius at q = 1 is 0.3799 a
    assert _roche_volume_radius(1.0) == pytest.approx(0.3799, abs=2e-4)


@pytest.mark.parametrize("q", [1e-3, 0.01, 0.1, 0.5, 1.0, 3.0, 10.0, 100.0, 1000.0])
def test_eggleton_within_one_percent_of_the_roche_geometry(q):
    # Eggleton (1983): the fit is better than 1 % over 0 < q < infinity; checked against the equipotential above
    assert orbit.roche_lobe_fraction(q) == pytest.approx(_roche_volume_radius(q), rel=0.01)


def test_roche_lobes_in_solar_radii_with_astropy_units():
    r = run(period=50.0, eccentricity=0.4, m1=6.0, m2=2.0)
    a = ((GM_sun * 8.0 * (50.0 * u.day) ** 2 / (4 * np.pi**2)) ** (1 / 3))
    for star, q in (("1", 3.0), ("2", 1 / 3)):
        fraction = 0.49 * q ** (2 / 3) / (0.6 * q ** (2 / 3) + np.log(1 + q ** (1 / 3)))   # Eggleton (1983)
        assert value(r, "roche_lobe" + star) == pytest.approx((fraction * a * 0.6 / R_sun).decompose().value,
                                                              rel=1e-12)
        assert value(r, f"roche_lobe{star}_apastron") == pytest.approx(
            (fraction * a * 1.4 / R_sun).decompose().value, rel=1e-12)


# ------------------------------------------------------------------ Kepler III and vis-viva
def test_earth_orbit_speeds_with_iau_constants():
    # from memory: sidereal year 365.256363 d, e = 0.0167086, M_earth/M_sun = 3.003e-6
    r = run(period=365.256363, eccentricity=0.0167086, m1=1.0, m2=3.003e-6)
    # from memory: Earth's semi-major axis 1.000001 au
    assert value(r, "semimajor_axis") == pytest.approx(1.0, rel=1e-5)
    # vis-viva: v_p v_a = G M / a, so sqrt(v_p v_a) is the mean orbital speed, 29.78 km/s (common practice)
    vp, va = value(r, "speed_periastron"), value(r, "speed_apastron")
    assert np.sqrt(vp * va) == pytest.approx(29.78, abs=0.01)
    # perihelion 30.29 km/s, aphelion 29.29 km/s (common practice)
    assert vp == pytest.approx(30.29, abs=0.01)
    assert va == pytest.approx(29.29, abs=0.01)
    # periastron / apastron: 0.9833 and 1.0167 au (common practice)
    assert value(r, "periastron_distance") == pytest.approx(0.9833, abs=1e-4)
    assert value(r, "apastron_distance") == pytest.approx(1.0167, abs=1e-4)


def test_gaussian_gravitational_constant():
    # IAU 1976: a body of negligible mass at a = 1 au about one solar mass has P = 2 pi / k days;
    # with the IAU 2012 au and IAU 2015 nominal GM_sun the total mass comes out 1 to ~1e-9
    k = CONSTANTS["k_gauss"].value
    r = run(period=2 * np.pi / k, eccentricity=0.0, semimajor_axis=1.0)
    assert value(r, "total_mass") == pytest.approx(1.0, rel=1e-8)


def test_semimajor_axis_with_mass_ratio_splits_the_masses():
    r = run(period=200.0, eccentricity=0.3, semimajor_axis=2.5, mass_ratio=0.25)
    total = (4 * np.pi**2 * (2.5 * u.au) ** 3 / (GM_sun * (200.0 * u.day) ** 2)).decompose().value
    assert value(r, "total_mass") == pytest.approx(total, rel=1e-12)
    assert value(r, "m1") == pytest.approx(total / 1.25)
    assert value(r, "m2") == pytest.approx(total * 0.25 / 1.25)
    assert "roche_lobe1" in r.outputs


def test_m1_with_mass_ratio_equals_m1_with_m2():
    # q = M2/M1 (the contract's convention): m1 = 8, q = 0.5 is the same binary as m1 = 8, m2 = 4
    a = run(period=40.0, eccentricity=0.2, m1=8.0, mass_ratio=0.5)
    b = run(period=40.0, eccentricity=0.2, m1=8.0, m2=4.0)
    for name in ("semimajor_axis", "m2", "roche_lobe1", "roche_lobe2", "speed_periastron"):
        assert value(a, name) == pytest.approx(value(b, name), rel=1e-14)


def test_semimajor_axis_alone_gives_no_roche_lobes():
    r = run(period=200.0, eccentricity=0.3, semimajor_axis=2.5)
    assert "total_mass" in r.outputs and "roche_lobe1" not in r.outputs


def test_linear_sigmas_agree_with_uncertainties_package():
    # the uncertainties package (linear error propagation with exact derivatives) as the reference
    import uncertainties.umath as um
    p, e, m1, m2 = ufloat(118.3, 0.4), ufloat(0.62, 0.02), ufloat(8.4, 0.5), ufloat(5.1, 0.3)
    gm = GM_sun.value * (m1 + m2)
    a_m = (gm * (p * 86400.0) ** 2 / (4 * np.pi**2)) ** (1 / 3)
    v_peri = um.sqrt(gm * (2 / (a_m * (1 - e)) - 1 / a_m)) / 1e3
    r = run(period=Measured.normal(118.3, 0.4), eccentricity=Measured.normal(0.62, 0.02),
            m1=Measured.normal(8.4, 0.5), m2=Measured.normal(5.1, 0.3))
    au_m = (1 * u.au).to_value(u.m)
    assert float(r.outputs["semimajor_axis"]["sigma"][0]) == pytest.approx((a_m / au_m).std_dev, rel=1e-6)
    assert float(r.outputs["speed_periastron"]["sigma"][0]) == pytest.approx(v_peri.std_dev, rel=1e-6)
    assert value(r, "speed_periastron") == pytest.approx(v_peri.nominal_value, rel=1e-12)


def test_overflow_and_contact_warnings():
    r = run(period=3.0, eccentricity=0.5, m1=10.0, m2=4.0, radius1=12.0, radius2=1.0)
    codes = {w.code for w in r.warnings}
    assert value(r, "fill_factor1") > 1 and "roche_lobe_overflow1" in codes
    assert value(r, "fill_factor2") < 1 and "roche_lobe_overflow2" not in codes
    r = run(period=300.0, eccentricity=0.5, m1=10.0, m2=4.0, radius1=5.0, radius2=3.0)
    assert not r.warnings


# ------------------------------------------------------------------ HTTP
def test_http_geometry(client):
    body = {"period": {"value": 118.3, "sigma": 0.2}, "eccentricity": 0.62, "m1": 8.4, "m2": 5.1, "radius1": 4.3}
    status, out = post(client, PATH, body)
    assert status == 200, out
    res = out["results"]
    assert res["semimajor_axis"]["unit"] == "au" and res["roche_lobe1"]["unit"] == "solRad"
    assert res["fill_factor1"]["value"] == pytest.approx(4.3 / res["roche_lobe1"]["value"])
    assert "fill_factor2" not in res


@pytest.mark.parametrize("body, field", [
    ({"eccentricity": 1.0}, "eccentricity"),
    ({"eccentricity": -0.1}, "eccentricity"),
    ({"m1": 0.0}, "m1"),
    ({"m2": -3.0}, "m2"),
    ({"semimajor_axis": 2.0}, "semimajor_axis"),            # with m1 too: exactly one of them
    ({"m1": None, "m2": None}, "m1"),                        # neither m1 nor semimajor_axis
    ({"m2": None}, "m2"),                                    # m1 alone
    ({"mass_ratio": 0.5}, "mass_ratio"),                     # m2 and mass_ratio both
    ({"m1": None, "m2": None, "semimajor_axis": 2.0, "radius1": 3.0}, "radius1"),
])
def test_http_bad_inputs_name_the_field(client, body, field):
    full = {"period": 118.3, "eccentricity": 0.62, "m1": 8.4, "m2": 5.1}
    full.update(body)
    full = {k: v for k, v in full.items() if v is not None}
    status, out = post(client, PATH, full)
    assert status == 422, out
    assert field in out["errors"], out
