"""Eighth round of independent reference computations: each check value from a computation written here from the
published formula (mpmath at 60 digits, bisected roots, astropy constants and units, numpy on the documented draw
model), never from calcservice's physics."""

from __future__ import annotations

import mpmath as mp
import numpy as np
import pytest

from calcservice import create_app

from .mpmath_helpers import precision, relative_error

working_precision = precision(60)


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _post(client, path, body):
    r = client.post(path, json=body)
    assert r.status_code == 200, r.get_json()
    return r.get_json()


# --------------------------------------------------------------------------- colliding winds: a tiny cone
def _crw96_half_angle_degrees(eta):
    """Cantó, Raga & Wilkin (1996), ApJ 469, 729, eq. 28: theta_inf - tan theta_inf = pi / (1 - eta), the half-angle
    psi = pi - theta_inf about the weaker wind's star, i.e. tan psi - psi = pi eta / (1 - eta), bisected on
    [0, pi/2] to 2^-500 of the bracket (the left side rises from 0 to infinity there), at 400 digits: tan psi - psi
    ~ psi^3 / 3 cancels 2 log10(1/psi) digits, 134 at eta = 1e-200."""
    with mp.workdps(400):
        eta = mp.mpf(eta)
        target = mp.pi * eta / (1 - eta)
        lo, hi = mp.mpf(0), mp.pi / 2
        for _ in range(500):
            mid = (lo + hi) / 2
            lo, hi = (mid, hi) if mp.tan(mid) - mid < target else (lo, mid)
        return mp.degrees((lo + hi) / 2)


@pytest.mark.parametrize("eta", [1e-4, 0.3, 0.999999, 1e-38, 1e-45, 1e-55, 1e-60, 1e-80, 1e-200])
def test_crw96_opening_angle_of_a_very_weak_wind_keeps_its_digits(client, eta):
    # The service bisected tan psi - psi = pi eta / (1 - eta) on [0, pi/2]: 2^-64 of pi/2 (8.5e-20 rad) was all
    # the precision a root could have, so a cone below ~1e-11 rad lost digits: 5e-15 relative at eta = 1e-38,
    # 1.5e-6 at 1e-55, 40 % at 1e-60 and a factor 6e6 at 1e-80 (the half-angle stuck at 1.6e-18 deg).  The winds
    # here have equal speeds, so eta is Mdot2 / Mdot1 exactly.  Agreed to 2e-16 after the fix.
    body = {"mdot1": 1.0, "mdot2": eta, "vinf1": 1000.0, "vinf2": 1000.0, "separation": 1.0}
    results = _post(client, "/v1/winds/collision", body)["results"]
    assert results["momentum_ratio"]["value"] == eta
    assert relative_error(results["opening_half_angle_crw96"]["value"], _crw96_half_angle_degrees(eta)) < 1e-15
