"""Visual orbits, Thiele–Innes <-> Campbell, photocentric orbits and orbital parallaxes at the edges of their
domains, against 50-digit mpmath references written from the published formulas.

Kepler's third law M = 4 pi^2 a^3 / (G M_sun P^2) and a [au] = a'' [mas] / parallax [mas] (Hilditch 2001, *An
Introduction to Close Binary Stars*, ch. 2; IAU 2015 Resolution B2 for the parsec); the Thiele–Innes constants
A = a (cos w cos W - sin w sin W cos i), B = a (cos w sin W + sin w cos W cos i), F = a (-sin w cos W - cos w sin W
cos i), G = a (-sin w sin W + cos w cos W cos i) and their inversion by the textbook route u = (A^2 + B^2 + F^2 +
G^2)/2, v = AG - BF, a^2 = u + (u^2 - v^2)^{1/2}, cos i = v / a^2, w + W = atan2(B - F, A + G), w - W = atan2(-B -
F, A - G) (W. D. Heintz 1978, *Double Stars*, ch. 4; from memory); the astrometric mass function
f = 4 pi^2 alpha^3 / (G M_sun P^2) = (M1 + M2)(B - beta)^3, B = M2/(M1 + M2) (P. van de Kamp 1967, *Principles of
Astrometry*); the mass function of an SB1 (Hilditch 2001, eq. 2.51).  Constants from provenance.constants.
The formulas, papers and equation numbers cited here are from memory.
"""

import mpmath as mp
import numpy as np
import pytest

from calcservice.core import compute, compute_batch
from calcservice.physics import astrometric

from .mpmath_helpers import precision, relative_error


working_precision = precision(50)


CONSTANTS = compute("visual", {"period": 1.0, "angular_semimajor_axis": 1.0, "parallax": 1.0})["provenance"][
    "constants"]
GM = mp.mpf(CONSTANTS["GM_sun"]["value"])
AU = mp.mpf(CONSTANTS["au"]["value"])
DAY = mp.mpf(86400)


def kepler_mass(a_au, period):
    return 4 * mp.pi ** 2 * (a_au * AU) ** 3 / (GM * (mp.mpf(period) * DAY) ** 2)


def degrees_error(value, reference, period=360):
    """The difference on the circle of ``period`` degrees."""
    d = (mp.mpf(float(value)) - reference + mp.mpf(period) / 2) % period - mp.mpf(period) / 2
    return float(abs(d))


def test_visual_masses_at_extreme_mass_ratios():
    # q from 1e-9 (a planet) to 1e9: M1 = M / (1 + q) and M2 = M q / (1 + q) keep their digits both ways
    q = [1e-9, 1e-4, 1.0, 1e4, 1e9, 3.7e12]
    body = {"columns": {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3, "mass_ratio": q}}
    answer = compute_batch("visual", body)["columns"]
    a = mp.mpf(412.0) / mp.mpf(48.3)
    total = kepler_mass(a, 7305.0)
    worst = 0.0
    for j, qj in enumerate(q):
        q_ = mp.mpf(qj)
        reference = {"semimajor_axis": a, "total_mass": total, "m1": total / (1 + q_), "m2": total * q_ / (1 + q_),
                     "fractional_mass": q_ / (1 + q_), "mass_ratio": q_, "a1": a * q_ / (1 + q_), "a2": a / (1 + q_)}
        worst = max(worst, *(relative_error(answer[k]["value"][j], v) for k, v in reference.items()))
    assert worst < 1e-14, worst


def reference_thiele_innes(a, inclination, omega, node):
    a = mp.mpf(a)
    i, w, n = (mp.radians(mp.mpf(x)) for x in (inclination, omega, node))
    ci = mp.cos(i)
    return {"A": a * (mp.cos(w) * mp.cos(n) - mp.sin(w) * mp.sin(n) * ci),
            "B": a * (mp.cos(w) * mp.sin(n) + mp.sin(w) * mp.cos(n) * ci),
            "F": a * (-mp.sin(w) * mp.cos(n) - mp.cos(w) * mp.sin(n) * ci),
            "G": a * (-mp.sin(w) * mp.sin(n) + mp.cos(w) * mp.cos(n) * ci)}


def reference_campbell(A, B, F, G):
    """Campbell elements by the textbook route, node folded into [0, 180) with omega turned alongside."""
    A, B, F, G = (mp.mpf(x) for x in (A, B, F, G))
    u = (A * A + B * B + F * F + G * G) / 2
    v = A * G - B * F
    a2 = u + mp.sqrt(u * u - v * v)
    inclination = mp.degrees(mp.acos(v / a2))
    total = mp.atan2(B - F, A + G)
    difference = mp.atan2(-B - F, A - G)
    omega, node = mp.degrees((total + difference) / 2), mp.degrees((total - difference) / 2)
    turns = mp.floor(node / 180)
    return {"angular_semimajor_axis": mp.sqrt(a2), "inclination": inclination,
            "omega": (omega - 180 * turns) % 360, "node": node - 180 * turns}


#: Campbell elements at the awkward places: angles on and a hair off multiples of 90 deg, i near 0, 90 and 180 deg
EDGE_ELEMENTS = [
    # a, inclination, omega, node
    (10.0, 90.0, 90.0, 0.0),
    (10.0, 89.9999999, 90.0, 0.0),
    (10.0, 90.0000001, 270.0, 90.0),
    (10.0, 45.0, 180.0, 180.0),
    (10.0, 1e-5, 30.0, 40.0),
    (10.0, 179.99999, 30.0, 40.0),
    (10.0, 60.0, 89.9999999, 0.0000001),
    (10.0, 120.0, -90.0, -180.0),
    (1e-6, 33.0, 200.0, 300.0),
    (1e6, 147.0, 359.9999999, 179.9999999),
]


def test_thiele_innes_constants_on_and_near_the_quadrant_angles():
    # cos 90 deg is 0, not 6e-17, and cos(89.9999999 deg) keeps its digits (it lost 6e-8 taken through radians)
    rows = [dict(zip(("angular_semimajor_axis", "inclination", "omega", "node"), row)) for row in EDGE_ELEMENTS]
    answer = compute_batch("thiele-innes", {"systems": rows})["results"]
    worst = 0.0
    for row, got in zip(EDGE_ELEMENTS, answer):
        reference = reference_thiele_innes(*row)
        for name, ref in reference.items():
            value = got["results"][name]["value"]
            # a constant that is 0 (to 50 digits) must come out 0 to within rounding of the others
            err = abs(value) / row[0] if abs(ref) < mp.mpf(10) ** -40 * row[0] else relative_error(value, ref)
            worst = max(worst, err)
    assert worst < 1e-13, worst


def test_campbell_elements_at_every_sign_combination_and_near_face_on():
    rng = np.random.default_rng(11)
    rows = []
    for signs in range(16):        # every sign combination of A, B, F, G, twice, magnitudes from 1e-3 to 1e3
        for _ in range(2):
            magnitudes = 10 ** rng.uniform(-3, 3, 4)
            rows.append([m * (-1 if signs >> k & 1 else 1) for k, m in enumerate(magnitudes)])
    for element in EDGE_ELEMENTS[4:6] + [(3.0, 1e-3, 10.0, 20.0), (3.0, 179.999, 10.0, 20.0)]:
        ti = reference_thiele_innes(*element)
        rows.append([float(ti[k]) for k in "ABFG"])
    systems = [dict(zip("ABFG", row)) for row in rows]
    answer = compute_batch("campbell", {"systems": systems})["results"]
    worst = {}
    for row, got in zip(rows, answer):
        ref = reference_campbell(*row)
        r = got["results"]
        worst["a"] = max(worst.get("a", 0.0), relative_error(r["angular_semimajor_axis"]["value"],
                                                             ref["angular_semimajor_axis"]))
        # the inclination from acos(v / a^2) is itself ill-conditioned near 0 and 180 deg at 50 digits: fine here
        worst["i"] = max(worst.get("i", 0.0), degrees_error(r["inclination"]["value"], ref["inclination"]))
        # omega and node on the circle, node modulo 180 deg with omega turned alongside
        node_d = degrees_error(r["node"]["value"], ref["node"], 180)
        turned = abs(mp.mpf(r["node"]["value"]) - ref["node"]) > 90
        omega_ref = (ref["omega"] + (180 if turned else 0)) % 360
        worst["node"] = max(worst.get("node", 0.0), node_d)
        worst["omega"] = max(worst.get("omega", 0.0), degrees_error(r["omega"]["value"], omega_ref))
    assert worst["a"] < 1e-14 and max(worst["i"], worst["node"], worst["omega"]) < 1e-12, worst


def reference_photocentre(alpha_mas, parallax, period, m1, beta):
    """M2 of (M1 + M2)(M2/(M1 + M2) - beta)^3 = f_ast, bisected in ln(M2 - M2_0), M2_0 = beta M1/(1 - beta) (B = beta)."""
    alpha = mp.mpf(alpha_mas) / mp.mpf(parallax)
    f = kepler_mass(alpha, period)
    m1, beta = mp.mpf(m1), mp.mpf(beta)
    base = beta * m1 / (1 - beta)

    def g(log_x):
        m2 = base + mp.exp(log_x)
        return (m1 + m2) * (m2 / (m1 + m2) - beta) ** 3 - f

    lo, hi = mp.mpf(-800), mp.mpf(800)
    for _ in range(240):
        mid = (lo + hi) / 2
        lo, hi = (mid, hi) if g(mid) < 0 else (lo, mid)
    m2 = base + mp.exp((lo + hi) / 2)
    total = m1 + m2
    a = mp.cbrt(GM * total * (mp.mpf(period) * DAY) ** 2 / (4 * mp.pi ** 2)) / AU
    return {"astrometric_mass_function": f, "m2": m2, "total_mass": total, "mass_ratio": m2 / m1,
            "fractional_mass": m2 / total, "semimajor_axis": a, "a1": a * m2 / total}


@pytest.mark.parametrize("system", [
    (2.0, 46.7, 612.0, 1.08, 0.0),
    (1e-6, 46.7, 612.0, 30.0, 0.0),            # an Earth-mass companion of a massive star
    (800.0, 10.0, 612.0, 0.1, 0.0),            # a black hole beside a red dwarf
    (2.0, 46.7, 612.0, 1.08, 0.4),
    (1e-4, 46.7, 612.0, 1.08, 0.999),          # nearly all the light from the companion
    (2.0, 46.7, 612.0, 1.08, 1e-12),
])
def test_photocentre_companion_mass_from_tiny_to_huge_astrometric_mass_functions(system):
    alpha, parallax, period, m1, beta = system
    body = {"photocentre_semimajor_axis": alpha, "parallax": parallax, "period": period, "primary_mass": m1,
            "luminosity_fraction": beta}
    results = compute("photocentre", body)["results"]
    reference = reference_photocentre(*system)
    worst = max(relative_error(results[name]["value"], ref) for name, ref in reference.items())
    assert worst < 1e-13, worst


def test_orbital_parallax_at_extreme_semi_amplitude_ratios_and_inclinations():
    # double-lined: a = (a1 + a2) sin i / sin i, parallax = a'' / a, M1,2 = M K2,1 / (K1 + K2)
    systems = [(41.6, 24.6, 31.9, 0.3, 58.0, 9.84), (41.6, 1e-3, 300.0, 0.3, 58.0, 9.84),
               (41.6, 24.6, 31.9, 0.99999, 179.9999, 9.84), (41.6, 24.6, 31.9, 0.3, 1e-4, 9.84),
               (41.6, 2e5, 0.01, 0.0, 90.0000001, 9.84)]
    names = ("period", "k1", "k2", "eccentricity", "inclination", "angular_semimajor_axis")
    answer = compute_batch("orbital-parallax", {"systems": [dict(zip(names, s)) for s in systems]})["results"]
    worst = 0.0
    for s, got in zip(systems, answer):
        period, k1, k2, e, inc, axis = (mp.mpf(x) for x in s)
        sin_i = mp.sin(mp.radians(inc))
        a = (k1 + k2) * period * DAY * mp.sqrt(1 - e * e) / (2 * mp.pi) / (AU / 1000) / sin_i
        total = kepler_mass(a, period)
        reference = {"semimajor_axis": a, "parallax": axis / a, "distance": 1000 * a / axis, "total_mass": total,
                     "m1": total * k2 / (k1 + k2), "m2": total * k1 / (k1 + k2)}
        worst = max(worst, *(relative_error(got["results"][k]["value"], v) for k, v in reference.items()))
    assert worst < 1e-13, worst


def test_orbital_parallax_single_lined_with_a_photocentre_at_the_edges():
    # SB1 + photocentre: a1 = a1 sin i / sin i; with M1, M2 from the mass function at i (Hilditch 2001, eq. 2.51),
    # B = M2/(M1 + M2) and alpha = a1 (1 - beta / B) (van de Kamp 1967); parallax = alpha'' / alpha
    systems = [(41.6, 24.6, 0.99999, 179.9999, 2.12, 1.31, 0.0), (41.6, 24.6, 0.3, 1e-4, 2.12, 1.31, 0.2),
               (41.6, 1e-3, 0.3, 58.0, 2.12, 100.0, 0.0), (41.6, 300.0, 0.3, 89.9999999, 2.12, 0.05, 0.5)]
    names = ("period", "k1", "eccentricity", "inclination", "photocentre_semimajor_axis", "primary_mass",
             "luminosity_fraction")
    answer = compute_batch("orbital-parallax", {"systems": [dict(zip(names, s)) for s in systems]})["results"]
    worst = 0.0
    for s, got in zip(systems, answer):
        period, k1, e, inc, alpha, m1, beta = (mp.mpf(x) for x in s)
        sin_i = mp.sin(mp.radians(inc))
        a1 = k1 * period * DAY * mp.sqrt(1 - e * e) / (2 * mp.pi) / (AU / 1000) / sin_i
        f = period * DAY * (k1 * 1000) ** 3 * (1 - e * e) ** mp.mpf(1.5) / (2 * mp.pi * GM)
        lo, hi = mp.mpf(-700), mp.mpf(700)       # M2^3 sin^3 i = f (M1 + M2)^2, bisected in ln M2
        for _ in range(200):
            mid = (lo + hi) / 2
            m2 = mp.exp(mid)
            lo, hi = (mid, hi) if m2 ** 3 * sin_i ** 3 < f * (m1 + m2) ** 2 else (lo, mid)
        m2 = mp.exp((lo + hi) / 2)
        b = m2 / (m1 + m2)
        alpha_au = a1 * (1 - beta / b)
        reference = {"m2": m2, "parallax": alpha / alpha_au, "semimajor_axis": a1 / b, "a1": a1}
        worst = max(worst, *(relative_error(got["results"][k]["value"], v) for k, v in reference.items()))
    assert worst < 1e-13, worst


def test_campbell_omega_a_hair_below_zero_wraps_into_the_half_open_circle():
    # omega is given in [0, 360) deg (the declared convention) by the physics function itself, for library callers:
    # -1e-14 deg is 0 to within rounding, never 360.0, which np.mod returns for it (360 - 1e-14 rounds to 360)
    ti = reference_thiele_innes(10.0, 30.0, mp.mpf("-1e-14"), 20.0)
    out = astrometric.campbell(*(np.array([float(ti[k])]) for k in "ABFG"))
    for name in ("omega", "omega_primary"):
        assert 0.0 <= out[name][0] < 360.0, (name, out[name])
    assert degrees_error(out["omega"][0], mp.mpf("-1e-14")) < 1e-12


def test_thiele_innes_from_a_tiny_primary_omega():
    # omega of the relative orbit = omega_primary + 180 deg (the spectroscopic convention): with omega_primary
    # = 1e-20 deg and node 0, B = a sin(omega) cos i is -a sin(1e-20 deg) cos i, not 0 (180 + 1e-20 rounds to 180)
    body = {"angular_semimajor_axis": 10.0, "inclination": 30.0, "omega_primary": 1e-20, "node": 0.0}
    results = compute("thiele-innes", body)["results"]
    reference = reference_thiele_innes(10.0, 30.0, mp.mpf(1e-20) + 180, 0.0)
    worst = max(relative_error(results[k]["value"], reference[k]) for k in "ABFG")
    assert worst < 1e-14, worst
