"""Kepler's equation and the anomalies of a Keplerian orbit.

All angles are in radians here (the declarations convert from degrees).  Every function
is elementwise numpy: it broadcasts over arrays of any shape and lets NaN pass through.

Kepler's equation M = E - e sin E (Kepler 1609; e.g. Murray & Dermott 1999, *Solar
System Dynamics*, eq. 2.52) is solved with the cubic starting value of Mikkola (1987,
Celestial Mechanics 40, 329), which is within about 1e-3 rad of the root for every M and
every 0 <= e < 1, including the hard corner near periastron at e -> 1, followed by a
fixed number of safeguarded Halley steps kept inside the bracket that contains the root.
"""

from __future__ import annotations

import numpy as np

_PI = np.pi
_TWO_PI = 2.0 * np.pi
#: Halley steps after Mikkola's start; the start is within ~1e-3 rad, and Halley triples
#: the number of correct digits per step, so three suffice; the rest are a safety margin.
_HALLEY_STEPS = 6


def reduce_mean_anomaly(mean_anomaly):
    """Split M into M0 in [-pi, pi] and a whole number of revolutions k, M = M0 + 2 pi k."""
    m = np.asarray(mean_anomaly, dtype=float)
    k = np.round(m / _TWO_PI)
    return m - _TWO_PI * k, k


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
    and 0 <= e < 1 (tested to 1e-12 rad up to e = 0.999).  By symmetry E(-M) = -E(M), so we
    solve for 0 <= M <= pi, where the root lies in [M, min(M + e, pi)]; each Halley step
    is clipped into that bracket so no iterate can run away where f'(E) = 1 - e cos E ~ 0.
    """
    e = np.asarray(eccentricity, dtype=float)
    m0, k = reduce_mean_anomaly(mean_anomaly)
    sign = np.where(m0 < 0.0, -1.0, 1.0)
    m = np.abs(m0)
    lo = m
    hi = np.minimum(m + e, _PI)
    big_e = np.clip(_mikkola_start(m, e), lo, hi)
    for _ in range(_HALLEY_STEPS):
        sin_e = np.sin(big_e)
        f = big_e - e * sin_e - m
        d1 = 1.0 - e * np.cos(big_e)
        d2 = e * sin_e
        with np.errstate(invalid="ignore", divide="ignore"):
            step = f / (d1 - 0.5 * f * d2 / d1)
            step = np.where(np.isfinite(step), step, 0.0)
        big_e = np.clip(big_e - step, lo, hi)
    # a final Newton step polishes the last bit (Halley's correction term is then ~0)
    with np.errstate(invalid="ignore", divide="ignore"):
        step = (big_e - e * np.sin(big_e) - m) / (1.0 - e * np.cos(big_e))
        step = np.where(np.isfinite(step), step, 0.0)
    big_e = np.clip(big_e - step, lo, hi)
    return sign * big_e + _TWO_PI * k


def _beta(e):
    """beta = e / (1 + sqrt(1 - e^2)), the half-angle factor of the anomaly conversions."""
    return e / (1.0 + np.sqrt(1.0 - e * e))


def true_from_eccentric(eccentric, eccentricity):
    """True anomaly nu (rad) from the eccentric anomaly E.

    tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2) (Murray & Dermott 1999, eq. 2.46), written as
    nu = E + 2 atan2(beta sin E, 1 - beta cos E) with beta = e/(1 + sqrt(1 - e^2))
    (Broucke & Cefola 1973, Celestial Mechanics 7, 388), which has no branch cut: nu keeps
    the revolution count of E and is continuous in E.
    """
    big_e = np.asarray(eccentric, dtype=float)
    b = _beta(np.asarray(eccentricity, dtype=float))
    return big_e + 2.0 * np.arctan2(b * np.sin(big_e), 1.0 - b * np.cos(big_e))


def eccentric_from_true(true_anomaly, eccentricity):
    """Eccentric anomaly E (rad) from the true anomaly nu: E = nu - 2 atan2(beta sin nu, 1 + beta cos nu)."""
    nu = np.asarray(true_anomaly, dtype=float)
    b = _beta(np.asarray(eccentricity, dtype=float))
    return nu - 2.0 * np.arctan2(b * np.sin(nu), 1.0 + b * np.cos(nu))


def mean_from_eccentric(eccentric, eccentricity):
    """Mean anomaly M = E - e sin E (rad), Kepler's equation."""
    big_e = np.asarray(eccentric, dtype=float)
    return big_e - np.asarray(eccentricity, dtype=float) * np.sin(big_e)


def mean_from_true(true_anomaly, eccentricity):
    """Mean anomaly M (rad) from the true anomaly nu, via E (keeps the revolution count)."""
    return mean_from_eccentric(eccentric_from_true(true_anomaly, eccentricity), eccentricity)


def true_anomaly(mean_anomaly, eccentricity):
    """True anomaly nu (rad) at mean anomaly M: solve Kepler's equation, then convert E to nu."""
    return true_from_eccentric(eccentric_anomaly(mean_anomaly, eccentricity), eccentricity)


def separation(true_anomaly, eccentricity):
    """Separation in units of the semi-major axis, r/a = (1 - e^2)/(1 + e cos nu) (equation of the ellipse)."""
    e = np.asarray(eccentricity, dtype=float)
    return (1.0 - e * e) / (1.0 + e * np.cos(true_anomaly))


def separation_from_eccentric(eccentric, eccentricity):
    """Separation in units of a from E: r/a = 1 - e cos E (better conditioned than the nu form near e -> 1)."""
    return 1.0 - np.asarray(eccentricity, dtype=float) * np.cos(eccentric)


def mean_anomaly(time, period, t_periastron):
    """Mean anomaly M = 2 pi (t - T0)/P (rad), growing by 2 pi per revolution from periastron T0."""
    return _TWO_PI * (np.asarray(time, dtype=float) - t_periastron) / period
