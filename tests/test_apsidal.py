"""Apsidal motion, a period derivative and the light-travel time in the ephemeris, against independent
computations (a direct Kepler solve with scipy, root finding for event dates, astropy constants)."""

import math

import pytest
from astropy import constants as const
from astropy import units as u
from scipy.optimize import brentq

from calcservice.core import compute

from .conftest import post

PATH = "/v1/orbit/ephemeris"
# a fictional eccentric binary with a fast apsidal motion (a close massive pair)
P, E, W, T0, K1, K2, GAMMA = 4.87, 0.19, 72.0, 2459402.31, 118.0, 151.0, -11.0
WDOT = 3.6          # deg/yr
TIMES = [T0 + 0.3, T0 + 250.7, T0 + 1461.2, T0 + 3652.9]
JULIAN_YEAR_D = 365.25
S_PER_YEAR = (1 * u.yr).to_value(u.s)        # Julian year in s (astropy)


def _body(**kw):
    b = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "k1": K1, "k2": K2, "gamma": GAMMA,
         "times": TIMES, "after": T0 + 3000.0, "count": 2}
    b.update(kw)
    return b


def _rv1_direct(t, p=P, e=E, w0=W, wdot=0.0, n_of_t=None):
    """v1 from a direct Kepler solve (brentq) with omega(t) = omega0 + omega_dot (t - T0) / 365.25 d."""
    n = (t - T0) / p if n_of_t is None else n_of_t(t)
    m = math.remainder(2 * math.pi * n, 2 * math.pi)
    big_e = brentq(lambda x: x - e * math.sin(x) - m, -math.pi - 1, math.pi + 1, xtol=1e-15)
    nu = 2 * math.atan2(math.sqrt(1 + e) * math.sin(big_e / 2), math.sqrt(1 - e) * math.cos(big_e / 2))
    w = math.radians(w0 + wdot * (t - T0) / JULIAN_YEAR_D)
    return GAMMA + K1 * (math.cos(nu + w) + e * math.cos(w)), nu, w


def test_zero_rates_are_today():
    # omega_dot = 0 and period_derivative = 0: every series value and event date as without them
    base = compute("ephemeris", _body())["results"]
    zero = compute("ephemeris", _body(omega_dot=0.0, period_derivative=0.0))["results"]
    for name in ("phase", "rv1", "rv2", "true_anomaly"):
        assert zero["series"][name]["value"] == base["series"][name]["value"]
    for kind in ("periastron", "conjunctions", "rv_extrema"):
        assert [x["value"] for x in zero["events"][kind]] == [x["value"] for x in base["events"][kind]]


def test_apsidal_motion_in_the_radial_velocities():
    r = compute("ephemeris", _body(omega_dot=WDOT))["results"]["series"]["rv1"]["value"]
    for t, v in zip(TIMES, r):
        assert v == pytest.approx(_rv1_direct(t, wdot=WDOT)[0], abs=1e-8)
    # and ten years on, omega has moved by 36 deg: the curve differs from the fixed-omega one
    assert abs(r[-1] - _rv1_direct(TIMES[-1])[0]) > 1.0


def _rv1_slope(t, h=1e-4, **orbit):
    """dv1/dt (km/s per day) by a central difference of :func:`_rv1_direct` (truncation ~1e-9 of the slope)."""
    return (_rv1_direct(t + h, **orbit)[0] - _rv1_direct(t - h, **orbit)[0]) / (2 * h)


def test_apsidal_motion_in_the_event_dates():
    # the conjunction nu(t) + omega(t) = 90 deg found by brentq in time, and the RV extrema where dv1/dt = 0 (with
    # omega moving, not where nu + omega = 0: the two differ by ~e kappa rad, kappa = omega_dot / nu_dot)
    r = compute("ephemeris", _body(omega_dot=WDOT))["results"]["events"]

    def at(target):
        def f(t):
            _, nu, w = _rv1_direct(t, wdot=WDOT)
            return math.remainder(nu + w - math.radians(target), 2 * math.pi)
        return f

    for entry in r["conjunctions"]:
        target = 90.0 if entry["kind"] == "conjunction_star2_in_front" else 270.0
        t = entry["value"]
        assert brentq(at(target), t - 0.2, t + 0.2, xtol=1e-12) == pytest.approx(t, abs=1e-7)
    for entry in r["rv_extrema"]:
        t = entry["value"]
        assert brentq(lambda x: _rv1_slope(x, wdot=WDOT), t - 0.2, t + 0.2, xtol=1e-12) == pytest.approx(t, abs=1e-7)
    # periastron passages do not depend on omega
    base = compute("ephemeris", _body())["results"]["events"]["periastron"]
    assert [x["value"] for x in r["periastron"]] == pytest.approx([x["value"] for x in base], abs=1e-9)


def _event_roots(target, lo, hi, **orbit):
    """Every date in [lo, hi] with nu(t) + omega(t) = target (deg), by brentq on a fine grid (independent)."""
    def x(t):
        _, nu, w = _rv1_direct(t, **orbit)
        return nu + w - math.radians(target)

    def f(t):
        return math.sin(x(t))          # continuous where nu wraps; zero at the event and half a turn from it

    grid = [lo + (hi - lo) * k / 4000 for k in range(4001)]
    values = [f(t) for t in grid]
    roots = [brentq(f, a, b, xtol=1e-12) for a, b, fa, fb in zip(grid, grid[1:], values, values[1:]) if fa * fb < 0]
    return [t for t in roots if math.cos(x(t)) > 0]


def _extremum_roots(maximum, lo, hi, **orbit):
    """Every date in [lo, hi] where v1 is largest (or smallest): dv1/dt changes sign, by brentq on a fine grid."""
    grid = [lo + (hi - lo) * k / 4000 for k in range(4001)]
    values = [_rv1_slope(t, **orbit) for t in grid]
    return [brentq(lambda t: _rv1_slope(t, **orbit), a, b, xtol=1e-12)
            for a, b, fa, fb in zip(grid, grid[1:], values, values[1:]) if (fa > 0 > fb if maximum else fa < 0 < fb)]


@pytest.mark.parametrize("wdot, years", [(10.0, 100.0), (-10.0, 100.0), (3.6, 2000.0)])
def test_events_after_many_turns_of_the_apsides_are_the_first_after_after(wdot, years):
    # omega has turned by 1000 deg or more since T0: the conjunctions and RV extrema listed are still the
    # first ones at or after `after`, as a root search over the cycles around it finds them
    after = T0 + years * JULIAN_YEAR_D + 0.37
    r = compute("ephemeris", _body(omega_dot=wdot, after=after, count=2))["results"]["events"]
    for kind, target in {"conjunction_star2_in_front": 90.0, "conjunction_star1_in_front": 270.0}.items():
        got = [x["value"] for x in r["conjunctions"] if x["kind"] == kind]
        roots = [t for t in _event_roots(target, after - 2 * P, after + 3 * P, wdot=wdot) if t >= after]
        assert got == pytest.approx(roots[:2], abs=1e-7), kind
    for kind in ("rv1_maximum", "rv1_minimum"):
        got = [x["value"] for x in r["rv_extrema"] if x["kind"] == kind]
        roots = [t for t in _extremum_roots(kind == "rv1_maximum", after - 2 * P, after + 3 * P, wdot=wdot)
                 if t >= after]
        assert got == pytest.approx(roots[:2], abs=1e-7), kind


def test_fast_apsidal_motion_dates_to_the_last_digit():
    # omega_dot P = 16 deg per cycle (a test of the iteration, not a real system): each date solves
    # nu(t) + omega(t) = 90 or 270 deg to the root finder's precision, not to a fixed number of passes
    orbit_ = {"p": 30.0, "e": 0.3, "w0": 50.0, "wdot": 200.0}
    after = T0 + 500.0
    r = compute("ephemeris", _body(period=30.0, eccentricity=0.3, omega=50.0, omega_dot=200.0, after=after,
                                   count=3))["results"]["events"]["conjunctions"]
    for entry in r:
        target = 90.0 if entry["kind"] == "conjunction_star2_in_front" else 270.0
        roots = _event_roots(target, entry["value"] - 1.0, entry["value"] + 1.0, **orbit_)
        assert len(roots) == 1 and entry["value"] == pytest.approx(roots[0], abs=2e-9)


def test_apsidal_motion_uncertainty_moves_the_conjunctions():
    # sigma of a conjunction date from sigma(omega_dot) alone: |d t / d omega_dot| sigma, with the derivative
    # by an independent central difference of the service's own dates
    sig = 0.2
    r = compute("ephemeris", _body(omega_dot={"value": WDOT, "sigma": sig}))["results"]["events"]["conjunctions"]
    h = 1e-3
    up = compute("ephemeris", _body(omega_dot=WDOT + h))["results"]["events"]["conjunctions"]
    down = compute("ephemeris", _body(omega_dot=WDOT - h))["results"]["events"]["conjunctions"]
    for a, b, c in zip(r, up, down):
        assert a["sigma"] == pytest.approx(abs(b["value"] - c["value"]) / (2 * h) * sig, rel=1e-4)


def test_period_derivative_quadratic_ephemeris():
    # T_n = T0 + n P + n^2 P Pdot / 2 (the quadratic ephemeris of O - C work), Pdot = dP/dt in s/yr -> d/d
    pdot_s_yr = 40.0
    pdot = pdot_s_yr / S_PER_YEAR
    r = compute("ephemeris", _body(period_derivative=pdot_s_yr))["results"]
    for x in r["events"]["periastron"]:
        n = round(x["cycle"])
        assert x["value"] == pytest.approx(T0 + n * P + 0.5 * n * n * P * pdot, abs=1e-7)
    # the series: the cycle count from solving the quadratic ephemeris with brentq, then a direct Kepler solve
    n_of_t = lambda t: brentq(lambda n: T0 + P * (n + 0.5 * pdot * n * n) - t, -1e5, 1e5, xtol=1e-13)
    for t, v in zip(TIMES, r["series"]["rv1"]["value"]):
        assert v == pytest.approx(_rv1_direct(t, n_of_t=n_of_t)[0], abs=1e-7)
    # its uncertainty: d T_n / d Pdot = n^2 P / 2 per unit d/d
    s = compute("ephemeris", _body(period_derivative={"value": pdot_s_yr, "sigma": 5.0}))["results"]["events"]
    for x in s["periastron"]:
        n = round(x["cycle"])
        assert x["sigma"] == pytest.approx(0.5 * n * n * P * 5.0 / S_PER_YEAR, rel=1e-9)


def test_period_derivative_sigma_of_the_phase_keeps_its_digits():
    # after ~1000 cycles the phase's share from Pdot is ~1e-3 of a cycle: its linear sigma against the
    # `uncertainties` package on n = 2x / (1 + sqrt(1 + 2 Pdot x)) (Pdot in s/yr over astropy's Julian year)
    from uncertainties import ufloat, umath
    t = T0 + 5500.3
    body = _body(times=[t], period_derivative={"value": -0.5, "sigma": 0.05})
    phase = compute("ephemeris", body)["results"]["series"]["phase"]
    rate = ufloat(-0.5, 0.05) / S_PER_YEAR
    x = (t - T0) / P
    n = 2 * x / (1 + umath.sqrt(1 + 2 * rate * x))
    assert phase["sigma"][0] == pytest.approx(n.std_dev, rel=1e-8)
    assert phase["value"][0] == pytest.approx(n.nominal_value % 1, abs=1e-12)


def test_light_travel_time_size_and_sign(client):
    # a1 sin i / c = K1 P sqrt(1 - e^2) / (2 pi c) (Hilditch 2001, eq. 2.50), with astropy's c
    amp1 = (K1 * u.km / u.s * P * u.day * math.sqrt(1 - E * E) / (2 * math.pi) / const.c).to_value(u.day)
    amp2 = amp1 * K2 / K1
    status, plain = post(client, PATH, _body())
    assert status == 200
    sizes = plain["results"]["events"]["light_travel_time"]
    assert sizes["applied"] == "none"
    assert sizes["amplitude_star1"] == pytest.approx(amp1, rel=1e-12)
    assert sizes["amplitude_star2"] == pytest.approx(amp2, rel=1e-12)
    # seen in star 1's light: at the conjunction with star 2 in front, star 1 is behind the centre of mass,
    # z1 = a1 sin i (1 - e^2) / (1 + e cos nu) > 0, so the event is seen later by z1 / c; in star 2's light,
    # star 2 is in front and it is seen earlier by z2 / c
    nu = math.radians(90.0 - W)
    shape = (1 - E * E) / (1 + E * math.cos(nu))
    for star, sign, amp in (("star1", 1.0, amp1), ("star2", -1.0, amp2)):
        status, doc = post(client, PATH, _body(light_travel_time=star))
        assert status == 200 and doc["results"]["events"]["light_travel_time"]["applied"] == star
        before = [x["value"] for x in plain["results"]["events"]["conjunctions"]
                  if x["kind"] == "conjunction_star2_in_front"]
        after = [x["value"] for x in doc["results"]["events"]["conjunctions"]
                 if x["kind"] == "conjunction_star2_in_front"]
        for a, b in zip(before, after):
            assert b - a == pytest.approx(sign * amp * shape, abs=1e-9)
    status, doc = post(client, PATH, {k: v for k, v in _body(light_travel_time="star2").items() if k != "k2"})
    assert status == 422 and "k2" in doc["errors"]


def test_http_rates_in_other_units(client):
    # omega_dot in rad/yr and deg/d, period_derivative in d/d (dimensionless) and s/yr: the same answer
    _, a = post(client, PATH, _body(omega_dot=WDOT, period_derivative=40.0))
    _, b = post(client, PATH, _body(omega_dot={"value": math.radians(WDOT), "unit": "rad/yr"},
                                    period_derivative={"value": 40.0 / S_PER_YEAR, "unit": ""}))
    assert b["results"]["series"]["rv1"]["value"] == pytest.approx(a["results"]["series"]["rv1"]["value"],
                                                                   abs=1e-9)


def test_period_derivative_that_ends_the_orbit_is_refused(client):
    # P (1 + Pdot n) reaches zero before the times asked for: no date exists there, and the field is named
    status, doc = post(client, PATH, _body(period_derivative=-1e6, times=[T0 + 1e5]))
    assert status == 422 and "period_derivative" in doc["errors"]
    status, doc = post(client, PATH, _body(period_derivative=-10.0))
    assert status == 200
