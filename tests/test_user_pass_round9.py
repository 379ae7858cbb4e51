"""What a referee, a command-line user and a Python user tripped on (round 9).

The LaTeX report set its results' descriptions as maths but left the inputs' descriptions and the formulas
as text ("cos i uniform", "P K1\\textasciicircum{}3" in typewriter type); the command line counted the
entries of a list from 0 where its user counts them from 1; the web form kept its method on "linear" after
the service answered by Monte Carlo.  Every system here is fictional.
"""

import re

import numpy as np
import pytest

from .test_referee_report import latex_problems


def _row(tex: str, name: str) -> str:
    return next(line for line in tex.splitlines() if line.startswith(r"\texttt{" + name.replace("_", r"\_") + "}"))


# ----------------------------------------------------------------------------- the referee's LaTeX report
def test_the_latex_reports_inputs_and_formulas_set_their_maths_as_maths(client):
    from calcservice.registry import calculations
    # a fictional SB1 with a primary mass and an inclination
    body = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3},
            "eccentricity": {"value": 0.31, "sigma": 0.01}, "primary_mass": {"value": 1.9, "sigma": 0.1},
            "inclination": {"value": 71.0, "sigma": 2.0}}
    tex = client.post("/v1/spectroscopic/sb1?format=latex", json=body).get_data(as_text=True)
    # the input read "(0 \textless{} i \textless{} 180 deg) ... (cos i uniform, ...)" in text
    row = _row(tex, "inclination")
    assert r"$\cos i$ uniform" in row and "$0 < i < 180$ deg" in row and "textless" not in row, row
    # the formula was \texttt{f(M) = P K1\textasciicircum{}3 ...}; now set as the description's maths is
    item = next(line for line in tex.splitlines() if r"\item \texttt{mass\_function}:" in line)
    assert "textasciicircum" not in item and r"P K_{1}^{3} (1 - e^{2})^{3/2} / (2 \pi GM_{\odot})" in item, item
    item = next(line for line in tex.splitlines() if r"\item \texttt{m2\_min}:" in line)
    assert r"positive root of $M_{2}^{3} / (M_{1} + M_{2})^{2} = f(M)$" in item, item
    assert latex_problems(tex) == []
    # a field named in a description stays its name as the inputs' table writes it, not a symbol with a subscript
    ti = calculations()["thiele-innes"]
    tex = client.post(ti.path + "?format=latex", json=ti.example).get_data(as_text=True)
    assert r"\texttt{omega\_primary}" in tex and r"\omega_{\mathrm{primary}}" not in tex
    assert latex_problems(tex) == []


def test_every_input_description_and_formula_sets_as_latex_maths_mathtext_parses():
    """Each input's description and each formula, as the LaTeX report sets it, parses as maths (matplotlib's
    mathtext, a subset of TeX, draws each $...$), with no ^ left in the words and no "e.g." set in italics."""
    from matplotlib.mathtext import MathTextParser

    from calcservice.registry import calculations
    from calcservice.report import latex_text
    parser = MathTextParser("path")
    seen = set()
    for calc in calculations().values():
        names = calc_names(calc)
        texts = [(i.description, False) for i in calc.inputs] + [(o.formula, True) for o in calc.outputs if o.formula]
        for text, formula in texts:
            if (text, names) in seen:
                continue
            seen.add((text, names))
            tex = latex_text(text, names, formula)
            assert latex_problems(tex) == [], (text, tex)
            for maths in re.findall(r"\$[^$]*\$", tex):
                parser.parse(maths.replace(r"\stackrel{>}{\sim}", ">").replace(r"\stackrel{<}{\sim}", "<"), 72)
            words = re.sub(r"\$[^$]*\$", " ", tex)
            assert "^" not in words.replace(r"\textasciicircum{}", "^") or "^" not in text, (text, tex)
            assert "$e.g" not in tex and "e.g.$" not in tex, tex
            assert "km/$s" not in tex and "o-$" not in tex, tex          # units and words are no variables


def calc_names(calc):
    return tuple(sorted({i.name for i in calc.inputs} | {o.name for o in calc.outputs}))


# ----------------------------------------------------------------------------- the web form
from .test_form_browser import _open, _shot, _type, _wait, base_url, browser  # noqa: E402,F401  (fixtures)


@pytest.mark.browser
def test_a_switch_to_monte_carlo_shows_in_the_form_and_its_report_draws_the_numbers_shown(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#sb1")
    browser.find_element(By.ID, "example").click()
    # a fictional SB1 whose inclination is not known: the service answers by Monte Carlo, with a seed of its own
    _type(browser, "in-inclination", "isotropic")
    _type(browser, "sigma-inclination", "")
    browser.execute_script("document.body.dataset.computed = 'pending'")
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")
    status = browser.find_element(By.ID, "status").text
    seed = re.search(r"seed (\d+)", status).group(1)
    # the method read "linear" beside Monte Carlo numbers (a warning said the service switched)
    assert browser.find_element(By.ID, "method-mc").is_selected(), "the form still says linear"
    assert browser.find_element(By.ID, "mc-options").is_displayed()
    # the report was asked for again without a seed, and drew other numbers than the table shows
    browser.find_element(By.ID, "report-markdown").click()
    report = _wait(browser, lambda d: d.find_element(By.ID, "report").get_attribute("value") or None)
    assert f"seed {seed}" in report, (seed, report[-1500:])
    shown = browser.find_element(By.CSS_SELECTOR, '#results-table tr[data-output="m2"] td.value').text.split()[0]
    assert re.search(r"\| `m2` \| " + re.escape(shown) + " ", report), (shown, report)
    _shot(browser, "round9-sb1-isotropic-switched")


# ----------------------------------------------------------------------------- the command line
def _run(capsys, *argv):
    from calcservice.cli import main
    code = main(["compute", *argv])
    out, err = capsys.readouterr()
    return code, out, err


def test_the_command_line_counts_a_lists_entries_from_one_as_its_user_does(capsys):
    # a fictional orbit; the second of the three times typed is no date
    code, _, err = _run(capsys, "ephemeris", "period=10", "eccentricity=0.1", "omega=30", "t_periastron=2450000",
                        "k1=20", "times=2450001,abc,2450003")
    # the line read "times: entry 1: 'abc' ..." (the JSON answer's index, counted from 0)
    assert code == 1 and err.strip() == "calcservice compute: times: the 2nd entry: 'abc' is not an ISO 8601 time", err
    code, _, err = _run(capsys, "ephemeris", "period=10", "eccentricity=0.1", "omega=30", "t_periastron=2450000",
                        "k1=20", "times=2450001,2450002,2450003,1e9")
    assert code == 1 and err.startswith("calcservice compute: times: the 4th entry: must be a Julian Date"), err


def test_the_command_line_says_a_word_for_a_number_in_its_own_forms(capsys):
    code, _, err = _run(capsys, "sb2", "period=abc", "k1=1", "k2=2", "eccentricity=0")
    # it read "must be a number, or an object such as {"value": 1.2, "sigma": 0.1}, ...": the JSON forms
    assert code == 2 and "{" not in err and err.startswith("calcservice compute: period: 'abc' is not a number"), err
    assert "61.4+-0.9" in err
    # an inclination may be the word isotropic, and a date an ISO 8601 string: both still go through
    code, out, _ = _run(capsys, "sb1", "period=3.4", "k1=30+-1", "eccentricity=0", "primary_mass=1.2",
                        "inclination=isotropic", "--seed", "3", "--samples", "200")
    assert code == 0 and "Monte Carlo" in out
    code, _, err = _run(capsys, "sb1", "period=3.4", "k1=30", "eccentricity=0", "primary_mass=1.2",
                        "inclination=isotropc")
    assert code == 2 and "'isotropc' is not a number" in err and "isotropic" in err.split("number", 1)[1], err


@pytest.mark.browser
def test_the_form_counts_a_lists_entries_from_one_and_gives_the_notes_on_the_events(browser, base_url):  # noqa: F811
    from selenium.webdriver.common.by import By
    browser.set_window_size(1280, 1400)
    _open(browser, f"{base_url}/#ephemeris")
    # the hint "mass of star 1 (with m2, ...)" showed the field m2 as m with a subscript 2, which no field is called
    hint = browser.find_element(By.ID, "desc-m1")
    assert [c.text for c in hint.find_elements(By.TAG_NAME, "code")] == ["m2"], hint.get_attribute("innerHTML")
    assert not hint.find_elements(By.TAG_NAME, "sub")
    browser.find_element(By.ID, "example").click()
    browser.execute_script("document.body.dataset.computed = 'pending'")
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")
    # the light-travel amplitudes of the events were in the report and the JSON, not on the page
    note = browser.find_element(By.CSS_SELECTOR, '#results [data-notes="light_travel_time"]').text
    assert note == ("events: light travel time: applied = none, amplitude_star1 = 0.0323 ± 0.0007 d, "
                    "amplitude_star2 = 0.0753 ± 0.0019 d"), note
    # the example's fictional orbit, the second of three times no date
    _type(browser, "in-times", "2460400.5, abc, 2460600.5")
    browser.execute_script("document.body.dataset.computed = 'pending'")
    browser.find_element(By.ID, "compute").click()
    _wait(browser, lambda d: d.find_element(By.TAG_NAME, "body").get_attribute("data-computed") == "true")
    error = _wait(browser, lambda d: d.find_element(By.ID, "error-times").text or None)
    # it read "entry 1: 'abc' is not an ISO 8601 time", the JSON index
    assert error.startswith("the 2nd entry: 'abc' is not an ISO 8601 time"), error
    _shot(browser, "round9-ephemeris-times-entry")


# ----------------------------------------------------------------------------- the reference page
def test_the_reference_page_sets_descriptions_and_formulas_as_maths(client):
    page = client.get("/docs").get_data(as_text=True)
    sb1 = page[page.index('<section class="calculation" id="sb1"'):]
    sb1 = sb1[:sb1.index("</section>")]
    row = next(r for r in sb1.split("<tr>") if r.startswith("<td><code>mass_function</code>"))
    # it read "M2^3 sin^3 i / (M1+M2)^2" and the formula "f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi GM_sun)" as code
    assert "^" not in re.sub(r'title="[^"]*"', "", row), row
    assert "<i>M</i><sub>2</sub><sup>3</sup>" in row and "sin" in row
    assert "(2 π <i>GM</i><sub>⊙</sub>)" in row and "(1 − <i>e</i><sup>2</sup>)<sup>3/2</sup>" in row, row
    # the declaration's own text stays there to copy (as the span's title), as the form keeps it
    assert 'title="f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi GM_sun)"' in row
    row = next(r for r in sb1.split("<tr>") if r.startswith("<td><code>inclination</code>"))
    assert "<i>i</i>" in row and "^" not in row
    # a field's name stays a name: omega_primary is no omega with a subscript
    ti = page[page.index('<section class="calculation" id="thiele-innes"'):]
    ti = ti[:ti.index("</section>")]
    assert "<code>omega_primary</code>" in ti and "<sub>primary</sub>" not in ti
    # and m1 is the input m1 (M1 is the symbol), while a formula's a1 sin i is written in symbols
    collision = page[page.index('<section class="calculation" id="collision"'):]
    row = next(r for r in collision.split("<tr>") if r.startswith("<td><code>m1</code>"))
    assert "with period and <code>m2</code>" in row, row
    # a rate is the letter with a dot over it: eta = Mdot2 v2 / (Mdot1 v1) read "M" where "Ṁ" was meant
    row = next(r for r in collision.split("<tr>") if r.startswith("<td><code>momentum_ratio</code>"))
    assert "<i>η</i> = <i>Ṁ</i><sub>2</sub> <i>v</i><sub>2</sub>" in row.replace("η", "<i>η</i>", 1) or \
        "η = <i>Ṁ</i><sub>2</sub> <i>v</i><sub>2</sub>" in row, row
    assert "<i>a</i><sub>1</sub> sin <i>i</i> = <i>K</i><sub>1</sub>" in sb1


def test_the_command_line_table_gives_the_notes_on_the_events_as_the_report_does(capsys, client):
    from calcservice.registry import calculations
    from calcservice.report import STYLES, event_notes, notes_line
    calc = calculations()["ephemeris"]
    args = [f"{k}={v['value']}+-{v['sigma']}" if isinstance(v, dict) else
            f"{k}={','.join(map(str, v))}" if isinstance(v, list) else f"{k}={v}"
            for k, v in calc.example.items() if k != "correlations"]
    code, out, _ = _run(capsys, "ephemeris", *args)
    # the fictional example's orbit: the light-travel amplitudes a sin i / c of both stars were in the report only
    body = {k: v for k, v in calc.example.items() if k != "correlations"}
    answer = client.post(calc.path, json=body).get_json()
    notes = event_notes(answer["results"])
    assert code == 0 and notes
    for label, values in notes:
        # the same words as the report's "Notes on the events", from the answer's own numbers
        assert f"{label}: {notes_line(values, STYLES['text'])}" in out, out[-800:]
    assert "amplitude_star1 = 0.0323 ± 0.0007 d" in out


def test_a_printed_ephemeris_gives_the_notes_on_the_events(local):
    from calcservice.registry import calculations
    calc = calculations()["ephemeris"]
    r = local.calculate("ephemeris", **{k: v for k, v in calc.example.items() if k != "correlations"})
    # the light-travel amplitudes were in the answer's mapping only, not in print(result) nor in Jupyter's table
    line = "events: light travel time: applied = none, amplitude_star1 = 0.0323 ± 0.0007 d"
    assert line in str(r) and line in r._repr_html_()


@pytest.mark.parametrize("ext", [".fits", ".vot"])
def test_a_catalogue_written_as_fits_or_votable_says_how_its_sigmas_were_drawn(tmp_path, capsys, ext):
    from astropy.io import fits, votable

    from calcservice import __version__
    cat = tmp_path / "cat.csv"
    # two fictional single-lined systems
    cat.write_text("star,period,k1,k1_sigma,eccentricity\nA,182.6,20.0,0.3,0.1\nB,547.9,18.0,0.4,0.2\n")
    out = tmp_path / f"out{ext}"
    code, _, _ = _run(capsys, "sb1", "--in", str(cat), "--out", str(out), "--keep", "star", "--seed", "3",
                      "--samples", "200")
    assert code == 0
    # the FITS header said CALC only, the VOTable nothing at all: a referee handed the file could not tell the
    # method nor redraw its numbers
    if ext == ".fits":
        header = fits.getheader(out, 1)
        said = {k: header.get(k) for k in ("CALC", "METHOD", "SAMPLES", "SEED", "VERSION")}
    else:
        infos = votable.parse(str(out)).get_first_table().infos
        said = {i.name.upper(): i.value for i in infos}
        said = {**said, "SAMPLES": int(said["SAMPLES"]), "SEED": int(said["SEED"])}
    assert said == {"CALC": "sb1", "METHOD": "monte_carlo", "SAMPLES": 200, "SEED": 3, "VERSION": __version__}, said


# ----------------------------------------------------------------------------- the Python client's help
def test_the_clients_help_says_what_its_calls_do(local):
    from calcservice.client import Client, Result
    # budget=True works (it goes into the body) but calculate's help named no such option
    assert "budget=True" in Client.calculate.__doc__
    r = local.calculate("sb1", period=3.4, k1=(30, 1), eccentricity=0, primary_mass=(1.2, 0.1), budget=True)
    # a circular fictional SB1: m2_min's variance from k1 and the primary mass only, shares summing to 1
    assert set(r["results"]["m2_min"]["budget"]) == {"k1", "primary_mass"}
    assert sum(r["results"]["m2_min"]["budget"].values()) == pytest.approx(1.0, abs=1e-9)
    # an undefined sigma comes out as nan, which the help now says, with what to use instead
    assert "nan" in Result.ufloat.__doc__ and "low" in Result.ufloat.__doc__
    r = local.calculate("sb1", period=3.4, k1=(30, 1), eccentricity=0, primary_mass=1.2, inclination="isotropic",
                        samples=500, seed=2)
    assert np.isnan(r.ufloat("m2").std_dev) and r["results"]["m2"]["sigma"] is None
    # the report draws again: with the answer's seed it gives the answer's numbers, as its help says
    assert "seed=" in Client.report.__doc__
    md = local.report("sb1", period=3.4, k1=(30, 1), eccentricity=0, primary_mass=1.2, inclination="isotropic",
                      samples=500, seed=r["uncertainty"]["seed"], format="markdown")
    assert f"seed {r['uncertainty']['seed']}" in md


def test_the_command_line_names_its_own_options_where_the_service_names_a_member(capsys):
    base = ["sb1", "period=3", "k1=30+-1", "eccentricity=0"]
    # a fictional SB1; the second --correlation typed is out of range: it read "correlations.1.rho: ...",
    # the JSON path, counted from 0
    code, _, err = _run(capsys, *base, "--correlation", "k1,period=0.2", "--correlation", "k1,eccentricity=2")
    assert code == 1 and err.startswith("calcservice compute: --correlation k1,eccentricity=2: rho must be"), err
    code, _, err = _run(capsys, *base, "--samples", "50")
    assert code == 1 and err.startswith("calcservice compute: --samples: must be >= 100"), err
    code, _, err = _run(capsys, *base, "--unit", "mass_function=kms")
    assert code == 1 and err.startswith("calcservice compute: --unit mass_function: unknown unit 'kms'"), err
