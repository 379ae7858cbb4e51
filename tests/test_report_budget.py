"""The derivation report's uncertainty budget and its statement of the time scale."""

import math
import re

import pytest
from uncertainties import correlated_values_norm, ufloat
from uncertainties import umath

from calcservice.cli import main
from calcservice.registry import calculations

from .conftest import post

SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0}}


def _sb2_m1(period, k1, k2, e, inc_deg):
    """M1 = P (1 - e^2)^(3/2) (K1 + K2)^2 K2 / (2 pi G sin^3 i) (Hilditch 2001, eq. 2.53, from memory),
    without its constant factor: a share of variance is a ratio, and the factor cancels from it."""
    return period * (1 - e ** 2) ** 1.5 * (k1 + k2) ** 2 * k2 / umath.sin(umath.radians(inc_deg)) ** 3


def _table(text: str, output: str) -> dict[str, float]:
    """The rows of one output's budget table in a Markdown report: term -> share in percent."""
    lines = text.splitlines()
    start = lines.index(f"| `{output}` | share of variance [%] |")
    rows = {}
    for line in lines[start + 2:]:
        if not line.startswith("|"):
            break
        term, share = [c.strip() for c in line.strip("|").split("|")]
        rows[term.strip("`")] = float(share)
    return rows


def _reference(rho: float = 0.0) -> tuple[dict[str, float], float]:
    """Each input's share of M1's variance by the `uncertainties` package (the reference library):
    error_components() gives (df/dx sigma) per input; with a correlation rho(k1, k2) the extra term
    is 2 rho c_k1 c_k2 over the correlated variance, which the package gives as std_dev."""
    names = ["period", "k1", "k2", "eccentricity", "inclination"]
    xs = {n: ufloat(SB2[n]["value"], SB2[n]["sigma"], n) for n in names}
    m1 = _sb2_m1(*(xs[n] for n in names))
    components = {var.tag: c for var, c in m1.error_components().items()}
    terms = {n: components[n] ** 2 for n in names}
    if rho:
        corr = [[1.0 if a == b else (rho if {a, b} == {"k1", "k2"} else 0.0) for b in names] for a in names]
        values = correlated_values_norm([(SB2[n]["value"], SB2[n]["sigma"]) for n in names], corr, names)
        var = _sb2_m1(*values).std_dev ** 2
        terms["correlation k1, k2"] = 2 * rho * components["k1"] * components["k2"]
    else:
        var = m1.std_dev ** 2
    return {k: 100 * v / var for k, v in terms.items()}, var


@pytest.mark.parametrize("rho", [0.0, 0.3])
def test_sb2_budget_table_matches_uncertainties_error_components(client, rho):
    body = {**SB2, **({"correlations": [{"between": ["k1", "k2"], "rho": rho}]} if rho else {})}
    r = client.post("/v1/spectroscopic/sb2?format=markdown", json=body)      # the request asks no budget
    assert r.status_code == 200
    md = r.get_data(as_text=True)
    assert "### Uncertainty budget" in md
    table = _table(md, "m1")
    expected, _ = _reference(rho)
    assert set(table) == set(expected)
    for term, share in expected.items():
        # printed to 0.1 % (two significant digits below 0.1 %); the engine's Jacobian is numerical
        assert table[term] == pytest.approx(share, abs=0.06, rel=0.02), term
    assert sum(table.values()) == pytest.approx(100.0, abs=0.3)
    # inputs by decreasing share, the correlation term on its own line after them
    inputs = [v for k, v in table.items() if not k.startswith("correlation")]
    assert inputs == sorted(inputs, reverse=True)
    assert list(table)[0] == "inclination"            # i dominates M1 here: 3 sigma_i cot i = 6.0 % of 1.38


def test_budget_table_in_latex_and_from_the_command_line(capsys):
    args = ["compute", "sb2", "--format", "latex"] + [f"{k}={v['value']}+-{v['sigma']}" for k, v in SB2.items()]
    assert main(args) == 0
    tex = capsys.readouterr().out
    assert r"\paragraph{Uncertainty budget}" in tex
    block = tex[tex.index(r"\texttt{m1} & share of variance [\%]"):]
    row = next(line for line in block.splitlines() if line.startswith(r"\texttt{inclination} &"))
    share = float(row.split("&")[1].strip(" \\$"))
    assert share == pytest.approx(_reference()[0]["inclination"], abs=0.06)
    assert tex.count(r"\begin{") == tex.count(r"\end{")


def test_monte_carlo_report_says_when_the_budget_is_not_given(client):
    body = {**SB2, "correlations": [{"between": ["k1", "k2"], "rho": 0.3}],
            "uncertainty": {"method": "monte_carlo", "samples": 400, "seed": 3}}
    md = client.post("/v1/spectroscopic/sb2?format=markdown", json=body).get_data(as_text=True)
    section = md[md.index("### Uncertainty budget"):]
    lines = [line for line in section.splitlines()[1:] if line.strip()]
    assert lines[0].startswith("Uncertainty budget not given for mass\\_ratio") and "`m1`" not in section
    assert " m1, " in lines[0] and "correlated" in lines[0]
    assert "budget\\_not\\_given" not in md              # said once, by the section, not again as a warning


def test_monte_carlo_report_estimates_the_budget_of_independent_inputs(client):
    body = {**SB2, "uncertainty": {"method": "monte_carlo", "samples": 4000, "seed": 3}}
    md = client.post("/v1/spectroscopic/sb2?format=markdown", json=body).get_data(as_text=True)
    assert "need not sum to 100 %" in md
    table = _table(md, "m1")
    expected, _ = _reference()
    # the held-input estimate of a nearly additive function is close to the linear share (sampling noise
    # of a variance ratio from 4000 common draws: a few percent)
    assert table["inclination"] == pytest.approx(expected["inclination"], abs=5)
    assert table["k2"] == pytest.approx(expected["k2"], abs=5)


def test_series_outputs_are_named_as_without_a_budget():
    from calcservice.core import compute
    from calcservice import report
    calc = calculations()["ephemeris"]
    response = compute("ephemeris", report.asking_budget(calc.example))
    text = report.report(response, calc, "text")
    line = next(line for line in text.splitlines() if line.startswith("Uncertainty budget not given"))
    assert "(series outputs)" in line


def test_exact_inputs_have_no_budget_section(client):
    exact = {k: v["value"] for k, v in SB2.items()}
    md = client.post("/v1/spectroscopic/sb2?format=markdown", json=exact).get_data(as_text=True)
    assert "Uncertainty budget" not in md


def test_a_bad_budget_flag_is_still_refused(client):
    r = client.post("/v1/spectroscopic/sb2?format=markdown", json={**SB2, "budget": "yes"})
    assert r.status_code == 422 and "budget" in r.get_json()["errors"]


# ----------------------------------------------------------------------------- the time scale
def _mjd_example():
    calc = calculations()["mid-eclipse"]
    body = dict(calc.example)
    # the example's dates as MJD = JD - 2400000.5 (IAU 1973; astropy.time's "mjd" format), to the
    # example's own decimals, as a caller types them (the subtraction's last bits are not a date's)
    for name in ("t_periastron", "after"):
        entry = body[name]
        body[name] = ({**entry, "value": round(entry["value"] - 2400000.5, 6)} if isinstance(entry, dict)
                      else round(entry - 2400000.5, 6))
    return calc, body


@pytest.mark.parametrize("time_format, scale", [("mjd", "MJD"), ("jd", "JD")])
def test_report_states_the_time_scale_of_inputs_and_events(client, time_format, scale):
    calc, body = _mjd_example()
    if time_format == "jd":
        body = calc.example
    status, answer = post(client, calc.path, {**body, "time_format": time_format})
    assert status == 200
    md = client.post(calc.path + "?format=markdown", json={**body, "time_format": time_format}).get_data(as_text=True)
    row = next(line for line in md.splitlines() if line.startswith("| `t_periastron` |"))
    assert f"| d ({scale}) |" in row
    assert f"{body['t_periastron']['value']:.2f} ± 0.05" in row
    period = next(line for line in md.splitlines() if line.startswith("| `period` |"))
    assert "MJD" not in period and "(JD)" not in period          # a duration has no time scale
    heads = [line for line in md.splitlines() if line.startswith("| date [")]
    assert heads and all(f"[d, {scale}]" in h for h in heads)
    first = answer["results"]["events"]["eclipse_of_star1"][0]["value"]
    assert f"{round(first, 2):.2f}" in md
    if time_format == "mjd":
        assert 60000 < first < 70000                                # an MJD of this decade, not a JD


def test_wind_momentum_ratio_budget_matches_uncertainties_error_components(client):
    """A wind calculation: eta = Mdot2 v2 / (Mdot1 v1) (Eichler & Usov 1993, eq. 1, from memory), its shares of
    variance by the `uncertainties` package against the report's table for the collision example."""
    calc = calculations()["collision"]
    example = calc.example
    x = {n: ufloat(example[n]["value"], example[n]["sigma"], n) for n in ("mdot1", "mdot2", "vinf1", "vinf2")}
    eta = x["mdot2"] * x["vinf2"] / (x["mdot1"] * x["vinf1"])
    expected = {var.tag: 100 * c ** 2 / eta.std_dev ** 2 for var, c in eta.error_components().items()}
    md = client.post(calc.path + "?format=markdown", json=example).get_data(as_text=True)
    table = _table(md, "momentum_ratio")
    assert set(table) == set(expected)
    for term, share in expected.items():
        assert table[term] == pytest.approx(share, abs=0.06, rel=0.02), term


def test_a_correlated_pair_that_moves_no_output_has_a_budget_share_of_plus_zero(client):
    # mass_ratio = K1/K2 does not depend on the period (Hilditch 2001, eq. 2.48): the share of the pair
    # (period, k1) is 2 rho (dq/dP sigma_P)(dq/dK1 sigma_K1) / var = 0, written 0.0 and not -0.0 for rho < 0
    body = {"period": {"value": 12.3, "sigma": 0.01}, "k1": {"value": 50, "sigma": 1}, "k2": {"value": 70, "sigma": 1},
            "eccentricity": {"value": 0.3, "sigma": 0.01}, "inclination": {"value": 80, "sigma": 2}, "budget": True,
            "correlations": [{"between": ["period", "k1"], "rho": -0.3}]}
    status, answer = post(client, "/v1/spectroscopic/sb2", body)
    assert status == 200, answer
    share = answer["results"]["mass_ratio"]["budget"]["period,k1"]
    assert share == 0.0 and math.copysign(1.0, share) == 1.0
