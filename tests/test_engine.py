"""The uncertainty engine against the `uncertainties` package, scipy.stats and analytic distributions."""

import numpy as np
import pytest
import uncertainties
from scipy import stats
from uncertainties import umath

from calcservice.core import Problem
from calcservice.core import compute
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics.spectroscopic import MASS_FUNCTION_COEFFICIENT, PROJECTED_AXIS_COEFFICIENT_KM
from calcservice.constants import AU_KM
from calcservice.registry import get

from .engine_helpers import correlated_ufloats

C_F = MASS_FUNCTION_COEFFICIENT
C_A = PROJECTED_AXIS_COEFFICIENT_KM / AU_KM

SB2 = {"period": (41.6, 0.02), "k1": (38.2, 0.4), "k2": (51.7, 0.6), "eccentricity": (0.31, 0.01),
       "inclination": (71.0, 2.0)}


def _body(values, **extra):
    body = {k: {"value": v, "sigma": s} for k, (v, s) in values.items()}
    body.update(extra)
    return body


@pytest.mark.parametrize("corr", [{}, {("k1", "k2"): 0.3}, {("k1", "k2"): -0.6, ("period", "eccentricity"): 0.4}])
def test_linear_sb2_against_uncertainties(corr):
    # reference: the `uncertainties` package (first-order propagation with its own analytic derivatives)
    x = correlated_ufloats(SB2, corr)
    P, k1, k2, e, i = x["period"], x["k1"], x["k2"], x["eccentricity"], x["inclination"]
    s = umath.sin(umath.radians(i))
    m1s = C_F * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k2 * P
    m2s = C_F * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k1 * P
    asini = C_A * umath.sqrt(1 - e**2) * (k1 + k2) * P
    ref = {"mass_ratio": k1 / k2, "m1_sin3i": m1s, "m2_sin3i": m2s, "a_sin_i": asini,
           "m1": m1s / s**3, "m2": m2s / s**3, "semimajor_axis": asini / s,
           "periastron_distance": asini / s * (1 - e)}
    body = _body(SB2, correlations=[{"between": list(k), "rho": r} for k, r in corr.items()])
    got = compute("sb2", body)["results"]
    for name, u in ref.items():
        assert got[name]["value"] == pytest.approx(u.nominal_value, rel=1e-13), name
        assert got[name]["sigma"] == pytest.approx(u.std_dev, rel=1e-6), name


def test_linear_sb1_mass_function_against_uncertainties():
    vals = {"period": (3.4172, 0.0004), "k1": (61.4, 0.9), "eccentricity": (0.05, 0.02)}
    x = correlated_ufloats(vals, {("period", "k1"): 0.2})
    f = C_F * (1 - x["eccentricity"] ** 2) ** 1.5 * x["k1"] ** 3 * x["period"]
    got = compute("sb1", _body(vals, correlations=[{"between": ["period", "k1"], "rho": 0.2}]))["results"]
    assert got["mass_function"]["sigma"] == pytest.approx(f.std_dev, rel=1e-6)


def test_linear_companion_mass_against_wrapped_root():
    # uncertainties.wrap differentiates a scipy root numerically: an independent route to sigma(M2)
    from scipy.optimize import brentq

    def m2_of(f, m1, s):
        return brentq(lambda m: (m * s) ** 3 - f * (m1 + m) ** 2, 1e-9, 1e6, xtol=1e-15, rtol=1e-15)
    vals = {"period": (41.6, 0.02), "k1": (23.4, 0.3), "eccentricity": (0.31, 0.01),
            "primary_mass": (1.9, 0.1), "inclination": (71.0, 2.0)}
    x = correlated_ufloats(vals, {})
    f = C_F * (1 - x["eccentricity"] ** 2) ** 1.5 * x["k1"] ** 3 * x["period"]
    s = umath.sin(umath.radians(x["inclination"]))
    m2 = uncertainties.wrap(m2_of)(f, x["primary_mass"], s)
    got = compute("sb1", _body(vals))["results"]["m2"]
    assert got["value"] == pytest.approx(m2.nominal_value, rel=1e-12)
    assert got["sigma"] == pytest.approx(m2.std_dev, rel=1e-5)


def test_monte_carlo_agrees_with_linear_at_small_errors():
    small = {k: (v, s * 0.01) for k, (v, s) in SB2.items()}
    lin = compute("sb2", _body(small))["results"]
    mc = compute("sb2", _body(small, uncertainty={"method": "monte_carlo", "samples": 20000, "seed": 3}))["results"]
    for name in ("m1", "m2", "semimajor_axis", "mass_ratio"):
        assert mc[name]["value"] == pytest.approx(lin[name]["value"], rel=1e-4)
        # the sample standard deviation of 20000 draws scatters by ~0.5 %
        assert mc[name]["sigma"] == pytest.approx(lin[name]["sigma"], rel=0.03)


def test_monte_carlo_of_a_linear_function_is_normal():
    # a1 sin i is linear in K1: with only K1 uncertain the output is exactly normal (scipy.stats.norm quantiles)
    body = {"period": 41.6, "k1": {"value": 23.4, "sigma": 0.5}, "eccentricity": 0.31,
            "uncertainty": {"method": "monte_carlo", "samples": 40000, "seed": 8}}
    r = compute("sb1", body)["results"]["a1_sin_i"]
    scale = C_A * np.sqrt(1 - 0.31**2) * 41.6
    mu, sd = scale * 23.4, scale * 0.5
    assert r["value"] == pytest.approx(mu, abs=0.02 * sd)
    assert r["sigma"] == pytest.approx(sd, rel=0.02)
    assert r["low"] == pytest.approx(stats.norm.ppf(0.158655, mu, sd), abs=0.03 * sd)
    assert r["high"] == pytest.approx(stats.norm.ppf(0.841345, mu, sd), abs=0.03 * sd)


def test_split_normal_draws():
    # two-piece (split) normal with mode mu, sigma- = 0.5, sigma+ = 1.0: P(x < mu) = s-/(s- + s+) = 1/3 and the
    # median is mu + s+ * Phi^-1(1/2 + (1/2 - 1/3)(s- + s+)/(2 s+)) (from the distribution's definition;
    # e.g. K. F. Wallis (2014), Statistical Science 29, 106)
    mu, sm, sp = 23.4, 0.5, 1.0
    body = {"period": 41.6, "k1": {"value": mu, "sigma_minus": sm, "sigma_plus": sp}, "eccentricity": 0.0,
            "uncertainty": {"method": "monte_carlo", "samples": 50000, "seed": 2}}
    r = compute("sb1", body, keep_draws=True)
    scale = C_A * 41.6
    k = r["_draws"]["a1_sin_i"] / scale
    assert np.mean(k < mu) == pytest.approx(1 / 3, abs=0.01)
    median = mu + sp * stats.norm.ppf(0.5 + (0.5 - 1 / 3) * (sm + sp) / (2 * sp))
    assert np.median(k) == pytest.approx(median, abs=0.02)


def test_samples_are_paired_index_by_index():
    rng = np.random.default_rng(4)
    k1 = rng.normal(38.2, 0.4, 3000)
    k2 = k1 / 0.75          # perfectly correlated posterior: q = K1/K2 is exactly 0.75 in every draw
    body = {"period": 41.6, "k1": {"samples": k1.tolist()}, "k2": {"samples": k2.tolist()}, "eccentricity": 0.31}
    resp = compute("sb2", body)
    q = resp["results"]["mass_ratio"]
    assert q["value"] == pytest.approx(0.75, rel=1e-12)
    assert q["sigma"] < 1e-12
    assert resp["uncertainty"]["samples"] == 3000
    # the median of the user's draws of m2 sin^3 i equals the function at the paired draws' median
    ref = np.median(C_F * (1 - 0.31**2) ** 1.5 * (k1 + k2) ** 2 * k1 * 41.6)
    assert resp["results"]["m2_sin3i"]["value"] == pytest.approx(ref, rel=1e-12)


def test_truncation_to_the_domain_is_counted():
    # e = 0.01 +- 0.05 drawn normally: the fraction below 0 is Phi(-0.2) (scipy.stats.norm)
    body = {"period": 41.6, "k1": 23.4, "eccentricity": {"value": 0.01, "sigma": 0.05},
            "uncertainty": {"method": "monte_carlo", "samples": 40000, "seed": 5}}
    resp = compute("sb1", body)
    assert resp["uncertainty"]["rejected_fraction"] == pytest.approx(stats.norm.cdf(-0.2), abs=0.01)
    assert any(w["code"] == "draws_rejected" for w in resp["warnings"])


def test_seeded_monte_carlo_is_reproducible():
    body = _body(SB2, uncertainty={"method": "monte_carlo", "samples": 5000, "seed": 42})
    a, b = compute("sb2", body), compute("sb2", body)
    assert a["results"] == b["results"]
    c = compute("sb2", {**body, "uncertainty": {"method": "monte_carlo", "samples": 5000, "seed": 43}})
    assert c["results"]["m1"]["value"] != a["results"]["m1"]["value"]
    d = compute("sb2", {**body, "uncertainty": {"method": "monte_carlo", "samples": 5000}})
    assert isinstance(d["uncertainty"]["seed"], int)       # an unseeded run reports the seed it drew


def test_correlations_must_be_positive_definite():
    corr = [{"between": ["k1", "k2"], "rho": 0.9}, {"between": ["k1", "period"], "rho": 0.9},
            {"between": ["k2", "period"], "rho": -0.9}]
    with pytest.raises(Problem) as e:
        compute("sb2", _body(SB2, correlations=corr))
    assert e.value.status == 422 and "correlations" in e.value.errors


def test_linear_warns_when_untrustworthy():
    body = _body({"period": (41.6, 0.02), "k1": (23.4, 8.0), "eccentricity": (0.31, 0.01)})
    codes = [w["code"] for w in compute("sb1", body)["warnings"]]
    assert "linear_untrustworthy" in codes
    body = _body({"period": (41.6, 0.02), "k1": (23.4, 0.3), "eccentricity": (0.02, 0.05)})
    codes = [w["code"] for w in compute("sb1", body)["warnings"]]
    assert "interval_crosses_domain" in codes


def test_one_sided_derivative_at_the_domain_edge():
    # e = 0 exactly on the edge: d f(M)/de = 0 there; the engine must not step outside 0 <= e < 1
    calc = get("sb1")
    q = {"period": Measured.exact(41.6), "k1": Measured.exact(23.4), "eccentricity": Measured.normal(0.0, 0.01)}
    r = evaluate(calc, q, options=Options())
    assert np.isfinite(r.outputs["mass_function"]["sigma"][0])
    # f(M) ~ (1 - e^2)^{3/2}: the one-sided second-order stencil gives |df/de| ~ 3 e f ~ O(h) here
    assert r.outputs["mass_function"]["sigma"][0] < 1e-6 * r.outputs["mass_function"]["value"][0]


def test_engine_is_vectorised_over_systems():
    calc = get("sb2")
    n = 500
    rng = np.random.default_rng(0)
    q = {"period": Measured.normal(rng.uniform(1, 100, n), 0.01), "k1": Measured.normal(rng.uniform(10, 90, n), 0.5),
         "k2": Measured.normal(rng.uniform(20, 120, n), 0.5), "eccentricity": Measured.normal(rng.uniform(0, .8, n), .01),
         "inclination": Measured.normal(rng.uniform(30, 90, n), 1.0)}
    r = evaluate(calc, q, options=Options())
    one = evaluate(calc, {k: Measured(v.value[7:8], v.sigma_minus[7:8], v.sigma_plus[7:8]) for k, v in q.items()})
    for name in ("m1", "m2", "semimajor_axis"):
        assert r.outputs[name]["value"][7] == one.outputs[name]["value"][0]
        assert r.outputs[name]["sigma"][7] == pytest.approx(one.outputs[name]["sigma"][0], rel=1e-12)


# --- one path for one system and for many -------------------------------------------------------
# Every calculation's example and its awkward variants (large sigmas, an exact input, asymmetric
# errors, an input on its domain edge, where a step turns one-sided), stacked as the systems of one
# call, must give each system exactly what it gets alone: the exact-input mask, the one-sided
# steps and the warnings' masks work row by row.

def _example_quantities(calc):
    """The example's quantity inputs as {name: (value, sigma)} and its other inputs as statics, or None."""
    quantities, statics = {}, {}
    for i in calc.inputs:
        v = (calc.example or {}).get(i.name)
        if v is None:
            continue
        if i.kind == "quantity":
            if isinstance(v, dict):
                if "value" not in v or not isinstance(v["value"], (int, float)) or "sigma" not in v:
                    return None
                quantities[i.name] = (float(v["value"]), float(v["sigma"]))
            elif isinstance(v, (int, float)):
                quantities[i.name] = (float(v), 0.0)
            else:
                return None
        elif i.kind == "series":
            return None
        else:
            statics[i.name] = v
    return quantities, statics


def _rows(calc, quantities):
    """Rows of (value, sigma_minus, sigma_plus) per input: the example and its variants."""
    base = {k: (v, s, s) for k, (v, s) in quantities.items()}
    rows = [base, {k: (v, 40 * sm, 40 * sp) for k, (v, sm, sp) in base.items()}]
    uncertain = [k for k, (_, s, _) in base.items() if s > 0]
    if uncertain:
        first = uncertain[0]
        rows.append({**base, first: (base[first][0], 0.0, 0.0)})
        rows.append({**base, first: (base[first][0], base[first][1], 3 * base[first][1])})
    for k in uncertain:
        d = calc.input(k).domain
        if np.isfinite(d.low):
            rows.append({**base, k: (float(np.nextafter(d.low, np.inf)) if d.low_open else d.low, *base[k][1:])})
        if np.isfinite(d.high):
            rows.append({**base, k: (float(np.nextafter(d.high, -np.inf)) if d.high_open else d.high, *base[k][1:])})
    return rows


def _batch_cases():
    from calcservice.registry import calculations
    for name, calc in calculations().items():
        found = _example_quantities(calc) if calc.example else None
        if found and any(s > 0 for _, s in found[0].values()):
            yield pytest.param(calc, *found, id=name)


@pytest.mark.parametrize("calc, quantities, statics", list(_batch_cases()))
def test_each_system_of_a_batch_gets_what_it_gets_alone(calc, quantities, statics):
    rows = _rows(calc, quantities)
    batch = {k: Measured(*(np.array([row[k][c] for row in rows]) for c in range(3))) for k in quantities}
    together = evaluate(calc, batch, statics)
    assert len(rows) >= 3
    for r, row in enumerate(rows):
        alone = evaluate(calc, {k: Measured(*(np.array([row[k][c]]) for c in range(3))) for k in quantities}, statics)
        assert (r in together.failed) == (0 in alone.failed), r
        if r in together.failed:
            continue
        for out, member in alone.outputs.items():
            for key in ("value", "sigma"):
                # 1e-9: a vectorised root finder (the photocentre's) iterates until every system of
                # its call converges, so a system among others may take an extra step
                np.testing.assert_allclose(together.outputs[out][key][r], member[key][0], rtol=1e-9, atol=0,
                                           err_msg=f"row {r} {out} {key}")
        codes_alone = {(w.code, w.subject) for w in alone.warnings if w.where is None or np.asarray(w.where).any()}
        codes_here = {(w.code, w.subject) for w in together.warnings
                      if w.where is None or np.asarray(w.where).reshape(-1)[r % np.size(w.where)]}
        # a warning about an input that is not asymmetric in this row may still be listed for the batch
        assert {c for c in codes_alone if c[0] != "asymmetric_linearised"} == \
               {c for c in codes_here if c[0] != "asymmetric_linearised"}, r


def test_split_normal_within_against_scipy():
    from calcservice.engine import split_normal_within
    v, sm, sp = np.array([2.0]), np.array([1.0]), np.array([3.0])
    # a split normal puts sm / (sm + sp) of its weight below its mode (its halves weighted by their widths)
    assert split_normal_within(v, sm, sp, -np.inf, 2.0)[0] == pytest.approx(0.25, rel=1e-15)
    assert split_normal_within(v, sm, sp, -np.inf, np.inf)[0] == pytest.approx(1.0, rel=1e-15)
    # each half is a normal of its own width scaled to its weight: scipy's normal CDF
    above = 2 * 0.75 * (stats.norm.cdf(5.0, 2.0, 3.0) - 0.5)
    assert split_normal_within(v, sm, sp, 2.0, 5.0)[0] == pytest.approx(above, rel=1e-14)
    # equal halves: a normal
    assert split_normal_within(v, sp, sp, 0.0, 3.0)[0] == pytest.approx(
        stats.norm.cdf(3.0, 2.0, 3.0) - stats.norm.cdf(0.0, 2.0, 3.0), rel=1e-14)
