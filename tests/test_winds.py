"""Colliding winds and expansion parallaxes against their papers, scipy, astropy and `uncertainties`."""

import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy.optimize import brentq
from uncertainties import ufloat
from uncertainties import umath

from calcservice.constants import CONSTANTS, KM_S_PER_AU_PER_YEAR
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics import kepler
from calcservice.physics import winds as w
from calcservice.registry import get

from .conftest import post

from .engine_helpers import codes, nominal, sigma


def run(name, quantities, statics=None, **options):
    """Evaluate a calculation on one system: quantities as value or (value, sigma)."""
    q = {k: Measured.normal(*v) if isinstance(v, tuple) else Measured.exact(v) for k, v in quantities.items()}
    return evaluate(get(name), q, statics or {}, Options(**options))


WINDS = {"mdot1": 2.0e-5, "mdot2": 1.0e-6, "vinf1": 2000.0, "vinf2": 2000.0}


# --------------------------------------------------------------------- opening angles

def test_eichler_usov_stated_constants():
    # Eichler & Usov (1993) ApJ 402, 271, eq. 1: theta = 2.1 (1 - eta^{2/5}/4) eta^{1/3} rad; at eta = 1 the
    # fit gives 2.1 * 3/4 = 1.575 rad (90.24 deg), a plane a little past 90 deg
    assert w.opening_half_angle_eichler_usov(np.array(1.0)) == pytest.approx(1.575, rel=1e-12)
    assert w.opening_half_angle_eichler_usov(np.array(1e-3)) == pytest.approx(
        2.1 * (1 - 1e-3**0.4 / 4) * 0.1, rel=1e-12)


@pytest.mark.parametrize("eta", [1e-4, 1e-3, 0.01, 0.1, 0.3, 0.5, 0.9, 0.99, 0.999999])
def test_canto_raga_wilkin_root_against_brentq(eta):
    # Cantó, Raga & Wilkin (1996) ApJ 469, 729, eq. 28: theta_inf - tan(theta_inf) = pi / (1 - eta) on
    # (pi/2, pi], solved by scipy's bracketing root finder in the paper's own variable
    theta = brentq(lambda t: t - math.tan(t) - math.pi / (1 - eta), math.pi / 2 + 1e-12, math.pi, xtol=1e-15)
    assert w.opening_half_angle_canto_raga_wilkin(np.array(eta)) == pytest.approx(math.pi - theta, rel=1e-9)


def test_canto_raga_wilkin_small_eta_asymptote():
    # tan(psi) - psi ~ psi^3 / 3 (Taylor series), so psi -> (3 pi eta)^{1/3} as eta -> 0 (CRW96 eq. 28)
    eta = np.array([1e-12, 1e-10, 1e-8])
    assert w.opening_half_angle_canto_raga_wilkin(eta) == pytest.approx(np.cbrt(3 * np.pi * eta), rel=1e-5)


def test_opening_angles_agree_to_about_a_degree():
    # Eichler & Usov (1993) fitted their formula to the same thin-shell problem; the two agree to about a degree
    # over 1e-3 <= eta <= 0.9 (the issue's check, from the papers' comparison as remembered)
    eta = np.logspace(-3, math.log10(0.9), 400)
    diff = np.degrees(w.opening_half_angle_eichler_usov(eta) - w.opening_half_angle_canto_raga_wilkin(eta))
    assert np.max(np.abs(diff)) < 1.0
    assert np.max(np.abs(diff)) > 0.1  # they are different formulas


def test_opening_angle_limits():
    # eta -> 0: no cone (0 deg); eta -> 1: a plane between equal winds (90 deg) (both papers)
    tiny, one = np.array(1e-15), np.array(1.0 - 1e-12)
    assert np.degrees(w.opening_half_angle_eichler_usov(tiny)) < 0.01
    assert np.degrees(w.opening_half_angle_canto_raga_wilkin(tiny)) < 0.1
    assert np.degrees(w.opening_half_angle_eichler_usov(one)) == pytest.approx(90.0, abs=0.3)
    assert np.degrees(w.opening_half_angle_canto_raga_wilkin(one)) == pytest.approx(90.0, abs=1e-3)
    assert np.degrees(w.opening_half_angle_canto_raga_wilkin(np.array(1.0))) == 90.0


def test_canto_raga_wilkin_vectorised_with_nan():
    eta = np.array([[np.nan, 0.1], [0.5, 1.0]])
    psi = w.opening_half_angle_canto_raga_wilkin(eta)
    assert psi.shape == (2, 2) and np.isnan(psi[0, 0]) and np.all(np.isfinite(psi[~np.isnan(eta)]))


@pytest.mark.parametrize("eta", [1e-4, 0.003, 0.05, 0.4, 0.95])
def test_inversions_round_trip(eta):
    psi_eu = w.opening_half_angle_eichler_usov(np.array(eta))
    psi_crw = w.opening_half_angle_canto_raga_wilkin(np.array(eta))
    assert w.momentum_ratio_from_eichler_usov(psi_eu) == pytest.approx(eta, rel=1e-10)
    assert w.momentum_ratio_from_canto_raga_wilkin(psi_crw) == pytest.approx(eta, rel=1e-10)


# ----------------------------------------------------------------------------- collision

def test_stagnation_point_against_ram_pressure_root():
    # rho v^2 = Mdot v / (4 pi r^2) from each star balanced on the line of centres (Stevens, Blondin & Pollock
    # 1992, ApJ 386, 265, sect. 2), found by scipy's brentq
    d = 4.0
    p1 = WINDS["mdot1"] * WINDS["vinf1"]
    p2 = WINDS["mdot2"] * WINDS["vinf2"] * 3.1
    r1 = brentq(lambda x: p1 / x**2 - p2 / (d - x) ** 2, 1e-9, d - 1e-9, xtol=1e-14)
    got = w.stagnation_distances(d, p2 / p1)
    assert got[0] == pytest.approx(r1, rel=1e-10)
    assert got[1] == pytest.approx(d - r1, rel=1e-10)


def test_cooling_parameter_normalisation():
    # Stevens, Blondin & Pollock (1992) ApJ 386, 265, eq. 8: chi = v_8^4 d_12 / Mdot_-7, i.e. chi = 1 for
    # v = 1000 km/s, d = 1e12 cm, Mdot = 1e-7 solMass/yr
    d_au = (1e12 * u.cm).to_value(u.au)
    assert w.cooling_parameter(1000.0, d_au, 1e-7) == pytest.approx(1.0, rel=1e-12)
    assert w.cooling_parameter(2000.0, 3 * d_au, 1e-6) == pytest.approx(16 * 3 / 10, rel=1e-12)


def test_post_shock_temperature_rule_of_thumb():
    # strong-shock jump kT = (3/16) mu m_H v^2 evaluated with astropy; common practice: ~1.2 keV for
    # 1000 km/s at mu = 0.6
    kt = (3 / 16 * 0.6 * (const.m_p + const.m_e) * (1000 * u.km / u.s) ** 2).to(u.keV)
    assert kt.value == pytest.approx(1.2, rel=0.03)
    t = w.post_shock_temperature(np.array(1000.0), 0.6)
    assert t == pytest.approx((kt / const.k_B).to_value(u.K), rel=1e-9)


def test_solar_ionised_mu():
    # fully ionised gas: 1/mu = 2X + 3Y/4 + Z/2 (e.g. Carroll & Ostlie, eq. 10.16, from memory); X = 0.70
    # gives the familiar mu ~ 0.62 (common practice)
    assert w.SOLAR_IONISED_MU == pytest.approx(0.617, abs=0.001)


def test_wolf_rayet_plus_o_star_rule_of_thumb():
    # common practice: a WR wind (1e-5 solMass/yr, 1000-3000 km/s) against an O-star wind (~1e-7 to 1e-6,
    # ~2000 km/s) gives eta of order 0.01-0.1, a cone of some 20-60 deg wrapped round the O star, with
    # the stagnation point much nearer the O star; the shocks are hot (1e7-1e8 K)
    r = run("collision", {"mdot1": 3e-5, "vinf1": 1800.0, "mdot2": 8e-7, "vinf2": 2200.0, "separation": 20.0})
    eta = nominal(r, "momentum_ratio")
    assert 0.01 < eta < 0.1
    for key in ("opening_half_angle_eu93", "opening_half_angle_crw96"):
        assert 20.0 < nominal(r, key) < 60.0
    assert nominal(r, "stagnation_distance2") < 0.3 * nominal(r, "stagnation_distance1")
    assert nominal(r, "stagnation_distance1") + nominal(r, "stagnation_distance2") == pytest.approx(20.0)
    assert 1e7 < nominal(r, "post_shock_temperature1") < 1e8
    # wide orbit: the weak O-star wind's shock is adiabatic (chi >> 1)
    assert nominal(r, "cooling_parameter2") > 1.0
    assert not r.failed and "roles_swapped" not in codes(r)


def test_roles_swapped_when_star_two_is_stronger():
    # the convention (DESIGN): eta > 1 is reported with the roles swapped and a warning
    a = run("collision", {**WINDS, "separation": 5.0})
    b = run("collision", {"mdot1": WINDS["mdot2"], "vinf1": WINDS["vinf2"], "mdot2": WINDS["mdot1"],
                          "vinf2": WINDS["vinf1"], "separation": 5.0})
    assert "roles_swapped" in codes(b) and "roles_swapped" not in codes(a)
    assert nominal(b, "momentum_ratio") == pytest.approx(nominal(a, "momentum_ratio"))
    assert nominal(b, "opening_half_angle_crw96") == pytest.approx(nominal(a, "opening_half_angle_crw96"))
    # numbered outputs keep the user's numbering
    assert nominal(b, "stagnation_distance1") == pytest.approx(nominal(a, "stagnation_distance2"))
    assert nominal(b, "cooling_parameter2") == pytest.approx(nominal(a, "cooling_parameter1"))


def test_eichler_usov_range_warning():
    r = run("collision", {"mdot1": 1e-4, "vinf1": 3000.0, "mdot2": 1e-9, "vinf2": 1000.0, "separation": 3.0})
    assert nominal(r, "momentum_ratio") < 1e-4 and "eu93_out_of_range" in codes(r)


def test_stagnation_inside_star_warning():
    # a 1e-8 solMass/yr wind cannot hold off a WR wind 0.1 au away: the stagnation point falls inside a 10 R_sun
    # star (0.0465 au)
    base = {"mdot1": 2e-5, "vinf1": 2000.0, "mdot2": 1e-8, "vinf2": 1500.0, "separation": 0.1}
    r = run("collision", {**base, "radius2": 10.0})
    assert nominal(r, "stagnation_distance2") < (10 * u.R_sun).to_value(u.au)
    assert "stagnation_inside_star2" in codes(r)
    assert "stagnation_inside_star2" not in codes(run("collision", {**base, "radius2": 0.3}))
    message = next(w.message for w in r.warnings if w.code == "stagnation_inside_star2")
    assert message.startswith("at the given separation")
    # placed by an orbital phase, the warning says so (it said "at the given separation", which was not given)
    orbit = {**base, "separation": None, "semimajor_axis": 0.1, "eccentricity": 0.0, "phase": 0.3, "radius2": 10.0}
    orbit.pop("separation")
    r = run("collision", orbit)
    message = next(w.message for w in r.warnings if w.code == "stagnation_inside_star2")
    assert message.startswith("at the given orbital phase"), message


def test_orbit_periastron_apastron_and_phase():
    # r = a (1 - e^2) / (1 + e cos nu) (equation of the ellipse); a from Kepler's third law with astropy
    period, m1, m2, e = 2950.0, 18.0, 24.0, 0.64
    a = ((const.GM_sun * (m1 + m2) * (period * u.d) ** 2 / (4 * np.pi**2)) ** (1 / 3)).to_value(u.au)
    r = run("collision", {**WINDS, "eccentricity": e, "period": period, "m1": m1, "m2": m2, "true_anomaly": 90.0})
    assert nominal(r, "semimajor_axis") == pytest.approx(a, rel=1e-10)
    assert nominal(r, "separation_periastron") == pytest.approx(a * (1 - e), rel=1e-10)
    assert nominal(r, "separation_apastron") == pytest.approx(a * (1 + e), rel=1e-10)
    assert nominal(r, "separation") == pytest.approx(a * (1 - e * e), rel=1e-10)   # semi-latus rectum at nu = 90
    eta = WINDS["mdot2"] / WINDS["mdot1"]
    assert nominal(r, "stagnation_distance1_periastron") == pytest.approx(a * (1 - e) / (1 + eta**0.5), rel=1e-10)
    assert nominal(r, "cooling_parameter2_apastron") / nominal(r, "cooling_parameter2_periastron") == pytest.approx(
        (1 + e) / (1 - e), rel=1e-10)
    # phase: Kepler's equation M = E - e sin E checked directly, r = a (1 - e cos E)
    r = run("collision", {**WINDS, "eccentricity": e, "semimajor_axis": 9.0, "phase": 0.1})
    nu = math.radians(nominal(r, "true_anomaly"))
    big_e = 2 * math.atan(math.sqrt((1 - e) / (1 + e)) * math.tan(nu / 2))
    assert big_e - e * math.sin(big_e) == pytest.approx(2 * math.pi * 0.1, rel=1e-10)
    assert nominal(r, "separation") == pytest.approx(9.0 * (1 - e * math.cos(big_e)), rel=1e-10)


def test_phase_zero_and_half_are_periastron_and_apastron():
    orbit = {**WINDS, "eccentricity": 0.8, "semimajor_axis": 10.0}
    p0 = run("collision", {**orbit, "phase": 0.0})
    p5 = run("collision", {**orbit, "phase": 1.5})   # phases wrap
    assert nominal(p0, "separation") == pytest.approx(2.0, rel=1e-12)
    assert nominal(p5, "separation") == pytest.approx(18.0, rel=1e-12)
    assert nominal(p5, "true_anomaly") == pytest.approx(180.0, abs=1e-9)


def test_orbit_without_phase_gives_only_the_extremes():
    r = run("collision", {**WINDS, "eccentricity": 0.3, "semimajor_axis": 5.0})
    assert "stagnation_distance1_periastron" in r.outputs and "stagnation_distance1" not in r.outputs
    assert not r.failed


def test_phase_without_orbit_is_refused_naming_it():
    r = run("collision", {**WINDS, "separation": 3.0, "phase": 0.2})
    assert "phase" in r.failed[0]
    r = run("collision", {**WINDS, "true_anomaly": 20.0})
    assert {"true_anomaly", "separation", "eccentricity"} <= set(r.failed[0])


def test_incomplete_orbit_is_refused():
    assert "semimajor_axis" in run("collision", {**WINDS, "eccentricity": 0.3}).failed[0]
    failed = run("collision", {**WINDS, "eccentricity": 0.3, "period": 100.0, "m1": 10.0}).failed[0]
    assert "m2" in failed and "m1" not in failed
    assert "period" in run("collision", {**WINDS, "separation": 2.0, "period": 100.0}).failed[0]


def test_linear_uncertainty_against_uncertainties_package():
    # r1 = D / (1 + sqrt(Mdot2 v2 / (Mdot1 v1))) propagated by the `uncertainties` package
    vals = {"mdot1": (2e-5, 4e-6), "mdot2": (1e-6, 3e-7), "vinf1": (2000.0, 150.0), "vinf2": (1800.0, 100.0),
            "separation": (4.0, 0.2)}
    r = run("collision", vals)
    x = {k: ufloat(*v) for k, v in vals.items()}
    eta = x["mdot2"] * x["vinf2"] / (x["mdot1"] * x["vinf1"])
    r1 = x["separation"] / (1 + umath.sqrt(eta))
    theta = 2.1 * (1 - eta**0.4 / 4) * eta ** (1 / 3)
    chi2 = (x["vinf2"] / 1000) ** 4 * (x["separation"] - r1) * CONSTANTS["au"].value * 100 / 1e12 / (
        x["mdot2"] / 1e-7)
    assert sigma(r, "momentum_ratio") == pytest.approx(eta.std_dev, rel=1e-6)
    assert sigma(r, "stagnation_distance1") == pytest.approx(r1.std_dev, rel=1e-6)
    assert sigma(r, "opening_half_angle_eu93") == pytest.approx(math.degrees(theta.std_dev), rel=1e-6)
    assert sigma(r, "cooling_parameter2") == pytest.approx(chi2.std_dev, rel=1e-6)


def test_monte_carlo_agrees_with_linear_for_small_errors():
    vals = {**{k: (v, 0.02 * v) for k, v in WINDS.items()}, "eccentricity": (0.5, 0.005),
            "semimajor_axis": (8.0, 0.08), "phase": (0.2, 0.002)}
    lin = run("collision", vals)
    mc = run("collision", vals, method="monte_carlo", samples=4000, seed=11)
    for key in ("opening_half_angle_crw96", "stagnation_distance2", "separation", "cooling_parameter1_periastron"):
        assert nominal(mc, key) == pytest.approx(nominal(lin, key), rel=0.01)
        assert sigma(mc, key) == pytest.approx(sigma(lin, key), rel=0.1)


def test_physics_vectorised_over_systems_and_draws():
    shape = (3, 5)
    rng = np.random.default_rng(2)
    out = w.collision(mdot1=np.full(shape, 1e-5), mdot2=rng.uniform(1e-7, 3e-5, shape), vinf1=2000.0,
                      vinf2=1500.0, eccentricity=rng.uniform(0, 0.9, shape), semimajor_axis=5.0,
                      phase=rng.uniform(0, 1, shape))
    for key in ("momentum_ratio", "opening_half_angle_crw96", "separation", "true_anomaly",
                "stagnation_distance2", "cooling_parameter1_periastron", "stagnation_distance1_apastron"):
        assert np.shape(out[key]) == shape, key
    assert np.all(out["momentum_ratio"] <= 1.0)


# -------------------------------------------------------------------------- shell distance

def test_au_per_year_constant():
    # 1 au/yr = 4.74047 km/s from the IAU 2012 au and the Julian year (astropy units)
    assert KM_S_PER_AU_PER_YEAR == pytest.approx((1 * u.au / u.yr).to_value(u.km / u.s), rel=1e-14)
    assert KM_S_PER_AU_PER_YEAR == pytest.approx(4.74047, abs=5e-6)
    assert CONSTANTS["au_per_julian_year"].unit == "km s^-1" and "IAU 2012" in CONSTANTS["au_per_julian_year"].source


def test_shell_distance_against_astropy():
    # D = v P / s with small angles (astropy's dimensionless_angles)
    period, spacing, speed = 2950.0, 410.0, 1100.0
    d = ((speed * u.km / u.s) * (period * u.d) / (spacing * u.mas)).to(u.pc, u.dimensionless_angles())
    r = run("shell-distance", {"period": period, "shell_spacing": spacing, "expansion_speed": speed})
    assert nominal(r, "distance") == pytest.approx(d.value, rel=1e-12)
    assert nominal(r, "parallax") == pytest.approx(d.to_value(u.mas, u.parallax()), rel=1e-12)
    # and back: the speed from that distance, or from that parallax
    back = run("shell-distance", {"period": period, "shell_spacing": spacing, "distance": d.value})
    assert nominal(back, "expansion_speed") == pytest.approx(speed, rel=1e-12)
    back = run("shell-distance", {"period": period, "shell_spacing": spacing, "parallax": 1e3 / d.value})
    assert nominal(back, "expansion_speed") == pytest.approx(speed, rel=1e-12)


def test_shell_distance_uncertainty_against_uncertainties_package():
    p, s, v = ufloat(2950.0, 20.0), ufloat(410.0, 15.0), ufloat(1100.0, 80.0)
    d = v * (p / 365.25) / (4.740470463533348 * s / 1000.0)
    r = run("shell-distance", {"period": (2950.0, 20.0), "shell_spacing": (410.0, 15.0),
                               "expansion_speed": (1100.0, 80.0)})
    assert nominal(r, "distance") == pytest.approx(d.nominal_value, rel=1e-9)
    assert sigma(r, "distance") == pytest.approx(d.std_dev, rel=1e-6)
    mc = run("shell-distance", {"period": (2950.0, 20.0), "shell_spacing": (410.0, 15.0),
                                "expansion_speed": (1100.0, 80.0)}, method="monte_carlo", samples=4000, seed=3)
    assert sigma(mc, "distance") == pytest.approx(d.std_dev, rel=0.1)


# ------------------------------------------------------------------------------- HTTP

def test_http_collision_with_units_and_monte_carlo(client):
    # the Sun's wind, about 1.3e9 kg/s, is ~2e-14 solMass/yr (common practice: ~1e-14); astropy converts the
    # rate; the au input given in km
    body = {"mdot1": {"value": 1.3e9, "unit": "kg/s"}, "mdot2": {"value": 1e-14, "sigma": 1e-15},
            "vinf1": 450.0, "vinf2": {"value": 0.4, "unit": "Mm/s"},
            "separation": {"value": 1.496e8, "unit": "km"}, "uncertainty": {"method": "monte_carlo",
                                                                                "samples": 500, "seed": 1}}
    status, doc = post(client, "/v1/winds/collision", body)
    assert status == 200, doc
    mdot_sun = doc["inputs"]["mdot1"]["value"]
    assert 1e-14 < mdot_sun < 3e-14
    assert mdot_sun == pytest.approx((1.3e9 * u.kg / u.s).to_value(u.Msun / u.yr), rel=1e-12)
    assert doc["inputs"]["vinf2"]["value"] == pytest.approx(400.0)
    res = doc["results"]
    assert res["separation"]["value"] == pytest.approx(1.0, rel=1e-3)
    assert {"low", "high"} <= set(res["momentum_ratio"])
    assert doc["uncertainty"]["method"] == "monte_carlo"
    assert "conventions" in doc["provenance"] and doc["provenance"]["references"]


def test_http_collision_orbit_outputs(client):
    status, doc = post(client, "/v1/winds/collision", get("collision").example)
    assert status == 200, doc
    res = doc["results"]
    for key in ("momentum_ratio", "stagnation_distance1", "stagnation_distance2", "opening_half_angle_eu93",
                "opening_half_angle_crw96", "cooling_parameter1", "cooling_parameter2",
                "stagnation_distance1_periastron", "cooling_parameter2_apastron", "post_shock_temperature1"):
        assert res[key]["sigma"] > 0, key
    assert res["stagnation_distance1_periastron"]["value"] < res["stagnation_distance1"]["value"]


@pytest.mark.parametrize("field,value", [("mdot1", 0.0), ("mdot2", -1e-6), ("vinf1", 0.0), ("vinf2", -5.0),
                                         ("separation", 0.0), ("separation", -2.0)])
def test_http_collision_refuses_non_physical(client, field, value):
    body = {**WINDS, "separation": 3.0, field: value}
    status, doc = post(client, "/v1/winds/collision", body)
    assert status == 422 and field in doc["errors"]


def test_http_phase_without_orbit(client):
    status, doc = post(client, "/v1/winds/collision", {**WINDS, "phase": 0.3})
    assert status == 422 and "phase" in doc["errors"]
    status, doc = post(client, "/v1/winds/collision", {**WINDS, "separation": 2.0, "phase": 0.3})
    assert status == 422 and "phase" in doc["errors"]
    status, doc = post(client, "/v1/winds/collision", {**WINDS, "separation": 2.0, "eccentricity": 0.3,
                                                       "semimajor_axis": 3.0})
    assert status == 422 and "separation" in doc["errors"]


def test_http_shell_distance(client):
    status, doc = post(client, "/v1/winds/shell-distance", {"period": {"value": 8.0, "unit": "yr"},
                                                            "shell_spacing": {"value": 0.41, "unit": "arcsec"},
                                                            "expansion_speed": 1100.0})
    assert status == 200, doc
    assert doc["results"]["distance"]["value"] == pytest.approx(1100.0 * 8.0 / (KM_S_PER_AU_PER_YEAR * 0.41))
    status, doc = post(client, "/v1/winds/shell-distance", {"period": 2950.0, "shell_spacing": 410.0})
    assert status == 422 and "expansion_speed" in doc["errors"]
    status, doc = post(client, "/v1/winds/shell-distance", {"period": 2950.0, "shell_spacing": 410.0,
                                                            "distance": -3.0})
    assert status == 422 and "distance" in doc["errors"]
