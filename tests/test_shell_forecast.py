"""Dust-shell forecasts: angular radii at a date, against astropy units, the IAU au and Julian year, and a round
trip with the shell-distance calculation."""


import numpy as np
import pytest
from astropy import units as u
from astropy.time import Time

from calcservice.core import compute

from .conftest import post

PATH = "/v1/winds/shell-forecast"
# a fictional dusty colliding-wind binary
P, T_FORM, V, D, T_OBS = 3120.0, 2457310.0, 980.0, 1850.0, 2461400.5
SHELLS = [-3, -2, -1, 0, 1]


def _body(**kw):
    b = {"period": P, "formation_epoch": T_FORM, "expansion_speed": V, "distance": D, "observation_date": T_OBS,
         "shells": SHELLS}
    b.update(kw)
    return b


def test_four_point_seven_four_from_the_au_and_the_julian_year():
    # 1 au per Julian year = 4.740470464 km/s (IAU 2012 au / 365.25 d, by astropy); a shell at that speed is
    # 1 arcsec from a star at 1 pc after one Julian year
    kms = (1 * u.au / u.yr).to_value(u.km / u.s)
    assert kms == pytest.approx(4.740470464, rel=1e-9)
    r = compute("shell-forecast", _body(expansion_speed=kms, distance=1.0, observation_date=T_FORM + 365.25,
                                        shells=[0]))["results"]["series"]
    assert r["angular_radius"]["value"][0] == pytest.approx(1000.0, rel=1e-12)
    assert r["radius"]["value"][0] == pytest.approx(1.0, rel=1e-12)


def test_angular_radii_against_astropy_units():
    r = compute("shell-forecast", _body())["results"]["series"]
    for n, theta, age in zip(SHELLS, r["angular_radius"]["value"], r["age"]["value"]):
        dt = (T_OBS - (T_FORM + n * P)) * u.day
        expected = (V * u.km / u.s * dt / (D * u.pc)).to(u.mas, equivalencies=u.dimensionless_angles())
        assert theta == pytest.approx(expected.value, rel=1e-12)
        assert age == pytest.approx(dt.to_value(u.yr), rel=1e-12)


def test_round_trip_with_shell_distance():
    # the spacing of successive shells, fed to shell-distance with the same speed and period, gives D back
    r = compute("shell-forecast", _body())["results"]["series"]["angular_radius"]["value"]
    spacings = -np.diff(r)
    assert np.allclose(spacings, spacings[0], rtol=1e-12)
    back = compute("shell-distance", {"period": P, "shell_spacing": float(spacings[0]),
                                      "expansion_speed": V})["results"]
    assert back["distance"]["value"] == pytest.approx(D, rel=1e-12)
    # and the other way: shell-distance's expansion speed from the spacing and D is V
    speed = compute("shell-distance", {"period": P, "shell_spacing": float(spacings[0]),
                                       "distance": D})["results"]["expansion_speed"]["value"]
    assert speed == pytest.approx(V, rel=1e-12)


def test_sigmas_linear_and_monte_carlo():
    # only the formation epoch uncertain: sigma_theta = v sigma_t / D for every shell (linear propagation)
    sig_t = 15.0
    r = compute("shell-forecast", _body(formation_epoch={"value": T_FORM, "sigma": sig_t}))["results"]["series"]
    expected = (V * u.km / u.s * sig_t * u.day / (D * u.pc)).to_value(u.mas, equivalencies=u.dimensionless_angles())
    assert r["angular_radius"]["sigma"] == pytest.approx([expected] * len(SHELLS), rel=1e-6)
    # period uncertain: the older the shell, the more cycles, the larger the sigma: |n_obs - n| P-lever
    r = compute("shell-forecast", _body(period={"value": P, "sigma": 20.0}))["results"]["series"]
    per_cycle = (V * u.km / u.s * 20.0 * u.day / (D * u.pc)).to_value(u.mas, equivalencies=u.dimensionless_angles())
    assert r["angular_radius"]["sigma"] == pytest.approx([abs(n) * per_cycle for n in SHELLS], rel=1e-6, abs=1e-9)
    # everything uncertain: Monte Carlo agrees with linear to its sampling error (the relation is near linear)
    body = _body(period={"value": P, "sigma": 20.0}, formation_epoch={"value": T_FORM, "sigma": 15.0},
                 expansion_speed={"value": V, "sigma": 50.0}, distance={"value": D, "sigma": 60.0})
    lin = compute("shell-forecast", body)["results"]["series"]["angular_radius"]
    mc = compute("shell-forecast", {**body, "uncertainty": {"method": "monte_carlo", "samples": 4000, "seed": 3}})
    mc = mc["results"]["series"]["angular_radius"]
    assert mc["value"] == pytest.approx(lin["value"], rel=0.01)
    assert mc["sigma"] == pytest.approx(lin["sigma"], rel=0.08)


def test_parallax_iso_dates_and_mjd(client):
    _, by_distance = post(client, PATH, _body())
    body = {k: v for k, v in _body().items() if k != "distance"}
    _, by_parallax = post(client, PATH, {**body, "parallax": 1000.0 / D})
    iso = Time(T_OBS, format="jd", scale="utc").isot
    _, by_iso = post(client, PATH, _body(observation_date=iso))
    _, by_mjd = post(client, PATH, _body(observation_date=T_OBS - 2400000.5, formation_epoch=T_FORM - 2400000.5,
                                         time_format="mjd"))
    want = by_distance["results"]["series"]["angular_radius"]["value"]
    for other in (by_parallax, by_iso, by_mjd):
        assert other["results"]["series"]["angular_radius"]["value"] == pytest.approx(want, rel=1e-9)


@pytest.mark.parametrize("change", [{"shells": [0, 0.5]}, {"shells": [0, 2]}, {"shells": []},
                                    {"expansion_speed": 3.1e5}, {"distance": -1.0}])
def test_bad_inputs_name_the_field(client, change):
    field = next(iter(change))
    status, doc = post(client, PATH, _body(**change))
    assert status == 422 and field in doc["errors"], doc


def test_a_shell_formed_before_the_earliest_date_read_is_refused(client):
    # shell n forms at T + n P: n = -32000 gives JD 2457310 - 99840000 = -97382690, a date the service
    # reads (within 1e8 d of JD 0); n = -33000 gives JD -100502690, before any date it reads, and n = -2**60
    # an age of 1e19 yr, which was answered
    assert T_FORM - 32000 * P == -97382690.0 and T_FORM - 33000 * P == -100502690.0
    status, doc = post(client, PATH, _body(shells=[-32000, 0]))
    assert status == 200
    # age = t_obs - t_n in Julian years of 365.25 d (IAU)
    assert doc["results"]["series"]["age"]["value"][0] == pytest.approx((T_OBS + 97382690.0) / 365.25, rel=1e-12)
    for shells in ([-33000, 0], [-2**60], [-1e300]):
        status, doc = post(client, PATH, _body(shells=shells))
        assert status == 422 and list(doc["errors"]) == ["shells"], doc
        assert "formed on or after JD -1e+08" in doc["errors"]["shells"][0]
