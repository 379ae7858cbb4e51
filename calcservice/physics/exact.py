"""Error-free transformations: a sum or a product of two doubles as an exact sum of two doubles.

Used where a formula subtracts nearly equal quantities that the inputs determine exactly (the time since
the last periastron after many cycles; the bracket of isotropic re-emission near its root), so that the
difference keeps the digits the inputs give it.  Valid while no partial result overflows.
"""

from __future__ import annotations

import numpy as np

#: Dekker's splitter 2^27 + 1: splits a double into two halves of at most 26 significant bits
_SPLITTER = 134217729.0


def two_sum(a, b):
    """(s, err) with a + b = s + err exactly, s = fl(a + b) (Knuth 1969, *The Art of Computer Programming*
    vol. 2, sect. 4.2.2, theorem B)."""
    a = np.asarray(a, dtype=float)
    s = a + b
    bb = s - a
    return s, (a - (s - bb)) + (b - bb)


def two_product(a, b):
    """(p, err) with a b = p + err exactly, p = fl(a b), by Dekker's (1971, Numer. Math. 18, 224) splitting."""
    a = np.asarray(a, dtype=float)
    b = np.asarray(b, dtype=float)
    p = a * b
    a_split = _SPLITTER * a
    a_high = a_split - (a_split - a)
    a_low = a - a_high
    b_split = _SPLITTER * b
    b_high = b_split - (b_split - b)
    b_low = b - b_high
    return p, ((a_high * b_high - p) + a_high * b_low + a_low * b_high) + a_low * b_low


def elapsed(time, epoch, period, cycles=None):
    """(n, t - T0 - n P) with t - T0 and n P carried as exact sums of two doubles (:func:`two_sum`,
    :func:`two_product`), so the time since the n-th event after T0 keeps every digit the dates give it
    after many cycles (T0 + n P rounded to a Julian Date first loses 1e-12 of a 100-day interval).
    ``cycles``: the whole numbers n; None for the nearest, round((t - T0) / P)."""
    d, d_low = two_sum(time, -np.asarray(epoch, dtype=float))
    p = np.asarray(period, dtype=float)
    with np.errstate(invalid="ignore"):
        n = np.round(d / p) if cycles is None else cycles
        whole, whole_low = two_product(n, p)
        return n, ((d - whole) - whole_low) + d_low

