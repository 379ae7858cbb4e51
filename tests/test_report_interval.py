"""The report where a Monte Carlo sigma is undefined: it writes the 68.27 % interval out."""

import pytest

from calcservice import report
from calcservice.registry import get


def _response(sigma):
    # a trimmed Monte Carlo answer for sb2 with an isotropic inclination (numbers from such a run)
    return {"calculation": "sb2", "inputs": {},
            "results": {"m1": {"value": 2.4072, "sigma": sigma, "low": 1.6202, "high": 10.407, "unit": "solMass"},
                        "m1_sin3i": {"value": 1.5511, "sigma": 0.046, "low": 1.507, "high": 1.598,
                                     "unit": "solMass"}},
            "uncertainty": {"method": "monte_carlo", "samples": 4000, "seed": 1, "rejected_fraction": 0.0},
            "warnings": [], "provenance": {}}


@pytest.mark.parametrize("style", ["text", "markdown", "latex"])
def test_undefined_sigma_prints_the_interval(style):
    lines = report.report(_response(None), get("sb2"), style=style).splitlines()
    m1 = next(line for line in lines if "mass of the primary" in line)
    assert "sigma undefined" in m1 and "68.27" in m1
    # the ends at the median's decimal place, as "2.4 +8.0 -0.8" would print them (PDG rule: the shorter
    # half-width, 0.787, keeps one significant digit): 1.6 and 10.4, not 1.62 beside a median of 2.4
    plain = m1.replace("$", "")
    assert "2.4 (" in plain and "interval 1.6 to 10.4)" in plain
    # an output with a sigma keeps the usual +/- form (PDG rounding of the interval's half-widths)
    assert any("1.55" in line and "sigma undefined" not in line for line in lines)


def test_a_defined_sigma_is_printed_as_before():
    lines = report.report(_response(1.7), get("sb2"), style="text").splitlines()
    m1 = next(line for line in lines if "mass of the primary" in line)
    assert "sigma undefined" not in m1 and "+8.0 −0.8" in m1
