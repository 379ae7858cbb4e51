"""Spectroscopic binaries: mass functions, projected orbits and masses.

Canonical units: period P in days, semi-amplitudes K in km/s, inclination i in degrees,
masses in solar masses, lengths in au.  Formulas follow R. W. Hilditch (2001), *An
Introduction to Close Binary Stars*, Cambridge University Press, ch. 2, with the
coefficients built from the IAU 2015 nominal solar mass parameter GM_sun rather than
the rounded textbook numbers (1.0361e-7 and 1.3751e4).
"""

from __future__ import annotations

import numpy as np

from ..constants import AU, AU_KM, GM_SUN, SECONDS_PER_DAY, TWO_PI
from .angles import cos_degrees, sin_degrees

#: f(M) = MASS_FUNCTION_COEFFICIENT * (1 - e^2)^{3/2} K^3 P  [solMass, K in km/s, P in d]
MASS_FUNCTION_COEFFICIENT = SECONDS_PER_DAY * 1e9 / (TWO_PI * GM_SUN)
#: a sin i = PROJECTED_AXIS_COEFFICIENT_KM * (1 - e^2)^{1/2} K P  [km]
PROJECTED_AXIS_COEFFICIENT_KM = SECONDS_PER_DAY / TWO_PI
#: a = KEPLER_AXIS_COEFFICIENT * M^{1/3} (P / 1 d)^{2/3} [au]: (GM_sun (1 d)^2 / (4 pi^2))^{1/3} / au
KEPLER_AXIS_COEFFICIENT = float(np.cbrt(GM_SUN * SECONDS_PER_DAY**2 / TWO_PI**2) / AU)


def one_minus_e_squared(eccentricity):
    """1 - e^2 as (1 - e)(1 + e): 1 - e is exact for e >= 1/2, so no digit is lost as e -> 1
    (1 - e*e rounds e^2 first: 5e-12 relative error at e = 0.99999)."""
    e = np.asarray(eccentricity, dtype=float)
    return (1.0 - e) * (1.0 + e)


def mass_function(period, k1, eccentricity):
    """Spectroscopic mass function f(M) = M2^3 sin^3 i / (M1 + M2)^2 (solMass).

    f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G)   (Hilditch 2001, eq. 2.51), the period first so that
    no partial product leaves the range of a double before the result does.
    """
    s = one_minus_e_squared(eccentricity)
    return MASS_FUNCTION_COEFFICIENT * period * s * np.sqrt(s) * k1 * k1 * k1


def projected_semimajor_axis(period, k, eccentricity):
    """a sin i of one star's orbit about the centre of mass (au).

    a1 sin i = K1 P (1 - e^2)^{1/2} / (2 pi)   (Hilditch 2001, eq. 2.49).
    """
    return PROJECTED_AXIS_COEFFICIENT_KM * np.sqrt(one_minus_e_squared(eccentricity)) * k * period / AU_KM


def minimum_masses(period, k1, k2, eccentricity):
    """M1 sin^3 i and M2 sin^3 i (solMass) of a double-lined binary.

    M1,2 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2,1 / (2 pi G)   (Hilditch 2001, eq. 2.52-2.53).
    """
    s = one_minus_e_squared(eccentricity)
    common = MASS_FUNCTION_COEFFICIENT * period * s * np.sqrt(s) * (k1 + k2) * (k1 + k2)
    return common * k2, common * k1


def companion_mass(mass_function_value, primary_mass, sin_i=1.0, iterations=60):
    """The companion mass M2 (solMass) solving M2^3 sin^3 i / (M1 + M2)^2 = f(M).

    The cubic has exactly one positive root (one sign change, Descartes).  We solve
    F(y) = ln sin i + y - (2/3) ln(M1 + e^y) - (1/3) ln f = 0 for y = ln M2 by Newton's
    method: F is increasing (F' = 1 - (2/3) M2/(M1+M2) >= 1/3) and concave, so after the
    first step the iterates approach the root monotonically from below: convergence is
    guaranteed for every f > 0, M1 > 0, 0 < sin i <= 1, vectorised over all systems.  A system
    stops at its own convergence, so its M2 does not depend on the other systems of the call.
    A last Newton step in ln M2 on the residual written without logarithms, h = M2^3 sin^3 i / (f (M1 + M2)^2) - 1,
    takes off the rounding that exp(y) multiplies by |y| (up to 5e-15 relative where M2 is far from 1 solMass).
    """
    f = np.asarray(mass_function_value, dtype=float)
    m1 = np.asarray(primary_mass, dtype=float)
    s = np.asarray(sin_i, dtype=float)
    target = np.log(f) / 3.0 - np.log(s)
    # start at the larger of the small-companion (M2 << M1) and large-companion limits
    y = np.maximum(target + (2.0 / 3.0) * np.log(m1), 3.0 * target)
    done = np.zeros(y.shape, dtype=bool)
    for _ in range(iterations):
        m2 = np.exp(y)
        g = y - (2.0 / 3.0) * np.log(m1 + m2) - target
        dg = 1.0 - (2.0 / 3.0) * m2 / (m1 + m2)
        step = g / dg
        y = np.where(done, y, y - step)
        done |= ~np.isfinite(step) | (np.abs(step) < 1e-15)
        if done.all():
            break
    m2 = np.exp(y)
    total = m1 + m2
    projected = m2 * s
    share = projected / total
    residual = share * share * (projected / f) - 1.0         # M2^3 sin^3 i / (f (M1 + M2)^2) - 1, no power or log
    polished = m2 * (1.0 - residual / (3.0 - 2.0 * m2 / total))
    return np.where(np.isfinite(polished), polished, m2)


def kepler_semimajor_axis(period, total_mass):
    """Relative semi-major axis a (au) from Kepler's third law, a^3 = GM_sun M P^2 / (4 pi^2).

    Taken as a = (GM_sun (1 d)^2 / 4 pi^2)^{1/3} M^{1/3} (P/d)^{2/3}: M P^2 itself would leave the range of
    a double for P beyond 1e150 d or below 1e-150 d.
    """
    root = np.cbrt(period)
    return KEPLER_AXIS_COEFFICIENT * np.cbrt(total_mass) * root * root


def kepler_total_mass(semimajor_axis, period):
    """Total mass (solMass) from Kepler's third law, M = 4 pi^2 a^3 / (GM_sun P^2).

    a in au, P in days (Hilditch 2001, *An Introduction to Close Binary Stars*, ch. 2,
    with the IAU 2015 nominal GM_sun).
    """
    x = semimajor_axis / (KEPLER_AXIS_COEFFICIENT * np.cbrt(period) ** 2)    # (M / solMass)^{1/3}, never out of range
    return x * x * x


def sb1(period, k1, eccentricity, primary_mass=None, inclination=None, **_):
    """Single-lined binary: f(M), a1 sin i; with M1: M2,min; with M1 and i: M2 and a."""
    out = {
        "mass_function": mass_function(period, k1, eccentricity),
        "a1_sin_i": projected_semimajor_axis(period, k1, eccentricity),
    }
    if primary_mass is not None:
        f = out["mass_function"]
        out["m2_min"] = companion_mass(f, primary_mass, 1.0)
        if inclination is not None:
            sin_i = sin_degrees(inclination)
            m2 = companion_mass(f, primary_mass, sin_i)
            out["m2"] = m2
            out["mass_ratio"] = m2 / primary_mass
            out["semimajor_axis"] = kepler_semimajor_axis(period, primary_mass + m2)
            out["a1"] = out["a1_sin_i"] / sin_i
    return out


def sb2(period, k1, k2, eccentricity, inclination=None, **_):
    """Double-lined binary: q, M1,2 sin^3 i, a sin i; with i: M1, M2, a, periastron, apastron.

    The formulas of :func:`projected_semimajor_axis` and :func:`minimum_masses`, sharing
    (1 - e^2)^{1/2} and (1 - e^2)^{3/2} = (1 - e^2)(1 - e^2)^{1/2} (catalogues: no pow per element).
    """
    one_minus_e2 = one_minus_e_squared(eccentricity)
    root = np.sqrt(one_minus_e2)
    axis_per_k = (PROJECTED_AXIS_COEFFICIENT_KM / AU_KM) * root * period
    a1 = axis_per_k * k1
    a2 = axis_per_k * k2
    ksum = k1 + k2
    common = MASS_FUNCTION_COEFFICIENT * period * one_minus_e2 * root * ksum * ksum
    m1s, m2s = common * k2, common * k1
    out = {
        "mass_ratio": k1 / k2,
        "m1_sin3i": m1s,
        "m2_sin3i": m2s,
        "a_sin_i": a1 + a2,
        "a1_sin_i": a1,
        "a2_sin_i": a2,
    }
    if inclination is not None:
        sin_i = sin_degrees(inclination)
        sin3 = sin_i * sin_i * sin_i
        a = (a1 + a2) / sin_i
        out.update({
            "m1": m1s / sin3,
            "m2": m2s / sin3,
            "total_mass": (m1s + m2s) / sin3,
            "semimajor_axis": a,
            "periastron_distance": a * (1.0 - eccentricity),
            "apastron_distance": a * (1.0 + eccentricity),
        })
    return out


def sb2_jacobian(outputs, period, k1, k2, eccentricity, inclination=None, **_):
    """The logarithmic derivatives of :func:`sb2`'s ``outputs`` with respect to its inputs,
    {output: {input: d ln f / dx}} (canonical units; per degree for the inclination).

    The outputs are products of powers (Hilditch 2001, eq. 2.49-2.53), so with s = 1 - e^2 and
    Sigma = K1 + K2, ordinary calculus gives

        d ln P / dP = 1/P            d ln (1 - e^2)^{n/2} / de = -n e / s
        d ln q / dK1 = 1/K1          d ln q / dK2 = -1/K2
        d ln (M1 sin^3 i) / dK1 = 2/Sigma,  / dK2 = 2/Sigma + 1/K2    (M2 sin^3 i: K1 and K2 swapped)
        d ln (a sin i) / dK1,2 = 1/Sigma    d ln (a1,2 sin i) / dK1,2 = 1/K1,2
        d ln (M1 + M2) / dK1,2 = 3/Sigma
        d ln (1 / sin^n i) / di = -n cot i (pi / 180)  per degree
        d ln (a (1 - e)) / de = -e/s - 1/(1 - e)      d ln (a (1 + e)) / de = -e/s + 1/(1 + e)

    an input absent from an output's mapping being one it does not depend on."""
    half = -eccentricity / one_minus_e_squared(eccentricity)   # d ln (1 - e^2)^{1/2} / de
    per_p, per_k1, per_k2 = 1.0 / period, 1.0 / k1, 1.0 / k2
    per_sum = 1.0 / (k1 + k2)
    three_halves = 3.0 * half                                # d ln (1 - e^2)^{3/2} / de
    sum_squared = 2.0 * per_sum                              # d ln (K1 + K2)^2 / dK1,2
    m1s = {"period": per_p, "k1": sum_squared, "k2": sum_squared + per_k2, "eccentricity": three_halves}
    m2s = {"period": per_p, "k1": sum_squared + per_k1, "k2": sum_squared, "eccentricity": three_halves}
    asi = {"period": per_p, "k1": per_sum, "k2": per_sum, "eccentricity": half}
    logarithmic = {
        "mass_ratio": {"k1": per_k1, "k2": -per_k2},
        "m1_sin3i": m1s,
        "m2_sin3i": m2s,
        "a_sin_i": asi,
        "a1_sin_i": {"period": per_p, "k1": per_k1, "eccentricity": half},
        "a2_sin_i": {"period": per_p, "k2": per_k2, "eccentricity": half},
    }
    if inclination is not None:
        cot = np.radians(1.0) * cos_degrees(inclination) / sin_degrees(inclination)   # d ln sin i / di, per deg
        per_sin3 = -3.0 * cot                                        # d ln (1 / sin^3 i) / di
        sum_cubed = 3.0 * per_sum                                   # d ln (K1 + K2)^3 / dK1,2
        a = {**asi, "inclination": -cot}
        logarithmic.update({
            "m1": {**m1s, "inclination": per_sin3},
            "m2": {**m2s, "inclination": per_sin3},
            "total_mass": {"period": per_p, "k1": sum_cubed, "k2": sum_cubed, "eccentricity": three_halves,
                           "inclination": per_sin3},
            "semimajor_axis": a,
            "periastron_distance": {**a, "eccentricity": half - 1.0 / (1.0 - eccentricity)},
            "apastron_distance": {**a, "eccentricity": half + 1.0 / (1.0 + eccentricity)},
        })
    return logarithmic


def sb1_jacobian(outputs, period, k1, eccentricity, primary_mass=None, inclination=None, **_):
    """The logarithmic derivatives of :func:`sb1`'s ``outputs`` with respect to its inputs,
    {output: {input: d ln f / dx}} (canonical units; per degree for the inclination).

    f(M) and a1 sin i are products of powers (Hilditch 2001, eq. 2.49, 2.51): with s = 1 - e^2,
    d ln f / dP = 1/P, d ln f / dK1 = 3/K1, d ln f / de = -3 e/s; d ln (a1 sin i) / dP = 1/P,
    / dK1 = 1/K1, / de = -e/s.

    M2 is defined implicitly by M2^3 sin^3 i / (M1 + M2)^2 = f(M) (:func:`companion_mass`), i.e. by
    g = ln f - 3 ln M2 - 3 ln sin i + 2 ln(M1 + M2) = 0.  By the implicit function theorem
    dM2/dx = -(dg/dx) / (dg/dM2), with dg/dM2 = -3/M2 + 2/(M1 + M2); with mu = M2 / (M1 + M2),

        d ln M2 / dx = (dg/dx) / (3 - 2 mu),   dg/dx = d ln f / dx  for x = P, K1, e,
                                               dg/dM1 = 2 / (M1 + M2),
                                               dg/di = -3 cot i (pi / 180)  per degree

    (3 - 2 mu lies in (1, 3]: no singularity; for M2 << M1, d ln M2 / d ln M1 -> 2/3, and for
    M2 >> M1, d ln M2 / d ln f -> 1, the two limits of the cubic).  m2_min is the case sin i = 1.
    The derived outputs follow by the chain rule: q = M2/M1 adds -1/M1 to d ln M2 / dM1;
    a = (G (M1 + M2) P^2 / 4 pi^2)^{1/3} (Kepler's third law) has
    d ln a / dx = (1/3)(M2 d ln M2/dx + [x = M1]) / (M1 + M2) + (2/3)[x = P] / P;
    a1 = a1 sin i / sin i adds -cot i (pi / 180) per degree."""
    half = -eccentricity / one_minus_e_squared(eccentricity)   # d ln (1 - e^2)^{1/2} / de
    per_p = 1.0 / period
    ln_f = {"period": per_p, "k1": 3.0 / k1, "eccentricity": 3.0 * half}
    logarithmic = {
        "mass_function": ln_f,
        "a1_sin_i": {"period": per_p, "k1": 1.0 / k1, "eccentricity": half},
    }
    if primary_mass is not None:
        def companion(m2, cot=None):
            """d ln M2 / dx by the implicit function theorem (``cot``: d ln sin i / di, None for sin i = 1)."""
            total = primary_mass + m2
            slope = 1.0 / (3.0 - 2.0 * m2 / total)          # 1 / (-M2 dg/dM2)
            out = {x: d * slope for x, d in ln_f.items()}
            out["primary_mass"] = 2.0 / total * slope
            if cot is not None:
                out["inclination"] = -3.0 * cot * slope
            return out

        logarithmic["m2_min"] = companion(outputs["m2_min"])
        if inclination is not None:
            cot = np.radians(1.0) * cos_degrees(inclination) / sin_degrees(inclination)   # d ln sin i / di, per deg
            m2 = outputs["m2"]
            total = primary_mass + m2
            ln_m2 = companion(m2, cot)
            ln_a = {x: m2 * d / (3.0 * total) for x, d in ln_m2.items()}
            ln_a["primary_mass"] = ln_a["primary_mass"] + 1.0 / (3.0 * total)
            ln_a["period"] = ln_a["period"] + 2.0 / 3.0 * per_p
            logarithmic.update({
                "m2": ln_m2,
                "mass_ratio": {**ln_m2, "primary_mass": ln_m2["primary_mass"] - 1.0 / primary_mass},
                "semimajor_axis": ln_a,
                "a1": {**logarithmic["a1_sin_i"], "inclination": -cot},
            })
    return logarithmic
