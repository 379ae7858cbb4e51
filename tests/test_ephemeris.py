"""Ephemeris series and event dates, against textbook formulas, hand calculations, scipy and astropy.time."""

import sys
import warnings

import numpy as np
import pytest
from astropy.time import Time
from scipy.optimize import brentq

from calcservice.calculations.orbit import ephemeris_events, iso_dates
from calcservice.engine import Measured, Options, evaluate
from calcservice.physics import orbit
from calcservice.registry import get

from .conftest import post

EPHEMERIS = get("ephemeris")
PATH = "/v1/orbit/ephemeris"

# a fictional eccentric binary for the checks
P, E, W, T0, K1, K2, GAMMA = 813.7, 0.71, 37.0, 2455123.4, 33.0, 71.0, 12.5


def run(times, statics=None, options=None, **kw):
    q = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "k1": K1, "gamma": GAMMA}
    q.update(kw)
    quantities = {k: v if isinstance(v, Measured) else Measured.exact(v) for k, v in q.items() if v is not None}
    st = {"times": np.asarray(times, dtype=float), "count": 3}
    st.update(statics or {})
    return evaluate(EPHEMERIS, quantities, st, options or Options()), quantities, st


def events_of(quantities, statics, options=None):
    return ephemeris_events(quantities, statics, options or Options())[0]["events"]


# ------------------------------------------------------------------ radial velocities
def test_rv_extrema_are_gamma_plus_k_one_plus_e_cos_omega():
    # Hilditch (2001) ch. 2: max v1 = gamma + K1 (1 + e cos w), min v1 = gamma - K1 (1 - e cos w)
    times = T0 + np.linspace(0, P, 200001)
    r, _, _ = run(times, k2=K2)
    v1 = r.outputs["rv1"]["value"][0]
    v2 = r.outputs["rv2"]["value"][0]
    ecw = E * np.cos(np.radians(W))
    assert v1.max() == pytest.approx(GAMMA + K1 * (1 + ecw), abs=1e-5)
    assert v1.min() == pytest.approx(GAMMA - K1 * (1 - ecw), abs=1e-5)
    # star 2 moves opposite to star 1, scaled by K2/K1 (q = K1/K2 = M2/M1)
    assert v2.max() == pytest.approx(GAMMA + K2 * (1 - ecw), abs=1e-4)
    assert v2.min() == pytest.approx(GAMMA - K2 * (1 + ecw), abs=1e-4)
    assert np.allclose(v2 - GAMMA, -(K2 / K1) * (v1 - GAMMA), atol=1e-10)


def test_circular_orbit_is_a_sinusoid():
    # e = 0: v1 = gamma + K1 cos(2 pi (t - T0)/P + omega), a pure sinusoid (Hilditch 2001, eq. 2.45 with e = 0)
    times = T0 + np.linspace(-P, 2 * P, 301)
    r, _, _ = run(times, eccentricity=0.0)
    expected = GAMMA + K1 * np.cos(2 * np.pi * (times - T0) / P + np.radians(W))
    assert np.allclose(r.outputs["rv1"]["value"][0], expected, atol=1e-9)


def test_omega_90_curve_is_antisymmetric_about_periastron():
    # omega = 90 deg: v1 - gamma = -K1 sin nu, and nu(T0 - x) = -nu(T0 + x), for any e
    x = np.linspace(0, P / 2, 101)
    times = np.concatenate([T0 + x, T0 - x])
    r, _, _ = run(times, omega=90.0, eccentricity=0.93)
    v = r.outputs["rv1"]["value"][0] - GAMMA
    assert np.allclose(v[:101], -v[101:], atol=1e-8)


def test_phase_and_mean_anomaly():
    times = np.array([T0, T0 + P / 4, T0 + P / 2, T0 - P / 4, T0 + 7 * P + 0.1 * P])
    r, _, _ = run(times)
    # phase 0 at periastron, (t - T0)/P mod 1 (definition)
    assert np.allclose(r.outputs["phase"]["value"][0], [0.0, 0.25, 0.5, 0.75, 0.1], atol=1e-9)
    assert np.allclose(r.outputs["mean_anomaly"]["value"][0], [0.0, 90.0, 180.0, 270.0, 36.0], atol=1e-6)
    # periastron and apastron: nu = 0, 180 deg; r/a = 1 -+ e
    assert r.outputs["separation"]["value"][0][0] == pytest.approx(1 - E)
    assert r.outputs["separation"]["value"][0][2] == pytest.approx(1 + E)
    assert r.outputs["true_anomaly"]["value"][0][2] == pytest.approx(180.0)


def test_rv_sigma_from_t_periastron_matches_analytic_derivative():
    # e = 0: dv1/dT0 = K1 sin(2 pi (t - T0)/P + omega) 2 pi / P; linear sigma = |dv1/dT0| sigma_T0.
    # The dates are JD ~ 2.46e6: this also checks that a time input is stepped by its sigma, not its size.
    times = T0 + np.array([10.0, 150.0, 333.0, 700.0])
    sigma_t0 = 0.3
    r, _, _ = run(times, eccentricity=0.0, t_periastron=Measured.normal(T0, sigma_t0))
    expected = np.abs(K1 * np.sin(2 * np.pi * (times - T0) / P + np.radians(W)) * 2 * np.pi / P) * sigma_t0
    assert np.allclose(r.outputs["rv1"]["sigma"][0], expected, rtol=1e-6)


def test_series_sigma_near_periastron_at_high_e_agrees_with_monte_carlo():
    # a small sigma_T0 keeps the problem linear; the two methods then agree (common practice check)
    times = T0 + np.array([0.5, 3.0, 200.0])
    t0 = Measured.normal(T0, 0.02)
    lin, _, _ = run(times, eccentricity=0.95, t_periastron=t0)
    mc, _, _ = run(times, eccentricity=0.95, t_periastron=t0,
                   options=Options(method="monte_carlo", samples=4000, seed=3))
    assert np.allclose(lin.outputs["rv1"]["sigma"][0], mc.outputs["rv1"]["sigma"][0], rtol=0.08)


# ------------------------------------------------------------------ separations and the sky
def test_physical_separation_from_kepler_third_law_with_astropy():
    import astropy.units as u
    from astropy.constants import GM_sun
    m1, m2 = 14.0, 9.0
    times = np.array([T0, T0 + P / 2])
    r, _, _ = run(times, m1=m1, m2=m2)
    # Kepler's third law with astropy's IAU 2015 GM_sun: a^3 = G M P^2 / (4 pi^2)
    a = ((GM_sun * (m1 + m2) * (P * u.day) ** 2 / (4 * np.pi**2)) ** (1 / 3)).to_value(u.au)
    assert np.allclose(r.outputs["separation_au"]["value"][0], [a * (1 - E), a * (1 + E)], rtol=1e-12)
    r2, _, _ = run(times, semimajor_axis=3.2)
    assert np.allclose(r2.outputs["separation_au"]["value"][0], [3.2 * (1 - E), 3.2 * (1 + E)], rtol=1e-12)


def test_sky_position_against_thiele_innes_constants():
    # Thiele-Innes (Heintz 1978, Double Stars; Binnendijk 1960): for the relative orbit (omega_2 = omega + 180)
    # A = a(cos w cos O - sin w sin O cos i), B = a(cos w sin O + sin w cos O cos i),
    # F = a(-sin w cos O - cos w sin O cos i), G = a(-sin w sin O + cos w cos O cos i),
    # X = cos E - e, Y = sqrt(1 - e^2) sin E, north x = A X + F Y, east y = B X + G Y
    a_mas, inc, node = 23.0, 131.0, 301.0
    times = T0 + np.linspace(0, P, 37)
    r, _, _ = run(times, angular_semimajor_axis=a_mas, inclination=inc, node=node)
    w2, o, i = np.radians(W + 180.0), np.radians(node), np.radians(inc)
    A = a_mas * (np.cos(w2) * np.cos(o) - np.sin(w2) * np.sin(o) * np.cos(i))
    B = a_mas * (np.cos(w2) * np.sin(o) + np.sin(w2) * np.cos(o) * np.cos(i))
    F = a_mas * (-np.sin(w2) * np.cos(o) - np.cos(w2) * np.sin(o) * np.cos(i))
    G = a_mas * (-np.sin(w2) * np.sin(o) + np.cos(w2) * np.cos(o) * np.cos(i))
    m = 2 * np.pi * (times - T0) / P
    big_e = np.array([brentq(lambda x, mm=mm: x - E * np.sin(x) - mm, mm - 1, mm + 1, xtol=1e-14) for mm in m])
    x = A * (np.cos(big_e) - E) + F * np.sqrt(1 - E**2) * np.sin(big_e)
    y = B * (np.cos(big_e) - E) + G * np.sqrt(1 - E**2) * np.sin(big_e)
    rho = np.hypot(x, y)
    theta = np.degrees(np.arctan2(y, x)) % 360.0
    assert np.allclose(r.outputs["projected_separation"]["value"][0], rho, rtol=1e-9)
    dpa = (r.outputs["position_angle"]["value"][0] - theta + 180.0) % 360.0 - 180.0
    assert np.max(np.abs(dpa)) < 1e-7


def test_ascending_node_is_where_star2_recedes():
    # convention: at the ascending node (u = nu + omega_2 = 0) star 2 has its largest positive z velocity,
    # i.e. v2 = gamma + K2 (1 + e cos omega_2) is near its maximum, and the position angle equals the node
    nu_node = np.radians(-(W + 180.0))
    m = orbit.kepler.mean_from_true(nu_node, E) % (2 * np.pi)
    t = T0 + P * m / (2 * np.pi)
    r, _, _ = run([t], k2=K2, inclination=60.0, node=40.0, angular_semimajor_axis=5.0)
    assert r.outputs["position_angle"]["value"][0][0] == pytest.approx(40.0, abs=1e-7)
    ecw2 = E * np.cos(np.radians(W + 180.0))
    assert r.outputs["rv2"]["value"][0][0] == pytest.approx(GAMMA + K2 * (1 + ecw2), abs=1e-9)


# ------------------------------------------------------------------ events
def test_periastron_dates_and_sigmas_by_hand():
    # hand calculation: t_n = T0 + n P, sigma^2 = sT0^2 + n^2 sP^2 + 2 n rho sP sT0
    sp, st0, rho = 0.35, 1.7, -0.6
    after = T0 + 12.3 * P
    q = {"period": Measured.normal(P, sp), "t_periastron": Measured.normal(T0, st0),
         "eccentricity": Measured.normal(E, 0.01), "omega": Measured.normal(W, 2.0), "k1": Measured.exact(K1)}
    ev = events_of(q, {"times": np.array([after]), "count": 4},
                   Options(correlations={("period", "t_periastron"): rho}))
    for k, event in enumerate(ev["periastron"]):
        n = 13 + k
        assert event["value"] == pytest.approx(T0 + n * P, abs=1e-6)
        assert event["sigma"] == pytest.approx(np.sqrt(st0**2 + n**2 * sp**2 + 2 * n * rho * sp * st0), rel=1e-12)
        assert event["cycle"] == n
    # apastron half a cycle later, same propagation with n + 1/2 (e and omega do not move it)
    for k, event in enumerate(ev["apastron"]):
        n = 12.5 + k
        assert event["value"] == pytest.approx(T0 + n * P, abs=1e-6)
        assert event["sigma"] == pytest.approx(np.sqrt(st0**2 + n**2 * sp**2 + 2 * n * rho * sp * st0), rel=1e-12)


def test_events_start_at_after_and_are_time_ordered():
    after = T0 + 3.999 * P
    q = {"period": Measured.exact(P), "t_periastron": Measured.exact(T0), "eccentricity": Measured.exact(E),
         "omega": Measured.exact(W), "k1": Measured.exact(K1), "after": Measured.exact(after)}
    ev = events_of(q, {"times": np.array([T0]), "count": 3})
    for name in ("periastron", "apastron", "conjunctions", "rv_extrema", "max_velocity_separation"):
        values = [x["value"] for x in ev[name]]
        assert values == sorted(values)
        assert values[0] >= after
    assert len(ev["periastron"]) == 3 and len(ev["conjunctions"]) == 6
    assert ev["periastron"][0]["value"] == pytest.approx(T0 + 4 * P)


def test_an_event_on_after_itself_is_the_first():
    # "at or after": a periastron that falls on `after` to the last bit is listed, although the elapsed
    # cycles (after - T0)/P round to 3750.0000000000005 (the date itself, T0 + 3750 P, is exact here)
    period, t0 = 2.8, 2450000.0
    after = t0 + 3750 * period
    assert after == 2460500.0 and (after - t0) / period > 3750
    q = {"period": Measured.exact(period), "t_periastron": Measured.exact(t0), "eccentricity": Measured.exact(0.1),
         "omega": Measured.exact(30.0), "k1": Measured.exact(10.0), "after": Measured.exact(after)}
    ev = events_of(q, {"times": np.array([after]), "count": 2})
    assert [x["value"] for x in ev["periastron"]] == [after, after + period]


def _root(fun, lo, hi):
    return brentq(fun, lo, hi, xtol=1e-10)


def _conjunction_time(e, w, cycle_start, front):
    # independent: solve nu(t) + omega = 90 deg (star 2 in front) by brentq on the ephemeris series
    target = 90.0 if front == 2 else 270.0

    def f(t):
        nu = orbit.ephemeris(P, e, w, T0, K1, np.array([t]))["true_anomaly"][0]
        return np.sin(np.radians(nu + w - target))

    ts = T0 + P * (cycle_start + np.linspace(0, 1, 4001))
    vals = np.array([f(t) for t in ts[::40]])
    # bracket the crossing where sin goes from - to + through cos > 0 side: scan for sign changes
    for a, b, fa, fb in zip(ts[::40][:-1], ts[::40][1:], vals[:-1], vals[1:]):
        if fa <= 0 < fb:
            return _root(f, a, b)
    raise AssertionError("no conjunction found")


def test_conjunction_dates_and_sigma_against_root_finding():
    q = {"period": Measured.exact(P), "t_periastron": Measured.exact(T0),
         "eccentricity": Measured.normal(E, 0.004), "omega": Measured.normal(W, 0.8), "k1": Measured.exact(K1)}
    ev = events_of(q, {"times": np.array([T0 + 2 * P]), "count": 1})
    by_kind = {x["kind"]: x for x in ev["conjunctions"]}
    t2 = _conjunction_time(E, W, 2, front=2)
    assert by_kind["conjunction_star2_in_front"]["value"] == pytest.approx(t2, abs=1e-6)
    # sigma by finite differences of the root-found date (scipy brentq), omega and e independent
    h_e, h_w = 1e-5, 1e-4
    dt_de = (_conjunction_time(E + h_e, W, 2, 2) - _conjunction_time(E - h_e, W, 2, 2)) / (2 * h_e)
    dt_dw = (_conjunction_time(E, W + h_w, 2, 2) - _conjunction_time(E, W - h_w, 2, 2)) / (2 * h_w)
    expected = np.hypot(dt_de * 0.004, dt_dw * 0.8)
    assert by_kind["conjunction_star2_in_front"]["sigma"] == pytest.approx(expected, rel=1e-4)
    t1 = _conjunction_time(E, W, 2, front=1)
    assert by_kind["conjunction_star1_in_front"]["value"] == pytest.approx(t1, abs=1e-6)


def test_rv_extrema_dates_give_the_extreme_velocities():
    q = {"period": Measured.exact(P), "t_periastron": Measured.exact(T0), "eccentricity": Measured.exact(E),
         "omega": Measured.exact(W), "k1": Measured.exact(K1), "k2": Measured.exact(K2)}
    ev = events_of(q, {"times": np.array([T0 + 0.3 * P]), "count": 2})
    ecw = E * np.cos(np.radians(W))
    for x in ev["rv_extrema"]:
        v1 = orbit.ephemeris(P, E, W, T0, K1, np.array([x["value"]]), gamma=GAMMA)["rv1"][0]
        # Hilditch (2001): extrema gamma + K(1 + e cos w) and gamma - K(1 - e cos w)
        expected = GAMMA + K1 * (1 + ecw) if x["kind"] == "rv1_maximum" else GAMMA - K1 * (1 - ecw)
        assert v1 == pytest.approx(expected, abs=1e-9)
    for x in ev["max_velocity_separation"]:
        sep = (K1 + K2) * (1 + ecw if x["kind"] == "rv1_maximum" else 1 - ecw)
        assert x["velocity_separation"] == pytest.approx(sep)


def test_event_sigma_from_paired_samples_is_the_sample_spread():
    # posterior samples of P and T0 carry their own correlation: the date T0 + n P of each draw has the
    # spread sqrt(var T0 + n^2 var P + 2 n cov); compare with numpy on the draws themselves
    rng = np.random.default_rng(11)
    z = rng.standard_normal((2, 5000))
    p_s = P + 0.2 * z[0]
    t_s = T0 + 1.1 * (-0.8 * z[0] + 0.6 * z[1])
    q = {"period": Measured.from_samples(p_s[None]), "t_periastron": Measured.from_samples(t_s[None]),
         "eccentricity": Measured.exact(E), "omega": Measured.exact(W), "k1": Measured.exact(K1)}
    ev = events_of(q, {"times": np.array([np.median(t_s) + 20.5 * np.median(p_s)]), "count": 1})
    first = ev["periastron"][0]
    n = first["cycle"]
    assert first["sigma"] == pytest.approx(np.std(t_s + n * p_s, ddof=1), rel=1e-9)


def test_iso_dates_match_astropy_time():
    jd = np.array([2451545.0, 2460000.25, 2440587.5])
    iso = iso_dates(jd)
    # astropy.time: JD 2451545.0 is 2000-01-01T12:00:00 (J2000.0, common practice); 2440587.5 is the Unix epoch
    assert list(iso) == [Time(x, format="jd", scale="utc").isot[:19] for x in jd]
    assert iso[0] == "2000-01-01T12:00:00" and iso[2] == "1970-01-01T00:00:00"
    assert iso_dates(np.array([np.nan]))[0] is None


# ------------------------------------------------------------------ HTTP
def _body(**kw):
    b = {"period": {"value": P, "sigma": 0.3}, "eccentricity": {"value": E, "sigma": 0.01}, "omega": W,
         "t_periastron": {"value": T0, "sigma": 0.9}, "k1": K1, "k2": K2, "gamma": GAMMA,
         "times": [T0 + 10.0, T0 + 100.0, T0 + 300.0]}
    b.update(kw)
    return b


def test_http_series_and_events(client):
    status, body = post(client, PATH, _body(count=2))
    assert status == 200, body
    series = body["results"]["series"]
    assert series["time"]["value"] == [T0 + 10.0, T0 + 100.0, T0 + 300.0]
    for name in ("phase", "true_anomaly", "rv1", "rv2", "separation"):
        assert len(series[name]["value"]) == 3 and len(series[name]["sigma"]) == 3
    ev = body["results"]["events"]
    assert len(ev["periastron"]) == 2 and ev["periastron"][0]["value"] == pytest.approx(T0 + P)
    assert ev["periastron"][0]["sigma"] == pytest.approx(np.hypot(0.9, 0.3))


def test_http_time_formats_agree(client):
    # astropy.time: ISO 8601 (UTC) and MJD = JD - 2400000.5 name the same instants
    jd = [T0 + 10.0, T0 + 100.25]
    iso = [Time(x, format="jd", scale="utc").isot for x in jd]
    _, by_jd = post(client, PATH, _body(times=jd, t_periastron=T0))
    _, by_iso = post(client, PATH, _body(times=iso, t_periastron=Time(T0, format="jd", scale="utc").isot))
    _, by_mjd = post(client, PATH, _body(times=[x - 2400000.5 for x in jd], t_periastron=T0 - 2400000.5,
                                         time_format="mjd"))
    for other in (by_iso, by_mjd):
        assert np.allclose(other["results"]["series"]["rv1"]["value"], by_jd["results"]["series"]["rv1"]["value"],
                           atol=1e-6)


@pytest.mark.skipif(sys.version_info < (3, 11), reason="datetime.fromisoformat reads every ISO 8601 offset from 3.11")
def test_iso_times_with_a_utc_offset_are_the_utc_instant_python_datetime_gives(client):
    # Python's datetime (ISO 8601 offsets, what datetime.isoformat() writes for an aware time) converts the
    # local time to UTC; astropy.time gives that UTC instant's JD
    import datetime as dt
    texts = ["2024-05-01T12:00:00+05:00", "2024-05-01T03:30:15.5-03:30", "2024-05-01 07:00:00+00:00",
             "2024-05-01T09:45+0245", "2024-05-01T00:00:00-11"]
    utc = [dt.datetime.fromisoformat(t).astimezone(dt.timezone.utc) for t in texts]     # Python >= 3.11 reads all
    jd = [Time(u.replace(tzinfo=None), scale="utc").jd for u in utc]
    status, body = post(client, PATH, _body(times=texts, t_periastron=texts[0]))
    assert status == 200, body
    assert body["results"]["series"]["time"]["value"] == pytest.approx(jd, abs=1e-9)
    assert body["inputs"]["t_periastron"]["value"] == texts[0]
    _, by_jd = post(client, PATH, _body(times=jd, t_periastron=jd[0]))
    assert body["results"]["series"]["rv1"]["value"] == pytest.approx(by_jd["results"]["series"]["rv1"]["value"],
                                                                      abs=1e-6)
    for bad in ("2024-05-01T12:00:00+24:00", "2024-05-01T12:00:00+05:00Z", "2024-05-01T12:00:00+5:00"):
        status, problem = post(client, PATH, _body(t_periastron=bad))
        assert status == 422 and "t_periastron" in problem["errors"], (bad, problem)


def test_provenance_names_the_speed_of_light_and_the_julian_year(client):
    # the light-travel time divides by c, and omega_dot (deg/yr) and Pdot (s/yr) use the Julian year: both
    # are among the constants an answer states, at their defined values (SI: c = 299792458 m/s; IAU: 365.25 d)
    body = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "k1": K1, "times": [T0],
            "light_travel_time": "star1", "omega_dot": 1.0, "period_derivative": 0.5}
    constants = post(client, "/v1/orbit/ephemeris", body)[1]["provenance"]["constants"]
    assert constants["c"]["value"] == 299792458.0
    assert constants["julian_year"]["value"] == 365.25 * 86400
    eclipse = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "inclination": 88.0,
               "after": T0, "omega_dot": 1.0}
    constants = post(client, "/v1/orbit/mid-eclipse", eclipse)[1]["provenance"]["constants"]
    assert constants["julian_year"]["value"] == 365.25 * 86400


def test_http_bad_inputs_name_the_field(client):
    for field, value in (("eccentricity", 1.0), ("eccentricity", -0.2), ("period", 0.0), ("count", 0),
                         ("count", 10_000), ("times", ["next tuesday"]), ("times", [])):
        status, body = post(client, PATH, _body(**{field: value}))
        assert status == 422, (field, value, body)
        assert field in body["errors"], body
    status, body = post(client, PATH, _body(m1=10.0))
    assert status == 422 and "m2" in body["errors"]
    status, body = post(client, PATH, _body(m1=10.0, m2=5.0, semimajor_axis=3.0))
    assert status == 422 and "semimajor_axis" in body["errors"]
    status, body = post(client, PATH, _body(m1=-10.0, m2=5.0))
    assert status == 422 and "m1" in body["errors"]
    status, body = post(client, PATH, _body(node=40.0))
    assert status == 422 and "inclination" in body["errors"]


def test_http_too_many_times_is_413():
    from calcservice import create_app
    client = create_app({"TESTING": True, "MAX_SERIES": 5}).test_client()
    status, body = post(client, PATH, _body(times=[T0 + k for k in range(6)]))
    assert status == 413 and "times" in body["errors"]


def test_http_linear_and_monte_carlo_event_sigmas_are_linear(client):
    status, body = post(client, PATH, _body(uncertainty={"method": "monte_carlo", "samples": 500, "seed": 1}))
    assert status == 200
    assert body["results"]["events"]["periastron"][0]["sigma"] == pytest.approx(np.hypot(0.9, 0.3))


def test_no_warnings_leak_from_astropy():
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        iso_dates(np.array([2470000.5, 2400000.5]))


def test_http_event_dates_in_the_callers_time_format(client):
    # MJD = JD - 2400000.5 (astropy.time's mjd format): the same events, named as MJD, with the same sigmas
    # and ISO dates; JD requests are labelled jd
    _, by_jd = post(client, PATH, _body(count=2))
    _, by_mjd = post(client, PATH, _body(count=2, times=[T0 - 2400000.5 + x for x in (10.0, 100.0, 300.0)],
                                         t_periastron={"value": T0 - 2400000.5, "sigma": 0.9}, time_format="mjd"))
    ev_jd, ev_mjd = by_jd["results"]["events"], by_mjd["results"]["events"]
    assert ev_jd["time_format"] == "jd" and ev_mjd["time_format"] == "mjd"
    for kind in ("periastron", "apastron", "conjunctions", "rv_extrema", "max_velocity_separation"):
        assert len(ev_mjd[kind]) == len(ev_jd[kind]) > 0
        for a, b in zip(ev_jd[kind], ev_mjd[kind]):
            assert b["value"] == pytest.approx(Time(a["value"], format="jd").mjd, abs=1e-6)
            assert b["sigma"] == pytest.approx(a["sigma"], rel=1e-9)
            assert b["iso"] == a["iso"]
    assert ev_mjd["periastron"][0]["value"] == pytest.approx(T0 + P - 2400000.5, abs=1e-6)


@pytest.mark.parametrize("field, value", [("after", 1e20), ("t_periastron", 1e308), ("t_periastron", -2e8),
                                          ("times", [T0, 1e300])])
def test_a_date_beyond_any_epoch_is_refused_naming_it(client, field, value):
    # at JD 1e20 a double's spacing is 16384 d: the cycles since T0 would be rounding noise, answered as
    # dates; the service takes dates within 1e8 d of JD 0 (about 270,000 years), where the spacing is 15 ms
    body = {"period": P, "eccentricity": E, "omega": W, "t_periastron": T0, "k1": K1, "times": [T0 + 1.0],
            field: value}
    status, doc = post(client, "/v1/orbit/ephemeris", body)
    assert status == 422 and list(doc["errors"]) == [field]
    assert float(np.spacing(1e8)) < 2e-8 and float(np.spacing(1e20)) == 16384.0        # numpy's own spacing


def test_iso_times_with_a_lower_case_t_and_z_are_read(client):
    # RFC 3339 sec. 5.6: "T" and "Z" may be written in lower case; Python's datetime.fromisoformat
    # (3.11) reads "2024-05-01t12:00:00z" as 12:00 UTC, and astropy.time gives that instant's JD
    import datetime as dt
    texts = ["2024-05-01t12:00:00z", "2024-05-02t03:30:15.5+05:30", "2024-05-03T00:00:00z"]
    utc = [dt.datetime.fromisoformat(t.upper()).astimezone(dt.timezone.utc) for t in texts]
    jd = [Time(u.replace(tzinfo=None), scale="utc").jd for u in utc]
    status, body = post(client, PATH, _body(times=texts, t_periastron={"value": texts[0], "sigma": 0.5}))
    assert status == 200, body
    assert body["results"]["series"]["time"]["value"] == pytest.approx(jd, abs=1e-9)
    assert body["inputs"]["t_periastron"]["value"] == texts[0]            # echoed as given
    status, problem = post(client, PATH, _body(t_periastron="2024-05-01x12:00:00"))
    assert status == 422 and "t_periastron" in problem["errors"]


def test_days_counted_from_zero_have_no_calendar_date_and_no_leap_second_warning(client):
    # a time below JD 10000 (4685 BC by astropy.time) is no observing date: days since T0 = 0, whose calendar
    # date and leap seconds mean nothing; from JD 10000 on a date is a date
    assert Time(1e4, format="jd", scale="tt").jyear < -4684
    assert iso_dates(np.array([9999.5, -500.0]))[0] is None
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")             # ERFA: a "dubious year" for UTC before 1960
        assert iso_dates(np.array([1e4]))[0] == Time(1e4, format="jd", scale="utc", precision=0).isot
    status, body = post(client, PATH, _body(t_periastron={"value": 0.0, "sigma": 0.9}, times=[-10.0, 0.0, 100.0],
                                            count=2))
    assert status == 200, body
    assert not [w for w in body["warnings"] if w["code"] == "date_format_suspect"]
    periastra = body["results"]["events"]["periastron"]
    assert [e["iso"] for e in periastra] == [None, None]
    # listed from the earliest time (-10 d): periastron at T0 + k P = 0 and P (no apsidal motion, no Pdot)
    assert [e["value"] for e in periastra] == pytest.approx([0.0, P], rel=1e-14, abs=1e-12)


def test_a_leap_second_announced_later_moves_a_date_only_within_its_own_day(client):
    # A UTC Julian Date counts every day as one (ERFA's quasi-JD, as astropy.time uses it), so a leap second
    # moves the clock reading only on the day that has it, by under a second.  A forecast past astropy's
    # leap-second table is therefore answered without a warning, and its ISO dates are those astropy gives
    # with a (hypothetical) leap second added at the end of 2028-12-31 in ERFA's table, but on that day.
    import erfa
    jd0 = Time("2029-01-01T00:00:00", scale="utc").jd
    status, body = post(client, PATH, _body(t_periastron={"value": jd0 - 0.25, "sigma": 0.0001},
                                            period={"value": 200.125, "sigma": 0.0001}, times=[jd0 - 1.0], count=4))
    assert status == 200, body
    assert not [w for w in body["warnings"] if "leap" in w["code"]], body["warnings"]
    periastra = body["results"]["events"]["periastron"]
    dates = np.array([e["value"] for e in periastra])
    assert dates[0] == pytest.approx(jd0 - 0.25, abs=1e-9) and np.all(dates[1:] > jd0 + 1)
    assert [e["iso"] for e in periastra] == list(iso_dates(dates))
    table, expires = erfa.leap_seconds.get().copy(), erfa.leap_seconds.expires
    try:
        added = np.array([(2029, 1, table["tai_utc"][-1] + 1.0)], dtype=table.dtype)
        erfa.leap_seconds.set(np.concatenate([table, added]))
        later = iso_dates(dates)
    finally:
        erfa.leap_seconds.set(table)
        erfa.leap_seconds.expires = expires
    assert list(later[1:]) == [e["iso"] for e in periastra[1:]]
    # 18:00 on the leap day: 0.75 of 86401 s against 86400 s, 0.75 s later, rounded to the next second
    assert (periastra[0]["iso"], later[0]) == ("2028-12-31T18:00:00", "2028-12-31T18:00:01")


def test_velocity_separation_sigma_without_apsidal_motion_is_that_of_uncertainties(client):
    # At the extrema of rv1, |v1 - v2| = (K1 + K2)(1 +- e cos omega) (Hilditch 2001, eq. 2.45 at u = 0, pi);
    # the reference is the `uncertainties` package with the same correlations.
    from uncertainties import correlated_values, umath
    body = {"period": {"value": 2037.4, "sigma": 1.2}, "eccentricity": {"value": 0.873, "sigma": 0.004},
            "omega": {"value": 243.6, "sigma": 1.5}, "t_periastron": {"value": 2458712.3, "sigma": 0.8},
            "k1": {"value": 61.2, "sigma": 1.1}, "k2": {"value": 142.8, "sigma": 3.0}, "times": [2460400.5],
            "count": 2, "correlations": [{"between": ["k1", "eccentricity"], "rho": 0.3},
                                         {"between": ["k2", "omega"], "rho": -0.2},
                                         {"between": ["period", "t_periastron"], "rho": -0.4}]}
    status, answer = post(client, PATH, body)
    assert status == 200, answer
    sig = np.array([1.1, 3.0, 0.004, 1.5])
    corr = np.eye(4)
    corr[0, 2] = corr[2, 0] = 0.3
    corr[1, 3] = corr[3, 1] = -0.2
    k1, k2, e, w = correlated_values([61.2, 142.8, 0.873, 243.6], corr * np.outer(sig, sig))
    expected = {kind: (k1 + k2) * (1.0 + sign * e * umath.cos(umath.radians(w)))
                for kind, sign in (("rv1_maximum", 1.0), ("rv1_minimum", -1.0))}
    events = answer["results"]["events"]
    entries = events["max_velocity_separation"]
    assert len(entries) == 4 and events["units"]["velocity_separation_sigma"] == "km/s"
    for entry in entries:
        want = expected[entry["kind"]]
        assert entry["velocity_separation"] == pytest.approx(want.n, rel=1e-14)
        assert entry["velocity_separation_sigma"] == pytest.approx(want.s, rel=1e-12)


def test_velocity_separation_sigma_with_apsidal_motion_and_period_change_is_that_of_the_extremum():
    # With apsidal motion the extremum of rv1 in time is off u = 0, pi; the reference finds it by scipy's bounded
    # minimisation of -|v1 - v2|(t) (v1 - v2 = (K1 + K2)(cos u + e cos omega), Hilditch 2001, eq. 2.45, Kepler's
    # equation by brentq), differences that extremum over each input, and propagates J C J^T.
    from scipy.optimize import minimize_scalar
    names = ("t_periastron", "period", "eccentricity", "omega", "omega_dot", "period_derivative", "k1", "k2")
    x0 = np.array([2460000.2, 30.0, 0.4, 100.0, 5.0, 40.0, 40.0, 55.0])
    sig = np.array([0.01, 0.002, 0.01, 1.5, 0.5, 10.0, 0.8, 1.2])
    corr = np.eye(8)
    corr[0, 1] = corr[1, 0] = -0.4
    corr[2, 6] = corr[6, 2] = 0.3
    cov = corr * np.outer(sig, sig)
    after = 2460500.5

    def separation(t, x):
        t0, p, e, w0, wdot, pdot, k1, k2 = x
        rate = pdot / (365.25 * 86400.0)
        xx = (t - t0) / p
        cycles = 2.0 * xx / (1.0 + np.sqrt(1.0 + 2.0 * rate * xx))      # t = T0 + P (c + rate c^2 / 2)
        m = 2.0 * np.pi * (cycles - np.floor(cycles))
        ecc = brentq(lambda big_e: big_e - e * np.sin(big_e) - m, 0.0, 2.0 * np.pi, xtol=1e-15)
        nu = 2.0 * np.arctan2(np.sqrt(1.0 + e) * np.sin(ecc / 2.0), np.sqrt(1.0 - e) * np.cos(ecc / 2.0))
        w = np.radians(w0 + wdot * (t - t0) / 365.25)
        return (k1 + k2) * abs(np.cos(nu + w) + e * np.cos(w))

    def extreme(date, x, kind):
        # rv1's maximum or minimum is where |v1 - v2| is largest nearby (it has one sign there)
        found = minimize_scalar(lambda s: -separation(date + s, x), bounds=(-0.3, 0.3), method="bounded",
                                options={"xatol": 1e-9})
        return -found.fun

    q = {name: Measured(np.array([v]), np.array([s]), np.array([s])) for name, v, s in zip(names, x0, sig)}
    options = Options(correlations={("period", "t_periastron"): -0.4, ("eccentricity", "k1"): 0.3})
    entries = ephemeris_events(q, {"after": after, "count": 2}, options)[0]["events"]["max_velocity_separation"]
    assert len(entries) == 4
    for entry in entries:
        date = entry["value"]
        assert entry["velocity_separation"] == pytest.approx(extreme(date, x0, entry["kind"]), rel=1e-12)
        jac = []
        for j in range(len(names)):
            h = np.zeros(len(names))
            h[j] = 1e-4 * sig[j]
            jac.append((extreme(date, x0 + h, entry["kind"]) - extreme(date, x0 - h, entry["kind"])) / (2 * h[j]))
        jac = np.array(jac)
        assert entry["velocity_separation_sigma"] == pytest.approx(np.sqrt(jac @ cov @ jac), rel=1e-8)
