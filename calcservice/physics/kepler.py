"""Kepler's equation and the anomalies of a Keplerian orbit.

All angles are in radians here (the declarations convert from degrees).  Every function
is elementwise numpy: it broadcasts over arrays of any shape and lets NaN pass through.

Kepler's equation M = E - e sin E (Kepler 1609; e.g. Murray & Dermott 1999, *Solar
System Dynamics*, eq. 2.52) is solved with the cubic starting value of Mikkola (1987,
Celestial Mechanics 40, 329), which is within about 1e-3 rad of the root for every M and
every 0 <= e < 1, including the hard corner near periastron at e -> 1, followed by a
fixed number of safeguarded Halley steps kept inside the bracket that contains the root.
Near periastron at e -> 1 the residual E - e sin E is a small difference of two numbers
close to E, so it is evaluated as (1 - e) E + e (E - sin E), with E - sin E by its Taylor
series below 1 rad: the root is then as exact as the double M (e.g. J. M. A. Danby 1988,
*Fundamentals of Celestial Mechanics*, ch. 6, on the accuracy of the residual near e = 1).
"""

from __future__ import annotations

import math

import numpy as np

_PI = np.pi
_TWO_PI = 2.0 * np.pi
#: 2 pi in three parts (Cody & Waite 1980, *Software Manual for the Elementary Functions*, ch. 8):
#: the first two hold few enough bits that k times them is exact for |k| < 2^23 revolutions, the
#: last is the rounding error of the double 2 pi, which sin(2 pi) gives: sin(2 pi - d) = -d + O(d^3)
_TWO_PI_HIGH = math.floor(_TWO_PI * 2.0**27) / 2.0**27
_TWO_PI_MIDDLE = _TWO_PI - _TWO_PI_HIGH
_TWO_PI_LOW = -math.sin(_TWO_PI)
#: Halley steps after Mikkola's start; the start is within ~1e-3 rad, and Halley triples
#: the number of correct digits per step, so three suffice; the rest are a safety margin.
_HALLEY_STEPS = 6
#: below this |E| (rad) E - sin E is taken from its Taylor series: above it E - sin E > 0.158 E
#: and the plain difference keeps all but a few bits
_SERIES_LIMIT = 1.0


def reduce_mean_anomaly(mean_anomaly):
    """Split M into M0 in [-pi, pi] and a whole number of revolutions k, M = M0 + 2 pi k.

    M0 is reduced with the three-part 2 pi (Cody & Waite 1980), so M just below 2 pi k keeps its
    small distance to periastron instead of the rounding error of the double 2 pi (2.4e-16 rad).
    """
    m = np.asarray(mean_anomaly, dtype=float)
    k = np.round(m / _TWO_PI)
    return ((m - k * _TWO_PI_HIGH) - k * _TWO_PI_MIDDLE) - k * _TWO_PI_LOW, k


def angle_minus_sine(angle):
    """E - sin E without cancellation at small E: the Taylor series E^3/3! - E^5/5! + ... below 1 rad.

    Nine terms in nested (Horner) form; the first term left out is below 1.2e-19 of the sum at 1 rad.
    """
    x = np.asarray(angle, dtype=float)
    x2 = x * x
    series = 1.0
    for k in range(9, 0, -1):           # terms E^(2k+3)/(2k+3)!: ratios x^2 / ((2k+2)(2k+3))
        series = 1.0 - x2 / ((2 * k + 2) * (2 * k + 3)) * series
    series = x * x2 / 6.0 * series
    return np.where(np.abs(x) < _SERIES_LIMIT, series, x - np.sin(x))


def _kepler_residual(big_e, e):
    """E - e sin E as (1 - e) E + e (E - sin E), exact to rounding where both terms are small (e -> 1, E -> 0)."""
    return (1.0 - e) * big_e + e * angle_minus_sine(big_e)


def _one_minus_e_cos(big_e, e):
    """1 - e cos E as (1 - e) + 2 e sin^2(E/2), without the cancellation of 1 - e cos E near periastron at e -> 1."""
    half = np.sin(0.5 * big_e)
    return (1.0 - e) + 2.0 * e * half * half


def _mikkola_start(m, e):
    """Mikkola (1987) cubic approximation to E for 0 <= M <= pi (radians).

    With alpha = (1 - e)/(4 e + 1/2) and beta = M / (2 (4 e + 1/2)),
    z = (beta + sqrt(beta^2 + alpha^3))^{1/3}, s = z - alpha / z, corrected by
    ds = -0.078 s^5 / (1 + e); then E = M + e (3 s - 4 s^3).
    """
    denom = 4.0 * e + 0.5
    alpha = (1.0 - e) / denom
    beta = 0.5 * m / denom
    z = np.cbrt(beta + np.sqrt(beta * beta + alpha**3))
    with np.errstate(invalid="ignore", divide="ignore"):
        s = np.where(z > 0.0, z - alpha / z, 0.0)
    s = s - 0.078 * s**5 / (1.0 + e)
    return m + e * (3.0 * s - 4.0 * s**3)


def eccentric_anomaly(mean_anomaly, eccentricity):
    """Eccentric anomaly E (rad) solving Kepler's equation M = E - e sin E.

    Works for any real M (the number of revolutions is kept: E(M + 2 pi k) = E(M) + 2 pi k)
    and 0 <= e < 1 (tested against 50-digit roots up to e = 1 - 1e-12).  By symmetry
    E(-M) = -E(M), so we solve for 0 <= M <= pi, where the root lies in
    [M, min(M + e, pi, M / (1 - e))] (E - e sin E >= (1 - e) E gives the last bound, the
    tight one for tiny M); each Halley step is clipped into that bracket so no iterate can
    run away where f'(E) = 1 - e cos E ~ 0.  The residual and f' are evaluated in their
    cancellation-free forms (:func:`angle_minus_sine`).
    """
    e = np.asarray(eccentricity, dtype=float)
    m0, k = reduce_mean_anomaly(mean_anomaly)
    sign = np.where(m0 < 0.0, -1.0, 1.0)
    m = np.abs(m0)
    lo = m
    with np.errstate(invalid="ignore", divide="ignore"):
        hi = np.minimum(np.minimum(m + e, _PI), np.where(e < 1.0, m / (1.0 - e), np.inf))
    big_e = np.clip(_mikkola_start(m, e), lo, hi)
    for step_number in range(_HALLEY_STEPS):
        sin_e = np.sin(big_e)
        if step_number < _HALLEY_STEPS - 1:
            # the plain residual brings E within ~1e-11 of the root at e -> 1 (its rounding error, e sin E, is
            # that much bigger than M near periastron), at a third of the cost
            f = big_e - e * sin_e - m
            d1 = 1.0 - e * np.cos(big_e)
        else:
            f = _kepler_residual(big_e, e) - m
            d1 = _one_minus_e_cos(big_e, e)
        with np.errstate(invalid="ignore", divide="ignore"):
            step = f / (d1 - 0.5 * f * e * sin_e / d1)
            step = np.where(np.isfinite(step), step, 0.0)
        big_e = np.clip(big_e - step, lo, hi)
    # a final Newton step on the exact residual polishes the last bit (Halley's correction term is then ~0)
    with np.errstate(invalid="ignore", divide="ignore"):
        step = (_kepler_residual(big_e, e) - m) / _one_minus_e_cos(big_e, e)
        step = np.where(np.isfinite(step), step, 0.0)
    big_e = np.clip(big_e - step, lo, hi)
    return sign * big_e + _TWO_PI * k


def _keep_revolutions(half_angle_result, reference):
    """The angle equal to ``half_angle_result`` (in [-pi, pi]) modulo 2 pi that lies within pi of ``reference``."""
    return half_angle_result + _TWO_PI * np.round((reference - half_angle_result) / _TWO_PI)


def true_from_eccentric(eccentric, eccentricity):
    """True anomaly nu (rad) from the eccentric anomaly E.

    tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2) (Murray & Dermott 1999, eq. 2.46), taken as
    nu = 2 atan2(sqrt(1 + e) sin(E/2), sqrt(1 - e) cos(E/2)), which has no cancellation at
    e -> 1 (1 - e is exact there), with the revolution count of E: nu lies within pi of E
    (both are in the same half of the orbit), so nu is continuous in E.
    """
    big_e = np.asarray(eccentric, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    half = 0.5 * big_e
    nu = 2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(half), np.sqrt(1.0 - e) * np.cos(half))
    return _keep_revolutions(nu, big_e)


def true_anomaly_cosine_sine(eccentric, eccentricity):
    """cos nu and sin nu (and r/a) straight from E, never through nu in radians, whose rounding near
    apastron (nu ~ pi) is large beside sin nu at e -> 1.

    cos nu = (cos E - e) / (1 - e cos E), sin nu = (1 - e^2)^{1/2} sin E / (1 - e cos E) (Murray & Dermott
    1999, eq. 2.41-2.42), with cos E - e = (1 - e) - 2 sin^2(E/2) and 1 - e cos E = (1 - e) + 2 e sin^2(E/2).
    Returns (cos nu, sin nu, r/a).
    """
    big_e = np.asarray(eccentric, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    half = np.sin(0.5 * big_e)
    square = 2.0 * half * half
    r = (1.0 - e) + e * square
    return ((1.0 - e) - square) / r, np.sqrt((1.0 - e) * (1.0 + e)) * np.sin(big_e) / r, r


def true_anomaly_half_cosine_sine(eccentric, eccentricity):
    """cos(nu/2) and sin(nu/2) straight from E: tan(nu/2) = ((1 + e)/(1 - e))^{1/2} tan(E/2) (Murray & Dermott 1999,
    eq. 2.46), so (cos(nu/2), sin(nu/2)) is the unit vector along ((1 - e)^{1/2} cos(E/2), (1 + e)^{1/2} sin(E/2)),
    the half-angle of :func:`true_from_eccentric` without nu in radians (up to a turn of nu, which changes only
    their signs together)."""
    half = 0.5 * np.asarray(eccentric, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    x, y = np.sqrt(1.0 - e) * np.cos(half), np.sqrt(1.0 + e) * np.sin(half)
    norm = np.hypot(x, y)
    return x / norm, y / norm


def eccentric_from_true(true_anomaly, eccentricity):
    """Eccentric anomaly E (rad) from the true anomaly nu: E = 2 atan2(sqrt(1 - e) sin(nu/2), sqrt(1 + e) cos(nu/2)),
    with the revolution count of nu (the inverse of :func:`true_from_eccentric`)."""
    nu = np.asarray(true_anomaly, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    half = 0.5 * nu
    big_e = 2.0 * np.arctan2(np.sqrt(1.0 - e) * np.sin(half), np.sqrt(1.0 + e) * np.cos(half))
    return _keep_revolutions(big_e, nu)


def mean_from_eccentric(eccentric, eccentricity):
    """Mean anomaly M = E - e sin E (rad), Kepler's equation, keeping its digits near periastron at e -> 1.

    E is reduced to E0 in [-pi, pi] (E = E0 + 2 pi k, M = M(E0) + 2 pi k) and M(E0) evaluated as
    (1 - e) E0 + e (E0 - sin E0) (:func:`angle_minus_sine`).
    """
    e = np.asarray(eccentricity, dtype=float)
    e0, k = reduce_mean_anomaly(eccentric)
    return _kepler_residual(e0, e) + _TWO_PI * k


def mean_from_true(true_anomaly, eccentricity):
    """Mean anomaly M (rad) from the true anomaly nu, via E (keeps the revolution count)."""
    return mean_from_eccentric(eccentric_from_true(true_anomaly, eccentricity), eccentricity)


def true_anomaly(mean_anomaly, eccentricity):
    """True anomaly nu (rad) at mean anomaly M: solve Kepler's equation, then convert E to nu."""
    return true_from_eccentric(eccentric_anomaly(mean_anomaly, eccentricity), eccentricity)


def separation(true_anomaly, eccentricity):
    """Separation in units of the semi-major axis, r/a = (1 - e^2)/(1 + e cos nu) (equation of the ellipse).

    Written (1 - e)(1 + e) / ((1 - e) + 2 e cos^2(nu/2)), which keeps its digits at e -> 1 both at
    periastron (1 - e^2) and at apastron (1 + e cos nu).
    """
    return separation_from_half_angle_cosine(np.cos(0.5 * np.asarray(true_anomaly, dtype=float)), eccentricity)


def separation_from_half_angle_cosine(cosine, eccentricity):
    """r/a = (1 - e)(1 + e) / ((1 - e) + 2 e c^2) from c = cos(nu/2) (:func:`separation`), for a caller that has
    c more exactly than from nu in radians (a true anomaly given in degrees)."""
    e = np.asarray(eccentricity, dtype=float)
    return (1.0 - e) * (1.0 + e) / ((1.0 - e) + 2.0 * e * cosine * cosine)


def separation_from_eccentric(eccentric, eccentricity):
    """Separation in units of a from E: r/a = 1 - e cos E, written (1 - e) + 2 e sin^2(E/2) (exact near periastron)."""
    return _one_minus_e_cos(np.asarray(eccentric, dtype=float), np.asarray(eccentricity, dtype=float))


def mean_anomaly(time, period, t_periastron):
    """Mean anomaly M = 2 pi (t - T0)/P (rad), growing by 2 pi per revolution from periastron T0."""
    return _TWO_PI * (np.asarray(time, dtype=float) - t_periastron) / period


def mean_anomaly_difference(true_anomaly, step, eccentricity):
    """M(nu + d) - M(nu) (rad) for a small step d in true anomaly, without the cancellation of two mean anomalies.

    With E = 2 atan(((1 - e)/(1 + e))^{1/2} tan(nu/2)) (Murray & Dermott 1999, eq. 2.46), the difference of two
    arctangents gives, with nu' = nu + d,
    tan(dE/2) = (1 - e^2)^{1/2} sin(d/2) / ((1 + e) cos(nu/2) cos(nu'/2) + (1 - e) sin(nu/2) sin(nu'/2)), and
    Kepler's equation dM = dE - e (sin E' - sin E) = dE - 2 e cos(E + dE/2) sin(dE/2), taken as
    2 (x - sin x) + 2 sin x ((1 - e) + 2 e sin^2(E/2 + x/2)), x = dE/2 (:func:`angle_minus_sine`): every term
    positive for a positive step, so the difference keeps the relative precision of d, also near periastron at
    e -> 1, where 1 - e cos E is small (M(nu') - M(nu) loses 1e-16 rad whatever d is).  For |dE| < pi.
    """
    nu = np.asarray(true_anomaly, dtype=float)
    d = np.asarray(step, dtype=float)
    e = np.asarray(eccentricity, dtype=float)
    half, half_next = 0.5 * nu, 0.5 * (nu + d)
    x = np.arctan2(np.sqrt((1.0 - e) * (1.0 + e)) * np.sin(0.5 * d),
                   (1.0 + e) * np.cos(half) * np.cos(half_next) + (1.0 - e) * np.sin(half) * np.sin(half_next))
    middle = np.sin(0.5 * eccentric_from_true(nu, e) + 0.5 * x)      # sin of the half of E + dE/2
    return 2.0 * angle_minus_sine(x) + 2.0 * np.sin(x) * ((1.0 - e) + 2.0 * e * middle * middle)
