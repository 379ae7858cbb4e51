"""Fifth round of independent reference computations: each check value from a computation written here from the
published formula (scipy root finders on Kepler's equation, astropy units and constants, `uncertainties`), not from
calcservice's physics."""

import math

import pytest
from scipy.optimize import brentq, minimize_scalar

from calcservice.core import compute

JULIAN_YEAR_DAYS = 365.25     # IAU 1976 (astropy.units.yr)


def _true_anomaly(t, period, eccentricity, t_periastron):
    """nu (rad, continuous over revolutions) at t: brentq on Kepler's equation M = E - e sin E, then
    tan(nu/2) = sqrt((1 + e)/(1 - e)) tan(E/2) (Murray & Dermott 1999, eq. 2.46)."""
    m = 2.0 * math.pi * (t - t_periastron) / period
    turns = math.floor(m / (2.0 * math.pi) + 0.5)
    m0 = m - 2.0 * math.pi * turns
    big_e = brentq(lambda x: x - eccentricity * math.sin(x) - m0, -math.pi - 1, math.pi + 1, xtol=1e-15)
    nu = 2.0 * math.atan2(math.sqrt(1 + eccentricity) * math.sin(big_e / 2),
                          math.sqrt(1 - eccentricity) * math.cos(big_e / 2))
    return nu + 2.0 * math.pi * turns


# --------------------------------------------------------------------------- mid-eclipse under apsidal motion
def test_conjunction_offset_under_apsidal_motion_takes_omega_at_the_conjunction():
    # A fictional eccentric pair with fast apsidal motion.  With omega(t) = omega_ref + omega_dot t, the
    # mid-eclipse is the minimum of the projected separation rho(t)/a = (r/a) sqrt(1 - sin^2 i sin^2(nu + omega(t)))
    # (Heintz 1978, ch. 4) and the conjunction the date where nu + omega(t) = 90 deg, both solved here in time
    # (scipy minimize_scalar and brentq).  The service's conjunction_offset1 for omega = omega(t_mid) must be
    # t_mid - t_conj: it took omega at the conjunction equal to omega at the mid-eclipse, off by omega_dot times
    # the offset (0.26 % of it here).
    period, e, inc, omega_dot, omega_ref = 35.2, 0.2, 82.8, 6.7, 290.0
    s2 = math.sin(math.radians(inc)) ** 2

    def omega(t):
        return math.radians(omega_ref + omega_dot * t / JULIAN_YEAR_DAYS)

    def rho2(t):
        nu = _true_anomaly(t, period, e, 0.0)
        r = (1 - e * e) / (1 + e * math.cos(nu))
        return r * r * (1 - s2 * math.sin(nu + omega(t)) ** 2)

    def argument(t):
        return _true_anomaly(t, period, e, 0.0) + omega(t) - math.pi / 2

    # the conjunction of the first orbit: nu + omega crosses 90 deg once on it
    turns = math.ceil(argument(0.0) / (2 * math.pi))
    t_conj = brentq(lambda t: argument(t) - 2 * math.pi * turns, 0.0, period * 0.999, xtol=1e-13)
    t_mid = minimize_scalar(rho2, bracket=(t_conj - 0.3, t_conj + 0.3), tol=1e-12).x
    r = compute("mid-eclipse", {"period": period, "eccentricity": e, "inclination": inc, "omega_dot": omega_dot,
                                "omega": omega_ref + omega_dot * t_mid / JULIAN_YEAR_DAYS, "t_periastron": 0.0,
                                "after": 0.0, "count": 1})["results"]
    assert r["conjunction_offset1"]["value"] == pytest.approx(t_mid - t_conj, rel=2e-6)
    assert r["mid_eclipse_phase1"]["value"] == pytest.approx(t_mid / period, abs=1e-9)


# --------------------------------------------------------------------------- RV extrema under apsidal motion
@pytest.mark.parametrize("period_derivative, cycles", [(None, 10), (40.0, 1000)])
def test_rv_extrema_under_apsidal_motion_are_the_extrema_in_time(period_derivative, cycles):
    # v1 = gamma + K1 [cos(nu + omega(t)) + e cos omega(t)] (Hilditch 2001, eq. 2.45) with omega(t) = omega0 +
    # omega_dot (t - T0) / Julian year: its largest and smallest values in time, the roots of dv1/dt found by
    # brentq on a central difference of v1 from a direct Kepler solve, the mean anomaly 2 pi n(t) of the quadratic
    # ephemeris t = T0 + P (n + Pdot n^2 / 2) with a period derivative (Pdot in s per Julian year).  The service
    # took nu + omega(t) = 0 and 180 deg, the extremum only for a fixed omega: 4e-4 d early here (a fictional pair,
    # P = 24.4 d, omega_dot = 8 deg/yr); and the apsidal rate per orbit must be that of the cycle's own period.
    period, e, omega0, t0, omega_dot = 24.42, 0.19, 31.0, 2450000.0, 8.1
    rate = 0.0 if period_derivative is None else period_derivative / (JULIAN_YEAR_DAYS * 86400.0)

    def v1(t):
        x = (t - t0) / period
        n = 2 * x / (1 + math.sqrt(1 + 2 * rate * x))
        nu = _true_anomaly(t0 + n * period, period, e, t0)
        w = math.radians(omega0 + omega_dot * (t - t0) / JULIAN_YEAR_DAYS)
        return math.cos(nu + w) + e * math.cos(w)

    def slope(t, h=1e-4):
        return (v1(t + h) - v1(t - h)) / (2 * h)

    after = t0 + cycles * period
    body = {"period": period, "eccentricity": e, "omega": omega0, "t_periastron": t0, "k1": 40.0,
            "omega_dot": omega_dot, "times": [after], "after": after, "count": 1}
    if period_derivative is not None:
        body["period_derivative"] = period_derivative
    events = compute("ephemeris", body)["results"]["events"]["rv_extrema"]
    assert len(events) == 2
    for x in events:
        t = x["value"]
        root = brentq(slope, t - 0.05 * period, t + 0.05 * period, xtol=1e-12)
        assert t == pytest.approx(root, abs=2e-8)
        assert (slope(root - 0.01) > 0) == (x["kind"] == "rv1_maximum")


# --------------------------------------------------------------------------- sigmas through omega_dot P / 360 deg
def test_mid_eclipse_date_sigma_follows_omega_dot_and_the_period_through_the_apsidal_rate():
    # The linear sigma of a date is |dt/dx| sigma_x (the definition of linear propagation); dt/dx by a central
    # difference of the service's own dates over x.  The mid-eclipse moves with omega_dot P / 360 deg (the apsidal
    # rate per radian of mean anomaly), so with P and omega_dot themselves: the derivatives left that out
    # (1.4e-5 of dt/d omega_dot and 1.2e-8 of dt/dP here).
    body = {"period": 21.3, "eccentricity": 0.35, "omega": 133.0, "t_periastron": 2450000.0, "inclination": 84.0,
            "omega_dot": 9.0, "after": 2450000.0 + 15 * 21.3, "count": 1}

    def date(**change):
        return compute("mid-eclipse", {**body, **change})["results"]["events"]["eclipse_of_star1"][0]["value"]

    for name, sigma, h in (("omega_dot", 0.5, 1e-2), ("period", 1e-4, 1e-5)):
        got = compute("mid-eclipse", {**body, name: {"value": body[name], "sigma": sigma}}
                      )["results"]["events"]["eclipse_of_star1"][0]["sigma"]
        slope = (date(**{name: body[name] + h}) - date(**{name: body[name] - h})) / (2 * h)
        assert got == pytest.approx(abs(slope) * sigma, rel=2e-7 if name == "omega_dot" else 1e-5)


# --------------------------------------------------------------------------- ISO 8601 dates with UTC offsets
def test_utc_offsets_across_a_leap_second_shift_the_clock_not_si_seconds():
    # ISO 8601 / RFC 3339 sec. 4.2: a local time with an offset names the UTC clock reading minus the offset, so
    # 2017-01-01T00:30:00+01:00 is 2016-12-31T23:30:00Z, before the leap second of 2016-12-31T23:59:60Z (IERS
    # Bulletin C 52); its JD is astropy.time's for that UTC reading.  Subtracting the hour in SI seconds (astropy's
    # UTC arithmetic) counted the leap second and gave 23:30:01.
    from astropy.time import Time

    local = ["2017-01-01T00:30:00+01:00", "2016-12-31T20:00:00-05:00", "2017-01-01T05:29:59.5+05:30"]
    utc = ["2016-12-31T23:30:00", "2017-01-01T01:00:00", "2016-12-31T23:59:59.5"]
    r = compute("ephemeris", {"period": 10.0, "eccentricity": 0.1, "omega": 10.0, "t_periastron": 2457750.0,
                              "k1": 10.0, "times": local, "count": 1})["results"]["series"]
    want = Time(utc, scale="utc").jd
    for got, jd in zip(r["time"]["value"], want):
        assert got == pytest.approx(jd, abs=1e-9)


def test_series_times_in_mjd_give_calendar_dates_as_mjd_too():
    # with time_format mjd every time of the series is an MJD = JD - 2400000.5 (IAU 1973; astropy.time's "mjd"),
    # the calendar dates among them too: 2023-03-01T00:00:00 is MJD 60004 (astropy.time); it came back as its JD
    from astropy.time import Time

    r = compute("ephemeris", {"period": 10.0, "eccentricity": 0.3, "omega": 40.0, "t_periastron": 60000.1, "k1": 30.0,
                              "times": [60001.0, "2023-03-01T00:00:00", "2023-03-01T06:00:00+02:00"],
                              "time_format": "mjd", "count": 1})["results"]["series"]
    want = [60001.0, *Time(["2023-03-01T00:00:00", "2023-03-01T04:00:00"], scale="utc").mjd]
    assert r["time"]["value"] == pytest.approx(want, abs=1e-9)
    # the phase of that date (an MJD becomes a JD double, 4.7e-10 d apart, in the canonical unit)
    assert r["phase"]["value"][1] == pytest.approx((want[1] - 60000.1) / 10.0, abs=1e-10)
