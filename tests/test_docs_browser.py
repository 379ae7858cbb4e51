"""The reference page at GET /docs: written from the registry, locked down like the form, its examples
true (the curl body is the declaration's example, the Python call gives the service's answer), and in
Debian's headless chromium it shows every calculation and its links land in the form.

The browser tests skip when chromium (or selenium) is missing, except in CI (env CI=true)."""

from __future__ import annotations

import html
import json
import re
from urllib.parse import parse_qsl, unquote, urlsplit

import pytest

from calcservice.api.docs import form_link, python_call
from calcservice.registry import calculations

from .test_form_browser import _wait, base_url, browser  # noqa: F401  (fixtures)


def _sections(page: str) -> dict[str, str]:
    return dict(re.findall(r'<section class="calculation" id="([^"]+)".*?>(.*?)</section>', page, re.S))


# ----------------------------------------------------------------------------- without a browser
def test_docs_page_is_locked_down_like_the_form(client):
    r = client.get("/docs")
    assert r.status_code == 200 and r.mimetype == "text/html"
    assert r.headers["Content-Security-Policy"] == client.get("/").headers["Content-Security-Policy"]
    assert "unsafe-inline" not in r.headers["Content-Security-Policy"]
    page = r.get_data(as_text=True)
    assert "<script" not in page and "<style" not in page and not re.search(r"\sstyle=|\son[a-z]+=", page)
    assert not re.search(r"(src|href)=\"(https?:)?//", page), "nothing from elsewhere"
    css = client.get("/docs/docs.css")
    assert css.status_code == 200 and css.mimetype == "text/css"
    assert "url(" not in css.get_data(as_text=True) and "@import" not in css.get_data(as_text=True)


def test_docs_page_describes_every_calculation_from_its_declaration(client):
    page = client.get("/docs").get_data(as_text=True)
    sections = _sections(page)
    assert set(sections) == set(calculations())
    for name, calc in calculations().items():
        text = html.unescape(sections[name])
        assert calc.title in text and calc.path in text
        for spec in calc.inputs:
            assert f"<code>{spec.name}</code>" in text, (name, spec.name)
            if spec.kind != "choice":
                assert spec.unit in text and spec.domain.describe().removeprefix("must be ") in text
        for out in calc.outputs:
            assert f"<code>{out.name}</code>" in text and out.formula in text, (name, out.name)
        for reference in calc.references:
            assert reference in text, (name, reference)
        for value in calc.conventions.values():
            assert value in text


def test_the_curl_example_sends_the_declared_example(client):
    sections = _sections(client.get("/docs").get_data(as_text=True))
    for name, calc in calculations().items():
        curl = html.unescape(re.search(r'<pre class="curl">(.*?)</pre>', sections[name], re.S).group(1))
        assert f"{calc.path} " in curl and "Content-Type: application/json" in curl
        body = json.loads(re.search(r"-d '(.*)'", curl, re.S).group(1))
        assert body == calc.example, name


def test_the_python_example_gives_the_services_answer(client, monkeypatch):
    """The page's Python, run with the client talking to the app in-process, answers as the service does."""
    from calcservice import client as client_module

    def through_the_app(self, method, path, body=None, query=None, accept="application/json"):
        r = client.open(path, method=method, json=body, query_string=query, headers={"Accept": accept})
        if r.status_code >= 400:
            raise client_module.CalcServiceError(r.get_data(as_text=True), r.status_code, r.get_json(silent=True))
        return r.status_code, r.content_type, r.data

    monkeypatch.setattr(client_module.Client, "_request", through_the_app)
    for name, calc in calculations().items():
        code = python_call(calc, "http://127.0.0.1:8000")          # its print() runs too, for every calculation
        scope: dict = {}
        exec(compile(code, f"<docs example {name}>", "exec"), scope)
        direct = client.post(calc.path, json=calc.example).get_json()
        assert scope["answer"]["results"] == direct["results"], name


def test_the_form_link_carries_the_example():
    for name, calc in calculations().items():
        link = urlsplit(form_link(calc, dict(calc.example)))
        assert link.path == "/" and unquote(link.fragment.split("?")[0]) == name
        fields = dict(parse_qsl(link.fragment.split("?", 1)[1]))
        for key, value in calc.example.items():
            if isinstance(value, dict) and "value" in value:
                assert float(fields[key]) == pytest.approx(float(value["value"])), (name, key)
                if "sigma" in value:
                    assert float(fields[f"{key}.sigma"]) == pytest.approx(value["sigma"]), (name, key)
            elif isinstance(value, (int, float)) and not isinstance(value, bool):
                assert float(fields[key]) == pytest.approx(value), (name, key)
            elif key == "correlations":
                pairs = [f"{c['between'][0]},{c['between'][1]}" for c in value]
                assert all(p in fields["correlations"] for p in pairs), name


# ----------------------------------------------------------------------------- in the browser
@pytest.mark.browser
def test_docs_page_shows_every_calculation_and_its_links_land_in_the_form(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.get(base_url + "/docs")
    sections = browser.find_elements(By.CSS_SELECTOR, "section.calculation")
    assert {s.get_attribute("data-calculation") for s in sections} == set(calculations())
    for section in sections:
        assert section.is_displayed() and section.find_element(By.TAG_NAME, "h2").text
    # the page's own style sheet applied (a CSP or path mistake would leave the browser's defaults)
    body_font = browser.execute_script("return getComputedStyle(document.body).fontFamily")
    assert "system-ui" in body_font or "DejaVu" in body_font, body_font
    csp = [e["message"] for e in browser.get_log("browser") if "Content Security Policy" in e["message"]]
    assert not csp, csp

    # a calculation that is not the form's first: its plain link opens the form on it
    name = list(calculations())[1]
    section = browser.find_element(By.ID, name)
    section.find_element(By.CSS_SELECTOR, "a.form-plain").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-ready") == "true")
    assert urlsplit(browser.current_url).path == "/"
    _wait(browser, lambda d: d.find_element(By.ID, "calculation").get_attribute("value") == name)



@pytest.mark.browser
def test_an_example_link_fills_the_form_with_the_example(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    name = list(calculations())[1]
    calc = calculations()[name]
    browser.get(base_url + "/docs")
    browser.find_element(By.ID, name).find_element(By.CSS_SELECTOR, "a.form-link").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-ready") == "true")
    form_js = browser.execute_script("return fetch('/static/form.js').then(r => r.text())")
    if "applyState" not in form_js:
        pytest.skip("this form does not read its fields from the address yet (the form branch adds it)")
    _wait(browser, lambda d: d.find_element(By.ID, "calculation").get_attribute("value") == name)
    first = next(k for k, v in calc.example.items() if isinstance(v, dict) and "value" in v)
    _wait(browser, lambda d: d.find_element(By.ID, f"in-{first}").get_attribute("value") != "")
    assert float(browser.find_element(By.ID, f"in-{first}").get_attribute("value")) == \
        pytest.approx(calc.example[first]["value"])
