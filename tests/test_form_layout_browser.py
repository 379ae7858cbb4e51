"""The web form on a phone and on a desktop: every calculation of the registry, computed from its
example in headless chromium at 360 px and at 1280 px, leaves the page no wider than the window.

One browser session for the module.  Screenshots of a few calculations at 390 px and 1280 px go to
screenshots/ (gitignored) for a person to look at.
"""

import pytest

from calcservice.registry import calculations

from .test_form_browser import _csp_violations, _open, _shot, _wait, base_url, browser  # noqa: F401  (fixtures)

pytestmark = pytest.mark.browser

NAMES = sorted(calculations())
SHOWN = ("sb2", "ephemeris", "collision", "mass-loss-radio")


def _compute_example(driver, base, name, monte_carlo=False, budget=False):
    from selenium.webdriver.common.by import By
    _open(driver, f"{base}/#{name}")
    driver.find_element(By.ID, "example").click()
    box = driver.find_element(By.ID, "budget")
    if box.is_selected() != budget:         # the address may carry the last computation's choice
        box.click()
    if monte_carlo:
        driver.find_element(By.ID, "method-mc").click()
        for field, text in (("samples", "400"), ("seed", "5")):
            e = driver.find_element(By.ID, field)
            e.clear()
            e.send_keys(text)
    driver.find_element(By.ID, "compute").click()
    _wait(driver, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")
    # the example computes: results and no problem
    assert not driver.find_element(By.ID, "problem").is_displayed(), driver.find_element(By.ID, "problem").text
    assert driver.find_elements(By.CSS_SELECTOR, "#results-table tr[data-output], #series-table tbody tr"), name


def _overflow(driver):
    """How far the page is wider than its viewport (the window without its scroll bar), in CSS px."""
    return driver.execute_script(
        "return document.documentElement.scrollWidth - document.documentElement.clientWidth")


@pytest.mark.parametrize("width", [360, 1280])
def test_no_horizontal_scroll_for_any_calculation(browser, base_url, width):  # noqa: F811
    browser.set_window_size(width, 900)
    wide = {}
    for name in NAMES:
        _compute_example(browser, base_url, name)
        if _overflow(browser) > 0:
            wide[name] = _overflow(browser)
    assert not wide, f"pages wider than the {width} px window (excess in px): {wide}"
    assert not _csp_violations(browser)


@pytest.mark.parametrize("width", [360, 1280])
def test_monte_carlo_results_and_their_buttons_stay_inside_the_panel(browser, base_url, width):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(width, 900)
    for name in ("sb1", "collision", "mass-loss-radio"):
        _compute_example(browser, base_url, name, monte_carlo=True)
        assert _overflow(browser) <= 0, name
        panel = browser.find_element(By.ID, "output").rect
        buttons = browser.find_elements(By.CSS_SELECTOR, "button.histogram")
        assert buttons, name
        for b in buttons:
            r = b.rect
            assert panel["x"] <= r["x"] and r["x"] + r["width"] <= panel["x"] + panel["width"] + 0.5, (name, r, panel)


def test_plots_scale_to_the_width(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    for width in (360, 1280):
        browser.set_window_size(width, 900)
        _compute_example(browser, base_url, "ephemeris")
        _wait(browser, lambda d: d.find_elements(By.CSS_SELECTOR, "#rv-phase-plot path.curve.star1"))
        panel = browser.find_element(By.ID, "output").rect
        for plot in browser.find_elements(By.CSS_SELECTOR, "svg.plot"):
            r = plot.rect
            assert r["width"] > 0.6 * min(panel["width"], 640) and r["x"] + r["width"] <= panel["x"] + panel["width"] + 0.5
        assert _overflow(browser) <= 0


def test_screenshots_at_phone_and_desktop_widths(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    for width in (390, 1280):
        for name in SHOWN:
            browser.set_window_size(width, 900)
            _compute_example(browser, base_url, name, monte_carlo=name == "collision", budget=name == "sb2")
            if name == "sb2":
                assert browser.find_elements(By.CSS_SELECTOR, 'table.budget[data-budget="m1"] tr[data-term]')
            if name == "collision":
                browser.find_element(By.CSS_SELECTOR, 'tr[data-output="momentum_ratio"] button.histogram').click()
                _wait(browser, lambda d: d.execute_script(
                    "const i = document.querySelector('#histogram-momentum_ratio img');"
                    "return i && i.complete && i.naturalWidth > 0"))
            height = browser.execute_script("return document.documentElement.scrollHeight")
            browser.set_window_size(width, min(height + 140, 7000))   # the whole page in one picture
            assert _overflow(browser) <= 0, (name, width)
            _shot(browser, f"form-{name}-{width}")
