"""The uncertainty semantics end to end over HTTP (Flask's test client), against references written
here: the binary-star formulas by hand (R. W. Hilditch 2001, *An Introduction to Close Binary Stars*,
ch. 2; Kepler's third law with the IAU 2015 nominal GM_sun from astropy.constants), linear
propagation by the `uncertainties` package (correlated inputs by uncertainties.correlated_values),
Monte Carlo by brute-force numpy draws, quantiles by numpy.percentile, correlations by numpy.corrcoef,
unit conversions by astropy.units.
"""

import numpy as np
import pytest
import uncertainties
from astropy import constants as const
from astropy import units as u
from uncertainties import umath

from tests.conftest import post
from tests.engine_helpers import correlated_ufloats

GM_SUN = const.GM_sun.si.value          # IAU 2015 Resolution B3 nominal, m^3 s^-2
AU = const.au.si.value                  # IAU 2012 Resolution B2, m
DAY = 86400.0
LOW, HIGH = 15.865525393145708, 84.13447460685429      # percent: the central 68.27 % interval


def sb2_reference(period, k1, k2, eccentricity, inclination, sin=np.sin, radians=np.radians):
    """Hilditch (2001) ch. 2: M1,2 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2,1 / (2 pi G),
    a sin i = P (1 - e^2)^{1/2} (K1 + K2) / (2 pi); masses in solar masses, lengths in au."""
    p, v1, v2 = period * DAY, k1 * 1e3, k2 * 1e3
    root = (1 - eccentricity ** 2) ** 0.5
    m1_sin3i = p * root ** 3 * (v1 + v2) ** 2 * v2 / (2 * np.pi * GM_SUN)
    m2_sin3i = p * root ** 3 * (v1 + v2) ** 2 * v1 / (2 * np.pi * GM_SUN)
    a_sin_i = p * root * (v1 + v2) / (2 * np.pi) / AU
    s = sin(radians(inclination))
    return {"mass_ratio": k1 / k2, "m1_sin3i": m1_sin3i, "m2_sin3i": m2_sin3i, "a_sin_i": a_sin_i,
            "m1": m1_sin3i / s ** 3, "m2": m2_sin3i / s ** 3, "semimajor_axis": a_sin_i / s,
            "periastron_distance": a_sin_i / s * (1 - eccentricity)}


SB2 = {"period": (41.6, 0.02), "k1": (38.2, 0.4), "k2": (51.7, 0.6), "eccentricity": (0.31, 0.01),
       "inclination": (71.0, 2.0)}
RHO = 0.3            # between k1 and k2


def body(values, **options):
    b = {k: {"value": v, "sigma": s} for k, (v, s) in values.items()}
    b.update(options)
    return b


def sb2_uncertain(values, correlations):
    x = correlated_ufloats(values, correlations)
    return sb2_reference(**x, sin=umath.sin, radians=umath.radians)


# ----------------------------------------------------------------------------- linear


def test_linear_sb2_with_correlations_matches_uncertainties(client):
    status, got = post(client, "/v1/spectroscopic/sb2",
                       body(SB2, correlations=[{"between": ["k1", "k2"], "rho": RHO}]))
    assert status == 200, got
    ref = sb2_uncertain(SB2, {("k1", "k2"): RHO})
    for name, r in ref.items():
        assert got["results"][name]["value"] == pytest.approx(r.nominal_value, rel=1e-9), name
        assert got["results"][name]["sigma"] == pytest.approx(r.std_dev, rel=1e-6), name


def test_linear_budget_and_covariance_match_own_derivatives(client):
    status, got = post(client, "/v1/spectroscopic/sb2",
                       body(SB2, correlations=[{"between": ["k1", "k2"], "rho": RHO}], budget=True, covariance=True))
    assert status == 200, got
    names = list(SB2)
    x0 = {k: v for k, (v, _) in SB2.items()}
    sig = {k: s for k, (_, s) in SB2.items()}
    # own central differences, step 1e-6 of each sigma
    terms = {}
    for k in names:
        h = 1e-4 * sig[k]
        up = sb2_reference(**{**x0, k: x0[k] + h})
        down = sb2_reference(**{**x0, k: x0[k] - h})
        terms[k] = {o: (up[o] - down[o]) / (2 * h) * sig[k] for o in up}
    for o in ("m1", "semimajor_axis", "mass_ratio", "periastron_distance"):
        var = sum(terms[k][o] ** 2 for k in names) + 2 * RHO * terms["k1"][o] * terms["k2"][o]
        budget = got["results"][o]["budget"]
        assert sum(budget.values()) == pytest.approx(1.0, abs=1e-9), o
        for k in names:
            if terms[k][o] == 0:
                assert budget.get(k, 0.0) == pytest.approx(0.0, abs=1e-12), (o, k)
            else:
                assert budget[k] == pytest.approx(terms[k][o] ** 2 / var, rel=1e-5, abs=1e-9), (o, k)
        assert budget["k1,k2"] == pytest.approx(2 * RHO * terms["k1"][o] * terms["k2"][o] / var, rel=1e-5), o
    # correlation: J Sigma J^T, here by `uncertainties`
    ref = sb2_uncertain(SB2, {("k1", "k2"): RHO})
    outputs = got["correlation"]["outputs"]
    matrix = np.array(got["correlation"]["matrix"])
    common = [o for o in outputs if o in ref]
    expected = np.array(uncertainties.correlation_matrix([ref[o] for o in common]))
    index = [outputs.index(o) for o in common]
    np.testing.assert_allclose(matrix[np.ix_(index, index)], expected, atol=1e-6)


def test_output_units_scale_values_sigmas_and_intervals_but_not_shares(client):
    options = dict(correlations=[{"between": ["k1", "k2"], "rho": RHO}], budget=True, covariance=True)
    _, plain = post(client, "/v1/spectroscopic/sb2", body(SB2, **options))
    _, other = post(client, "/v1/spectroscopic/sb2",
                    body(SB2, units={"semimajor_axis": "solRad", "m1": "kg", "a_sin_i": "km"}, **options))
    for name, unit in (("semimajor_axis", u.R_sun), ("m1", u.kg), ("a_sin_i", u.km)):
        factor = (1 * u.Unit(plain["results"][name]["unit"])).to_value(unit)   # astropy's conversion
        assert other["results"][name]["value"] == pytest.approx(plain["results"][name]["value"] * factor, rel=1e-12)
        assert other["results"][name]["sigma"] == pytest.approx(plain["results"][name]["sigma"] * factor, rel=1e-12)
        assert other["results"][name]["budget"] == pytest.approx(plain["results"][name]["budget"], rel=1e-12)
    np.testing.assert_allclose(other["correlation"]["matrix"], plain["correlation"]["matrix"], rtol=1e-12)
    # Monte Carlo: low and high scale too
    mc = {"uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 5}}
    _, plain = post(client, "/v1/spectroscopic/sb2", body(SB2, **mc))
    _, other = post(client, "/v1/spectroscopic/sb2", body(SB2, units={"semimajor_axis": "solRad"}, **mc))
    factor = (1 * u.au).to_value(u.R_sun)
    for key in ("value", "sigma", "low", "high"):
        assert other["results"]["semimajor_axis"][key] == pytest.approx(
            plain["results"]["semimajor_axis"][key] * factor, rel=1e-12), key


def test_linear_zero_sigma_inputs_are_exact(client):
    # sigma 0 on period and inclination: the same answer as those inputs given as bare numbers
    values = {**SB2, "period": (41.6, 0.0), "inclination": (71.0, 0.0)}
    status, got = post(client, "/v1/spectroscopic/sb2", body(values, budget=True))
    assert status == 200, got
    bare = body({k: v for k, v in values.items() if k not in ("period", "inclination")}, budget=True)
    _, ref_answer = post(client, "/v1/spectroscopic/sb2", {**bare, "period": 41.6, "inclination": 71.0})
    ref = sb2_uncertain({k: v for k, v in values.items()}, {})
    for name in ("m1", "semimajor_axis"):
        assert got["results"][name]["sigma"] == pytest.approx(ref[name].std_dev, rel=1e-6)
        assert got["results"][name]["sigma"] == pytest.approx(ref_answer["results"][name]["sigma"], rel=1e-12)
        assert sum(got["results"][name]["budget"].values()) == pytest.approx(1.0, abs=1e-9)
        assert got["results"][name]["budget"].get("period", 0.0) == 0.0


# ----------------------------------------------------------------------------- asymmetric errors


def split_normal(rng, mode, minus, plus, n):
    """Draws of a split normal with its mode at ``mode``: the left half-normal of width ``minus`` taken
    with probability minus / (minus + plus), else the right one (the README's definition)."""
    left = rng.uniform(size=n) < minus / (minus + plus)
    z = np.abs(rng.standard_normal(n))
    return np.where(left, mode - minus * z, mode + plus * z)


def test_asymmetric_inputs_linear_uses_the_mean_of_the_sides(client):
    values = {**SB2, "inclination": None}
    b = body({k: v for k, v in values.items() if v is not None})
    b["inclination"] = {"value": 71.0, "sigma_minus": 1.0, "sigma_plus": 3.0}
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    ref = sb2_uncertain({**SB2, "inclination": (71.0, 2.0)}, {})
    assert got["results"]["m1"]["sigma"] == pytest.approx(ref["m1"].std_dev, rel=1e-6)
    assert "asymmetric_linearised" in {w["code"] for w in got["warnings"]}


def test_asymmetric_inputs_monte_carlo_is_a_split_normal(client):
    b = body({k: v for k, v in SB2.items() if k != "inclination"},
             uncertainty={"method": "monte_carlo", "samples": 20000, "seed": 21})
    b["inclination"] = {"value": 71.0, "sigma_minus": 1.0, "sigma_plus": 6.0}
    b["k1"] = {"value": 38.2, "sigma_minus": 1.2, "sigma_plus": 0.3}
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    rng = np.random.default_rng(4)
    n = 200_000
    draws = {k: v + s * rng.standard_normal(n) for k, (v, s) in SB2.items()}
    draws["inclination"] = split_normal(rng, 71.0, 1.0, 6.0, n)
    draws["k1"] = split_normal(rng, 38.2, 1.2, 0.3, n)
    ref = sb2_reference(**draws)
    for name in ("m1", "m2", "semimajor_axis"):
        med, low, high = np.percentile(ref[name], [50, LOW, HIGH])
        r = got["results"][name]
        width = high - low
        # 20,000 draws place a quantile within ~0.01 of the interval's width (sqrt(p (1 - p) / N) / f)
        assert r["value"] == pytest.approx(med, abs=0.03 * width), name
        assert r["low"] == pytest.approx(low, abs=0.04 * width), name
        assert r["high"] == pytest.approx(high, abs=0.04 * width), name
        assert r["sigma"] == pytest.approx(np.std(ref[name]), rel=0.05), name


# ----------------------------------------------------------------------------- the user's own samples


def test_samples_are_summarised_as_the_formula_on_each_draw(client):
    rng = np.random.default_rng(8)
    n = 3000
    k1 = 38.2 + 0.4 * rng.standard_normal(n)
    k2 = 51.7 + 0.6 * rng.standard_normal(n) + 0.5 * (k1 - 38.2)      # paired, correlated draws
    e = np.abs(0.31 + 0.01 * rng.standard_normal(n))
    b = {"period": 41.6, "k1": {"samples": k1.tolist()}, "k2": {"samples": k2.tolist()},
         "eccentricity": {"samples": e.tolist()}, "inclination": 71.0, "covariance": True}
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    ref = sb2_reference(41.6, k1, k2, e, 71.0)
    for name in ("m1", "m2", "semimajor_axis", "mass_ratio"):
        med, low, high = np.percentile(ref[name], [50, LOW, HIGH])
        r = got["results"][name]
        assert r["value"] == pytest.approx(med, rel=1e-9), name
        assert r["low"] == pytest.approx(low, rel=1e-9), name
        assert r["high"] == pytest.approx(high, rel=1e-9), name
        assert r["sigma"] == pytest.approx(np.std(ref[name], ddof=1), rel=1e-9), name
    outputs = got["correlation"]["outputs"]
    matrix = np.array(got["correlation"]["matrix"])
    pick = ["m1", "m2", "mass_ratio"]
    expected = np.corrcoef([ref[o] for o in pick])
    index = [outputs.index(o) for o in pick]
    np.testing.assert_allclose(matrix[np.ix_(index, index)], expected, atol=1e-9)
    assert got["uncertainty"]["rejected_fraction"] == 0.0


def test_samples_outside_the_domain_are_rejected_and_counted(client):
    rng = np.random.default_rng(9)
    n = 2000
    e = 0.02 + 0.03 * rng.standard_normal(n)                 # about a quarter below 0
    b = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": {"samples": e.tolist()}, "inclination": 71.0}
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    kept = e[(e >= 0) & (e < 1)]
    assert got["uncertainty"]["rejected_fraction"] == pytest.approx(1 - kept.size / n, abs=1e-12)
    assert "draws_rejected" in {w["code"] for w in got["warnings"]}
    ref = sb2_reference(41.6, 38.2, 51.7, kept, 71.0)
    assert got["results"]["m1"]["value"] == pytest.approx(np.median(ref["m1"]), rel=1e-9)


# ----------------------------------------------------------------------------- Monte Carlo


def test_monte_carlo_correlation_and_spread_match_brute_force(client):
    b = body(SB2, correlations=[{"between": ["k1", "k2"], "rho": RHO}], covariance=True,
             uncertainty={"method": "monte_carlo", "samples": 20000, "seed": 2})
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    rng = np.random.default_rng(3)
    n = 100_000
    z1, z2 = rng.standard_normal((2, n))
    draws = {k: v + s * rng.standard_normal(n) for k, (v, s) in SB2.items()}
    draws["k1"] = 38.2 + 0.4 * z1
    draws["k2"] = 51.7 + 0.6 * (RHO * z1 + np.sqrt(1 - RHO ** 2) * z2)
    ref = sb2_reference(**draws)
    outputs = got["correlation"]["outputs"]
    matrix = np.array(got["correlation"]["matrix"])
    pick = ["m1", "m2", "semimajor_axis", "mass_ratio"]
    index = [outputs.index(o) for o in pick]
    # the correlation of 20,000 draws is within ~(1 - rho^2) / sqrt(N) ~ 0.007 of the truth
    np.testing.assert_allclose(matrix[np.ix_(index, index)], np.corrcoef([ref[o] for o in pick]), atol=0.03)
    for o in pick:
        assert got["results"][o]["sigma"] == pytest.approx(np.std(ref[o]), rel=0.04), o


def test_monte_carlo_is_reproducible_with_a_seed(client):
    b = body(SB2, uncertainty={"method": "monte_carlo", "samples": 2000, "seed": 77})
    _, first = post(client, "/v1/spectroscopic/sb2", b)
    _, second = post(client, "/v1/spectroscopic/sb2", b)
    assert first["results"] == second["results"]
    status, batch = post(client, "/v1/batch/sb2", {"systems": [{k: v for k, v in b.items() if k != "uncertainty"}],
                                                    "uncertainty": b["uncertainty"]})
    assert status == 200, batch
    assert batch["results"][0]["results"] == first["results"]


def test_a_system_gets_the_same_monte_carlo_answer_alone_and_anywhere_in_a_batch(client):
    # with one seed, a system's numbers do not depend on the other systems of the batch or its place
    u = {"method": "monte_carlo", "samples": 2000, "seed": 5}
    systems = [{"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": 51.7, "eccentricity": 0.31},
               {"period": 30.0, "k1": {"value": 30.0, "sigma": 0.4}, "k2": 40.0, "eccentricity": 0.1},
               {"period": 12.0, "k1": {"value": 61.0, "sigma": 2.0}, "k2": 70.0, "eccentricity": 0.5}]
    alone = [post(client, "/v1/spectroscopic/sb2", {**one, "uncertainty": u})[1]["results"] for one in systems]
    status, batch = post(client, "/v1/batch/sb2", {"systems": systems, "uncertainty": u})
    assert status == 200, batch
    assert [row["results"] for row in batch["results"]] == alone
    status, reverse = post(client, "/v1/batch/sb2", {"systems": systems[::-1], "uncertainty": u})
    assert [row["results"] for row in reverse["results"]] == alone[::-1]


def test_eccentricity_draws_crossing_zero_and_one_are_rejected_and_warned(client):
    for e, sigma in ((0.01, 0.02), (0.97, 0.03)):
        b = body({**SB2, "eccentricity": (e, sigma)}, uncertainty={"method": "monte_carlo", "samples": 20000,
                                                                    "seed": 6})
        status, got = post(client, "/v1/spectroscopic/sb2", b)
        assert status == 200, got
        # the fraction of a normal outside [0, 1): scipy-free, the normal CDF by math.erf
        from math import erf, sqrt
        cdf = lambda x: 0.5 * (1 + erf(x / sqrt(2)))
        outside = cdf((0 - e) / sigma) + 1 - cdf((1 - e) / sigma)
        assert got["uncertainty"]["rejected_fraction"] == pytest.approx(outside, abs=0.01), e
        assert "draws_rejected" in {w["code"] for w in got["warnings"]}


def test_linear_eccentricity_interval_crossing_zero_is_warned(client):
    status, got = post(client, "/v1/spectroscopic/sb2", body({**SB2, "eccentricity": (0.01, 0.02)}))
    assert status == 200, got
    assert "interval_crosses_domain" in {w["code"] for w in got["warnings"]}
    # the derivative is still the one at e = 0.01 (the step stays inside): `uncertainties`
    ref = sb2_uncertain({**SB2, "eccentricity": (0.01, 0.02)}, {})
    assert got["results"]["m1"]["sigma"] == pytest.approx(ref["m1"].std_dev, rel=1e-6)


def test_inclination_sigma_across_90(client):
    # i = 89 +- 3: sin i is flat at 90, so the linear sigma of M from i is small but exists; the draws
    # above 90 are retrograde orbits with the same sin i, so the Monte Carlo keeps them all
    values = {**SB2, "inclination": (89.0, 3.0)}
    status, lin = post(client, "/v1/spectroscopic/sb2", body(values))
    ref = sb2_uncertain(values, {})
    assert lin["results"]["m1"]["sigma"] == pytest.approx(ref["m1"].std_dev, rel=1e-6)
    status, mc = post(client, "/v1/spectroscopic/sb2", body(values, uncertainty={"method": "monte_carlo",
                                                                                 "samples": 20000, "seed": 1}))
    assert mc["uncertainty"]["rejected_fraction"] == 0.0
    rng = np.random.default_rng(12)
    n = 200_000
    draws = {k: v + s * rng.standard_normal(n) for k, (v, s) in values.items()}
    m1 = sb2_reference(**draws)["m1"]
    med, low, high = np.percentile(m1, [50, LOW, HIGH])
    width = high - low
    assert mc["results"]["m1"]["value"] == pytest.approx(med, abs=0.03 * width)
    assert mc["results"]["m1"]["low"] == pytest.approx(low, abs=0.04 * width)
    assert mc["results"]["m1"]["high"] == pytest.approx(high, abs=0.04 * width)


# ----------------------------------------------------------------------------- other calculations, linear


def linear_check(client, path, values, reference, outputs, correlations=None, rel_value=1e-9, extra=None):
    """The service's linear values and sigmas against `uncertainties` on ``reference`` (a function of
    the inputs by keyword returning {output: value}); returns the answer."""
    correlations = correlations or {}
    b = body(values, **(extra or {}))
    if correlations:
        b["correlations"] = [{"between": list(pair), "rho": rho} for pair, rho in correlations.items()]
    status, got = post(client, path, b)
    assert status == 200, got
    ref = reference(**correlated_ufloats(values, correlations))
    for name in outputs:
        r = ref[name]
        assert got["results"][name]["value"] == pytest.approx(r.nominal_value, rel=rel_value), name
        assert got["results"][name]["sigma"] / got["results"][name]["value"] == pytest.approx(
            r.std_dev / r.nominal_value, rel=1e-5), name
    return got


def visual_reference(period, angular_semimajor_axis, parallax=None, distance=None, mass_ratio=None):
    """a = a''/parallax (the parsec's definition); M = 4 pi^2 a^3 / (GM_sun P^2); M1 = M / (1 + q)."""
    plx = parallax if parallax is not None else 1000.0 / distance
    a = angular_semimajor_axis / plx
    total = 4 * np.pi ** 2 * (a * AU) ** 3 / (GM_SUN * (period * DAY) ** 2)
    out = {"semimajor_axis": a, "total_mass": total}
    if mass_ratio is not None:
        out.update({"m1": total / (1 + mass_ratio), "m2": total * mass_ratio / (1 + mass_ratio)})
    return out


def test_visual_orbit_linear(client):
    values = {"period": (3652.5, 20.0), "angular_semimajor_axis": (412.0, 3.0), "parallax": (21.3, 0.4)}
    linear_check(client, "/v1/astrometric/visual", values, visual_reference, ["semimajor_axis", "total_mass"],
                 correlations={("angular_semimajor_axis", "parallax"): 0.4})
    values = {"period": (3652.5, 20.0), "angular_semimajor_axis": (412.0, 3.0), "distance": (47.0, 0.9),
              "mass_ratio": (0.7, 0.05)}
    linear_check(client, "/v1/astrometric/visual", values, visual_reference, ["total_mass", "m1", "m2"])


def orbital_parallax_reference(period, k1, k2, eccentricity, inclination, angular_semimajor_axis):
    """SB2 + visual orbit (Heintz 1978; Hilditch 2001): a = a sin i / sin i, parallax = a''/a."""
    sb2 = sb2_reference(period, k1, k2, eccentricity, inclination, sin=umath.sin, radians=umath.radians)
    a = sb2["semimajor_axis"]
    plx = angular_semimajor_axis / a
    return {"parallax": plx, "distance": 1000.0 / plx, "m1": sb2["m1"], "m2": sb2["m2"], "semimajor_axis": a}


def test_orbital_parallax_linear(client):
    values = {**SB2, "angular_semimajor_axis": (7.9, 0.08)}
    linear_check(client, "/v1/combined/orbital-parallax", values, orbital_parallax_reference,
                 ["parallax", "distance", "m1", "m2", "semimajor_axis"], correlations={("k1", "k2"): -0.2})


def eggleton(q):
    """Eggleton (1983) ApJ 268, 368: r_L / a = 0.49 q^{2/3} / (0.6 q^{2/3} + ln(1 + q^{1/3}))."""
    return 0.49 * q ** (2 / 3) / (0.6 * q ** (2 / 3) + umath.log(1 + q ** (1 / 3)))


def geometry_reference(period, eccentricity, m1, m2):
    """Kepler's third law; vis-viva v^2 = G M (2/r - 1/a); Roche lobes at periastron (Eggleton 1983)."""
    total = m1 + m2
    a = (GM_SUN * total * (period * DAY) ** 2 / (4 * np.pi ** 2)) ** (1 / 3)       # m
    rp = a * (1 - eccentricity)
    r_sun = const.R_sun.si.value
    return {"semimajor_axis": a / AU, "periastron_distance": rp / AU,
            "speed_periastron": (GM_SUN * total * (2 / rp - 1 / a)) ** 0.5 / 1e3,
            "roche_lobe1": rp * eggleton(m1 / m2) / r_sun, "roche_lobe2": rp * eggleton(m2 / m1) / r_sun}


def test_geometry_linear(client):
    values = {"period": (5.6, 0.001), "eccentricity": (0.12, 0.02), "m1": (14.0, 1.0), "m2": (9.0, 0.8)}
    linear_check(client, "/v1/orbit/geometry", values, geometry_reference,
                 ["semimajor_axis", "periastron_distance", "speed_periastron", "roche_lobe1", "roche_lobe2"],
                 correlations={("m1", "m2"): 0.6})


def collision_reference(mdot1, mdot2, vinf1, vinf2, separation):
    """eta = Mdot2 v2 / (Mdot1 v1); r1 = D / (1 + eta^{1/2}); Eichler & Usov (1993):
    theta = 2.1 (1 - eta^{2/5} / 4) eta^{1/3} rad."""
    eta = mdot2 * vinf2 / (mdot1 * vinf1)
    return {"momentum_ratio": eta, "stagnation_distance1": separation / (1 + eta ** 0.5),
            "stagnation_distance2": separation * eta ** 0.5 / (1 + eta ** 0.5),
            "opening_half_angle_eu93": umath.degrees(2.1 * (1 - eta ** 0.4 / 4) * eta ** (1 / 3))}


def test_colliding_winds_linear(client):
    values = {"mdot1": (3e-6, 0.5e-6), "mdot2": (4e-7, 1e-7), "vinf1": (2500.0, 100.0), "vinf2": (1800.0, 150.0),
              "separation": (1.9, 0.05)}
    linear_check(client, "/v1/winds/collision", values, collision_reference,
                 ["momentum_ratio", "stagnation_distance1", "stagnation_distance2", "opening_half_angle_eu93"],
                 correlations={("mdot1", "vinf1"): -0.3})


def radio_reference(flux_density, frequency, distance, vinf, mu, z_rms, gamma_e, temperature):
    """Wright & Barlow (1975) MNRAS 170, 41 (from memory): Mdot = 0.095 mu v S^{3/4} d^{3/2} /
    (Z gamma^{1/2} g^{1/2} nu^{1/2}) solMass/yr, S in Jy, d in kpc, nu in Hz, v in km/s; Gaunt factor
    g = 9.77 (1 + 0.13 log10(T^{3/2} / (Z nu))) (Leitherer & Robert 1991, ApJ 377, 629)."""
    nu = frequency * 1e9
    g = 9.77 * (1 + 0.13 * umath.log10(temperature ** 1.5 / (z_rms * nu)))
    mdot = (0.095 * mu * vinf * (flux_density * 1e-3) ** 0.75 * distance ** 1.5
            / (z_rms * gamma_e ** 0.5 * g ** 0.5 * nu ** 0.5))
    return {"mass_loss_rate": mdot, "gaunt_factor": g}


def test_radio_mass_loss_linear(client):
    values = {"flux_density": (0.42, 0.04), "frequency": (8.4, 0.0), "distance": (1.8, 0.2), "vinf": (2200.0, 200.0),
              "mu": (1.3, 0.0), "z_rms": (1.0, 0.0), "gamma_e": (1.0, 0.0), "temperature": (20000.0, 3000.0)}
    linear_check(client, "/v1/winds/mass-loss/radio", values, radio_reference, ["mass_loss_rate", "gaunt_factor"],
                 rel_value=0.02)


def sb1_companion_mass(period, k1, eccentricity, primary_mass, inclination):
    """The root M2 of f(M) = (M2 sin i)^3 / (M1 + M2)^2 (Hilditch 2001, ch. 2), by numpy's polynomial
    roots: (M2 sin i)^3 - f M2^2 - 2 f M1 M2 - f M1^2 = 0, its one positive real root."""
    f = period * DAY * (k1 * 1e3) ** 3 * (1 - eccentricity ** 2) ** 1.5 / (2 * np.pi * GM_SUN)
    s3 = np.sin(np.radians(inclination)) ** 3
    roots = np.roots([s3, -f, -2 * f * primary_mass, -f * primary_mass ** 2])
    return float(max(r.real for r in roots if abs(r.imag) < 1e-9 and r.real > 0)), f


def test_sb1_companion_mass_linear_against_own_differences(client):
    values = {"period": (3.4172, 0.0004), "k1": (61.4, 0.9), "eccentricity": (0.05, 0.01), "primary_mass": (1.2, 0.1),
              "inclination": (63.0, 4.0)}
    status, got = post(client, "/v1/spectroscopic/sb1", body(values, budget=True))
    assert status == 200, got
    x0 = {k: v for k, (v, _) in values.items()}
    m2, f = sb1_companion_mass(**x0)
    assert got["results"]["m2"]["value"] == pytest.approx(m2, rel=1e-9)
    assert got["results"]["mass_function"]["value"] == pytest.approx(f, rel=1e-9)
    terms = {}
    for k, (v, s) in values.items():
        h = 1e-4 * s
        terms[k] = (sb1_companion_mass(**{**x0, k: v + h})[0] - sb1_companion_mass(**{**x0, k: v - h})[0]) / (2 * h) * s
    sigma = np.sqrt(sum(t * t for t in terms.values()))
    assert got["results"]["m2"]["sigma"] == pytest.approx(sigma, rel=1e-5)
    for k, t in terms.items():
        assert got["results"]["m2"]["budget"][k] == pytest.approx(t * t / sigma ** 2, rel=1e-4, abs=1e-10), k


def test_monte_carlo_budget_estimates_the_linear_shares_of_a_nearly_linear_case(client):
    # small errors: the function is nearly linear over them, so holding an input fixed removes its
    # linear share (df/dx sigma)^2 / var, here by `uncertainties`' derivatives (its error_components)
    b = body(SB2, budget=True, uncertainty={"method": "monte_carlo", "samples": 20000, "seed": 13})
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    x = {k: uncertainties.ufloat(v, sd) for k, (v, sd) in SB2.items()}
    ref = sb2_reference(**x, sin=umath.sin, radians=umath.radians)
    for name in ("m1", "semimajor_axis"):
        components = ref[name].error_components()
        var = ref[name].std_dev ** 2
        for k, v in x.items():
            share = components.get(v, 0.0) ** 2 / var
            # 20,000 draws: a share's sampling error is ~ sqrt(2 / N) ~ 0.01 of the variance
            assert got["results"][name]["budget"][k] == pytest.approx(share, abs=0.03), (name, k)


@pytest.mark.parametrize("rho", [1.0, -1.0])
def test_a_perfect_correlation_is_one_input_driving_another(client, rho):
    # rho = +-1: k2 = 51.7 + rho (0.6 / 0.4) (k1 - 38.2), a matrix inputs can have (positive
    # semi-definite).  Linear: `uncertainties` with k2 a function of k1; Monte Carlo: brute force.
    values = {k: v for k, v in SB2.items()}
    b = body(values, correlations=[{"between": ["k1", "k2"], "rho": rho}])
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    x = {k: uncertainties.ufloat(v, s) for k, (v, s) in values.items()}
    x["k2"] = 51.7 + rho * 0.6 / 0.4 * (x["k1"] - 38.2)
    ref = sb2_reference(**x, sin=umath.sin, radians=umath.radians)
    for name in ("m1", "m2", "mass_ratio", "semimajor_axis"):
        assert got["results"][name]["sigma"] == pytest.approx(ref[name].std_dev, rel=1e-6), name
    b["uncertainty"] = {"method": "monte_carlo", "samples": 20000, "seed": 3}
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    rng = np.random.default_rng(1)
    n = 200_000
    draws = {k: v + s * rng.standard_normal(n) for k, (v, s) in values.items()}
    draws["k2"] = 51.7 + rho * 0.6 / 0.4 * (draws["k1"] - 38.2)
    ref = sb2_reference(**draws)
    for name in ("m1", "mass_ratio"):
        med, low, high = np.percentile(ref[name], [50, LOW, HIGH])
        width = high - low
        assert got["results"][name]["value"] == pytest.approx(med, abs=0.03 * width), name
        assert got["results"][name]["low"] == pytest.approx(low, abs=0.04 * width), name
        assert got["results"][name]["high"] == pytest.approx(high, abs=0.04 * width), name


def test_correlations_no_inputs_can_have_are_refused(client):
    values = {**SB2}
    b = body(values, correlations=[{"between": ["k1", "k2"], "rho": 0.9}, {"between": ["k1", "period"], "rho": 0.9},
                                   {"between": ["k2", "period"], "rho": -0.9}])
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 422 and "correlations" in got["errors"]


def test_a_correlation_with_an_exact_input_is_said_to_have_no_effect(client):
    values = {k: v for k, v in SB2.items() if k != "inclination"}
    b = body(values, correlations=[{"between": ["k1", "inclination"], "rho": 0.5}])
    b["inclination"] = 71.0
    status, got = post(client, "/v1/spectroscopic/sb2", b)
    assert status == 200, got
    assert "correlation_without_effect" in {w["code"] for w in got["warnings"]}
    # and the numbers are those without it (`uncertainties`, inclination exact)
    ref = sb2_uncertain({**values, "inclination": (71.0, 0.0)}, {})
    assert got["results"]["m1"]["sigma"] == pytest.approx(ref["m1"].std_dev, rel=1e-6)
    status, got = post(client, "/v1/spectroscopic/sb2", body(SB2, correlations=[{"between": ["k1", "k2"], "rho": 0.5}]))
    assert "correlation_without_effect" not in {w["code"] for w in got["warnings"]}
