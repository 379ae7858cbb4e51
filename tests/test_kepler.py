"""Kepler's equation and the anomaly conversions, against scipy's bracketing root finder and textbook formulas."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import brentq

from calcservice.physics import kepler

TOLERANCE = 1e-12  # rad, the requirement
ECCENTRICITIES = [0.0, 1e-6, 0.1, 0.3, 0.5, 0.7, 0.9, 0.95, 0.99, 0.995, 0.998, 0.999]


def _dense_mean_anomalies():
    # uniform over the orbit, plus a geometric crowd near periastron (M -> 0 and M -> 2 pi), where
    # f'(E) = 1 - e cos E nearly vanishes at high e and naive iterations stall
    uniform = np.linspace(0.0, 2.0 * np.pi, 721)
    near = np.geomspace(1e-12, 0.3, 200)
    return np.concatenate([uniform, near, 2.0 * np.pi - near, -near, [np.pi, np.pi - 1e-9, np.pi + 1e-9]])


def _brentq_eccentric_anomaly(m, e):
    # scipy.optimize.brentq on E - e sin E - M, bracketed by |E - M| <= e
    return brentq(lambda x: x - e * np.sin(x) - m, m - e - 1e-9, m + e + 1e-9, xtol=1e-15,
                  rtol=4 * np.finfo(float).eps, maxiter=200)


@pytest.mark.parametrize("e", ECCENTRICITIES)
def test_solver_matches_scipy_brentq_on_dense_grid(e):
    m = _dense_mean_anomalies()
    ours = kepler.eccentric_anomaly(m, e)
    reference = np.array([_brentq_eccentric_anomaly(x, e) for x in m])
    assert np.max(np.abs(ours - reference)) < TOLERANCE


def test_solver_vectorised_over_both_arguments():
    m = np.linspace(-7.0, 7.0, 57)[:, None]
    e = np.array([0.0, 0.5, 0.999])[None, :]
    ours = kepler.eccentric_anomaly(m, e)
    assert ours.shape == (57, 3)
    for i in range(57):
        for j in range(3):
            assert abs(ours[i, j] - _brentq_eccentric_anomaly(m[i, 0], e[0, j])) < TOLERANCE


def test_curtis_worked_example():
    # from memory: H. D. Curtis, Orbital Mechanics for Engineering Students, Example 3.1/3.2:
    # e = 0.37255, M = 3.6029 rad gives E = 3.4794 rad
    assert kepler.eccentric_anomaly(3.6029, 0.37255) == pytest.approx(3.4794, abs=1e-4)


def test_circular_orbit_anomalies_are_equal():
    # e = 0: E = nu = M (Murray & Dermott 1999, ch. 2)
    m = np.linspace(-10, 10, 101)
    assert np.allclose(kepler.eccentric_anomaly(m, 0.0), m, atol=1e-14, rtol=0)
    assert np.allclose(kepler.true_anomaly(m, 0.0), m, atol=1e-14, rtol=0)


@settings(max_examples=200, deadline=None)
@given(m=st.floats(-50.0, 50.0), e=st.floats(0.0, 0.999), k=st.integers(-5, 5))
def test_symmetry_and_revolutions(m, e, k):
    # Kepler's equation is odd in (M, E) and E - 2 pi k solves it for M - 2 pi k
    e1 = kepler.eccentric_anomaly(m, e)
    assert kepler.eccentric_anomaly(-m, e) == pytest.approx(-e1, abs=1e-11)
    assert kepler.eccentric_anomaly(m + 2 * np.pi * k, e) == pytest.approx(e1 + 2 * np.pi * k, abs=1e-11)
    # and the residual of Kepler's equation is at rounding level
    assert abs(e1 - e * np.sin(e1) - m) < 1e-12


@settings(max_examples=200, deadline=None)
@given(m=st.floats(-20.0, 20.0), e=st.floats(0.0, 0.999))
def test_true_anomaly_against_half_angle_formula(m, e):
    # tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2) (Murray & Dermott 1999, eq. 2.46)
    big_e = kepler.eccentric_anomaly(m, e)
    nu = kepler.true_anomaly(m, e)
    expected = 2.0 * np.arctan(np.sqrt((1 + e) / (1 - e)) * np.tan(big_e / 2))
    diff = np.angle(np.exp(1j * (nu - expected)))
    assert abs(diff) < 1e-9
    # nu and E lie in the same half of the orbit and nu keeps E's revolution count
    assert abs(nu - big_e) < np.pi


@settings(max_examples=200, deadline=None)
@given(nu=st.floats(-20.0, 20.0), e=st.floats(0.0, 0.99))
def test_mean_from_true_inverts_true_anomaly(nu, e):
    m = kepler.mean_from_true(nu, e)
    assert kepler.true_anomaly(m, e) == pytest.approx(nu, abs=1e-9)


def test_separation_forms_agree_and_extremes():
    # r/a = (1 - e^2)/(1 + e cos nu) = 1 - e cos E; periastron 1 - e, apastron 1 + e (equation of the ellipse)
    m = np.linspace(0, 2 * np.pi, 50)
    for e in (0.0, 0.4, 0.97):
        big_e = kepler.eccentric_anomaly(m, e)
        nu = kepler.true_from_eccentric(big_e, e)
        assert np.allclose(kepler.separation(nu, e), kepler.separation_from_eccentric(big_e, e), atol=1e-12)
        assert kepler.separation(0.0, e) == pytest.approx(1 - e)
        assert kepler.separation(np.pi, e) == pytest.approx(1 + e)


def test_nan_passes_through():
    out = kepler.eccentric_anomaly(np.array([np.nan, 1.0, 1.0]), np.array([0.5, np.nan, 0.5]))
    assert np.isnan(out[0]) and np.isnan(out[1]) and np.isfinite(out[2])


def test_kepler_second_law_time_through_periastron_at_high_e():
    # equal areas in equal times: the mean anomaly advances as the swept area, A(nu) / (pi a b) * 2 pi.
    # With the area integral r^2/2 dnu done by quadrature (scipy), independent of our E.
    from scipy.integrate import quad
    e = 0.995
    nu_end = 2.5
    area, _ = quad(lambda nu: 0.5 * ((1 - e**2) / (1 + e * np.cos(nu))) ** 2, 0.0, nu_end,
                   epsabs=1e-14, epsrel=1e-13, limit=200)
    m = 2 * np.pi * area / (np.pi * np.sqrt(1 - e**2))
    assert kepler.mean_from_true(nu_end, e) == pytest.approx(m, rel=1e-10)
    assert kepler.true_anomaly(m, e) == pytest.approx(nu_end, abs=1e-9)
