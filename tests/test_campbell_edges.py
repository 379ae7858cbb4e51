"""Campbell elements at the edges of their ranges, over HTTP: node at 0/180 deg, omega at 0/360 deg,
inclination at 0 and 180 deg.

References, written here independently of the service:
- the Thiele-Innes constants from the Campbell elements and back, in the textbook form
  (W. D. Heintz 1978, *Double Stars*; L. Binnendijk 1960, *Properties of Double Stars*; from memory):
  u = (A^2 + B^2 + F^2 + G^2) / 2, v = A G - B F, a^2 = u + (u^2 - v^2)^(1/2), cos i = v / a^2,
  tan(omega + node) = (B - F) / (A + G), tan(omega - node) = (-B - F) / (A - G), with the quadrants
  from the signs of the numerators and denominators;
- linear propagation by the `uncertainties` package's automatic differentiation of those formulas;
- a brute-force Monte Carlo in numpy summarised with circular statistics (the mean direction, then
  the draws unwrapped about it: N. I. Fisher 1993, *Statistical Analysis of Circular Data*, ch. 2;
  from memory).
"""

import numpy as np
import pytest
import uncertainties
from uncertainties import umath

from tests.conftest import post

SIGMA = 0.5      # mas, on each constant
PATH = "/v1/astrometric/campbell"


def thiele_innes(a, inclination, omega, node):
    """A, B, F, G (Heintz 1978, from memory)."""
    i, w, n = np.radians(inclination), np.radians(omega), np.radians(node)
    return (a * (np.cos(w) * np.cos(n) - np.sin(w) * np.sin(n) * np.cos(i)),
            a * (np.cos(w) * np.sin(n) + np.sin(w) * np.cos(n) * np.cos(i)),
            a * (-np.sin(w) * np.cos(n) - np.cos(w) * np.sin(n) * np.cos(i)),
            a * (-np.sin(w) * np.sin(n) + np.cos(w) * np.cos(n) * np.cos(i)))


def campbell_reference(A, B, F, G, atan2=np.arctan2, sqrt=np.sqrt, acos=np.arccos, degrees=np.degrees):
    """The textbook inversion (Binnendijk 1960, from memory), unfolded: node and omega on the branch
    atan2 gives (the fold into node in [0, 180) is a constant shift, which changes no derivative)."""
    u = (A * A + B * B + F * F + G * G) / 2
    v = A * G - B * F
    a2 = u + sqrt(u * u - v * v)
    inclination = degrees(acos(v / a2))
    total = atan2(B - F, A + G)
    difference = atan2(-B - F, A - G)
    return sqrt(a2), inclination, degrees((total + difference) / 2), degrees((total - difference) / 2)


def request(a, inclination, omega, node, **extra):
    constants = thiele_innes(a, inclination, omega, node)
    body = {k: {"value": float(v), "sigma": SIGMA} for k, v in zip("ABFG", constants)}
    body.update(extra)
    return body, constants


def linear_reference(constants):
    x = [uncertainties.ufloat(v, SIGMA) for v in constants]
    a, i, w, n = campbell_reference(*x, atan2=umath.atan2, sqrt=umath.sqrt, acos=umath.acos, degrees=umath.degrees)
    return {"angular_semimajor_axis": a.std_dev, "inclination": i.std_dev, "omega": w.std_dev, "node": n.std_dev,
            "omega_primary": w.std_dev}


def codes(answer, field):
    return {w["code"] for w in answer["warnings"] if field in (w.get("fields") or [])}


# omega, inclination at node 0 / 180: the node's fold turns omega with it; omega = 90 or 270 with node 0
# makes A and G rounding residues (~1e-14 mas) of 0, which must be stepped as 0 is
EDGES = [(30.0, 60.0), (90.0, 30.0), (180.0, 150.0), (270.0, 120.0), (0.0, 60.0)]


@pytest.mark.parametrize("omega, inclination", EDGES)
@pytest.mark.parametrize("node", [0.0, 180.0])
def test_linear_sigmas_at_the_node_edge_are_those_just_inside(client, omega, inclination, node):
    status, edge = post(client, PATH, request(200.0, inclination, omega, node)[0])
    assert status == 200, edge
    inside_body, constants = request(200.0, inclination, omega, node + 1e-3)
    status, inside = post(client, PATH, inside_body)
    reference = linear_reference(constants)
    for name, expected in reference.items():
        got = edge["results"][name]["sigma"]
        assert got == pytest.approx(inside["results"][name]["sigma"], rel=1e-5), name
        assert got == pytest.approx(expected, rel=1e-5), name         # `uncertainties`, on the textbook inversion
        assert "linear_untrustworthy" not in codes(edge, name)
        assert "sigma_undefined" not in codes(edge, name)
    assert 0.0 <= edge["results"]["node"]["value"] < 180.0


@pytest.mark.parametrize("omega", [0.0, 1e-9, 359.9999999])
def test_linear_sigmas_at_the_omega_edge(client, omega):
    body, constants = request(150.0, 70.0, omega, 40.0)
    status, answer = post(client, PATH, body)
    assert status == 200
    reference = linear_reference(constants)
    for name, expected in reference.items():
        assert answer["results"][name]["sigma"] == pytest.approx(expected, rel=1e-5), name
    assert 0.0 <= answer["results"]["omega"]["value"] < 360.0


def _circular_summary(draws, period):
    """Median and 68.27 % interval of angles on a circle of ``period``: the draws unwrapped about their
    mean direction (Fisher 1993, from memory), the median then reduced into [0, period) with the
    interval moved with it; also the number of periods it was moved by."""
    angle = 2 * np.pi * draws / period
    mean = np.angle(np.mean(np.exp(1j * angle))) * period / (2 * np.pi)
    unwrapped = mean + (draws - mean + period / 2) % period - period / 2
    med, low, high = np.percentile(unwrapped, [50, 15.865525393145708, 84.13447460685429])
    turns = np.floor(med / period)
    return med - turns * period, low - turns * period, high - turns * period, unwrapped, turns


def _brute_force(constants, n, seed):
    rng = np.random.default_rng(seed)
    A, B, F, G = (v + SIGMA * rng.standard_normal(n) for v in constants)
    a, i, w, node = campbell_reference(A, B, F, G)
    # the convention: node in [0, 180), omega turned with it
    turns = np.floor(node / 180.0)
    return a, i, (w - 180.0 * turns) % 360.0, node - 180.0 * turns


@pytest.mark.parametrize("node", [0.0, 179.95, 0.05])
def test_monte_carlo_node_at_the_edge_is_a_circular_summary(client, node):
    body, constants = request(200.0, 60.0, 30.0, node, uncertainty={"method": "monte_carlo", "samples": 20000,
                                                                     "seed": 11})
    status, answer = post(client, PATH, body)
    assert status == 200
    a, i, w, n = _brute_force(constants, 20000, 5)
    med, low, high, unwrapped, turns = _circular_summary(n, 180.0)
    got = answer["results"]["node"]
    assert 0.0 <= got["value"] < 180.0
    assert got["low"] <= got["value"] <= got["high"]
    # the same circle point within Monte Carlo noise (sigma 0.21 deg / sqrt(20000) ~ 0.0015 deg)
    assert abs((got["value"] - med + 90.0) % 180.0 - 90.0) < 0.01
    assert got["high"] - got["low"] == pytest.approx(high - low, abs=0.02)
    assert got["low"] - got["value"] == pytest.approx(low - med, abs=0.02)
    assert got["sigma"] == pytest.approx(np.std(unwrapped), rel=0.03)
    # omega moves with the node: the draws on the node's branch about its mean direction
    omega_on_branch = w + (unwrapped - n)
    w_med, w_low, w_high, w_unwrapped, _ = _circular_summary(omega_on_branch - 180.0 * turns, 360.0)
    # a median within noise of the edge may be reported on either side of it: (omega, node) and
    # (omega + 180, node + 180) are one orbit, so omega is compared on the node's side
    side = np.rint((answer["results"]["node"]["value"] - med) / 180.0)
    got = answer["results"]["omega"]
    assert abs((got["value"] - w_med - 180.0 * side + 180.0) % 360.0 - 180.0) < 0.01
    assert got["high"] - got["low"] == pytest.approx(w_high - w_low, abs=0.02)
    assert got["sigma"] == pytest.approx(np.std(w_unwrapped), rel=0.03)
    # the reported pair is one orbit: the Thiele-Innes constants of (omega, node) are the nominal ones
    back = thiele_innes(200.0, 60.0, got["value"], answer["results"]["node"]["value"])
    assert np.allclose(back, constants, atol=2.0)


@pytest.mark.parametrize("inclination", [0.5, 179.5])
def test_monte_carlo_inclination_near_face_on(client, inclination):
    # draws of a nearly face-on orbit fold at i = 0 (or 180): i >= 0 always, its median pulled inward
    body, constants = request(200.0, inclination, 30.0, 40.0, uncertainty={"method": "monte_carlo",
                                                                           "samples": 20000, "seed": 3})
    status, answer = post(client, PATH, body)
    assert status == 200
    _, i, _, _ = _brute_force(constants, 20000, 8)
    med, low, high = np.percentile(i, [50, 15.865525393145708, 84.13447460685429])
    got = answer["results"]["inclination"]
    assert 0.0 <= got["low"] <= got["value"] <= got["high"] <= 180.0
    assert got["value"] == pytest.approx(med, abs=0.05)
    assert got["low"] == pytest.approx(low, abs=0.05)
    assert got["high"] == pytest.approx(high, abs=0.05)
    assert got["sigma"] == pytest.approx(np.std(i), rel=0.03)


@pytest.mark.parametrize("inclination", [0.0, 180.0])
def test_linear_inclination_exactly_face_on_is_not_a_plain_zero(client, inclination):
    # i = 0: i ~ (2 |(A - G, B + F)| / a)^(1/2), a cone under a square root: no derivative in any
    # direction, and just inside (i = 0.01 deg) the linear sigma is already meaningless.  At the edge
    # it must not be a small number without a word: linear propagation has no answer there.
    status, answer = post(client, PATH, request(200.0, inclination, 30.0, 40.0)[0])
    assert status == 200
    assert answer["results"]["inclination"]["sigma"] is None
    assert "sigma_undefined" in codes(answer, "inclination")
    # the Monte Carlo answers it: draws of a face-on orbit have i >= 0, summarised as brute force does
    body, constants = request(200.0, inclination, 30.0, 40.0,
                              uncertainty={"method": "monte_carlo", "samples": 20000, "seed": 9})
    status, answer = post(client, PATH, body)
    _, i, _, _ = _brute_force(constants, 20000, 10)
    med, low, high = np.percentile(i, [50, 15.865525393145708, 84.13447460685429])
    got = answer["results"]["inclination"]
    assert got["value"] == pytest.approx(med, abs=0.05) and got["sigma"] == pytest.approx(np.std(i), rel=0.03)
    assert got["low"] == pytest.approx(low, abs=0.05) and got["high"] == pytest.approx(high, abs=0.05)


def test_correlation_of_omega_and_node_at_the_node_edge(client):
    # J Sigma J^T by `uncertainties` on the textbook inversion; the node's fold is no jump in it
    body, constants = request(200.0, 60.0, 30.0, 0.0, covariance=True)
    status, answer = post(client, PATH, body)
    assert status == 200
    x = [uncertainties.ufloat(v, SIGMA) for v in constants]
    ref = campbell_reference(*x, atan2=umath.atan2, sqrt=umath.sqrt, acos=umath.acos, degrees=umath.degrees)
    expected = np.array(uncertainties.correlation_matrix(list(ref)))
    outputs = answer["correlation"]["outputs"]
    index = [outputs.index(o) for o in ("angular_semimajor_axis", "inclination", "omega", "node")]
    np.testing.assert_allclose(np.array(answer["correlation"]["matrix"])[np.ix_(index, index)], expected, atol=1e-5)
    # and by Monte Carlo: np.corrcoef of brute-force draws unwrapped about the nominal pair
    body["uncertainty"] = {"method": "monte_carlo", "samples": 20000, "seed": 4}
    status, answer = post(client, PATH, body)
    a, i, w, n = _brute_force(constants, 20000, 6)
    n_on_branch = (n + 90.0) % 180.0 - 90.0
    w_on_branch = (w + (n_on_branch - n) + 180.0 - 30.0) % 360.0 - 180.0 + 30.0
    expected = np.corrcoef([a, i, w_on_branch, n_on_branch])
    outputs = answer["correlation"]["outputs"]
    index = [outputs.index(o) for o in ("angular_semimajor_axis", "inclination", "omega", "node")]
    np.testing.assert_allclose(np.array(answer["correlation"]["matrix"])[np.ix_(index, index)], expected, atol=0.03)


def test_an_angle_can_only_turn_with_a_wrapping_output():
    from calcservice.registry import Calculation, Input, Output, register
    calc = Calculation(name="turns-test", path="/v1/test/turns", title="t", summary="t",
                       inputs=(Input("x", "deg", "an angle"),),
                       outputs=(Output("w", "deg", "an angle", period=360.0, turns_with=("n", 180.0)),
                                Output("n", "deg", "not wrapping")),
                       function=lambda x, **_: {"w": x, "n": x})
    with pytest.raises(ValueError, match="turns with n"):
        register(calc)
