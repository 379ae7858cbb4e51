"""The engine at its edges: angles across a branch, and Monte Carlo summaries without a finite variance."""

import statistics

import numpy as np
import pytest
import uncertainties
from scipy import stats
from uncertainties import umath

from calcservice.engine import Measured, Options, evaluate
from calcservice.engine import MIN_DRAWS, heavy_tailed
from calcservice.physics.spectroscopic import MASS_FUNCTION_COEFFICIENT
from calcservice.registry import Calculation, Input, Output, get


def _thiele_innes(a, inclination, omega, node):
    """A, B, F, G from Campbell elements (W. D. Heintz (1978), Double Stars, the classical formulas)."""
    i, w, n = np.radians(inclination), np.radians(omega), np.radians(node)
    return {"A": a * (np.cos(w) * np.cos(n) - np.sin(w) * np.sin(n) * np.cos(i)),
            "B": a * (np.cos(w) * np.sin(n) + np.sin(w) * np.cos(n) * np.cos(i)),
            "F": a * (-np.sin(w) * np.cos(n) - np.cos(w) * np.sin(n) * np.cos(i)),
            "G": a * (-np.sin(w) * np.sin(n) + np.cos(w) * np.cos(n) * np.cos(i))}


def _angle(name, function, period=360.0):
    """A one-input calculation with one wrapping output (not registered: the registry stays as declared)."""
    return Calculation(name=name, path=f"/v1/test/{name}", title=name, summary=name,
                       inputs=(Input("x", "deg", "an angle"),),
                       outputs=(Output("y", "deg", "an angle", period=period),),
                       function=lambda x, **_: {"y": function(x)})


def _codes(result, name):
    return {w.code for w in result.warnings if w.subject == name}


def test_omega_at_the_node_branch_moves_with_the_node():
    # node = 0 exactly: the node is kept in [0, 180), so a step across it turns the node by 180 deg
    # and omega with it (the calculation's convention, declared as Output.turns_with); the engine
    # undoes that joint fold, so omega's sigma is the one just inside the branch, unflagged.
    calc = get("campbell")
    q = {k: Measured.normal(v, 0.8) for k, v in _thiele_innes(400.0, 60.0, 50.0, 0.0).items()}
    r = evaluate(calc, q)
    inside = evaluate(calc, {k: Measured.normal(v, 0.8) for k, v in _thiele_innes(400.0, 60.0, 50.0, 1e-3).items()})
    for name in ("omega", "omega_primary", "node", "inclination"):
        assert float(r.outputs[name]["sigma"][0]) == pytest.approx(float(inside.outputs[name]["sigma"][0]), rel=1e-4)
        assert "linear_untrustworthy" not in _codes(r, name)
    assert float(r.outputs["node"]["sigma"][0]) < 1.0


def test_omega_near_its_own_branch_is_smooth_and_right():
    # omega = 1e-9 deg: the steps straddle 0/360 deg; on the circle the derivative is the ordinary one.
    # Reference: the `uncertainties` package on the Thiele-Innes -> Campbell formulas (Heintz 1978).
    ti = _thiele_innes(400.0, 60.0, 1e-9, 35.0)
    x = {k: uncertainties.ufloat(v, 0.8) for k, v in ti.items()}
    omega = umath.degrees((umath.atan2(x["B"] - x["F"], x["A"] + x["G"])
                           + umath.atan2(-x["B"] - x["F"], x["A"] - x["G"])) / 2)
    r = evaluate(get("campbell"), {k: Measured.normal(v, 0.8) for k, v in ti.items()})
    assert float(r.outputs["omega"]["sigma"][0]) == pytest.approx(omega.std_dev, rel=1e-5)
    assert not _codes(r, "omega")


def test_a_fast_turning_angle_is_differenced_on_the_circle_at_each_step():
    # y = k x (mod 360) turns by 120 deg per step h on either side: f(x + h) - f(x - h) = 240 deg, which
    # wrapped as a whole reads -120 deg (the wrong sign and half the size); taken step by step on
    # the circle it is +240 deg, and the sigma is k sigma_x (here with h = 1e-5 rad, an angle's step)
    x0, sx = 1.0, 1.0
    h = 1e-5 * np.degrees(1.0)
    h = (x0 + h) - x0
    k = 120.0 / h
    calc = _angle("turning", lambda x: np.mod(k * (x - x0), 360.0))
    r = evaluate(calc, {"x": Measured.normal(x0, sx)})
    assert float(r.outputs["y"]["sigma"][0]) == pytest.approx(k * sx, rel=1e-9)


def test_a_smooth_angle_across_its_branch_is_not_flagged():
    # y = x mod 360 at 360 - 1e-7 deg: the stencil straddles the branch; sigma_y = sigma_x, no warning
    calc = _angle("identity", lambda x: np.mod(x, 360.0))
    r = evaluate(calc, {"x": Measured.normal(360.0 - 1e-7, 0.5)})
    assert float(r.outputs["y"]["sigma"][0]) == pytest.approx(0.5, rel=1e-9)
    assert not r.warnings


def test_a_jump_of_an_angle_is_flagged_and_curvature_is_not():
    # a jump by 100 deg (not a whole period) at x = 0 is flagged; a smooth y = x^2 / 10 deg with
    # sigma_x = 1 is not (second-order term 0.05 against a first-order one of 1 at x = 5)
    jump = _angle("jump", lambda x: np.mod(x + 100.0 * (x > 0), 360.0))
    assert "linear_untrustworthy" in _codes(evaluate(jump, {"x": Measured.normal(0.0, 1.0)}), "y")
    smooth = _angle("smooth", lambda x: np.mod(x * x / 10.0, 360.0))
    r = evaluate(smooth, {"x": Measured.normal(5.0, 1.0)})
    assert float(r.outputs["y"]["sigma"][0]) == pytest.approx(1.0, rel=1e-6)      # d(x^2/10)/dx = x/5
    assert not r.warnings
    # at x = 0 the first-order term vanishes and the second-order one (0.1 deg) is all there is
    assert "linear_untrustworthy" in _codes(evaluate(smooth, {"x": Measured.normal(0.0, 1.0)}), "y")


def test_isotropic_masses_have_no_sigma_but_keep_median_and_interval():
    # M sin^3 i / sin^3 i with cos i uniform: P(M > m) ~ m^(-2/3) / 2 for large m, so neither the mean nor
    # the variance exists (any sample sd is a property of the largest draws).  The median and the
    # 68.27 % interval do exist: for M = c / sin^3 i they are c / sin^3 i at the matching quantiles
    # of cos i (uniform), i.e. cos i = 0.5 and 0.158655 / 0.841345.
    calc = get("sb2")
    q = {"period": Measured.exact(41.6), "k1": Measured.exact(38.2), "k2": Measured.exact(51.7),
         "eccentricity": Measured.exact(0.31), "inclination": Measured(np.array([90.0]), np.zeros(1), np.zeros(1),
                                                                       isotropic=True)}
    r = evaluate(calc, q, options=Options(method="monte_carlo", samples=20000, seed=4))
    m1 = r.outputs["m1"]
    assert np.isnan(m1["sigma"][0])
    named = {w.subject for w in r.warnings if w.code == "sigma_undefined"}
    assert {"m1", "m2", "total_mass"} <= named
    message = next(w.message for w in r.warnings if w.code == "sigma_undefined")
    assert "68.27 %" in message and "low" in message
    c = float(r.outputs["m1_sin3i"]["value"][0])
    sin3 = lambda cos_i: (1 - cos_i**2) ** 1.5
    assert m1["value"][0] == pytest.approx(c / sin3(0.5), rel=0.02)
    # the 15.87 % point of M is at the 15.87 % point of cos i (M grows with cos i)
    assert m1["low"][0] == pytest.approx(c / sin3(stats.uniform.ppf(0.158655)), rel=0.02)
    assert m1["high"][0] == pytest.approx(c / sin3(stats.uniform.ppf(0.841345)), rel=0.05)
    # outputs that do not depend on i keep an ordinary sigma: every draw is the same number (no other
    # input is uncertain), whose sample standard deviation is exactly 0, as the standard library's
    # exact-arithmetic statistics.stdev says; not the rounding of a sum of 20,000 equal numbers
    assert r.outputs["m1_sin3i"]["sigma"][0] == statistics.stdev([c] * 20000) == 0.0 and "m1_sin3i" not in named
    assert c == pytest.approx(MASS_FUNCTION_COEFFICIENT * (1 - 0.31**2) ** 1.5 * (38.2 + 51.7) ** 2 * 51.7 * 41.6,
                              rel=1e-12)


def test_the_heavy_tail_test_on_known_distributions():
    # 10,000 draws: normal (the top 0.1 % of squared deviations hold ~1.3 %), lognormal sigma = 1 (~17 %)
    # and Student's t with 4 degrees of freedom have a finite variance; a Cauchy and t with 1 degree
    # of freedom have none (scipy.stats: t(1) is the Cauchy), and isotropic 1/sin^3 i neither
    rng = np.random.default_rng(17)
    s = 10000
    finite = [rng.normal(size=s), rng.lognormal(0.0, 1.0, s), stats.t.rvs(4, size=s, random_state=rng)]
    infinite = [rng.standard_cauchy(s), stats.t.rvs(1, size=s, random_state=rng),
                (1 - rng.uniform(0, 1, s) ** 2) ** -1.5]
    draws = np.array(finite + infinite)
    valid = np.ones(draws.shape, dtype=bool)
    flagged = heavy_tailed(draws, valid, np.median(draws, axis=1))
    assert flagged.tolist() == [False] * 3 + [True] * 3


@pytest.mark.parametrize("draws", [10, 20])
def test_too_few_draws_are_not_taken_for_a_heavy_tail(draws):
    # a mass function from normal inputs of 1 %: nearly normal, every moment finite.  Below 100 draws
    # the heavy-tail test cannot tell (one draw in ten of a normal holds half the squared deviations
    # about 1 time in 5): sigma is the draws' sample standard deviation (numpy, ddof 1) with a
    # few_draws warning, for every seed
    calc = get("sb1")
    q = {"period": Measured.normal(41.6, 0.4), "k1": Measured.normal(23.4, 0.2), "eccentricity": Measured.exact(0.31)}
    for seed in range(40):
        r = evaluate(calc, q, options=Options(method="monte_carlo", samples=draws, seed=seed, keep_draws=True))
        codes = [w.code for w in r.warnings]
        assert "sigma_undefined" not in codes and codes.count("few_draws") == 1, (seed, codes)
        f = r.draws["mass_function"][0]
        assert r.outputs["mass_function"]["sigma"][0] == pytest.approx(np.std(f, ddof=1), rel=1e-12)


def test_too_few_kept_draws_are_not_taken_for_a_heavy_tail():
    # 150 draws of an eccentricity of 0.995 +- 0.05: about half leave [0, 1) and are rejected, which
    # leaves fewer than MIN_DRAWS to summarise; the second system (e = 0.3) keeps all of its draws
    calc = get("sb1")
    q = {"period": Measured.normal(41.6, 0.02), "k1": Measured.normal(23.4, 0.3),
         "eccentricity": Measured.normal(np.array([0.995, 0.3]), np.array([0.05, 0.01]))}
    r = evaluate(calc, q, options=Options(method="monte_carlo", samples=150, seed=1, keep_draws=True))
    kept = 150 * (1 - r.rejected_fraction)
    assert kept[0] < MIN_DRAWS <= kept[1] == 150
    few = [w for w in r.warnings if w.code == "few_draws"]
    assert len(few) == 1 and few[0].where.tolist() == [True, False]
    assert "sigma_undefined" not in [w.code for w in r.warnings]
    f = r.draws["mass_function"][0]
    assert r.outputs["mass_function"]["sigma"][0] == pytest.approx(np.nanstd(f, ddof=1), rel=1e-12)


def test_the_heavy_tail_test_still_decides_at_the_fewest_draws():
    # from MIN_DRAWS on the test applies: isotropic masses (no finite variance) lose their sigma for
    # most seeds, a nearly normal output keeps it for every seed
    calc = get("sb2")
    iso = {"period": Measured.exact(41.6), "k1": Measured.exact(38.2), "k2": Measured.exact(51.7),
           "eccentricity": Measured.exact(0.31),
           "inclination": Measured(np.array([90.0]), np.zeros(1), np.zeros(1), isotropic=True)}
    normal = {**iso, "k1": Measured.normal(38.2, 0.4), "inclination": Measured.exact(71.0)}
    undefined = 0
    for seed in range(20):
        r = evaluate(calc, iso, options=Options(method="monte_carlo", samples=MIN_DRAWS, seed=seed))
        assert "few_draws" not in [w.code for w in r.warnings]
        undefined += bool(np.isnan(r.outputs["m1"]["sigma"][0]))
        r = evaluate(calc, normal, options=Options(method="monte_carlo", samples=MIN_DRAWS, seed=seed))
        assert "sigma_undefined" not in [w.code for w in r.warnings]
    assert undefined >= 12          # about 4 in 5 (measured 83 % over 4000 seeds)


def test_monte_carlo_of_light_tails_keeps_its_sigma():
    # a mass from normal inputs of 20 % (skewed, but with every moment): an ordinary sigma, no warning
    calc = get("sb2")
    q = {"period": Measured.normal(41.6, 0.02), "k1": Measured.normal(38.2, 7.0), "k2": Measured.normal(51.7, 10.0),
         "eccentricity": Measured.normal(0.31, 0.01), "inclination": Measured.normal(71.0, 2.0)}
    r = evaluate(calc, q, options=Options(method="monte_carlo", samples=10000, seed=9))
    assert np.isfinite(r.outputs["m1"]["sigma"][0])
    assert not [w for w in r.warnings if w.code == "sigma_undefined"]


def test_a_subnormal_input_is_differenced_as_zero():
    # e = 5e-324 (the smallest subnormal) with a sigma: a step of 1e-5 |e| would underflow to 0 and
    # every difference quotient be 0/0.  Central differences (sb2 without its declared Jacobian) must
    # answer as at e = 0: q = K1/K2 does not depend on e (exact here, sigma 0), and
    # d (1 - e^2)^{3/2} / de = -3 e (1 - e^2)^{1/2} ~ 1e-323, so M1 sin^3 i's sigma is ~0 as well
    import dataclasses
    calc = dataclasses.replace(get("sb2"), jacobian=None)
    q = {"period": Measured.exact(1.0), "k1": Measured.exact(1.0), "k2": Measured.exact(1.0),
         "eccentricity": Measured.normal(5e-324, 0.25)}
    r = evaluate(calc, q)
    assert r.outputs["mass_ratio"]["sigma"][0] == 0.0
    assert r.outputs["m1_sin3i"]["sigma"][0] == pytest.approx(0.0, abs=1e-12)
    assert "sigma_undefined" not in {w.code for w in r.warnings}
