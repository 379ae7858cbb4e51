"""The linear method at points where a step tied to the input's size misleads: a kink or an extremum
of the function at the nominal point, and an input that is the rounding residue of 0.  References:
plain calculus, and the `uncertainties` package where a derivative exists."""

import numpy as np
import pytest
import uncertainties
from uncertainties import umath

from calcservice.engine import Measured, evaluate
from calcservice.registry import Calculation, Input, Output


def one_input(function):
    """A one-input calculation (not registered: the registry stays as declared)."""
    return Calculation(name="f", path="/v1/test/f", title="f", summary="f",
                       inputs=(Input("x", "", "a number"),), outputs=(Output("y", "", "f(x)"),),
                       function=lambda x, **_: {"y": function(x)})


def linear(function, x, sigma):
    r = evaluate(one_input(function), {"x": Measured.normal(x, sigma)})
    return float(r.outputs["y"]["sigma"][0]), {w.code for w in r.warnings}


@pytest.mark.parametrize("function", [np.abs, lambda x: np.sqrt(np.abs(x)), lambda x: 3.0 + np.abs(x - 0.0)],
                         ids=["|x|", "|x|^1/2", "3 + |x|"])
def test_a_kink_at_the_nominal_point_has_no_linear_sigma(function):
    # no derivative at x = 0 (the one-sided slopes differ): linear propagation has no answer
    s, codes = linear(function, 0.0, 0.1)
    assert np.isnan(s) and "sigma_undefined" in codes


@pytest.mark.parametrize("function, reference, x", [
    (lambda x: x * x, lambda u: u * u, 0.0),
    (lambda x: np.cos(np.radians(x)), lambda u: umath.cos(umath.radians(u)), 0.0),
    (lambda x: 5.0 - (x - 2.0) ** 2, lambda u: 5.0 - (u - 2.0) ** 2, 2.0)], ids=["x^2", "cos", "5-(x-2)^2"])
def test_an_extremum_at_the_nominal_point_has_a_first_order_sigma_of_zero(function, reference, x):
    # a smooth extremum: the derivative exists and is 0, as `uncertainties` says
    s, codes = linear(function, x, 0.1)
    assert reference(uncertainties.ufloat(x, 0.1)).std_dev == 0.0
    assert s == pytest.approx(0.0, abs=1e-9)
    assert "sigma_undefined" not in codes


def test_away_from_a_kink_the_derivative_is_the_ordinary_one():
    s, codes = linear(np.abs, -2.0, 0.1)
    assert s == pytest.approx((-uncertainties.ufloat(-2.0, 0.1)).std_dev, rel=1e-9) and not codes    # |x| = -x there


@pytest.mark.parametrize("residue", [0.0, 1e-14, -3e-17, 1e-9])
def test_an_input_near_zero_is_stepped_so_the_output_resolves_it(residue):
    # f = 1000 + 5 x: the output's rounding (~1e-13) hides a step of 1e-5 |x| ~ 1e-19; the sigma is
    # 5 sigma_x for every x near 0, as for x = 0 itself (`uncertainties`)
    s, _ = linear(lambda x: 1000.0 + 5.0 * x, residue, 0.5)
    assert s == pytest.approx((1000.0 + 5.0 * uncertainties.ufloat(residue, 0.5)).std_dev, rel=1e-6)


def test_a_pole_near_zero_keeps_its_local_derivative():
    # 1/x at x = 1e-4 with sigma 1: the step stays tied to |x| (the derivative -1/x^2 there), which the
    # output resolves; the sigma is meaningless and flagged, but it is the derivative at x
    s, codes = linear(lambda x: 1.0 / x, 1e-4, 1.0)
    assert s == pytest.approx((1.0 / uncertainties.ufloat(1e-4, 1.0)).std_dev, rel=1e-6)
    assert "linear_untrustworthy" in codes
