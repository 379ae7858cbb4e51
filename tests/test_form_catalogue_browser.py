"""The web form's catalogue (a CSV or ECSV file sent as it is to the batch endpoint, its answer table
shown row by row and saved as it came) and its uncertainty budget / undefined-sigma display, in Debian's headless chromium.

One browser session for the module.  The ECSV file is written by astropy (the reference for the
format), so the page's reading of its header is checked against astropy's writing of it.
"""

import csv
import io
import math
import time

import pytest

from .conftest import post
from .test_form_browser import _csp_violations, _open, _shot, _type, _wait, base_url, browser  # noqa: F401  (fixtures)

pytestmark = pytest.mark.browser

# fictional double-lined binaries (not real stars' numbers); the third has an unphysical eccentricity
SYSTEMS = [
    {"name": "Tarn-1", "period": 41.6, "k1": 38.2, "k1_sigma": 0.4, "k2": 51.7, "k2_sigma": 0.6, "eccentricity": 0.31},
    {"name": "Tarn-2", "period": 7.25, "k1": 88.0, "k1_sigma": 1.1, "k2": 97.5, "k2_sigma": 1.4, "eccentricity": 0.02},
    {"name": "Tarn-3", "period": 130.0, "k1": 21.0, "k1_sigma": 0.5, "k2": 30.2, "k2_sigma": 0.9, "eccentricity": 1.3},
]


def _single(client, s, **units):
    body = {"period": {"value": s["period"], "unit": units.get("period", "d")},
            "k1": {"value": s["k1"], "sigma": s["k1_sigma"], "unit": units.get("k1", "km/s")},
            "k2": {"value": s["k2"], "sigma": s["k2_sigma"]}, "eccentricity": s["eccentricity"]}
    return post(client, "/v1/spectroscopic/sb2", body)


def _load(driver, path):
    from selenium.webdriver.common.by import By
    driver.find_element(By.ID, "catalogue-file").send_keys(str(path))
    return _wait(driver, lambda d: d.find_elements(By.CSS_SELECTOR, "#catalogue-preview-table tbody tr"))


def _compute(driver):
    from selenium.webdriver.common.by import By
    _wait(driver, lambda d: d.find_element(By.ID, "catalogue-compute").is_enabled())
    driver.find_element(By.ID, "catalogue-compute").click()
    return _wait(driver, lambda d: d.find_elements(By.CSS_SELECTOR, "#catalogue-results-table tbody tr"))


def _headers(driver, table):
    from selenium.webdriver.common.by import By
    return {th.get_attribute("data-column"): th.text for th in driver.find_elements(By.CSS_SELECTOR, f"#{table} thead th")
            if th.get_attribute("data-column")}


def test_csv_catalogue_round_trip(browser, base_url, client, tmp_path):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.execute_cdp_cmd("Page.setDownloadBehavior", {"behavior": "allow", "downloadPath": str(tmp_path)})
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    path = tmp_path / "tarn.csv"
    lines = ["name,period[d],k1,k1_sigma,k2,k2_sigma,eccentricity"]
    lines += [f'"{s["name"]}",{s["period"]},{s["k1"]},{s["k1_sigma"]},{s["k2"]},{s["k2_sigma"]},{s["eccentricity"]}' for s in SYSTEMS]
    path.write_text("\n".join(lines) + "\n")
    preview = _load(browser, path)
    assert len(preview) == 3
    headers = _headers(browser, "catalogue-preview-table")
    assert headers["period"] == "period [d]" and headers["k1"] == "k1 [km/s] (default)"
    assert headers["eccentricity"] == "eccentricity [dimensionless] (default)"
    assert "carried into the results: name" in browser.find_element(By.ID, "catalogue-status").text
    rows = _compute(browser)
    assert len(rows) == 3
    # the failed row says why, in the table; the others carry the service's numbers for that system
    assert "failed" in rows[2].get_attribute("class")
    assert "eccentricity: must be >= 0 and < 1" in rows[2].find_element(By.CSS_SELECTOR, "td.row-error").text
    assert "2 of 3 systems answered" in browser.find_element(By.ID, "catalogue-results").text
    names = [th.text.split(" [")[0] for th in browser.find_elements(By.CSS_SELECTOR, "#catalogue-results-table thead th")]
    m1 = names.index("m1_sin3i")
    assert names[1] == "name"           # the file's own column comes back beside each system's results (keep)
    assert [r.find_elements(By.TAG_NAME, "td")[1].text for r in rows] == [s["name"] for s in SYSTEMS]
    for i in (0, 1):
        expected = _single(client, SYSTEMS[i])[1]["results"]["m1_sin3i"]
        cell = rows[i].find_elements(By.TAG_NAME, "td")[m1]
        assert f"value {expected['value']}" in cell.get_attribute("title")
    browser.set_window_size(1280, min(browser.execute_script("return document.documentElement.scrollHeight") + 140, 7000))
    _shot(browser, "form-catalogue-1280")
    browser.set_window_size(1280, 1400)
    # the results file, as the service wrote it (WIRE.md): NAME[unit], NAME_sigma[unit], error_status, error, warnings
    browser.find_element(By.ID, "catalogue-download").click()
    saved = tmp_path / "sb2-tarn-results.csv"
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and not saved.exists():
        time.sleep(0.2)
    table = list(csv.DictReader(io.StringIO(saved.read_text())))
    assert len(table) == 3 and [row["name"] for row in table] == [s["name"] for s in SYSTEMS]
    for i in (0, 1):
        expected = _single(client, SYSTEMS[i])[1]["results"]
        assert float(table[i]["m1_sin3i[solMass]"]) == expected["m1_sin3i"]["value"]
        assert float(table[i]["m1_sin3i_sigma[solMass]"]) == expected["m1_sin3i"]["sigma"]
        assert table[i]["error_status"] == "" and table[i]["error"] == ""
    assert table[2]["error_status"] == "422" and "eccentricity: must be >= 0 and < 1" in table[2]["error"]
    assert table[2]["m1_sin3i[solMass]"] == ""
    assert not _csp_violations(browser)


def test_ecsv_catalogue_takes_its_units_from_the_header(browser, base_url, client, tmp_path):  # noqa: F811
    import astropy.units as u
    from astropy.table import MaskedColumn, Table
    from selenium.webdriver.common.by import By
    browser.set_window_size(390, 1400)
    _open(browser, f"{base_url}/#sb2")
    t = Table()
    t["name"] = [s["name"] for s in SYSTEMS[:2]]
    t["period"] = [s["period"] / 365.25 for s in SYSTEMS[:2]] * u.yr            # Julian year (IAU)
    t["k1"] = [s["k1"] * 1000 for s in SYSTEMS[:2]] * u.m / u.s
    t["k1_sigma"] = [s["k1_sigma"] * 1000 for s in SYSTEMS[:2]] * u.m / u.s
    t["k2"] = MaskedColumn([SYSTEMS[0]["k2"], 0.0], mask=[False, True], unit="km/s")   # the second: k2 not given
    t["k2_sigma"] = [s["k2_sigma"] for s in SYSTEMS[:2]] * u.km / u.s
    t["eccentricity"] = [s["eccentricity"] for s in SYSTEMS[:2]]
    path = tmp_path / "tarn.ecsv"
    t.write(path, format="ascii.ecsv")
    _load(browser, path)
    headers = _headers(browser, "catalogue-preview-table")
    assert headers["period"] == "period [yr]" and headers["k1"] == "k1 [m / s]" and headers["k2"] == "k2 [km / s]"
    assert "ECSV" in browser.find_element(By.ID, "catalogue-status").text
    preview = browser.find_elements(By.CSS_SELECTOR, "#catalogue-preview-table tbody tr")
    assert preview[1].find_elements(By.TAG_NAME, "td")[headers_index(browser, "k2")].text == "—"   # masked
    rows = _compute(browser)
    names = [th.text.split(" [")[0] for th in browser.find_elements(By.CSS_SELECTOR, "#catalogue-results-table thead th")]
    expected = _single(client, {**SYSTEMS[0], "period": SYSTEMS[0]["period"] / 365.25, "k1": SYSTEMS[0]["k1"] * 1000,
                                "k1_sigma": SYSTEMS[0]["k1_sigma"] * 1000}, period="yr", k1="m/s")[1]["results"]["m2_sin3i"]
    cell = rows[0].find_elements(By.TAG_NAME, "td")[names.index("m2_sin3i")]
    assert f"value {expected['value']}" in cell.get_attribute("title")
    # the masked k2 (its sigma given) refuses that row in place, naming k2, in the answer's error column
    error = rows[1].find_element(By.CSS_SELECTOR, "td.row-error").text
    assert error.startswith("422: ") and "k2: " in error
    assert browser.execute_script("return document.documentElement.scrollWidth - document.documentElement.clientWidth") <= 0
    height = browser.execute_script("return document.documentElement.scrollHeight")
    browser.set_window_size(390, min(height + 140, 7000))           # the whole page, catalogue at the bottom
    _shot(browser, "form-catalogue-390")
    assert not _csp_violations(browser)


def test_monte_carlo_catalogue_sends_its_options_and_shows_the_intervals(browser, base_url, client, tmp_path):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    browser.find_element(By.ID, "method-mc").click()
    _type(browser, "samples", "300")
    _type(browser, "seed", "11")
    path = tmp_path / "two.csv"
    path.write_text("period,k1,k1_sigma,k2,k2_sigma,eccentricity\n41.6,38.2,0.4,51.7,0.6,0.31\n7.25,88.0,1.1,97.5,1.4,0.02\n")
    _load(browser, path)
    rows = _compute(browser)
    assert "Monte Carlo (300 draws, seed 11)" in browser.find_element(By.ID, "catalogue-status").text
    names = [th.text.split(" [")[0] for th in browser.find_elements(By.CSS_SELECTOR, "#catalogue-results-table thead th")]
    # the same systems through the JSON rows batch with the same options (the service's own numbers)
    body = {"systems": [{"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
                         "eccentricity": 0.31},
                        {"period": 7.25, "k1": {"value": 88.0, "sigma": 1.1}, "k2": {"value": 97.5, "sigma": 1.4},
                         "eccentricity": 0.02}],
            "uncertainty": {"method": "monte_carlo", "samples": 300, "seed": 11}}
    expected = post(client, "/v1/batch/sb2", body)[1]["results"][0]["results"]["m1_sin3i"]
    title = rows[0].find_elements(By.TAG_NAME, "td")[names.index("m1_sin3i")].get_attribute("title")
    assert f"value {expected['value']}" in title and f"low {expected['low']}" in title and f"high {expected['high']}" in title
    assert not _csp_violations(browser)


def headers_index(driver, column):
    from selenium.webdriver.common.by import By
    ths = driver.find_elements(By.CSS_SELECTOR, "#catalogue-preview-table thead th")
    return [th.get_attribute("data-column") for th in ths].index(column)


# ----------------------------------------------------------------------------- uncertainty budget
def _sb2_budget_reference(example):
    """Shares of the variance of M1 sin^3 i from each input, by the `uncertainties` package's
    error_components() (first order, independent inputs): (df/dx_i sigma_i)^2 / sigma_f^2."""
    from astropy import constants, units as u
    from uncertainties import ufloat, umath
    x = {k: ufloat(v["value"], v["sigma"], tag=k) for k, v in example.items() if k != "inclination"}
    # M1 sin^3 i = P (1 - e^2)^{3/2} (K1 + K2)^2 K2 / (2 pi G)   (Hilditch 2001, ch. 2)
    scale = ((1 * u.d) * (1 * u.km / u.s) ** 3 / (2 * math.pi * constants.G)).to_value(u.M_sun)
    m = scale * x["period"] * umath.pow(1 - x["eccentricity"] ** 2, 1.5) * (x["k1"] + x["k2"]) ** 2 * x["k2"]
    total = m.std_dev ** 2
    return {var.tag: (c ** 2) / total for var, c in m.error_components().items()}


def _example(client, name):
    listing = client.get("/v1/calculations").get_json()
    return next(c for c in listing["calculations"] if c["name"] == name)["example"]


def _shares(driver, output):
    from selenium.webdriver.common.by import By
    rows = driver.find_elements(By.CSS_SELECTOR, f'table.budget[data-budget="{output}"] tr[data-term]')
    return {r.get_attribute("data-term"): float(r.find_element(By.CSS_SELECTOR, "td.share").text.rstrip(" %")) / 100 for r in rows}


def test_budget_table_and_undefined_sigma_as_the_page_shows_them(browser, base_url, client):  # noqa: F811
    """The page's display of a response of the agreed shape (WIRE.md): a budget under its output, and the
    68.27 % interval where sigma is null.  The budget numbers come from `uncertainties`."""
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    example = _example(client, "sb2")
    response = post(client, "/v1/spectroscopic/sb2", {**example, "uncertainty": {"method": "monte_carlo", "samples": 400, "seed": 2}})[1]
    reference = _sb2_budget_reference(example)
    response["results"]["m1_sin3i"]["budget"] = reference
    response["results"]["m2"]["sigma"] = None                       # a heavy-tailed summary
    browser.execute_script("window.calcserviceForm.show(arguments[0])", response)
    shown = _shares(browser, "m1_sin3i")
    assert set(shown) == set(reference)
    for term, share in reference.items():
        assert shown[term] == pytest.approx(share, abs=0.0006), term     # printed to 0.1 %
    terms = [r.get_attribute("data-term") for r in browser.find_elements(By.CSS_SELECTOR, 'table.budget[data-budget="m1_sin3i"] tr')]
    assert terms == sorted(reference, key=lambda k: -reference[k])        # largest share first
    cell = browser.find_element(By.CSS_SELECTOR, 'tr[data-output="m2"] td.value')
    m2 = response["results"]["m2"]
    assert cell.get_attribute("data-interval") == "true" and "68.27 % interval" in cell.text
    # the ends at the place the shorter half-width gives by the PDG rule, as the report prints them
    from calcservice.report import STYLES, measured_cell
    ends = measured_cell(m2, STYLES["text"]).split("interval ")[1].rstrip(")").split(" to ")
    assert ends[0] in cell.text and ends[1] in cell.text and "±" not in cell.text
    assert not _csp_violations(browser)


def test_budget_asked_from_the_page_matches_the_uncertainties_package(browser, base_url, client):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    browser.find_element(By.ID, "example").click()
    browser.find_element(By.ID, "budget").click()
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")
    assert not browser.find_element(By.ID, "problem").is_displayed(), browser.find_element(By.ID, "problem").text
    assert "budget=1" in browser.current_url
    shown = _shares(browser, "m1_sin3i")
    reference = _sb2_budget_reference(_example(client, "sb2"))
    assert {k: v for k, v in shown.items() if abs(v) >= 0.0005} == pytest.approx(
        {k: v for k, v in reference.items() if abs(v) >= 0.0005}, abs=0.0006)


def test_sigma_column_unit_and_the_docs_link(browser, base_url, tmp_path):  # noqa: F811
    # a sigma column without a unit of its own is read in its value column's unit (WIRE.md): period[yr] makes
    # period_sigma years, not the input's default days; the form also links the calculation's reference section,
    # and prints a declared default with six significant digits (mu1 = 50/81 = 0.617284)
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    link = browser.find_element(By.ID, "docs-link")
    assert link.get_attribute("href").endswith("/docs#sb2")
    path = tmp_path / "yr.csv"
    path.write_text("name,period[yr],period_sigma,k1,k1_sigma,k2,k2_sigma,eccentricity\nVale-9,0.58,0.0025,19.6,0.4,23.8,0.5,0.6\n")
    _load(browser, path)
    headers = _headers(browser, "catalogue-preview-table")
    assert headers["period_sigma"] == "period_sigma [yr] (as period)" and headers["k1_sigma"] == "k1_sigma [km/s] (default)"
    assert browser.find_element(By.ID, "catalogue-status").text.startswith("1 system, CSV.")
    _open(browser, f"{base_url}/#collision")
    assert browser.find_element(By.ID, "in-mu1").get_attribute("placeholder") == "default 0.617284"
    assert browser.find_element(By.ID, "desc-mu1").text.endswith("default 0.617284")
