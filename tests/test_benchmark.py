"""The end-to-end benchmark's pieces, on a few systems (the benchmark itself is not a unit test):
every format's caller-side encoding and decoding brings back the same arrays, and the hand-written
lab loop (astropy + the ``uncertainties`` package, the outside reference for linear propagation)
and the bare numpy expression agree with the service, so the ratios compare the same numbers."""

from __future__ import annotations

import importlib.util
from pathlib import Path

import numpy as np
import pytest

ROOT = Path(__file__).resolve().parents[1]


@pytest.fixture(scope="module")
def bench():
    spec = importlib.util.spec_from_file_location("calcservice_benchmark", ROOT / "benchmarks" / "run.py")
    module = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(module)
    return module


def test_every_format_brings_back_the_same_arrays_as_the_lab_loop(bench):
    from calcservice import create_app

    cat = bench.catalogue(12, seed=5)
    client = bench.FlaskClient(create_app({"TESTING": True}))
    arrow = bench.end_to_end(client, "arrow", cat)
    for fmt in bench.FORMATS:
        got = bench.end_to_end(client, fmt, cat)
        for o in bench.OUTPUTS:
            assert np.array_equal(got[o][0], arrow[o][0]) and np.array_equal(got[o][1], arrow[o][1]), (fmt, o)
    single = bench.singles(client, cat)
    assert bench.agreement(single, arrow) == 0.0
    lab = bench.lab_loop(cat)
    lab_arrays = {o: (np.array([r[o][0] for r in lab]), np.array([r[o][1] for r in lab])) for o in bench.OUTPUTS}
    # sb2's declared (analytic) Jacobian against uncertainties' automatic differentiation and the
    # hand-derived logarithmic derivatives: the same numbers but for rounding
    assert bench.agreement(lab_arrays, arrow) < 1e-12
    assert bench.agreement(bench.bare_numpy(cat), arrow) < 1e-12

