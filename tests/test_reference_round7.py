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

from calcservice import create_app

GM_SUN = mp.mpf(const.GM_sun.si.value)     # IAU 2015 Resolution B3 nominal GM_sun, m^3 s^-2 (astropy.constants)
AU = mp.mpf(const.au.si.value)             # IAU 2012 Resolution B2, m (astropy.constants)
DAY = mp.mpf(86400)                        # s (SI day)


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _post(client, path, body):
    r = client.post(path, json=body)
    assert r.status_code == 200, r.get_json()
    return r.get_json()


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
    got = _post(client, "/v1/astrometric/photocentre", {
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
    rows = _post(client, "/v1/batch/photocentre", {"systems": systems})["results"]
    for body, row in zip(systems, rows):
        assert row["results"] == _post(client, "/v1/astrometric/photocentre", body)["results"]


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
    rows = _post(client, "/v1/batch/mid-eclipse", {"systems": systems})["results"]
    for body, row in zip(systems, rows):
        single = _post(client, "/v1/orbit/mid-eclipse", body)
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
    answer = _post(client, "/v1/orbit/geometry", {"period": period, "eccentricity": eccentricity, "m1": 20.0,
                                                  "m2": 20.0})
    want = _vis_viva_periastron_km_s(period, eccentricity, 40.0)
    assert answer["results"]["speed_periastron"]["value"] == pytest.approx(want, rel=1e-13)
    assert (want > 0.1 * const.c.to_value("km/s")) == warned
    codes = [(w["code"], w.get("fields")) for w in answer["warnings"]]
    assert (("relativistic_speed", ["speed_periastron"]) in codes) == warned


def test_an_expansion_speed_derived_from_a_distance_is_warned_above_a_tenth_of_c(client):
    # v = 4.74047 s D / P (1 au per Julian year in km/s, IAU 2012 au): 1 mas per 100 d at 10 Mpc is 1.7e5 km/s
    answer = _post(client, "/v1/winds/shell-distance", {"period": 100.0, "shell_spacing": 1.0, "distance": 1e7})
    from astropy import units as u
    want = (1e-3 * u.arcsec * 1e7 * u.pc / (100 * u.d)).to_value(u.km / u.s, equivalencies=u.dimensionless_angles())
    assert answer["results"]["expansion_speed"]["value"] == pytest.approx(want, rel=1e-14)
    assert "relativistic_speed" in [w["code"] for w in answer["warnings"]]
