"""Eighth audit of the uncertainties, against references outside the service: `uncertainties` (correlated_values)
for linear sigmas, correlations and budgets; numpy on the documented draw model (seeded Generator, standard normal
variates in the order of the inputs, Cholesky-correlated, split normals by their inverse CDF), numpy.percentile,
numpy.corrcoef and scipy.stats for Monte Carlo; the formulas by hand from their published sources.

Statistical tolerances are stated beside each check: a Monte Carlo of N draws places a quantile q within
sqrt(q (1 - q) / N) / f(x_q) (its standard error; f the density there), a fraction p within sqrt(p (1 - p) / N).
Each tolerance is 4 to 5 of those standard errors, so a correct service fails it in well under 1 run in 10^4 (the
seeds are fixed anyway: the runs are reproducible), while the defects each test was written for are 10 or more.
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import optimize, stats
from uncertainties import umath

from tests.conftest import post
from tests.engine_helpers import correlated_ufloats, split_normal

LOW, HIGH = 15.865525393145708, 84.13447460685429      # percent: the central 68.27 % interval (erf(1/sqrt 2))


def _summary(y):
    """numpy's median, standard deviation (ddof 1) and central 68.27 % interval of draws."""
    return [np.median(y), np.std(y, ddof=1), np.percentile(y, LOW), np.percentile(y, HIGH)]


def _got(entry):
    return [entry["value"], entry["sigma"], entry["low"], entry["high"]]


def _codes(answer):
    return {w["code"] for w in answer["warnings"]}


# ----------------------------------------------------------------------------- angles are cyclic
def _separation(a, e, nu_deg):
    """Relative separation at true anomaly nu: r = a (1 - e^2) / (1 + e cos nu) (Hilditch 2001, eq. 2.6)."""
    return a * (1 - e * e) / (1 + e * np.cos(np.radians(nu_deg)))


WINDS = {"mdot1": 2.4e-5, "mdot2": 1.1e-6, "vinf1": 2300.0, "vinf2": 1900.0, "eccentricity": 0.64,
         "semimajor_axis": 14.0}


@pytest.mark.parametrize("nu", [358.0, -358.5])
def test_monte_carlo_draws_of_an_angle_past_a_full_turn_are_the_same_angle_not_rejected(client, nu):
    # A true anomaly of 358 +- 4 deg is an angle: a draw of 361 deg is 1 deg, not a value outside a physical domain.
    # The service rejected every draw beyond +-360 deg (30 % here), reported them as rejected and summarised the
    # truncated rest: the median separation moved by 0.15 sigma and the interval shrank on one side.  Reference:
    # numpy on the documented draw model (one uncertain input: nu = value + sigma z, z the seeded standard normals).
    draws, seed, sigma = 2000, 31, 4.0
    status, got = post(client, "/v1/winds/collision",
                       {**WINDS, "true_anomaly": {"value": nu, "sigma": sigma},
                        "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
    assert status == 200
    assert got["uncertainty"]["rejected_fraction"] == 0.0
    assert "draws_rejected" not in _codes(got)
    z = np.random.default_rng(seed).standard_normal(draws)
    ref = _separation(14.0, 0.64, nu + sigma * z)
    # the draws are those of the model up to the rounding of a whole turn taken off (360 deg in 1e-13 of an angle)
    np.testing.assert_allclose(_got(got["results"]["separation"]), _summary(ref), rtol=1e-12)


def _thiele_innes(a, inclination, omega, node):
    """Thiele-Innes constants (W. D. Heintz 1978, Double Stars, ch. 4): A = a (cos w cos W - sin w sin W cos i),
    B = a (cos w sin W + sin w cos W cos i), F = a (-sin w cos W - cos w sin W cos i),
    G = a (-sin w sin W + cos w cos W cos i)."""
    w, n, i = (np.radians(x) for x in (omega, node, inclination))
    return {"A": a * (np.cos(w) * np.cos(n) - np.sin(w) * np.sin(n) * np.cos(i)),
            "B": a * (np.cos(w) * np.sin(n) + np.sin(w) * np.cos(n) * np.cos(i)),
            "F": a * (-np.sin(w) * np.cos(n) - np.cos(w) * np.sin(n) * np.cos(i)),
            "G": a * (-np.sin(w) * np.sin(n) + np.cos(w) * np.cos(n) * np.cos(i))}


def test_thiele_innes_constants_from_an_orbit_whose_angles_straddle_a_full_turn(client):
    # omega = 358 +- 5 and node = 359 +- 3 deg (correlated -0.3): 59 % of the draws were rejected for leaving
    # [-360, 360], biasing B's median by 0.4 of its sigma.  Reference: numpy on the documented draw model (the
    # standard normals in the order of the inputs, omega then node, correlated by the Cholesky factor).
    draws, seed = 2000, 37
    rho = -0.3
    body = {"angular_semimajor_axis": 327.0, "inclination": 63.0, "omega": {"value": 358.0, "sigma": 5.0},
            "node": {"value": 359.0, "sigma": 3.0}, "covariance": True,
            "correlations": [{"between": ["omega", "node"], "rho": rho}],
            "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}}
    status, got = post(client, "/v1/astrometric/thiele-innes", body)
    assert status == 200
    assert got["uncertainty"]["rejected_fraction"] == 0.0
    z = np.random.default_rng(seed).standard_normal((draws, 2)) @ np.linalg.cholesky([[1, rho], [rho, 1]]).T
    ref = _thiele_innes(327.0, 63.0, 358.0 + 5.0 * z[:, 0], 359.0 + 3.0 * z[:, 1])
    for name, y in ref.items():
        np.testing.assert_allclose(_got(got["results"][name]), _summary(y), rtol=1e-11, err_msg=name)
    outputs = got["correlation"]["outputs"]
    k = [outputs.index(n) for n in ref]
    np.testing.assert_allclose(np.array(got["correlation"]["matrix"])[np.ix_(k, k)],
                               np.corrcoef([ref[n] for n in ref]), atol=1e-12)


def test_linear_sigma_of_an_angle_near_a_full_turn_is_not_said_to_cross_a_domain(client):
    # Linear propagation at omega = 358 +- 5 deg: the sigmas match `uncertainties` as they did, but the answer
    # warned interval_crosses_domain ("consider the Monte Carlo method, which truncates draws to the domain"),
    # which for an angle is false and pointed to the truncation above.
    status, got = post(client, "/v1/astrometric/thiele-innes",
                       {"angular_semimajor_axis": 327.0, "inclination": {"value": 63.0, "sigma": 0.7},
                        "omega": {"value": 358.0, "sigma": 5.0}, "node": {"value": 359.5, "sigma": 0.6}})
    assert status == 200
    assert "interval_crosses_domain" not in _codes(got)
    x = correlated_ufloats({"inclination": (63.0, 0.7), "omega": (358.0, 5.0), "node": (359.5, 0.6)}, {})
    w, n, i = (umath.radians(x[k]) for k in ("omega", "node", "inclination"))
    ref = {"A": 327.0 * (umath.cos(w) * umath.cos(n) - umath.sin(w) * umath.sin(n) * umath.cos(i)),
           "G": 327.0 * (-umath.sin(w) * umath.sin(n) + umath.cos(w) * umath.cos(n) * umath.cos(i))}
    for name, f in ref.items():
        # uncertainties differentiates exactly; the service's central differences agree to ~1e-10 (DESIGN: 1e-6)
        assert got["results"][name]["sigma"] == pytest.approx(f.std_dev, rel=1e-6), name


# ----------------------------------------------------------------------------- correlations no inputs can have
IMPOSSIBLE = [{"between": ["k1", "k2"], "rho": 0.9}, {"between": ["k2", "period"], "rho": 0.9},
              {"between": ["k1", "period"], "rho": -0.9}]     # eigenvalues -0.56, 1.78, 1.78 (numpy.linalg.eigvalsh)


@pytest.mark.parametrize("uncertainty", [{"method": "linear"}, {"method": "monte_carlo", "samples": 100, "seed": 1}])
def test_correlations_no_inputs_can_have_are_refused_even_where_one_of_them_is_exact(client, uncertainty):
    # k1 ~ k2 (0.9), k2 ~ P (0.9) and k1 ~ P (-0.9) is no correlation matrix at all (an eigenvalue of -0.56).  A
    # batch refused it whole; the same system alone, with the period given exactly, was answered 200 (the
    # contradiction was judged over the uncertain inputs only), so a system's answer depended on being alone.
    assert np.linalg.eigvalsh(np.array([[1, .9, -.9], [.9, 1, .9], [-.9, .9, 1]]))[0] < -0.5
    system = {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
              "eccentricity": 0.31}
    status, alone = post(client, "/v1/spectroscopic/sb2", {**system, "correlations": IMPOSSIBLE,
                                                           "uncertainty": uncertainty})
    batch_status, batch = post(client, "/v1/batch/sb2", {"systems": [system], "correlations": IMPOSSIBLE,
                                                         "uncertainty": uncertainty})
    assert (status, batch_status) == (422, 422)
    assert list(alone["errors"]) == list(batch["errors"]) == ["correlations"]
    # a possible matrix (determinant 1 - 0.81 - 0.09 = 0.1 > 0) with the same exact period is answered, its pairs with the period said to do nothing
    status, fine = post(client, "/v1/spectroscopic/sb2", {**system, "uncertainty": uncertainty, "correlations": [
        {"between": ["k1", "k2"], "rho": 0.9}, {"between": ["k2", "period"], "rho": 0.3}]})
    assert status == 200 and "correlation_without_effect" in _codes(fine)
