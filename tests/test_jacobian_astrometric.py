"""Declared analytic Jacobians of the catalogue calculations of astrometry (visual, photocentre) against the
engine's own central differences, against automatic differentiation by the ``uncertainties`` package, and alone
against in a batch.

(a) The engine's linear method is one path whichever way its first-order terms are obtained: the declared
Jacobian and ``dataclasses.replace(calc, jacobian=None)`` (central differences) must give the same values bit
for bit, the same warnings and failed rows, and sigmas, budgets and correlations within the error of the
differences (``tests/test_jacobian.py`` explains the tolerance, RTOL = 1e-6 plus the rounding allowance, and
holds sb1 and sb2 to it; its comparison is used here).

(b) Sigmas and output correlations against ``uncertainties`` (E. O. Lebigot, automatic differentiation of the
same published formulas: Kepler's third law with GM_sun, Hilditch 2001 ch. 2; a = a'' / parallax, the parsec
of IAU 2015 Resolution B2; the photocentre's alpha = a (B - beta), van de Kamp 1967, whose root is found here by
Newton's method carried out on ufloats, so that no implicit function theorem enters the reference).  Both sides
are exact derivatives evaluated in doubles, each written so that no difference cancels (M1 = M / (1 + q), not
(1 - B) M; 1 - B = (1 - beta)(1 - s) in the reference, M1 / (M1 + M2) in the declaration): they differ by the
rounding of a few dozen operations, ~1e-15 relative (seen: below 1e-14, beta within 1e-9 of 1 included).  So
1e-12 holds them with room, where central differences (truncation and rounding, ~1e-11..1e-9 of a sigma, and
far worse where an output is differenced next to 1.0) fail it.
"""

import dataclasses
import math

import numpy as np
import pytest
import uncertainties
from uncertainties import umath

from calcservice.engine import Measured, Options, evaluate
from calcservice.physics import spectroscopic as sp
from calcservice.registry import get

from .test_jacobian import _log_uniform, _measured, _options, assert_agree, both_ways

VISUAL_CORRELATIONS = {("period", "angular_semimajor_axis"): 0.6, ("angular_semimajor_axis", "parallax"): -0.3,
                       ("angular_semimajor_axis", "distance"): 0.3, ("parallax", "mass_ratio"): 0.2,
                       ("distance", "fractional_mass"): -0.2}
PHOTOCENTRE_CORRELATIONS = {("photocentre_semimajor_axis", "period"): 0.5, ("parallax", "primary_mass"): -0.3,
                            ("distance", "primary_mass"): 0.3, ("primary_mass", "luminosity_fraction"): 0.4}


# ---------------------------------------------------------------------------------------------
# random systems across the domains, edges included


def _distance_or_parallax(rng, n, distance):
    if distance:
        return "distance", _measured(rng, _log_uniform(rng, 1.0, 1e5, n), relative=_log_uniform(rng, 1e-7, 0.4, n))
    return "parallax", _measured(rng, _log_uniform(rng, 1e-2, 1e3, n), relative=_log_uniform(rng, 1e-7, 0.4, n))


def visual_systems(rng, n, distance=False, ratio=None):
    """Visual orbits from a day to 3e5 yr, 10 micro-arcseconds to 10 arcseconds, with q from 1e-6 (a planet) to
    1e6 or B from 1e-6 to 1 - 1e-6 (the sigma of B capped at its distance to the nearer edge, where B / (1 - B)
    varies, as test_jacobian caps e's)."""
    q = {"period": _measured(rng, _log_uniform(rng, 1.0, 1e8, n), relative=_log_uniform(rng, 1e-9, 0.3, n)),
         "angular_semimajor_axis": _measured(rng, _log_uniform(rng, 1e-2, 1e4, n),
                                             relative=_log_uniform(rng, 1e-7, 0.4, n))}
    name, plx = _distance_or_parallax(rng, n, distance)
    q[name] = plx
    if ratio == "mass_ratio":
        q["mass_ratio"] = _measured(rng, _log_uniform(rng, 1e-6, 1e6, n), relative=_log_uniform(rng, 1e-7, 0.4, n))
    elif ratio == "fractional_mass":
        b = rng.uniform(0.0, 1.0, n)
        kind = rng.integers(0, 5, n)
        b = np.where(kind == 0, _log_uniform(rng, 1e-6, 1e-2, n), b)                 # a planet's share
        b = np.where(kind == 1, 1.0 - _log_uniform(rng, 1e-6, 1e-2, n), b)          # a heavy companion's
        q["fractional_mass"] = _measured(rng, b, absolute=_log_uniform(rng, 1e-7, 0.1, n),
                                         limit=np.minimum(b, 1.0 - b))
    return q


def photocentre_systems(rng, n, distance=False, beta="random"):
    """Photocentric orbits whose astrometric mass function spans ~1e-20 to ~1e6 solMass, so that the companion
    ranges from M2 << M1 to M2 >> M1, with beta absent, exactly 0 (the closed edge of its domain, where the
    stencil takes one-sided differences), tiny, ordinary, or within 1e-6 of 1 (its sigma capped at 1 - beta)."""
    q = {"photocentre_semimajor_axis": _measured(rng, _log_uniform(rng, 1e-4, 1e3, n),
                                                 relative=_log_uniform(rng, 1e-7, 0.4, n)),
         "period": _measured(rng, _log_uniform(rng, 1.0, 1e5, n), relative=_log_uniform(rng, 1e-9, 0.3, n)),
         "primary_mass": _measured(rng, _log_uniform(rng, 0.01, 150.0, n), relative=_log_uniform(rng, 1e-6, 0.4, n))}
    name, plx = _distance_or_parallax(rng, n, distance)
    q[name] = plx
    if beta is not None:
        b = rng.uniform(0.0, 0.99, n)
        kind = rng.integers(0, 10, n)
        b = np.where(kind <= 1, 0.0, b)                                              # a dark companion
        b = np.where(kind == 2, _log_uniform(rng, 1e-12, 1e-3, n), b)
        b = np.where(kind == 3, 1.0 - _log_uniform(rng, 1e-6, 1e-2, n), b)           # nearly all the light its own
        q["luminosity_fraction"] = _measured(rng, b, absolute=_log_uniform(rng, 1e-7, 0.1, n),
                                             limit=np.where(b > 0, 1.0 - b, 1.0))
    return q


# ---------------------------------------------------------------------------------------------
# (a) declared against central differences


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("ratio", [None, "mass_ratio", "fractional_mass"])
@pytest.mark.parametrize("distance", [False, True])
def test_visual_declared_jacobian_agrees_with_differences(distance, ratio, correlated):
    rng = np.random.default_rng(20261204 + distance + 2 * correlated + 4 * [None, "mass_ratio", "fractional_mass"]
                                .index(ratio))
    q = visual_systems(rng, 400, distance, ratio)
    declared, differenced = both_ways(get("visual"), q, _options(VISUAL_CORRELATIONS if correlated else {}))
    assert_agree(declared, differenced, q)
    assert {"asymmetric_linearised", "linear_untrustworthy"} <= {w.code for w in declared.warnings}


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("beta", [None, "random"])
@pytest.mark.parametrize("distance", [False, True])
def test_photocentre_declared_jacobian_agrees_with_differences(distance, beta, correlated):
    rng = np.random.default_rng(1204 + distance + 2 * correlated + 4 * (beta is None))
    q = photocentre_systems(rng, 400, distance, beta)
    declared, differenced = both_ways(get("photocentre"), q, _options(PHOTOCENTRE_CORRELATIONS if correlated else {}))
    assert_agree(declared, differenced, q)
    m1, m2 = q["primary_mass"].value, declared.outputs["m2"]["value"]
    assert (m2 > 10 * m1).sum() > 10 and (m2 < 1e-3 * m1).sum() > 10        # both limits of the root
    if beta is not None:
        assert "interval_crosses_domain" in {w.code for w in declared.warnings}     # beta = 0 with a sigma


def test_visual_and_photocentre_failed_rows_are_the_same_either_way():
    # a period so short that the total mass overflows (no finite value: a failed row) and an ordinary system
    q = {"period": Measured.normal([1e-160, 7305.0], [1e-162, 12.0]),
         "angular_semimajor_axis": Measured.normal([412.0, 412.0], [3.0, 3.0]),
         "parallax": Measured.normal([48.3, 48.3], [0.4, 0.4]),
         "mass_ratio": Measured.normal([0.72, 0.72], [0.03, 0.0])}
    declared, differenced = both_ways(get("visual"), q, _options(VISUAL_CORRELATIONS))
    assert 0 in declared.failed and 1 not in declared.failed
    assert_agree(declared, differenced, q)
    q = {"photocentre_semimajor_axis": Measured.normal([3.71, 3.71], [0.05, 0.05]),
         "parallax": Measured.normal([21.4, 21.4], [0.03, 0.03]),
         "period": Measured.normal([1e-160, 612.0], [0.0, 4.0]),
         "primary_mass": Measured.normal([1.08, 1.08], [0.05, 0.05]),
         "luminosity_fraction": Measured.normal([0.2, 0.0], [0.01, 0.01])}
    declared, differenced = both_ways(get("photocentre"), q, _options(PHOTOCENTRE_CORRELATIONS))
    assert 0 in declared.failed and 1 not in declared.failed
    assert_agree(declared, differenced, q)


# a wrong derivative is caught: each one's sign flipped in turn, and a small error in one


def _flip(calc, output, wrt, factor=-1.0):
    def jacobian(outputs, **kw):
        j = calc.jacobian(outputs, **kw)
        j[output] = {**j[output], wrt: factor * j[output][wrt]}
        return j
    return dataclasses.replace(calc, jacobian=jacobian)


@pytest.mark.parametrize("name,systems,kw,correlations", [
    ("visual", visual_systems, {"ratio": "mass_ratio"}, VISUAL_CORRELATIONS),
    ("visual", visual_systems, {"distance": True, "ratio": "fractional_mass"}, VISUAL_CORRELATIONS),
    ("photocentre", photocentre_systems, {}, PHOTOCENTRE_CORRELATIONS),
    ("photocentre", photocentre_systems, {"distance": True}, PHOTOCENTRE_CORRELATIONS),
])
def test_every_wrong_sign_is_caught(name, systems, kw, correlations):
    rng = np.random.default_rng(9)
    q = systems(rng, 120, **kw)
    calc = get(name)
    differenced = evaluate(dataclasses.replace(calc, jacobian=None), q, options=_options(correlations))
    arguments = {i.name: (q[i.name].value if i.name in q else None) for i in calc.inputs}
    pairs = [(o, x) for o, of in calc.jacobian(calc.function(**arguments), **arguments).items() for x in of]
    assert len(pairs) >= 20
    for output, wrt in pairs:
        with pytest.raises(AssertionError):
            assert_agree(evaluate(_flip(calc, output, wrt), q, options=_options(correlations)), differenced, q)
    # d ln M2 / d beta (or / dq, / dB) off by one part in 10^4: far above the comparison's tolerance
    wrt = next(x for x in ("luminosity_fraction", "mass_ratio", "fractional_mass") if x in q)
    wrong = evaluate(_flip(calc, "m2", wrt, 1.0 + 1e-4), q, options=_options(correlations))
    with pytest.raises(AssertionError):
        assert_agree(wrong, differenced, q)


# ---------------------------------------------------------------------------------------------
# (b) sigmas and output correlations against ``uncertainties``

GM_SUN, AU, DAY = sp.GM_SUN, sp.AU, sp.SECONDS_PER_DAY


def _kepler_mass(a_au, period):
    """Kepler's third law, M = 4 pi^2 a^3 / (GM_sun P^2) (Hilditch 2001, ch. 2; IAU 2015 B3 GM_sun, IAU 2012 au)."""
    return 4 * math.pi ** 2 * (a_au * AU) ** 3 / (GM_SUN * (period * DAY) ** 2)


def _kepler_axis(total, period):
    return (GM_SUN * total * (period * DAY) ** 2 / (4 * math.pi ** 2)) ** (1 / 3) / AU


def _visual_reference(v):
    plx = v["parallax"] if "parallax" in v else 1000 / v["distance"]
    a = v["angular_semimajor_axis"] / plx
    total = _kepler_mass(a, v["period"])
    out = {"semimajor_axis": a, "total_mass": total, "parallax": plx, "distance": 1000 / plx}
    if "mass_ratio" in v or "fractional_mass" in v:
        if "mass_ratio" in v:
            # M1 = M / (1 + q), M2 = M q / (1 + q) = M / (1 + 1/q): 1 - B would lose the digits of M1 for a large q,
            # and q / (1 + q) differentiated as 1/(1 + q) - q/(1 + q)^2 those of dB/dq
            b, rest = 1 / (1 + 1 / v["mass_ratio"]), 1 / (1 + v["mass_ratio"])
        else:
            b, rest = v["fractional_mass"], 1 - v["fractional_mass"]
        out.update(m1=rest * total, m2=b * total, fractional_mass=b, mass_ratio=b / rest, a1=b * a, a2=rest * a)
    return out


def _photocentre_root(f, m1, beta):
    """B of (B - beta)^3 / (1 - B) = f / M1 by Newton's method on y = logit s, B = beta + (1 - beta) s (the
    iteration of the physics, written afresh), carried out on ufloats: automatic differentiation through it."""
    def nominal(x):
        return getattr(x, "n", x)
    log_r = umath.log(f) - umath.log(m1) - 2 * umath.log(1 - beta)
    y = max(nominal(log_r) / 3, nominal(log_r))
    for _ in range(80):
        s = 1 / (1 + umath.exp(-y))
        g = 3 * umath.log(s) - umath.log(1 - s) - log_r
        y = y - g / (3 - 2 * s)
        if hasattr(y, "derivatives"):
            y.derivatives        # expands y's linear combination in place: else each step nests the last ones
    s, rest = 1 / (1 + umath.exp(-y)), 1 / (1 + umath.exp(y))
    # 1 - B as (1 - beta)(1 - s), not 1 - B, which loses the digits of a companion that outweighs M1
    return beta + (1 - beta) * s, (1 - beta) * rest


def _photocentre_reference(v):
    plx = v["parallax"] if "parallax" in v else 1000 / v["distance"]
    alpha = v["photocentre_semimajor_axis"] / plx
    f = _kepler_mass(alpha, v["period"])
    m1, beta = v["primary_mass"], v.get("luminosity_fraction", 0.0)
    b, rest = _photocentre_root(f, m1, beta)
    m2 = m1 * b / rest
    total = m1 + m2
    a = _kepler_axis(total, v["period"])
    return {"astrometric_mass_function": f, "m2": m2, "semimajor_axis": a, "total_mass": total,
            "mass_ratio": m2 / m1, "fractional_mass": b, "a1": b * a, "photocentre_semimajor_axis_au": alpha,
            "parallax": plx, "distance": 1000 / plx}


VISUAL_POINTS = [
    # period, a'', parallax or distance, q or B: the declaration's example; a planet; q = 1e5; B near 1
    {"period": (7305.0, 12.0), "angular_semimajor_axis": (412.0, 3.0), "parallax": (48.3, 0.4)},
    {"period": (7305.0, 12.0), "angular_semimajor_axis": (412.0, 3.0), "parallax": (48.3, 0.4),
     "mass_ratio": (0.72, 0.03)},
    {"period": (4.1e5, 9e3), "angular_semimajor_axis": (2.1e3, 40.0), "distance": (31.0, 1.5),
     "mass_ratio": (1e-6, 2e-8)},
    {"period": (12.5, 1e-4), "angular_semimajor_axis": (1.3, 0.01), "parallax": (2.2, 0.05),
     "mass_ratio": (1e5, 3e3)},
    {"period": (812.0, 3.0), "angular_semimajor_axis": (25.0, 0.2), "distance": (180.0, 9.0),
     "fractional_mass": (0.42, 0.02)},
    {"period": (812.0, 3.0), "angular_semimajor_axis": (25.0, 0.2), "parallax": (5.5, 0.3),
     "fractional_mass": (1 - 1e-5, 1e-6)},
]

PHOTOCENTRE_POINTS = [
    # alpha'', parallax or distance, P, M1, beta: the example; a luminous companion; an Earth-mass companion of a
    # massive star; a black hole beside a red dwarf; nearly all the light from the companion; beta at 0 with a sigma
    {"photocentre_semimajor_axis": (3.71, 0.05), "parallax": (21.4, 0.03), "period": (612.0, 4.0),
     "primary_mass": (1.08, 0.05)},
    {"photocentre_semimajor_axis": (2.0, 0.05), "distance": (46.7, 0.4), "period": (612.0, 4.0),
     "primary_mass": (1.08, 0.05), "luminosity_fraction": (0.4, 0.02)},
    {"photocentre_semimajor_axis": (1e-6, 1e-8), "parallax": (21.4, 0.03), "period": (612.0, 4.0),
     "primary_mass": (30.0, 2.0), "luminosity_fraction": (1e-3, 1e-4)},
    {"photocentre_semimajor_axis": (800.0, 10.0), "parallax": (100.0, 0.2), "period": (612.0, 4.0),
     "primary_mass": (0.1, 0.01)},
    {"photocentre_semimajor_axis": (1e-4, 1e-6), "parallax": (21.4, 0.03), "period": (612.0, 4.0),
     "primary_mass": (1.08, 0.05), "luminosity_fraction": (0.999, 1e-4)},
    {"photocentre_semimajor_axis": (3.71, 0.05), "parallax": (21.4, 0.03), "period": (612.0, 4.0),
     "primary_mass": (1.08, 0.05), "luminosity_fraction": (0.0, 0.01)},
    # beta within 1e-9 of 1: M2 ~ beta M1 / (1 - beta), d ln M2 / d beta ~ 1e9; the stencil's fractional_mass,
    # differenced next to 1.0, is off by 3e-4 here
    {"photocentre_semimajor_axis": (1e-6, 1e-8), "parallax": (21.4, 0.03), "period": (612.0, 4.0),
     "primary_mass": (30.0, 2.0), "luminosity_fraction": (1 - 1e-9, 1e-10)},
]


def _correlations(names, table):
    return {pair: rho for pair, rho in table.items() if set(pair) <= set(names)}


def _against_uncertainties(calc, given, correlations, reference, rtol):
    """The engine's sigmas and output correlations at ``given`` {input: (value, sigma)} against ``uncertainties``'
    correlated_values through ``reference`` (the published formulas on ufloats)."""
    names = list(given)
    s = np.array([sd for _, sd in given.values()])
    cov = np.diag(s * s)
    for (a, b), rho in correlations.items():
        i, j = names.index(a), names.index(b)
        cov[i, j] = cov[j, i] = rho * s[i] * s[j]
    ref = reference(dict(zip(names, uncertainties.correlated_values([v for v, _ in given.values()], cov))))
    result = evaluate(calc, {n: Measured.normal(v, sd) for n, (v, sd) in given.items()},
                      options=Options(covariance=True, correlations=correlations))
    assert set(result.outputs) == set(ref)
    for name, f in ref.items():
        assert result.outputs[name]["sigma"][0] == pytest.approx(f.std_dev, rel=rtol, abs=0), name
    outputs, matrix = result.correlation
    k = [outputs.index(n) for n in ref]
    np.testing.assert_allclose(matrix[0][np.ix_(k, k)], uncertainties.correlation_matrix(list(ref.values())),
                               rtol=0, atol=rtol)


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("point", VISUAL_POINTS)
def test_visual_sigmas_and_correlations_against_uncertainties(point, correlated):
    correlations = _correlations(point, VISUAL_CORRELATIONS) if correlated else {}
    _against_uncertainties(get("visual"), point, correlations, _visual_reference, 1e-12)


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("point", PHOTOCENTRE_POINTS)
def test_photocentre_sigmas_and_correlations_against_uncertainties(point, correlated):
    correlations = _correlations(point, PHOTOCENTRE_CORRELATIONS) if correlated else {}
    _against_uncertainties(get("photocentre"), point, correlations, _photocentre_reference, 1e-12)


@pytest.mark.parametrize("name,point,reference", [("visual", VISUAL_POINTS[1], _visual_reference),
                                                  ("photocentre", PHOTOCENTRE_POINTS[1], _photocentre_reference)])
def test_central_differences_do_not_reach_the_tolerance_of_the_declared_jacobian(name, point, reference):
    # the tolerance above tells the two paths apart: the stencil's sigmas, good to ~1e-10, miss 1e-12
    differenced = dataclasses.replace(get(name), jacobian=None)
    with pytest.raises(AssertionError):
        _against_uncertainties(differenced, point, {}, reference, 1e-12)
    _against_uncertainties(differenced, point, {}, reference, 1e-8)


def test_the_declared_derivatives_are_uncertainties_derivatives():
    # each d ln f / dx of the declarations against uncertainties' df/dx / f at every point above
    for calc, points, reference in ((get("visual"), VISUAL_POINTS, _visual_reference),
                                    (get("photocentre"), PHOTOCENTRE_POINTS, _photocentre_reference)):
        for point in points:
            variables = {n: uncertainties.ufloat(v, 1.0) for n, (v, _) in point.items()}
            ref = reference(variables)
            inputs = {n: np.array([v]) for n, (v, _) in point.items()}
            declared = calc.jacobian(calc.function(**inputs), **inputs)
            assert set(declared) == set(ref), calc.name
            for name, f in ref.items():
                assert set(declared[name]) <= set(variables), (calc.name, name)
                for x, v in variables.items():
                    want = f.derivatives.get(v, 0.0)
                    got = f.n * float(declared[name].get(x, np.zeros(1))[0])
                    # beside 1e-12 relative, 1e-13 of f / x absolute: a derivative that is 0 by cancellation (a1 =
                    # alpha does not depend on P at beta = 0) comes out of the reference as the rounding of the terms
                    # that cancel
                    scale = abs(f.n) / (abs(v.n) if v.n else 1.0)
                    assert got == pytest.approx(want, rel=1e-12, abs=1e-13 * scale), (calc.name, point, name, x)


# ---------------------------------------------------------------------------------------------
# (c) alone and in a batch, bit for bit


@pytest.mark.parametrize("name,systems,kw", [("visual", visual_systems, {"ratio": "mass_ratio"}),
                                             ("visual", visual_systems, {"distance": True, "ratio": "fractional_mass"}),
                                             ("photocentre", photocentre_systems, {}),
                                             ("photocentre", photocentre_systems, {"distance": True})])
def test_a_system_alone_and_in_a_batch_gets_the_same_bits(name, systems, kw):
    rng = np.random.default_rng(31)
    q = systems(rng, 60, **kw)
    calc = get(name)
    options = _options(PHOTOCENTRE_CORRELATIONS if name == "photocentre" else VISUAL_CORRELATIONS)
    together = evaluate(calc, q, options=options)
    for k in range(60):
        alone = evaluate(calc, {n: Measured(*(np.array([a[k]]) for a in (m.value, m.sigma_minus, m.sigma_plus)))
                                for n, m in q.items()}, options=options)
        assert (k in together.failed) == (0 in alone.failed), k
        for out, member in alone.outputs.items():
            for key in ("value", "sigma"):
                assert together.outputs[out][key][k].tobytes() == member[key][0].tobytes(), (k, out, key)
        for out, shares in alone.budget.items():
            for term, share in shares.items():
                assert together.budget[out][term][k].tobytes() == share[0].tobytes(), (k, out, term)
        # the batch's matrix spans the outputs with a sigma in some system, the system's own those with one in it
        names, matrix = together.correlation
        own, mine = alone.correlation
        index = [names.index(n) for n in own]
        assert matrix[k][np.ix_(index, index)].tobytes() == mine[0].tobytes(), k
        others = [j for j, n in enumerate(names) if n not in own]
        assert np.isnan(matrix[k][others]).all(), k
