"""Declared analytic Jacobians (sb2, sb1) against the engine's own central differences and against
automatic differentiation by the ``uncertainties`` package.  ``tests/test_jacobian_astrometric.py`` holds
visual's and photocentre's to the same comparison (``assert_agree``).

The engine's linear method is one path whichever way its first-order terms are obtained, so the
same request evaluated with the declared Jacobian and with ``dataclasses.replace(calc,
jacobian=None)`` (central differences, the general path) must give the same values, the same sigmas,
budgets and correlation matrices to within the error of the differences, and the same warnings and
failed rows.

How close the differences come (the tolerance of the comparison).  The engine's step is
h = 1e-5 of the distance to the nearest open bound of the input's domain (every input here has
one: 1 - e for e, x for a period, min(i, 180 deg - i); the rule the engine's step function
documents, rebuilt here), shortened where the stencil bends by more than 1e-4 (never for these
powers and roots).  A central difference is then wrong by

* truncation, f''' h^2 / 6 relative to f' h: (h / L)^2 where L is the distance over which the
  function changes by its own size; L >= |x| for powers, L = 1 - e or 180 deg - i near those
  edges, where the systems below keep h / L <= 1e-4, so below 1e-8;
* rounding of the two values differenced, a few tens of ulps of f (a formula of ~20 rounded
  operations) over 2h, i.e. an absolute error of ~64 eps |f| sigma / h in each input's term
  (in ``_allowance`` below; it matters where a term is exactly or nearly zero, i = 90 deg, and
  where the sigmas are tiny);
* at e = 0 exactly, the only point of these domains where a step leaves the domain, a one-sided
  difference of second order over e = 0, h, 2h (h = 1e-5): exact for a (1 -+ e), and for the even
  (1 - e^2)^{n/2}, whose slope is 0 there, off by ~ h^3 f'''' sigma_e, allowed as 2 h^2 sigma_e |f|.

Sigmas must agree to RTOL = 1e-6 of the sigma plus those absolute allowances (the errors of
the terms add, ||t + d|| <= ||t|| + ||d|| for the input correlation's norm); budgets and correlation
coefficients, which are ratios of such terms, to a few times the relative allowance.  RTOL is well
above what is seen (sigmas within 3e-8 where the allowances are negligible, within a quarter of
the tolerance everywhere) and far below any error of a derivative: the deliberate-error tests
flip the sign of each derivative in turn, or scale one by 1 + 1e-4, and require the comparison
to fail.
"""

import dataclasses
import math

import numpy as np
import pytest
import uncertainties
from hypothesis import given, settings
from hypothesis import strategies as st
from uncertainties import umath

from calcservice.engine import LINEAR_TRUST_LIMIT, RELATIVE_STEP, Measured, Options, evaluate
from calcservice.physics import spectroscopic as sp
from calcservice.registry import Calculation, Input, Output, get, register

RTOL = 1e-6
EPS = np.finfo(float).eps

SB2_CORRELATIONS = {("k1", "k2"): 0.7, ("period", "eccentricity"): -0.4, ("k1", "inclination"): 0.2}
SB1_CORRELATIONS = {("k1", "primary_mass"): 0.5, ("period", "eccentricity"): -0.4,
                    ("primary_mass", "inclination"): -0.3}


# ---------------------------------------------------------------------------------------------
# random systems across the domains, edges included


def _log_uniform(rng, low, high, n):
    return 10 ** rng.uniform(math.log10(low), math.log10(high), n)


def _eccentricities(rng, n):
    e = rng.uniform(0.0, 0.95, n)
    kind = rng.integers(0, 10, n)
    e = np.where(kind == 0, 0.0, e)                                     # circular orbits
    e = np.where(kind == 1, 1.0 - _log_uniform(rng, 1e-3, 1e-1, n), e)  # near parabolic
    return e


def _inclinations(rng, n):
    i = rng.uniform(1.0, 179.0, n)
    kind = rng.integers(0, 10, n)
    i = np.where(kind == 0, _log_uniform(rng, 1e-4, 1.0, n), i)              # nearly face-on
    i = np.where(kind == 1, 180.0 - _log_uniform(rng, 2e-2, 1.0, n), i)      # face-on, retrograde
    i = np.where(kind == 2, 90.0, i)                                          # edge-on: d sin i / di = 0
    i = np.where(kind == 3, 90.0 + rng.normal(0.0, 1e-3, n), i)
    return i


def _measured(rng, value, relative=None, absolute=None, limit=None):
    """``value`` with random errors: exact in some systems, asymmetric in others, sigmas from tiny to
    large; ``limit`` caps the sigma where the domain's edge is near (so that the central difference
    of the general path stays within its own accuracy, h / L <= 1e-4, see the module docstring)."""
    n = len(value)
    size = relative * np.abs(value) if relative is not None else absolute
    if limit is not None:
        size = np.minimum(size, limit)
    kind = rng.integers(0, 8, n)
    minus = np.where(kind == 0, 0.0, size)                                   # exact
    plus = np.where(kind >= 6, minus * rng.uniform(0.3, 3.0, n), minus)      # asymmetric
    return Measured(np.asarray(value, dtype=float), minus, plus)


def sb2_systems(rng, n, inclination=True):
    q = {
        "period": _measured(rng, _log_uniform(rng, 0.1, 1e4, n), relative=_log_uniform(rng, 1e-9, 0.3, n)),
        "k1": _measured(rng, _log_uniform(rng, 0.5, 400.0, n), relative=_log_uniform(rng, 1e-7, 0.4, n)),
        "k2": _measured(rng, _log_uniform(rng, 0.5, 400.0, n), relative=_log_uniform(rng, 1e-7, 0.4, n)),
    }
    e = _eccentricities(rng, n)
    q["eccentricity"] = _measured(rng, e, absolute=_log_uniform(rng, 1e-7, 0.1, n), limit=np.where(e > 0, 1 - e, 1))
    if inclination:
        i = _inclinations(rng, n)
        q["inclination"] = _measured(rng, i, absolute=_log_uniform(rng, 1e-4, 20.0, n),
                                     limit=np.maximum(180.0 - i, 0.18))
    return q


def sb1_systems(rng, n, primary_mass=True, inclination=True):
    q = {
        "period": _measured(rng, _log_uniform(rng, 0.1, 1e4, n), relative=_log_uniform(rng, 1e-9, 0.3, n)),
        "k1": _measured(rng, _log_uniform(rng, 0.05, 400.0, n), relative=_log_uniform(rng, 1e-7, 0.4, n)),
    }
    e = _eccentricities(rng, n)
    q["eccentricity"] = _measured(rng, e, absolute=_log_uniform(rng, 1e-7, 0.1, n), limit=np.where(e > 0, 1 - e, 1))
    if primary_mass:
        # from brown dwarfs to the most massive stars: with K1 from 0.05 to 400 km/s the companion
        # ranges from M2 << M1 to M2 >> M1
        q["primary_mass"] = _measured(rng, _log_uniform(rng, 0.01, 150.0, n), relative=_log_uniform(rng, 1e-6, 0.4, n))
    if inclination:
        i = _inclinations(rng, n)
        q["inclination"] = _measured(rng, i, absolute=_log_uniform(rng, 1e-4, 20.0, n),
                                     limit=np.maximum(180.0 - i, 0.18))
    return q


# ---------------------------------------------------------------------------------------------
# the comparison


def _ratio_of_sigma_to_step(q: Measured, domain) -> np.ndarray:
    """sigma / h for the engine's step rule (module docstring); 0 for an exact input."""
    x, s = q.value, q.sigma
    low = domain.low if domain.low_open else -np.inf
    high = domain.high if domain.high_open else np.inf
    h = RELATIVE_STEP * np.minimum(x - low, high - x)
    with np.errstate(all="ignore"):
        return np.where(s > 0, s / h, 0.0)


#: the calculations with a declared Jacobian (an input name has one domain across them)
DECLARED = ("sb1", "sb2", "visual", "photocentre")


def _allowance(quantities, f0: np.ndarray) -> np.ndarray:
    """The absolute error of the central-difference sigma beyond RTOL (module docstring)."""
    f = np.abs(f0)
    domains = {i.name: i.domain for name in DECLARED for i in get(name).inputs}
    allow = sum(64 * EPS * f * _ratio_of_sigma_to_step(q, domains[name]) for name, q in quantities.items())
    e = quantities.get("eccentricity")
    if e is None:
        return allow
    at_zero = (e.value == 0) & (e.sigma > 0)
    return allow + np.where(at_zero, 2.0 * RELATIVE_STEP ** 2 * e.sigma * f, 0.0)


def _warnings(result, ambiguous):
    """The warnings as comparable data; rows where a sigma lies within the comparison's tolerance of
    the linear-trust threshold (``ambiguous``: output -> rows) are left out of that output's
    ``linear_untrustworthy`` warning, as either answer is right there."""
    out = []
    for w in result.warnings:
        where = None if w.where is None else np.asarray(w.where).copy()
        if w.code == "linear_untrustworthy" and where is not None:
            where[ambiguous[w.subject]] = False
            if not where.any():
                continue
        out.append((w.code, w.message, w.subject, None if where is None else where.tolist()))
    return out


def assert_agree(declared, differenced, quantities):
    """The two linear results agree: values, failed rows, warnings, sigmas, budgets, correlations."""
    with np.errstate(all="ignore"):          # NaN sigmas of failed rows, zero sigmas of exact outputs
        _assert_agree(declared, differenced, quantities)


def _assert_agree(declared, differenced, quantities):
    assert declared.failed == differenced.failed
    assert list(declared.outputs) == list(differenced.outputs)
    slack, ambiguous = {}, {}
    for name, a in declared.outputs.items():
        b = differenced.outputs[name]
        np.testing.assert_array_equal(a["value"], b["value"], err_msg=name)
        sa, sb = a["sigma"], b["sigma"]
        assert np.array_equal(np.isfinite(sa), np.isfinite(sb)), name
        finite = np.isfinite(sb)
        allow = _allowance(quantities, b["value"])
        excess = np.abs(sa - sb) - (RTOL * sb + allow)
        worst = int(np.argmax(np.where(finite, excess, -np.inf)))
        assert not (excess[finite] > 0).any(), (name, worst, sa[worst], sb[worst], allow[worst])
        slack[name] = RTOL + allow / sb          # the relative allowance of this output's sigma
        relative = sb / np.abs(b["value"])
        ambiguous[name] = np.abs(relative - LINEAR_TRUST_LIMIT) <= 2 * slack[name] * relative
    assert _warnings(declared, ambiguous) == _warnings(differenced, ambiguous)
    # budgets and correlations are ratios of the terms: compared where the differences resolve them
    # (an output whose every sigma is zero one way, e.g. only e uncertain at e = 0, has none there)
    resolved = {name: s < 1e-3 for name, s in slack.items()}
    if differenced.budget is not None:
        for name in set(declared.budget) | set(differenced.budget):
            shares_a, shares_b = declared.budget.get(name, {}), differenced.budget.get(name, {})
            for term in set(shares_a) | set(shares_b):
                nan = np.full(len(resolved[name]), np.nan)
                a, b = shares_a.get(term, nan), shares_b.get(term, nan)
                rows = resolved[name] & (np.isfinite(a) | np.isfinite(b))
                assert np.array_equal(np.isfinite(a[rows]), np.isfinite(b[rows])), (name, term)
                np.testing.assert_array_less(np.abs(a - b)[rows], 4 * slack[name][rows] + 1e-12,
                                             err_msg=f"budget {name} {term}")
    if differenced.correlation is not None:
        names_a, ca = declared.correlation or ([], None)
        names_b, cb = differenced.correlation
        for only in set(names_a) ^ set(names_b):
            assert not resolved[only].any(), only      # no sigma anywhere one way, none resolved the other
        names = [n for n in names_b if n in names_a]
        if not names:
            return
        ka, kb = [names_a.index(n) for n in names], [names_b.index(n) for n in names]
        ca, cb = ca[:, ka][:, :, ka], cb[:, kb][:, :, kb]
        s = np.array([slack[n] for n in names]).T                                    # (N, k)
        tol = 2 * (s[:, :, None] + s[:, None, :])
        rows = (tol < 1e-3) & (np.isfinite(ca) | np.isfinite(cb))
        assert np.array_equal(np.isfinite(ca[rows]), np.isfinite(cb[rows]))
        np.testing.assert_array_less(np.abs(ca - cb)[rows], tol[rows] + 1e-12, err_msg="correlation")


def both_ways(calc, quantities, options):
    differences = dataclasses.replace(calc, jacobian=None)
    return evaluate(calc, quantities, options=options), evaluate(differences, quantities, options=options)


def _options(correlations):
    return Options(covariance=True, budget=True, correlations=correlations)


# ---------------------------------------------------------------------------------------------
# (a) the engine with the declared Jacobian against the engine with central differences


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("inclination", [False, True])
def test_sb2_declared_jacobian_agrees_with_differences(inclination, correlated):
    rng = np.random.default_rng(20261203 + inclination + 2 * correlated)
    q = sb2_systems(rng, 400, inclination)
    declared, differenced = both_ways(get("sb2"), q, _options(SB2_CORRELATIONS if correlated else {}))
    assert_agree(declared, differenced, q)
    # the batch covers what it claims: circular orbits, edge-on and nearly face-on systems, exact inputs
    assert (q["eccentricity"].value == 0).sum() > 10
    assert {"interval_crosses_domain", "asymmetric_linearised", "linear_untrustworthy"} <= \
        {w.code for w in declared.warnings}


@pytest.mark.parametrize("correlated", [False, True])
@pytest.mark.parametrize("primary_mass,inclination", [(False, False), (False, True), (True, False), (True, True)])
def test_sb1_declared_jacobian_agrees_with_differences(primary_mass, inclination, correlated):
    rng = np.random.default_rng(1203 + primary_mass + 2 * inclination + 4 * correlated)
    q = sb1_systems(rng, 400, primary_mass, inclination)
    declared, differenced = both_ways(get("sb1"), q, _options(SB1_CORRELATIONS if correlated else {}))
    assert_agree(declared, differenced, q)
    if primary_mass:
        m1, m2 = q["primary_mass"].value, declared.outputs["m2_min"]["value"]
        assert (m2 > 10 * m1).sum() > 10 and (m2 < 0.1 * m1).sum() > 10      # both limits of the cubic


def test_failed_rows_and_undefined_sigmas_are_the_same_either_way():
    # a period so long that the masses overflow (no finite value: a failed row), an exact input
    # beside uncertain ones, and an ordinary system, in one batch
    q = {"period": Measured(np.array([1e307, 41.6, 41.6]), np.array([1e300, 0.0, 0.02]), np.array([1e300, 0.0, 0.02])),
         "k1": Measured.normal([5000.0, 38.2, 38.2], [1.0, 0.4, 0.4]),
         "k2": Measured.normal([5000.0, 51.7, 51.7], [1.0, 0.6, 0.6]),
         "eccentricity": Measured.normal([0.5, 0.31, 0.0], [0.01, 0.01, 0.01]),
         "inclination": Measured.normal([80.0, 71.0, 90.0], [1.0, 2.0, 2.0])}
    declared, differenced = both_ways(get("sb2"), q, _options(SB2_CORRELATIONS))
    assert 0 in declared.failed and 1 not in declared.failed
    assert_agree(declared, differenced, q)


# ---------------------------------------------------------------------------------------------
# a wrong derivative is caught: each one's sign flipped in turn


def _flipped(calc, output, wrt):
    def jacobian(outputs, **kw):
        j = calc.jacobian(outputs, **kw)
        j[output] = {**j[output], wrt: -j[output][wrt]}
        return j
    return dataclasses.replace(calc, jacobian=jacobian)


def _derivative_pairs(name, q):
    calc = get(name)
    kw = {i.name: (q[i.name].value if i.name in q else None) for i in calc.inputs}
    j = calc.jacobian(calc.function(**kw), **kw)
    return [(o, x) for o, of in j.items() for x in of]


@pytest.mark.parametrize("name,systems,correlations", [("sb2", sb2_systems, SB2_CORRELATIONS),
                                                       ("sb1", sb1_systems, SB1_CORRELATIONS)])
def test_every_wrong_sign_is_caught(name, systems, correlations):
    rng = np.random.default_rng(7)
    q = systems(rng, 120)
    calc = get(name)
    differenced = evaluate(dataclasses.replace(calc, jacobian=None), q, options=_options(correlations))
    pairs = _derivative_pairs(name, q)
    assert len(pairs) >= (50 if name == "sb2" else 25)
    for output, wrt in pairs:
        wrong = evaluate(_flipped(calc, output, wrt), q, options=_options(correlations))
        with pytest.raises(AssertionError):
            assert_agree(wrong, differenced, q)


def test_a_small_error_in_one_derivative_is_caught():
    # d m1 / d k2 off by one part in 10^4: far above RTOL, so the comparison must see it
    calc = get("sb2")

    def jacobian(outputs, **kw):
        j = calc.jacobian(outputs, **kw)
        j["m1"] = {**j["m1"], "k2": j["m1"]["k2"] * (1 + 1e-4)}
        return j
    rng = np.random.default_rng(8)
    q = sb2_systems(rng, 200)
    differenced = evaluate(dataclasses.replace(calc, jacobian=None), q, options=_options({}))
    wrong = evaluate(dataclasses.replace(calc, jacobian=jacobian), q, options=_options({}))
    with pytest.raises(AssertionError):
        assert_agree(wrong, differenced, q)


# ---------------------------------------------------------------------------------------------
# (b) the derivatives themselves against automatic differentiation by ``uncertainties``
# (Lebigot, uncertainties: the same Hilditch (2001) formulas in umath, differentiated exactly)


def _sb2_reference(P, k1, k2, e, i):
    c = sp.MASS_FUNCTION_COEFFICIENT
    axis = sp.PROJECTED_AXIS_COEFFICIENT_KM / sp.AU_KM
    s = 1 - e**2
    m1s = c * s**1.5 * (k1 + k2) ** 2 * k2 * P
    m2s = c * s**1.5 * (k1 + k2) ** 2 * k1 * P
    a1, a2 = axis * umath.sqrt(s) * k1 * P, axis * umath.sqrt(s) * k2 * P
    out = {"mass_ratio": k1 / k2, "m1_sin3i": m1s, "m2_sin3i": m2s, "a_sin_i": a1 + a2, "a1_sin_i": a1, "a2_sin_i": a2}
    if i is not None:
        sin_i = umath.sin(umath.radians(i))
        a = (a1 + a2) / sin_i
        out.update(m1=m1s / sin_i**3, m2=m2s / sin_i**3, total_mass=(m1s + m2s) / sin_i**3, semimajor_axis=a,
                   periastron_distance=a * (1 - e), apastron_distance=a * (1 + e))
    return out


def _companion(f, m1, sin_i):
    """M2 from M2^3 sin^3 i / (M1 + M2)^2 = f by Newton's method on y = ln M2, carried out on
    ufloats: automatic differentiation through the iteration (no implicit function theorem)."""
    def nominal(x):
        return getattr(x, "n", x)
    y = max(math.log(nominal(f)) / 3 - math.log(nominal(sin_i)) + 2 / 3 * math.log(nominal(m1)),
            math.log(nominal(f)) - 3 * math.log(nominal(sin_i)))
    for _ in range(80):
        m2 = umath.exp(y)
        g = y - 2 / 3 * umath.log(m1 + m2) - (umath.log(f) / 3 - umath.log(sin_i))
        y = y - g / (1 - 2 / 3 * m2 / (m1 + m2))
        y.derivatives        # expands y's linear combination in place: else each step nests the last ones
    return umath.exp(y)


def _sb1_reference(P, k1, e, m1, i):
    f = sp.MASS_FUNCTION_COEFFICIENT * (1 - e**2) ** 1.5 * k1**3 * P
    a1s = sp.PROJECTED_AXIS_COEFFICIENT_KM / sp.AU_KM * umath.sqrt(1 - e**2) * k1 * P
    out = {"mass_function": f, "a1_sin_i": a1s}
    if m1 is not None:
        out["m2_min"] = _companion(f, m1, 1.0)
        if i is not None:
            sin_i = umath.sin(umath.radians(i))
            m2 = _companion(f, m1, sin_i)
            seconds = P * sp.SECONDS_PER_DAY
            a = (sp.GM_SUN * (m1 + m2) * seconds**2 / sp.TWO_PI**2) ** (1 / 3) / sp.AU
            out.update(m2=m2, mass_ratio=m2 / m1, semimajor_axis=a, a1=a1s / sin_i)
    return out


SB2_POINTS = [
    # period, k1, k2, e, i: ordinary, circular, e -> 1, i -> 0, i = 90, i -> 180
    (41.6, 38.2, 51.7, 0.31, 71.0),
    (3.2, 120.0, 95.0, 0.0, 84.0),
    (1200.0, 8.0, 11.0, 1 - 1e-9, 40.0),
    (10.0, 50.0, 60.0, 0.2, 1e-6),
    (10.0, 50.0, 60.0, 0.2, 90.0),
    (10.0, 50.0, 60.0, 0.2, 179.9999),
]

SB1_POINTS = [
    # period, k1, e, M1, i: ordinary; M2 >> M1; M2 << M1; circular near face-on; e -> 1 retrograde
    (41.6, 23.4, 0.31, 1.9, 71.0),
    (2.0, 300.0, 0.1, 0.05, 60.0),
    (400.0, 0.01, 0.2, 100.0, 88.0),
    (5.0, 40.0, 0.0, 1.0, 0.01),
    (90.0, 15.0, 1 - 1e-8, 3.0, 179.99),
]


def _check_derivatives(logarithmic, reference, variables):
    # the declaration gives d ln f / dx; uncertainties gives df/dx, of which f d ln f / dx is the same number
    for name, f in reference.items():
        assert set(logarithmic[name]) <= set(variables), name
        for x, v in variables.items():
            want = f.derivatives.get(v, 0.0) if hasattr(f, "derivatives") else 0.0
            got = f.n * float(np.asarray(logarithmic[name].get(x, 0.0)).reshape(-1)[0])
            # 1e-9: both exact, up to the rounding of ~20 operations amplified near an edge (1 - e = 1e-9)
            assert got == pytest.approx(want, rel=1e-9, abs=1e-13 * abs(f.n)), (name, x)


@pytest.mark.parametrize("point", SB2_POINTS)
@pytest.mark.parametrize("inclination", [False, True])
def test_sb2_derivatives_against_uncertainties(point, inclination):
    names = ("period", "k1", "k2", "eccentricity", "inclination")
    if not inclination:
        names, point = names[:4], point[:4]
    variables = {n: uncertainties.ufloat(v, 1.0) for n, v in zip(names, point)}
    reference = _sb2_reference(*variables.values(), *([] if inclination else [None]))
    inputs = {n: np.array([v]) for n, v in zip(names, point)}
    declared = sp.sb2_jacobian(sp.sb2(**inputs), **inputs)
    assert set(declared) == set(reference)
    _check_derivatives(declared, reference, variables)


@pytest.mark.parametrize("point", SB1_POINTS)
@pytest.mark.parametrize("primary_mass,inclination", [(False, False), (False, True), (True, False), (True, True)])
def test_sb1_derivatives_against_uncertainties(point, primary_mass, inclination):
    names = ["period", "k1", "eccentricity"] + (["primary_mass"] if primary_mass else []) + \
            (["inclination"] if inclination else [])
    given = dict(zip(("period", "k1", "eccentricity", "primary_mass", "inclination"), point))
    variables = {n: uncertainties.ufloat(given[n], 1.0) for n in names}
    reference = _sb1_reference(variables["period"], variables["k1"], variables["eccentricity"],
                               variables.get("primary_mass"), variables.get("inclination"))
    inputs = {n: np.array([given[n]]) for n in names}
    declared = sp.sb1_jacobian(sp.sb1(**inputs), **inputs)
    assert set(declared) == set(reference)
    _check_derivatives(declared, reference, variables)


# ---------------------------------------------------------------------------------------------
# (c) property: random single systems, declared against differences


def _system(draw, name):
    # no subnormal eccentricities: each path has its own test there
    # (test_a_subnormal_eccentricity_is_no_edge_for_the_declared_jacobian, and
    # test_engine_edges.py::test_a_subnormal_input_is_differenced_as_zero)
    q = {"period": draw(st.floats(0.05, 2e4)), "k1": draw(st.floats(0.05, 500.0)),
         "eccentricity": draw(st.one_of(st.just(0.0), st.floats(0.0, 0.99, allow_subnormal=False)))}
    if name == "sb2":
        q["k2"] = draw(st.floats(0.05, 500.0))
    else:
        q["primary_mass"] = draw(st.one_of(st.none(), st.floats(0.01, 150.0)))
    q["inclination"] = draw(st.one_of(st.none(), st.just(90.0), st.floats(0.01, 179.0)))
    out = {}
    for k, v in q.items():
        if v is None:
            continue
        relative = draw(st.one_of(st.just(0.0), st.floats(1e-8, 0.3)))
        sigma = relative * (v if k != "eccentricity" else 1.0)
        if k == "eccentricity" and v > 0:
            sigma = min(sigma, 1 - v)
        asym = draw(st.floats(0.5, 2.0))
        out[k] = Measured(np.array([v]), np.array([sigma]), np.array([sigma * asym]))
    return out


@st.composite
def cases(draw):
    name = draw(st.sampled_from(["sb2", "sb1"]))
    return name, _system(draw, name), draw(st.booleans())


@settings(max_examples=50, derandomize=True, deadline=None)
@given(cases())
def test_declared_and_differenced_agree_on_random_systems(case):
    name, q, correlated = case
    correlations = (SB2_CORRELATIONS if name == "sb2" else SB1_CORRELATIONS) if correlated else {}
    declared, differenced = both_ways(get(name), q, _options(correlations))
    assert_agree(declared, differenced, q)


def test_a_subnormal_eccentricity_is_no_edge_for_the_declared_jacobian():
    # at e = 5e-324 the declared derivatives are those of e = 0: q is exact here, and
    # d (1 - e^2)^{n/2} / de = -n e (1 - e^2)^{n/2 - 1} ~ 1e-323
    q = {"period": Measured.exact(1.0), "k1": Measured.exact(1.0), "k2": Measured.exact(1.0),
         "eccentricity": Measured.normal(5e-324, 0.25)}
    result = evaluate(get("sb2"), q)
    for name in ("mass_ratio", "m1_sin3i", "a_sin_i"):
        assert result.outputs[name]["sigma"][0] == pytest.approx(0.0, abs=1e-300), name
    assert "sigma_undefined" not in {w.code for w in result.warnings}


# ---------------------------------------------------------------------------------------------
# the declaration's rules


def _declaration(**kw):
    base = dict(name="jacobian_rule_check", path="/v1/test/jacobian-rule-check", title="t", summary="s",
                inputs=(Input("x", "", "x"),), outputs=(Output("y", "deg", "y"),),
                function=lambda x, **_: {"y": x}, jacobian=lambda outputs, x, **_: {"y": {"x": 1.0 / x}})
    base.update(kw)
    return Calculation(**base)


def test_register_refuses_a_jacobian_on_a_wrapping_output():
    with pytest.raises(ValueError, match="wrap"):
        register(_declaration(outputs=(Output("y", "deg", "y", period=360.0),)))


def test_register_refuses_a_jacobian_with_a_series_input():
    with pytest.raises(ValueError, match="series"):
        register(_declaration(inputs=(Input("x", "", "x"), Input("t", "d", "times", kind="series"))))


def test_a_jacobian_missing_an_output_is_a_clear_error():
    calc = dataclasses.replace(get("sb2"), jacobian=lambda outputs, **kw: {k: v for k, v in sp.sb2_jacobian(outputs, **kw).items()
                                                                  if k != "a2_sin_i"})
    with pytest.raises(ValueError, match="a2_sin_i"):
        evaluate(calc, {"period": Measured.normal(41.6, 0.02), "k1": Measured.normal(38.2, 0.4),
                        "k2": Measured.normal(51.7, 0.6), "eccentricity": Measured.normal(0.3, 0.01)})


def test_companion_mass_of_a_system_does_not_depend_on_the_others_in_its_call():
    # the declared path calls the root finder on the systems alone, the differences on 11 points per
    # system, a catalogue split to the batch limit on parts of it: each system's M2 must be the same
    # to the last bit whichever others share its call (a fixed iteration count for all would let a
    # converged system take more steps, each moving it by an ulp)
    rng = np.random.default_rng(11)
    f = _log_uniform(rng, 1e-9, 10.0, 500)
    m1 = _log_uniform(rng, 0.01, 150.0, 500)
    sin_i = rng.uniform(0.01, 1.0, 500)
    together = sp.companion_mass(f, m1, sin_i)
    alone = np.array([sp.companion_mass(f[k:k + 1], m1[k:k + 1], sin_i[k:k + 1])[0] for k in range(500)])
    np.testing.assert_array_equal(together, alone)


def test_the_derivation_report_names_the_jacobian_used():
    from calcservice import report
    from calcservice.core import compute
    sb2 = get("sb2")
    text = report.markdown(compute("sb2", dict(sb2.example)), sb2)
    assert "analytic Jacobian" in text and "central-difference" not in text
    # campbell's angles wrap: it is never given a declared Jacobian (register refuses one)
    campbell = get("campbell")
    text = report.markdown(compute("campbell", dict(campbell.example)), campbell)
    assert "central-difference" in text and "analytic Jacobian" not in text
