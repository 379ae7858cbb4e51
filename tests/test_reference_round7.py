"""Seventh round of independent reference computations: each check value from a computation written here from the
published formula (mpmath roots and derivatives at 60 to 120 digits, astropy constants and units, numpy on the
documented draw model), never from calcservice's physics; and each system of a batch against its single request."""

from __future__ import annotations

import copy
import math

import mpmath as mp
import numpy as np
import pytest
from astropy import constants as const

from .conftest import answered

from .engine_helpers import split_normal

GM_SUN = mp.mpf(const.GM_sun.si.value)     # IAU 2015 Resolution B3 nominal GM_sun, m^3 s^-2 (astropy.constants)
AU = mp.mpf(const.au.si.value)             # IAU 2012 Resolution B2, m (astropy.constants)
DAY = mp.mpf(86400)                        # s (SI day)


# --------------------------------------------------------------------------- photocentre
def _photocentre_reference(alpha_mas, parallax, period, m1, beta):
    """The photocentric orbit by hand at 120 digits: alpha = alpha'' / parallax (au; the parsec, IAU 2015 Resolution
    B2), f_ast = 4 pi^2 alpha^3 / (GM_sun P^2) = (M1 + M2)(B - beta)^3 (van de Kamp 1967, Principles of Astrometry),
    so (B - beta)^3 / (1 - B) = f_ast / M1; with B = beta + (1 - beta) s this is s^3 = r (1 - s),
    r = f_ast / (M1 (1 - beta)^2), whose one root in (0, 1) is bisected to 2^-420."""
    with mp.workdps(120):
        alpha = mp.mpf(alpha_mas) / mp.mpf(parallax)
        f = 4 * mp.pi ** 2 * (alpha * AU) ** 3 / (GM_SUN * (mp.mpf(period) * DAY) ** 2)
        beta, m1 = mp.mpf(beta), mp.mpf(m1)
        r = f / (m1 * (1 - beta) ** 2)
        lo, hi = mp.mpf(0), mp.mpf(1)
        for _ in range(420):
            mid = (lo + hi) / 2
            lo, hi = (mid, hi) if mid ** 3 < r * (1 - mid) else (lo, mid)
        s = (lo + hi) / 2
        m2 = m1 * (beta + (1 - beta) * s) / ((1 - beta) * (1 - s))
        total = m1 + m2
        a = mp.cbrt(GM_SUN * total * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2)) / AU
        return {"astrometric_mass_function": f, "m2": m2, "total_mass": total, "mass_ratio": m2 / m1,
                "semimajor_axis": a, "fractional_mass": beta + (1 - beta) * s}


@pytest.mark.parametrize("beta", [0.0, 0.5, 0.999999, 1 - 1e-12])
@pytest.mark.parametrize("alpha, parallax", [(1e-4, 1000.0), (3.71, 21.4), (300.0, 0.1)])
def test_photocentre_companion_mass_against_a_bisected_root(client, beta, alpha, parallax):
    # A dark to nearly equally bright companion (luminosity_fraction 0 and just below 1), light to very heavy.
    # Tolerance 2e-15: f_ast itself carries ~1e-15 (a cube of a quotient), and M2 is as well conditioned in f_ast.
    # The root was taken as 1 - s = exp(-log(1 + e^y)), whose rounding exp multiplies by |y|: 5.9e-15 in M2 at
    # beta = 0.999999, alpha = 300 mas (26 roundings).
    got = answered(client, "/v1/astrometric/photocentre", {
        "photocentre_semimajor_axis": alpha, "parallax": parallax, "period": 612.0, "primary_mass": 1.08,
        "luminosity_fraction": beta})["results"]
    for name, want in _photocentre_reference(alpha, parallax, 612.0, 1.08, beta).items():
        assert got[name]["value"] == pytest.approx(float(want), rel=2e-15), name


def _random_photocentres(count, seed):
    rng = np.random.default_rng(seed)
    return [{"photocentre_semimajor_axis": {"value": float(10 ** rng.uniform(-3, 3)), "sigma": 0.01},
             "parallax": float(10 ** rng.uniform(-1, 2)), "period": float(10 ** rng.uniform(0, 5)),
             "primary_mass": {"value": float(10 ** rng.uniform(-1, 1.5)), "sigma": 0.05},
             "luminosity_fraction": float(rng.choice([0.0, 0.5, 0.99, 1 - 1e-9]))} for _ in range(count)]


def test_a_photocentre_in_a_batch_is_its_single_answer(client):
    # The reference is the single request (DEVELOPERS: a batch row is what the system gets alone).  The root's
    # Newton iteration stopped when every system of the call had converged, so a system's stencil points took more
    # steps in a batch: 4 of these 40 systems had sigmas differing at 1e-11 (m2 0.004275059481283348 alone,
    # 0.004275059481449376 in a batch).
    systems = _random_photocentres(40, 3)
    rows = answered(client, "/v1/batch/photocentre", {"systems": systems})["results"]
    for body, row in zip(systems, rows):
        assert row["results"] == answered(client, "/v1/astrometric/photocentre", body)["results"]


# --------------------------------------------------------------------------- mid-eclipse under apsidal motion
def test_mid_eclipse_dates_under_apsidal_motion_in_a_batch_are_the_single_answers(client):
    # Sixty fictional eccentric eclipsing pairs with apsidal motion (half with a period derivative), a few to
    # 1e5 days after T0.  The dates under apsidal motion are a fixed point of t = T0 + P c(omega(t)), iterated
    # until no date of the call moved: in a batch a date took the passes other systems needed, and 25 of the 60
    # came back with sigmas (up to 2e-9 relative) or cycles an ulp off their single answers.
    rng = np.random.default_rng(5)
    systems = []
    for _ in range(60):
        p, t0 = float(10 ** rng.uniform(0, 3.5)), 2450000.0 + float(rng.uniform(0, 1000))
        body = {"period": {"value": p, "sigma": p * 1e-5},
                "eccentricity": {"value": float(rng.uniform(0, 0.95)), "sigma": 0.005},
                "omega": {"value": float(rng.uniform(0, 360)), "sigma": 1.0},
                "t_periastron": {"value": t0, "sigma": 0.01},
                "omega_dot": {"value": float(10 ** rng.uniform(-2, 1.5)), "sigma": 0.01},
                "inclination": {"value": float(rng.uniform(80, 90)), "sigma": 0.3},
                "after": t0 + float(rng.uniform(0, 1e5)), "count": 2}
        if rng.uniform() < 0.5:
            body["period_derivative"] = {"value": float(rng.uniform(-1, 1)), "sigma": 0.1}
        systems.append(body)
    rows = answered(client, "/v1/batch/mid-eclipse", {"systems": systems})["results"]
    for body, row in zip(systems, rows):
        single = answered(client, "/v1/orbit/mid-eclipse", body)
        assert row["results"] == single["results"]


# --------------------------------------------------------------------------- speeds the calculation derives
def _vis_viva_periastron_km_s(period_d, eccentricity, total_mass):
    """v^2 = GM (2/r - 1/a) at r = a (1 - e) (the vis-viva equation), a from Kepler's third law, by astropy."""
    from astropy import units as u
    gm = const.GM_sun * total_mass
    a = (gm * (period_d * u.d) ** 2 / (4 * math.pi ** 2)) ** (1 / 3)
    return np.sqrt(gm * (2 / (a * (1 - eccentricity)) - 1 / a)).to_value(u.km / u.s)


@pytest.mark.parametrize("period, eccentricity, warned", [(0.1, 0.999, True), (118.3, 0.62, False)])
def test_a_periastron_speed_above_a_tenth_of_c_is_warned_as_a_given_speed_is(client, period, eccentricity, warned):
    # The service warns relativistic_speed for a speed above 0.1 c (c exact, SI; CHANGELOG: "warned above
    # 0.1 c"), where the Newtonian formulas are off by order (v/c)^2.  It did so for the speeds one gives (k1,
    # vinf1, ...) but not for those it derives: 20 + 20 solMass in 0.1 d at e = 0.999 pass periastron at 0.23 c
    # and were answered without a word.
    answer = answered(client, "/v1/orbit/geometry", {"period": period, "eccentricity": eccentricity, "m1": 20.0,
                                                  "m2": 20.0})
    want = _vis_viva_periastron_km_s(period, eccentricity, 40.0)
    assert answer["results"]["speed_periastron"]["value"] == pytest.approx(want, rel=1e-13)
    assert (want > 0.1 * const.c.to_value("km/s")) == warned
    codes = [(w["code"], w.get("fields")) for w in answer["warnings"]]
    assert (("relativistic_speed", ["speed_periastron"]) in codes) == warned


def test_an_expansion_speed_derived_from_a_distance_is_warned_above_a_tenth_of_c(client):
    # v = 4.74047 s D / P (1 au per Julian year in km/s, IAU 2012 au): 1 mas per 100 d at 10 Mpc is 1.7e5 km/s
    answer = answered(client, "/v1/winds/shell-distance", {"period": 100.0, "shell_spacing": 1.0, "distance": 1e7})
    from astropy import units as u
    want = (1e-3 * u.arcsec * 1e7 * u.pc / (100 * u.d)).to_value(u.km / u.s, equivalencies=u.dimensionless_angles())
    assert answer["results"]["expansion_speed"]["value"] == pytest.approx(want, rel=1e-14)
    assert "relativistic_speed" in [w["code"] for w in answer["warnings"]]


# --------------------------------------------------------------------------- linear sigmas against mpmath derivatives
def _linear_against_mpmath(client, path, reference, given, extra=None, value=4e-15, sigma=1e-8, angles=()):
    """Each output's value against ``reference`` at 40 digits, and its linear sigma against
    (sum_i (df/dx_i sigma_i)^2)^{1/2} with df/dx_i by a 40-digit central difference (the definition of linear
    propagation without correlations).  ``sigma``: the service differentiates by central differences, steps 1e-5
    of the scale (DEVELOPERS), whose truncation and rounding leave ~1e-10 to 1e-9; the values of ``angles`` are the
    caller's to compare (their ranges are conventions).  Returns the answer."""
    body = {name: {"value": v, "sigma": s} for name, (v, s) in given.items()}
    got = answered(client, path, {**body, **(extra or {})})["results"]
    with mp.workdps(40):
        x0 = [mp.mpf(v) for v, _ in given.values()]
        nominal = reference(*x0)
        var = dict.fromkeys(nominal, 0)
        for j, (_, s) in enumerate(given.values()):
            if not s:
                continue
            # a central difference at 40 digits: truncation (h/x)^2 ~ 1e-24, rounding 1e-40 / 1e-12
            h = mp.mpf("1e-12") * (abs(x0[j]) or 1)
            up, down = list(x0), list(x0)
            up[j] += h
            down[j] -= h
            up, down = reference(*up), reference(*down)
            for name in nominal:
                var[name] += ((up[name] - down[name]) / (2 * h) * s) ** 2
        for name, want in nominal.items():
            if name not in angles:
                assert got[name]["value"] == pytest.approx(float(want), rel=value), name
            assert got[name]["sigma"] == pytest.approx(float(mp.sqrt(var[name])), rel=sigma), name
    return got


def _thiele_innes(a, i, w, node):
    """Heintz (1978), Double Stars, ch. 4: A, B, F, G of the relative orbit (w its argument of periastron)."""
    i, w, node = (x * mp.pi / 180 for x in (i, w, node))
    return {"A": a * (mp.cos(w) * mp.cos(node) - mp.sin(w) * mp.sin(node) * mp.cos(i)),
            "B": a * (mp.cos(w) * mp.sin(node) + mp.sin(w) * mp.cos(node) * mp.cos(i)),
            "F": a * (-mp.sin(w) * mp.cos(node) - mp.cos(w) * mp.sin(node) * mp.cos(i)),
            "G": a * (-mp.sin(w) * mp.sin(node) + mp.cos(w) * mp.cos(node) * mp.cos(i))}


def _campbell(A, B, F, G):
    """The inverse (Heintz 1978): a (1 +- cos i) = |(A + G, B - F)|, |(A - G, B + F)|; omega +- node from atan2;
    here without the fold of node into [0, 180), which the comparison on the circle makes irrelevant."""
    p, m = mp.hypot(A + G, B - F), mp.hypot(A - G, B + F)
    total, difference = mp.atan2(B - F, A + G), mp.atan2(-B - F, A - G)
    return {"angular_semimajor_axis": (p + m) / 2, "inclination": 360 * mp.atan2(mp.sqrt(m), mp.sqrt(p)) / mp.pi,
            "omega": 90 * (total + difference) / mp.pi, "node": 90 * (total - difference) / mp.pi}


@pytest.mark.parametrize("omega", [10.0, 100.0, 190.0, 280.0])
@pytest.mark.parametrize("node, inclination", [(0.0, 45.0), (95.0, 89.9), (179.9999999, 120.0), (5.0, 170.0)])
def test_campbell_elements_and_sigmas_in_every_quadrant(client, omega, node, inclination):
    # Thiele-Innes constants of a 100 mas orbit in each quadrant of omega, with the node at and just below the
    # edges of [0, 180) and retrograde orbits: the elements back (node mod 180 with omega turned with it), and the
    # linear sigmas through the atan2s, which are smooth on the circle across the fold.  Agreed: worst sigma
    # 5e-9 relative (central differences), values to 1e-12 deg.
    with mp.workdps(40):
        constants = _thiele_innes(mp.mpf(100), mp.mpf(inclination), mp.mpf(omega), mp.mpf(node))
    given = {name: (float(v), 0.5) for name, v in constants.items()}
    got = _linear_against_mpmath(client, "/v1/astrometric/campbell", _campbell, given, sigma=2e-8,
                                 angles=("omega", "node"))
    # the sky cannot tell (omega, node) from (omega + 180, node + 180): node in [0, 180) and omega turned with it
    turns = math.floor(node / 180.0)
    assert abs(got["node"]["value"] - (node - 180.0 * turns)) < 1e-12
    assert abs((got["omega"]["value"] - (omega - 180.0 * turns) + 180.0) % 360.0 - 180.0) < 1e-12


R_SUN = mp.mpf(const.R_sun.si.value)       # IAU 2015 Resolution B3 nominal solar radius, m (astropy.constants)


def _eggleton(q):
    """Eggleton (1983), ApJ 268, 368: r_L / a = 0.49 q^{2/3} / (0.6 q^{2/3} + ln(1 + q^{1/3}))."""
    q13 = mp.cbrt(q)
    return mp.mpf("0.49") * q13 ** 2 / (mp.mpf("0.6") * q13 ** 2 + mp.log(1 + q13))


def _geometry(period, e, m1, m2, radius1, radius2):
    """Kepler's third law a^3 = GM (P / 2 pi)^2 (IAU 2015 B3 GM_sun), the vis-viva equation v^2 = GM (2/r - 1/a)
    at r = a (1 -+ e) formed as written, and Eggleton's lobes at periastron and apastron (in solRad)."""
    gm = GM_SUN * (m1 + m2)
    a = mp.cbrt(gm * (period * DAY / (2 * mp.pi)) ** 2)
    peri, apo = a * (1 - e), a * (1 + e)
    lobe1, lobe2 = _eggleton(m1 / m2), _eggleton(m2 / m1)
    return {"semimajor_axis": a / AU, "periastron_distance": peri / AU, "apastron_distance": apo / AU,
            "speed_periastron": mp.sqrt(gm * (2 / peri - 1 / a)) / 1000,
            "speed_apastron": mp.sqrt(gm * (2 / apo - 1 / a)) / 1000,
            "roche_lobe1": lobe1 * peri / R_SUN, "roche_lobe2": lobe2 * peri / R_SUN,
            "roche_lobe1_apastron": lobe1 * apo / R_SUN, "roche_lobe2_apastron": lobe2 * apo / R_SUN,
            "fill_factor1": radius1 / (lobe1 * peri / R_SUN), "fill_factor2": radius2 / (lobe2 * peri / R_SUN),
            "mass_ratio": m2 / m1, "total_mass": m1 + m2}


@pytest.mark.parametrize("q", [1e-3, 1.0, 1e3])
@pytest.mark.parametrize("e, sigma_e", [(0.0, 0.0), (0.5, 5e-4), (0.999, 5e-5)])
def test_geometry_at_extreme_mass_ratios_and_eccentricities(client, q, e, sigma_e):
    # Agreed: values to 5e-16, linear sigmas to 1e-10 (central differences) at q = 1e-3 and 1e3, e to 0.999
    given = {"period": (10.0, 0.01), "eccentricity": (e, sigma_e), "m1": (5.0, 0.1), "m2": (5.0 * q, 0.5 * q),
             "radius1": (3.0, 0.1), "radius2": (2.0, 0.1)}
    if not sigma_e:
        given["eccentricity"] = (e, 0.0)
    _linear_against_mpmath(client, "/v1/orbit/geometry", _geometry, given, value=2e-15, sigma=2e-9)


MU_SOLAR_IONISED = 1 / (2 * mp.mpf("0.70") + mp.mpf("0.75") * mp.mpf("0.28") + mp.mpf("0.5") * mp.mpf("0.02"))
M_H = mp.mpf((const.m_p + const.m_e).si.value)       # CODATA (astropy.constants), kg
K_B = mp.mpf(const.k_B.si.value)                     # exact (SI 2019)


def _kepler_bisected(mean, e):
    """E of Kepler's equation M = E - e sin E, M reduced to [-pi, pi] and the root bisected (140 halvings)."""
    turns = mp.floor(mean / (2 * mp.pi) + mp.mpf(0.5))
    m0 = mean - 2 * mp.pi * turns
    lo, hi = -mp.pi, mp.pi
    for _ in range(140):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if mid - e * mp.sin(mid) < m0 else (lo, mid)
    return (lo + hi) / 2 + 2 * mp.pi * turns


def _collision(mdot1, mdot2, v1, v2, e, period, m1, m2, phase):
    """Around an orbit: r = a (1 - e cos E) at M = 2 pi phase (Kepler's equation bisected); ram-pressure balance
    r1 = r / (1 + eta^{1/2}) (Stevens, Blondin & Pollock 1992, eq. 1), chi = v_8^4 d_12 / Mdot_-7 (their eq. 8),
    Eichler & Usov (1993) theta = 2.1 (1 - eta^{2/5}/4) eta^{1/3}, Cantó, Raga & Wilkin (1996) tan psi - psi =
    pi eta / (1 - eta) bisected, kT = 3/16 mu m_H v^2 (Rankine-Hugoniot, gamma = 5/3)."""
    eta_given = mdot2 * v2 / (mdot1 * v1)
    eta = min(eta_given, 1 / eta_given)
    a = mp.cbrt(GM_SUN * (m1 + m2) * (period * DAY / (2 * mp.pi)) ** 2) / AU
    big_e = _kepler_bisected(2 * mp.pi * phase, e)
    r = a * (1 - e * mp.cos(big_e))
    lo, hi = mp.mpf(0), mp.pi / 2
    for _ in range(140):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if mp.tan(mid) - mid < mp.pi * eta / (1 - eta) else (lo, mid)
    root = mp.sqrt(eta_given)
    r1, r2 = r / (1 + root), r * root / (1 + root)

    def chi(v, d, mdot):
        return (v / 1000) ** 4 * (d * AU * 100 / mp.mpf(10) ** 12) / (mdot / mp.mpf("1e-7"))
    return {"momentum_ratio": eta,
            "opening_half_angle_eu93": 180 / mp.pi * mp.mpf("2.1") * (1 - eta ** mp.mpf("0.4") / 4) * mp.cbrt(eta),
            "opening_half_angle_crw96": 90 * (lo + hi) / mp.pi,
            "post_shock_temperature1": 3 * MU_SOLAR_IONISED * M_H * (v1 * 1000) ** 2 / (16 * K_B),
            "post_shock_temperature2": 3 * MU_SOLAR_IONISED * M_H * (v2 * 1000) ** 2 / (16 * K_B),
            "separation": r, "stagnation_distance1": r1, "stagnation_distance2": r2,
            "cooling_parameter1": chi(v1, r1, mdot1), "cooling_parameter2": chi(v2, r2, mdot2),
            "stagnation_distance1_apastron": a * (1 + e) / (1 + root),
            "cooling_parameter2_periastron": chi(v2, a * (1 - e) * root / (1 + root), mdot2)}


@pytest.mark.parametrize("winds", [(2e-6, 1e-7, 2500.0, 1800.0), (1e-7, 2e-6, 1800.0, 2500.0),
                                   (1e-5, 1e-9, 2000.0, 1000.0)])
@pytest.mark.parametrize("e, phase", [(0.3, 0.25), (0.9, 0.999), (0.999, 0.5), (0.5, 3.75)])
def test_colliding_winds_around_an_orbit_with_sigmas(client, winds, e, phase):
    # Either star the stronger wind, eta down to 5e-5; e to 0.999, phases past several cycles.  Agreed: values to
    # 5e-16, sigmas to 4e-10.
    mdot1, mdot2, v1, v2 = winds
    given = {"mdot1": (mdot1, mdot1 / 10), "mdot2": (mdot2, mdot2 / 10), "vinf1": (v1, 100.0), "vinf2": (v2, 100.0),
             "eccentricity": (e, min(0.01, (1 - e) / 10)), "period": (100.0, 1.0), "m1": (30.0, 2.0),
             "m2": (20.0, 2.0), "phase": (phase, 0.01)}
    _linear_against_mpmath(client, "/v1/winds/collision", _collision, given, sigma=2e-9)


M_SUN_G = mp.mpf(const.M_sun.si.value) * 1000      # g: IAU 2015 B3 GM_sun over CODATA G
JULIAN_YEAR = mp.mpf("365.25") * DAY


def _radio(flux_mjy, frequency_ghz, distance_kpc, vinf, mu, z, gamma, temperature, clumping, stellar_radius):
    """Wright & Barlow (1975), MNRAS 170, 41, eq. 8: Mdot = 0.095 mu v S^{3/4} D^{3/2} / (Z gamma^{1/2} g^{1/2}
    nu^{1/2}) (S Jy, D kpc, v km/s, nu Hz) times f^{1/2}; g = 9.77 (1 + 0.13 log10(T^{3/2} / (Z nu))) (Leitherer &
    Robert 1991); the photosphere at tau(p) = pi C / (2 p^3) = 1 with alpha = 0.018 T^{-3/2} Z^2 n_e n_i nu^{-2} g
    (Rybicki & Lightman 1979, eq. 5.19b) for the smooth wind, in cgs."""
    nu = frequency_ghz * 10 ** 9
    g = mp.mpf("9.77") * (1 + mp.mpf("0.13") * mp.log10(temperature ** mp.mpf(1.5) / (z * nu)))
    smooth = (mp.mpf("0.095") * mu * vinf * (flux_mjy / 1000) ** mp.mpf(0.75) * distance_kpc ** mp.mpf(1.5)
              / (z * mp.sqrt(gamma * g * nu)))
    n_r2 = smooth * M_SUN_G / JULIAN_YEAR / (4 * mp.pi * vinf * 10 ** 5 * mu * M_H * 1000)
    c = mp.mpf("0.018") * temperature ** mp.mpf(-1.5) * z ** 2 * gamma * n_r2 ** 2 * g / nu ** 2
    photosphere = mp.cbrt(mp.pi * c / 2) / (R_SUN * 100)
    return {"mass_loss_rate": smooth * mp.sqrt(clumping), "gaunt_factor": g,
            "radio_photosphere_radius": photosphere, "radio_photosphere_stellar_radii": photosphere / stellar_radius}


def test_radio_mass_loss_and_photosphere_with_every_input_uncertain(client):
    # Agreed: values to 2e-16, sigmas to 4e-11
    given = {"flux_density": (1.3, 0.1), "frequency": (8.6, 0.01), "distance": (1.8, 0.2), "vinf": (2100.0, 150.0),
             "mu": (2.1, 0.1), "z_rms": (1.1, 0.05), "gamma_e": (1.05, 0.05), "temperature": (1.5e4, 2e3),
             "clumping": (0.2, 0.05), "stellar_radius": (12.0, 1.0)}
    _linear_against_mpmath(client, "/v1/winds/mass-loss/radio", _radio, given, sigma=1e-9)


def _period_change(mode):
    """Pdot/P = -2 Mdot / M (Jeans mode), 3 dM1 (M1 - M2) / (M1 M2) (conservative), dM1 [3 M1/(M M2) - 3/M1 + 1/M]
    (isotropic re-emission from star 2, Soberman, Phinney & van den Heuvel 1997, derived again here from
    J = M1 M2 (G a / M)^{1/2} and dJ = dM1 (M1/M)^2 a^2 Omega), Pdot in s/yr, P in d: rates in solMass/yr."""
    def reference(period, pdot, m1, m2):
        relative = pdot / (period * DAY)
        total = m1 + m2
        rate = {"jeans": total * relative / 2, "conservative": -m1 * m2 * relative / (3 * (m1 - m2)),
                "isotropic-re-emission": -relative / (3 * m1 / (total * m2) - 3 / m1 + 1 / total)}[mode]
        return {"mass_loss_rate": rate, "relative_period_derivative": relative}
    return reference


@pytest.mark.parametrize("mode", ["jeans", "conservative", "isotropic-re-emission"])
@pytest.mark.parametrize("m1, m2", [(27.0, 11.0), (10.0, 10.5), (13.8, 10.0)])
def test_period_change_rates_in_every_mode(client, mode, m1, m2):
    # near M1 = M2 (conservative) and near q = 1.387 (re-emission), where the rate is ill-conditioned but the
    # service keeps the digits the masses give.  Agreed: values to 2e-16, sigmas to 7e-10.
    given = {"period": (6.3, 0.01), "period_derivative": (0.21, 0.04), "m1": (m1, 1.0), "m2": (m2, 0.5)}
    _linear_against_mpmath(client, "/v1/winds/mass-loss/period-change", _period_change(mode), given,
                           extra={"mode": mode}, sigma=4e-9)


# --------------------------------------------------------------------------- event dates by brute force in time
JULIAN_YEAR_DAYS = mp.mpf("365.25")       # IAU 1976 (astropy.units.yr)


def _true_anomaly_at(t, period, e, t0, pdot_s_per_yr=0):
    """nu (rad, modulo 2 pi) at date t: the cycles of the quadratic ephemeris t = T0 + P (n +
    Pdot n^2 / 2) (Pdot in s per Julian year), n = 2 x / (1 + (1 + 2 Pdot x)^{1/2}), x = (t - T0)/P, M = 2 pi n,
    Kepler's equation bisected, tan(nu/2) = ((1 + e)/(1 - e))^{1/2} tan(E/2) (Murray & Dermott 1999, eq. 2.46)."""
    rate = pdot_s_per_yr / (JULIAN_YEAR_DAYS * DAY)
    x = (t - t0) / period
    n = 2 * x / (1 + mp.sqrt(1 + 2 * rate * x))
    big_e = _kepler_bisected(2 * mp.pi * n, e)
    return 2 * mp.atan2(mp.sqrt(1 + e) * mp.sin(big_e / 2), mp.sqrt(1 - e) * mp.cos(big_e / 2))


def _bisect_in_time(f, a, b):
    fa = f(a)
    for _ in range(100):
        m = (a + b) / 2
        fm = f(m)
        a, b, fa = (m, b, fm) if (fm > 0) == (fa > 0) else (a, m, fa)
    return (a + b) / 2


@pytest.mark.parametrize("light", ["none", "star1", "star2"])
def test_conjunctions_and_rv_extrema_at_e_0999_seen_in_each_stars_light(client, light):
    # e = 0.999, 12345 cycles after T0 (t - T0 = 45678 d, so the dates keep 1e-11 d): a conjunction is the date where
    # nu + omega = 90 deg (star 2 in front) or 270 deg, an RV extremum where nu + omega = 0 or 180 deg (Hilditch 2001,
    # eq. 2.45, no apsidal motion), each found here by bisection in time within 1e-5 d of the service's date (the
    # other conjunction is 1e-4 d away, near periastron); seen in a star's light, t + z/c with
    # z = (a sin i)(1 - e^2) sin(nu + omega_star)/(1 + e cos nu), a sin i / c = K P (1 - e^2)^{1/2} / (2 pi c), c exact
    # (SI).  Agreed to 5e-11 d, the rounding of the dates.
    period, e, omega, t0, k1, k2 = mp.mpf("3.7"), mp.mpf("0.999"), mp.mpf(200), mp.mpf(0), mp.mpf(50), mp.mpf(70)
    after = t0 + period * mp.mpf("12345.3")
    events = answered(client, "/v1/orbit/ephemeris", {
        "period": float(period), "eccentricity": float(e), "omega": float(omega), "t_periastron": float(t0),
        "k1": float(k1), "k2": float(k2), "times": [float(after)], "after": float(after), "count": 1,
        "light_travel_time": light})["results"]["events"]
    c_km_s = mp.mpf(const.c.to_value("km/s"))
    amplitude = {"star1": k1, "star2": k2}.get(light, 0) * period * mp.sqrt(1 - e * e) / (2 * mp.pi * c_km_s)
    w = omega * mp.pi / 180 + (mp.pi if light == "star2" else 0)

    def delay(t):
        nu = _true_anomaly_at(t, period, e, t0)
        return amplitude * (1 - e * e) * mp.sin(nu + w) / (1 + e * mp.cos(nu))

    targets = {"conjunction_star2_in_front": 90, "conjunction_star1_in_front": 270, "rv1_maximum": 0,
               "rv1_minimum": 180}
    listed = events["conjunctions"] + events["rv_extrema"]
    assert len(listed) == 4
    with mp.workdps(40):
        for x in listed:
            arg = mp.mpf(targets[x["kind"]]) * mp.pi / 180
            seen = mp.mpf(x["value"])
            t = seen - delay(seen)

            def off(tt):
                return mp.sin(_true_anomaly_at(tt, period, e, t0) + omega * mp.pi / 180 - arg)
            root = _bisect_in_time(off, t - mp.mpf("1e-5"), t + mp.mpf("1e-5"))
            assert mp.cos(_true_anomaly_at(root, period, e, t0) + omega * mp.pi / 180 - arg) > 0   # not the other
            assert abs(float(seen - (root + delay(root)))) < 5e-11, x["kind"]


@pytest.mark.parametrize("omega_dot, pdot, cycles", [(9.0, 0.0, 15), (9.0, 40.0, 1000), (0.0, -60.0, 3000)])
def test_mid_eclipse_dates_with_a_period_derivative_are_the_minima_in_time(client, omega_dot, pdot, cycles):
    # The minimum in time of the projected separation rho^2 = r^2 (1 - sin^2 i sin^2(nu + omega(t))) (Heintz 1978,
    # ch. 4) with omega(t) = omega + omega_dot (t - T0) / Julian year and nu from the quadratic ephemeris, by golden
    # section at 40 digits.  Agreed to 3e-12 d at 3000 cycles (t = 6.4e4 d: a few roundings of the date).
    period, e, omega, inc = mp.mpf("21.3"), mp.mpf("0.35"), mp.mpf(133), mp.mpf(84)
    body = {"period": float(period), "eccentricity": float(e), "omega": float(omega), "t_periastron": 0.0,
            "inclination": float(inc), "after": float(period * cycles), "count": 1}
    if omega_dot:
        body["omega_dot"] = omega_dot
    if pdot:
        body["period_derivative"] = pdot
    events = answered(client, "/v1/orbit/mid-eclipse", body)["results"]["events"]
    with mp.workdps(40):
        s2 = mp.sin(inc * mp.pi / 180) ** 2

        def rho2(t):
            nu = _true_anomaly_at(t, period, e, 0, mp.mpf(pdot))
            r = (1 - e * e) / (1 + e * mp.cos(nu))
            w = (omega + mp.mpf(omega_dot) * t / JULIAN_YEAR_DAYS) * mp.pi / 180
            return r * r * (1 - s2 * mp.sin(nu + w) ** 2)

        for kind in ("eclipse_of_star1", "eclipse_of_star2"):
            t = mp.mpf(events[kind][0]["value"])
            a, b, golden = t - mp.mpf("0.02"), t + mp.mpf("0.02"), (mp.sqrt(5) - 1) / 2
            for _ in range(110):
                c, d = b - golden * (b - a), a + golden * (b - a)
                a, b = (a, d) if rho2(c) < rho2(d) else (c, b)
            assert abs(float(t - (a + b) / 2)) < 1e-11, kind


# --------------------------------------------------------------------------- Monte Carlo on the documented draw model
def _photocentre_numpy(alpha_mas, parallax, period, m1, beta):
    """The photocentre reference above in numpy over draws (the root bisected 200 times in s)."""
    gm, au = const.GM_sun.si.value, const.au.si.value
    f = 4 * math.pi ** 2 * (alpha_mas / parallax * au) ** 3 / (gm * (period * 86400.0) ** 2)
    r = f / (m1 * (1 - beta) ** 2)
    lo, hi = np.zeros_like(r), np.ones_like(r)
    for _ in range(200):
        mid = (lo + hi) / 2
        below = mid ** 3 < r * (1 - mid)
        lo, hi = np.where(below, mid, lo), np.where(below, hi, mid)
    s = (lo + hi) / 2
    m2 = m1 * (beta + (1 - beta) * s) / ((1 - beta) * (1 - s))
    return {"astrometric_mass_function": f, "m2": m2, "total_mass": m1 + m2, "fractional_mass": beta + (1 - beta) * s}


def test_photocentre_monte_carlo_with_split_normals_correlations_and_paired_samples(client):
    # The documented draw model (README, engine): the caller's parallax draws used index by index; the other
    # uncertain inputs standard normal variates from the seeded numpy Generator in the order of the declaration,
    # correlated by the Cholesky factor of the correlation matrix (a Gaussian copula), normal or split normal;
    # draws outside a domain (luminosity_fraction below 0) rejected with their whole index; median, standard
    # deviation, central 68.27 % interval and the outputs' Pearson correlation over the kept draws.  Agreed to
    # 7e-16 relative and the correlations to 1e-15.
    from scipy.special import ndtr
    n, seed = 800, 31
    parallax = 21.4 + 0.3 * np.random.default_rng(77).standard_normal(n)
    answer = answered(client, "/v1/astrometric/photocentre", {
        "photocentre_semimajor_axis": {"value": 3.71, "sigma": 0.05}, "parallax": {"samples": list(parallax)},
        "period": {"value": 612.0, "sigma": 4.0},
        "primary_mass": {"value": 1.08, "sigma_minus": 0.03, "sigma_plus": 0.08},
        "luminosity_fraction": {"value": 0.02, "sigma_minus": 0.02, "sigma_plus": 0.05},
        "correlations": [{"between": ["photocentre_semimajor_axis", "period"], "rho": 0.6},
                         {"between": ["primary_mass", "luminosity_fraction"], "rho": -0.3}],
        "uncertainty": {"method": "monte_carlo", "seed": seed}, "covariance": True})
    r = np.eye(4)
    r[0, 1] = r[1, 0] = 0.6
    r[2, 3] = r[3, 2] = -0.3
    z = np.random.default_rng(seed).standard_normal((n, 4)) @ np.linalg.cholesky(r).T
    alpha, period = 3.71 + 0.05 * z[:, 0], 612.0 + 4.0 * z[:, 1]
    m1, beta = split_normal(1.08, 0.03, 0.08, z[:, 2]), split_normal(0.02, 0.02, 0.05, z[:, 3])
    kept = (beta >= 0) & (beta < 1)
    assert answer["uncertainty"]["rejected_fraction"] == (n - kept.sum()) / n
    ref = _photocentre_numpy(alpha[kept], parallax[kept], period[kept], m1[kept], beta[kept])
    for name, y in ref.items():
        got = answer["results"][name]
        want = (np.median(y), np.std(y, ddof=1), np.percentile(y, 100 * ndtr(-1.0)), np.percentile(y, 100 * ndtr(1.0)))
        np.testing.assert_allclose([got["value"], got["sigma"], got["low"], got["high"]], want, rtol=2e-15,
                                   err_msg=name)
    outputs = answer["correlation"]["outputs"]
    k = [outputs.index(name) for name in ref]
    np.testing.assert_allclose(np.array(answer["correlation"]["matrix"])[np.ix_(k, k)],
                               np.corrcoef([ref[name] for name in ref]), atol=1e-14)


# --------------------------------------------------------------------------- every output in other units; budgets
#: other units for each canonical output unit, converted by astropy
OTHER_UNITS = {"solMass": ("kg", "jupiterMass"), "au": ("km", "solRad", "pc"), "km/s": ("m/s", "au/yr"),
               "deg": ("rad", "arcsec"), "mas": ("arcsec", "uas"), "pc": ("kpc", "lyr"), "solRad": ("km", "au"),
               "d": ("s", "h"), "solMass/yr": ("kg/s", "solMass/Myr"), "1/yr": ("1/s",), "yr": ("d",),
               "K": ("mK",)}


def _example_body(name):
    from calcservice.registry import calculations
    return copy.deepcopy(calculations()[name].example)


def _path(name):
    from calcservice.registry import calculations
    return calculations()[name].path


def _scalar_outputs(results):
    return {k: v for k, v in results.items() if isinstance(v, dict) and "unit" in v and "value" in v}


@pytest.mark.parametrize("name", ["sb1", "sb2", "visual", "campbell", "photocentre", "orbital-parallax", "geometry",
                                  "mid-eclipse", "collision", "mass-loss-radio", "mass-loss-period-change",
                                  "mass-loss-momentum-ratio", "mass-loss-recipe", "shell-distance"])
def test_every_scalar_output_in_other_units_is_astropys_conversion(client, name):
    # Each calculation's example, each output asked for in two other units: value, sigma (and the linear budget,
    # which is a fraction) are astropy's conversion of the answer in the canonical unit, to 4 roundings.  Agreed:
    # exact to 2 roundings everywhere.
    from astropy import units as u
    path = _path(name)
    body = _example_body(name)
    base = _scalar_outputs(answered(client, path, {**body, "budget": True})["results"])
    units = {}
    for output, entry in base.items():
        for k, other in enumerate(OTHER_UNITS.get(entry["unit"], ())):
            units.setdefault(k, {})[output] = other
    assert units, name
    for asked in units.values():
        got = _scalar_outputs(answered(client, path, {**body, "budget": True, "units": asked})["results"])
        for output, other in asked.items():
            factor = (1 * u.Unit(base[output]["unit"])).to_value(other)
            assert u.Unit(got[output]["unit"]) == u.Unit(other)
            for key in ("value", "sigma"):
                if base[output].get(key) is not None:
                    assert got[output][key] == pytest.approx(base[output][key] * factor, rel=1e-15), (output, key)
            assert got[output].get("budget") == base[output].get("budget"), output


@pytest.mark.parametrize("name", ["sb2", "visual", "campbell", "geometry", "collision", "mass-loss-radio",
                                  "thiele-innes", "orbital-parallax"])
def test_linear_budget_shares_with_correlations_sum_to_one(client, name):
    # The linear budget: (df/dx_i sigma_i)^2 / var for each input and 2 rho_ij (df/dx_i sigma_i)(df/dx_j sigma_j) / var
    # for each correlated pair sum to var / var = 1 (the definition, J C J^T expanded).  Each example with two
    # correlations added among its uncertain inputs.  Agreed to 1e-14.
    body = _example_body(name)
    uncertain = [k for k, v in body.items() if isinstance(v, dict) and v.get("sigma")]
    body["correlations"] = [{"between": [uncertain[0], uncertain[1]], "rho": 0.45},
                            {"between": [uncertain[1], uncertain[-1]], "rho": -0.3}]
    results = answered(client, _path(name), {**body, "budget": True})["results"]
    shares = [entry["budget"] for entry in _scalar_outputs(results).values() if entry.get("budget")]
    assert shares, name
    for budget in shares:
        assert f"{uncertain[0]},{uncertain[1]}" in budget
        assert sum(budget.values()) == pytest.approx(1.0, abs=1e-14)


# --------------------------------------------------------------------------- the bi-stability jump
def _vink_jump_kelvin(luminosity, mass, metallicity):
    """Vink, de Koter & Lamers (2001), A&A 369, 574, eqs. 14-15 (from memory): T_jump = 61.2 + 2.59 log <rho> kK,
    log <rho> = -14.94 + 3.1857 Gamma_e + 0.85 log Z/Z_sun (3.2 printed; the service's 3.1857, test_winds_reference_
    round2), Gamma_e = kappa_e L / (4 pi c G M), kappa_e = 0.325 cm^2/g, IAU 2015 B3 L_sun and GM_sun (astropy)."""
    from astropy import units as u
    gamma = (0.325 * u.cm ** 2 / u.g * luminosity * const.L_sun
             / (4 * math.pi * const.c * const.GM_sun * mass)).to_value(u.one)
    return 1e3 * (61.2 + 2.59 * (-14.94 + 3.1857 * gamma + 0.85 * math.log10(metallicity)))


@pytest.mark.parametrize("luminosity, mass, metallicity, offset, near", [
    (1e6, 40.0, 3.0, 110.0, True),        # the jump at 28.7 kK, above the 22.5-27.5 kK band
    (1e5, 30.0, 1 / 30, -240.0, True),    # the jump at 19.9 kK, below it
    (1e6, 40.0, 3.0, 4000.0, False),
    (3.2e5, 38.0, 1.0, 12266.0, False),   # 36.5 kK, the example's star
])
def test_a_teff_next_to_this_stars_jump_is_warned_wherever_the_jump_falls(client, luminosity, mass, metallicity,
                                                                           offset, near):
    # Across the jump the rate changes tenfold (1.75e-5 solMass/yr 110 K above the jump of a metal-rich
    # 1e6 L_sun, 40 solMass star, 1.68e-4 just below it), so a teff 110 K from it with a 500 K sigma is a rate
    # that the linear sigma (3e-6) cannot describe.  The near-jump warning fired only for teff in 22.5-27.5 kK,
    # where the jump falls for solar metallicity and small Gamma_e; at Z = 3 Z_sun and Gamma_e = 0.62 it lies at
    # 28.7 kK, at Z = Z_sun/30 at 19.9 kK, and there nothing was said.
    jump = _vink_jump_kelvin(luminosity, mass, metallicity)
    answer = answered(client, "/v1/winds/mass-loss/recipe", {
        "recipe": "vink-2001", "luminosity": luminosity, "mass": mass, "metallicity": metallicity,
        "teff": {"value": jump + offset, "sigma": 500.0}})
    assert answer["results"]["bistability_jump_temperature"]["value"] == pytest.approx(jump, rel=1e-12)
    messages = [w["message"] for w in answer["warnings"] if w["code"] == "outside_calibration"]
    assert any("bi-stability jump" in m for m in messages) == near


def test_eclipse_possible_under_apsidal_motion_agrees_with_the_minimum_separation(client):
    # The minimum in time of the projected separation rho = r (1 - sin^2 i sin^2(nu + omega(t)))^{1/2} (Heintz 1978,
    # ch. 4), omega(t) moving at omega_dot and equal to the given omega at the minimum itself, by golden section at 40
    # digits: 2.9139681063469456 solRad for the eclipse of star 2 of this fictional pair (the service's
    # minimum_separation2 agrees to 1e-15).  With R1 + R2 1e-9 below it the discs just miss: eclipse_parameter2 > 1
    # and no_eclipse_of_star2.  events.eclipse_possible was worked out without the apsidal motion (2.91396810135
    # solRad, 1.7e-9 smaller) and said the discs overlap, against the answer's own warning.
    period, e, omega, inc, omega_dot, a = mp.mpf("9.73"), mp.mpf("0.28"), mp.mpf(61), mp.mpf("84.6"), 30, 0.118
    with mp.workdps(40):
        s2 = mp.sin(inc * mp.pi / 180) ** 2
        nu0 = (270 - omega) * mp.pi / 180
        big_e = 2 * mp.atan2(mp.sqrt(1 - e) * mp.sin(nu0 / 2), mp.sqrt(1 + e) * mp.cos(nu0 / 2))
        t_min = (big_e - e * mp.sin(big_e)) / (2 * mp.pi) * period          # the conjunction, to start
        for _ in range(4):                                                   # omega(t_min) = omega, self-consistently
            def rho2(t, anchor=t_min):
                nu = _true_anomaly_at(t, period, e, 0)
                r = (1 - e * e) / (1 + e * mp.cos(nu))
                w = (omega + omega_dot * (t - anchor) / JULIAN_YEAR_DAYS) * mp.pi / 180
                return r * r * (1 - s2 * mp.sin(nu + w) ** 2)
            lo, hi, golden = t_min - mp.mpf("0.3"), t_min + mp.mpf("0.3"), (mp.sqrt(5) - 1) / 2
            for _ in range(120):
                c, d = hi - golden * (hi - lo), lo + golden * (hi - lo)
                lo, hi = (lo, d) if rho2(c) < rho2(d) else (c, hi)
            t_min = (lo + hi) / 2
        separation = float(mp.sqrt(rho2(t_min)) * a * AU / R_SUN)
    radius2 = separation * (1 - 1e-9) - 1.3
    answer = answered(client, "/v1/orbit/mid-eclipse", {
        "period": float(period), "eccentricity": float(e), "omega": float(omega), "t_periastron": 0.0,
        "inclination": float(inc), "after": 0.0, "count": 1, "semimajor_axis": a, "omega_dot": omega_dot,
        "radius1": 1.3, "radius2": radius2})
    assert answer["results"]["minimum_separation2"]["value"] == pytest.approx(separation, rel=1e-14)
    assert answer["results"]["eclipse_parameter2"]["value"] > 1.0
    assert "no_eclipse_of_star2" in [w["code"] for w in answer["warnings"]]
    assert answer["results"]["eclipse_possible"] == {"star1": True, "star2": False}


@pytest.mark.parametrize("factor, warned", [(1 + 1e-6, True), (1 - 1e-6, False)])
def test_a_minimum_companion_mass_above_the_primarys_is_warned_without_an_inclination(client, factor, warned):
    # f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G) = M2^3 sin^3 i / (M1 + M2)^2 (Hilditch 2001, eq. 2.51; GM_sun of IAU
    # 2015 B3 by astropy): M2,min = M1 exactly where f(M) = M1 / 4, so
    # K1 = (2 pi GM_sun M1 / (4 P (1 - e^2)^{3/2}))^{1/3}; a K1 a millionth above it gives a companion heavier
    # than the primary at every inclination.  The warning companion_more_massive came only with an inclination
    # (from m2), never from m2_min: a 1.2 solMass star with K1 = 220 km/s in 5.6 d (M2,min = 8.0 solMass, a
    # black-hole candidate's signature) was answered without it.
    from astropy import units as u
    period, e, m1 = 5.6, 0.1, 1.2
    k1 = (2 * math.pi * const.GM_sun * m1 / (4 * period * u.d * (1 - e * e) ** 1.5)) ** (1 / 3)
    k1 = k1.to_value(u.km / u.s) * factor
    answer = answered(client, "/v1/spectroscopic/sb1", {"period": period, "k1": k1, "eccentricity": e, "primary_mass": m1})
    # d ln M2 = (3/2) d ln K1 there (d ln f / d ln M2 = 3 - 2 M2 / (M1 + M2) = 2), to second order in 1e-6
    assert answer["results"]["m2_min"]["value"] == pytest.approx(m1 * factor ** 1.5, rel=1e-11)
    assert ("companion_more_massive" in [w["code"] for w in answer["warnings"]]) == warned


@pytest.mark.parametrize("gamma, warned", [(-50000.0, True), (50000.0, True), (-29000.0, False)])
def test_a_systemic_velocity_beyond_a_tenth_of_c_is_warned_either_way(client, gamma, warned):
    # 0.1 c = 29979.2458 km/s (c exact, SI).  gamma was refused at c, as every speed is, but never warned above
    # 0.1 c, where k1 and k2 are; and a speed's sign is its direction: approaching at 0.17 c is as relativistic as
    # receding.  The radial velocity itself is gamma + K1 (cos(nu + omega) + e cos omega) (Hilditch 2001, eq. 2.45)
    answer = answered(client, "/v1/orbit/ephemeris", {"period": 10.0, "eccentricity": 0.1, "omega": 10.0,
                                                   "t_periastron": 0.0, "k1": 10.0, "gamma": gamma, "times": [0.0],
                                                   "count": 1})
    assert answer["results"]["series"]["rv1"]["value"][0] == pytest.approx(gamma + 10.0 * 1.1 * math.cos(
        math.radians(10.0)), rel=1e-15)
    codes = [(w["code"], w.get("fields")) for w in answer["warnings"]]
    assert (("relativistic_speed", ["gamma"]) in codes) == warned


@pytest.mark.parametrize("k1, warned", [(40.0, True), (9.5, False)])
def test_a_single_lined_orbital_parallax_warns_of_a_heavier_companion_as_sb1_does(client, k1, warned):
    # M2 solves M2^3 sin^3 i / (M1 + M2)^2 = f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G) (Hilditch 2001, eq. 2.51),
    # bisected here at 40 digits (GM_sun of IAU 2015 B3): 7.18 solMass beside 1.08 for K1 = 40 km/s, P = 612 d,
    # e = 0.3, i = 60 deg.  sb1 warned companion_more_massive for that M2, the orbital parallax of the same
    # single-lined orbit with a photocentric one did not.
    body = {"period": 612.0, "k1": k1, "eccentricity": 0.3, "inclination": 60.0, "primary_mass": 1.08}
    with mp.workdps(40):
        f = (mp.mpf(612) * DAY * (mp.mpf(k1) * 1000) ** 3 * (1 - mp.mpf("0.3") ** 2) ** mp.mpf(1.5)
             / (2 * mp.pi * GM_SUN))
        s3 = mp.sin(mp.pi / 3) ** 3
        lo, hi = mp.mpf(0), mp.mpf(1000)
        for _ in range(200):
            mid = (lo + hi) / 2
            lo, hi = (mid, hi) if mid ** 3 * s3 < f * (mp.mpf("1.08") + mid) ** 2 else (lo, mid)
        m2 = float((lo + hi) / 2)
    for path, extra in (("/v1/spectroscopic/sb1", {}),
                        ("/v1/combined/orbital-parallax", {"photocentre_semimajor_axis": 3.71})):
        answer = answered(client, path, {**body, **extra})
        assert answer["results"]["m2"]["value"] == pytest.approx(m2, rel=1e-14), path
        assert ("companion_more_massive" in [w["code"] for w in answer["warnings"]]) == warned, path


@pytest.mark.parametrize("given", [{"omega": 0.0}, {"omega_primary": 0.0}, {"omega": 90.0}, {"omega_primary": 270.0}])
def test_thiele_innes_constants_that_vanish_are_positive_zeros(client, given):
    # Heintz (1978): with node = 0 and i = 90 deg, A = a cos w, B = a sin w cos i = 0, F = -a sin w, G = a cos w cos i
    # = 0 (w the relative orbit's omega, omega_primary + 180 deg): the vanishing constants are 0 exactly, and a
    # report or table prints them as 0, not -0 (IEEE 754 negative zero from -0.0 * 0 or from negating the
    # constants of omega_primary), as the budget's zero shares already are.
    w = given.get("omega", given.get("omega_primary", 0.0) + 180.0)
    got = answered(client, "/v1/astrometric/thiele-innes", {"angular_semimajor_axis": 327.0, "inclination": 90.0,
                                                         "node": 0.0, **given})["results"]
    want = {"A": 327.0 * round(math.cos(math.radians(w))), "B": 0.0, "F": -327.0 * round(math.sin(math.radians(w))),
            "G": 0.0}
    for name, value in want.items():
        assert got[name]["value"] == value, name
        assert math.copysign(1.0, got[name]["value"]) == math.copysign(1.0, value + 0.0), name


@pytest.mark.parametrize("mode", ["jeans", "conservative", "isotropic-re-emission"])
def test_a_period_that_does_not_change_gives_a_rate_of_positive_zero(client, mode):
    # Pdot = 0 gives Mdot = 0 in every mode (each rate is proportional to Pdot/P, Hilditch 2001, sect. 4.3): it read
    # -0.0 in the conservative and re-emission modes at M1 > M2 (-M1 M2 0 / (3 P (M1 - M2)) in IEEE 754)
    got = answered(client, "/v1/winds/mass-loss/period-change", {"period": 6.3, "period_derivative": 0.0, "m1": 27.0,
                                                                "m2": 11.0, "mode": mode})["results"]
    assert got["mass_loss_rate"]["value"] == 0.0
    assert math.copysign(1.0, got["mass_loss_rate"]["value"]) == 1.0


def test_a_periastron_ten_thousand_cycles_on_with_a_period_derivative_by_hand(client):
    # Quadratic ephemeris t = T0 + P (c + Pdot c^2 / 2), Pdot in s per Julian year (IAU 1976) made days per day
    # (Hilditch 2001, ch. 4 on O - C); its linear sigma^2 = s_T0^2 + (dt/dP s_P)^2 + (dt/dPdot s_Pdot)^2
    # + 2 rho s_T0 (dt/dP s_P), dt/dP = c + Pdot c^2 / 2, dt/dPdot = P c^2 / 2, at 40 digits.  Agreed: the date to
    # its rounding, the sigma to 2e-16.
    period, t0 = 3.7, 2451234.5
    event = answered(client, "/v1/orbit/ephemeris", {
        "period": {"value": period, "sigma": 1e-6}, "eccentricity": 0.3, "omega": 40.0,
        "t_periastron": {"value": t0, "sigma": 1e-3}, "k1": 10.0, "times": [t0 + period * 10000.2], "count": 1,
        "period_derivative": {"value": 0.5, "sigma": 0.05},
        "correlations": [{"between": ["period", "t_periastron"], "rho": -0.6}]})["results"]["events"]["periastron"][0]
    assert event["cycle"] == 10000.0
    with mp.workdps(40):
        c, year = mp.mpf(10000), JULIAN_YEAR_DAYS * DAY
        rate = mp.mpf("0.5") / year
        d_period, d_pdot = c + rate * c * c / 2, mp.mpf(period) * c * c / 2 / year
        s_t0, s_p, s_pdot = mp.mpf("1e-3"), mp.mpf("1e-6"), mp.mpf("0.05")
        sigma = mp.sqrt(s_t0 ** 2 + (d_period * s_p) ** 2 + (d_pdot * s_pdot) ** 2
                        - 2 * mp.mpf("0.6") * s_t0 * d_period * s_p)
        date = mp.mpf(t0) + mp.mpf(period) * (c + rate * c * c / 2)
    assert abs(event["value"] - float(date)) <= 2 * np.spacing(float(date))
    assert event["sigma"] == pytest.approx(float(sigma), rel=1e-15)
