"""Angles given in degrees: sines and cosines exact at the quadrant points, wrapping into [0, 360).

np.sin(np.radians(x)) rounds x to radians before it reduces: at x = 180 - 1e-7 deg the rounding
error of pi (1.2e-16 rad) is 1e-7 of sin x, and cos 90 deg comes out 6e-17, not 0.  Reducing in
degrees first, x = 90 n + r with |r| <= 45 (exact in floating point: Sterbenz's lemma), keeps the
distance to the nearest quadrant point exact, so sin x and cos x keep their relative precision
everywhere (the argument reduction of W. J. Cody & W. Waite 1980, *Software Manual for the
Elementary Functions*, ch. 8, done in the unit the angle is given in).
"""

from __future__ import annotations

import numpy as np


def _reduced(degrees):
    """x = 90 n + r, |r| <= 45 deg: (r in radians, n mod 4)."""
    x = np.asarray(degrees, dtype=float)
    n = np.round(x / 90.0)
    return np.radians(x - 90.0 * n), np.mod(n, 4.0)


def sin_cos_degrees(degrees):
    """(sin x, cos x) for x in degrees, both exact to rounding near multiples of 90 deg, from one reduction."""
    r, quadrant = _reduced(degrees)
    s, c = np.sin(r), np.cos(r)
    sine = np.where(quadrant == 0.0, s, np.where(quadrant == 1.0, c, np.where(quadrant == 2.0, -s, -c)))
    cosine = np.where(quadrant == 0.0, c, np.where(quadrant == 1.0, -s, np.where(quadrant == 2.0, -c, s)))
    return sine, cosine


def sin_degrees(degrees):
    """sin x for x in degrees, exact to rounding near multiples of 90 deg (sin 180 deg = 0)."""
    r, quadrant = _reduced(degrees)
    s, c = np.sin(r), np.cos(r)
    return np.where(quadrant == 0.0, s, np.where(quadrant == 1.0, c, np.where(quadrant == 2.0, -s, -c)))


def cos_degrees(degrees):
    """cos x for x in degrees, exact to rounding near multiples of 90 deg (cos 90 deg = 0)."""
    r, quadrant = _reduced(degrees)
    s, c = np.sin(r), np.cos(r)
    return np.where(quadrant == 0.0, c, np.where(quadrant == 1.0, -s, np.where(quadrant == 2.0, -c, s)))


def wrap_degrees(degrees):
    """x modulo 360 in [0, 360): a tiny negative angle, which np.mod rounds up to 360.0, becomes 0."""
    r = np.mod(np.asarray(degrees, dtype=float), 360.0)
    return np.where(r >= 360.0, 0.0, r)
