"""Visual orbits, Thiele–Innes constants and photocentric orbits against outside sources:
IAU nominal constants, the Gaussian constant, a published visual binary, the textbook
Thiele–Innes identities, astropy, the `uncertainties` package and Monte Carlo."""

import math

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from uncertainties import correlated_values_norm, ufloat, umath

from calcservice import registry
from calcservice.core import compute
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics import astrometric as ast

VISUAL = registry.get("visual")
CAMPBELL = registry.get("campbell")
THIELE_INNES = registry.get("thiele-innes")
PHOTOCENTRE = registry.get("photocentre")


def post(client, path, body):
    r = client.post(path, json=body)
    return r.status_code, r.get_json(silent=True)


def values(result):
    return {k: float(v["value"][0]) for k, v in result.outputs.items()}


def sigmas(result):
    return {k: float(v["sigma"][0]) for k, v in result.outputs.items()}


# ----------------------------------------------------------------------------- Kepler checks

def test_earth_sun_seen_from_one_parsec():
    # The Earth's orbit from 1 pc: a = 1 au -> 1000 mas, parallax 1000 mas (definition of the parsec,
    # IAU 2015 B2); P = one sidereal year, 365.256363 d (J2000, from memory).
    r = compute("visual", {"period": 365.256363, "angular_semimajor_axis": 1000.0, "parallax": 1000.0})["results"]
    assert r["semimajor_axis"]["value"] == pytest.approx(1.0, rel=1e-15)
    assert r["distance"]["value"] == pytest.approx(1.0, rel=1e-15)
    m = r["total_mass"]["value"]
    # Kepler's third law measures M_sun + M_earth+moon. The tolerance is set by the physics, not by GM_sun:
    # the IAU 2015 nominal GM_sun (1.3271244e20 m^3 s^-2, exact by definition) is good to 1e-8, but the
    # Earth-Moon mass is 3.0e-6 M_sun and planetary perturbations move the osculating orbit at the 1e-7 level.
    assert m == pytest.approx(1.0, abs=1e-5)
    # IAU 2009 system: M_sun / (M_earth + M_moon) = 328900.56 (from memory); the excess over 1 M_sun
    # must be the Earth-Moon mass to within the perturbations (~1e-7 of a solar mass)
    assert m - 1.0 == pytest.approx(1.0 / 328900.56, abs=3e-7)


def test_earth_sun_total_mass_matches_astropy_to_rounding():
    # the same Kepler law, evaluated with astropy units and IAU 2015 nominal GM_sun: agrees to rounding
    p = 365.256363 * u.day
    expected = (4 * np.pi**2 * (1 * u.au) ** 3 / (const.GM_sun * p**2)).decompose().value
    r = compute("visual", {"period": 365.256363, "angular_semimajor_axis": 1000.0, "parallax": 1000.0})["results"]
    assert r["total_mass"]["value"] == pytest.approx(expected, rel=1e-13)


def test_gaussian_gravitational_constant():
    # IAU 1976: k = 0.01720209895 au^{3/2} d^-1 M_sun^{-1/2}; a body of negligible mass at a = 1 au about
    # 1 M_sun has P = 2 pi / k days (the Gaussian year, 365.2568983 d).  Since IAU 2012 the au is fixed in
    # metres, so k and (GM_sun, au) agree only to the ~1e-10 to which the 2012 au matched k: 1e-9 in mass.
    k = 0.01720209895
    r = compute("visual", {"period": 2 * math.pi / k, "angular_semimajor_axis": 250.0, "distance": 4.0})["results"]
    assert r["semimajor_axis"]["value"] == pytest.approx(1.0, rel=1e-15)
    assert r["total_mass"]["value"] == pytest.approx(1.0, abs=1e-9)


def test_kepler_scales_as_a_cubed_over_p_squared():
    # Kepler's third law (Hilditch 2001, ch. 2): doubling a gives 8x the mass, doubling P a quarter
    base = ast.kepler_total_mass(3.0, 1000.0)
    assert ast.kepler_total_mass(6.0, 1000.0) == pytest.approx(8 * base, rel=1e-14)
    assert ast.kepler_total_mass(3.0, 2000.0) == pytest.approx(base / 4, rel=1e-14)
    assert ast.kepler_semimajor_axis(1000.0, base) == pytest.approx(3.0, rel=1e-14)


# ----------------------------------------------------------------------------- a published visual binary

def test_sirius_dynamical_masses():
    # from memory: Sirius A+B, Bond et al. (2017) ApJ 840, 70: P = 50.1284 +- 0.0043 yr,
    # a = 7.4957 +- 0.0025 arcsec, M_A = 2.063 +- 0.023, M_B = 1.018 +- 0.011 M_sun;
    # parallax 379.21 +- 1.58 mas (Hipparcos new reduction, van Leeuwen 2007).
    m_a, s_a, m_b, s_b = 2.063, 0.023, 1.018, 0.011
    body = {
        "period": {"value": 50.1284, "sigma": 0.0043, "unit": "yr"},
        "angular_semimajor_axis": {"value": 7.4957, "sigma": 0.0025, "unit": "arcsec"},
        "parallax": {"value": 379.21, "sigma": 1.58},
        "mass_ratio": m_b / m_a,
    }
    r = compute("visual", body)["results"]
    assert abs(r["m1"]["value"] - m_a) < s_a
    assert abs(r["m2"]["value"] - m_b) < s_b
    assert abs(r["total_mass"]["value"] - (m_a + m_b)) < math.hypot(s_a, s_b) + r["total_mass"]["sigma"]
    # the total-mass error is three times the parallax's relative error (M ~ parallax^-3), common practice
    assert r["total_mass"]["sigma"] / r["total_mass"]["value"] == pytest.approx(3 * 1.58 / 379.21, rel=0.02)


# ----------------------------------------------------------------------------- visual: forms and covariance

def test_visual_distance_and_parallax_agree_and_units_convert():
    a = compute("visual", {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3})["results"]
    b = compute("visual", {"period": {"value": 20.0, "unit": "yr"},
                           "angular_semimajor_axis": {"value": 0.412, "unit": "arcsec"},
                           "distance": {"value": 1 / 0.0483, "unit": "pc"}})["results"]
    c = compute("visual", {"period": 7305.0, "angular_semimajor_axis": {"value": 412000.0, "unit": "uas"},
                           "parallax": {"value": 0.0483, "unit": "arcsec"}})["results"]
    for r in (b, c):
        assert r["semimajor_axis"]["value"] == pytest.approx(a["semimajor_axis"]["value"], rel=1e-12)
        assert r["total_mass"]["value"] == pytest.approx(a["total_mass"]["value"], rel=1e-12)


def test_visual_mass_ratio_and_fractional_mass_agree():
    q = 0.72
    a = compute("visual", {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3, "mass_ratio": q})
    b = compute("visual", {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3,
                           "fractional_mass": q / (1 + q)})
    for name in ("m1", "m2", "a1", "a2"):
        assert a["results"][name]["value"] == pytest.approx(b["results"][name]["value"], rel=1e-13)
    r = a["results"]
    assert r["m2"]["value"] / r["m1"]["value"] == pytest.approx(q, rel=1e-13)
    assert r["a1"]["value"] + r["a2"]["value"] == pytest.approx(r["semimajor_axis"]["value"], rel=1e-13)
    assert "m1" not in compute("visual", {"period": 7305.0, "angular_semimajor_axis": 412.0,
                                          "parallax": 48.3})["results"]


def test_visual_covariance_against_uncertainties():
    # M = 4 pi^2 (a''/parallax au)^3 / (GM_sun P^2), with a'' and parallax correlated (rho = 0.4)
    rho = 0.4
    a_mas, plx, per, q = (412.0, 3.0), (48.3, 0.9), (7305.0, 12.0), (0.72, 0.03)
    (ua, up) = correlated_values_norm([a_mas, plx], np.array([[1, rho], [rho, 1]]))
    uper, uq = ufloat(*per), ufloat(*q)
    gm = const.GM_sun.value
    au = const.au.value
    utotal = 4 * math.pi**2 * (ua / up * au) ** 3 / (gm * (uper * 86400.0) ** 2)
    um1 = utotal / (1 + uq)
    res = evaluate(VISUAL, {"angular_semimajor_axis": Measured.normal(*a_mas), "parallax": Measured.normal(*plx),
                            "period": Measured.normal(*per), "mass_ratio": Measured.normal(*q)},
                   options=Options(correlations={("angular_semimajor_axis", "parallax"): rho}))
    v, s = values(res), sigmas(res)
    assert v["total_mass"] == pytest.approx(utotal.nominal_value, rel=1e-12)
    assert s["total_mass"] == pytest.approx(utotal.std_dev, rel=1e-6)
    assert s["m1"] == pytest.approx(um1.std_dev, rel=1e-6)
    assert s["distance"] == pytest.approx((1000 / up).std_dev, rel=1e-6)


def test_visual_monte_carlo_agrees_with_linear_for_small_errors():
    q = {"angular_semimajor_axis": Measured.normal(412.0, 1.0), "parallax": Measured.normal(48.3, 0.2),
         "period": Measured.normal(7305.0, 5.0)}
    lin = evaluate(VISUAL, q)
    mc = evaluate(VISUAL, q, options=Options(method="monte_carlo", samples=20000, seed=11))
    assert sigmas(mc)["total_mass"] == pytest.approx(sigmas(lin)["total_mass"], rel=0.03)
    assert values(mc)["total_mass"] == pytest.approx(values(lin)["total_mass"], rel=0.003)


def test_visual_vectorised_over_systems():
    plx = np.array([10.0, 48.3, 120.0])
    res = evaluate(VISUAL, {"period": Measured.normal([900.0, 7305.0, 15000.0], 3.0),
                            "angular_semimajor_axis": Measured.normal([40.0, 412.0, 2100.0], 1.0),
                            "parallax": Measured.normal(plx, 0.3)})
    for k in range(3):
        one = evaluate(VISUAL, {"period": Measured.normal([900.0, 7305.0, 15000.0][k], 3.0),
                                "angular_semimajor_axis": Measured.normal([40.0, 412.0, 2100.0][k], 1.0),
                                "parallax": Measured.normal(plx[k], 0.3)})
        assert res.outputs["total_mass"]["value"][k] == pytest.approx(one.outputs["total_mass"]["value"][0], rel=1e-14)
        assert res.outputs["total_mass"]["sigma"][k] == pytest.approx(one.outputs["total_mass"]["sigma"][0], rel=1e-12)


# ----------------------------------------------------------------------------- Thiele–Innes

RNG = np.random.default_rng(20240601)
ELEMENTS = np.column_stack([
    RNG.uniform(1.0, 2000.0, 200),     # a (mas)
    RNG.uniform(0.5, 179.5, 200),      # i
    RNG.uniform(0.0, 360.0, 200),      # omega
    RNG.uniform(0.0, 180.0, 200),      # node
])


def test_thiele_innes_identities():
    # Heintz (1978), Double Stars; Binnendijk (1960): A^2 + B^2 + F^2 + G^2 = a^2 (1 + cos^2 i),
    # AG - BF = a^2 cos i
    a, i, w, n = ELEMENTS.T
    A, B, F, G = ast.thiele_innes_constants(a, i, w, n)
    c = np.cos(np.radians(i))
    np.testing.assert_allclose(A**2 + B**2 + F**2 + G**2, a**2 * (1 + c**2), rtol=1e-12)
    assert np.all(np.abs(A * G - B * F - a**2 * c) <= 1e-12 * a**2)


def test_thiele_innes_face_on_orbit_by_hand():
    # i = 0, omega = node = 0: periastron due north, motion north -> east (x = a X, y = a Y), Heintz's definitions
    A, B, F, G = ast.thiele_innes_constants(5.0, 0.0, 0.0, 0.0)
    assert (A, B, F, G) == pytest.approx((5.0, 0.0, 0.0, 5.0), abs=1e-15)
    # edge-on (i = 90), omega = 90, node = 0: the orbit projects onto the north-south line of nodes, x = -a Y
    A, B, F, G = ast.thiele_innes_constants(2.0, 90.0, 90.0, 0.0)
    assert (A, B, F, G) == pytest.approx((0.0, 0.0, -2.0, 0.0), abs=1e-15)


def test_round_trip_campbell_thiele_innes_campbell():
    a, i, w, n = ELEMENTS.T
    a2, i2, w2, n2 = ast.campbell_elements(*ast.thiele_innes_constants(a, i, w, n))
    np.testing.assert_allclose(a2, a, rtol=1e-10)
    np.testing.assert_allclose(i2, i, atol=1e-10)
    np.testing.assert_allclose(n2, n, atol=1e-10)
    d = (w2 - w + 180.0) % 360.0 - 180.0
    np.testing.assert_allclose(d, 0.0, atol=1e-10)


def test_round_trip_thiele_innes_campbell_thiele_innes():
    consts = RNG.normal(0.0, 300.0, (200, 4))
    back = ast.thiele_innes_constants(*ast.campbell_elements(*consts.T))
    np.testing.assert_allclose(np.column_stack(back), consts, rtol=0, atol=1e-10 * np.abs(consts).max())


def test_node_convention_and_ambiguity():
    # (omega, node) and (omega + 180, node + 180) give the same sky orbit (Heintz 1978): node comes back in
    # [0, 180) and omega follows
    t1 = ast.thiele_innes_constants(300.0, 50.0, 100.0, 250.0)
    t2 = ast.thiele_innes_constants(300.0, 50.0, 280.0, 70.0)
    np.testing.assert_allclose(t1, t2, atol=1e-12)
    a, i, w, n = ast.campbell_elements(*t1)
    assert n == pytest.approx(70.0, abs=1e-10)
    assert w == pytest.approx(280.0, abs=1e-10)


def test_thiele_innes_omega_primary_is_relative_minus_180():
    rel = compute("thiele-innes", {"angular_semimajor_axis": 327.0, "inclination": 63.0, "omega": 212.0,
                                   "node": 118.0})
    pri = compute("thiele-innes", {"angular_semimajor_axis": 327.0, "inclination": 63.0, "omega_primary": 32.0,
                                   "node": 118.0})
    for k in "ABFG":
        assert pri["results"][k]["value"] == pytest.approx(rel["results"][k]["value"], rel=1e-13)
    assert "RELATIVE" in rel["provenance"]["conventions"]["omega"]
    back = compute("campbell", {k: rel["results"][k]["value"] for k in "ABFG"})["results"]
    assert back["omega"]["value"] == pytest.approx(212.0, abs=1e-10)
    assert back["omega_primary"]["value"] == pytest.approx(32.0, abs=1e-10)


def test_face_on_orbit_is_flagged(client):
    # i = 0: only omega + node is determined (Heintz 1978), the split is arbitrary
    A, B, F, G = ast.thiele_innes_constants(200.0, 0.0, 40.0, 30.0)
    status, body = post(client, "/v1/astrometric/campbell", {"A": A, "B": B, "F": F, "G": G})
    assert status == 200
    assert any(w["code"] == "face_on" for w in body["warnings"])
    r = body["results"]
    assert r["inclination"]["value"] == pytest.approx(0.0, abs=1e-6)
    assert (r["omega"]["value"] + r["node"]["value"] - 70.0 + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-9)


def _classic_campbell(A, B, F, G):
    """The textbook route (Heintz 1978): a^2 = u + sqrt(u^2 - v^2), cos i = v / a^2, for `uncertainties`."""
    uu = (A**2 + B**2 + F**2 + G**2) / 2
    v = A * G - B * F
    a2 = uu + umath.sqrt(uu**2 - v**2)
    a = umath.sqrt(a2)
    i = umath.degrees(umath.acos(v / a2))
    s = umath.atan2(B - F, A + G)
    d = umath.atan2(-B - F, A - G)
    return a, i, umath.degrees((s + d) / 2), umath.degrees((s - d) / 2)


def test_campbell_covariance_against_uncertainties():
    # correlated A, B, F, G (as astrometric catalogues publish them)
    names = ["A", "B", "F", "G"]
    nominal = ast.thiele_innes_constants(327.0, 63.0, 212.0, 118.0)
    sig = [1.1, 0.8, 1.4, 0.9]
    corr = np.eye(4)
    pairs = {("A", "G"): 0.35, ("B", "F"): -0.25, ("A", "B"): 0.1, ("F", "G"): 0.2}
    for (p, q), rho in pairs.items():
        corr[names.index(p), names.index(q)] = corr[names.index(q), names.index(p)] = rho
    uvals = correlated_values_norm(list(zip(nominal, sig)), corr)
    ua, ui, uw, un = _classic_campbell(*uvals)
    res = evaluate(CAMPBELL, {n: Measured.normal(x, s) for n, x, s in zip(names, nominal, sig)},
                   options=Options(correlations=pairs))
    v, s = values(res), sigmas(res)
    assert v["angular_semimajor_axis"] == pytest.approx(ua.nominal_value, rel=1e-12)
    assert v["inclination"] == pytest.approx(ui.nominal_value, rel=1e-10)
    assert s["angular_semimajor_axis"] == pytest.approx(ua.std_dev, rel=1e-6)
    assert s["inclination"] == pytest.approx(ui.std_dev, rel=1e-6)
    assert s["omega"] == pytest.approx(uw.std_dev, rel=1e-6)
    assert s["node"] == pytest.approx(un.std_dev, rel=1e-6)
    assert (v["node"] - un.nominal_value) % 180 == pytest.approx(0.0, abs=1e-9)


def test_thiele_innes_covariance_against_uncertainties():
    ua, ui, uw, un = ufloat(327.0, 2.0), ufloat(63.0, 0.7), ufloat(212.0, 1.5), ufloat(118.0, 0.6)
    i, w, n = umath.radians(ui), umath.radians(uw), umath.radians(un)
    uA = ua * (umath.cos(w) * umath.cos(n) - umath.sin(w) * umath.sin(n) * umath.cos(i))
    uG = ua * (-umath.sin(w) * umath.sin(n) + umath.cos(w) * umath.cos(n) * umath.cos(i))
    res = evaluate(THIELE_INNES, {"angular_semimajor_axis": Measured.normal(327.0, 2.0),
                                  "inclination": Measured.normal(63.0, 0.7), "omega": Measured.normal(212.0, 1.5),
                                  "node": Measured.normal(118.0, 0.6)})
    s = sigmas(res)
    assert s["A"] == pytest.approx(uA.std_dev, rel=1e-6)
    assert s["G"] == pytest.approx(uG.std_dev, rel=1e-6)


def test_campbell_monte_carlo_agrees_with_linear():
    nominal = ast.thiele_innes_constants(327.0, 63.0, 212.0, 118.0)
    q = {n: Measured.normal(x, 0.8) for n, x in zip("ABFG", nominal)}
    lin = evaluate(CAMPBELL, q)
    mc = evaluate(CAMPBELL, q, options=Options(method="monte_carlo", samples=20000, seed=5))
    for name in ("angular_semimajor_axis", "inclination", "omega", "node"):
        assert sigmas(mc)[name] == pytest.approx(sigmas(lin)[name], rel=0.04), name


def test_node_uncertainty_does_not_jump_at_the_convention_boundary():
    # equal, independent errors on A, B, F, G are invariant under a rotation of the node, so sigma(node)
    # must be the same at node = 0.05 deg (by the [0, 180) boundary) as at 90.05 deg
    out = []
    for node in (0.05, 90.05):
        nominal = ast.thiele_innes_constants(300.0, 50.0, 100.0, node)
        out.append(evaluate(CAMPBELL, {n: Measured.normal(x, 0.5) for n, x in zip("ABFG", nominal)}))
    assert sigmas(out[0])["node"] == pytest.approx(sigmas(out[1])["node"], rel=1e-6)
    assert values(out[0])["node"] == pytest.approx(0.05, abs=1e-9)
    mc = evaluate(CAMPBELL, {n: Measured.normal(x, 0.5) for n, x in
                             zip("ABFG", ast.thiele_innes_constants(300.0, 50.0, 100.0, 0.05))},
                  options=Options(method="monte_carlo", samples=5000, seed=2))
    assert 0.0 <= values(mc)["node"] < 180.0
    assert sigmas(mc)["node"] == pytest.approx(sigmas(out[0])["node"], rel=0.06)


# ----------------------------------------------------------------------------- photocentre

def _forward_photocentre(m1, m2, beta, period_d, distance_pc):
    """alpha'' of a photocentre orbit by astropy: a^3 = G M P^2 / 4 pi^2, alpha = a (B - beta) (van de Kamp 1967)."""
    a = ((const.G * (m1 + m2) * u.M_sun * (period_d * u.day) ** 2 / (4 * np.pi**2)) ** (1 / 3)).to(u.au).value
    b = m2 / (m1 + m2)
    return a * (b - beta) / distance_pc * 1000.0, a


@pytest.mark.parametrize("m1, m2, beta", [(1.08, 0.14, 0.0), (1.0, 0.8, 0.2), (0.6, 18.0, 0.0),
                                          (2.0, 0.01, 0.0), (1.2, 1.1, 0.45)])
def test_photocentre_recovers_companion_mass_against_astropy(m1, m2, beta):
    alpha, a = _forward_photocentre(m1, m2, beta, 612.0, 46.7)
    r = compute("photocentre", {"photocentre_semimajor_axis": alpha, "distance": 46.7, "period": 612.0,
                                "primary_mass": m1, "luminosity_fraction": beta})["results"]
    assert r["m2"]["value"] == pytest.approx(m2, rel=1e-9)
    assert r["semimajor_axis"]["value"] == pytest.approx(a, rel=1e-9)
    assert r["fractional_mass"]["value"] > beta
    # f_ast = (M1 + M2)(B - beta)^3, for beta = 0 the mass function M2^3/(M1 + M2)^2 (van de Kamp 1967)
    b = m2 / (m1 + m2)
    assert r["astrometric_mass_function"]["value"] == pytest.approx((m1 + m2) * (b - beta) ** 3, rel=1e-9)


def test_photocentre_heavy_dark_companion_keeps_its_digits():
    # M2 = 200 M1 puts 1 - B at 5e-3: the solver must not lose it to cancellation
    alpha, _ = _forward_photocentre(0.5, 100.0, 0.0, 3000.0, 100.0)
    r = compute("photocentre", {"photocentre_semimajor_axis": alpha, "parallax": 10.0, "period": 3000.0,
                                "primary_mass": 0.5})
    assert r["results"]["m2"]["value"] == pytest.approx(100.0, rel=1e-9)
    assert any(w["code"] == "companion_more_massive" for w in r["warnings"])


def test_photocentre_solver_vectorised_with_nan_entries():
    f = np.array([[1e-9, 0.01, np.nan], [3.0, 1e4, 0.2]])
    m1 = np.array([[1.0, 0.3, 1.0], [2.0, 0.1, 1.0]])
    beta = np.array([[0.0, 0.3, 0.0], [0.1, 0.0, 1.0]])
    b, one_minus_b = ast.fractional_mass_from_photocentre(f, m1, beta)
    assert np.isnan(b[0, 2]) and np.isnan(b[1, 2])      # NaN in, and beta = 1 (no root)
    ok = np.isfinite(b)
    m2 = m1 * b / one_minus_b
    residual = (m2 - beta * (m1 + m2)) ** 3 / (m1 + m2) ** 2 - f
    np.testing.assert_allclose(residual[ok], 0.0, atol=1e-12 * np.nanmax(f))
    assert np.all(b[ok] > beta[ok])


def test_photocentre_luminous_companion_needs_more_mass():
    # the dark-companion solution is the lower limit: any light from the companion shrinks the photocentre orbit
    base = {"photocentre_semimajor_axis": 3.71, "parallax": 21.4, "period": 612.0, "primary_mass": 1.08}
    dark = compute("photocentre", base)["results"]["m2"]["value"]
    lit = compute("photocentre", {**base, "luminosity_fraction": 0.05})["results"]["m2"]["value"]
    assert lit > dark


def test_photocentre_monte_carlo_agrees_with_linear():
    q = {"photocentre_semimajor_axis": Measured.normal(3.71, 0.02), "parallax": Measured.normal(21.4, 0.05),
         "period": Measured.normal(612.0, 2.0), "primary_mass": Measured.normal(1.08, 0.02),
         "luminosity_fraction": Measured.exact(0.0)}
    lin = evaluate(PHOTOCENTRE, q)
    mc = evaluate(PHOTOCENTRE, q, options=Options(method="monte_carlo", samples=20000, seed=9))
    assert sigmas(mc)["m2"] == pytest.approx(sigmas(lin)["m2"], rel=0.04)
    assert values(mc)["m2"] == pytest.approx(values(lin)["m2"], rel=0.002)


# ----------------------------------------------------------------------------- over HTTP

VISUAL_BODY = {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": 48.3}


@pytest.mark.parametrize("parallax", [0.0, -3.0])
def test_http_parallax_must_be_positive(client, parallax):
    status, body = post(client, "/v1/astrometric/visual", {**VISUAL_BODY, "parallax": parallax})
    assert status == 422 and "parallax" in body["errors"]


def test_http_parallax_or_distance_exactly_one(client):
    status, body = post(client, "/v1/astrometric/visual", {**VISUAL_BODY, "distance": 20.7})
    assert status == 422 and {"parallax", "distance"} <= set(body["errors"])
    neither = {k: v for k, v in VISUAL_BODY.items() if k != "parallax"}
    status, body = post(client, "/v1/astrometric/visual", neither)
    assert status == 422 and {"parallax", "distance"} <= set(body["errors"])


@pytest.mark.parametrize("extra, field", [({"mass_ratio": 0.0}, "mass_ratio"), ({"mass_ratio": -0.5}, "mass_ratio"),
                                          ({"fractional_mass": 1.0}, "fractional_mass"),
                                          ({"fractional_mass": 0.0}, "fractional_mass")])
def test_http_bad_mass_ratio(client, extra, field):
    status, body = post(client, "/v1/astrometric/visual", {**VISUAL_BODY, **extra})
    assert status == 422 and field in body["errors"]


def test_http_mass_ratio_and_fractional_mass_not_both(client):
    status, body = post(client, "/v1/astrometric/visual", {**VISUAL_BODY, "mass_ratio": 0.7, "fractional_mass": 0.4})
    assert status == 422 and {"mass_ratio", "fractional_mass"} <= set(body["errors"])


def test_http_thiele_innes_set_with_zero_axis(client):
    status, body = post(client, "/v1/astrometric/campbell", {"A": 0, "B": 0, "F": 0, "G": 0})
    assert status == 422 and set("ABFG") <= set(body["errors"])
    assert body["status"] == 422


def test_http_thiele_innes_needs_one_omega(client):
    base = {"angular_semimajor_axis": 327.0, "inclination": 63.0, "node": 118.0}
    status, body = post(client, "/v1/astrometric/thiele-innes", {**base, "omega": 212.0, "omega_primary": 32.0})
    assert status == 422 and {"omega", "omega_primary"} <= set(body["errors"])
    status, body = post(client, "/v1/astrometric/thiele-innes", base)
    assert status == 422 and {"omega", "omega_primary"} <= set(body["errors"])


def test_http_campbell_with_correlations_and_monte_carlo(client):
    nominal = ast.thiele_innes_constants(327.0, 63.0, 212.0, 118.0)
    req = {k: {"value": x, "sigma": 0.9} for k, x in zip("ABFG", nominal)}
    req["correlations"] = [{"between": ["A", "G"], "rho": 0.3}]
    status, body = post(client, "/v1/astrometric/campbell", req)
    assert status == 200
    assert body["results"]["node"]["value"] == pytest.approx(118.0, abs=1e-9)
    assert "node" in body["provenance"]["conventions"]
    req["uncertainty"] = {"method": "monte_carlo", "samples": 3000, "seed": 4}
    status, body = post(client, "/v1/astrometric/campbell", req)
    assert status == 200 and body["uncertainty"]["method"] == "monte_carlo"
    r = body["results"]["inclination"]
    assert r["low"] < r["value"] < r["high"]


@pytest.mark.parametrize("beta", [1.0, 1.5, -0.1])
def test_http_photocentre_luminosity_fraction_outside_its_range(client, beta):
    # beta >= 1 leaves no companion mass with B > beta (photocentre moving with the primary)
    status, body = post(client, "/v1/astrometric/photocentre",
                        {"photocentre_semimajor_axis": 3.71, "parallax": 21.4, "period": 612.0,
                         "primary_mass": 1.08, "luminosity_fraction": beta})
    assert status == 422 and "luminosity_fraction" in body["errors"]


def test_http_photocentre_default_dark_and_needs_primary_mass(client):
    base = {"photocentre_semimajor_axis": 3.71, "parallax": 21.4, "period": 612.0}
    status, body = post(client, "/v1/astrometric/photocentre", base)
    assert status == 422 and "primary_mass" in body["errors"]
    status, body = post(client, "/v1/astrometric/photocentre", {**base, "primary_mass": 1.08})
    assert status == 200
    assert body["inputs"]["luminosity_fraction"]["value"] == 0.0
    assert body["results"]["photocentre_semimajor_axis_au"]["value"] == pytest.approx(
        body["results"]["a1"]["value"], rel=1e-12)


def test_http_listed_in_calculations_and_openapi(client):
    r = client.get("/v1/calculations")
    assert r.status_code == 200
    text = r.get_data(as_text=True)
    spec = client.get("/openapi.yaml").get_data(as_text=True)
    for path in ("/v1/astrometric/visual", "/v1/astrometric/campbell", "/v1/astrometric/thiele-innes",
                 "/v1/astrometric/photocentre"):
        assert path in text and path in spec


# ----------------------------------------------------------------------------- branch property (issue 15)

from hypothesis import given, settings  # noqa: E402
from hypothesis import strategies as st  # noqa: E402

BOUNDED = settings(max_examples=50, deadline=None, derandomize=True, database=None)
QUADRANT_ANGLES = st.sampled_from([-360.0, -270.0, -180.0, -90.0, 0.0, 90.0, 180.0, 270.0, 360.0])
# on the boundary, a rounding error away, and a little further: where a node computed as -1e-15 deg used to
# wrap to 180.0 and then to 0 without omega following it
NUDGES = st.sampled_from([0.0, 1e-15, -1e-15, 4e-15, -4e-15, 1e-13, -1e-13, 1e-9, -1e-9, 1e-3, -1e-3])
INCLINATIONS = st.sampled_from([0.5, 45.0, 89.999999, 90.0, 90.000001, 135.0, 179.5]) | st.floats(1.0, 179.0)


def _sky_turn_free(constants_in, constants_out, scale):
    # the service's answer must give back the same constants, not all four with their signs reversed
    np.testing.assert_allclose(np.asarray(constants_out, float), np.asarray(constants_in, float),
                               rtol=0, atol=1e-9 * scale)


@BOUNDED
@given(w=QUADRANT_ANGLES, dw=NUDGES, n=QUADRANT_ANGLES, dn=NUDGES, i=INCLINATIONS)
def test_campbell_round_trip_on_quadrant_boundaries(w, dw, n, dn, i):
    # Campbell -> Thiele–Innes -> Campbell (through the service) -> Thiele–Innes: the recomputed constants are
    # the input's (Heintz 1978: (omega, node) and (omega + 180, node + 180) are the same sky orbit, nothing else)
    a = 300.0
    t = ast.thiele_innes_constants(a, i, w + dw, n + dn)
    r = compute("campbell", dict(zip("ABFG", (float(x) for x in t))))["results"]
    back = ast.thiele_innes_constants(r["angular_semimajor_axis"]["value"], r["inclination"]["value"],
                                      r["omega"]["value"], r["node"]["value"])
    _sky_turn_free(t, back, a)
    assert 0.0 <= r["node"]["value"] < 180.0
    assert r["angular_semimajor_axis"]["value"] == pytest.approx(a, rel=1e-12)
    assert r["inclination"]["value"] == pytest.approx(i, abs=1e-6)
    # omega and node: the input's, or both turned by 180 deg
    turn = 0.0 if abs((r["node"]["value"] - (n + dn) + 180.0) % 360.0 - 180.0) < 90.0 else 180.0
    assert (r["omega"]["value"] - (w + dw) - turn + 180.0) % 360.0 - 180.0 == pytest.approx(0.0, abs=1e-6)


@BOUNDED
@given(w=QUADRANT_ANGLES, dw=NUDGES, n=QUADRANT_ANGLES, dn=NUDGES, i=INCLINATIONS)
def test_thiele_innes_round_trip_on_quadrant_boundaries(w, dw, n, dn, i):
    # Thiele–Innes -> Campbell -> Thiele–Innes, both through the service
    t = ast.thiele_innes_constants(250.0, i, w + dw, n + dn)
    c = compute("campbell", dict(zip("ABFG", (float(x) for x in t))))["results"]
    back = compute("thiele-innes", {k: c[k]["value"] for k in ("angular_semimajor_axis", "inclination", "omega",
                                                                 "node")})["results"]
    _sky_turn_free(t, [back[k]["value"] for k in "ABFG"], 250.0)
