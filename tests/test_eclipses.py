"""Mid-eclipse times of eccentric, inclined orbits against an independent minimisation with scipy."""

import math

import numpy as np
import pytest
from astropy.time import Time
from scipy.optimize import brentq, minimize_scalar

from calcservice.core import compute
from calcservice.physics import orbit

from .conftest import post

PATH = "/v1/orbit/mid-eclipse"
# a fictional eccentric eclipsing pair
P, E, W, T0, I = 9.73, 0.28, 61.0, 2460811.42, 84.6
AFTER = 2461000.5


def _sky_separation(t, p, e, w_deg, i_deg, t0):
    """Projected separation over a at time t, from a direct Kepler solve (brentq on M = E - e sin E) and the
    rotation of the orbital-plane position (r cos nu, r sin nu) by omega and the inclination: independent of
    the service's true-anomaly form."""
    m = 2 * math.pi * (t - t0) / p
    m = math.remainder(m, 2 * math.pi)
    big_e = brentq(lambda x: x - e * math.sin(x) - m, -math.pi - 1, math.pi + 1, xtol=1e-15)
    x_orb, y_orb = math.cos(big_e) - e, math.sqrt(1 - e * e) * math.sin(big_e)
    w = math.radians(w_deg)
    xi = x_orb * math.cos(w) - y_orb * math.sin(w)     # along the line of nodes
    eta = x_orb * math.sin(w) + y_orb * math.cos(w)    # in the plane, perpendicular to it
    return math.hypot(xi, eta * math.cos(math.radians(i_deg)))


def _conjunction_time(star, p, e, w_deg, t0, near):
    """Time of the conjunction nu + omega = 90 deg (star 1 eclipsed) or 270 deg nearest ``near``."""
    nu = math.radians((90.0 if star == 1 else 270.0) - w_deg)
    big_e = 2 * math.atan(math.sqrt((1 - e) / (1 + e)) * math.tan(nu / 2))   # Murray & Dermott 1999, eq. 2.46
    m = big_e - e * math.sin(big_e)
    t = t0 + m / (2 * math.pi) * p
    return t + round((near - t) / p) * p


def _mid_eclipse_times(body):
    r = compute("mid-eclipse", body)["results"]
    return r, {star: [x["value"] for x in r["events"][f"eclipse_of_star{star}"]] for star in (1, 2)}


@pytest.mark.parametrize("e,w,i", [(0.28, 61.0, 84.6), (0.6, 200.0, 80.0), (0.1, 330.0, 88.0), (0.45, 95.0, 97.0),
                                   (0.8, 10.0, 86.0)])
def test_mid_eclipse_against_scipy_minimisation(e, w, i):
    # the global minimum of the projected separation near each conjunction: a grid, then
    # scipy.optimize.minimize_scalar about the best grid point (at e = 0.8 both conjunctions fall within a day,
    # on either side of periastron, and each has its own minimum)
    _, times = _mid_eclipse_times({"period": P, "eccentricity": e, "omega": w, "t_periastron": T0,
                                   "inclination": i, "after": AFTER, "count": 1})
    for star in (1, 2):
        for t in times[star]:
            conj = _conjunction_time(star, P, e, w, T0, t)
            # the window stops half-way to the other conjunction, where the other star is in front
            half = min(P / 10, abs(_conjunction_time(3 - star, P, e, w, T0, conj) - conj) / 2)
            grid = np.linspace(-half, half, 801)
            best = grid[np.argmin([_sky_separation(conj + x, P, e, w, i, T0) for x in grid])]
            step = grid[1] - grid[0]
            res = minimize_scalar(lambda x: _sky_separation(conj + x, P, e, w, i, T0),
                                  bounds=(best - step, best + step), method="bounded", options={"xatol": 1e-10})
            assert t == pytest.approx(conj + res.x, abs=2e-6), (star, e, w, i)
            # and the service's minimum separation agrees with the independent one
            r = orbit.mid_eclipse(P, e, w, i)
            assert r[f"minimum_separation{star}_over_a"] == pytest.approx(res.fun, abs=1e-9)


def test_mid_eclipse_differs_from_conjunction_when_eccentric_and_inclined():
    # e > 0 and i < 90 deg: the minimum of the projected separation is not at conjunction.  To first order in
    # cot^2 i (expanding d rho^2/d nu = 0 about u = 90 or 270 deg, and dt/dnu from Kepler's second law):
    # dt = -+ P/(2 pi) e cos(omega) cot^2 i (1 - e^2)^{3/2} / (1 +- e sin(omega))^3  (our derivation, a check
    # of the sign and the size)
    e, w, i = 0.4, 30.0, 85.0
    r, _ = _mid_eclipse_times({"period": P, "eccentricity": e, "omega": w, "t_periastron": T0,
                               "inclination": i, "after": AFTER})
    ecw, esw = e * math.cos(math.radians(w)), e * math.sin(math.radians(w))
    cot2 = 1 / math.tan(math.radians(i)) ** 2
    for star, sign in ((1, -1.0), (2, 1.0)):
        first_order = sign * P / (2 * math.pi) * ecw * cot2 * (1 - e * e) ** 1.5 / (1 - sign * esw) ** 3
        assert r[f"conjunction_offset{star}"]["value"] == pytest.approx(first_order, rel=0.02)


@pytest.mark.parametrize("e,i", [(0.0, 70.0), (0.5, 90.0)])
def test_mid_eclipse_is_conjunction_in_the_limits(e, i):
    # e = 0 or i = 90 deg: the minimum projected separation is at conjunction (Hilditch 2001, ch. 2), and the
    # dates agree with the ephemeris's conjunctions
    body = {"period": P, "eccentricity": e, "omega": W, "t_periastron": T0, "inclination": i, "after": AFTER,
            "count": 3}
    r, times = _mid_eclipse_times(body)
    assert r["conjunction_offset1"]["value"] == pytest.approx(0.0, abs=1e-9)
    assert r["conjunction_offset2"]["value"] == pytest.approx(0.0, abs=1e-9)
    ev = compute("ephemeris", {"period": P, "eccentricity": e, "omega": W, "t_periastron": T0, "k1": 30.0,
                               "times": [AFTER], "count": 3})["results"]["events"]["conjunctions"]
    star2_front = [x["value"] for x in ev if x["kind"] == "conjunction_star2_in_front"]
    star1_front = [x["value"] for x in ev if x["kind"] == "conjunction_star1_in_front"]
    np.testing.assert_allclose(times[1], star2_front, rtol=0, atol=1e-8)
    np.testing.assert_allclose(times[2], star1_front, rtol=0, atol=1e-8)


def test_mid_eclipse_sigmas_follow_the_elements():
    # only T0 uncertain: every date has sigma_T0; only P: sigma = (cycles since T0) sigma_P (linear propagation)
    base = {"period": P, "eccentricity": E, "omega": W, "inclination": I, "after": AFTER}
    r = compute("mid-eclipse", {**base, "t_periastron": {"value": T0, "sigma": 0.05}})["results"]["events"]
    assert all(x["sigma"] == pytest.approx(0.05, rel=1e-9) for x in r["eclipse_of_star1"])
    r = compute("mid-eclipse", {**base, "t_periastron": T0, "period": {"value": P, "sigma": 1e-4}})["results"]
    for x in r["events"]["eclipse_of_star2"]:
        assert x["sigma"] == pytest.approx(x["cycle"] * 1e-4, rel=1e-9)
    # omega uncertain: the date moves with the phase, d t / d omega by an independent central difference
    r = compute("mid-eclipse", {**base, "t_periastron": T0, "omega": {"value": W, "sigma": 1.0}})["results"]
    h = 1e-3
    _, up = _mid_eclipse_times({**base, "t_periastron": T0, "omega": W + h, "count": 1})
    _, down = _mid_eclipse_times({**base, "t_periastron": T0, "omega": W - h, "count": 1})
    assert r["events"]["eclipse_of_star1"][0]["sigma"] == pytest.approx(abs(up[1][0] - down[1][0]) / (2 * h),
                                                                         rel=1e-5)


def test_eclipse_possible_from_the_radii(client):
    # the discs overlap where rho_min < R1 + R2; far from edge-on they do not, with a warning naming the star
    body = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "inclination": I, "after": AFTER,
            "total_mass": 3.9, "radius1": 2.1, "radius2": 1.6}
    status, doc = post(client, PATH, body)
    assert status == 200 and doc["results"]["eclipse_possible"] == {"star1": True, "star2": True}
    status, doc = post(client, PATH, {**body, "inclination": 60.0})
    assert status == 200 and doc["results"]["eclipse_possible"] == {"star1": False, "star2": False}
    assert {"no_eclipse_of_star1", "no_eclipse_of_star2"} <= {w["code"] for w in doc["warnings"]}
    a_sun = doc["results"]["semimajor_axis"]["value"] * 215.03                 # au in R_sun (IAU), to 1e-4
    assert doc["results"]["minimum_separation1"]["value"] == pytest.approx(
        doc["results"]["minimum_separation1_over_a"]["value"] * a_sun, rel=1e-4)
    status, doc = post(client, PATH, {k: v for k, v in body.items() if k not in ("total_mass", "radius2")})
    assert status == 422 and "radius1" in doc["errors"]


def test_mid_eclipse_dates_in_mjd_and_iso(client):
    body = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "inclination": I, "after": AFTER}
    _, jd = post(client, PATH, body)
    _, mjd = post(client, PATH, {**body, "t_periastron": T0 - 2400000.5, "after": AFTER - 2400000.5,
                                 "time_format": "mjd"})
    assert mjd["results"]["events"]["time_format"] == "mjd"
    for a, b in zip(jd["results"]["events"]["eclipse_of_star1"], mjd["results"]["events"]["eclipse_of_star1"]):
        assert b["value"] == pytest.approx(Time(a["value"], format="jd").mjd, abs=1e-6)
        assert b["iso"] == a["iso"]


def test_mid_eclipse_with_apsidal_motion_and_period_derivative():
    # omega(t) = omega + omega_dot (t - T0) and T_n = T0 + P (n + Pdot n^2 / 2): the minimum of the sky
    # separation from a direct Kepler solve at omega(t), found by scipy about the conjunction, years later
    e, w, i, wdot, pdot_s_yr = 0.35, 140.0, 83.0, 12.0, 300.0
    pdot = pdot_s_yr / (365.25 * 86400.0)
    after = T0 + 3000.0
    r = compute("mid-eclipse", {"period": P, "eccentricity": e, "omega": w, "t_periastron": T0, "inclination": i,
                                "after": after, "count": 2, "omega_dot": wdot,
                                "period_derivative": pdot_s_yr})["results"]["events"]

    def cycles_at(t):
        return brentq(lambda n: T0 + P * (n + 0.5 * pdot * n * n) - t, -1e4, 1e4, xtol=1e-14)

    def separation(t):
        w_t = w + wdot * (t - T0) / 365.25
        # the separation at omega(t), with the mean anomaly of the quadratic ephemeris
        return _sky_separation(T0 + cycles_at(t) * P, P, e, w_t, i, T0)

    for star in (1, 2):
        for entry in r[f"eclipse_of_star{star}"]:
            t = entry["value"]
            # offsets from t: scipy's bounded search has a tolerance relative to |x|, too coarse for a JD
            grid = np.linspace(-0.3, 0.3, 601)
            best = grid[np.argmin([separation(t + x) for x in grid])]
            res = minimize_scalar(lambda x: separation(t + x), bounds=(best - 0.001, best + 0.001), method="bounded",
                                  options={"xatol": 1e-10})
            assert res.x == pytest.approx(0.0, abs=2e-6), star
    # without the rates the dates differ by far more than that
    plain = compute("mid-eclipse", {"period": P, "eccentricity": e, "omega": w, "t_periastron": T0,
                                    "inclination": i, "after": after, "count": 2})["results"]["events"]
    assert abs(plain["eclipse_of_star1"][0]["value"] - r["eclipse_of_star1"][0]["value"]) > 0.01


def test_mid_eclipse_stays_on_its_half_of_the_orbit():
    # nearly face-on the sky separation is smallest at periastron, which may lie on the other star's side: the
    # minimum is sought only where star 1 (2) is the farther star, |nu + omega - 90 (270) deg| < 90 deg
    for star, centre in ((1, 90.0), (2, 270.0)):
        for w in (0.0, 45.0, 170.0, 300.0):
            nu = orbit.mid_eclipse_true_anomaly(star, 0.6, math.radians(w), math.radians(3.0))
            off = math.remainder(math.degrees(nu) + w - centre, 360.0)
            assert abs(off) <= 90.0


def test_report_names_mjd_dates(client):
    # the derivation report labels the event dates with the caller's format
    body = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0 - 2400000.5, "inclination": I,
            "after": AFTER - 2400000.5, "time_format": "mjd", "count": 1}
    text = client.post(PATH + "?format=markdown", json=body).get_data(as_text=True)
    assert "date [d, MJD]" in text
    text = client.post(PATH + "?format=markdown", json={**body, "time_format": "jd", "t_periastron": T0,
                                                         "after": AFTER}).get_data(as_text=True)
    assert "date [d, JD]" in text and "MJD" not in text.split("### Events")[1].split("###")[0]
