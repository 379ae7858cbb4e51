"""What a working astronomer tripped on when using the service as its users do (round 6).

The report: a date given as ISO 8601 keeps its sigma, an input given in a unit of its own is shown as
given, machine-written inputs are not padded past a double's digits, event dates are printed to what
their sigma supports (as the form and the command line print them).  The client: ``uncertainties``
numbers go in with their correlations, every unit-less column is named at once, print() shows series,
events, warnings and never a bare median.  The command line: ISO dates with a sigma.  /docs: no note
said twice.  The web form: unit fields show their unit whole, example numbers read as written, an
undefined sigma to the report's digits, a catalogue over a list pointed to JSON.  Every system here is
fictional; by-hand checks use astropy and the ``uncertainties`` package.
"""

import warnings

import astropy.units as u
import numpy as np
import pytest
from astropy.time import Time
from erfa import ErfaWarning

from calcservice.client import Client

from .conftest import post
from .test_form_browser import _open, _shot, base_url, browser  # noqa: F401  (fixtures)

# a fictional dusty colliding-wind binary, "Ember-3": a shell formed on 2024-08-10 (± 10 d)
EMBER_SHELLS = {"period": {"value": 2410, "sigma": 12}, "formation_epoch": {"value": "2024-08-10", "sigma": 10},
                "expansion_speed": {"value": 1200, "sigma": 80},
                "distance": {"value": 2.4, "sigma": 0.2, "unit": "kpc"},
                "observation_date": "2027-06-01", "shells": [-2, -1, 0]}
# its orbit, for the dates of the coming periastron passages
EMBER_ORBIT = {"period": {"value": 2410, "sigma": 12}, "eccentricity": {"value": 0.71, "sigma": 0.03},
               "omega": {"value": 205, "sigma": 4}, "t_periastron": {"value": 2458120.4, "sigma": 6},
               "k1": {"value": 38, "sigma": 3}, "k2": {"value": 15, "sigma": 2},
               "times": [2461378.5], "after": "2026-12-04", "count": 2}


LATEX_ROW = r"\texttt{formation\_epoch} & \texttt{2024-08-10} $\pm$ $10$ & $\mathrm{d}$ &"


def _report(client, path, body, fmt="markdown"):
    r = client.post(f"{path}?format={fmt}", json=body)
    assert r.status_code == 200, r.get_data(as_text=True)
    return r.get_data(as_text=True)


def _input_row(text, name):
    return next(line for line in text.splitlines() if line.startswith(f"| `{name}` |"))


def test_an_iso_date_input_keeps_its_sigma_in_the_report(client):
    # the sigma of the formation epoch is a third of the age's error budget: a referee must see it
    text = _report(client, "/v1/winds/shell-forecast", EMBER_SHELLS)
    row = _input_row(text, "formation_epoch")
    assert "`2024-08-10` ± 10 |" in row
    # an ISO date is no JD: the unit column says the sigma's unit only
    assert "| d |" in row and "JD" not in row.split("|")[3]
    # a date given as a number still says it is a JD
    text = _report(client, "/v1/orbit/ephemeris", EMBER_ORBIT)
    assert "| d (JD) |" in _input_row(text, "t_periastron")
    latex = _report(client, "/v1/winds/shell-forecast", EMBER_SHELLS, "latex")
    assert LATEX_ROW in latex


def test_a_list_of_one_is_one_value(client):
    text = _report(client, "/v1/orbit/ephemeris", EMBER_ORBIT)
    assert "| 1 value |" in _input_row(text, "times")
    assert "| 3 values |" in _input_row(_report(client, "/v1/winds/shell-forecast", EMBER_SHELLS), "shells")


def test_event_dates_in_the_report_are_shown_to_what_their_sigma_supports(client):
    status, answer = post(client, "/v1/orbit/ephemeris", EMBER_ORBIT)
    assert status == 200
    first = answer["results"]["events"]["periastron"][0]
    assert first["sigma"] > 1                     # about 25 d: the time of day means nothing
    # the calendar day by astropy, to the nearest day (not cut): T0 + 2 P = JD 2462940.4 is 2031-03-14 21:36 UTC
    with warnings.catch_warnings():             # 2031 is past the known leap seconds: no matter for a day
        warnings.simplefilter("ignore", ErfaWarning)
        # half a day on, then the day
        expected = (Time(first["value"], format="jd", scale="utc") + 0.5 * u.day).iso[:10]
    assert expected == "2031-03-15"
    text = _report(client, "/v1/orbit/ephemeris", EMBER_ORBIT)
    section = text.split("### Events: periastron")[1].split("###")[0]
    assert f"| {expected} |" in section and "T21:36" not in section
    # the same rule as the web form's: a sigma of minutes keeps the minute
    from calcservice.report import iso_shown
    assert iso_shown("2031-03-14T21:36:40", {"sigma": 0.01}, "d") == "2031-03-14T21:37"
    assert iso_shown("2031-03-14T21:36:40", {"sigma": 1e-5}, "d") == "2031-03-14T21:36:40"
    assert iso_shown("2016-12-31T23:59:60", {"sigma": 3.0}, "d") == "2016-12-31T23:59:60"


# a fictional visual binary, "Tern-9": its period given in years, as the orbit paper gives it
TERN_VISUAL = {"period": {"value": 27.4, "sigma": 0.3, "unit": "yr"},
               "angular_semimajor_axis": {"value": 412.0, "sigma": 5.0},
               "parallax": {"value": 38.6, "sigma": 0.4}, "mass_ratio": {"value": 0.78, "sigma": 0.04}}


def test_an_input_given_in_a_unit_of_its_own_is_reported_as_given(client):
    # the answer echoes the period in days (27.4 yr = 10007.85 d, Julian years); the report said
    # "10007.850 ± 109.575 d", digits nobody gave
    status, answer = post(client, "/v1/astrometric/visual", TERN_VISUAL)
    assert status == 200 and answer["inputs"]["period"]["unit"] == "d"
    assert answer["inputs"]["period"]["value"] == pytest.approx((27.4 * u.year).to_value(u.day), rel=1e-12)
    text = _report(client, "/v1/astrometric/visual", TERN_VISUAL)
    assert "| `period` | 27.4 ± 0.3 | yr |" in text and "10007" not in text
    # the distance of the shell forecast given in kpc, likewise
    assert "| `distance` | 2.4 ± 0.2 | kpc |" in _report(client, "/v1/winds/shell-forecast", EMBER_SHELLS)
    # a by-hand check of the result beside it: a = a''/parallax = 10.67 au, M = 4 pi^2 a^3 / (GM_sun P^2)
    # = 1.6197 solMass with astropy's IAU 2015 GM_sun, the IAU 2012 au and the Julian year (a^3/P^2 alone,
    # 1.61968, is 38 ppm low: GM_sun (1 yr)^2 / (4 pi^2 au^3) is not exactly 1)
    from astropy import constants
    a = 412.0 / 38.6 * u.au
    m = (4 * np.pi ** 2 * a ** 3 / (constants.GM_sun * (27.4 * u.year) ** 2)).to_value(u.one)
    assert answer["results"]["semimajor_axis"]["value"] == pytest.approx(a.value, rel=1e-9)
    assert answer["results"]["total_mass"]["value"] == pytest.approx(m, rel=1e-9)


@pytest.fixture(scope="module")
def local():
    return Client("local")


def test_uncertainties_numbers_go_in_with_their_correlation(local):
    from uncertainties import correlated_values
    # K1 and K2 of one fictional SB2 fit ("Quill-1"), anti-correlated as a joint fit makes them
    cov = [[0.5 ** 2, -0.3 * 0.5 * 0.7], [-0.3 * 0.5 * 0.7, 0.7 ** 2]]
    k1, k2 = correlated_values([72.4, 88.1], cov)
    r = local.calculate("sb2", period=(12.83, 0.004), k1=k1, k2=k2, eccentricity=(0.142, 0.006))
    # the uncertainties package's own first-order propagation of q = K1/K2 (reference library)
    q = k1 / k2
    assert r["results"]["mass_ratio"]["value"] == pytest.approx(q.nominal_value, rel=1e-12)
    assert r["results"]["mass_ratio"]["sigma"] == pytest.approx(q.std_dev, rel=1e-9)
    # the same as saying the correlation by hand
    by_hand = local.calculate("sb2", period=(12.83, 0.004), k1=(72.4, 0.5), k2=(88.1, 0.7),
                              eccentricity=(0.142, 0.006), correlations={("k1", "k2"): -0.3})
    assert r["results"]["m1_sin3i"]["sigma"] == pytest.approx(by_hand["results"]["m1_sin3i"]["sigma"], rel=1e-9)
    # a correlation the caller names wins over the numbers' own
    body = local.request_body("sb2", {"k1": k1, "k2": k2, "period": 12.83},
                              correlations=[{"between": ["k2", "k1"], "rho": 0.1}])
    assert body["correlations"] == [{"between": ["k2", "k1"], "rho": 0.1}]
    assert body["k1"] == {"value": 72.4, "sigma": pytest.approx(0.5)}
    # a covariance's square roots and ratios come without binary noise: the report reads 72.4 ± 0.5 and
    # rho -0.3, not 0.49999999999999994 and -0.30000000000000004
    text = local.report("sb2", format="markdown", period=12.83, k1=k1, k2=k2, eccentricity=0.142)
    assert "| `k1` | 72.4 ± 0.5 | km/s |" in text and "rho(k1, k2) = -0.3\n" in text



def test_a_dataframe_without_units_names_every_unitless_column_at_once(local):
    import pandas as pd
    from calcservice.client import InvalidInput
    # a lab's fictional catalogue read from CSV: units on period and k1 in the header, none on k2 nor inclination
    df = pd.DataFrame({"star": ["Quill-1", "Quill-2"], "period[d]": [12.83, 5.117], "k1[km/s]": [72.4, 101.3],
                       "k2": [88.1, 120.9], "eccentricity": [0.142, 0.0], "inclination": [84.2, 79.5]})
    with pytest.raises(InvalidInput) as caught:
        local.batch("sb2", df, keep=["star"])
    # one try tells both, where the first try named k2 and the second inclination
    assert set(caught.value.errors) == {"k2", "inclination"}
    assert "k2[km/s], inclination[deg]" in str(caught.value)
    with pytest.raises(InvalidInput) as caught:
        local.batch("sb2", df, keep=["star"], units={"k2": "km/s"})
    assert set(caught.value.errors) == {"inclination"}
    out = local.batch("sb2", df, keep=["star"], units={"k2": "km/s", "inclination": "deg"})
    assert out.failed == []
    # a file name is not a table: the error says how to make one
    with pytest.raises(TypeError, match=r"QTable\.read\('catalogue\.ecsv'\)"):
        local.batch("sb2", "catalogue.ecsv")


def test_the_reference_page_says_each_thing_once_and_heads_every_column(client):
    import re
    page = client.get("/docs").get_data(as_text=True)
    # the date inputs' descriptions already say "(JD, or ISO 8601)"; inclination's already offers "isotropic"
    assert "ISO 8601); Julian Date or ISO 8601" not in page
    assert not re.search(r'"isotropic" for random orientations[^<]*; or <code>', page.replace("&quot;", '"'))
    # a date input whose description does not say so still gets the note
    row = re.search(r"<tr><td><code>after</code>.*?</tr>", page).group(0)
    assert "Julian Date or ISO 8601" in row
    # every column of an inputs table has a heading (the required/optional column had none)
    heads = re.findall(r'<table class="inputs"><thead><tr>(.*?)</tr>', page)
    assert heads and all("<th></th>" not in h for h in heads)


def test_the_command_line_takes_an_iso_date_with_its_sigma(capsys, client):
    import json

    from calcservice.cli import main
    from calcservice.commandline import parse_measured
    assert parse_measured("2024-08-10+-10") == {"value": "2024-08-10", "sigma": 10.0}
    assert parse_measured("2024-08-10T06:00:00±6h") == {"value": "2024-08-10T06:00:00", "sigma": 6.0, "unit": "h"}
    # an offset's "+" is the date's, not a sigma
    assert parse_measured("2024-05-01T12:00:00+05:00+/-0.5") == {"value": "2024-05-01T12:00:00+05:00", "sigma": 0.5}
    assert parse_measured("2024-08-10") == "2024-08-10"
    code = main(["compute", "shell-forecast", "period=2410+-12", "formation_epoch=2024-08-10+-10",
                 "expansion_speed=1200+-80", "distance=2.4+-0.2kpc", "observation_date=2027-06-01", "shells=-2,-1,0",
                 "--json"])
    assert code == 0
    answer = json.loads(capsys.readouterr().out)
    status, http = post(client, "/v1/winds/shell-forecast", EMBER_SHELLS)
    assert answer["results"] == http["results"]


def test_the_command_line_table_prints_event_dates_as_the_report_does(capsys):
    from calcservice.cli import main
    code = main(["compute", "ephemeris", "period=2410+-12", "eccentricity=0.71+-0.03", "omega=205+-4",
                 "t_periastron=2458120.4+-6", "k1=38+-3", "k2=15+-2", "times=2461378.5", "after=2026-12-04",
                 "count=2"])
    assert code == 0
    out = capsys.readouterr().out
    # T0 + 2P = JD 2462940.4 = 2031-03-14T21:36 UTC, sigma 25 d: the nearest day
    section = out.split("events: periastron")[1].split("events:")[0]
    assert "2031-03-15" in section and "T21:36" not in section
    # one blank line between the title and the series, not two
    assert "\n\n\n" not in out


def test_printing_a_result_never_shows_a_bare_median_and_shows_series_events_and_warnings(local):
    # masses for an inclination not known at all: the draws have no finite sigma; print() gave "4.51937 solMass",
    # which reads as an exact mass
    r = local.calculate("sb2", period=12.83, k1=(72.4, 0.5), k2=(88.1, 0.7), eccentricity=(0.142, 0.006),
                        inclination="isotropic", samples=2000, seed=11)
    m1 = r["results"]["m1"]
    assert m1["sigma"] is None
    line = next(x for x in str(r).splitlines() if x.startswith("m1 "))
    assert "sigma undefined; 68.27 % interval" in line
    # the interval's ends as the report prints them (PDG place of the shorter half-width)
    from calcservice.report import STYLES, measured_cell
    assert measured_cell(m1, STYLES["text"]) in line
    # a Monte Carlo batch likewise, per system
    out = local.batch("sb2", {"period": [12.83, 5.1], "k1": [72.4, 101.3], "k2": [88.1, 120.9],
                              "eccentricity": [0.142, 0.0], "inclination": ["isotropic", "isotropic"]},
                      samples=2000, seed=11)
    assert np.isnan(out.sigma["m1"]).all()      # m1, m2 and the total of both systems at least
    assert repr(out).count("sigma undefined; 68.27 % interval") >= 2 * 3
    # an ephemeris printed its (empty) table of scalar outputs only: now its series and its events too
    text = str(local.calculate("ephemeris", **EMBER_ORBIT))
    assert "2461378.5" in text and "events: periastron" in text and "2031-03-15" in text
    assert "velocity_separation [km/s]" in text
    # in Jupyter, the same tables
    shown = local.calculate("ephemeris", **EMBER_ORBIT)._repr_html_()
    assert "<caption>events: periastron</caption>" in shown and "<td>2031-03-15</td>" in shown
    # and a warning is said where the numbers are
    text = str(local.calculate("mass-loss-radio", flux_density=(1.8, 0.1), frequency=8.4, distance=(2.1, 0.5),
                               vinf=(1700, 100), wind_type="wn"))
    assert "warning [linear_untrustworthy]" in text


def test_inputs_pasted_from_a_machine_are_not_padded_past_a_doubles_digits(client):
    # the Thiele-Innes constants of a fictional visual orbit, as the service's thiele-innes answer gives them
    # (every digit of the double), sent back to campbell: the report printed -5.9484211764625920, a zero
    # nobody wrote
    status, ti = post(client, "/v1/astrometric/thiele-innes", {
        "angular_semimajor_axis": {"value": 86.4, "sigma": 0.6}, "inclination": {"value": 62.3, "sigma": 0.5},
        "omega": {"value": 118.0, "sigma": 1.2}, "node": {"value": 47.5, "sigma": 0.8}})
    assert status == 200
    body = {k: {"value": ti["results"][k]["value"], "sigma": ti["results"][k]["sigma"]} for k in "ABFG"}
    text = _report(client, "/v1/astrometric/campbell", body)
    for k in "ABFG":
        value = body[k]["value"]
        cell = _input_row(text, k).split("|")[2].strip()
        shown = cell.split(" ± ")[0]
        # the double's own shortest digits (Python's repr), not one more
        assert shown == repr(value), (k, cell)
    # a short number is still padded to its sigma's decimals: 41.6 and 0.02 read 41.60 ± 0.02
    from calcservice.report import STYLES, as_given
    assert STYLES["markdown"].number(as_given(41.6, sigma=0.02)) == "41.60 ± 0.02"

# ----------------------------------------------------------------------------- the web form
# a unit field's default unit shows whole (a field with a list of units keeps room for its arrow), at a
# desktop width and on a phone
UNIT_CLIPPED = """
const out = [];
for (const e of document.querySelectorAll('#input-rows input.unit')) {
  const before = e.value; e.value = e.placeholder;
  if (e.scrollWidth > e.clientWidth) out.push(e.id + ': ' + e.placeholder);
  e.value = before;
}
return out;"""


@pytest.mark.browser
def test_unit_fields_show_their_unit_whole_and_small_example_numbers_read_as_written(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By

    from calcservice.registry import calculations
    clipped = []
    for width in (1280, 390):
        browser.set_window_size(width, 1200)
        for name in ("collision", "mass-loss-period-change", "mass-loss-momentum-ratio", "ephemeris"):
            _open(browser, f"{base_url}/#{name}")
            clipped += [f"{width} px {name}: {c}" for c in browser.execute_script(UNIT_CLIPPED)]
    assert not clipped, clipped
    # "Fill the example" writes a mass-loss rate as an astronomer does, 2.4e-5, not 0.000024
    browser.set_window_size(1280, 1200)
    _open(browser, f"{base_url}/#collision")
    browser.find_element(By.ID, "example").click()
    example = calculations()["collision"].example
    shown = browser.find_element(By.ID, "in-mdot1").get_attribute("value")
    assert shown == "2.4e-5" and float(shown) == example["mdot1"]["value"]
    assert browser.find_element(By.ID, "sigma-mdot2").get_attribute("value") == "4e-7"
    assert browser.find_element(By.ID, "in-vinf1").get_attribute("value") == "2300"
    _shot(browser, "form-collision-example")


@pytest.mark.browser
def test_a_catalogue_over_a_list_is_pointed_to_json_before_a_file_is_chosen(browser, base_url, client):  # noqa: F811
    from selenium.webdriver.common.by import By
    # the service cannot answer a shell forecast's catalogue in CSV (a series per system): 406 naming Accept
    csv_body = "period,formation_epoch,expansion_speed,distance,observation_date\n2410,2460533.5,1200,2400,2461557.5\n"
    r = client.post("/v1/batch/shell-forecast?options=%7B%22shells%22%3A%5B0%5D%7D", data=csv_body,
                    headers={"Content-Type": "text/csv", "Accept": "text/csv"})
    assert r.status_code == 406 and "Accept" in r.get_json()["errors"]
    browser.set_window_size(1280, 1200)
    _open(browser, f"{base_url}/#shell-forecast")
    status = browser.find_element(By.ID, "catalogue-status").text
    assert "cannot hold" in status and "v1/batch/shell-forecast as JSON or Apache Arrow" in status
    assert not browser.find_element(By.ID, "catalogue-file").is_enabled()
    assert not browser.find_element(By.ID, "catalogue-compute").is_enabled()
    # a calculation of plain numbers takes its file again
    _open(browser, f"{base_url}/#sb2")
    assert browser.find_element(By.ID, "catalogue-file").is_enabled()
    assert "Columns the file may have for sb2" in browser.find_element(By.ID, "catalogue-status").text


@pytest.mark.browser
def test_an_undefined_sigma_is_shown_to_the_digits_the_report_prints(browser, base_url, client):  # noqa: F811
    import re

    from selenium.webdriver.common.by import By

    from calcservice.report import STYLES, measured_cell
    # masses of a fictional SB2 for an inclination not known at all: the page printed 2.362 (… 1.618 … 9.889),
    # four digits where the shorter half-width (0.74) gives one decimal by the PDG rule, as the report has it
    body = {"period": 12.83, "k1": {"value": 72.4, "sigma": 0.5}, "k2": {"value": 88.1, "sigma": 0.7},
            "eccentricity": {"value": 0.142, "sigma": 0.006}, "inclination": "isotropic",
            "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 7}}
    status, response = post(client, "/v1/spectroscopic/sb2", body)
    assert status == 200 and response["results"]["m1"]["sigma"] is None
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    browser.execute_script("window.calcserviceForm.show(arguments[0])", response)
    numbers = re.compile(r"-?\d+(?:\.\d+)?")
    for name in ("m1", "total_mass"):
        shown = browser.find_element(By.CSS_SELECTOR, f'tr[data-output="{name}"] td.value').text
        printed = measured_cell(response["results"][name], STYLES["text"])
        assert numbers.findall(shown.replace("68.27", "")) == numbers.findall(printed.replace("68.27", "")), \
            (shown, printed)
