"""The web form at GET /: its headers and assets, and the page driven in Debian's headless chromium.

The browser tests skip when chromium (or selenium) is missing, except in CI (env CI=true), where
they must run and so fail instead.  Screenshots go to screenshots/ (gitignored) for a person to look at.
"""

import math
import os
import re
import shutil
import tempfile
import threading
from pathlib import Path

import pytest

from calcservice import create_app

from .conftest import post

ROOT = Path(__file__).resolve().parents[1]
SHOTS = ROOT / "screenshots"
CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
FLAGS = ["--headless", "--no-sandbox", "--disable-gpu", "--disable-dev-shm-usage", "--no-first-run",
         "--disable-background-networking", "--disable-component-update", "--disable-sync",
         "--window-size=1400,1900"]
# a fictional double-lined binary (not a real star's numbers)
FICTIONAL_SB2 = {"period": ("23.91", "0.004", ""), "k1": ("44.2", "0.5", ""), "k2": ("61.8", "0.7", ""),
                 "eccentricity": ("0.187", "0.006", ""), "inclination": ("83.5", "1.1", "")}


# ----------------------------------------------------------------------------- without a browser
def test_page_has_a_strict_content_security_policy(client):
    r = client.get("/")
    assert r.status_code == 200 and r.mimetype == "text/html"
    csp = r.headers["Content-Security-Policy"]
    assert "default-src 'self'" in csp and "script-src 'self'" in csp and "style-src 'self'" in csp
    assert "unsafe-inline" not in csp and "unsafe-eval" not in csp
    assert r.headers["X-Content-Type-Options"] == "nosniff"
    html = r.get_data(as_text=True)
    # nothing inline and nothing from elsewhere
    assert not re.search(r"<script(?![^>]*\bsrc=)", html) and "<style" not in html
    assert not re.search(r"\sstyle=", html) and not re.search(r"\son[a-z]+=", html)
    assert not re.search(r"(src|href)=\"(https?:)?//", html)


def test_assets_are_served_with_their_types(client):
    for path, mimetype in (("/static/form.js", "text/javascript"), ("/static/form.css", "text/css"),
                           ("/static/favicon.svg", "image/svg+xml")):
        r = client.get(path)
        assert r.status_code == 200 and r.mimetype == mimetype, path
    assert client.get("/static/../api/form.py").status_code == 404
    assert client.get("/static/secret.txt").status_code == 404
    js = client.get("/static/form.js").get_data(as_text=True)
    # text goes into the page as text: no HTML parsing of anything the service (or a user) sends
    assert "innerHTML" not in js and "eval(" not in js and "insertAdjacentHTML" not in js


# ----------------------------------------------------------------------------- in the browser
def _browser_or_skip():
    missing = []
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing.append("selenium")
    for path in (CHROMIUM, CHROMEDRIVER):
        if not os.path.exists(path):
            missing.append(path)
    if missing:
        message = f"browser test needs {', '.join(missing)} (apt-get install -y chromium chromium-driver)"
        if os.environ.get("CI") == "true":
            pytest.fail(message)
        pytest.skip(message)


@pytest.fixture(scope="module")
def base_url():
    from werkzeug.serving import make_server
    srv = make_server("127.0.0.1", 0, create_app({"TESTING": True}), threaded=True)
    thread = threading.Thread(target=srv.serve_forever, daemon=True)
    thread.start()
    yield f"http://127.0.0.1:{srv.server_port}"
    srv.shutdown()
    thread.join(5)


@pytest.fixture(scope="module")
def browser():
    _browser_or_skip()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service
    profile = tempfile.mkdtemp(prefix="calcservice-chromium-")
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in FLAGS + [f"--user-data-dir={profile}"]:
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"browser": "ALL"})
    driver = webdriver.Chrome(service=Service(CHROMEDRIVER), options=options)
    driver.set_page_load_timeout(30)
    yield driver
    driver.quit()
    shutil.rmtree(profile, ignore_errors=True)


def _wait(driver, test, seconds=30):
    from selenium.webdriver.support.ui import WebDriverWait
    return WebDriverWait(driver, seconds).until(lambda d: test(d))


def _open(driver, url):
    from selenium.webdriver.common.by import By
    driver.get(url)
    _wait(driver, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-ready") == "true")


def _type(driver, element_id, text):
    from selenium.webdriver.common.by import By
    e = driver.find_element(By.ID, element_id)
    e.clear()
    if text:
        e.send_keys(text)


def _shot(driver, name):
    SHOTS.mkdir(exist_ok=True)
    driver.execute_script("window.scrollTo(0, 0)")
    path = SHOTS / f"{name}.png"
    driver.save_screenshot(str(path))
    return path


def _csp_violations(driver):
    return [e["message"] for e in driver.get_log("browser") if "Content Security Policy" in e["message"]]


def _pdg(value, sigma):
    """PDG rounding by Python's float formatting (rule as in tests/test_report.py)."""
    lead = math.floor(math.log10(sigma))
    three = int(sigma / 10 ** (lead - 2))
    place = lead if 355 <= three <= 949 else lead - 1
    decimals = max(0, -place)
    return f"{round(value, -place):.{decimals}f} ± {round(sigma, -place):.{decimals}f}"


@pytest.mark.browser
def test_fictional_sb2_result_and_an_error_beside_its_field(browser, base_url, client):
    from selenium.webdriver.common.by import By
    _open(browser, f"{base_url}/#sb2")
    for name, (value, sigma, unit) in FICTIONAL_SB2.items():
        _type(browser, f"in-{name}", value)
        _type(browser, f"sigma-{name}", sigma)
        _type(browser, f"unit-{name}", unit)
    browser.find_element(By.ID, "compute").click()
    cell = _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, '#results-table tr[data-output="m1"] td.value'))
    shown = cell[0].text
    body = {k: {"value": float(v), "sigma": float(s)} for k, (v, s, _) in FICTIONAL_SB2.items()}
    m1 = post(client, "/v1/spectroscopic/sb2", body)[1]["results"]["m1"]
    assert shown == _pdg(m1["value"], m1["sigma"])
    assert str(m1["value"]) in cell[0].get_attribute("title")          # full precision on hover
    _shot(browser, "form-sb2-result")

    # the report can be fetched and copied
    browser.find_element(By.ID, "report-latex").click()
    area = _wait(browser, lambda d: d.find_element(By.ID, "report") if d.find_element(By.ID, "report").is_displayed()
                 else None)
    assert r"\begin{tabular}" in area.get_attribute("value") and "Hilditch" in area.get_attribute("value")
    browser.find_element(By.ID, "copy-report").click()
    _wait(browser, lambda d: d.find_element(By.ID, "copy-status").text.strip() != "")

    # an unphysical eccentricity: the service's message appears beside the field
    _type(browser, "in-eccentricity", "1.4")
    browser.find_element(By.ID, "compute").click()
    error = _wait(browser, lambda d: d.find_element(By.ID, "error-eccentricity")
                  if d.find_element(By.ID, "error-eccentricity").is_displayed() else None)
    assert "must be >= 0 and < 1" in error.text
    assert browser.find_element(By.ID, "in-eccentricity").get_attribute("aria-invalid") == "true"
    banner = browser.find_element(By.ID, "problem").text
    # the banner gives the reason, not only "invalid value for eccentricity"
    assert "Invalid input" in banner and "eccentricity" in banner and "must be >= 0 and < 1" in banner
    assert not browser.find_element(By.ID, "error-period").is_displayed()
    _shot(browser, "form-sb2-error")
    assert not _csp_violations(browser)


@pytest.mark.browser
def test_ephemeris_draws_the_rv_curve_and_relative_orbit(browser, base_url):
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    _open(browser, base_url + "/")
    Select(browser.find_element(By.ID, "calculation")).select_by_value("ephemeris")
    browser.find_element(By.ID, "example").click()
    for name, value in (("angular_semimajor_axis", "9.3"), ("inclination", "62"), ("node", "48")):
        _type(browser, f"in-{name}", value)
    _type(browser, "in-times", "2460100.5, 2460180.5, 2460260.5, 2460420.5, 2024-09-01T00:00:00")
    browser.find_element(By.ID, "method-mc").click()
    _type(browser, "samples", "400")
    _type(browser, "seed", "3")
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#rv-plot path.curve.star2"))
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#rv-phase-plot path.curve.star2"))
    assert "orbital phase since periastron" in browser.find_element(By.ID, "rv-phase-plot").text
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#orbit-plot path.curve.sky"))
    points = browser.find_elements(By.CSS_SELECTOR, "#rv-plot circle.point.star1")
    assert len(points) >= 5                         # the five requested times (plus the legend's marker)
    curve = browser.find_element(By.CSS_SELECTOR, "#rv-plot path.curve.star1").get_attribute("d")
    assert curve.count("L") > 300                   # a dense curve, not the five points joined
    labels = browser.find_element(By.ID, "rv-plot").text
    assert "radial velocity [km/s]" in labels and "JD −" in labels
    assert "east offset [mas]" in browser.find_element(By.ID, "orbit-plot").text
    assert "Monte Carlo: 400 draws, seed 3" in browser.find_element(By.ID, "status").text
    assert browser.find_elements(By.CSS_SELECTOR, "#series-table tbody tr")
    _shot(browser, "form-ephemeris")
    assert not _csp_violations(browser)


def _computed(driver):
    from selenium.webdriver.common.by import By
    _wait(driver, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")


def _fill(driver, fields):
    for element_id, text in fields.items():
        _type(driver, element_id, text)


@pytest.mark.browser
def test_measured_velocities_are_overplotted_with_their_residuals(browser, base_url, client, tmp_path):
    """The visitor's RVs at the times: drawn with their error bars, by date and by phase, and O − C
    equal to the measured value minus the service's model RV at that time."""
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    browser.set_window_size(1280, 1400)
    _open(browser, base_url + "/")
    Select(browser.find_element(By.ID, "calculation")).select_by_value("ephemeris")
    browser.find_element(By.ID, "example").click()
    calc = client.get("/v1/calculations").get_json()
    example = next(c for c in calc["calculations"] if c["name"] == "ephemeris")["example"]
    measured = ["-20.5 ± 1.2", "-31.0 ± 0.8", "-47 ± 2", "-74.4 ± 1.0", "-"]     # a fictional night log; no RV at the last time
    _type(browser, "obs-rv1", ", ".join(measured))
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#rv-residuals circle.point.star1"))
    model = post(client, "/v1/orbit/ephemeris", example)[1]["results"]["series"]["rv1"]["value"]
    for plot in ("rv-residuals", "rv-residuals-phase"):
        shown = [float(c.get_attribute("data-y")) for c in
                 browser.find_elements(By.CSS_SELECTOR, f"#{plot} g.points circle.point.star1")]
        expected = [float(m.split("±")[0]) - rv for m, rv in zip(measured[:4], model[:4])]
        assert shown == pytest.approx(expected, abs=1e-9), plot
    for plot in ("rv-plot", "rv-phase-plot"):
        points = browser.find_elements(By.CSS_SELECTOR, f"#{plot} g.points circle.point.measured.star1")
        assert [float(p.get_attribute("data-y")) for p in points] == [-20.5, -31.0, -47.0, -74.4]
        assert len(browser.find_elements(By.CSS_SELECTOR, f"#{plot} path.errbar.star1")) == 4
    browser.set_window_size(1280, min(browser.execute_script("return document.documentElement.scrollHeight") + 140, 7000))
    _shot(browser, "form-ephemeris-measured-1280")
    browser.set_window_size(1280, 1400)
    # the figure as shown saves as an SVG file of its own: well-formed, colours on the elements
    import time
    import xml.etree.ElementTree as ET
    browser.execute_cdp_cmd("Page.setDownloadBehavior", {"behavior": "allow", "downloadPath": str(tmp_path)})
    browser.find_element(By.XPATH, '//*[@id="rv-phase-plot"]/ancestor::figure//button[contains(@class, "save-figure")]').click()
    saved = tmp_path / "ephemeris-rv-phase-plot.svg"
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and not saved.exists():
        time.sleep(0.2)
    root = ET.fromstring(saved.read_bytes())
    ns = {"svg": "http://www.w3.org/2000/svg"}
    assert "radial velocity [km/s]" in " ".join(root.itertext())
    curves = root.findall(".//svg:path[@stroke='rgb(31, 90, 166)']", ns)     # star 1's colour (form.css --star1)
    assert curves and all(c.get("fill") == "none" for c in curves if len(c.get("d", "")) > 1000)
    # a typing mistake is caught beside the box, before anything is sent
    _type(browser, "obs-rv1", "12.1 ± 0.4, twelve")
    browser.find_element(By.ID, "compute").click()
    error = _wait(browser, lambda d: d.find_element(By.ID, "error-obs-rv1") if d.find_element(By.ID, "error-obs-rv1").is_displayed() else None)
    assert "twelve" in error.text
    assert not _csp_violations(browser)


@pytest.mark.browser
def test_histogram_is_drawn_in_the_page(browser, base_url):
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb1")
    browser.find_element(By.ID, "example").click()
    browser.find_element(By.ID, "method-mc").click()
    _fill(browser, {"samples": "600", "seed": "4"})
    browser.find_element(By.ID, "compute").click()
    _computed(browser)
    button = browser.find_element(By.CSS_SELECTOR, 'tr[data-output="m2"] button.histogram')
    button.click()
    _wait(browser, lambda d: d.execute_script(
        "const i = document.querySelector('#histogram-m2 img'); return i && i.complete && i.naturalWidth > 0"))
    image = browser.find_element(By.CSS_SELECTOR, "#histogram-m2 img")
    panel = browser.find_element(By.ID, "output").rect
    assert 200 < image.rect["width"] <= panel["width"] and image.rect["height"] > 100
    assert image.get_attribute("src").startswith("blob:")
    assert button.get_attribute("aria-expanded") == "true"
    button.click()                                   # and hidden again
    _wait(browser, lambda d: not d.find_elements(By.CSS_SELECTOR, "#histogram-m2"))
    assert not _csp_violations(browser)


@pytest.mark.browser
def test_unit_error_says_what_fits_and_maths_is_typeset(browser, base_url):
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    browser.find_element(By.ID, "example").click()
    _type(browser, "unit-period", "furlong")
    browser.find_element(By.ID, "compute").click()
    error = _wait(browser, lambda d: d.find_element(By.ID, "error-period") if d.find_element(By.ID, "error-period").is_displayed() else None)
    assert "furlong" in error.text and "Units that fit (a time)" in error.text and "yr" in error.text
    banner = browser.find_element(By.ID, "problem").text
    assert "period" in banner and "furlong" in banner
    _type(browser, "unit-period", "d")
    browser.find_element(By.ID, "compute").click()
    _computed(browser)
    # "M1 sin^3 i": the 3 is a superscript, the 1 a subscript; nothing typed as ^ or _{ is left
    desc = browser.find_element(By.CSS_SELECTOR, 'tr[data-output="m1_sin3i"] td.desc')
    assert [e.text for e in desc.find_elements(By.TAG_NAME, "sup")][:2] == ["3", "3"]
    assert "1" in [e.text for e in desc.find_elements(By.TAG_NAME, "sub")]
    shown = browser.find_element(By.ID, "results-table").text
    assert "^" not in shown and "_{" not in shown and " pi" not in shown and "π" in shown
    # the page's own typesetting of a few declaration texts
    cases = browser.execute_script("""
        const f = window.calcserviceForm.mathNodes;
        const html = (t) => { const s = document.createElement('span'); s.append(...f(t)); return s.outerHTML; };
        return ['f^{1/2}', 'Gamma_e', 'Mdot2 >~ 1e12 cm', 'with semimajor_axis', 'tan^2(i/2)', '(1 - e^2)'].map(html);""")
    assert cases == ["<span>f<sup>1/2</sup></span>", "<span>Γ<sub>e</sub></span>",
                     "<span>Ṁ<sub>2</sub> ≳ 10<sup>12</sup> cm</span>", "<span>with semimajor_axis</span>",
                     "<span>tan<sup>2</sup>(i/2)</span>", "<span>(1 − e<sup>2</sup>)</span>"]
    assert not _csp_violations(browser)


@pytest.mark.browser
def test_a_link_reproduces_the_computation(browser, base_url, client):
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb2")
    for name, (value, sigma, unit) in FICTIONAL_SB2.items():
        _fill(browser, {f"in-{name}": value, f"sigma-{name}": sigma, f"unit-{name}": unit})
    _fill(browser, {"unit-period": "h", "in-period": str(23.91 * 24), "sigma-period": str(0.004 * 24),
                    "correlations": "k1,k2=0.2"})
    browser.find_element(By.ID, "method-mc").click()
    _fill(browser, {"samples": "500", "seed": "9"})
    browser.find_element(By.ID, "compute").click()
    _computed(browser)
    first = browser.find_element(By.ID, "results-table").text
    link = browser.current_url
    assert "#sb2?" in link and "period.unit=h" in link and "seed=9" in link
    browser.find_element(By.ID, "copy-link").click()
    _wait(browser, lambda d: d.find_element(By.ID, "link-status").is_displayed())
    # a fresh page at the link fills the form and computes the same numbers
    browser.get("about:blank")
    _open(browser, link)
    _computed(browser)
    assert browser.find_element(By.ID, "in-period").get_attribute("value") == str(23.91 * 24)
    assert browser.find_element(By.ID, "correlations").get_attribute("value") == "k1,k2=0.2"
    assert browser.find_element(By.ID, "results-table").text == first
    # and they are the service's numbers for that request
    body = {k: {"value": float(v), "sigma": float(s)} for k, (v, s, _) in FICTIONAL_SB2.items()}
    body["period"] = {"value": 23.91 * 24, "sigma": 0.004 * 24, "unit": "h"}
    body.update(correlations=[{"between": ["k1", "k2"], "rho": 0.2}],
                uncertainty={"method": "monte_carlo", "samples": 500, "seed": 9})
    m1 = post(client, "/v1/spectroscopic/sb2", body)[1]["results"]["m1"]
    cell = browser.find_element(By.CSS_SELECTOR, '#results-table tr[data-output="m1"] td.value')
    assert f"value {m1['value']}" in cell.get_attribute("title")
    assert not _csp_violations(browser)


@pytest.mark.browser
def test_results_download_as_csv_and_json(browser, base_url, client, tmp_path):
    import csv
    import json
    import time
    from selenium.webdriver.common.by import By
    browser.execute_cdp_cmd("Page.setDownloadBehavior", {"behavior": "allow", "downloadPath": str(tmp_path)})
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb1")
    browser.find_element(By.ID, "example").click()
    browser.find_element(By.ID, "compute").click()
    _computed(browser)
    browser.find_element(By.ID, "download-json").click()
    browser.find_element(By.ID, "download-csv").click()
    deadline = time.monotonic() + 20
    while time.monotonic() < deadline and not ((tmp_path / "sb1-results.json").exists() and (tmp_path / "sb1-results.csv").exists()):
        time.sleep(0.2)
    calc = client.get("/v1/calculations").get_json()
    example = next(c for c in calc["calculations"] if c["name"] == "sb1")["example"]
    expected = post(client, "/v1/spectroscopic/sb1", example)[1]
    saved = json.loads((tmp_path / "sb1-results.json").read_text())
    assert saved["results"] == expected["results"] and saved["inputs"] == expected["inputs"]
    rows = list(csv.DictReader((tmp_path / "sb1-results.csv").read_text().splitlines()))
    assert [r["output"] for r in rows] == list(expected["results"])
    for r in rows:
        e = expected["results"][r["output"]]
        assert float(r["value"]) == e["value"] and float(r["sigma"]) == e["sigma"] and r["unit"] == e["unit"]


def _ephemeris_example_events(browser, base_url, client, cell: str):
    """The ephemeris example computed in the form: its event cells matching ``cell``, and the service's events."""
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    _open(browser, base_url + "/")
    Select(browser.find_element(By.ID, "calculation")).select_by_value("ephemeris")
    browser.find_element(By.ID, "example").click()
    browser.find_element(By.ID, "compute").click()
    cells = _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, '.events[data-member="events"] td' + cell))
    example = client.get("/v1/calculations/ephemeris").get_json()["example"]
    return cells, post(client, "/v1/orbit/ephemeris", example)[1]["results"]["events"]


@pytest.mark.browser
def test_event_dates_are_shown_to_what_their_sigma_supports(browser, base_url, client):
    # the ephemeris example's periastron passages have sigmas of a day or two: their calendar dates are shown to
    # the day (the seconds were false precision), the full ISO string on hover
    cells, events = _ephemeris_example_events(browser, base_url, client, '[data-field="iso"]')
    first = events["periastron"][0]
    assert first["sigma"] >= 1 and cells[0].get_attribute("title") == first["iso"]
    # astropy.time: the ISO date of the JD rounded to the nearest day boundary (JD x.5 is 00:00 UTC)
    from astropy.time import Time
    assert cells[0].text == Time(round(first["value"] - 0.5) + 0.5, format="jd", scale="utc").isot[:10]


@pytest.mark.browser
def test_an_event_field_with_its_sigma_is_shown_as_one_rounded_number(browser, base_url, client):
    # an SB2's velocity separation at the RV extrema comes with velocity_separation_sigma: one cell, value ± sigma
    # rounded together by the PDG rule (as the reports print it), no column of bare sigmas
    from calcservice.report import printed
    cells, events = _ephemeris_example_events(browser, base_url, client, '[data-field^="velocity_separation"]')
    entries = events["max_velocity_separation"]
    assert [c.get_attribute("data-field") for c in cells] == ["velocity_separation"] * len(entries)
    shown = [printed(e["velocity_separation"], sigma=e["velocity_separation_sigma"]) for e in entries]
    assert all(p.exponent == 0 for p in shown)
    assert [c.text for c in cells] == [f"{p.value} ± {p.sigma}" for p in shown]
