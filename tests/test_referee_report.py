"""The derivation report read as a referee reads it: LaTeX that a plain LaTeX run would accept, the au
written as its symbol, the meaning of an isotropic inclination said where it is used, Monte Carlo answers as
a median with its 68.27 % interval at one decimal place."""

from __future__ import annotations

import re

import pytest

from calcservice import report
from calcservice.core import compute
from calcservice.registry import calculations, get

#: characters beyond ASCII that LaTeX (2018 and later: UTF-8 input by default) typesets without a package
LATEX_UTF8_OK = set("–—óéáíúàèüöäçñ")


def latex_problems(tex: str) -> list[str]:
    """Unbalanced braces or $, special characters outside math, characters plain LaTeX cannot typeset."""
    problems = []
    environments = []
    for number, line in enumerate(tex.splitlines(), 1):
        if line.startswith("%"):
            continue
        bare = re.sub(r"\\[\\{}$%&#_ ]", "", line)
        depth = 0
        for ch in bare:
            depth += {"{": 1, "}": -1}.get(ch, 0)
            if depth < 0:
                break
        if depth:
            problems.append(f"{number}: braces: {line[:100]}")
        if bare.count("$") % 2:
            problems.append(f"{number}: $: {line[:100]}")
        text = re.sub(r"\$[^$]*\$", "", bare)          # outside math
        for ch in "^_&%#" if "tabular" not in line and " & " not in line else "^_%#":
            if ch in text:
                problems.append(f"{number}: {ch} outside math: {line[:100]}")
        for ch in line:
            if ord(ch) > 127 and ch not in LATEX_UTF8_OK:
                problems.append(f"{number}: {ch!r}: {line[:100]}")
        for kind, env in re.findall(r"\\(begin|end)\{(\w+)\}", line):
            if kind == "begin":
                environments.append(env)
            elif not environments or environments.pop() != env:
                problems.append(f"{number}: \\end{{{env}}} unmatched")
    if environments:
        problems.append(f"unclosed environments {environments}")
    return problems


def test_the_checker_sees_a_broken_line():
    assert latex_problems(r"a_b $x$ {")
    assert latex_problems(r"\begin{itemize}")
    assert not latex_problems(r"\texttt{a\_b} $x^{2}$ \\")


@pytest.mark.parametrize("name", sorted(calculations()))
def test_every_calculations_latex_report_is_plain_latex(name):
    calc = get(name)
    body = report.asking_budget(dict(calc.example))
    tex = report.latex(compute(name, body), calc, calc.example)
    assert latex_problems(tex) == []


def test_the_astronomical_unit_is_written_au():
    # IAU 2012 Resolution B2: the symbol of the astronomical unit is "au" (astropy's LaTeX writes "AU")
    tex = report.latex(compute("sb2", dict(get("sb2").example)), get("sb2"))
    assert r"\mathrm{au}" in tex and r"\mathrm{AU}" not in tex


def test_an_isotropic_inclination_says_what_it_means():
    body = {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
            "eccentricity": 0.31, "inclination": "isotropic", "uncertainty": {"samples": 2000, "seed": 3}}
    text = report.markdown(compute("sb2", body), get("sb2"), body)
    section = text.split("### Uncertainty\n")[1].split("###")[0]
    assert "cos i drawn uniform" in section and "not a measurement" in section
    conventions = text.split("### Conventions\n")[1].split("###")[0]
    assert "`isotropic`" in conventions and "not known at all" in conventions


def test_a_monte_carlo_interval_is_printed_at_the_medians_place():
    body = {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
            "eccentricity": 0.31, "inclination": "isotropic", "uncertainty": {"samples": 4000, "seed": 7}}
    answer = compute("sb2", body)
    text = report.markdown(answer, get("sb2"), body)
    for name in ("m1", "total_mass"):
        row = next(line for line in text.splitlines() if line.startswith(f"| `{name}` |"))
        cell = re.search(r"\| ([\d.]+) \(sigma undefined; 68\.27 % interval ([\d.]+) to ([\d.]+)\)", row)
        assert cell, row
        decimals = {len(x.partition(".")[2]) for x in cell.groups()}
        assert len(decimals) == 1, row
        entry = answer["results"][name]
        # the PDG rule on the shorter half-width sets the place
        shorter = min(entry["value"] - entry["low"], entry["high"] - entry["value"])
        assert decimals.pop() == max(0, -report.pdg_place(shorter)), row


def test_prose_columns_wrap_in_latex():
    # a description or a source runs to 200 characters: in an l column it would run off the printed page
    tex = report.latex(compute("sb1", dict(get("sb1").example)), get("sb1"))
    tables = [line for line in tex.splitlines() if line.startswith(r"\begin{tabular}")]
    assert len(tables) == 3 and all(t.endswith(r"p{0.4\linewidth}}") for t in tables[:3]), tables


def test_the_light_travel_amplitudes_are_printed_with_their_unit():
    # the dates' light-travel correction is a referee's first question on an eclipse timing: applied or not,
    # and a sin i / c of each star (days; K P sqrt(1 - e^2) / (2 pi c), Hilditch 2001, ch. 2)
    body = {"period": 812.0, "eccentricity": 0.33, "omega": 20.0, "t_periastron": 2459000.0, "k1": 21.0,
            "k2": 34.0, "times": [2460000.0], "count": 1, "light_travel_time": "star1"}
    answer = compute("ephemeris", body)
    text = report.markdown(answer, get("ephemeris"), body)
    amp = answer["results"]["events"]["light_travel_time"]["amplitude_star1"]
    assert "applied = star1" in text
    assert f"amplitude\\_star1 = {amp:.6g} d" in text
    # with a sigma, value and sigma are rounded together (PDG rule), and a star without k2 is not printed as empty
    body.update(k1={"value": 21.0, "sigma": 0.5})
    body.pop("k2")
    answer = compute("ephemeris", body)
    text = report.markdown(answer, get("ephemeris"), body)
    amp = answer["results"]["events"]["light_travel_time"]
    # only K1 is uncertain: sigma_A / A = sigma_K1 / K1 = 0.5 / 21, 2.03e-4 d of 8.55e-3 d
    assert abs(amp["amplitude_star1_sigma"] / (amp["amplitude_star1"] * 0.5 / 21.0) - 1) < 1e-12
    assert "amplitude\\_star1 = 0.00855 ± 0.00020 d" in text and "amplitude\\_star2" not in text
