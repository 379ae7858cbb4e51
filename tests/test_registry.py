"""The domain rule of an input, stated once in registry.Domain: its array, scalar and closed-bound forms agree."""

import math

import numpy as np
import pytest

from calcservice.registry import ANGLE, ECCENTRICITY, FRACTION, INCLINATION, POSITIVE, Domain

DOMAINS = [POSITIVE, ECCENTRICITY, INCLINATION, ANGLE, FRACTION, Domain(), Domain(-1.0, 2.0, True, True)]


@pytest.mark.parametrize("domain", DOMAINS, ids=lambda d: d.describe())
def test_the_three_forms_of_a_domain_agree(domain):
    edges = [domain.low, domain.high]
    probes = [0.0, -0.0, 1.0, -1.0, 0.5, 90.0, 180.0, 360.0, -360.0, 1e308, -1e308, math.inf, -math.inf, math.nan]
    for e in edges:
        if math.isfinite(e):
            probes += [e, math.nextafter(e, math.inf), math.nextafter(e, -math.inf)]
    x = np.array(probes)
    array = domain.contains(x)
    scalar = np.array([domain.holds(v) for v in probes])
    low, high = domain.closed_bounds()
    closed = np.isfinite(x) & (x >= low) & (x <= high)
    # by the definition of an interval: open ends exclude their bound, closed ends include it
    by_definition = np.array([math.isfinite(v) and (v > domain.low if domain.low_open else v >= domain.low)
                              and (v < domain.high if domain.high_open else v <= domain.high) for v in probes])
    assert array.tolist() == scalar.tolist() == closed.tolist() == by_definition.tolist()

