"""What a working astronomer tripped on when using the service as its users do (round 7).

ECSV headers spell each unit as the JSON answer does (``au``, ``km/s``), and astropy reads them back to the same
unit; the command line refuses a catalogue of series in CSV or ECSV as the service does (406), naming the
formats that hold them; the client has one rule for an astropy unit given as a unit; plot subtitles set the
declarations' maths as maths.  Every system here is fictional; by-hand checks use astropy.
"""

import io
import json

import astropy.units as u
import numpy as np
import pytest
from astropy.table import Table

from calcservice.client import Client, InvalidInput

from .test_form_browser import base_url, browser  # noqa: F401  (fixtures)

# a fictional catalogue of two double-lined systems ("Tern-1", "Tern-2"), periods in years as an orbit paper gives
TERN_ECSV = """# %ECSV 1.0
# ---
# datatype:
# - {name: star, datatype: string}
# - {name: period, unit: yr, datatype: float64}
# - {name: k1, unit: km/s, datatype: float64}
# - {name: k1_sigma, unit: m/s, datatype: float64}
# - {name: k2, unit: km/s, datatype: float64}
# - {name: eccentricity, datatype: float64}
# schema: astropy-2.0
star period k1 k1_sigma k2 eccentricity
Tern-1 0.5 30.1 300 40.2 0.2
Tern-2 1.25 22.0 500 25.5 0.45
"""


def _header_units(text: str) -> dict:
    """Each column's unit as the ECSV header writes it (the YAML text, not astropy's reading of it)."""
    from astropy.table.meta import get_header_from_yaml
    head = [line[2:] for line in text.splitlines() if line.startswith("# ")]
    return {c["name"]: c["unit"] for c in get_header_from_yaml(head)["datatype"] if "unit" in c}


@pytest.fixture(scope="module")
def local():
    return Client("local")


# ----------------------------------------------------------------------------- ECSV units as JSON spells them
def test_the_batch_ecsv_answer_spells_units_as_the_json_answer(client):
    r = client.post("/v1/batch/sb2?keep=star&options=%7B%22units%22%3A%7B%22a1_sin_i%22%3A%22km%22%7D%7D",
                    data=TERN_ECSV, headers={"Content-Type": "text/csv", "Accept": "text/csv"})
    assert r.status_code == 200, r.get_data(as_text=True)
    text = r.get_data(as_text=True)
    json_answer = client.post("/v1/batch/sb2", json={
        "columns": {"period": {"value": [0.5, 1.25], "unit": "yr"}, "k1": {"value": [30.1, 22.0], "sigma": [0.3, 0.5]},
                    "k2": [40.2, 25.5], "eccentricity": [0.2, 0.45]},
        "units": {"a1_sin_i": "km"}}).get_json()
    written = _header_units(text)
    for name, entry in json_answer["columns"].items():
        if entry["unit"]:
            # the header said AU where the JSON says au (IAU 2012 Resolution B2: the symbol is au)
            assert written[name] == entry["unit"] and written[f"{name}_sigma"] == entry["unit"], name
    assert written["a_sin_i"] == "au" and written["a1_sin_i"] == "km"
    # astropy reads the header back to the same unit, and the numbers are the JSON answer's
    back = Table.read(text, format="ascii.ecsv")
    assert back["a_sin_i"].unit == u.au and back["m1_sin3i"].unit == u.solMass
    np.testing.assert_array_equal(np.asarray(back["a_sin_i"]), json_answer["columns"]["a_sin_i"]["value"])
    # and the library's reading of the answer gives the JSON spelling too
    from calcservice.tables import decode_answer
    assert decode_answer(text.encode(), "text/x-ecsv")["columns"]["a_sin_i"]["unit"] == "au"


def test_every_output_unit_spelled_in_an_ecsv_header_reads_back_as_that_unit():
    # each canonical unit of the registry, written as the JSON answer spells it, read back by astropy's ECSV reader
    from calcservice.registry import calculations
    from calcservice.tables import spelled_unit
    units = sorted({o.unit for c in calculations().values() for o in c.outputs if o.unit} | {"km/s", "1/yr", "mas"})
    table = Table()
    for k, unit in enumerate(units):
        table[f"c{k}"] = [1.5]
        table[f"c{k}"].unit = spelled_unit(unit)
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    written = _header_units(out.getvalue())
    back = Table.read(out.getvalue(), format="ascii.ecsv")
    for k, unit in enumerate(units):
        assert written[f"c{k}"] == unit
        assert back[f"c{k}"].unit == u.Unit(unit) and (1.5 * back[f"c{k}"].unit).to_value(u.Unit(unit)) == 1.5, unit


def test_the_command_lines_ecsv_spells_units_as_the_json_answer_and_carries_the_provenance(tmp_path, capsys):
    from calcservice.cli import main
    src = tmp_path / "tern.ecsv"
    src.write_text(TERN_ECSV)
    assert main(["compute", "sb2", "--in", str(src), "--out", str(tmp_path / "out.ecsv"), "--keep", "star"]) == 0
    text = (tmp_path / "out.ecsv").read_text()
    written = _header_units(text)
    assert written["a_sin_i"] == "au" and written["a_sin_i_sigma"] == "au" and written["m1_sin3i"] == "solMass"
    back = Table.read(tmp_path / "out.ecsv", format="ascii.ecsv")
    assert back["a_sin_i"].unit == u.au
    # no astropy mixin serialisation in the header: plain columns, as the service writes them
    assert "__serialized_columns__" not in text
    assert back.meta["uncertainty"] == {"method": "linear"}
    assert back.meta["provenance"]["constants"]["GM_sun"]["value"] == pytest.approx(1.3271244e20)  # IAU 2015 B3
    # a by-hand check of the first system: a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2)
    a1 = (30.1 * u.km / u.s * 0.5 * u.yr * np.sqrt(1 - 0.2 ** 2) / (2 * np.pi)).to_value(u.au)
    assert back["a1_sin_i"][0] == pytest.approx(a1, rel=1e-12)
    assert back["star"][0] == "Tern-1"


# ----------------------------------------------------------------------------- series in CSV / ECSV: refused alike
ORBITS = ("star,period,eccentricity,omega,t_periastron,k1\n"
          "Lantern-7,41.6,0.31,122,2460310.4,38.2\nEmber-3,2410,0.71,205,2458120.4,38\n")


@pytest.mark.parametrize("ext", ["csv", "ecsv"])
def test_the_command_line_refuses_series_in_csv_or_ecsv_as_the_service_does(tmp_path, capsys, client, ext):
    from calcservice.cli import main
    src = tmp_path / "orbits.csv"
    src.write_text(ORBITS)
    out = tmp_path / f"eph.{ext}"
    code = main(["compute", "ephemeris", "times=2461000.5,2461010.5", "--in", str(src), "--out", str(out),
                 "--keep", "star"])
    err = capsys.readouterr().err
    # one line naming --out and the formats that hold an array per cell, before any work (no file written)
    assert code == 2 and len(err.strip().splitlines()) == 1, err
    assert "--out" in err and "CSV and ECSV cannot carry" in err and ".fits or .vot" in err
    assert not out.exists()
    # the service refuses the same catalogue asked for as CSV, 406 naming Accept
    r = client.post("/v1/batch/ephemeris?keep=star&options=%7B%22times%22%3A%5B2461000.5%5D%7D", data=ORBITS,
                    headers={"Content-Type": "text/csv", "Accept": "text/csv"})
    assert r.status_code == 406 and "Accept" in r.get_json()["errors"]
    assert "CSV and ECSV cannot carry" in r.get_json()["detail"]
    # and the command line's help says so where --out is described
    with pytest.raises(SystemExit):
        main(["compute", "--help"])
    assert "outputs over a series such as times need .fits or .vot" in " ".join(capsys.readouterr().out.split())


def test_a_series_catalogue_written_as_fits_holds_an_array_per_system(tmp_path, capsys, local):
    from calcservice.cli import main
    src = tmp_path / "orbits.csv"
    src.write_text(ORBITS)
    assert main(["compute", "ephemeris", "times=2461000.5,2461010.5", "--in", str(src),
                 "--out", str(tmp_path / "eph.fits"), "--keep", "star"]) == 0
    back = Table.read(tmp_path / "eph.fits")
    one = local.calculate("ephemeris", period=2410, eccentricity=0.71, omega=205, t_periastron=2458120.4, k1=38,
                          times=[2461000.5, 2461010.5])
    np.testing.assert_allclose(back["rv1"][1], one["results"]["series"]["rv1"]["value"], rtol=1e-12)


# ----------------------------------------------------------------------------- one rule for a unit in the client
def test_the_client_turns_an_astropy_unit_into_a_string_by_one_rule(local):
    from calcservice.client import unit_text
    assert unit_text(u.km / u.s, "units.x") == (u.km / u.s).to_string() == "km / s"
    assert unit_text("km/s", "units.x") == "km/s"
    # the same unit object is taken for the outputs and for a batch's columns
    r = local.calculate("sb1", period=41.6, k1=23.4, eccentricity=0.31, units={"a1_sin_i": u.km})
    out = local.batch("sb1", {"period": [0.1], "k1": [23.4], "eccentricity": [0.1]}, units={"period": u.yr},
                      output_units={"a1_sin_i": u.km})
    assert r["results"]["a1_sin_i"]["unit"] == out.unit["a1_sin_i"] == "km"
    # a1 sin i = K1 P sqrt(1 - e^2) / (2 pi) (Hilditch 2001, ch. 2), P = 0.1 Julian year = 36.525 d
    expected = (23.4 * u.km / u.s * 0.1 * u.yr * np.sqrt(1 - 0.1 ** 2) / (2 * np.pi)).to_value(u.km)
    assert out["a1_sin_i"][0] == pytest.approx(expected, rel=1e-12)


@pytest.mark.parametrize("bad, kind", [(1000 * u.km, "Quantity"), (5, "int"), (None, "NoneType")])
def test_a_unit_that_is_no_unit_is_refused_alike_for_outputs_and_columns(local, bad, kind):
    # a Quantity went to the encoder as it was (TypeError "Type is not JSON serializable: Quantity") for the outputs,
    # and as its string "1000.0 km", a unit a thousand times a km, for a batch's columns
    with pytest.raises(InvalidInput) as info:
        local.calculate("sb1", period=41.6, k1=23.4, eccentricity=0.31, units={"a1_sin_i": bad})
    assert list(info.value.errors) == ["units.a1_sin_i"] and f"not {kind}" in str(info.value)
    with pytest.raises(InvalidInput) as info:
        local.batch("sb1", {"period": [0.1], "k1": [23.4], "eccentricity": [0.1]}, units={"period": bad})
    assert list(info.value.errors) == ["units"] and f"not {kind}" in str(info.value)
    if kind == "Quantity":
        assert "its unit alone is 'km'" in str(info.value)


# ----------------------------------------------------------------------------- plot subtitles: maths set as maths
def _svg_text(data: bytes) -> str:
    import re
    return " ".join(re.findall(r">([^<>]+)</text>", data.decode()))


def test_a_histograms_subtitle_sets_the_descriptions_maths_as_maths(client):
    from calcservice.plots import histogram_figure
    from calcservice.report import tex_maths
    # a fictional SB2 ("Lantern-7"), Monte Carlo: the subtitle read "M1 sin^3 i", the declaration's plain text
    body = {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
            "eccentricity": {"value": 0.31, "sigma": 0.01}, "uncertainty": {"method": "monte_carlo", "samples": 500,
                                                                             "seed": 7}}
    r = client.post("/v1/spectroscopic/sb2?format=svg&plot=m1_sin3i", json=body)
    assert r.status_code == 200
    text = _svg_text(r.data)
    assert "sin^3" not in text and "M1 sin" not in text and "m1_sin3i [solMass]" in text
    # from the declaration's one description, set by mathtext: M with a subscript 1, sin upright with a cube
    assert tex_maths("M1 sin^3 i") == r"$M_{1} \,\sin^{3} i$"
    fig = histogram_figure("m1_sin3i", np.linspace(1.4, 1.7, 100), {"value": 1.55, "sigma": 0.04, "unit": "solMass"},
                           "M1 sin^3 i")
    assert fig.axes[0].get_title().splitlines()[1] == r"$M_{1} \,\sin^{3} i$"
    # words stay words, Greek letters and rates become symbols, an identifier keeps its underscore
    assert tex_maths("mass ratio q = M2/M1") == r"mass ratio $q = M_{2}/M_{1}$"
    assert tex_maths("electron-scattering Eddington factor Gamma_e (vink-2001)") == \
        r"electron-scattering Eddington factor $\Gamma_{e}$ (vink-2001)"
    assert tex_maths("Pdot / P") == r"$\dot{P} / P$"
    assert tex_maths("log10 of the mass-loss rate in solMass/yr") == r"$\log_{10}$ of the mass-loss rate in solMass/yr"
    assert tex_maths("the semi-major axis of the primary's orbit") == "the semi-major axis of the primary's orbit"
    assert tex_maths("for the photocentre of a dark companion compare omega itself") == \
        r"for the photocentre of a dark companion compare $\omega$ itself"
    assert tex_maths("radius of the shell at observation_date") == "radius of the shell at observation_date"


def test_every_outputs_description_draws_as_a_subtitle():
    import re

    from calcservice.plots import SUBTITLE_WIDTH, figure_bytes, histogram_figure
    from calcservice.registry import calculations
    done = set()
    for calc in calculations().values():
        for out in calc.outputs:
            if out.description in done:
                continue
            done.add(out.description)
            fig = histogram_figure(out.name, np.array([1.0, 2.0, 2.5, 3.0]), {"value": 2.0, "unit": out.unit},
                                   out.description, out.unit)
            figure_bytes(fig, "png")                # mathtext parses every line, or raises
            for line in fig.axes[0].get_title().splitlines()[1:]:
                words = re.sub(r"\$[^$]*\$", " ", line)         # what is set as text
                assert "^" not in words and not re.search(r"\b(?:chi|omega|Gamma|Mdot|Pdot|sin)\b", words), line
                assert len(words) <= SUBTITLE_WIDTH + 10, line


# ----------------------------------------------------------------------------- budget shares that are rounding noise
def _radio_mc(client):
    from calcservice.registry import calculations
    # the fictional example of the radio mass-loss rate, by Monte Carlo with its budget
    body = {**calculations()["mass-loss-radio"].example, "budget": True,
            "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 7}}
    r = client.post("/v1/winds/mass-loss/radio", json=body)
    assert r.status_code == 200
    return body, r.get_json()


def test_a_budget_share_that_is_rounding_noise_is_no_share_in_the_report(client):
    body, answer = _radio_mc(client)
    # Wright & Barlow (1975): Mdot is proportional to v, so Mdot / v, and with it the radius of the radio photosphere,
    # does not depend on v: its Monte Carlo share comes out as a difference of equal doubles, about 1e-16
    share = answer["results"]["radio_photosphere_radius"]["budget"]["vinf"]
    assert abs(share) < 1e-12
    text = client.post("/v1/winds/mass-loss/radio?format=markdown", json=body).get_data(as_text=True)
    table = text.split("| `radio_photosphere_radius` | share of variance [%] |")[1].split("\n\n")[0]
    assert "`vinf`" not in table and "e-1" not in table        # it printed "| `vinf` | -2.6e-14 |"
    assert "`distance`" in table and "`flux_density`" in table
    # a share that is small but real is still printed: the period's share of an SB2's m1 sin^3 i, 0.025 %
    sb2 = client.post("/v1/spectroscopic/sb2?format=markdown", json={
        "period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
        "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01}}).get_data(as_text=True)
    assert "| `period` | 0.02" in sb2.split("| `m1_sin3i` | share of variance [%] |")[1].split("\n\n")[0]


@pytest.mark.browser
def test_the_form_shows_no_noise_share_and_no_empty_budget(browser, base_url, client):  # noqa: F811
    from selenium.webdriver.common.by import By

    from .test_form_browser import _open, _shot
    _, answer = _radio_mc(client)
    browser.set_window_size(1280, 1600)
    _open(browser, f"{base_url}/#mass-loss-radio")
    browser.execute_script("window.calcserviceForm.show(arguments[0])", answer)
    radius = browser.find_element(By.CSS_SELECTOR, 'table[data-budget="radio_photosphere_radius"]')
    terms = [tr.get_attribute("data-term") for tr in radius.find_elements(By.CSS_SELECTOR, "tr[data-term]")]
    assert terms == ["distance", "flux_density"], terms
    # the Gaunt factor has no spread (its inputs are exact): no table captioned with no rows under it
    assert not browser.find_elements(By.CSS_SELECTOR, 'table[data-budget="gaunt_factor"]')
    _shot(browser, "form-radio-budget")


def test_a_constant_in_the_report_is_a_number_with_every_digit_not_code(client):
    from astropy import constants
    from .test_referee_report import latex_problems
    body = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
            "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01}}
    tex = client.post("/v1/spectroscopic/sb2?format=latex", json=body).get_data(as_text=True)
    # "1.3271244e+20" in a LaTeX table: a number a referee must retype; IAU 2015 Resolution B3: GM_sun =
    # 1.3271244e20 m^3 s^-2 (nominal, exact); IAU 2012 Resolution B2: au = 149 597 870 700 m (exact)
    row = next(line for line in tex.splitlines() if line.startswith(r"\texttt{GM\_sun}"))
    assert r"& $1.3271244 \times 10^{20}$ &" in row and "e+20" not in tex
    row = next(line for line in tex.splitlines() if line.startswith(r"\texttt{au}"))
    assert r"& $1.495978707 \times 10^{11}$ &" in row
    assert 1.495978707e11 == constants.au.value and 1.3271244e20 == constants.GM_sun.value
    assert latex_problems(tex) == []
    md = client.post("/v1/spectroscopic/sb2?format=markdown", json=body).get_data(as_text=True)
    assert "| `GM_sun` | 1.3271244 × 10<sup>20</sup> | m3 / s2 |" in md and "| `day` | 86400 | s |" in md


def test_the_latex_reports_result_descriptions_set_their_maths_as_maths(client):
    from .test_referee_report import latex_problems
    body = {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
            "eccentricity": {"value": 0.31, "sigma": 0.01}}
    tex = client.post("/v1/spectroscopic/sb2?format=latex", json=body).get_data(as_text=True)
    # the description read "M1 sin\textasciicircum{}3 i" as text; the same declaration a histogram's subtitle sets
    row = next(line for line in tex.splitlines() if line.startswith(r"\texttt{m1\_sin3i}"))
    assert row.endswith(r"& $M_{1} \,\sin^{3} i$ \\")
    row = next(line for line in tex.splitlines() if line.startswith(r"\texttt{mass\_ratio}"))
    assert row.endswith(r"& mass ratio $q = M_{2}/M_{1}$ \\")
    # plain LaTeX: no \gtrsim (a package's), "about or above 1" written with the kernel's \stackrel
    from calcservice.registry import calculations
    collision = client.post("/v1/winds/collision?format=latex", json=calculations()["collision"].example)
    tex = collision.get_data(as_text=True)
    assert r"($\stackrel{>}{\sim}1$ adiabatic, $\stackrel{<}{\sim}1$ radiative)" in tex and r"\gtrsim" not in tex
    assert latex_problems(tex) == []


def test_the_command_line_table_says_an_undefined_sigma_as_the_report_does(capsys, local):
    from calcservice.cli import main
    from calcservice.report import STYLES, measured_cell
    # a fictional single-lined orbit ("Wick-2") with an inclination not known at all: the companion's mass
    # has no finite sigma; the table printed "0.80 +0.84 -0.13", as if the interval were a measured error
    args = ["period=3.4172d", "k1=61.4+-0.9km/s", "eccentricity=0", "primary_mass=1.2+-0.1", "inclination=isotropic"]
    assert main(["compute", "sb1", *args, "--seed", "7", "--samples", "2000"]) == 0
    out = capsys.readouterr().out
    r = local.calculate("sb1", period={"value": 3.4172, "unit": "d"}, k1={"value": 61.4, "sigma": 0.9, "unit": "km/s"},
                        eccentricity=0, primary_mass=(1.2, 0.1), inclination="isotropic", seed=7, samples=2000)
    assert r["results"]["m2"]["sigma"] is None
    line = next(x for x in out.splitlines() if x.startswith("m2 "))
    assert measured_cell(r["results"]["m2"], STYLES["text"]) in line and "sigma undefined; 68.27 % interval" in line
    # a defined sigma is printed as before: the minimum mass (i = 90 deg) has one
    assert measured_cell(r["results"]["m2_min"], STYLES["text"]) in out


def test_the_reference_page_says_each_rule_once_naming_its_inputs(client):
    import html
    import re
    page = client.get("/docs").get_data(as_text=True)
    section = page.split('id="collision"')[1].split("<section")[0]
    rules = html.unescape(re.search(r'<p class="rules">(.*?)</p>', section).group(1))
    # "belongs to an orbit and is not used with separation" was said four times, naming no input
    said = rules.split(": ", 1)[1].rstrip(".").split("; ")
    assert len(said) == len(set(said)), said
    assert rules.count("belongs to an orbit") == 1 and rules.count("Kepler's third law needs") == 1
    assert "semimajor_axis, period, m1, m2: belongs to an orbit and is not used with separation" in rules
    # each constraint's message is still there, as the 422 would say it
    from calcservice.registry import calculations
    assert all(c.message in rules for c in calculations()["collision"].constraints)


def test_an_unknown_calculation_in_the_client_says_which_there_are(local):
    from calcservice.client import CalcServiceError
    with pytest.raises(CalcServiceError) as info:
        local.calculate("sb3", period=41.6)
    # str() gave "404 there is no calculation 'sb3' (calculation: unknown: 'sb3')": the names were in no printed part
    assert info.value.status == 404 and list(info.value.errors) == ["calculation"]
    assert "sb1, sb2" in str(info.value) and "shell-forecast" in str(info.value)


def test_printing_a_batch_of_ephemerides_shows_their_curves(local):
    from calcservice.report import STYLES, measured_cell
    # two fictional orbits ("Lantern-7", "Ember-3"), the second with a period that is no period: print(out) showed
    # an empty table ("#", "0", "1"), the series outputs being left out
    out = local.batch("ephemeris", {"period": ([41.6, -2410.0], 0.1), "eccentricity": [0.31, 0.71],
                                    "omega": [122.0, 205.0], "t_periastron": [2460310.4, 2458120.4],
                                    "k1": [38.2, 38.0], "times": [2461000.5, 2461010.5, 2461020.5]})
    text = repr(out)
    header = text.splitlines()[1]
    assert "rv1 [km/s]" in header and "phase" in header
    row = next(line for line in text.splitlines() if line.startswith("0 "))
    one = local.calculate("ephemeris", period=(41.6, 0.1), eccentricity=0.31, omega=122.0, t_periastron=2460310.4,
                          k1=38.2, times=[2461000.5, 2461010.5, 2461020.5])["results"]["series"]["rv1"]
    first, last = ({"value": one["value"][k], "sigma": one["sigma"][k]} for k in (0, -1))
    assert f"{measured_cell(first, STYLES['text'])} … {measured_cell(last, STYLES['text'])} (3 values)" in row
    failed = next(line for line in text.splitlines() if line.startswith("1 "))
    assert "period: must be > 0" in failed and "—" in failed
    assert "<td>" in out._repr_html_() and "(3 values)" in out._repr_html_()


def test_a_printed_series_says_its_dates_are_jd_or_mjd_as_the_event_tables_do(capsys, local):
    from calcservice.cli import main
    from calcservice.registry import calculations
    # the fictional ephemeris example: the series said "time [d]" where the events beside it said "date [d, JD]"
    text = str(local.calculate("ephemeris", **calculations()["ephemeris"].example))
    assert "time [d, JD]" in text and "date [d, JD]" in text
    assert main(["compute", "ephemeris", "period=2037.4", "eccentricity=0.873", "omega=243.6",
                 "t_periastron=58711.8", "k1=61.2", "times=60400,60500", "--time-format", "mjd"]) == 0
    out = capsys.readouterr().out
    assert "time [d, MJD]" in out and "date [d, MJD]" in out and "JD]" not in out.replace("MJD]", "")
    # the report's own series heading, as it was
    md = local.report("ephemeris", format="markdown", **calculations()["ephemeris"].example)
    assert "| `time` [d, JD] |" in md


def test_the_report_says_which_inputs_were_the_callers_own_draws(local):
    # a fictional SB1's posterior ("Wick-2"): period and k1 as draws, the primary's mass as value +- sigma; the
    # report said "inputs drawn normal", of draws the service never made
    rng = np.random.default_rng(1)
    text = local.report("sb1", format="markdown", period={"samples": rng.normal(3.4172, 0.0002, 400).tolist()},
                        k1={"samples": rng.normal(61.4, 0.9, 400).tolist()}, eccentricity=0, primary_mass=(1.2, 0.1))
    line = next(x for x in text.splitlines() if x.startswith("- Monte Carlo with 400 draws"))
    assert "period, k1: the caller's own draws, paired index by index; the other inputs drawn normal" in line
    # without samples, as before
    text = local.report("sb1", format="markdown", period=3.4172, k1=(61.4, 0.9), eccentricity=0, samples=500, seed=1)
    assert "results are the median with the central 68.27 % interval, inputs drawn normal" in text


def test_a_default_is_shown_to_six_digits_as_the_report_and_the_form_show_it(client, capsys):
    import re

    from calcservice.cli import main
    # the mean mass per particle of fully ionised solar gas, 50/81 = 0.617283950617284 (from memory: X = 0.7,
    # Y = 0.28, fully ionised: 1/mu = 2X + 3Y/4 + Z/2 gives about 0.617): /docs and --describe printed every digit
    page = client.get("/docs").get_data(as_text=True)
    row = re.search(r"<tr><td><code>mu1</code>.*?</tr>", page).group(0)
    assert "default 0.617284" in row and "0.617283950617284" not in row
    assert "default 1<" in re.search(r"<tr><td><code>clumping</code>.*?</tr>", page).group(0)
    assert main(["compute", "collision", "--describe"]) == 0
    out = capsys.readouterr().out
    assert "default 0.617284 " in out and "0.617283950617284" not in out
    assert main(["compute", "ephemeris", "--describe"]) == 0
    assert "default none" in capsys.readouterr().out            # a choice's default as it is
