"""What a working astronomer tripped on in the web form, every calculation used as its users use it (round 8).

A form the page refuses before sending leaves no earlier answer under the new inputs; the list of units that fit
follows only a unit the service refused (not a message that merely says "unit", such as a date's number, which
takes days only); a series column without a unit says what it is; a correlation's error names the pair as it
was typed, not its place in a list.  Every system here is fictional.
"""

import pytest

from .test_form_browser import _open, _shot, _type, _wait, base_url, browser  # noqa: F401  (fixtures)


def _press_compute(driver):
    from selenium.webdriver.common.by import By
    driver.execute_script("document.body.dataset.computed = 'pending'; document.getElementById('status').textContent = ''")
    driver.find_element(By.ID, "compute").click()
    _wait(driver, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true"
          or d.find_element(By.ID, "status").text.startswith("Not sent"))


def _example(driver, base_url, name):
    """The form of calculation ``name`` at desktop width, filled with its example."""
    from selenium.webdriver.common.by import By
    driver.set_window_size(1280, 1400)
    _open(driver, f"{base_url}/#{name}")
    driver.find_element(By.ID, "example").click()


def _field_error(driver, name):
    from selenium.webdriver.common.by import By
    return _wait(driver, lambda d: d.find_element(By.ID, f"error-{name}")
                 if d.find_element(By.ID, f"error-{name}").is_displayed() else None)


@pytest.mark.browser
def test_a_form_refused_before_sending_shows_no_earlier_answer(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "sb1")
    _press_compute(browser)
    assert browser.find_elements(By.CSS_SELECTOR, '#results-table tr[data-output="mass_function"]')
    # the period's value rubbed out, its sigma and unit left: the page refuses to send the form
    _type(browser, "in-period", "")
    _type(browser, "unit-period", "yr")
    _press_compute(browser)
    assert browser.find_element(By.ID, "status").text.startswith("Not sent")
    # the mass function of the earlier period is no answer to this form: nothing of it is left to copy or download
    assert not browser.find_elements(By.CSS_SELECTOR, "#results-table"), "the earlier answer is still shown"
    assert not browser.find_element(By.ID, "downloads").is_displayed()
    assert not browser.find_element(By.ID, "report-tools").is_displayed()
    # the message is about the missing value: no list of units, which the unit given (yr) already fits
    error = _field_error(browser, "period").text
    assert "needs a value" in error and "Units that fit" not in error, error
    _shot(browser, "round8-sb1-not-sent")


@pytest.mark.browser
def test_a_dates_number_in_years_gets_no_list_of_units_that_includes_years(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "ephemeris")
    # a Julian epoch typed as a number in yr: the service refuses it (a date's number is a JD, in days)
    _type(browser, "in-t_periastron", "2019.6")
    _type(browser, "unit-t_periastron", "yr")
    _press_compute(browser)
    error = _field_error(browser, "t_periastron").text
    assert "Julian Date in days" in error, error
    assert "Units that fit" not in error, error      # the hint listed yr among the units that fit, beside the refusal
    # a unit the service cannot read still gets the list
    browser.find_element(By.ID, "example").click()
    _type(browser, "unit-period", "fortnights")
    _press_compute(browser)
    assert "Units that fit (a time)" in _field_error(browser, "period").text


@pytest.mark.browser
def test_a_series_column_without_a_unit_says_what_it_is(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "ephemeris")
    _press_compute(browser)
    heads = {th.text: th.get_attribute("title") for th in browser.find_elements(By.CSS_SELECTOR, "#series-table th")}
    # the separation of the stars has no unit: it is r/a (the declaration's description), not au
    assert "separation" in heads and "semi-major axis" in heads["separation"], heads
    note = browser.find_element(By.CSS_SELECTOR, '#series-notes li[data-column="separation"]')
    assert note.is_displayed() and "in units of the semi-major axis" in note.text, note.text
    assert browser.find_element(By.CSS_SELECTOR, '#series-notes li[data-column="phase"]').text.startswith("phase:")
    _shot(browser, "round8-ephemeris-series-notes")


@pytest.mark.browser
def test_a_correlations_error_names_the_pair_as_typed(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "sb1")
    _type(browser, "correlations", "period,k1=0.4; period,k9=0.2")
    _press_compute(browser)
    error = _field_error(browser, "correlations").text
    # the second pair names an input sb1 does not have; the field is text, so the pair is named as typed
    assert error.startswith("period,k9=0.2:") and "'k9'" in error and "1.between" not in error, error
    banner = browser.find_element(By.ID, "problem").text
    assert "period,k9=0.2: 'k9'" in banner, banner


@pytest.mark.browser
def test_a_warning_names_its_field_as_the_form_labels_it(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    _example(browser, base_url, "ephemeris")
    # the example's dates are Julian Dates: read as MJDs they are after AD 7334, and the service says which field
    Select(browser.find_element(By.ID, "time_format")).select_by_value("mjd")
    _press_compute(browser)
    item = browser.find_element(By.CSS_SELECTOR, '#warnings li[data-code="date_format_suspect"]')
    assert "t_periastron" in [c.text for c in item.find_elements(By.TAG_NAME, "code")], item.text
    # not typeset as t with a subscript "periastron", a name found nowhere in the form
    assert "periastron" not in [s.text for s in item.find_elements(By.TAG_NAME, "sub")]
    assert "MJD" in item.text and "AD 7334" in item.text


@pytest.mark.browser
def test_the_pages_date_columns_say_jd_or_mjd_as_the_report_does(browser, base_url, client):  # noqa: F811
    from selenium.webdriver.common.by import By
    from selenium.webdriver.support.ui import Select
    _example(browser, base_url, "ephemeris")
    # a fictional orbit with its dates typed as MJDs
    _type(browser, "in-t_periastron", "58712.3")
    _type(browser, "in-times", "60400.5, 60500.5")
    Select(browser.find_element(By.ID, "time_format")).select_by_value("mjd")
    _press_compute(browser)
    heads = [th.text for th in browser.find_elements(By.CSS_SELECTOR, "#series-table th")]
    assert heads[0] == "time [d, MJD]", heads
    dates = {th.text for th in browser.find_elements(By.CSS_SELECTOR, ".events th") if th.text.startswith("date")}
    assert dates == {"date [d, MJD]"}, dates
    # the report headings the same table so
    report = client.post("/v1/orbit/ephemeris?format=markdown", json={
        "period": 2037.4, "eccentricity": 0.873, "omega": 243.6, "t_periastron": 58712.3, "k1": 61.2,
        "times": [60400.5, 60500.5], "time_format": "mjd"}).get_data(as_text=True)
    assert "`time` [d, MJD]" in report and "[d, MJD]" in report
    # the calendar date is still shown to what its sigma supports (a day here), not to the second
    iso = browser.find_element(By.CSS_SELECTOR, '.events td[data-field="iso"]').text
    assert len(iso) == 10 and iso.startswith("20"), iso


@pytest.mark.browser
@pytest.mark.parametrize("width", [1000, 1280])
def test_an_asymmetric_sigma_is_seen_whole_in_its_field(browser, base_url, width):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(width, 1000)
    _open(browser, f"{base_url}/#sb1")
    # the legend invites "+plus −minus": what was typed is seen, not "+0.02 -0.0"
    _type(browser, "sigma-period", "+0.02 -0.01")
    seen, needed = browser.execute_script(
        "const e = document.getElementById('sigma-period'); return [e.clientWidth, e.scrollWidth]")
    assert needed <= seen, (seen, needed)
    # and the page is still no wider than the window
    assert browser.execute_script(
        "return document.documentElement.scrollWidth - document.documentElement.clientWidth") <= 0
    assert browser.find_element(By.ID, "in-period").size["width"] >= 80      # the value keeps its room


@pytest.mark.browser
def test_the_reference_page_on_a_phone_is_no_wider_than_the_window(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(360, 900)
    browser.get(f"{base_url}/docs#mass-loss-radio")
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "table.inputs"))
    excess = browser.execute_script("return document.documentElement.scrollWidth - document.documentElement.clientWidth")
    assert excess <= 0, f"the reference page is {excess} px wider than the window"
    # the inputs' table scrolls in its own box: its last column is still there to be scrolled to
    table = browser.find_element(By.CSS_SELECTOR, "section#mass-loss-radio table.inputs")
    assert browser.execute_script("return arguments[0].scrollWidth > arguments[0].clientWidth", table)
    assert "meaning" in table.text
    _shot(browser, "round8-docs-phone")
    browser.set_window_size(1280, 1400)



@pytest.mark.browser
def test_a_link_to_monte_carlo_draws_gives_the_same_numbers(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "sb1")
    # the fictional example with an isotropic inclination: the service switches to Monte Carlo with a seed of its own
    _type(browser, "in-inclination", "isotropic")
    _type(browser, "sigma-inclination", "")
    browser.find_element(By.ID, "method-linear").click()
    _press_compute(browser)
    status = browser.find_element(By.ID, "status").text
    seed = status.split("seed ")[1].split(",")[0]
    shown = browser.find_element(By.CSS_SELECTOR, '#results-table tr[data-output="m2"] td.value').text
    link = browser.current_url
    assert f"seed={seed}" in link and "uncertainty=monte_carlo" in link, link
    browser.get("about:blank")
    _open(browser, link)
    _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, '#results-table tr[data-output="m2"] td.value'))
    assert browser.find_element(By.CSS_SELECTOR, '#results-table tr[data-output="m2"] td.value').text == shown
    assert f"seed {seed}," in browser.find_element(By.ID, "status").text



@pytest.mark.browser
def test_a_measured_velocitys_error_is_named_by_its_label(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    _example(browser, base_url, "ephemeris")
    _type(browser, "obs-rv1", "12.4 +- 0.6, x")
    _press_compute(browser)
    assert "x: write a value" in _field_error(browser, "obs-rv1").text
    banner = browser.find_element(By.ID, "problem").text
    # the banner names the field as the page labels it (legend "Measured radial velocities", label rv1)
    assert "measured rv1: x: write a value" in banner and "obs-rv1" not in banner, banner


# ----------------------------------------------------------------------------- without a browser
@pytest.mark.parametrize("seed", [1, 2])
def test_a_heavy_tailed_histogram_shows_its_bulk_and_says_what_it_leaves_out(client, seed):
    """A companion's mass from a random orientation (cos i uniform) has a tail to ~1/sin^3 i: drawn over its
    whole range, every draw fell in one bar of 80 and the form's histogram showed nothing."""
    import numpy as np

    from calcservice.plots import histogram_figure

    # the sb1 fictional example with an isotropic inclination, by Monte Carlo, as the form sends it
    body = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
            "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
            "inclination": "isotropic", "uncertainty": {"method": "monte_carlo", "samples": 3000, "seed": seed}}
    r = client.post("/v1/spectroscopic/sb1?format=svg&plot=m2", json=body)
    assert r.status_code == 200 and r.mimetype == "image/svg+xml"
    entry = client.post("/v1/spectroscopic/sb1", json=body).get_json()["results"]["m2"]
    assert entry["sigma"] is None                                   # sigma_undefined: a heavy tail
    # the same draws by hand (numpy): m2 ~ m2_min / sin i for a small companion, cos i uniform on [0, 1)
    rng = np.random.default_rng(seed)
    draws = entry["value"] / np.sqrt(1.0 - rng.uniform(0.0, 1.0, 3000) ** 2)
    fig = histogram_figure("m2", draws, entry)
    ax = fig.axes[0]
    shown = np.percentile(draws, [2.5, 97.5])                       # numpy's percentiles, the central 95 %
    assert ax.get_xlim()[1] < draws.max() / 2 and ax.get_xlim()[1] >= shown[1]
    # the bars: more than a handful hold draws (was 1 of 80)
    heights = [p.get_height() for p in ax.patches if p.get_height() > 0]
    assert len(heights) > 20, len(heights)
    left_out = int(np.count_nonzero((draws < shown[0]) | (draws > shown[1])))
    assert f"the {left_out} outside" in ax.get_title(), ax.get_title()
    # normal draws are drawn whole, with no note (100000 of them span about 9 sigma, 2.3 times their central 95 %)
    normal = np.random.default_rng(seed).normal(5.0, 1.0, 100000)
    ax = histogram_figure("x", normal, {"value": 5.0, "sigma": 1.0, "low": 4.0, "high": 6.0, "unit": ""}).axes[0]
    assert ax.get_xlim()[0] <= normal.min() and ax.get_xlim()[1] >= normal.max() and "outside" not in ax.get_title()
