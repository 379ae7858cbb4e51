"""Constants against the published standards."""

import pytest

from calcservice.constants import AU, CONSTANTS, GM_SUN, JULIAN_YEAR, L_SUN, R_SUN


def test_iau_2015_b3_nominal_solar_values():
    # IAU 2015 Resolution B3 (Prsa et al. 2016, AJ 152, 41), Table 1
    assert GM_SUN == 1.3271244e20          # (GM)^N_sun in m^3 s^-2
    assert R_SUN == 6.957e8                # R^N_sun in m
    assert L_SUN == 3.828e26               # L^N_sun in W


def test_iau_2012_au_and_julian_year():
    # IAU 2012 Resolution B2: 1 au = 149 597 870 700 m exactly
    assert AU == 149_597_870_700.0
    # IAU: the Julian year is 365.25 days of 86400 s
    assert JULIAN_YEAR == 365.25 * 86400.0


def test_every_constant_has_value_unit_and_source():
    for c in CONSTANTS.values():
        assert c.source and c.description
        assert isinstance(c.value, float)
        assert c.unit is not None


def test_constants_endpoint(client):
    r = client.get("/v1/constants")
    assert r.status_code == 200
    body = r.get_json()["constants"]
    assert body["GM_sun"]["value"] == pytest.approx(1.3271244e20, rel=0)
    assert "IAU 2015" in body["GM_sun"]["source"]
    assert body["au"]["unit"] == "m"
