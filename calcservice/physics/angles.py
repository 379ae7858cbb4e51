"""Angles given in degrees: sines and cosines exact near the quadrant points, wrapping into [0, 360).

np.sin(np.radians(x)) rounds x to radians before it reduces: at x = 180 - 1e-7 deg the rounding
error of pi (1.2e-16 rad) is 1e-7 of sin x, and cos 90 deg comes out 6e-17, not 0.  Reduced in
degrees first, the distance to the nearest quadrant point stays exact, so sin x and cos x keep
their relative precision everywhere: scipy.special.sindg and cosdg (the Cephes library, S. L.
Moshier 1989, *Methods and Programs for Mathematical Functions*), which reduce by 45 deg exactly,
after an exact np.fmod by 360 deg (a full turn, also where they would give 0 for |x| > 1e14, and
NaN, not 0, for an infinite angle).
"""

from __future__ import annotations

import numpy as np
from scipy.special import cosdg, sindg


def sin_degrees(degrees):
    """sin x for x in degrees, exact to rounding near multiples of 90 deg (sin 180 deg = 0)."""
    return sindg(np.fmod(degrees, 360.0))


def cos_degrees(degrees):
    """cos x for x in degrees, exact to rounding near multiples of 90 deg (cos 90 deg = 0)."""
    return cosdg(np.fmod(degrees, 360.0))


def sin_cos_degrees(degrees):
    """(sin x, cos x) for x in degrees, both exact to rounding near multiples of 90 deg."""
    turn = np.fmod(degrees, 360.0)
    return sindg(turn), cosdg(turn)


def wrap_degrees(degrees):
    """x modulo 360 in [0, 360): a tiny negative angle, which np.mod rounds up to 360.0, becomes 0."""
    r = np.mod(np.asarray(degrees, dtype=float), 360.0)
    return np.where(r >= 360.0, 0.0, r)
