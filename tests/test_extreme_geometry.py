"""Orbit geometry and event dates at the edges of their domains, against 50-digit mpmath references written from the
published formulas: Kepler's third law a^3 = G M_sun M P^2 / (4 pi^2); the vis-viva equation v^2 = G M (2/r - 1/a)
at r = a (1 -+ e) (e.g. Murray & Dermott 1999, *Solar System Dynamics*, eq. 2.36); the Roche-lobe radius
r_L / a = 0.49 q^{2/3} / (0.6 q^{2/3} + ln(1 + q^{1/3})) (Eggleton 1983, ApJ 268, 368, eq. 2); event dates at the
true anomaly of each event, t = T0 + P (n + M(nu)/2 pi) with M = E - e sin E, tan(E/2) = ((1 - e)/(1 + e))^{1/2}
tan(nu/2) (Murray & Dermott 1999, eq. 2.46, 2.52); conjunctions at nu + omega = 90 and 270 deg, RV extrema at
nu + omega = 0 and 180 deg (Hilditch 2001, *An Introduction to Close Binary Stars*, eq. 2.45).
Constants from provenance.constants.
The formulas, papers and equation numbers cited here are from memory.
"""

import mpmath as mp
import numpy as np
import pytest

from calcservice.core import compute, compute_batch

from .mpmath_helpers import precision, relative_error


working_precision = precision(50)


CONSTANTS = compute("geometry", {"period": 1.0, "eccentricity": 0.1, "m1": 1.0, "m2": 1.0})["provenance"]["constants"]
GM = mp.mpf(CONSTANTS["GM_sun"]["value"])
AU = mp.mpf(CONSTANTS["au"]["value"])
R_SUN = mp.mpf(CONSTANTS["R_sun"]["value"])
DAY = mp.mpf(CONSTANTS["day"]["value"])


def eggleton(q):
    q = mp.mpf(q)
    return mp.mpf("0.49") * q ** (mp.mpf(2) / 3) / (mp.mpf("0.6") * q ** (mp.mpf(2) / 3) + mp.log(1 + mp.cbrt(q)))


def reference_geometry(period, eccentricity, m1, m2):
    e, m1, m2 = mp.mpf(eccentricity), mp.mpf(m1), mp.mpf(m2)
    total = m1 + m2
    a = mp.cbrt(GM * total * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2))       # m
    peri, apo = a * (1 - e), a * (1 + e)
    return {"semimajor_axis": a / AU, "periastron_distance": peri / AU, "apastron_distance": apo / AU,
            "speed_periastron": mp.sqrt(GM * total * (2 / peri - 1 / a)) / 1000,
            "speed_apastron": mp.sqrt(GM * total * (2 / apo - 1 / a)) / 1000,
            "roche_lobe1": eggleton(m1 / m2) * peri / R_SUN, "roche_lobe2": eggleton(m2 / m1) * peri / R_SUN,
            "roche_lobe1_apastron": eggleton(m1 / m2) * apo / R_SUN}


def test_geometry_at_extreme_eccentricities_mass_ratios_and_periods():
    # e to 1 - 1e-12 (the apastron speed is a vis-viva difference that cancels), q = M1/M2 from 1e-6 to 1e6 (Roche
    # lobes), and periods from 1e-200 d to 1e200 d (where M P^2 itself leaves the range of a double)
    rng = np.random.default_rng(17)
    systems = [(118.3, 0.99999, 8.4, 5.1), (118.3, 1 - 1e-12, 8.4, 5.1), (118.3, 0.0, 1e-6, 1.0),
               (118.3, 0.3, 1.0, 1e-6), (118.3, 0.3, 1e6, 1.0), (1e-200, 0.5, 1.0, 1.0), (1e200, 0.5, 1.0, 1.0)]
    systems += [(float(10 ** rng.uniform(-3, 7)), float(1 - 10 ** rng.uniform(-12, 0)),
                 float(10 ** rng.uniform(-3, 3)), float(10 ** rng.uniform(-3, 3))) for _ in range(30)]
    names = ("period", "eccentricity", "m1", "m2")
    answer = compute_batch("geometry", {"columns": {k: [s[j] for s in systems] for j, k in enumerate(names)}})
    worst = {}
    for index, s in enumerate(systems):
        for name, ref in reference_geometry(*s).items():
            worst[name] = max(worst.get(name, 0.0), relative_error(answer["columns"][name]["value"][index], ref))
    assert max(worst.values()) < 1e-13, worst


def test_geometry_from_a_semimajor_axis_splits_the_mass_at_extreme_ratios():
    # M from a and P (Kepler's third law), M1 = M/(1 + q), M2 = M q/(1 + q): never M - M1, which cancels at small q
    rows = [{"period": 118.3, "eccentricity": 0.3, "semimajor_axis": 1.12, "mass_ratio": q} for q in
            (1e-12, 1e-6, 1.0, 1e6)]
    answer = compute_batch("geometry", {"systems": rows})["results"]
    worst = 0.0
    for row, got in zip(rows, answer):
        total = 4 * mp.pi ** 2 * (mp.mpf(1.12) * AU) ** 3 / (GM * (mp.mpf(118.3) * DAY) ** 2)
        q = mp.mpf(row["mass_ratio"])
        for name, ref in {"total_mass": total, "m1": total / (1 + q), "m2": total * q / (1 + q)}.items():
            worst = max(worst, relative_error(got["results"][name]["value"], ref))
    assert worst < 1e-14, worst


def reference_event_offset(kind, eccentricity, omega):
    """M / 2 pi of the event at 50 digits, continuous in e and omega over the cases tested (not reduced mod 1)."""
    e, w = mp.mpf(eccentricity), mp.mpf(omega)
    nu = mp.radians({"conjunction_star2_in_front": 90 - w, "conjunction_star1_in_front": 270 - w,
                     "rv1_maximum": -w, "rv1_minimum": 180 - w}[kind])
    big_e = 2 * mp.atan2(mp.sqrt(1 - e) * mp.sin(nu / 2), mp.sqrt(1 + e) * mp.cos(nu / 2))
    return (big_e - e * mp.sin(big_e)) / (2 * mp.pi)


@pytest.mark.parametrize("eccentricity, omega", [(0.99999, 30.0), (0.99999, 89.9999), (1 - 1e-9, 270.00001),
                                                  (0.5, 0.0), (0.0, 123.4)])
def test_conjunction_and_rv_extremum_dates_near_periastron_at_e_to_1(eccentricity, omega):
    # the dates and their linear sigmas (from sigma_e and sigma_omega, through dM/de and dM/domega), the
    # reference derivative by 50-digit central differences of the phase
    period, t0 = 37.3, 2451234.5
    body = {"period": period, "eccentricity": {"value": eccentricity, "sigma": 1e-12},
            "omega": {"value": omega, "sigma": 1e-7}, "t_periastron": t0, "k1": 61.2, "times": [t0 + 0.3],
            "count": 2, "correlations": []}
    events = compute("ephemeris", body)["results"]["events"]
    worst_days, worst_sigma = 0.0, 0.0
    for event in events["conjunctions"] + events["rv_extrema"]:
        kind = event["kind"]
        phase = reference_event_offset(kind, eccentricity, omega) % 1
        cycles = mp.nint((mp.mpf(event["value"]) - t0) / period - phase)
        reference = mp.mpf(t0) + period * (cycles + phase)
        # in days after T0, against one unit in the last place of a Julian Date of the 1990s (4.7e-10 d)
        worst_days = max(worst_days, float(abs(mp.mpf(event["value"]) - reference)) / 4.7e-10)
        h_e, h_w = mp.mpf(10) ** -20, mp.mpf(10) ** -15
        d_e = (reference_event_offset(kind, mp.mpf(eccentricity) + h_e, omega)
               - reference_event_offset(kind, mp.mpf(eccentricity) - h_e, omega)) / (2 * h_e) * period
        d_w = (reference_event_offset(kind, eccentricity, mp.mpf(omega) + h_w)
               - reference_event_offset(kind, eccentricity, mp.mpf(omega) - h_w)) / (2 * h_w) * period
        sigma = mp.sqrt((d_e * mp.mpf(1e-12)) ** 2 + (d_w * mp.mpf(1e-7)) ** 2)
        worst_sigma = max(worst_sigma, relative_error(event["sigma"], sigma))
    assert worst_days <= 1.0 and worst_sigma < 1e-9, (worst_days, worst_sigma)


def reference_mid_eclipse(star, eccentricity, omega, inclination):
    """Phase and rho/a at the minimum of rho^2 = r^2 (1 - sin^2 i sin^2(nu + omega)) near the conjunction that
    eclipses ``star`` (nu + omega = 90 or 270 deg), by a grid over +-30 deg (0.5 deg steps) then golden-section search at 50 digits
    (rho from Heintz 1978, ch. 4; the minimum in nu is the minimum in time, nu rising with t)."""
    e, w, s2 = mp.mpf(eccentricity), mp.radians(mp.mpf(omega)), mp.sin(mp.radians(mp.mpf(inclination))) ** 2

    def rho2(nu):
        r = (1 - e * e) / (1 + e * mp.cos(nu))
        return r * r * (1 - s2 * mp.sin(nu + w) ** 2)

    conjunction = (mp.pi / 2 if star == 1 else 3 * mp.pi / 2) - w
    grid = [conjunction + mp.radians(mp.mpf(k - 60) / 2) for k in range(121)]
    k = min(range(121), key=lambda j: rho2(grid[j]))
    lo, hi = grid[max(k - 1, 0)], grid[min(k + 1, 120)]
    golden = (mp.sqrt(5) - 1) / 2
    for _ in range(160):
        a, b = hi - golden * (hi - lo), lo + golden * (hi - lo)
        lo, hi = (lo, b) if rho2(a) < rho2(b) else (a, hi)
    nu = (lo + hi) / 2
    big_e = 2 * mp.atan2(mp.sqrt(1 - e) * mp.sin(nu / 2), mp.sqrt(1 + e) * mp.cos(nu / 2))
    return ((big_e - e * mp.sin(big_e)) / (2 * mp.pi)) % 1, mp.sqrt(rho2(nu))


@pytest.mark.parametrize("eccentricity", [0.0, 0.28, 0.9, 0.999])
def test_mid_eclipse_of_an_edge_on_orbit(eccentricity):
    # within 0.01 deg and 1e-4 deg of edge-on, where rho/a = r (cos^2 u + cos^2 i sin^2 u)^{1/2} at the minimum is a
    # few 1e-7 and 1 - sin^2 i sin^2 u, taken through radians, lost 3e-9 of it
    worst_phase, worst_rho = 0.0, 0.0
    for omega in (0.0, 61.0, 200.0):
        for inclination in (89.99, 89.9999):
            body = {"period": 9.73, "eccentricity": eccentricity, "omega": omega, "t_periastron": 2450000.0,
                    "inclination": inclination, "after": 2450000.0}
            results = compute("mid-eclipse", body)["results"]
            for star in (1, 2):
                phase, rho = reference_mid_eclipse(star, eccentricity, omega, inclination)
                got = results[f"mid_eclipse_phase{star}"]["value"]
                worst_phase = max(worst_phase, float(abs((mp.mpf(got) - phase + mp.mpf(0.5)) % 1 - mp.mpf(0.5))))
                worst_rho = max(worst_rho, relative_error(results[f"minimum_separation{star}_over_a"]["value"], rho))
    assert worst_phase < 1e-13 and worst_rho < 1e-12, (worst_phase, worst_rho)
