"""Ninth round of independent reference computations: each check value from the published formula evaluated here in
mpmath at 50 digits (or astropy's units and times), never from calcservice's physics.  Aimed at what the earlier
rounds left: the orbit geometry (vis-viva speeds, Eggleton lobes and fill factors, from masses or from a), the wind
calculations with every option in other units (cooling parameters, post-shock temperatures in keV, the radio rate
with mu, Z, gamma, a temperature in eV or keV, clumping and the Gaunt factor's frequency dependence, the three
period-change modes with dP/dt in s/s, d/yr and ms/yr, both recipes on both sides of the bi-stability jump, shell
distances with the period in yr or s and the spacing in arcsec or rad), Campbell elements from Thiele–Innes
constants in every quadrant, photocentric and combined orbits, and the warnings at the edges of a recipe's
published validity."""

from __future__ import annotations

from fractions import Fraction

import mpmath as mp
import pytest
from astropy import constants as ac

from .conftest import post
from .mpmath_helpers import precision, relative_error

working_precision = precision(50)

# IAU 2015 Resolution B3 nominal values, IAU 2012 Resolution B2 au, the Julian year
GM_SUN = mp.mpf("1.3271244e20")      # m^3 s^-2
L_SUN = mp.mpf("3.828e26")           # W
AU = mp.mpf("149597870700")          # m
R_SUN = mp.mpf("6.957e8")            # m
DAY = mp.mpf(86400)
JULIAN_YEAR = mp.mpf("365.25") * DAY
PARSEC = AU * 648000 / mp.pi         # IAU 2015 Resolution B2
LIGHT_YEAR = mp.mpf(299792458) * JULIAN_YEAR
# CODATA via astropy
K_B = mp.mpf(ac.k_B.si.value)
ELECTRON_VOLT = mp.mpf(ac.e.si.value)
M_H = mp.mpf(ac.m_p.si.value) + mp.mpf(ac.m_e.si.value)


def _ok(client, path, body):
    status, answer = post(client, path, body)
    assert status == 200, answer
    return answer


def _codes(answer):
    return {w["code"] for w in answer["warnings"]}


def _eggleton(q):
    """Eggleton (1983), ApJ 268, 368: r_L / a = 0.49 q^{2/3} / (0.6 q^{2/3} + ln(1 + q^{1/3}))."""
    q = mp.mpf(q)
    return 0.49 * q ** (mp.mpf(2) / 3) / (0.6 * q ** (mp.mpf(2) / 3) + mp.log(1 + mp.cbrt(q)))


# --------------------------------------------------------------------------- orbit geometry
@pytest.mark.parametrize("period, e, m1, m2", [(10.0, 0.0, 1.0, 1.0), (3000.0, 0.999999, 30.0, 1e-6),
                                               (0.1, 0.5, 1e-3, 50.0), (1e5, 0.9, 2.0, 0.5)])
def test_geometry_speeds_lobes_and_fill_factors_against_vis_viva_and_eggleton(client, period, e, m1, m2):
    # Kepler's third law with GM_sun (Hilditch 2001, ch. 2), vis-viva v^2 = GM (2/r - 1/a) formed at 50 digits,
    # Eggleton (1983) at the periastron distance.  Agreed to 2.7e-16 at worst (e = 0.999999).
    r = _ok(client, "/v1/orbit/geometry", {"period": period, "eccentricity": e, "m1": m1, "m2": m2,
                                            "radius1": 1.0, "radius2": 2.0})["results"]
    mass = mp.mpf(m1) + mp.mpf(m2)
    e = mp.mpf(e)
    a = (GM_SUN * mass * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2)) ** (mp.mpf(1) / 3)
    lobe1 = _eggleton(mp.mpf(m1) / m2) * a * (1 - e) / R_SUN
    lobe2 = _eggleton(mp.mpf(m2) / m1) * a * (1 - e) / R_SUN
    expected = {
        "semimajor_axis": a / AU,
        "speed_periastron": mp.sqrt(GM_SUN * mass * (2 / (a * (1 - e)) - 1 / a)) / 1000,
        "speed_apastron": mp.sqrt(GM_SUN * mass * (2 / (a * (1 + e)) - 1 / a)) / 1000,
        "roche_lobe1": lobe1, "roche_lobe2": lobe2,
        "roche_lobe1_apastron": lobe1 * (1 + e) / (1 - e), "roche_lobe2_apastron": lobe2 * (1 + e) / (1 - e),
        "fill_factor1": 1 / lobe1, "fill_factor2": 2 / lobe2,
    }
    for name, value in expected.items():
        assert relative_error(r[name]["value"], value) < 1e-15, name


def test_geometry_from_a_in_metres_and_the_period_in_years(client):
    # M = 4 pi^2 a^3 / (GM_sun P^2) (Hilditch 2001), a = 1.5e11 m and P = 1 Julian year (astropy's yr), split by
    # q = 0.25; the Roche lobe at q = 1 is 0.3789 a (Eggleton 1983's own check value).  Agreed to 7e-16.
    r = _ok(client, "/v1/orbit/geometry", {"period": {"value": 1, "unit": "yr"}, "eccentricity": 0.3,
                                            "semimajor_axis": {"value": 1.5e11, "unit": "m"},
                                            "mass_ratio": 0.25})["results"]
    a = mp.mpf(1.5e11)
    mass = 4 * mp.pi ** 2 * a ** 3 / (GM_SUN * JULIAN_YEAR ** 2)
    assert relative_error(r["total_mass"]["value"], mass) < 2e-15
    assert relative_error(r["m1"]["value"], mass / mp.mpf(1.25)) < 2e-15
    assert relative_error(r["m2"]["value"], mass / 5) < 2e-15
    assert relative_error(r["speed_periastron"]["value"], mp.sqrt(GM_SUN * mass / a * mp.mpf(1.3) / 0.7) / 1000) < 1e-15
    assert abs(float(_eggleton(1)) - 0.3789) < 5e-5     # Eggleton (1983), ApJ 268, 368: 0.3789 at q = 1


# --------------------------------------------------------------------------- colliding winds
def test_collision_stagnation_cooling_and_temperature_in_other_units(client):
    # Stevens, Blondin & Pollock (1992): r1 = D / (1 + eta^{1/2}), chi = v_8^4 d_12 / Mdot_-7; kT = (3/16) mu m_H
    # v^2 (m_H = m_p + m_e, CODATA via astropy); Eichler & Usov (1993) eq. 1.  The speed in m/s and the separation
    # in cm through astropy's units; the temperature asked for in keV.  Agreed to 2e-16.
    body = {"mdot1": 3e-6, "mdot2": 2e-7, "vinf1": {"value": 2e6, "unit": "m/s"}, "vinf2": 1500.0,
            "separation": {"value": 2e12, "unit": "cm"}, "mu1": 1.33,
            "units": {"post_shock_temperature1": "keV", "stagnation_distance2": "solRad"}}
    r = _ok(client, "/v1/winds/collision", body)["results"]
    eta = mp.mpf(2e-7) * 1500 / (mp.mpf(3e-6) * 2000)
    d = mp.mpf(2e12) / 100 / AU
    r1, r2 = d / (1 + mp.sqrt(eta)), d * mp.sqrt(eta) / (1 + mp.sqrt(eta))
    expected = {
        "momentum_ratio": eta,
        "stagnation_distance1": r1,
        "stagnation_distance2": r2 * AU / R_SUN,
        "cooling_parameter1": 2 ** 4 * (r1 * AU * 100 / mp.mpf(1e12)) / (mp.mpf(3e-6) / mp.mpf(1e-7)),
        "cooling_parameter2": mp.mpf(1.5) ** 4 * (r2 * AU * 100 / mp.mpf(1e12)) / (mp.mpf(2e-7) / mp.mpf(1e-7)),
        "post_shock_temperature1": mp.mpf(3) / 16 * mp.mpf(1.33) * M_H * mp.mpf(2e6) ** 2 / ELECTRON_VOLT / 1000,
        "opening_half_angle_eu93": mp.degrees(2.1 * (1 - eta ** mp.mpf(0.4) / 4) * mp.cbrt(eta)),
    }
    for name, value in expected.items():
        assert relative_error(r[name]["value"], value) < 1e-15, name
    assert r["post_shock_temperature1"]["unit"] == "keV"


# --------------------------------------------------------------------------- radio mass loss
def _wright_barlow(flux_mjy, frequency_ghz, distance_kpc, vinf, mu, z, gamma, temperature, clumping=1):
    """Wright & Barlow (1975) eq. 8 with the Gaunt factor of Leitherer & Robert (1991) and Mdot ~ f^{1/2}."""
    nu = mp.mpf(frequency_ghz) * 10 ** 9
    gaunt = 9.77 * (1 + 0.13 * mp.log10(mp.mpf(temperature) ** 1.5 / (z * nu)))
    rate = (0.095 * mu * vinf * (mp.mpf(flux_mjy) / 1000) ** 0.75 * mp.mpf(distance_kpc) ** 1.5
            / (z * mp.sqrt(gamma * gaunt * nu)) * mp.sqrt(clumping))
    return rate, gaunt


@pytest.mark.parametrize("body, reference", [
    ({"flux_density": 1.8, "frequency": 8.4, "distance": 2.1, "vinf": 1700, "mu": 1.5, "z_rms": 1.2,
      "gamma_e": 1.1, "temperature": 1e4, "clumping": 0.1}, (1.8, 8.4, 2.1, 1700, 1.5, 1.2, 1.1, 1e4, 0.1)),
    # a millimetre frequency and the temperature as kT in keV (k_B and e CODATA via astropy)
    ({"flux_density": 0.5, "frequency": {"value": 250, "unit": "GHz"}, "distance": 1.0, "vinf": 2000,
      "temperature": {"value": 0.001, "unit": "keV"}, "z_rms": 1, "mu": 1.3, "gamma_e": 1},
     (0.5, 250, 1.0, 2000, 1.3, 1, 1, ELECTRON_VOLT / K_B)),
    # the flux in SI, the distance in pc, the o-star defaults (H and He, n(He)/n(H) = 0.1, both singly ionised)
    ({"flux_density": {"value": 1.8e-29, "unit": "W m-2 Hz-1"}, "frequency": 8.4,
      "distance": {"value": 2100, "unit": "pc"}, "vinf": 1700, "temperature": {"value": 2, "unit": "eV"}},
     (1.8, 8.4, 2.1, 1700, (mp.mpf("1.008") + mp.mpf("0.4003")) / mp.mpf("1.1"), 1, 1, 2 * ELECTRON_VOLT / K_B)),
])
def test_radio_rate_with_every_option_and_other_units(client, body, reference):
    # Agreed to 1.3e-16.
    r = _ok(client, "/v1/winds/mass-loss/radio", body)["results"]
    rate, gaunt = _wright_barlow(*reference)
    assert relative_error(r["mass_loss_rate"]["value"], rate) < 1e-15
    assert relative_error(r["gaunt_factor"]["value"], gaunt) < 1e-15


# --------------------------------------------------------------------------- period change
@pytest.mark.parametrize("mode", ["jeans", "conservative", "isotropic-re-emission"])
@pytest.mark.parametrize("value, unit, seconds_per_year", [(1e-8, "", JULIAN_YEAR), (0.5, "d/yr", DAY),
                                                           (3e-3, "s/yr", 1), (-2.0, "ms/yr", mp.mpf("1e-3"))])
def test_period_change_modes_with_dp_dt_in_other_units(client, mode, value, unit, seconds_per_year):
    # Jeans (1924): Pdot/P = -2 Mdot / M; conservative (Hilditch 2001, sect. 4.3): Pdot/P = 3 dM1/dt (M1 - M2) /
    # (M1 M2); isotropic re-emission (Soberman, Phinney & van den Heuvel 1997): Pdot/P = dM1/dt [3 M1/(M M2) - 3/M1
    # + 1/M], each derived again here.  Agreed to 1.6e-16.
    body = {"period": 6.3, "period_derivative": {"value": value, "unit": unit}, "m1": 27, "m2": 11, "mode": mode}
    r = _ok(client, "/v1/winds/mass-loss/period-change", body)["results"]
    m1, m2 = mp.mpf(27), mp.mpf(11)
    mass = m1 + m2
    rate = mp.mpf(value) * seconds_per_year / (mp.mpf(6.3) * DAY)        # Pdot / P per Julian year
    expected = {"jeans": mass * rate / 2, "conservative": -m1 * m2 * rate / (3 * (m1 - m2)),
                "isotropic-re-emission": -rate / (3 * m1 / (mass * m2) - 3 / m1 + 1 / mass)}[mode]
    assert relative_error(r["mass_loss_rate"]["value"], expected) < 1e-15
    assert relative_error(r["relative_period_derivative"]["value"], rate) < 1e-15


# --------------------------------------------------------------------------- recipes
def _eddington(luminosity, mass):
    """Vink, de Koter & Lamers (2001): Gamma_e = sigma_e L / (4 pi c GM), sigma_e = 0.325 cm^2/g."""
    return mp.mpf("0.0325") * luminosity * L_SUN / (4 * mp.pi * mp.mpf(299792458) * GM_SUN * mass)


def _vink(luminosity, mass, teff, z, ratio=None):
    """Vink, de Koter & Lamers (2001), A&A 369, 574, eqs. 14-15 (jump), 24 (hot), 25 (cool); the ratio
    v_inf/v_esc 2.6 (hot) and 1.3 (cool) when not given.  Returns (log Mdot, T_jump)."""
    luminosity, mass, teff, z = (mp.mpf(x) for x in (luminosity, mass, teff, z))
    jump = 1000 * (61.2 + 2.59 * (-14.94 + 3.1857 * _eddington(luminosity, mass) + 0.85 * mp.log10(z)))
    if teff >= jump:
        x = mp.log10(teff / 40000)
        return (-6.697 + 2.194 * mp.log10(luminosity / 1e5) - 1.313 * mp.log10(mass / 30)
                - 1.226 * mp.log10(mp.mpf(ratio or 2.6) / 2) + 0.933 * x - 10.92 * x * x + 0.85 * mp.log10(z)), jump
    return (-6.688 + 2.210 * mp.log10(luminosity / 1e5) - 1.339 * mp.log10(mass / 30)
            - 1.601 * mp.log10(mp.mpf(ratio or 1.3) / 2) + 1.07 * mp.log10(teff / 20000) + 0.85 * mp.log10(z)), jump


@pytest.mark.parametrize("luminosity, mass, teff, z, ratio", [
    (3.2e5, 38, 36500, 1, None), (1e5, 20, 18000, 0.5, None), (1e5, 20, 18000, 1, 2.0), (5e5, 40, 25000, 1, None),
    (1e6, 60, 50000, 3, None), (1e5, 30, 30000, 1, None), (3e4, 15, 12499, 1 / 30, None)])
def test_vink_recipe_on_both_sides_of_the_jump(client, luminosity, mass, teff, z, ratio):
    # Agreed to 1.4e-16 in log Mdot and the jump temperature, 1.8e-15 in Mdot (10^x multiplies the rounding of a
    # log near -6 by ln(10) 6)
    body = {"recipe": "vink-2001", "luminosity": luminosity, "mass": mass, "teff": teff, "metallicity": z}
    if ratio:
        body["vinf_over_vesc"] = ratio
    r = _ok(client, "/v1/winds/mass-loss/recipe", body)["results"]
    log_rate, jump = _vink(luminosity, mass, teff, z, ratio)
    assert relative_error(r["log_mass_loss_rate"]["value"], log_rate) < 5e-16
    assert relative_error(r["mass_loss_rate"]["value"], 10 ** log_rate) < 4e-15
    assert relative_error(r["bistability_jump_temperature"]["value"], jump) < 5e-16
    assert relative_error(r["eddington_factor"]["value"], _eddington(luminosity, mass)) < 5e-16


def test_nugis_lamers_recipe_with_the_luminosity_in_watts(client):
    # Nugis & Lamers (2000), A&A 360, 227, eq. 22; L in W over the IAU 2015 nominal L_sun.  Agreed to 8e-17.
    body = {"recipe": "nugis-lamers-2000", "luminosity": {"value": 7.656e31, "unit": "W"}, "helium_fraction": 0.86,
            "metal_fraction": 0.12}
    r = _ok(client, "/v1/winds/mass-loss/recipe", body)["results"]
    log_rate = (-11 + 1.29 * mp.log10(mp.mpf(7.656e31) / L_SUN) + 1.73 * mp.log10(mp.mpf(0.86))
                + 0.47 * mp.log10(mp.mpf(0.12)))
    assert relative_error(r["log_mass_loss_rate"]["value"], log_rate) < 5e-16


@pytest.mark.parametrize("teff, hot_fit_warns", [(27499.999999, True), (27500.0, True), (27500.000001, False),
                                                 (50000.0, False), (50000.000001, True)])
def test_vink_hot_side_fit_warns_exactly_outside_its_published_range(client, teff, hot_fit_warns):
    # Vink, de Koter & Lamers (2001), eq. 24 holds for 27 500 K < Teff <= 50 000 K (# from memory: an open bound
    # below, a closed one above; eq. 25 for 12 500 <= Teff <= 22 500 K).  The jump of this star lies at 24.2 kK, so
    # the hot fit is used at each of these temperatures.  At exactly 27 500 K the service used the hot fit without
    # a word: it took the lower bound as closed.
    body = {"recipe": "vink-2001", "luminosity": 3.2e5, "mass": 38, "teff": teff}
    answer = _ok(client, "/v1/winds/mass-loss/recipe", body)
    assert answer["results"]["bistability_jump_temperature"]["value"] < 27000
    assert ("vink_fit_out_of_range" in _codes(answer)) == hot_fit_warns


@pytest.mark.parametrize("teff, warns", [(12500.0, False), (12499.9999, True)])
def test_vink_cool_side_fit_is_closed_at_12500(client, teff, warns):
    # Vink, de Koter & Lamers (2001), eq. 25: 12 500 <= Teff <= 22 500 K (# from memory)
    answer = _ok(client, "/v1/winds/mass-loss/recipe", {"recipe": "vink-2001", "luminosity": 3.2e5, "mass": 38,
                                                         "teff": teff})
    assert ("vink_fit_out_of_range" in _codes(answer)) == warns


# --------------------------------------------------------------------------- shell distance
@pytest.mark.parametrize("period, spacing, speed", [
    ({"value": 2950, "unit": "d"}, {"value": 410, "unit": "mas"}, {"value": 1100, "unit": "km/s"}),
    ({"value": 8.08, "unit": "yr"}, {"value": 0.41, "unit": "arcsec"}, {"value": 1.1e6, "unit": "m/s"}),
    ({"value": 2.5e8, "unit": "s"}, {"value": 2e-6, "unit": "rad"}, {"value": 1100, "unit": "km/s"})])
def test_shell_distance_and_back_through_light_years(client, period, spacing, speed):
    # D = v P / s (the small angle s in radians), the parsec of IAU 2015 Resolution B2 (648000/pi au), the light
    # year c Julian year (astropy's lyr); the speed back from the distance in light years.  Agreed to 4e-16.
    seconds = mp.mpf(period["value"]) * {"d": DAY, "yr": JULIAN_YEAR, "s": 1}[period["unit"]]
    radians = mp.mpf(spacing["value"]) * {"mas": mp.pi / 648000000, "arcsec": mp.pi / 648000, "rad": 1}[spacing["unit"]]
    metres_per_second = mp.mpf(speed["value"]) * {"km/s": 1000, "m/s": 1}[speed["unit"]]
    distance = metres_per_second * seconds / radians / PARSEC
    r = _ok(client, "/v1/winds/shell-distance", {"period": period, "shell_spacing": spacing,
                                                  "expansion_speed": speed})["results"]
    assert relative_error(r["distance"]["value"], distance) < 1e-15
    assert relative_error(r["parallax"]["value"], 1000 / distance) < 1e-15
    light_years = float(distance * PARSEC / LIGHT_YEAR)
    r = _ok(client, "/v1/winds/shell-distance", {"period": period, "shell_spacing": spacing,
                                                  "distance": {"value": light_years, "unit": "lyr"}})["results"]
    assert relative_error(r["expansion_speed"]["value"], metres_per_second / 1000) < 1e-15


# --------------------------------------------------------------------------- Campbell elements
def _campbell(a_, b_, f_, g_):
    """Binnendijk (1960) / Heintz (1978): u = (A^2 + B^2 + F^2 + G^2) / 2, v = AG - BF, a^2 = u + (u^2 - v^2)^{1/2},
    cos i = v / a^2, omega + node = atan2(B - F, A + G), omega - node = atan2(-B - F, A - G), node in [0, 180)."""
    a_, b_, f_, g_ = (mp.mpf(x) for x in (a_, b_, f_, g_))
    u, v = (a_ ** 2 + b_ ** 2 + f_ ** 2 + g_ ** 2) / 2, a_ * g_ - b_ * f_
    a = mp.sqrt(u + mp.sqrt(u * u - v * v))
    total, difference = mp.atan2(b_ - f_, a_ + g_), mp.atan2(-b_ - f_, a_ - g_)
    omega, node = mp.degrees((total + difference) / 2), mp.degrees((total - difference) / 2) % 360
    if node >= 180:
        node, omega = node - 180, omega + 180
    return a, mp.degrees(mp.acos(v / a ** 2)), omega % 360, node


def _thiele_innes(a, i, w, n):
    """Heintz (1978): A = a (cos w cos W - sin w sin W cos i), B = a (cos w sin W + sin w cos W cos i),
    F = a (-sin w cos W - cos w sin W cos i), G = a (-sin w sin W + cos w cos W cos i)."""
    i, w, n = (mp.radians(x) for x in (i, w, n))
    ci, cw, sw, cn, sn = mp.cos(i), mp.cos(w), mp.sin(w), mp.cos(n), mp.sin(n)
    return (a * (cw * cn - sw * sn * ci), a * (cw * sn + sw * cn * ci), a * (-sw * cn - cw * sn * ci),
            a * (-sw * sn + cw * cn * ci))


def _angle_apart(x, reference):
    return float(abs((mp.mpf(x) - reference + 180) % 360 - 180))


@pytest.mark.parametrize("inclination", [1e-6, 0.5, 89.999, 90.0, 135.0, 179.999])
def test_campbell_and_thiele_innes_in_every_quadrant(client, inclination):
    # Each quadrant of omega and of the node, both ways; the Campbell reference from the rounded constants (so the
    # conditioning near i = 0 and 180 deg, where omega and the node separate badly, is the reference's too).  Agreed
    # to 2.3e-16 of a in the constants; 1.5e-16 in a, 2.4e-14 deg in i, 1e-12 deg in the angles.
    for omega in (0.0, 30.0, 135.0, 200.0, 330.0, 359.9999):
        for node in (10.0, 95.0, 179.99999):
            r = _ok(client, "/v1/astrometric/thiele-innes", {"angular_semimajor_axis": 123.4,
                                                              "inclination": inclination, "omega": omega,
                                                              "node": node})["results"]
            constants = [float(x) for x in _thiele_innes(mp.mpf(123.4), inclination, omega, node)]
            for name, value in zip("ABFG", constants):
                assert abs(r[name]["value"] - value) <= 4e-16 * 123.4, (omega, node, name)
            a, i, w, n = _campbell(*constants)
            r = _ok(client, "/v1/astrometric/campbell", dict(zip("ABFG", constants)))["results"]
            assert relative_error(r["angular_semimajor_axis"]["value"], a) < 3e-16
            assert _angle_apart(r["inclination"]["value"], i) < 1e-13
            assert _angle_apart(r["omega"]["value"], w) < 1e-11
            assert _angle_apart(r["node"]["value"], n) < 1e-11
            assert _angle_apart(r["omega_primary"]["value"], w + 180) < 1e-11


# --------------------------------------------------------------------------- photocentre, combined orbits
@pytest.mark.parametrize("alpha, parallax, period, m1, beta", [(5.0, 20.0, 800.0, 1.0, 0.0),
                                                               (5.0, 20.0, 800.0, 1.0, 0.3),
                                                               (0.01, 1.0, 10.0, 50, 0.0),
                                                               (300, 5, 365.25, 0.1, 0.0), (50, 10, 3000, 1.0, 0.9)])
def test_photocentre_against_the_astrometric_mass_function_solved_in_mpmath(client, alpha, parallax, period, m1, beta):
    # van de Kamp (1967): f_ast = 4 pi^2 alpha^3 / (GM_sun P^2) = (M1 + M2)(B - beta)^3, solved for M2 by mpmath's
    # root finder.  Agreed to 6.5e-16.
    body = {"photocentre_semimajor_axis": alpha, "parallax": parallax, "period": period, "primary_mass": m1}
    if beta:
        body["luminosity_fraction"] = beta
    r = _ok(client, "/v1/astrometric/photocentre", body)["results"]
    f = 4 * mp.pi ** 2 * (mp.mpf(alpha) / parallax * AU) ** 3 / (GM_SUN * (mp.mpf(period) * DAY) ** 2)
    m1, beta = mp.mpf(m1), mp.mpf(beta)
    m2 = mp.findroot(lambda x: (m1 + x) * (x / (m1 + x) - beta) ** 3 - f, (m1 + 1) * 10)
    a = (GM_SUN * (m1 + m2) * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2)) ** (mp.mpf(1) / 3) / AU
    assert relative_error(r["astrometric_mass_function"]["value"], f) < 1e-15
    assert relative_error(r["m2"]["value"], m2) < 1e-15
    assert relative_error(r["semimajor_axis"]["value"], a) < 1e-15
    assert relative_error(r["a1"]["value"], m2 / (m1 + m2) * a) < 1e-15


@pytest.mark.parametrize("period, k1, k2, e, i, angular", [(100, 30, 40, 0.3, 60, 20),
                                                           (1e4, 0.5, 50, 0.99, 89.99, 300), (2, 150, 200, 0, 90, 1.0)])
def test_orbital_parallax_of_sb2_and_visual_orbits(client, period, k1, k2, e, i, angular):
    # a sin i = K P (1 - e^2)^{1/2} / (2 pi) for each star (Hilditch 2001, ch. 2), parallax = a'' / a, masses by
    # Kepler's third law split as K2 : K1.  Agreed to 7.5e-16.
    r = _ok(client, "/v1/combined/orbital-parallax", {"period": period, "k1": k1, "k2": k2, "eccentricity": e,
                                                       "inclination": i, "angular_semimajor_axis": angular})["results"]
    seconds, e = mp.mpf(period) * DAY, mp.mpf(e)
    a = (mp.mpf(k1) + k2) * 1000 * seconds * mp.sqrt(1 - e ** 2) / (2 * mp.pi) / mp.sin(mp.radians(i)) / AU
    mass = 4 * mp.pi ** 2 * (a * AU) ** 3 / (GM_SUN * seconds ** 2)
    assert relative_error(r["parallax"]["value"], angular / a) < 1e-15
    assert relative_error(r["distance"]["value"], 1000 * a / angular) < 1e-15
    assert relative_error(r["m1"]["value"], mass * k2 / (k1 + k2)) < 1.5e-15
    assert relative_error(r["m2"]["value"], mass * k1 / (k1 + k2)) < 1.5e-15


# --------------------------------------------------------------------------- equal winds
@pytest.mark.parametrize("mdot1, vinf1, mdot2, vinf2", [(7.5e-6, 3000, 2.25e-5, 1000), (8.2e-6, 7400, 6.068e-5, 1000),
                                                        (5.6e-6, 3400, 1.904e-5, 1000)])
def test_winds_of_equal_momentum_are_not_reported_swapped(client, mdot1, vinf1, mdot2, vinf2):
    # Mdot1 v1 = Mdot2 v2 in the decimals given (7.5e-6 * 3000 = 2.25e-5 * 1000 = 0.0225), so eta = 1 exactly
    # (Stevens, Blondin & Pollock 1992): the winds are equal, and neither is the stronger.  The four inputs rounded
    # to doubles and the two products and their ratio rounded made eta 1 + 2.2e-16, and the answer warned
    # roles_swapped ("star 2 has the stronger wind") over a difference the inputs do not carry.
    exact = Fraction(str(mdot2)) * vinf2 / (Fraction(str(mdot1)) * vinf1)
    assert exact == 1
    answer = _ok(client, "/v1/winds/collision", {"mdot1": mdot1, "mdot2": mdot2, "vinf1": vinf1, "vinf2": vinf2,
                                                  "separation": 1.0})
    assert "roles_swapped" not in _codes(answer)
    assert relative_error(answer["results"]["momentum_ratio"]["value"], 1) < 5e-16
    assert relative_error(answer["results"]["opening_half_angle_crw96"]["value"], 90) < 5e-16


def test_a_second_wind_stronger_by_a_part_in_1e12_is_reported_swapped(client):
    # eta = 1 + 1e-12, far above the roundings of the inputs: star 2's wind is the stronger, and the answer says so
    answer = _ok(client, "/v1/winds/collision", {"mdot1": 1e-6, "mdot2": 1.000000000001e-6, "vinf1": 1000,
                                                  "vinf2": 1000, "separation": 1.0})
    assert "roles_swapped" in _codes(answer)
    assert relative_error(answer["results"]["momentum_ratio"]["value"], 1 / mp.mpf("1.000000000001")) < 5e-16


# --------------------------------------------------------------------------- a temperature in Celsius
def test_a_celsius_temperature_is_refused_for_what_it_is(client):
    # astropy converts deg_C to K only with its temperature equivalency (T_K = T_C + 273.15): an offset, which no
    # scale factor of a value and its sigma can carry.  The refusal said deg_C "cannot be converted to 'K' (a
    # temperature unit, or an energy unit for kT, is needed)", as if deg_C were no temperature unit.
    from astropy import units as u
    assert (20 * u.deg_C).to_value(u.K, equivalencies=u.temperature()) == pytest.approx(293.15)   # astropy
    body = {"flux_density": 1.8, "frequency": 8.4, "distance": 2.1, "vinf": 1700,
            "temperature": {"value": 9726.85, "unit": "deg_C"}}
    status, answer = post(client, "/v1/winds/mass-loss/radio", body)
    assert status == 422
    message = answer["errors"]["temperature"][0]
    assert "zero is not 0 K" in message and "'K'" in message and "energy unit for kT" in message
    assert "a temperature unit" not in message


@pytest.mark.parametrize("mdot1, vinf1, mdot2, vinf2", [(8.4e-4, 4900, 4.116e-7, 1000), (1e-5, 1000, 1e-9, 1000),
                                                        (2e-6, 1000, 1e-10, 2000)])
def test_a_momentum_ratio_of_exactly_1e_4_is_inside_the_eichler_usov_range(client, mdot1, vinf1, mdot2, vinf2):
    # Eichler & Usov (1993) give their fit for 1e-4 <= eta <= 1, a closed range (# from memory).  8.4e-4 solMass/yr at
    # 4900 km/s against 4.116e-7 at 1000 km/s is eta = 1e-4 exactly in the decimals given; the roundings made it
    # 9.999999999999999e-05 and the answer warned eu93_out_of_range, inside the range (four pairs in ten of those
    # sampled).
    exact = Fraction(str(mdot2)) * vinf2 / (Fraction(str(mdot1)) * vinf1)
    assert exact == Fraction(1, 10000)
    answer = _ok(client, "/v1/winds/collision", {"mdot1": mdot1, "mdot2": mdot2, "vinf1": vinf1, "vinf2": vinf2,
                                                  "separation": 1.0})
    assert "eu93_out_of_range" not in _codes(answer)
    assert relative_error(answer["results"]["momentum_ratio"]["value"], mp.mpf("1e-4")) < 5e-16


def test_a_momentum_ratio_just_below_1e_4_is_outside_the_eichler_usov_range(client):
    # eta = 0.99999999999 1e-4, far below the roundings of the inputs: outside the fit's range, and said so
    answer = _ok(client, "/v1/winds/collision", {"mdot1": 1e-5, "mdot2": 0.99999999999e-9, "vinf1": 1000,
                                                  "vinf2": 1000, "separation": 1.0})
    assert "eu93_out_of_range" in _codes(answer)


@pytest.mark.parametrize("value, unit, warns", [(0.01, "", False), (0.01, "yr/yr", False), (315576, "s/yr", False),
                                                (0.0100000001, "", True), (-0.0100000001, "", True)])
def test_a_period_changing_by_exactly_one_percent_per_orbit_is_not_warned_faster(client, value, unit, warns):
    # not_secular says "the period changes by more than 1 % of itself per orbit (|dP/dt| > 0.01)" (a rule of thumb,
    # common practice).  dP/dt = 0.01 given as a pure number is held as 0.01 x 31557600 s/yr (astropy's Julian
    # year) and read back as 0.010000000000000002: warned at exactly 1 %.
    body = {"period": 6.3, "period_derivative": {"value": value, "unit": unit}, "m1": 27, "m2": 11, "mode": "jeans"}
    assert ("not_secular" in _codes(_ok(client, "/v1/winds/mass-loss/period-change", body))) == warns


@pytest.mark.parametrize("metres_per_second, kilometres_per_second", [(519502, 519.502), (495186, 495.186),
                                                                      (279268, 279.268)])
def test_equal_semi_amplitudes_in_two_units_are_equal_masses(client, metres_per_second, kilometres_per_second):
    # q = K1/K2 = 1 (Hilditch 2001, ch. 2) for K1 = 519502 m/s and K2 = 519.502 km/s; astropy's conversion, x 0.001,
    # gives 519.5020000000001 km/s (checked here), so q came out 1.0000000000000002 and the answer warned
    # primary_less_massive ("star 1 is the less massive star") for a pair of equal masses
    from astropy import units as u
    assert (metres_per_second * u.m / u.s).to_value(u.km / u.s) > kilometres_per_second        # astropy
    answer = _ok(client, "/v1/spectroscopic/sb2", {"period": 10, "k1": {"value": metres_per_second, "unit": "m/s"},
                                                    "k2": kilometres_per_second, "eccentricity": 0.1})
    assert "primary_less_massive" not in _codes(answer)
    assert relative_error(answer["results"]["mass_ratio"]["value"], 1) < 5e-16


def test_a_primary_lighter_by_a_part_in_1e12_is_warned(client):
    answer = _ok(client, "/v1/spectroscopic/sb2", {"period": 10, "k1": 45.300000000045, "k2": 45.3,
                                                    "eccentricity": 0.1})
    assert "primary_less_massive" in _codes(answer)


# --------------------------------------------------------------------------- shell forecast: dates through astropy
@pytest.mark.parametrize("epoch, observed, time_format", [
    (2457754.0, 2457755.0, None), (57753.5, 57754.5, "mjd"), (57753.123456789, 57754.987654321, "mjd"),
    ("2016-12-31T12:00:00Z", "2017-01-01T12:00:00Z", None),           # across the leap second of 2016-12-31
    ("2016-12-31T23:59:60Z", "2017-06-01T05:00:00+05:00", None)])
def test_shell_ages_and_radii_against_astropy_time(client, epoch, observed, time_format):
    # Ages t - (t0 + n P) in Julian years from astropy.time's UTC Julian Dates (jd1 + jd2 summed at 50 digits: a day
    # holding a leap second counts 86401 s as one day, the documented iso convention), numbers as JD or MJD as the
    # time_format says; theta = v age / D with 1 au/yr = 4.74047 km/s (IAU 2012 au, Julian year).  An ISO date is
    # held as one JD double (2.3e-10 d of rounding): agreed to 5e-10 d in the age; numbers to 2e-16 relative.
    from astropy.time import Time

    def jd(x):
        if isinstance(x, str):
            t = Time(x.replace("Z", "").replace("+05:00", ""), scale="utc")
            return mp.mpf(t.jd1) + mp.mpf(t.jd2) - (mp.mpf(5) / 24 if "+05:00" in x else 0)
        return mp.mpf(str(x)) + (mp.mpf("2400000.5") if time_format == "mjd" else 0)

    body = {"period": 1.0, "formation_epoch": epoch, "observation_date": observed, "expansion_speed": 1000,
            "distance": 1000, "shells": [0, -3]}
    if time_format:
        body["time_format"] = time_format
    series = _ok(client, "/v1/winds/shell-forecast", body)["results"]["series"]
    for k, n in enumerate((0, -3)):
        days = jd(observed) - jd(epoch) - n
        age = days / mp.mpf("365.25")
        angular = 1000 * mp.mpf(1000) * age / (AU / JULIAN_YEAR / 1000) / 1000
        if isinstance(epoch, str):
            assert abs(mp.mpf(series["age"]["value"][k]) * mp.mpf("365.25") - days) < 5e-10
        else:
            assert relative_error(series["age"]["value"][k], age) < 2e-16 + 1e-11 / days
            assert relative_error(series["angular_radius"]["value"][k], angular) < 4e-16 + 1e-11 / days


def test_equal_semi_amplitudes_in_two_units_give_an_orbital_parallax_of_equal_masses(client):
    # as test_equal_semi_amplitudes_in_two_units_are_equal_masses, for the combined orbit (q = K1/K2 = 1)
    body = {"period": 100, "k1": {"value": 519502, "unit": "m/s"}, "k2": 519.502, "eccentricity": 0.3,
            "inclination": 60, "angular_semimajor_axis": 20}
    answer = _ok(client, "/v1/combined/orbital-parallax", body)
    assert "primary_less_massive" not in _codes(answer)
    assert relative_error(answer["results"]["mass_ratio"]["value"], 1) < 5e-16
    body["k1"] = 519.502000001
    assert "primary_less_massive" in _codes(_ok(client, "/v1/combined/orbital-parallax", body))


@pytest.mark.parametrize("frequency, warns", [({"value": 1e12, "unit": "Hz"}, False),
                                              ({"value": 1, "unit": "THz"}, False),
                                              ({"value": 1.000000001e12, "unit": "Hz"}, True)])
def test_a_frequency_of_1000_ghz_in_hertz_is_not_beyond_the_gaunt_factors_range(client, frequency, warns):
    # gaunt_factor_out_of_range warns "frequency above 1000 GHz"; 1e12 Hz is 1000 GHz, which astropy's conversion
    # (x 1e-9, checked here) makes 1000.0000000000001
    from astropy import units as u
    assert (1e12 * u.Hz).to_value(u.GHz) > 1000                                                  # astropy
    body = {"flux_density": 1.8, "frequency": frequency, "distance": 2.1, "vinf": 1700}
    assert ("gaunt_factor_out_of_range" in _codes(_ok(client, "/v1/winds/mass-loss/radio", body))) == warns


# --------------------------------------------------------------------------- sb2 at extreme q and e, in other units
@pytest.mark.parametrize("period, k1, k2, e, inclination", [
    (10, 1e-6, 100, 0.0, 90), (10, 100, 1e-6, 0.5, 90), (1e4, 30, 30, 1 - 1e-12, 30), (0.01, 500, 400, 1e-12, 0.001),
    (3.5, {"value": 80000, "unit": "m/s"}, {"value": 0.1, "unit": "km/s"}, 0.999999, {"value": 1.2, "unit": "rad"}),
    ({"value": 3e6, "unit": "s"}, 40, 60, 0.3, {"value": 300000, "unit": "arcsec"})])
def test_sb2_at_extreme_mass_ratios_and_eccentricities(client, period, k1, k2, e, inclination):
    # Hilditch (2001), ch. 2: a_j sin i = K_j P (1 - e^2)^{1/2} / (2 pi), M_1,2 sin^3 i = P (K1 + K2)^2 K_2,1
    # (1 - e^2)^{3/2} / (2 pi G), with GM_sun; units through their definitions (astropy's).  Agreed to 4.4e-16.
    def value(x, scale):
        return mp.mpf(x["value"]) * scale[x["unit"]] if isinstance(x, dict) else mp.mpf(x) * scale[None]
    seconds = value(period, {None: DAY, "s": 1})
    speeds = [value(k, {None: 1000, "m/s": 1, "km/s": 1000}) for k in (k1, k2)]
    sin_i = mp.sin(value(inclination, {None: mp.pi / 180, "rad": 1, "arcsec": mp.pi / 648000}))
    e = mp.mpf(e)
    root = mp.sqrt(1 - e ** 2)
    a1, a2 = (k * seconds * root / (2 * mp.pi) for k in speeds)
    m1 = seconds * (speeds[0] + speeds[1]) ** 2 * speeds[1] * root ** 3 / (2 * mp.pi * GM_SUN)
    m2 = m1 * speeds[0] / speeds[1]
    a = (a1 + a2) / sin_i / AU
    expected = {"mass_ratio": speeds[0] / speeds[1], "m1_sin3i": m1, "m2_sin3i": m2, "a_sin_i": (a1 + a2) / AU,
                "a1_sin_i": a1 / AU, "a2_sin_i": a2 / AU, "m1": m1 / sin_i ** 3, "m2": m2 / sin_i ** 3,
                "semimajor_axis": a, "periastron_distance": a * (1 - e), "apastron_distance": a * (1 + e)}
    r = _ok(client, "/v1/spectroscopic/sb2", {"period": period, "k1": k1, "k2": k2, "eccentricity": float(e),
                                               "inclination": inclination})["results"]
    for name, reference in expected.items():
        assert relative_error(r[name]["value"], reference) < 1.5e-15, name


# --------------------------------------------------------------------------- colliding winds around an orbit
@pytest.mark.parametrize("e, phase, period, m1, m2", [(0.64, 0.1, 2950, 18, 24), (0.9, 0.49, 2000, 30, 20),
                                                      (0.0, 0.3, 100, 10, 10), (0.99, -0.001, 5000, 40, 30),
                                                      (0.5, 3.75, 100, 1, 1)])
def test_collision_around_an_orbit_at_a_phase(client, e, phase, period, m1, m2):
    # Kepler's equation M = E - e sin E solved by mpmath's root finder at M = 2 pi (phase - nearest whole number),
    # r = a (1 - e cos E), tan(nu/2) = ((1 + e)/(1 - e))^{1/2} tan(E/2); a by Kepler's third law with GM_sun
    # (Hilditch 2001); r1 = r / (1 + eta^{1/2}) (Stevens, Blondin & Pollock 1992).  Agreed to 3.3e-16 in r and
    # 1.7e-14 deg in nu.
    body = {"mdot1": 2.4e-5, "mdot2": 1.1e-6, "vinf1": 2300, "vinf2": 1900, "eccentricity": e, "period": period,
            "m1": m1, "m2": m2, "phase": phase}
    r = _ok(client, "/v1/winds/collision", body)["results"]
    e = mp.mpf(e)
    a = (GM_SUN * (m1 + m2) * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2)) ** (mp.mpf(1) / 3) / AU
    mean = 2 * mp.pi * (mp.mpf(phase) - mp.nint(phase))
    big_e = mp.findroot(lambda x: x - e * mp.sin(x) - mean, mean)
    separation = a * (1 - e * mp.cos(big_e))
    nu = mp.degrees(2 * mp.atan2(mp.sqrt(1 + e) * mp.sin(big_e / 2), mp.sqrt(1 - e) * mp.cos(big_e / 2))) % 360
    eta = mp.mpf(1.1e-6) * 1900 / (mp.mpf(2.4e-5) * 2300)
    assert relative_error(r["semimajor_axis"]["value"], a) < 1e-15
    assert relative_error(r["separation"]["value"], separation) < 1e-15
    assert _angle_apart(r["true_anomaly"]["value"], nu) < 3e-14
    assert relative_error(r["stagnation_distance1"]["value"], separation / (1 + mp.sqrt(eta))) < 1e-15
    assert relative_error(r["stagnation_distance1_apastron"]["value"], a * (1 + e) / (1 + mp.sqrt(eta))) < 1e-15


def test_radio_photosphere_against_the_free_free_optical_depth(client):
    # tau(p) = pi C / (2 p^3), C = 0.018 T^{-3/2} Z^2 gamma g nu^{-2} (Mdot / (4 pi v mu m_H))^2 (Rybicki & Lightman
    # 1979, eq. 5.19b; Wright & Barlow 1975), M_sun = GM_sun / G (IAU 2015 B3, CODATA G via astropy), cgs.
    # Agreed to 3.7e-16.
    body = {"flux_density": 0.3, "frequency": 43, "distance": 1.5, "vinf": 2500, "mu": 1.4, "z_rms": 1.1,
            "gamma_e": 1.05, "temperature": 3e4, "stellar_radius": 20}
    r = _ok(client, "/v1/winds/mass-loss/radio", body)["results"]
    mu, z, gamma, temperature, nu = mp.mpf(1.4), mp.mpf(1.1), mp.mpf(1.05), mp.mpf(3e4), mp.mpf(43e9)
    rate, gaunt = _wright_barlow(0.3, 43, 1.5, 2500, mu, z, gamma, temperature)
    grams_per_second = rate * GM_SUN / mp.mpf(ac.G.si.value) * 1000 / JULIAN_YEAR
    n_r2 = grams_per_second / (4 * mp.pi * 2500e5 * mu * M_H * 1000)
    c = mp.mpf("0.018") * temperature ** -1.5 * z ** 2 * gamma * n_r2 ** 2 * gaunt / nu ** 2
    radius = mp.cbrt(mp.pi * c / 2) / (R_SUN * 100)
    assert relative_error(r["radio_photosphere_radius"]["value"], radius) < 1e-15
    assert relative_error(r["radio_photosphere_stellar_radii"]["value"], radius / 20) < 1e-15


# --------------------------------------------------------------------------- the widest cones, both ways
@pytest.mark.parametrize("eta", [0.99, 0.999, 0.9999999, 1.0])
def test_an_eichler_usov_angle_of_a_wind_ratio_near_one_inverts_back(client, eta):
    # Eichler & Usov (1993): theta = 2.1 (1 - eta^{2/5} / 4) eta^{1/3} rises to 2.1 x 3/4 rad = 90.24 deg at eta = 1,
    # and the collision gives that angle; the inversion refused every angle from 90 deg (eta = 0.9868) up, so the
    # collision's own answer for eta > 0.9868 could not be taken back to eta.  Agreed to 3.3e-16.
    theta = mp.degrees(2.1 * (1 - mp.mpf(eta) ** mp.mpf(0.4) / 4) * mp.cbrt(mp.mpf(eta)))
    body = {"mdot1": 1e-6, "mdot2": eta * 1e-6, "vinf1": 1000, "vinf2": 1000, "separation": 1.0}
    angle = _ok(client, "/v1/winds/collision", body)["results"]["opening_half_angle_eu93"]["value"]
    assert relative_error(angle, theta) < 5e-16
    back = _ok(client, "/v1/winds/mass-loss/momentum-ratio", {"opening_half_angle": angle, "mdot1": 1e-6,
                                                               "opening_angle_formula": "eu93", "vinf1": 1000,
                                                               "vinf2": 1000})
    assert abs(back["results"]["momentum_ratio"]["value"] - eta) < 1e-15
    assert not {"star2_stronger", "eu93_out_of_range"} & _codes(back)


@pytest.mark.parametrize("degrees", [90.0, 90.1, 90.24085273310467])
def test_canto_raga_wilkin_at_and_beyond_a_plane_shock(client, degrees):
    # Cantó, Raga & Wilkin (1996), eq. 28: eta = c / (pi + c), c = tan psi - psi; psi = 90 deg is the plane shock of
    # equal winds, eta = 1 exactly (refused before, as the domain was open at 90 deg); beyond it the cone about
    # star 2 is wider than a plane and star 2 the stronger: the same eq. 28 with the roles swapped, eta > 1, warned.
    psi = mp.radians(mp.mpf(degrees))
    eta = mp.mpf(1) if degrees == 90.0 else (mp.tan(psi) - psi) / (mp.pi + mp.tan(psi) - psi)
    answer = _ok(client, "/v1/winds/mass-loss/momentum-ratio", {"opening_half_angle": degrees, "mdot1": 1e-6,
                                                                 "vinf1": 1000, "vinf2": 1000})
    assert relative_error(answer["results"]["momentum_ratio"]["value"], eta) < 1e-15
    assert ("star2_stronger" in _codes(answer)) == (degrees > 90)


def test_a_half_angle_beyond_the_widest_eichler_usov_cone_is_refused_naming_the_bound(client):
    status, answer = post(client, "/v1/winds/mass-loss/momentum-ratio", {"opening_half_angle": 90.2409, "mdot1": 1e-6,
                                                                         "vinf1": 1000, "vinf2": 1000})
    assert status == 422 and "90.24085273310467 deg" in answer["errors"]["opening_half_angle"][0]


@pytest.mark.parametrize("epoch, period, shell, observed", [(2459453.1, 5191.3, 4, 2480218.3),
                                                            (2450000.5, 3120.7, 1, 2453121.2),
                                                            (2457310.0, 2950.3, -2, 2451409.4)])
def test_a_shell_formed_at_the_observation_date_has_radius_zero(client, epoch, period, shell, observed):
    # shell n forms at t0 + n P: observed = t0 + n P in the decimals given (2459453.1 + 4 x 5191.3 = 2480218.3), so the
    # shell is formed, of age and radius 0 (to the roundings of the dates to doubles, 5e-10 d, and never below 0).
    # t0 + n P summed in doubles lay above the observation date's double and the request was refused ("every listed
    # shell must have formed by observation_date"): one in ten sampled.
    assert Fraction(str(epoch)) + shell * Fraction(str(period)) == Fraction(str(observed))
    body = {"period": period, "formation_epoch": epoch, "observation_date": observed, "expansion_speed": 1000,
            "distance": 1000, "shells": [shell - 1, shell]}
    series = _ok(client, "/v1/winds/shell-forecast", body)["results"]["series"]
    assert 0.0 <= series["age"]["value"][1] * 365.25 < 5e-10 and series["angular_radius"]["value"][1] >= 0.0
    assert relative_error(series["age"]["value"][0], mp.mpf(str(period)) / mp.mpf("365.25")) < 1e-9
    body["observation_date"] = observed - 1e-6         # a tenth of a second before it formed: refused
    status, answer = post(client, "/v1/winds/shell-forecast", body)
    assert status == 422 and "shells" in answer["errors"]


# --------------------------------------------------------------------------- visual orbits, other units
@pytest.mark.parametrize("q", [1e-12, 1.0, 1e12])
def test_visual_orbit_with_the_distance_in_light_years_and_extreme_mass_ratios(client, q):
    # a = a'' d (the parsec, IAU 2015 B2), M = 4 pi^2 a^3 / (GM_sun P^2) (Hilditch 2001), M1 = M / (1 + q),
    # M2 = M q / (1 + q); the period in Julian years and the distance in light years (astropy's yr and lyr).
    # Agreed to 4.7e-16.
    body = {"period": {"value": 50.1, "unit": "yr"}, "angular_semimajor_axis": {"value": 7.5, "unit": "arcsec"},
            "distance": {"value": 8.6, "unit": "lyr"}, "mass_ratio": q}
    r = _ok(client, "/v1/astrometric/visual", body)["results"]
    distance = mp.mpf(8.6) * LIGHT_YEAR / PARSEC
    a = mp.mpf(7.5) * distance
    mass = 4 * mp.pi ** 2 * (a * AU) ** 3 / (GM_SUN * (mp.mpf(50.1) * JULIAN_YEAR) ** 2)
    q = mp.mpf(q)
    expected = {"semimajor_axis": a, "total_mass": mass, "m1": mass / (1 + q), "m2": mass * q / (1 + q),
                "a1": a * q / (1 + q), "a2": a / (1 + q), "distance": distance, "parallax": 1000 / distance}
    for name, value in expected.items():
        assert relative_error(r[name]["value"], value) < 1.5e-15, name


@pytest.mark.parametrize("beta", [0.0, 0.1])
def test_orbital_parallax_of_an_sb1_and_a_photocentric_orbit(client, beta):
    # M2 from the mass function f = P K1^3 (1 - e^2)^{3/2} / (2 pi G) = (M2 sin i)^3 / (M1 + M2)^2 solved by mpmath;
    # alpha = a1 (1 - beta / B), B = M2 / (M1 + M2) (van de Kamp 1967), parallax = alpha'' / alpha.  Agreed to 2e-16.
    body = {"period": 800, "k1": 5, "eccentricity": 0.2, "inclination": 70, "photocentre_semimajor_axis": 3.0,
            "primary_mass": 1.0}
    if beta:
        body["luminosity_fraction"] = beta
    r = _ok(client, "/v1/combined/orbital-parallax", body)["results"]
    seconds, e, sin_i = mp.mpf(800) * DAY, mp.mpf(0.2), mp.sin(mp.radians(70))
    a1 = 5000 * seconds * mp.sqrt(1 - e ** 2) / (2 * mp.pi) / sin_i / AU
    f = seconds * mp.mpf(5000) ** 3 * (1 - e ** 2) ** 1.5 / (2 * mp.pi * GM_SUN)
    m2 = mp.findroot(lambda x: (x * sin_i) ** 3 / (1 + x) ** 2 - f, 0.5)
    alpha = a1 * (1 - mp.mpf(beta) / (m2 / (1 + m2)))
    assert relative_error(r["m2"]["value"], m2) < 1e-15
    assert relative_error(r["parallax"]["value"], 3 / alpha) < 1e-15


# --------------------------------------------------------------------------- outputs asked in other units
def test_outputs_in_other_units_against_astropy(client):
    # each output converted by astropy from the same answer in its own unit (temperature_energy for kT)
    from astropy import units as u
    cases = [("/v1/winds/mass-loss/radio", {"flux_density": 1.8, "frequency": 8.4, "distance": 2.1, "vinf": 1700,
                                             "stellar_radius": 8.5},
              {"mass_loss_rate": "kg/s", "radio_photosphere_radius": "au"}),
             ("/v1/winds/shell-distance", {"period": 2950, "shell_spacing": 410, "expansion_speed": 1100},
              {"distance": "lyr", "parallax": "uas"}),
             ("/v1/winds/mass-loss/recipe", {"recipe": "vink-2001", "luminosity": 3.2e5, "mass": 38, "teff": 36500},
              {"mass_loss_rate": "earthMass/yr", "bistability_jump_temperature": "eV"}),
             ("/v1/astrometric/campbell", {"A": 12.0, "B": -7.5, "F": 3.25, "G": 9.0},
              {"inclination": "rad", "node": "arcsec", "angular_semimajor_axis": "arcsec"}),
             ("/v1/orbit/geometry", {"period": 118.3, "eccentricity": 0.62, "m1": 8.4, "m2": 5.1},
              {"speed_periastron": "au/yr", "roche_lobe1": "km", "semimajor_axis": "pc"})]
    for path, body, units in cases:
        plain = _ok(client, path, body)["results"]
        asked = _ok(client, path, {**body, "units": units})["results"]
        for name, unit in units.items():
            expected = (plain[name]["value"] * u.Unit(plain[name]["unit"])).to_value(
                u.Unit(unit), equivalencies=u.temperature_energy())
            assert asked[name]["unit"] == unit
            assert relative_error(asked[name]["value"], expected) < 4e-16, (path, name)
