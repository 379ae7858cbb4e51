"""The engine over chunked dask arrays on a dask.distributed local cluster matches the in-process answer."""

import math

import numpy as np
import pytest

da = pytest.importorskip("dask.array")
distributed = pytest.importorskip("dask.distributed")

from astropy import constants as const  # noqa: E402
from astropy import units as u  # noqa: E402

from calcservice.distributed import evaluate_dask  # noqa: E402
from calcservice.engine import Measured, Options, evaluate  # noqa: E402
from calcservice.registry import get  # noqa: E402


@pytest.fixture(scope="module")
def client():
    cluster = distributed.LocalCluster(n_workers=1, threads_per_worker=2, processes=False, dashboard_address=None)
    c = distributed.Client(cluster)
    yield c
    c.close()
    cluster.close()


def _catalogue(n=4000, seed=11):
    rng = np.random.default_rng(seed)
    cat = {"period": rng.uniform(2.0, 400.0, n), "k1": rng.uniform(15.0, 90.0, n),
           "k2": rng.uniform(40.0, 140.0, n), "eccentricity": rng.uniform(0.0, 0.6, n),
           "inclination": rng.uniform(30.0, 88.0, n)}
    cat["eccentricity"][7] = 1.2                          # not a bound orbit: fails in place
    return cat


SIGMAS = {"period": 0.01, "k1": 0.3, "k2": 0.4, "eccentricity": 0.01, "inclination": 1.0}


def test_linear_over_a_chunked_catalogue_matches_in_process(client):
    cat = _catalogue()
    values = {k: da.from_array(v, chunks=1000) for k, v in cat.items()}
    sigmas = {"period": SIGMAS["period"], "k1": da.full(4000, 0.3, chunks=700), "k2": 0.4,
              "eccentricity": 0.01, "inclination": (np.full(4000, 1.0), np.full(4000, 2.0))}
    out = evaluate_dask("sb2", values, sigmas)
    assert isinstance(out.outputs["m1"]["value"], da.Array) and out.outputs["m1"]["value"].numblocks == (4,)
    got, failed = out.compute()
    assert failed.tolist() == [i == 7 for i in range(4000)]

    quantities = {k: Measured.normal(v, SIGMAS[k]) for k, v in cat.items() if k != "inclination"}
    quantities["inclination"] = Measured(cat["inclination"], np.full(4000, 1.0), np.full(4000, 2.0))
    want = evaluate(get("sb2"), quantities)
    for name, summary in want.outputs.items():
        for key, arr in summary.items():
            expect = np.where(failed, np.nan, arr)
            np.testing.assert_allclose(got[name][key], expect, rtol=1e-12, atol=0, equal_nan=True,
                                       err_msg=f"{name}.{key}")
    # Hilditch (2001) eq. 2.52 with astropy constants: M1 sin^3 i = P (1-e^2)^{3/2} (K1+K2)^2 K2 / (2 pi G)
    p, k1, k2, e = cat["period"][0] * u.d, cat["k1"][0] * u.km / u.s, cat["k2"][0] * u.km / u.s, cat["eccentricity"][0]
    m1s = (p * (1 - e**2) ** 1.5 * (k1 + k2) ** 2 * k2 / (2 * math.pi * const.GM_sun)).decompose().value
    assert got["m1_sin3i"]["value"][0] == pytest.approx(m1s, rel=1e-9)


def test_monte_carlo_chunks_are_reproducible_and_agree_with_linear(client):
    cat = {k: v[:600] for k, v in _catalogue(600).items()}
    cat["eccentricity"][7] = 0.3
    values = {k: da.from_array(v, chunks=200) for k, v in cat.items()}
    a = evaluate_dask("sb1", {k: values[k] for k in ("period", "k1", "eccentricity")},
                      {"period": 0.01, "k1": 0.3, "eccentricity": 0.01}, method="monte_carlo", samples=400, seed=3)
    b = evaluate_dask("sb1", {k: values[k] for k in ("period", "k1", "eccentricity")},
                      {"period": 0.01, "k1": 0.3, "eccentricity": 0.01}, method="monte_carlo", samples=400, seed=3)
    (ga, fa), (gb, _) = a.compute(), b.compute()
    assert set(ga["mass_function"]) == {"value", "sigma", "low", "high"}
    np.testing.assert_array_equal(ga["mass_function"]["value"], gb["mass_function"]["value"])
    assert not fa.any()
    lin = evaluate(get("sb1"), {k: Measured.normal(cat[k], s) for k, s in
                                (("period", 0.01), ("k1", 0.3), ("eccentricity", 0.01))})
    # common practice: Monte Carlo sigma within a few 1/sqrt(2 samples) of the linear one for small errors
    ratio = ga["mass_function"]["sigma"] / lin.outputs["mass_function"]["sigma"]
    assert np.median(ratio) == pytest.approx(1.0, abs=0.05)


def test_monte_carlo_does_not_depend_on_the_chunking(client):
    # the in-process engine with the same seed is the reference: each system's draws are its own
    cat = {k: v[:300] for k, v in _catalogue(300).items()}
    sig = {"period": 0.01, "k1": 0.3, "eccentricity": 0.01}
    answers = []
    for chunks in (300, 100, 70):
        values = {k: da.from_array(cat[k], chunks=chunks) for k in sig}
        got, failed = evaluate_dask("sb1", values, sig, method="monte_carlo", samples=400, seed=3).compute()
        assert failed.nonzero()[0].tolist() == [7]             # e = 1.2, failed in place
        answers.append(got["mass_function"])
    ok = np.arange(300) != 7
    ref = evaluate(get("sb1"), {k: Measured.normal(cat[k][ok], s) for k, s in sig.items()},
                   options=Options(method="monte_carlo", samples=400, seed=3)).outputs["mass_function"]
    for got in answers:
        for key in ("value", "sigma", "low", "high"):
            np.testing.assert_array_equal(got[key][ok], ref[key])


def test_refuses_what_it_cannot_spread():
    with pytest.raises(ValueError, match="dask array"):
        evaluate_dask("sb2", {"period": 10.0, "k1": 3.0, "k2": 4.0, "eccentricity": 0.1})
    with pytest.raises(ValueError, match="no input"):
        evaluate_dask("sb2", {"period": da.ones(3, chunks=2), "colour": 1.0})
