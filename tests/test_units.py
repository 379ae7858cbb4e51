"""Unit strings: every one astropy reads is accepted, and a wrong kind of unit says which kind is needed."""

import pytest
from astropy import units as u

from calcservice.units import UnitError, factor, parse_unit

from .conftest import post

SB1 = {"period": 41.6, "k1": 23.4, "eccentricity": 0.31, "primary_mass": 1.9, "inclination": 71.0}


@pytest.mark.parametrize("text", ["%", "µas", "μas", "°", "″", "′", "Å", "M☉", "km s-1", "mas yr^-1",
                                  "solMass / yr"])
def test_every_unit_astropy_reads_is_accepted(text):
    # astropy itself is the reference: what it parses, we parse, to the same unit
    assert parse_unit(text) == u.Unit(text)


@pytest.mark.parametrize("text", ["fortnights", "km/s\n", "m" * 65, "\x00"])
def test_what_astropy_cannot_read_is_refused(text):
    with pytest.raises(UnitError):
        parse_unit(text)


def test_degree_sign_and_microarcseconds_over_http(client):
    # astropy: 1° = 3600 arcsec, 1 µas = 1e-3 mas
    deg = post(client, "/v1/spectroscopic/sb1", {**SB1, "inclination": {"value": 71.0, "unit": "°"}})
    plain = post(client, "/v1/spectroscopic/sb1", SB1)
    assert deg[0] == 200 and deg[1]["results"]["m2"] == plain[1]["results"]["m2"]
    status, body = post(client, "/v1/astrometric/campbell", {k: {"value": v * 1000.0, "unit": "µas"} for k, v in
                                                             {"A": 2.1, "B": 8.3, "F": -9.4, "G": 1.7}.items()})
    ref = post(client, "/v1/astrometric/campbell", {"A": 2.1, "B": 8.3, "F": -9.4, "G": 1.7})[1]
    assert status == 200
    assert body["results"]["angular_semimajor_axis"]["value"] == pytest.approx(
        ref["results"]["angular_semimajor_axis"]["value"], rel=1e-12)


def test_percent_is_a_dimensionless_unit(client):
    # astropy: 31 % = 0.31 (dimensionless)
    status, body = post(client, "/v1/spectroscopic/sb1", {**SB1, "eccentricity": {"value": 31.0, "unit": "%"}})
    assert status == 200
    assert body["results"]["mass_function"] == post(client, "/v1/spectroscopic/sb1", SB1)[1]["results"]["mass_function"]
    assert factor("%", "") == pytest.approx(0.01, rel=1e-15)


def test_output_unit_error_names_the_kind_the_output_needs(client):
    status, body = post(client, "/v1/spectroscopic/sb1", {**SB1, "units": {"semimajor_axis": "km/s"}})
    assert status == 422
    message = " ".join(body["errors"]["units.semimajor_axis"])
    # astropy: au is a length, km/s a speed/velocity
    assert str(u.au.physical_type) == "length"
    assert "a length unit is needed" in message and "velocity" not in message.split("(")[-1]


def test_input_unit_error_names_the_kind_the_input_needs(client):
    status, body = post(client, "/v1/spectroscopic/sb1", {**SB1, "period": {"value": 41.6, "unit": "km/s"}})
    assert status == 422 and "a time unit is needed" in " ".join(body["errors"]["period"])


def test_unit_astropy_has_no_word_for_is_named_itself():
    with pytest.raises(UnitError) as info:
        factor("km", "solMass / yr")
    assert "convertible to 'solMass / yr'" in str(info.value)


@pytest.mark.parametrize("text", ["dex(km/s)", "mag(AB)", "dB(mW)"])
def test_logarithmic_units_are_refused_not_taken_for_scales(text):
    # astropy reads these as function units: 1.58 dex(km/s) is 10**1.58 = 38.0 km/s, which a plain scale
    # factor would turn into 15.8; the service asks for the quantity itself
    assert isinstance(u.Unit(text), u.FunctionUnitBase)
    with pytest.raises(UnitError, match="logarithmic"):
        parse_unit(text)


@pytest.mark.parametrize("text", ["-1*AU", "1e400*AU"])
def test_a_unit_must_be_a_positive_finite_multiple(text):
    # astropy accepts both (scales -1 and inf); neither is a unit a measurement is given or wanted in
    with pytest.raises(UnitError, match="positive, finite"):
        factor(text, "au")
    with pytest.raises(UnitError, match="positive, finite"):
        factor("au", text)


def test_a_scale_beyond_si_but_within_a_double_is_taken(client):
    # astropy converts through SI, where 1e305 d is 8.64e309 s (beyond a double), though it is
    # 1e305 / 365.25 Julian years (IAU: 1 a = 365.25 d of 86400 s) and 1e300 au is 1.495978707e308 km
    # (IAU 2012 Resolution B2: 1 au = 149 597 870 700 m)
    assert factor("1e305 d", "d") == 1e305
    assert factor("1e305 d", "yr") == pytest.approx(1e305 / 365.25, rel=1e-15)
    assert factor("1e300 au", "km") == pytest.approx(1.495978707e308, rel=1e-15)
    with pytest.raises(UnitError, match="beyond the largest double in 's'"):
        factor("1e305 d", "s")
    # over HTTP, a period of 1e-300 in units of 1e305 d is one of 1e5 d
    scaled = post(client, "/v1/spectroscopic/sb1", {**SB1, "period": {"value": 1e-300, "unit": "1e305 d"}})
    plain = post(client, "/v1/spectroscopic/sb1", {**SB1, "period": 1e5})
    assert scaled[0] == 200
    assert scaled[1]["results"]["mass_function"]["value"] == pytest.approx(
        plain[1]["results"]["mass_function"]["value"], rel=1e-14)


def test_logarithmic_and_negative_units_over_http_name_the_field(client):
    body = {"period": 41.6, "k1": {"value": 1.58, "unit": "dex(km/s)"}, "k2": 51.7, "eccentricity": 0.31}
    status, doc = post(client, "/v1/spectroscopic/sb2", body)
    assert status == 422 and "logarithmic" in doc["errors"]["k1"][0]
    body = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31, "units": {"a_sin_i": "-1*AU"}}
    status, doc = post(client, "/v1/spectroscopic/sb2", body)
    assert status == 422 and "units.a_sin_i" in doc["errors"]
    rows = {"systems": [{"period": {"value": 1.6, "unit": "dex(d)"}, "k1": 38.2, "k2": 51.7, "eccentricity": 0.3}]}
    status, doc = post(client, "/v1/batch/sb2", rows)
    assert status == 200 and "logarithmic" in doc["results"][0]["error"]["errors"]["period"][0]


def test_a_unit_for_an_output_the_inputs_do_not_determine_is_said_unused(client):
    # sb2 without an inclination gives no m1 or m2 (only M sin^3 i): their units go unused, and the answer says so
    body = {"period": 41.6, "k1": 38.2, "k2": 51.7, "eccentricity": 0.31,
            "units": {"m1": "kg", "m2": "kg", "a_sin_i": "km"}}
    status, doc = post(client, "/v1/spectroscopic/sb2", body)
    assert status == 200 and "m1" not in doc["results"]
    said = [w for w in doc["warnings"] if w["code"] == "unit_unused"]
    assert [w["fields"] for w in said] == [["units.m1", "units.m2"]]
    # the unit that is used is: a sin i in km is its value in au times the IAU 2012 au, 149597870.7 km
    plain = post(client, "/v1/spectroscopic/sb2", {k: v for k, v in body.items() if k != "units"})[1]
    assert doc["results"]["a_sin_i"]["value"] == pytest.approx(plain["results"]["a_sin_i"]["value"] * 149597870.7,
                                                               rel=1e-15)
    # with an inclination every unit asked for is used
    status, doc = post(client, "/v1/spectroscopic/sb2", {**body, "inclination": 71.0})
    assert status == 200 and not [w for w in doc["warnings"] if w["code"] == "unit_unused"]
    assert doc["results"]["m1"]["unit"] == "kg"


def test_unknown_unit_says_what_to_write_instead(client):
    # "kms" is no unit astropy reads (astropy: "km/s" is); the answer names the kind needed and the input's own unit
    with pytest.raises(ValueError):
        u.Unit("kms", parse_strict="raise")
    status, body = post(client, "/v1/spectroscopic/sb1", {**SB1, "k1": {"value": 23.4, "unit": "kms"}})
    message = " ".join(body["errors"]["k1"])
    assert status == 422 and message.startswith("unknown unit 'kms'")
    assert "a speed/velocity unit" in message and "'km/s'" in message


def test_the_kind_of_unit_needed_takes_its_article():
    # "a angle unit is needed" was the detail for a Thiele-Innes constant given in kg
    from calcservice.units import needed
    assert needed(u.deg) == "an angle unit" and needed(u.erg).startswith("an energy")
    assert needed(u.d) == "a time unit"


def test_a_temperature_is_given_and_asked_for_as_kt(client):
    # X-ray spectra give a plasma's kT in keV: E = k_B T (astropy's temperature_energy equivalency, k_B of CODATA)
    from calcservice.registry import get
    body = dict(get("collision").example)
    _, in_k = post(client, "/v1/winds/collision", body)
    status, in_kev = post(client, "/v1/winds/collision", {**body, "units": {"post_shock_temperature1": "keV"}})
    assert status == 200
    kelvin, kev = in_k["results"]["post_shock_temperature1"], in_kev["results"]["post_shock_temperature1"]
    per_k = (1 * u.K).to_value(u.keV, equivalencies=u.temperature_energy())
    assert kev["unit"] == "keV" and abs(kev["value"] / (kelvin["value"] * per_k) - 1) < 4e-16
    assert abs(kev["sigma"] / (kelvin["sigma"] * per_k) - 1) < 4e-16
    # an electron temperature given as kT is the same input as in kelvin
    radio = dict(get("mass-loss-radio").example)
    t_k = 1.2e4
    _, a = post(client, "/v1/winds/mass-loss/radio", {**radio, "temperature": t_k})
    t_ev = (t_k * u.K).to_value(u.eV, equivalencies=u.temperature_energy())
    _, b = post(client, "/v1/winds/mass-loss/radio", {**radio, "temperature": {"value": t_ev, "unit": "eV"}})
    assert abs(b["results"]["mass_loss_rate"]["value"] / a["results"]["mass_loss_rate"]["value"] - 1) < 1e-14
    # a Celsius temperature is no scale factor of a kelvin: still refused, naming the field and what it needs
    status, p = post(client, "/v1/winds/mass-loss/radio", {**radio, "temperature": {"value": 20, "unit": "deg_C"}})
    assert status == 422 and "an energy unit for kT" in p["errors"]["temperature"][0]
