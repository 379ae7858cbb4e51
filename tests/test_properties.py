"""Property tests (Hypothesis) on the physics, through the service layer where units are involved.

Symmetries, unit invariance, monotonicity, limits and the agreement of linear propagation
with Monte Carlo at small errors.  The sources of the expected behaviour are named beside
each property; every test is bounded in examples and runs in well under a second or two.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from astropy import units as u

from calcservice.core import compute
from calcservice.registry import calculations

FAST = settings(max_examples=40, deadline=None, derandomize=True, database=None,
                suppress_health_check=[HealthCheck.too_slow])

periods = st.floats(0.5, 1.0e4)                    # d
speeds = st.floats(1.0, 300.0)                     # km/s
eccentricities = st.floats(0.0, 0.95)
inclinations = st.floats(5.0, 175.0)               # deg
masses = st.floats(0.1, 60.0)                      # solMass


def results(name, body):
    return compute(name, body)["results"]


def close(a, b, rel=1e-9, abs_=0.0):
    return math.isclose(a, b, rel_tol=rel, abs_tol=abs_)


# --- symmetry under swapping the stars -------------------------------------------------------

@FAST
@given(periods, speeds, speeds, eccentricities, inclinations)
def test_sb2_swapping_the_stars_swaps_the_masses(period, k1, k2, e, i):
    # Hilditch (2001) eq. 2.52-2.53: M1,2 sin^3 i = C (K1 + K2)^2 K2,1, so K1 <-> K2 swaps M1 <-> M2,
    # and q = K1/K2 becomes 1/q; a sin i = a1 sin i + a2 sin i is unchanged.
    sig = {"period": 0.001 * period, "k1": 0.01 * k1, "k2": 0.02 * k2, "e": 0.005, "i": 0.5}
    body = {"period": {"value": period, "sigma": sig["period"]}, "eccentricity": {"value": e, "sigma": sig["e"]},
            "inclination": {"value": i, "sigma": sig["i"]}}
    a = results("sb2", {**body, "k1": {"value": k1, "sigma": sig["k1"]}, "k2": {"value": k2, "sigma": sig["k2"]}})
    b = results("sb2", {**body, "k1": {"value": k2, "sigma": sig["k2"]}, "k2": {"value": k1, "sigma": sig["k1"]}})
    for one, two in (("m1_sin3i", "m2_sin3i"), ("a1_sin_i", "a2_sin_i"), ("m1", "m2")):
        for key in ("value", "sigma"):
            assert close(a[one][key], b[two][key], 1e-7), (one, key)
            assert close(a[two][key], b[one][key], 1e-7), (two, key)
    for same in ("a_sin_i", "total_mass", "semimajor_axis", "periastron_distance"):
        assert close(a[same]["value"], b[same]["value"], 1e-12)
        assert close(a[same]["sigma"], b[same]["sigma"], 1e-7)
    assert close(a["mass_ratio"]["value"] * b["mass_ratio"]["value"], 1.0, 1e-12)


@FAST
@given(periods, eccentricities, masses, masses)
def test_geometry_swapping_the_masses_swaps_the_roche_lobes(period, e, m1, m2):
    # Eggleton (1983) ApJ 268, 368: r_L depends on the star's own q = M_self/M_other, so M1 <-> M2
    # swaps the two lobes; Kepler's third law and the separations depend on M1 + M2 only.
    base = {"period": period, "eccentricity": e}
    a = results("geometry", {**base, "m1": m1, "m2": m2})
    b = results("geometry", {**base, "m1": m2, "m2": m1})
    assert close(a["roche_lobe1"]["value"], b["roche_lobe2"]["value"], 1e-12)
    assert close(a["roche_lobe2"]["value"], b["roche_lobe1"]["value"], 1e-12)
    for same in ("semimajor_axis", "periastron_distance", "apastron_distance", "speed_periastron"):
        assert close(a[same]["value"], b[same]["value"], 1e-12)


@FAST
@given(st.floats(1e-7, 1e-4), st.floats(1e-7, 1e-4), st.floats(500.0, 4000.0), st.floats(500.0, 4000.0),
       st.floats(0.5, 50.0))
def test_collision_swapping_the_winds_swaps_the_stagnation_distances(mdot1, mdot2, v1, v2, separation):
    # the ram-pressure balance Mdot1 v1 / r1^2 = Mdot2 v2 / r2^2 (e.g. Stevens, Blondin & Pollock 1992)
    # is symmetric in the stars: swapping the winds swaps r1 and r2 and keeps the weaker/stronger ratio
    a = results("collision", {"mdot1": mdot1, "mdot2": mdot2, "vinf1": v1, "vinf2": v2, "separation": separation})
    b = results("collision", {"mdot1": mdot2, "mdot2": mdot1, "vinf1": v2, "vinf2": v1, "separation": separation})
    assert close(a["stagnation_distance1"]["value"], b["stagnation_distance2"]["value"], 1e-9)
    assert close(a["stagnation_distance2"]["value"], b["stagnation_distance1"]["value"], 1e-9)
    assert close(a["momentum_ratio"]["value"], b["momentum_ratio"]["value"], 1e-12)
    assert close(a["stagnation_distance1"]["value"] + a["stagnation_distance2"]["value"], separation, 1e-9)


# --- invariance under unit changes -----------------------------------------------------------

@FAST
@given(periods, speeds, speeds, eccentricities, inclinations)
def test_sb2_is_invariant_under_input_units(period, k1, k2, e, i):
    # astropy units: 1 yr = 365.25 d (Julian year), 1 km/s = 1000 m/s, 1 deg = pi/180 rad
    canonical = {"period": {"value": period, "sigma": 0.001 * period}, "k1": {"value": k1, "sigma": 0.3},
                 "k2": {"value": k2, "sigma": 0.5}, "eccentricity": {"value": e, "sigma": 0.01},
                 "inclination": {"value": i, "sigma": 1.0}}
    other = {"period": {"value": period / 365.25, "sigma": 0.001 * period / 365.25, "unit": "yr"},
             "k1": {"value": k1 * 1e3, "sigma": 300.0, "unit": "m/s"},
             "k2": {"value": k2 * 1e3, "sigma": 500.0, "unit": "m/s"},
             "eccentricity": {"value": e, "sigma": 0.01},
             "inclination": {"value": math.radians(i), "sigma": math.radians(1.0), "unit": "rad"}}
    a, b = results("sb2", canonical), results("sb2", other)
    assert a.keys() == b.keys()
    for name in a:
        assert close(a[name]["value"], b[name]["value"], 1e-9), name
        assert close(a[name]["sigma"], b[name]["sigma"], 1e-6, 1e-15), name


@FAST
@given(periods, speeds, eccentricities, masses, inclinations)
def test_sb1_output_units_follow_astropy(period, k1, e, m1, i):
    # the response in other units is the canonical one times astropy's conversion factor
    body = {"period": period, "k1": {"value": k1, "sigma": 0.2}, "eccentricity": e, "primary_mass": m1,
            "inclination": i}
    a = results("sb1", body)
    b = results("sb1", {**body, "units": {"m2": "kg", "a1_sin_i": "km", "semimajor_axis": "pc"}})
    for name, unit in (("m2", u.kg), ("a1_sin_i", u.km), ("semimajor_axis", u.pc)):
        k = (1.0 * u.Unit(a[name]["unit"])).to(unit).value
        assert close(b[name]["value"], a[name]["value"] * k, 1e-12)
        assert close(b[name]["sigma"], a[name]["sigma"] * k, 1e-12)
        assert b[name]["unit"] == unit.to_string()


# other units of the same dimension for each canonical unit (astropy converts)
ALTERNATIVE_UNITS = {"d": "h", "km/s": "m/s", "deg": "rad", "mas": "arcsec", "pc": "lyr", "au": "km",
                     "solMass": "kg", "solMass/yr": "kg/s", "solRad": "km", "mJy": "Jy", "GHz": "MHz",
                     "kpc": "pc", "s/yr": "s/d", "solLum": "W"}


def _as_object(value):
    return dict(value) if isinstance(value, dict) else {"value": value}


def _in_other_units(calc, body):
    """The example re-expressed with every convertible input in another unit."""
    out = dict(body)
    converted = []
    for spec in calc.inputs:
        if spec.name not in body or spec.kind != "quantity" or spec.time or spec.unit not in ALTERNATIVE_UNITS:
            continue
        q = _as_object(body[spec.name])
        if "samples" in q or not isinstance(q.get("value"), (int, float)) or "unit" in q:
            continue
        target = ALTERNATIVE_UNITS[spec.unit]
        k = (1.0 * u.Unit(spec.unit)).to(u.Unit(target)).value
        out[spec.name] = {key: (v * k if key in ("value", "sigma", "sigma_minus", "sigma_plus") else v)
                          for key, v in q.items()} | {"unit": target}
        converted.append(spec.name)
    return out, converted


def _flat(results):
    """Every (output, key) -> number of a ``results`` member, series flattened."""
    flat = {}
    for name, entry in results.items():
        if name == "series":
            for sname, s in entry.items():
                for key, values in s.items():
                    if key != "unit":
                        for j, v in enumerate(values):
                            flat[(sname, key, j)] = v
        elif isinstance(entry, dict) and "value" in entry:
            for key, v in entry.items():
                if key != "unit" and isinstance(v, (int, float)):
                    flat[(name, key)] = v
    return flat


CALCULATIONS = sorted((name, calc) for name, calc in calculations().items() if calc.example)


@pytest.mark.parametrize("name,calc", CALCULATIONS, ids=[n for n, _ in CALCULATIONS])
def test_every_calculation_is_invariant_under_input_units(name, calc):
    """Each declared example gives the same results with its inputs in other units of the same
    dimension (new calculations are covered by their declaration's example)."""
    body = dict(calc.example)
    other, converted = _in_other_units(calc, body)
    if not converted:
        pytest.skip(f"{name}: no input in a unit with a listed alternative")
    a, b = _flat(results(name, body)), _flat(results(name, other))
    assert a.keys() == b.keys()
    for key, va in a.items():
        vb = b[key]
        if va is None or vb is None:
            assert va is vb, key
            continue
        scale = max(abs(va), 1e-300)
        # angles that wrap at 360 deg may land on either side of 0 from a 1-ulp difference
        diff = min(abs(va - vb), abs(abs(va - vb) - 360.0)) if key[1] in ("value", "low", "high") else abs(va - vb)
        assert diff <= 1e-8 * scale + 1e-12, (key, va, vb, converted)


# --- monotonicity ----------------------------------------------------------------------------

@FAST
@given(periods, speeds, speeds, eccentricities, masses, inclinations)
def test_sb1_companion_mass_grows_with_k(period, ka, kb, e, m1, i):
    # f(M) grows as K^3 (Hilditch 2001, eq. 2.51) and M2^3 sin^3 i/(M1 + M2)^2 grows with M2
    lo, hi = sorted((ka, kb))
    if hi - lo < 1e-6 * hi:
        return
    body = {"period": period, "eccentricity": e, "primary_mass": m1, "inclination": i}
    a, b = results("sb1", {**body, "k1": lo}), results("sb1", {**body, "k1": hi})
    assert b["mass_function"]["value"] > a["mass_function"]["value"]
    assert b["m2"]["value"] > a["m2"]["value"]
    assert b["m2_min"]["value"] > a["m2_min"]["value"]


@FAST
@given(periods, speeds, eccentricities, masses, st.floats(5.0, 90.0), st.floats(5.0, 90.0))
def test_sb1_companion_mass_falls_with_sin_i(period, k1, e, m1, ia, ib):
    # for a given f(M) and M1, a larger sin i needs a smaller M2; m2 >= m2_min, equal at i = 90 deg
    lo, hi = sorted((ia, ib))
    if hi - lo < 1e-3:
        return
    body = {"period": period, "k1": k1, "eccentricity": e, "primary_mass": m1}
    a, b = results("sb1", {**body, "inclination": lo}), results("sb1", {**body, "inclination": hi})
    assert a["m2"]["value"] > b["m2"]["value"] >= b["m2_min"]["value"] * (1 - 1e-12)


@FAST
@given(periods, speeds, speeds, eccentricities, st.floats(5.0, 90.0), st.floats(5.0, 90.0))
def test_sb2_masses_fall_with_sin_i_and_depend_on_sin_i_only(period, k1, k2, e, ia, ib):
    # M = M sin^3 i / sin^3 i; sin i = sin(180 deg - i), so i and 180 deg - i give the same masses
    lo, hi = sorted((ia, ib))
    if hi - lo < 1e-3:
        return
    body = {"period": period, "k1": k1, "k2": k2, "eccentricity": e}
    a, b = results("sb2", {**body, "inclination": lo}), results("sb2", {**body, "inclination": hi})
    assert a["m1"]["value"] > b["m1"]["value"] and a["m2"]["value"] > b["m2"]["value"]
    mirror = results("sb2", {**body, "inclination": 180.0 - lo})
    assert close(mirror["m1"]["value"], a["m1"]["value"], 1e-9)
    assert close(mirror["m2"]["value"], a["m2"]["value"], 1e-9)


@FAST
@given(periods, speeds, speeds, eccentricities, st.floats(1.01, 2.0))
def test_sb2_minimum_masses_grow_with_both_k(period, k1, k2, e, factor):
    # M1 sin^3 i = C (K1 + K2)^2 K2: increasing in both semi-amplitudes
    body = {"period": period, "k1": k1, "k2": k2, "eccentricity": e}
    base = results("sb2", body)
    for name in ("k1", "k2"):
        up = results("sb2", {**body, name: body[name] * factor})
        assert up["m1_sin3i"]["value"] > base["m1_sin3i"]["value"]
        assert up["m2_sin3i"]["value"] > base["m2_sin3i"]["value"]


# --- limits ----------------------------------------------------------------------------------

@FAST
@given(periods, speeds, speeds, masses)
def test_i_90_gives_the_minimum_masses(period, k1, k2, m1):
    # at i = 90 deg sin i = 1: M = M sin^3 i (sb2) and M2 = M2,min (sb1)
    e = 0.3
    sb2 = results("sb2", {"period": period, "k1": k1, "k2": k2, "eccentricity": e, "inclination": 90.0})
    assert close(sb2["m1"]["value"], sb2["m1_sin3i"]["value"], 1e-14)
    assert close(sb2["m2"]["value"], sb2["m2_sin3i"]["value"], 1e-14)
    sb1 = results("sb1", {"period": period, "k1": k1, "eccentricity": e, "primary_mass": m1, "inclination": 90.0})
    assert close(sb1["m2"]["value"], sb1["m2_min"]["value"], 1e-12)


@FAST
@given(periods, speeds, st.floats(1e-9, 1e-6))
def test_e_to_zero_is_continuous(period, k1, e):
    # the (1 - e^2)^{3/2} and (1 - e^2)^{1/2} factors differ from 1 by O(e^2)
    body = {"period": period, "k1": k1, "k2": 1.3 * k1}
    zero, small = results("sb2", {**body, "eccentricity": 0.0}), results("sb2", {**body, "eccentricity": e})
    for name in ("m1_sin3i", "a_sin_i"):
        assert close(zero[name]["value"], small[name]["value"], 2 * e * e + 1e-15)


@FAST
@given(st.floats(0.0, 0.05), st.floats(0.0, 359.0), st.lists(st.floats(0.0, 1.0), min_size=3, max_size=8))
def test_ephemeris_equation_of_the_centre_at_small_e(e, omega, phases):
    # nu - M = 2 e sin M + (5/4) e^2 sin 2M + O(e^3) (Murray & Dermott 1999, Solar System Dynamics, eq. 2.88);
    # at e = 0, nu = M and rv1 = gamma + K1 cos(nu + omega)
    period, t0, k1, gamma = 10.0, 2460000.0, 30.0, -5.0
    times = [t0 + p * period for p in phases]
    r = results("ephemeris", {"period": period, "eccentricity": e, "omega": omega, "t_periastron": t0, "k1": k1,
                              "gamma": gamma, "times": times, "count": 1})["series"]
    m = np.radians(np.array(r["mean_anomaly"]["value"]))
    nu = np.radians(np.array(r["true_anomaly"]["value"]))
    expected = m + 2 * e * np.sin(m) + 1.25 * e * e * np.sin(2 * m)
    diff = np.angle(np.exp(1j * (nu - expected)))
    assert np.all(np.abs(diff) <= 2.0 * e**3 + 1e-10)
    if e == 0.0:
        rv = gamma + k1 * np.cos(nu + math.radians(omega))
        assert np.allclose(r["rv1"]["value"], rv, rtol=0, atol=1e-9)


# --- linear propagation agrees with Monte Carlo at small errors ------------------------------

def _shrunk(body, factor):
    """The example with every sigma multiplied by ``factor`` (exact numbers stay exact)."""
    out = {}
    for key, v in body.items():
        if isinstance(v, dict) and "value" in v and any(k.startswith("sigma") for k in v):
            out[key] = {k: (x * factor if k.startswith("sigma") else x) for k, x in v.items()}
        else:
            out[key] = v
    return out


DRAWS = 4000


@pytest.mark.parametrize("name,calc", CALCULATIONS, ids=[n for n, _ in CALCULATIONS])
def test_linear_and_monte_carlo_agree_at_small_errors(name, calc):
    """At 1/1000 of the example's errors every function is locally linear: the Monte Carlo standard
    deviation matches the linear sigma (the sampling error of a standard deviation is 1/sqrt(2N),
    1.1 % at N = 4000 -- common practice), and the median matches the nominal value."""
    body = _shrunk(calc.example, 1e-3)
    if any(isinstance(v, (str, dict)) and (v == "isotropic" or (isinstance(v, dict) and "samples" in v))
           for v in body.values()):
        pytest.skip("the example needs Monte Carlo")
    linear = _flat(compute(name, {**body, "uncertainty": {"method": "linear"}})["results"])
    mc = _flat(compute(name, {**body, "uncertainty": {"method": "monte_carlo", "samples": DRAWS, "seed": 11}})
               ["results"])
    checked = 0
    for key, sigma in linear.items():
        if key[1] != "sigma" or sigma is None:
            continue
        value_key = key[:1] + ("value",) + key[2:]
        value, mc_sigma, mc_value = linear[value_key], mc.get(key), mc.get(value_key)
        if value is None or mc_sigma is None or mc_value is None:
            continue
        assert abs(mc_sigma - sigma) <= 0.06 * sigma + 1e-12 * abs(value) + 1e-300, (key, sigma, mc_sigma)
        gap = abs(mc_value - value)
        gap = min(gap, abs(gap - 360.0))          # wrapping angles
        # the standard error of a median is 1.25 sigma/sqrt(N) (common practice): allow about 5 of them
        assert gap <= 6 * sigma / math.sqrt(DRAWS) + 1e-12 * abs(value) + 1e-300, (value_key, value, mc_value)
        checked += 1
    assert checked > 0
