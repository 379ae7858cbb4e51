"""Kepler's equation, the anomalies and the ephemeris at the edges of their domain, against 50-digit references.

Each reference is computed with mpmath at 50 significant digits from the published formula, never from
the service's code: Kepler's equation M = E - e sin E (Murray & Dermott 1999, *Solar System Dynamics*,
eq. 2.52), solved by Newton's method from an upper bound of the root (E - e sin E is convex on [0, pi],
so the iterates fall monotonically onto it); tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2) (their eq. 2.46);
r/a = 1 - e cos E = (1 - e^2)/(1 + e cos nu); v = K (cos(nu + omega) + e cos omega) (Hilditch 2001,
*An Introduction to Close Binary Stars*, eq. 2.45).
The formulas, papers and equation numbers cited here are from memory.
"""

import mpmath as mp
import numpy as np
import pytest

from calcservice.core import compute
from calcservice.physics import kepler

from .mpmath_helpers import precision, relative_error


working_precision = precision(50)


def reference_eccentric_anomaly(mean_anomaly, eccentricity):
    """E of M = E - e sin E, at 50 digits; M and e taken as the exact values of the doubles given."""
    m, e = mp.mpf(mean_anomaly), mp.mpf(eccentricity)
    k = mp.floor(m / (2 * mp.pi) + mp.mpf(1) / 2)
    m0 = m - (2 * mp.pi) * k
    sign, m0 = (-1 if m0 < 0 else 1), abs(m0)
    if m0 == 0:
        return (2 * mp.pi) * k
    # upper bounds of the root: E <= M + e, E <= pi, and E (1 - e) <= E - e sin E = M
    big_e = min(m0 + e, mp.pi, m0 / (1 - e) if e < 1 else mp.inf)
    for _ in range(2000):
        step = (big_e - e * mp.sin(big_e) - m0) / (1 - e * mp.cos(big_e))
        big_e -= step
        if abs(step) <= abs(big_e) * mp.mpf(10) ** -45:
            break
    return sign * big_e + (2 * mp.pi) * k


def reference_true_anomaly(big_e, eccentricity):
    e = mp.mpf(eccentricity)
    k = mp.floor(big_e / (2 * mp.pi) + mp.mpf(1) / 2)
    half = (big_e - (2 * mp.pi) * k) / 2
    return 2 * mp.atan2(mp.sqrt(1 + e) * mp.sin(half), mp.sqrt(1 - e) * mp.cos(half)) + (2 * mp.pi) * k


ECCENTRICITIES = [0.0, 0.3, 0.9, 0.99, 0.999, 0.9999, 0.99999, 1 - 1e-8, 1 - 1e-12]
#: mean anomalies at periastron (from both sides), just after and before it by tiny amounts, and at apastron
MEAN_ANOMALIES = [1e-300, 1e-20, 1e-12, 1e-8, 1e-5, 1e-3, 0.1, 1.0, 3.0, float(np.pi) - 1e-9, float(np.pi), -1e-10,
                  -1e-3, -3.0]


def test_eccentric_and_true_anomaly_and_separation_near_periastron_at_e_to_1():
    # E, nu and r/a = 1 - e cos E,
    # whose value near periastron at e -> 1 is a few times 1 - e: all to 1e-13 (they lost up to 1e-9 before)
    worst = {"E": 0.0, "nu": 0.0, "r": 0.0}
    for e in ECCENTRICITIES:
        m = np.array(MEAN_ANOMALIES)
        big_e = kepler.eccentric_anomaly(m, e)
        nu = kepler.true_from_eccentric(big_e, e)
        r = kepler.separation_from_eccentric(big_e, e)
        r_nu = kepler.separation(nu, e)
        for i, mi in enumerate(MEAN_ANOMALIES):
            ref_e = reference_eccentric_anomaly(mi, e)
            ref_nu = reference_true_anomaly(ref_e, e)
            ref_r = 1 - mp.mpf(e) * mp.cos(ref_e)
            worst["E"] = max(worst["E"], relative_error(big_e[i], ref_e))
            worst["nu"] = max(worst["nu"], relative_error(nu[i], ref_nu))
            # r from nu: its reference at the double nu given, since near apastron at e -> 1 r is steep in nu
            e_ = mp.mpf(e)
            ref_r_nu = (1 - e_ * e_) / (1 + e_ * mp.cos(mp.mpf(nu[i])))
            worst["r"] = max(worst["r"], relative_error(r[i], ref_r), relative_error(r_nu[i], ref_r_nu))
    assert worst["E"] < 1e-13 and worst["nu"] < 1e-13 and worst["r"] < 1e-13, worst


def test_mean_anomaly_reduced_to_its_distance_from_periastron():
    # M = 2 pi k - d keeps d (the double 2 pi is 2.4e-16 short of 2 pi, which once swallowed d ~ 1e-15 whole)
    m = np.array([np.nextafter(2 * np.pi, 0), 2 * np.pi - 1e-12, 2 * np.pi + 1e-9, 200 * np.pi + 1e-7,
                  -20 * np.pi - 0.3, 2e6 * np.pi + 3e-9, 1e-300])
    m0, k = kepler.reduce_mean_anomaly(m)
    worst = max(relative_error(m0[i], mp.mpf(m[i]) - (2 * mp.pi) * int(k[i])) for i in range(len(m)))
    assert worst < 1e-15, worst


def reference_ephemeris(time, period, t_periastron, eccentricity, omega, k1, gamma, inclination, node, axis):
    """One date of the ephemeris at 50 digits: phase, true anomaly (deg), r/a, rv1 and the sky position.

    Phase = frac((t - T0)/P); M = 2 pi phase; E from Kepler's equation; nu from tan(nu/2) (Murray & Dermott 1999,
    eq. 2.46); rv1 = gamma + K1 (cos(nu + omega) + e cos omega) (Hilditch 2001, eq. 2.45); u = nu + omega + 180 deg,
    rho = a'' (r/a) (cos^2 u + sin^2 u cos^2 i)^{1/2}, theta = node + atan2(sin u cos i, cos u) (Heintz 1978, ch. 4).
    """
    x = (mp.mpf(time) - mp.mpf(t_periastron)) / mp.mpf(period)
    phase = x - mp.floor(x)
    mean = (2 * mp.pi) * phase
    big_e = reference_eccentric_anomaly(mean, eccentricity)
    nu = reference_true_anomaly(big_e, eccentricity)
    e, w = mp.mpf(eccentricity), mp.radians(mp.mpf(omega))
    r = 1 - e * mp.cos(big_e)
    rv1 = mp.mpf(gamma) + mp.mpf(k1) * (mp.cos(nu + w) + e * mp.cos(w))
    u = nu + w + mp.pi
    cos_i = mp.cos(mp.radians(mp.mpf(inclination)))
    rho = mp.mpf(axis) * r * mp.sqrt(mp.cos(u) ** 2 + mp.sin(u) ** 2 * cos_i ** 2)
    theta = mp.mpf(node) + mp.degrees(mp.atan2(mp.sin(u) * cos_i, mp.cos(u)))
    return {"phase": phase, "true_anomaly": mp.degrees(nu) % 360, "separation": r, "rv1": rv1,
            "projected_separation": rho, "position_angle": theta % 360}


def angle_error(value, reference):
    """|value - reference| in degrees on the circle, relative to the angle's distance from 0 (mod 360) or 1 deg."""
    d = (mp.mpf(float(value)) - reference + 180) % 360 - 180
    scale = min(reference % 360, 360 - reference % 360)
    return float(abs(d) / max(scale, mp.mpf(1)))


@pytest.mark.parametrize("eccentricity", [0.0, 0.9, 0.99999, 1 - 1e-9])
def test_ephemeris_dates_just_before_and_after_periastron(eccentricity):
    # a date a microsecond to an hour from a periastron passage, 1 to 40000 cycles after T0, the orbit seen edge-on
    # to within 1e-7 deg and oriented so that the projected separation near periastron rests on cos i
    period, t0, omega, k1, gamma, inclination, node, axis = 37.3, 2451234.5, 270.0, 61.2, -7.4, 89.9999999, 112.0, 8.3
    offsets = np.array([1e-8, 1e-6, 1e-4, 0.04, -1e-8, -1e-6, -1e-4, -0.04])
    cycles = np.array([1.0, 7.0, 40000.0])
    times = (t0 + period * cycles[:, None] + offsets[None, :]).ravel()
    body = {"period": period, "eccentricity": eccentricity, "omega": omega, "t_periastron": t0, "k1": k1,
            "gamma": gamma, "inclination": inclination, "node": node, "angular_semimajor_axis": axis,
            "times": times.tolist()}
    series = compute("ephemeris", body)["results"]["series"]
    worst = {}
    for j, t in enumerate(times):
        ref = reference_ephemeris(t, period, t0, eccentricity, omega, k1, gamma, inclination, node, axis)
        for name in ("separation", "rv1", "projected_separation"):
            worst[name] = max(worst.get(name, 0.0), relative_error(series[name]["value"][j], ref[name]))
        # the phase in [0, 1): a double just below 1 resolves 1.1e-16 of a cycle, no better
        worst["phase"] = max(worst.get("phase", 0.0), float(abs(series["phase"]["value"][j] - ref["phase"])) * 1e4)
        for name in ("true_anomaly", "position_angle"):
            worst[name] = max(worst.get(name, 0.0), angle_error(series[name]["value"][j], ref[name]))
    assert max(worst.values()) < 1e-12, worst


def test_eccentric_anomaly_at_random_across_the_domain():
    # 1 - e log-uniform from 1e-12 to 1, M uniform on (-pi, pi] and log-uniform from 1e-15 to 1 of either sign
    rng = np.random.default_rng(2026)
    n = 150
    e = 1 - 10 ** rng.uniform(-12, 0, n)
    m = np.where(rng.uniform(size=n) < 0.5, rng.uniform(-np.pi, np.pi, n),
                 rng.choice([-1.0, 1.0], n) * 10 ** rng.uniform(-15, 0, n))
    big_e = kepler.eccentric_anomaly(m, e)
    nu = kepler.true_anomaly(m, e)
    worst_e = max(relative_error(big_e[i], reference_eccentric_anomaly(m[i], e[i])) for i in range(n))
    worst_nu = max(relative_error(nu[i], reference_true_anomaly(reference_eccentric_anomaly(m[i], e[i]), e[i]))
                   for i in range(n))
    assert worst_e < 1e-14 and worst_nu < 1e-14, (worst_e, worst_nu)
