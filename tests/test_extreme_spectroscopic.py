"""sb1 and sb2 at the edges of their domain (e -> 1, i -> 0 and 180 deg and near 90 deg, f(M) tiny and huge
beside M1, K from 1 m/s to near c, P from minutes to millennia), against 50-digit mpmath references.

The references are written from Hilditch (2001), *An Introduction to Close Binary Stars*, ch. 2:
f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G M_sun) (eq. 2.51), a1 sin i = K1 P (1 - e^2)^{1/2} / (2 pi) (eq. 2.49),
M1,2 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2,1 / (2 pi G M_sun) (eqs. 2.52-2.53), M2 the positive root of
M2^3 sin^3 i / (M1 + M2)^2 = f(M) (found here by bisection at 50 digits), and Kepler's third law
a^3 = G M_sun (M1 + M2) P^2 / (4 pi^2).  Constants: the values the service states in provenance.constants
(IAU 2015 Resolution B3 GM_sun, IAU 2012 Resolution B2 au), so that a difference is a formula difference.
The formulas, papers and equation numbers cited here are from memory.
"""

import mpmath as mp
import numpy as np
import pytest

from calcservice.core import compute, compute_batch

from .mpmath_helpers import precision, relative_error


# 50 digits and more: the derivatives below difference roots found to 1e-70
working_precision = precision(80)


CONSTANTS = compute("sb2", {"period": 1.0, "k1": 1.0, "k2": 1.0, "eccentricity": 0.0})["provenance"]["constants"]
GM = mp.mpf(CONSTANTS["GM_sun"]["value"])      # m^3 s^-2
with mp.workdps(80):
    AU_KM = mp.mpf(CONSTANTS["au"]["value"]) / 1000
DAY = mp.mpf(CONSTANTS["day"]["value"])        # s


def sine_degrees(x):
    return mp.sin(mp.mpf(x) * mp.pi / 180)


def reference_mass_function(period, k1, eccentricity):
    e = mp.mpf(eccentricity)
    return mp.mpf(period) * DAY * (mp.mpf(k1) * 1000) ** 3 * (1 - e * e) ** mp.mpf(1.5) / (2 * mp.pi * GM)


def reference_projected_axis(period, k, eccentricity):
    e = mp.mpf(eccentricity)
    return mp.mpf(k) * mp.mpf(period) * DAY * mp.sqrt(1 - e * e) / (2 * mp.pi) / AU_KM


def reference_companion_mass(f, m1, sin_i):
    """The positive root M2 of M2^3 sin^3 i - f (M1 + M2)^2 = 0: bracketed from M2 ~ (f M1^2)^{1/3} / sin i and
    M2 ~ f / sin^3 i (the small- and large-companion limits), then bisected in the logarithm to 1e-70."""
    s3 = mp.mpf(sin_i) ** 3

    def g(m2):
        return m2 ** 3 * s3 - f * (m1 + m2) ** 2

    guess = max(mp.cbrt(f * m1 * m1 / s3), f / s3)
    lo, hi = guess / 2, guess * 2
    while g(lo) > 0:
        lo /= 2
    while g(hi) < 0:
        hi *= 2
    for _ in range(1000):
        if hi / lo - 1 <= mp.mpf(10) ** -70:
            break
        mid = mp.sqrt(lo * hi)
        lo, hi = (mid, hi) if g(mid) < 0 else (lo, mid)
    return mp.sqrt(lo * hi)


def reference_semimajor_axis(period, total_mass):
    seconds = mp.mpf(period) * DAY
    return mp.cbrt(GM * total_mass * seconds ** 2 / (4 * mp.pi ** 2)) / (AU_KM * 1000)


def reference_sb1(period, k1, eccentricity, primary_mass, inclination):
    f = reference_mass_function(period, k1, eccentricity)
    m1 = mp.mpf(primary_mass)
    sin_i = sine_degrees(inclination)
    m2 = reference_companion_mass(f, m1, sin_i)
    a1_sin_i = reference_projected_axis(period, k1, eccentricity)
    return {"mass_function": f, "a1_sin_i": a1_sin_i, "m2_min": reference_companion_mass(f, m1, 1), "m2": m2,
            "mass_ratio": m2 / m1, "semimajor_axis": reference_semimajor_axis(period, m1 + m2),
            "a1": a1_sin_i / sin_i}


def reference_sb2(period, k1, k2, eccentricity, inclination):
    e = mp.mpf(eccentricity)
    k1_, k2_ = mp.mpf(k1), mp.mpf(k2)
    common = mp.mpf(period) * DAY * (1 - e * e) ** mp.mpf(1.5) * ((k1_ + k2_) * 1000) ** 2 * 1000 / (2 * mp.pi * GM)
    a1 = reference_projected_axis(period, k1, eccentricity)
    a2 = reference_projected_axis(period, k2, eccentricity)
    sin_i = sine_degrees(inclination)
    m1, m2 = common * k2_ / sin_i ** 3, common * k1_ / sin_i ** 3
    a = (a1 + a2) / sin_i
    return {"mass_ratio": k1_ / k2_, "m1_sin3i": common * k2_, "m2_sin3i": common * k1_, "a_sin_i": a1 + a2,
            "a1_sin_i": a1, "a2_sin_i": a2, "m1": m1, "m2": m2, "total_mass": m1 + m2, "semimajor_axis": a,
            "periastron_distance": a * (1 - e), "apastron_distance": a * (1 + e)}


#: the corners: e from 0 to 1 - 1e-10; i from 1e-6 deg to 180 - 1e-6 deg and within 1e-7 deg of 90; K from
#: 1 m/s to 0.97 c; P from 15 minutes to 30000 yr; M1 from a brown dwarf's 0.01 to 1000 solar masses
EDGE_SB1 = [
    # period, k1, eccentricity, primary_mass, inclination
    (41.6, 23.4, 0.99999, 1.9, 71.0),
    (41.6, 23.4, 1 - 1e-10, 1.9, 71.0),
    (3.2, 61.4, 0.0, 1.2, 1e-6),
    (3.2, 61.4, 0.1, 1.2, 179.999999),
    (3.2, 61.4, 0.1, 1.2, 89.9999999),
    (3.2, 61.4, 0.1, 1.2, 90.0000001),
    (0.01, 1e-3, 0.3, 1000.0, 30.0),           # f(M) / M1 ~ 1e-26: an Earth-like companion of a massive star
    (1.1e7, 2.9e5, 0.2, 0.01, 88.0),            # f(M) / M1 ~ 1e15: a black hole beside a brown dwarf
    (1e4, 0.3, 0.97, 60.0, 0.5),
]


def _edge_and_random_sb1():
    rng = np.random.default_rng(20261203)
    n = 40
    random = zip(10 ** rng.uniform(-2, 7, n), 10 ** rng.uniform(-3, 5.4, n), 1 - 10 ** rng.uniform(-10, 0, n),
                 10 ** rng.uniform(-2, 3, n), rng.uniform(1e-3, 180 - 1e-3, n))
    return EDGE_SB1 + [tuple(float(v) for v in row) for row in random]


def test_sb1_values_at_the_edges_and_at_random_across_the_domain():
    systems = _edge_and_random_sb1()
    columns = {name: [row[j] for row in systems]
               for j, name in enumerate(("period", "k1", "eccentricity", "primary_mass", "inclination"))}
    answer = compute_batch("sb1", {"columns": columns})["columns"]
    worst = {}
    for index, row in enumerate(systems):
        reference = reference_sb1(*row)
        for name, ref in reference.items():
            worst[name] = max(worst.get(name, 0.0), relative_error(answer[name]["value"][index], ref))
    assert max(worst.values()) < 1e-13, worst


EDGE_SB2 = [
    # period, k1, k2, eccentricity, inclination
    (41.6, 38.2, 51.7, 0.99999, 71.0),
    (41.6, 38.2, 51.7, 1 - 1e-10, 71.0),
    (41.6, 38.2, 51.7, 0.3, 179.999999),
    (41.6, 38.2, 51.7, 0.3, 1e-6),
    (41.6, 38.2, 51.7, 0.3, 89.9999999),
    (0.01, 2.9e5, 1e-3, 0.0, 45.0),
    (1.1e7, 1e-3, 2e-3, 0.5, 120.0),
]


def test_sb2_values_at_the_edges_and_at_random_across_the_domain():
    rng = np.random.default_rng(7)
    n = 40
    random = zip(10 ** rng.uniform(-2, 7, n), 10 ** rng.uniform(-3, 5.4, n), 10 ** rng.uniform(-3, 5.4, n),
                 1 - 10 ** rng.uniform(-10, 0, n), rng.uniform(1e-3, 180 - 1e-3, n))
    systems = EDGE_SB2 + [tuple(float(v) for v in row) for row in random]
    columns = {name: [row[j] for row in systems]
               for j, name in enumerate(("period", "k1", "k2", "eccentricity", "inclination"))}
    answer = compute_batch("sb2", {"columns": columns})["columns"]
    worst = {}
    for index, row in enumerate(systems):
        for name, ref in reference_sb2(*row).items():
            worst[name] = max(worst.get(name, 0.0), relative_error(answer[name]["value"][index], ref))
    assert max(worst.values()) < 1e-13, worst


def central_differences(function, point, name, relative_step=mp.mpf(10) ** -20):
    """{output: d output / d point[name]} of a function returning a dict (truncation ~1e-40, the roots' 1e-70 over
    the step ~1e-50: far below what is tested; the step small enough to stay inside e < 1 at e = 1 - 1e-12)."""
    x = mp.mpf(point[name])
    h = relative_step * max(abs(x), mp.mpf(1))
    up, down = dict(point), dict(point)
    up[name], down[name] = x + h, x - h
    above, below = function(**up), function(**down)
    return {k: (above[k] - below[k]) / (2 * h) for k in above}


@pytest.mark.parametrize("system", [
    {"period": 41.6, "k1": 23.4, "eccentricity": 1 - 1e-7, "primary_mass": 1.9, "inclination": 89.9999},
    {"period": 41.6, "k1": 23.4, "eccentricity": 1 - 1e-12, "primary_mass": 1.9, "inclination": 89.9999999},
    {"period": 3.2, "k1": 61.4, "eccentricity": 0.1, "primary_mass": 1.2, "inclination": 179.9999},
    {"period": 0.01, "k1": 1e-3, "eccentricity": 0.3, "primary_mass": 1000.0, "inclination": 1e-4},
    {"period": 1.1e7, "k1": 2.9e5, "eccentricity": 0.2, "primary_mass": 0.01, "inclination": 88.0},
])
def test_sb1_linear_sigmas_from_the_declared_jacobian_match_a_50_digit_derivative(system):
    # one input uncertain at a time: the linear sigma is |d output / d input| sigma, which the declared Jacobian
    # gives as output * (d ln output / d input); near i = 90 deg the derivative in i is ~cot i, near e = 1 ~1/(1 - e)
    worst = {}
    for name, value in system.items():
        sigma = 1e-9 * value
        body = {**system, name: {"value": value, "sigma": sigma}}
        results = compute("sb1", body)["results"]
        derivatives = central_differences(reference_sb1, system, name)
        for output in ("mass_function", "a1_sin_i", "m2_min", "m2", "mass_ratio", "semimajor_axis", "a1"):
            expected = abs(derivatives[output]) * mp.mpf(sigma)
            got = results[output]["sigma"]
            if expected == 0:
                assert got == 0, (output, name)
                continue
            worst[(output, name)] = relative_error(got, expected)
    bad = {k: v for k, v in worst.items() if v > 1e-10}
    assert not bad, bad


@pytest.mark.parametrize("system", [
    {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 1 - 1e-7, "inclination": 89.9999},
    {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 1 - 1e-12, "inclination": 179.9999999},
    {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.3, "inclination": 179.9999},
    {"period": 0.01, "k1": 2.9e5, "k2": 1e-3, "eccentricity": 0.0, "inclination": 1e-4},
])
def test_sb2_linear_sigmas_from_the_declared_jacobian_match_a_50_digit_derivative(system):
    worst = {}
    for name, value in system.items():
        sigma = 1e-9 * max(value, 1e-3)
        body = {**system, name: {"value": value, "sigma": sigma}}
        results = compute("sb2", body)["results"]
        derivatives = central_differences(reference_sb2, system, name)
        for output in reference_sb2(**system):
            expected = abs(derivatives[output]) * mp.mpf(sigma)
            got = results[output]["sigma"]
            if expected < mp.mpf(10) ** -40 * abs(reference_sb2(**system)[output]):
                continue   # an input the output does not depend on
            worst[(output, name)] = relative_error(got, expected)
    bad = {k: v for k, v in worst.items() if v > 1e-10}
    assert not bad, bad
