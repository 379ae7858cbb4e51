"""The derivation report: the Particle Data Group rounding rule and the LaTeX / Markdown content."""

import math
import re

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from calcservice import __version__
from calcservice.report import pdg_round, printed, report
from calcservice.registry import calculations

from .conftest import post

SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0}}


# ----------------------------------------------------------------------------- the PDG rule
# Particle Data Group, Review of Particle Physics, introduction ("Rounding"), from memory: "if the three
# highest order digits of the error lie between 100 and 354, we round to two significant digits; between
# 355 and 949, one significant digit; between 950 and 999, round up to 1000 and keep two significant
# digits. In all cases, the central value is given with a precision that matches that of the error."
# Its examples, from memory: 0.827 -> 0.8, 0.354 -> 0.35, 0.950 -> 1.0 (in the leading digits).
@pytest.mark.parametrize("sigma, expected", [
    (0.827, "0.8"),      # PDG example (from memory)
    (0.354, "0.35"),     # PDG example (from memory)
    (0.950, "1.0"),      # PDG example (from memory)
])
def test_pdg_published_examples(sigma, expected):
    assert pdg_round(1.0, sigma)[1] == expected


@pytest.mark.parametrize("sigma, expected", [
    # the boundaries of the three classes, stated in the rule itself
    (0.100, "0.10"), (0.355, "0.4"), (0.949, "0.9"), (0.999, "1.0"), (0.3549, "0.35"),
    # the rule is the same at every power of ten
    (827.0, "800"), (35.4, "35"), (9.5e-7, "0.0000010"), (1.23e-5, "0.000012"),
])
def test_pdg_classes_and_scale(sigma, expected):
    assert pdg_round(0.0, sigma)[1] == expected


@pytest.mark.parametrize("value, sigma, expected", [
    # the value to the decimal place of the rounded uncertainty (the rule's last sentence)
    (1.23456, 0.827, ("1.2", "0.8")),
    (1.23456, 0.354, ("1.23", "0.35")),
    (1.23456, 0.950, ("1.2", "1.0")),
    (12345.6, 354.0, ("12350", "350")),
    (12345.6, 950.0, ("12300", "1000")),
    (-0.004, 0.3, ("0.00", "0.30")),          # no negative zero
    (2458712.34567, 0.0123, ("2458712.346", "0.012")),
])
def test_value_rounded_to_the_place_of_the_uncertainty(value, sigma, expected):
    assert pdg_round(value, sigma) == expected


def _reference_digits(sigma: float) -> int:
    """Significant digits the rule keeps, computed independently with floats (common practice: the three
    leading digits by scaling; exact ties at the class boundaries are avoided by the strategy)."""
    three = int(sigma / 10 ** (math.floor(math.log10(sigma)) - 2) + 1e-9)
    return 1 if 355 <= three <= 949 else 2


@settings(max_examples=200, deadline=None)
@given(mantissa=st.floats(1.0, 9.99), exponent=st.integers(-12, 12))
def test_sigma_is_rounded_at_the_place_the_rule_gives(mantissa, exponent):
    sigma = mantissa * 10.0 ** exponent
    lead = math.floor(math.log10(sigma))
    three = int(sigma / 10 ** (lead - 2) * (1 + 1e-12))
    rounded = float(pdg_round(0.0, sigma)[1])
    if three >= 950:
        assert rounded == pytest.approx(10.0 ** (lead + 1), rel=1e-12)
        return
    unit = 10.0 ** (lead - _reference_digits(sigma) + 1)
    # a multiple of the last kept digit, within half of it of the uncertainty
    assert abs(rounded / unit - round(rounded / unit)) < 1e-6
    assert abs(rounded - sigma) <= 0.5 * unit * (1 + 1e-9)


def test_printed_forms():
    assert printed(0.04746174728478066).value == "0.0474617"           # exact: six significant digits
    p = printed(1.3271244e20, sigma=3e16)
    assert (p.value, p.sigma, p.exponent) == ("1.32712", "0.00030", 20)
    p = printed(2.5, minus=0.1, plus=0.3)                                # the smaller error sets the place
    assert (p.value, p.plus, p.minus) == ("2.50", "0.30", "0.10")
    assert printed(float("nan")) is None


# ----------------------------------------------------------------------------- the report
def _independent_round(value: float, sigma: float) -> tuple[str, str]:
    """PDG rounding by Python's own float formatting (round-half-even differs only on exact ties)."""
    lead = math.floor(math.log10(sigma))
    digits = _reference_digits(sigma)
    place = lead - digits + 1
    decimals = max(0, -place)
    return f"{round(value, -place):.{decimals}f}", f"{round(sigma, -place):.{decimals}f}"


def test_latex_report_of_sb2(client):
    status, body = post(client, "/v1/spectroscopic/sb2", SB2)
    assert status == 200
    r = client.post("/v1/spectroscopic/sb2?format=latex", json=SB2)
    assert r.status_code == 200 and r.mimetype == "text/x-tex"
    tex = r.get_data(as_text=True)
    m1 = body["results"]["m1"]
    v, s = _independent_round(m1["value"], m1["sigma"])
    assert f"${v} \\pm {s}$" in tex
    assert r"\texttt{m1\_sin3i}" in tex                       # names escaped for LaTeX
    assert r"$\mathrm{M_{\odot}}$" in tex                      # astropy's LaTeX form of solMass
    assert r"$M_{1} \,\sin^{3} i = P (1 - e^{2})^{3/2}" in tex  # formulas and descriptions set as maths
    assert "Hilditch" in tex and "IAU 2015 Resolution B3" in tex
    assert "positive when receding" in tex                     # conventions
    assert "linear" in tex and f"calcservice {__version__}" in tex
    assert tex.count(r"\begin{") == tex.count(r"\end{")
    unescaped = re.sub(r"\\[{}]", "", tex)
    assert unescaped.count("{") == unescaped.count("}")
    outside_math = re.sub(r"\$[^$]*\$", "", tex)
    outside_math = "\n".join(line for line in outside_math.splitlines() if not line.startswith("%"))
    outside_math = outside_math.replace(" & ", " ").replace(r"\textasciicircum{}", "")
    assert not re.search(r"(?<!\\)[_&%#^]", outside_math)     # only table separators are bare &
    # the JSON keeps full precision: more digits than printed
    assert len(repr(m1["value"]).replace(".", "").lstrip("0")) > len(v.replace(".", "").lstrip("0"))


def test_markdown_report_with_monte_carlo_seed(client):
    body = {**SB2, "uncertainty": {"method": "monte_carlo", "samples": 2000, "seed": 7}}
    r = client.post("/v1/spectroscopic/sb2?format=markdown", json=body)
    assert r.status_code == 200 and r.mimetype == "text/markdown"
    md = r.get_data(as_text=True)
    assert "Monte Carlo with 2000 draws, seed 7" in md
    assert "| `m1` |" in md and "### Constants" in md and "### References" in md
    assert "| `GM_sun` |" in md and "IAU 2015 Resolution B3" in md


def test_report_names_the_correlations_given(client):
    body = {**SB2, "correlations": [{"between": ["k1", "k2"], "rho": 0.3}]}
    md = client.post("/v1/spectroscopic/sb2?format=markdown", json=body).get_data(as_text=True)
    assert "rho(k1, k2) = 0.3" in md


def test_every_calculation_has_a_report(client):
    for calc in calculations().values():
        if not calc.example:
            continue
        status, body = post(client, calc.path, calc.example)
        assert status == 200, calc.name
        md = client.post(calc.path + "?format=markdown", json=calc.example)
        assert md.status_code == 200, calc.name
        text = md.get_data(as_text=True)
        for name, entry in body["results"].items():
            if isinstance(entry, dict) and "unit" in entry:
                assert f"`{name}`" in text, (calc.name, name)
        for ref in body["provenance"]["references"]:
            assert ref.split(",")[0].replace("_", "\\_") in text or ref.split(",")[0] in text


def test_bad_input_in_a_report_is_a_problem(client):
    r = client.post("/v1/spectroscopic/sb2?format=latex", json={**SB2, "eccentricity": 1.5})
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    assert "eccentricity" in r.get_json()["errors"]


def test_unknown_format_is_refused(client):
    r = client.post("/v1/spectroscopic/sb2?format=docx", json=SB2)
    assert r.status_code == 400 and "format" in r.get_json()["errors"]


def test_report_of_a_time_series_lists_events():
    from calcservice.core import compute
    calc = calculations()["ephemeris"]
    response = compute("ephemeris", calc.example)
    text = report(response, calc, "text")
    assert "Series" in text and "events: periastron" in text.lower()


def test_inputs_print_every_digit_given_over_one_power_of_ten(client):
    # an input is the caller's own numbers: not rounded, but written as a result is, one power of ten
    # for value and errors and the value's decimals padded to its errors' (41.6 ± 0.02 is 41.60 ± 0.02)
    body = {"mdot1": {"value": 2e-5, "sigma_minus": 1e-6, "sigma_plus": 3e-6}, "mdot2": {"value": 1e-6, "sigma": 2e-7},
            "vinf1": {"value": 2800, "sigma_minus": 100, "sigma_plus": 150}, "vinf2": {"value": 1000.5, "sigma": 0.25},
            "separation": {"value": 41.6, "sigma": 0.02}}
    md = client.post("/v1/winds/collision?format=markdown", json=body).get_data(as_text=True)
    inputs = md.split("### Inputs")[1].split("###")[0]
    rows = {line.split("|")[1].strip(" `"): line.split("|")[2].strip() for line in inputs.splitlines()
            if line.startswith("| `")}
    # the asymmetric errors used to lose their power of ten: "2 +3 / −1"
    assert rows["mdot1"] == "(2.0 +0.3 / −0.1) × 10<sup>-5</sup>"
    assert rows["mdot2"] == "(1.0 ± 0.2) × 10<sup>-6</sup>"
    assert rows["vinf1"] == "2800 +150 / −100"
    assert rows["vinf2"] == "1000.50 ± 0.25"
    assert rows["separation"] == "41.60 ± 0.02"
    latex = client.post("/v1/winds/collision?format=latex", json=body).get_data(as_text=True)
    assert r"$(2.0^{+0.3}_{-0.1}) \times 10^{-5}$" in latex


def test_a_default_input_prints_six_significant_digits(client):
    # mu = 50/81 = 0.617284 (fully ionised gas of solar composition, the collision declaration's default); the report
    # printed the double's 15 digits (0.617283950617284) beside the caller's own numbers
    body = {"mdot1": {"value": 2.4e-5, "sigma": 6e-6}, "mdot2": 1.1e-6, "vinf1": 2300.0, "vinf2": 1900.0,
            "separation": 10.0}
    r = client.post("/v1/winds/collision?format=markdown", json=body)
    assert r.status_code == 200
    row = [line for line in r.get_data(as_text=True).splitlines() if line.startswith("| `mu1` |")][0]
    assert row.split("|")[2].strip() == f"{50 / 81:.6g} (default)" == "0.617284 (default)"
