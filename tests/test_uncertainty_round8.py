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
from uncertainties import correlation_matrix, ufloat, umath

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


def test_posterior_samples_of_an_angle_across_a_full_turn_are_kept_whole(client):
    # A fit's omega posterior about 359 deg (a sampler that does not wrap gives draws of 361 deg): 37 % of the
    # pairs were dropped as out of domain.  Each draw is an angle: the answer is that of the same draws a turn back,
    # and numpy's on the Thiele-Innes formulas (Heintz 1978) of every draw.
    omega = 359.0 + 3.0 * np.random.default_rng(3).standard_normal(400)
    answers = [post(client, "/v1/astrometric/thiele-innes",
                    {"angular_semimajor_axis": 327.0, "inclination": 63.0, "node": 118.0,
                     "omega": {"samples": list(draws)}})[1] for draws in (omega, omega - 360.0)]
    ref = _thiele_innes(327.0, 63.0, omega, 118.0)
    for got in answers:
        assert got["uncertainty"]["rejected_fraction"] == 0.0
        for name, y in ref.items():
            np.testing.assert_allclose(_got(got["results"][name]), _summary(y), rtol=1e-12, err_msg=name)


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


# ----------------------------------------------------------------------------- linear, 4 correlated inputs
GM_SUN = 1.3271244e20          # m^3 s^-2, IAU 2015 Resolution B3 nominal GM_sun (also astropy.constants.GM_sun)
AU = 1.495978707e11            # m, IAU 2012 Resolution B2
DAY = 86400.0
SB1 = {"period": (41.6, 0.02), "k1": (23.4, 0.3), "eccentricity": (0.31, 0.01), "primary_mass": (1.9, 0.1),
       "inclination": (71.0, 2.0)}


def _sb1_reference(x):
    """Hilditch (2001) ch. 2 with `uncertainties` values: f = P K^3 (1 - e^2)^{3/2} / (2 pi G); m2 the root of
    (m2 sin i)^3 / (m1 + m2)^2 = f, to first order about the nominal root m2_0 by the implicit function theorem
    (m2 = m2_0 - F(m2_0; f, m1, sin i) / F'(m2_0), exact in the derivatives); a = (G (m1 + m2) P^2 / 4 pi^2)^{1/3}."""
    p, k, e, m1, s = (x["period"] * DAY, x["k1"] * 1e3, x["eccentricity"], x["primary_mass"],
                      umath.sin(umath.radians(x["inclination"])))
    f_sun = p * k ** 3 * (1 - e ** 2) ** 1.5 / (2 * np.pi * GM_SUN)
    n = {key: v.nominal_value for key, v in (("f", f_sun), ("m1", m1), ("s", s))}
    m2_0 = optimize.brentq(lambda m: (m * n["s"]) ** 3 / (n["m1"] + m) ** 2 - n["f"], 1e-6, 1e3, xtol=1e-15,
                           rtol=1e-15)
    slope = 3 * m2_0 ** 2 * n["s"] ** 3 / (n["m1"] + m2_0) ** 2 - 2 * (m2_0 * n["s"]) ** 3 / (n["m1"] + m2_0) ** 3
    m2 = m2_0 - ((m2_0 * s) ** 3 / (m1 + m2_0) ** 2 - f_sun) / slope
    a = (GM_SUN * (m1 + m2) * p ** 2 / (4 * np.pi ** 2)) ** (1 / 3) / AU
    return {"mass_function": f_sun, "a1_sin_i": p * k * (1 - e ** 2) ** 0.5 / (2 * np.pi) / AU, "m2": m2,
            "semimajor_axis": a}


@pytest.mark.parametrize("rho", [
    {("k1", "eccentricity"): 0.5, ("primary_mass", "inclination"): -0.4, ("period", "k1"): 0.2},
    {("k1", "primary_mass"): 1.0, ("period", "inclination"): 0.3},
    {("k1", "eccentricity"): -1.0, ("eccentricity", "primary_mass"): 1.0, ("k1", "primary_mass"): -1.0},
])
def test_sb1_with_primary_mass_and_inclination_and_correlations_up_to_one_against_uncertainties(client, rho):
    # Linear J C J^T with four correlated inputs (rho = +-1 included: a singular C whose factor is not Cholesky's):
    # sigmas, the output correlation matrix and the budget (its terms summing to the variance) against
    # `uncertainties`.correlated_values through Hilditch's formulas.
    body = {k: {"value": v, "sigma": s} for k, (v, s) in SB1.items()}
    body.update(correlations=[{"between": list(p), "rho": r} for p, r in rho.items()], covariance=True, budget=True)
    status, got = post(client, "/v1/spectroscopic/sb1", body)
    assert status == 200
    ref = _sb1_reference(correlated_ufloats(SB1, rho))
    independent = {k: ufloat(v, sd) for k, (v, sd) in SB1.items()}
    partials = _sb1_reference(independent)
    for name, f in ref.items():
        entry = got["results"][name]
        assert entry["value"] == pytest.approx(f.nominal_value, rel=1e-9), name     # brentq to 1e-15
        assert entry["sigma"] == pytest.approx(f.std_dev, rel=1e-6), name           # DESIGN: 1e-6 of uncertainties
        assert sum(entry["budget"].values()) == pytest.approx(1.0, abs=1e-12), name
        # the budget by hand from the partial derivatives of the same formulas on independent inputs:
        # (df/dx_i s_i)^2 / var and 2 rho_ij (df/dx_i s_i)(df/dx_j s_j) / var, var = t R t
        t = {i: partials[name].derivatives.get(independent[i], 0.0) * SB1[i][1] for i in SB1}
        var = sum(v * v for v in t.values()) + sum(2 * r * t[a] * t[b] for (a, b), r in rho.items())
        want = {**{i: t[i] ** 2 / var for i in SB1}, **{f"{a},{b}": 2 * r * t[a] * t[b] / var for (a, b), r in rho.items()}}
        assert set(entry["budget"]) == set(want), name
        for term, share in want.items():
            assert entry["budget"][term] == pytest.approx(share, abs=1e-6), (name, term)
    matrix = np.array(got["correlation"]["matrix"])
    outputs = got["correlation"]["outputs"]
    assert np.allclose(matrix, matrix.T, atol=0) and np.allclose(np.diag(matrix), 1.0, atol=0)
    assert np.linalg.eigvalsh(matrix)[0] > -1e-12                     # positive semi-definite up to rounding
    names = list(ref)
    k = [outputs.index(n) for n in names]
    np.testing.assert_allclose(matrix[np.ix_(k, k)], correlation_matrix([ref[n] for n in names]), atol=1e-6)


# ----------------------------------------------------------------------------- split normals and truncation
def _split_normal_cdf(x, mode, minus, plus):
    """The split normal's CDF (Wallis 2014, Statistical Science 29, 106: each half a normal of its own width, weighted
    by it) from scipy.stats.norm."""
    total = minus + plus
    return np.where(x < mode, 2 * minus / total * stats.norm.cdf((x - mode) / minus),
                    minus / total + 2 * plus / total * (stats.norm.cdf((x - mode) / plus) - 0.5))


def _split_normal_ppf(q, mode, minus, plus):
    return optimize.brentq(lambda x: _split_normal_cdf(x, mode, minus, plus) - q, mode - 40 * minus,
                           mode + 40 * plus, xtol=1e-13)


@pytest.mark.parametrize("mode, minus, plus", [(48.3, 0.4, 1.2), (1.0, 0.8, 0.3), (0.5, 1.0, 1.0)])
def test_split_normal_draws_truncated_to_the_domain_against_scipy(client, mode, minus, plus):
    # A visual orbit's parallax output is its parallax input, so its summary is that of the input's draws: a split
    # normal (mode at the value, median toward the wider side) cut to parallax > 0.  Rejected fraction against the
    # split normal's mass below 0, median and interval against the quantiles of the truncated distribution.
    draws = 4000
    status, got = post(client, "/v1/astrometric/visual",
                       {"period": 7305.0, "angular_semimajor_axis": 412.0,
                        "parallax": {"value": mode, "sigma_minus": minus, "sigma_plus": plus},
                        "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": 5}})
    assert status == 200
    outside = float(_split_normal_cdf(0.0, mode, minus, plus))
    # a binomial fraction: standard error sqrt(p (1 - p) / N) <= 0.0073 at N = 4000; 4.5 of them
    assert got["uncertainty"]["rejected_fraction"] == pytest.approx(outside, abs=4.5 * np.sqrt(
        max(outside, 1e-3) * (1 - outside) / draws) + 1e-12)
    entry = got["results"]["parallax"]
    kept = draws * (1 - outside)
    for key, q in (("value", 0.5), ("low", LOW / 100), ("high", HIGH / 100)):
        want = _split_normal_ppf(outside + q * (1 - outside), mode, minus, plus)
        density = (_split_normal_cdf(want + 1e-6, mode, minus, plus) - _split_normal_cdf(want - 1e-6, mode, minus,
                                                                                          plus)) / 2e-6 / (1 - outside)
        # a quantile's standard error sqrt(q (1 - q) / N) / f(x_q) over the kept draws; 4.5 of them
        assert entry[key] == pytest.approx(want, abs=4.5 * np.sqrt(q * (1 - q) / kept) / density), key
    if mode > 20 * minus:      # untruncated: the median lies toward the wider side, above the mode
        assert entry["value"] > mode


def test_monte_carlo_correlation_of_truncated_correlated_split_normal_draws_is_numpys_corrcoef(client):
    # Eccentricity 0.04 (-0.05, +0.08) correlated 0.6 with an asymmetric K1: 16 % of the draws fall below e = 0 and
    # are dropped with their whole index; the summaries and the correlation matrix are numpy's on the kept draws of
    # the documented model (numpy.corrcoef), the rejected fraction their count.
    draws, seed = 4000, 9
    given = {"period": (41.6, 0.02, 0.02), "k1": (23.4, 0.2, 0.5), "eccentricity": (0.04, 0.05, 0.08)}
    r = np.eye(3)
    r[1, 2] = r[2, 1] = 0.6
    z = np.random.default_rng(seed).standard_normal((draws, 3)) @ np.linalg.cholesky(r).T
    x = {n: (v + a * z[:, j] if a == b else split_normal(v, a, b, z[:, j])) for j, (n, (v, a, b)) in
         enumerate(given.items())}
    keep = (x["eccentricity"] >= 0) & (x["eccentricity"] < 1)
    p, k, e = x["period"][keep] * DAY, x["k1"][keep] * 1e3, x["eccentricity"][keep]
    ref = {"mass_function": p * k ** 3 * (1 - e ** 2) ** 1.5 / (2 * np.pi * GM_SUN),
           "a1_sin_i": p * k * np.sqrt(1 - e ** 2) / (2 * np.pi) / AU}
    body = {n: {"value": v, "sigma_minus": a, "sigma_plus": b} for n, (v, a, b) in given.items()}
    body.update(correlations=[{"between": ["k1", "eccentricity"], "rho": 0.6}], covariance=True,
                uncertainty={"method": "monte_carlo", "samples": draws, "seed": seed})
    status, got = post(client, "/v1/spectroscopic/sb1", body)
    assert status == 200
    assert got["uncertainty"]["rejected_fraction"] == pytest.approx(1 - keep.mean(), abs=1e-15)
    for name, y in ref.items():
        # constants as written here (GM_sun, au) against astropy's in the service: the same to ~1e-9
        np.testing.assert_allclose(_got(got["results"][name]), _summary(y), rtol=1e-8, err_msg=name)
    assert got["correlation"]["outputs"] == list(ref)
    np.testing.assert_allclose(got["correlation"]["matrix"], np.corrcoef(list(ref.values())), atol=1e-12)


# ----------------------------------------------------------------------------- the user's own draws
def test_a_correlated_posterior_in_other_units_keeps_its_pairing_and_covariance(client):
    # K1 and K2 drawn correlated 0.9 (an SB2 fit's posterior), given in m/s and km/s, the period in years: the mass
    # ratio's spread is that of the pairs (3.7e-3), not of independent draws (1.3e-2), and the output correlation is
    # numpy.corrcoef of the formulas on the pairs; the same posterior with K2 reversed (the pairing broken) gives the
    # independent spread.  150 draws: no few_draws warning (that is below 100); no budget (warned).
    rng = np.random.default_rng(4)
    s = 150
    k = rng.multivariate_normal([38.2, 51.7], [[0.16, 0.9 * 0.24], [0.9 * 0.24, 0.36]], size=s)
    period = 41.6 + 0.02 * rng.standard_normal(s)
    e = 0.2 + 0.01 * rng.standard_normal(s)
    bodies = [{"period": {"samples": list(period / 365.25), "unit": "yr"},
               "k1": {"samples": list(k[:, 0] * 1000), "unit": "m/s"}, "k2": {"samples": list(k2)},
               "eccentricity": {"samples": list(e)}, "covariance": True, "budget": True,
               "units": {"a_sin_i": "km"}} for k2 in (k[:, 1], k[::-1, 1])]
    spreads = []
    for body, k2 in zip(bodies, (k[:, 1], k[::-1, 1])):
        status, got = post(client, "/v1/spectroscopic/sb2", body)
        spreads.append(got["results"]["mass_ratio"]["sigma"])
        assert status == 200
        assert {"budget_not_given", "few_draws"} & _codes(got) == {"budget_not_given"}
        pp, k1 = period * DAY, k[:, 0] * 1e3
        ref = {"mass_ratio": k1 / (k2 * 1e3), "a_sin_i": pp * (1 - e ** 2) ** 0.5 * (k1 + k2 * 1e3) / (2 * np.pi) / 1e3}
        for name, y in ref.items():
            np.testing.assert_allclose(_got(got["results"][name]), _summary(y), rtol=1e-12, err_msg=name)
        outputs = got["correlation"]["outputs"]
        kk = [outputs.index(n) for n in ref]
        np.testing.assert_allclose(np.array(got["correlation"]["matrix"])[np.ix_(kk, kk)],
                                   np.corrcoef(list(ref.values())), atol=1e-12)
    assert spreads[0] < 0.5 * spreads[1]           # the pairs' correlation survives: 3.7e-3 against 1.3e-2


# ----------------------------------------------------------------------------- reproducibility across shapes
def test_seeded_monte_carlo_is_the_same_alone_in_rows_in_columns_and_in_arrow(client):
    # Split normals, truncation (e = 0.05 +- 0.06 loses 20 % of its draws), a correlation and output units: each
    # system's seeded answer alone is its answer in a rows batch, a columns batch and an Arrow table, to the bit.
    import io
    import json
    import urllib.parse

    import pyarrow as pa
    mc = {"method": "monte_carlo", "samples": 300, "seed": 7}
    options = {"uncertainty": mc, "correlations": [{"between": ["k1", "eccentricity"], "rho": -0.5}],
               "units": {"a1_sin_i": "km", "m2": "kg"}}
    systems = [{"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma_minus": 0.3, "sigma_plus": 0.9},
                "eccentricity": {"value": 0.05, "sigma": 0.06}, "primary_mass": {"value": 1.9, "sigma": 0.1},
                "inclination": {"value": 71.0, "sigma": 2.0}},
               {"period": {"value": 12.6, "sigma": 0.01}, "k1": {"value": 33.4, "sigma_minus": 0.5, "sigma_plus": 0.2},
                "eccentricity": {"value": 0.5, "sigma": 0.3}, "primary_mass": {"value": 1.2, "sigma": 0.2},
                "inclination": {"value": 40.0, "sigma": 5.0}}]
    alone = [post(client, "/v1/spectroscopic/sb1", {**s, **options})[1] for s in systems]
    rows = post(client, "/v1/batch/sb1", {"systems": systems, **options})[1]
    columns = {name: {key: [s[name][key] for s in systems] for key in systems[0][name]} for name in systems[0]}
    cols = post(client, "/v1/batch/sb1", {"columns": columns, **options})[1]
    names, arrays = [], []
    for name, parts in columns.items():
        for key, values in parts.items():
            names.append(name if key == "value" else f"{name}_{key}")
            arrays.append(pa.array(values, pa.float64()))
    table = pa.Table.from_arrays(arrays, names=names)
    sink = io.BytesIO()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    arrow = "application/vnd.apache.arrow.stream"
    r = client.post("/v1/batch/sb1?options=" + urllib.parse.quote(json.dumps(options)), data=sink.getvalue(),
                    headers={"Content-Type": arrow, "Accept": arrow})
    assert r.status_code == 200
    answer = pa.ipc.open_stream(r.data).read_all().to_pydict()
    assert alone[0]["uncertainty"]["rejected_fraction"] > 0.1
    keys = ("value", "sigma", "low", "high")
    for i, single in enumerate(alone):
        assert rows["results"][i]["uncertainty"]["rejected_fraction"] == single["uncertainty"]["rejected_fraction"]
        assert cols["uncertainty"]["rejected_fraction"][i] == single["uncertainty"]["rejected_fraction"]
        for name in ("mass_function", "m2", "a1_sin_i", "semimajor_axis"):
            want = [single["results"][name][k] for k in keys]
            assert [rows["results"][i]["results"][name][k] for k in keys] == want, (i, name)
            assert [cols["columns"][name][k][i] for k in keys] == want, (i, name)
            assert [answer[name + suffix][i] for suffix in ("", "_sigma", "_low", "_high")] == want, (i, name)


def test_two_inputs_alike_are_drawn_independently(client):
    # K1 = K2 = 40 +- 1 km/s: were they drawn from one variate the mass ratio would not spread at all; drawn
    # independently its sigma is sqrt(2) / 40 = 0.0354 (to first order; 0.0357 with the second-order term of a
    # ratio).  300 draws place a standard deviation within 1/sqrt(2 (N - 1)) = 4 % of itself; 5 of those.
    status, got = post(client, "/v1/spectroscopic/sb2", {"period": 41.6, "k1": {"value": 40.0, "sigma": 1.0},
                                                         "k2": {"value": 40.0, "sigma": 1.0}, "eccentricity": 0.2,
                                                         "uncertainty": {"method": "monte_carlo", "samples": 300,
                                                                         "seed": 3}})
    assert status == 200
    assert got["results"]["mass_ratio"]["sigma"] == pytest.approx(np.sqrt(2) / 40, rel=0.2)


@pytest.mark.parametrize("e, sigma", [(0.95, 0.1), (0.5, 0.5), (0.02, 0.3), (0.999, 0.01)])
def test_eccentricity_draws_cut_at_zero_and_one_against_the_truncated_normal(client, e, sigma):
    # The rejected fraction is the normal's mass outside 0 <= e < 1, Phi(-e/s) + Phi(-(1 - e)/s) (scipy.stats.norm),
    # within 4.5 binomial standard errors; the median mass function is f at the median of the truncated normal
    # (f falls monotonically with e on [0, 1)), checked distribution-free: it lies between f at the truncated
    # normal's quantiles 0.5 -+ 4.5 sqrt(0.25 / N_kept) (scipy.stats.truncnorm), the order statistic's spread.
    draws = 4000
    status, got = post(client, "/v1/spectroscopic/sb1", {"period": 41.6, "k1": 23.4,
                                                         "eccentricity": {"value": e, "sigma": sigma},
                                                         "uncertainty": {"method": "monte_carlo", "samples": draws,
                                                                         "seed": 2}})
    assert status == 200
    outside = stats.norm.cdf(-e / sigma) + stats.norm.sf((1 - e) / sigma)
    rejected = got["uncertainty"]["rejected_fraction"]
    assert rejected == pytest.approx(outside, abs=4.5 * np.sqrt(outside * (1 - outside) / draws))
    assert "draws_rejected" in _codes(got)
    spread = 4.5 * np.sqrt(0.25 / (draws * (1 - rejected)))
    low_e, high_e = stats.truncnorm.ppf([0.5 - spread, 0.5 + spread], -e / sigma, (1 - e) / sigma, loc=e, scale=sigma)
    f = 41.6 * DAY * 23.4e3 ** 3 / (2 * np.pi * GM_SUN) * (1 - np.array([high_e, low_e]) ** 2) ** 1.5
    assert f[0] <= got["results"]["mass_function"]["value"] <= f[1]


def test_campbell_elements_drawn_across_the_node_fold_are_numpy_on_continuous_branches(client):
    # Node 1 +- 3 deg: a third of the draws fold to node ~ 179 deg with omega turned by 180 deg.  The service's
    # medians, sigmas, intervals and correlation matrix are those of the draws on one continuous branch.  Reference:
    # Heintz (1978): omega + node = atan2(B - F, A + G), omega - node = atan2(-B - F, A - G), each unwrapped about its
    # nominal value (so neither folds), tan^2(i/2) = m / p, a = (p + m) / 2; numpy.percentile and numpy.corrcoef.
    draws, seed, sigma = 3000, 3, 8.0
    constants = _thiele_innes(300.0, 50.0, 100.0, 1.0)
    status, got = post(client, "/v1/astrometric/campbell",
                       {**{k: {"value": v, "sigma": sigma} for k, v in constants.items()}, "covariance": True,
                        "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
    assert status == 200
    z = np.random.default_rng(seed).standard_normal((draws, 4))
    a, b, f, g = (constants[k] + sigma * z[:, j] for j, k in enumerate("ABFG"))

    def branch(y, y0):
        return y0 + (y - y0 + np.pi) % (2 * np.pi) - np.pi
    A, B, F, G = constants.values()
    total = branch(np.arctan2(b - f, a + g), np.arctan2(B - F, A + G))
    difference = branch(np.arctan2(-b - f, a - g), np.arctan2(-B - F, A - G))
    p, m = np.hypot(a + g, b - f), np.hypot(a - g, b + f)
    ref = {"angular_semimajor_axis": (p + m) / 2, "inclination": np.degrees(2 * np.arctan2(np.sqrt(m), np.sqrt(p))),
           "omega": np.degrees((total + difference) / 2), "node": np.degrees((total - difference) / 2)}
    assert np.mean(ref["node"] < 0) > 0.3          # the fold is crossed by a third of the draws
    for name, y in ref.items():
        np.testing.assert_allclose(_got(got["results"][name]), _summary(y), rtol=1e-12, atol=1e-12, err_msg=name)
    outputs = got["correlation"]["outputs"]
    k = [outputs.index(n) for n in ref]
    np.testing.assert_allclose(np.array(got["correlation"]["matrix"])[np.ix_(k, k)], np.corrcoef(list(ref.values())),
                               atol=1e-12)


# ----------------------------------------------------------------------------- an option never silently dropped
@pytest.mark.parametrize("uncertainty", [{"method": "linear"}, {"method": "monte_carlo", "samples": 100, "seed": 1}])
def test_covariance_asked_of_series_outputs_is_said_not_to_be_given(client, uncertainty):
    # An ephemeris has series outputs only (a value at each time), which have no single correlation with each other:
    # "covariance": true was answered without a correlation and without a word, where "budget": true beside it says
    # budget_not_given.  Now a covariance_not_given warning names the outputs, as the budget's does.
    body = {"period": {"value": 2037.4, "sigma": 1.2}, "eccentricity": {"value": 0.873, "sigma": 0.004},
            "omega": {"value": 243.6, "sigma": 1.5}, "t_periastron": {"value": 2458712.3, "sigma": 0.8},
            "k1": {"value": 61.2, "sigma": 1.1}, "times": [2460400.5, 2460500.5], "covariance": True,
            "uncertainty": uncertainty}
    status, got = post(client, "/v1/orbit/ephemeris", body)
    assert status == 200 and "correlation" not in got
    said = [w for w in got["warnings"] if w["code"] == "covariance_not_given"]
    assert len(said) == 1 and said[0]["message"].startswith("phase, mean_anomaly, true_anomaly, separation, rv1")
