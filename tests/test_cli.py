"""``calcservice compute``: values on the command line, the table, --json against the HTTP answer, the
report, catalogues through the batch path, and one-line errors."""

import csv
import io
import json
import math
import subprocess
import sys

import pytest

from calcservice.cli import build_parser, main
from calcservice.commandline import UsageError, parse_measured

from .conftest import post

SB2_ARGS = ["period=41.6+-0.02", "k1=38.2±0.4km/s", "k2=51.7+/-0.6", "eccentricity=0.31+-0.01",
            "inclination=71+-2deg"]
SB2_BODY = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4, "unit": "km/s"},
            "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
            "inclination": {"value": 71.0, "sigma": 2.0, "unit": "deg"}}


def run(capsys, *argv):
    code = main(["compute", *argv])
    out = capsys.readouterr()
    return code, out.out, out.err


@pytest.mark.parametrize("text, expected", [
    ("61.4+-0.9km/s", {"value": 61.4, "sigma": 0.9, "unit": "km/s"}),
    ("61.4±0.9", {"value": 61.4, "sigma": 0.9}),
    ("61.4 +/- 0.9 km/s", {"value": 61.4, "sigma": 0.9, "unit": "km/s"}),
    ("2.5yr", {"value": 2.5, "unit": "yr"}),
    ("1.2+0.3-0.1", {"value": 1.2, "sigma_minus": 0.1, "sigma_plus": 0.3}),
    ("1.2-0.1+0.3au", {"value": 1.2, "sigma_minus": 0.1, "sigma_plus": 0.3, "unit": "au"}),
    ("-7.4", -7.4),
    ("1.5e-6+-2e-7solMass/yr", {"value": 1.5e-6, "sigma": 2e-7, "unit": "solMass/yr"}),
    ("3.2erg", {"value": 3.2, "unit": "erg"}),              # a unit beginning with e is not an exponent
    ("71°", {"value": 71.0, "unit": "°"}),                  # astropy reads °, % and µas: so does the command line
    ("31%", {"value": 31.0, "unit": "%"}),
    ("2.1+-0.1µas", {"value": 2.1, "sigma": 0.1, "unit": "µas"}),
    ("isotropic", "isotropic"),
    ("2024-03-01T12:00:00", "2024-03-01T12:00:00"),
])
def test_parse_measured(text, expected):
    assert parse_measured(text) == expected


def test_parse_measured_refuses_broken_numbers():
    with pytest.raises(UsageError, match="k1"):
        parse_measured("61.4+-", "k1")


def test_help_lists_serve_and_compute():
    text = build_parser().format_help()
    assert "serve" in text and "compute" in text


def test_json_is_the_http_response(capsys, client):
    code, out, _ = run(capsys, "sb2", *SB2_ARGS, "--json")
    assert code == 0
    status, http = post(client, "/v1/spectroscopic/sb2", SB2_BODY)
    assert status == 200 and json.loads(out) == http


def test_monte_carlo_options_match_http(capsys, client):
    code, out, _ = run(capsys, "sb2", *SB2_ARGS, "--method", "monte-carlo", "--samples", "3000", "--seed", "5",
                       "--json")
    assert code == 0
    body = {**SB2_BODY, "uncertainty": {"method": "monte_carlo", "samples": 3000, "seed": 5}}
    assert json.loads(out) == post(client, "/v1/spectroscopic/sb2", body)[1]


def test_options_correlation_units_and_asymmetric(capsys, client):
    code, out, _ = run(capsys, "sb2", "period=41.6+0.03-0.01", "k1=38.2+-0.4", "k2=51.7+-0.6", "eccentricity=0.31",
                       "--correlation", "k1,k2=0.3", "--unit", "semimajor_axis=solRad", "inclination=71", "--json")
    assert code == 0                     # values after an option are still read
    body = {"period": {"value": 41.6, "sigma_minus": 0.01, "sigma_plus": 0.03}, "k1": {"value": 38.2, "sigma": 0.4},
            "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": 0.31, "inclination": 71.0,
            "correlations": [{"between": ["k1", "k2"], "rho": 0.3}], "units": {"semimajor_axis": "solRad"}}
    answer = json.loads(out)
    assert answer == post(client, "/v1/spectroscopic/sb2", body)[1]
    assert answer["results"]["semimajor_axis"]["unit"] == "solRad"


def test_table_is_readable(capsys, client):
    code, out, _ = run(capsys, "sb2", *SB2_ARGS)
    assert code == 0
    http = post(client, "/v1/spectroscopic/sb2", SB2_BODY)[1]
    m1 = http["results"]["m1"]
    # PDG rounding of the HTTP numbers (rule as in tests/test_report.py): sigma 0.08 -> one digit
    lead = math.floor(math.log10(m1["sigma"]))
    three = int(m1["sigma"] / 10 ** (lead - 2))
    place = lead if 355 <= three <= 949 else lead - 1
    line = next(line for line in out.splitlines() if line.startswith("m1 "))
    assert f"{m1['value']:.{-place}f} ± {m1['sigma']:.{-place}f}" in line and "solMass" in line
    assert "linear propagation" in out.splitlines()[0]


def test_warnings_are_shown(capsys):
    code, out, _ = run(capsys, "sb2", "period=41.6", "k1=60", "k2=40", "eccentricity=0.1")
    assert code == 0 and "warning [primary_less_massive]" in out


def test_report_formats(capsys):
    code, out, _ = run(capsys, "sb2", *SB2_ARGS, "--format", "latex")
    assert code == 0 and r"\begin{tabular}" in out and "Hilditch" in out
    code, out, _ = run(capsys, "sb2", *SB2_ARGS, "--format", "markdown", "--seed", "3")
    assert code == 0 and "### Results" in out and "seed 3" in out


@pytest.mark.parametrize("argv, code, field", [
    (["sb2", "period=41.6", "k1=38.2", "k2=51.7", "eccentricity=1.5"], 1, "eccentricity"),
    (["sb2", "period=41.6", "k1=38.2parsec", "k2=51.7", "eccentricity=0.1"], 1, "k1"),
    (["sb2", "period=41.6", "k3=1", "k2=51.7", "eccentricity=0.1"], 2, "k3"),
    (["sb2", "period=41.6", "period=2", "k1=1", "k2=1", "eccentricity=0"], 2, "period"),
    (["sb2", "period"], 2, "period"),
    (["sb9"], 2, "sb9"),
    (["sb2", "--samples", "many"], 2, "--samples"),
])
def test_bad_input_is_one_line_naming_the_field(capsys, argv, code, field):
    try:
        result = main(["compute", *argv])
    except SystemExit as e:          # argparse's own errors (here: one line too)
        result = e.code
    assert result == code
    err = capsys.readouterr().err
    assert field in err and len(err.strip().splitlines()) == 1 and "Traceback" not in err


def test_describe_and_list(capsys):
    code, out, _ = run(capsys, "sb1", "--describe")
    assert code == 0 and "primary_mass" in out and "mass_function" in out and "calcservice compute sb1" in out
    code, out, _ = run(capsys, "--list")
    assert code == 0 and "ephemeris" in out


def test_ephemeris_from_the_command_line(capsys):
    code, out, _ = run(capsys, "ephemeris", "period=812.5+-0.6", "eccentricity=0.64", "omega=131",
                       "t_periastron=2459870.4+-0.9", "k1=22.5", "k2=36.1", "times=2460100.5,2460180.5")
    assert code == 0 and "rv1 [km/s]" in out and "periastron" in out


# ----------------------------------------------------------------------------- catalogues
CATALOGUE = """star,period,period_sigma,k1[m/s],k1_sigma,eccentricity,primary_mass
Fict-1,41.6,0.02,23400,300,0.31,1.9
Fict-2,12.3,0.01,8100,200,0.05,
Fict-3,-5,0.1,8100,200,0.05,1.2
"""


def test_catalogue_through_the_batch_path(tmp_path, capsys, client):
    src, dst = tmp_path / "cat.csv", tmp_path / "out.csv"
    src.write_text(CATALOGUE)
    code, _, err = run(capsys, "sb1", "--csv", str(src), "--out", str(dst), "--id", "star", "inclination=60+-3")
    assert code == 0 and "2 of 3 systems computed" in err
    rows = list(csv.DictReader(io.StringIO(dst.read_text())))
    assert [r["star"] for r in rows] == ["Fict-1", "Fict-2", "Fict-3"]
    # the same systems one by one over HTTP
    one = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 23.4, "sigma": 0.3}, "eccentricity": 0.31,
           "primary_mass": 1.9, "inclination": {"value": 60.0, "sigma": 3.0}}
    http = post(client, "/v1/spectroscopic/sb1", one)[1]["results"]
    assert float(rows[0]["m2[solMass]"]) == pytest.approx(http["m2"]["value"], rel=1e-12)
    assert float(rows[0]["m2_sigma[solMass]"]) == pytest.approx(http["m2"]["sigma"], rel=1e-9)
    assert rows[1]["m2[solMass]"] == "" and rows[1]["mass_function[solMass]"] != ""   # no primary_mass there
    assert "period" in rows[2]["error"] and rows[2]["mass_function[solMass]"] == ""


def test_catalogue_refuses_unknown_columns(tmp_path, capsys):
    src = tmp_path / "cat.csv"
    src.write_text("period,k1,eccentricity,colour\n41.6,23.4,0.3,blue\n")
    code, _, err = run(capsys, "sb1", "--csv", str(src), "--out", str(tmp_path / "o.csv"))
    assert code == 2 and "colour" in err and "unknown column" in err and len(err.strip().splitlines()) == 1


def test_the_installed_command_exits_cleanly_on_bad_input():
    r = subprocess.run([sys.executable, "-m", "calcservice", "compute", "sb1", "period=41.6", "k1=23.4",
                        "eccentricity=-0.2"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 1 and "eccentricity" in r.stderr and "Traceback" not in r.stderr


def test_degree_sign_on_the_command_line_is_degrees(capsys, client):
    # astropy: 71° is 71 deg
    code, out, err = run(capsys, "sb2", *SB2_ARGS[:-1], "inclination=71+-2°", "--json")
    assert code == 0, err
    assert json.loads(out)["results"]["m1"] == post(client, "/v1/spectroscopic/sb2", SB2_BODY)[1]["results"]["m1"]
