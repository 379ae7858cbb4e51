"""Output correlations and uncertainty budgets of the engine, against the `uncertainties` package."""

import numpy as np
import pytest
import uncertainties
from uncertainties import umath

from calcservice.constants import AU_KM
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics.spectroscopic import MASS_FUNCTION_COEFFICIENT, PROJECTED_AXIS_COEFFICIENT_KM
from calcservice.registry import get

from .engine_helpers import correlated_ufloats
from .conftest import post

C_F = MASS_FUNCTION_COEFFICIENT
C_A = PROJECTED_AXIS_COEFFICIENT_KM / AU_KM

SB2 = {"period": (41.6, 0.02), "k1": (38.2, 0.4), "k2": (51.7, 0.6), "eccentricity": (0.31, 0.01),
       "inclination": (71.0, 2.0)}


def _measured(values):
    return {k: Measured.normal(v, s) for k, (v, s) in values.items()}


def _sb2_reference(x):
    """m1, m2 and the total mass by the handbook formulas (Hilditch 2001, ch. 2) on ufloats."""
    P, k1, k2, e, i = x["period"], x["k1"], x["k2"], x["eccentricity"], x["inclination"]
    s3 = umath.sin(umath.radians(i)) ** 3
    m1 = C_F * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k2 * P / s3
    m2 = C_F * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k1 * P / s3
    return {"m1": m1, "m2": m2, "mass_ratio": k1 / k2, "total_mass": m1 + m2}


def _matrix(result, names):
    got, corr = result.correlation
    idx = [got.index(n) for n in names]
    return corr[0][np.ix_(idx, idx)]


@pytest.mark.parametrize("corr", [{}, {("k1", "k2"): 0.3}, {("k1", "k2"): -0.6, ("period", "eccentricity"): 0.4}])
def test_linear_correlation_of_sb2_outputs_against_uncertainties(corr):
    # reference: uncertainties.correlation_matrix of the same formulas on correlated ufloats
    ref = _sb2_reference(correlated_ufloats(SB2, corr))
    names = ["m1", "m2", "mass_ratio", "total_mass"]
    result = evaluate(get("sb2"), _measured(SB2), options=Options(correlations=corr, covariance=True))
    expected = np.array(uncertainties.correlation_matrix([ref[n] for n in names]))
    np.testing.assert_allclose(_matrix(result, names), expected, atol=1e-6)
    # m1 + m2 from the correlated pair has the service's own total-mass sigma (independent
    # values would give a sigma too small: the point of asking for the correlation)
    s1, s2 = (float(result.outputs[n]["sigma"][0]) for n in ("m1", "m2"))
    rho = _matrix(result, ["m1", "m2"])[0, 1]
    total = np.sqrt(s1**2 + s2**2 + 2 * rho * s1 * s2)
    assert total == pytest.approx(float(result.outputs["total_mass"]["sigma"][0]), rel=1e-6)
    assert total == pytest.approx(ref["total_mass"].std_dev, rel=1e-6)


def test_linear_correlation_of_campbell_elements_against_uncertainties():
    # Campbell elements from Thiele-Innes constants (W. D. Heintz (1978), Double Stars):
    # omega +- node from atan2 of (B - F, A + G) and (-B - F, A - G); a^2 = u + sqrt(u^2 - v^2) with
    # u = (A^2 + B^2 + F^2 + G^2)/2, v = AG - BF; cos i = v / a^2.  A constant branch offset of
    # omega or node (the calculation keeps node in [0, 180)) changes no derivative, so none here.
    calc = get("campbell")
    ex = calc.example
    values = {k: (ex[k]["value"], ex[k]["sigma"]) for k in "ABFG"}
    corr = {tuple(c["between"]): c["rho"] for c in ex["correlations"]}
    x = correlated_ufloats(values, corr)
    A, B, F, G = x["A"], x["B"], x["F"], x["G"]
    plus, minus = umath.atan2(B - F, A + G), umath.atan2(-B - F, A - G)
    u, v = (A**2 + B**2 + F**2 + G**2) / 2, A * G - B * F
    a2 = u + umath.sqrt((u + v) * (u - v))
    ref = {"angular_semimajor_axis": umath.sqrt(a2), "inclination": umath.degrees(umath.acos(v / a2)),
           "omega": umath.degrees((plus + minus) / 2), "node": umath.degrees((plus - minus) / 2)}
    names = list(ref)
    result = evaluate(calc, _measured(values), options=Options(correlations=corr, covariance=True))
    for n in names:
        assert float(result.outputs[n]["sigma"][0]) == pytest.approx(ref[n].std_dev, rel=1e-5), n
    expected = np.array(uncertainties.correlation_matrix([ref[n] for n in names]))
    np.testing.assert_allclose(_matrix(result, names), expected, atol=1e-5)
    # omega_primary = omega - 180 deg: the same angle, correlation 1
    assert _matrix(result, ["omega", "omega_primary"])[0, 1] == pytest.approx(1.0, abs=1e-9)


def test_monte_carlo_correlation_agrees_with_linear_at_small_errors():
    small = {k: (v, s * 0.05) for k, (v, s) in SB2.items()}
    names = ["m1", "m2", "mass_ratio", "total_mass", "semimajor_axis"]
    corr = {("k1", "k2"): 0.3}
    lin = evaluate(get("sb2"), _measured(small), options=Options(correlations=corr, covariance=True))
    mc = evaluate(get("sb2"), _measured(small), options=Options(method="monte_carlo", samples=20000, seed=11,
                                                                correlations=corr, covariance=True))
    # a sample correlation of 20000 draws scatters by (1 - rho^2)/sqrt(S) < 0.007
    np.testing.assert_allclose(_matrix(mc, names), _matrix(lin, names), atol=0.03)


def test_correlation_over_systems_and_exact_outputs():
    # two systems at once; with only K1 uncertain, k2-only outputs have no sigma and are left out
    calc = get("sb2")
    q = {"period": Measured.exact([41.6, 12.0]), "k1": Measured.normal([38.2, 20.0], [0.4, 0.0]),
         "k2": Measured.exact([51.7, 30.0]), "eccentricity": Measured.exact([0.31, 0.1]),
         "inclination": Measured.exact([71.0, 60.0])}
    names, corr = evaluate(calc, q, options=Options(covariance=True)).correlation
    assert corr.shape == (2, len(names), len(names))
    assert "a2_sin_i" not in names                   # a2 sin i = f(K2, e, P): exact here
    i, j = names.index("m1"), names.index("mass_ratio")
    assert corr[0, i, j] == pytest.approx(1.0, abs=1e-9)     # both increase with K1 alone
    assert np.isnan(corr[1]).all()                  # the second system has no uncertain input


def _shares(u, inputs):
    """Each input's share of the variance of ufloat ``u``: the squared error components over the
    variance (uncertainties' error_components(), independent inputs)."""
    comps = {var.tag: c for var, c in u.error_components().items()}
    return {k: comps.get(k, 0.0) ** 2 / u.std_dev**2 for k in inputs}


def test_linear_budget_of_sb2_against_error_components():
    x = {k: uncertainties.ufloat(v, s, tag=k) for k, (v, s) in SB2.items()}
    ref = _sb2_reference(x)
    result = evaluate(get("sb2"), _measured(SB2), options=Options(budget=True))
    for name in ("m1", "m2", "mass_ratio", "total_mass"):
        expected = _shares(ref[name], SB2)
        got = {k: float(v[0]) for k, v in result.budget[name].items()}
        assert got.keys() == expected.keys()
        for k in expected:
            assert got[k] == pytest.approx(expected[k], abs=1e-7), (name, k)
        assert sum(got.values()) == pytest.approx(1.0, abs=1e-12)
    # a referee's question answered: the inclination dominates m1 (sin^3 i), and K1/K2 has no period term
    assert max(result.budget["m1"], key=lambda k: result.budget["m1"][k][0]) == "inclination"
    assert result.budget["mass_ratio"]["period"][0] == 0.0


def test_linear_budget_correlation_terms():
    # with rho(K1, K2) the "k1,k2" term is 2 rho (dq/dK1 sK1)(dq/dK2 sK2) / var (signed derivatives from
    # uncertainties), and the terms still sum to 1
    corr = {("k1", "k2"): 0.3}
    independent = _sb2_reference({k: uncertainties.ufloat(v, s, tag=k) for k, (v, s) in SB2.items()})
    correlated = _sb2_reference(correlated_ufloats(SB2, corr))
    result = evaluate(get("sb2"), _measured(SB2), options=Options(correlations=corr, budget=True))
    for name in ("m1", "mass_ratio"):
        u = independent[name]
        c = {var.tag: d * var.std_dev for var, d in u.derivatives.items()}
        var = correlated[name].std_dev ** 2
        got = result.budget[name]
        assert float(got["k1,k2"][0]) == pytest.approx(2 * 0.3 * c["k1"] * c["k2"] / var, rel=1e-6)
        assert float(got["k1"][0]) == pytest.approx(c["k1"] ** 2 / var, rel=1e-6)
        assert sum(float(v[0]) for v in got.values()) == pytest.approx(1.0, abs=1e-12)
    assert result.budget["mass_ratio"]["k1,k2"][0] < 0      # q = K1/K2: correlated errors partly cancel


def test_linear_budget_of_the_wind_momentum_ratio_against_error_components():
    # eta = (Mdot2 v2) / (Mdot1 v1) (Eichler & Usov 1993, ApJ 402, 271)
    calc = get("collision")
    ex = calc.example
    values = {k: (v["value"], v["sigma"]) for k, v in ex.items() if isinstance(v, dict)}
    x = {k: uncertainties.ufloat(v, s, tag=k) for k, (v, s) in values.items()}
    eta = (x["mdot2"] * x["vinf2"]) / (x["mdot1"] * x["vinf1"])
    result = evaluate(calc, _measured(values), options=Options(budget=True))
    assert float(result.outputs["momentum_ratio"]["value"][0]) == pytest.approx(eta.nominal_value, rel=1e-12)
    got = {k: float(v[0]) for k, v in result.budget["momentum_ratio"].items()}
    expected = _shares(eta, values)
    assert got.keys() == expected.keys()
    for k in expected:
        assert got[k] == pytest.approx(expected[k], abs=1e-7), k


def test_monte_carlo_budget_agrees_with_linear_at_small_errors():
    # holding one input at its nominal value removes its linear share when the function is nearly
    # linear over the errors; 20000 draws with common random numbers scatter by ~0.01
    small = {k: (v, s * 0.05) for k, (v, s) in SB2.items()}
    lin = evaluate(get("sb2"), _measured(small), options=Options(budget=True))
    mc = evaluate(get("sb2"), _measured(small), options=Options(method="monte_carlo", samples=20000, seed=5,
                                                                budget=True))
    for name in ("m1", "m2", "mass_ratio", "semimajor_axis"):
        for k in SB2:
            assert float(mc.budget[name][k][0]) == pytest.approx(float(lin.budget[name][k][0]), abs=0.02), (name, k)
    assert not any(w.code == "budget_not_given" for w in mc.warnings)


def test_monte_carlo_budget_not_given_for_correlated_or_isotropic_inputs():
    corr = {("k1", "k2"): 0.3}
    mc = evaluate(get("sb2"), _measured(SB2), options=Options(method="monte_carlo", samples=2000, seed=5,
                                                              correlations=corr, budget=True))
    assert mc.budget is None
    named = {w.subject for w in mc.warnings if w.code == "budget_not_given"}
    assert {"m1", "m2", "mass_ratio"} <= named


def test_linear_budget_uses_the_mean_of_asymmetric_sigmas():
    # the convention of the linear method: an asymmetric error enters as the mean of its two sides,
    # in the sigma and in the budget alike (so the shares still sum to 1); reference: uncertainties
    # with K1 = 38.2 +- 0.6, the mean of -0.3 / +0.9
    x = {k: uncertainties.ufloat(v, s, tag=k) for k, (v, s) in SB2.items()}
    x["k1"] = uncertainties.ufloat(38.2, 0.6, tag="k1")
    ref = _sb2_reference(x)
    q = _measured(SB2)
    q["k1"] = Measured(np.array([38.2]), np.array([0.3]), np.array([0.9]))
    result = evaluate(get("sb2"), q, options=Options(budget=True))
    for name in ("m1", "mass_ratio"):
        assert float(result.outputs[name]["sigma"][0]) == pytest.approx(ref[name].std_dev, rel=1e-6)
        expected = _shares(ref[name], SB2)
        for k in expected:
            assert float(result.budget[name][k][0]) == pytest.approx(expected[k], abs=1e-7), (name, k)


def test_monte_carlo_correlation_summed_in_blocks_of_systems(monkeypatch):
    # a long catalogue's draws are summed a few systems at a time; the answer must not depend on it
    from calcservice import engine
    rng = np.random.default_rng(0)
    n = 7
    q = {"period": Measured.normal(rng.uniform(10, 50, n), 0.1), "k1": Measured.normal(rng.uniform(20, 50, n), 1.0),
         "k2": Measured.normal(rng.uniform(50, 80, n), 1.0), "eccentricity": Measured.normal(0.2, 0.02),
         "inclination": Measured.normal(70.0, 2.0)}
    options = dict(method="monte_carlo", samples=3000, seed=1, covariance=True)
    whole = evaluate(get("sb2"), q, options=Options(**options)).correlation
    monkeypatch.setattr(engine, "COVARIANCE_BLOCK", 3000 * 12 * 2)          # two systems per block
    blocks = evaluate(get("sb2"), q, options=Options(**options)).correlation
    assert whole[0] == blocks[0]
    np.testing.assert_allclose(blocks[1], whole[1], rtol=1e-12)
    # each system's matrix is that system's own: the sample correlation of its draws (numpy.corrcoef)
    one = evaluate(get("sb2"), {k: Measured(v.value[3:4] if v.value.size > 1 else v.value, v.sigma_minus[:1],
                                            v.sigma_plus[:1]) for k, v in q.items()},
                   options=Options(**options, keep_draws=True))
    draws = np.array([one.draws[name][0] for name in whole[0]])
    np.testing.assert_allclose(one.correlation[1][0], np.corrcoef(draws), atol=1e-12)


def test_an_output_with_no_spread_has_no_budget_in_either_method(client):
    # q = K1/K2 does not depend on the period, the only uncertain input: its variance is 0, and no share of it is
    # defined. The linear method gives no budget; Monte Carlo gave {"period": null}
    body = {"period": {"value": 41.6, "sigma": 0.02}, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "budget": True}
    for uncertainty in ({"method": "linear"}, {"method": "monte_carlo", "samples": 1000, "seed": 1}):
        status, r = post(client, "/v1/spectroscopic/sb2", {**body, "uncertainty": uncertainty})
        assert status == 200
        assert "budget" not in r["results"]["mass_ratio"], uncertainty
        assert r["results"]["m1_sin3i"]["budget"] == {"period": 1.0}          # M sin^3 i is proportional to P
