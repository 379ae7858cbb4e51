"""Sixth round of independent reference computations: output and input units against astropy's own
conversion, batch answers (rows, columns, Arrow, CSV, ECSV) against the single request, Monte Carlo and
posterior samples against numpy applied to the documented draw model, and the linear output correlation and
variance budget against the `uncertainties` package.  Each check value comes from a computation written here
(astropy units and constants, numpy, scipy, `uncertainties`), never from calcservice's physics."""

from __future__ import annotations

import copy
import io
import json
import math

import numpy as np
import pyarrow as pa
import pytest
from astropy import constants as const
from astropy import units as u
from astropy.table import Table
from scipy.special import ndtr
from uncertainties import correlated_values, correlation_matrix, ufloat, umath

from calcservice import create_app
from calcservice.core import Problem, compute, compute_batch
from calcservice.registry import calculations

from .engine_helpers import split_normal

GM_SUN = const.GM_sun.si.value      # IAU 2015 Resolution B3 nominal GM_sun, m^3 s^-2 (astropy.constants)
AU = const.au.si.value              # IAU 2012 Resolution B2, m (astropy.constants)
G = const.G.si.value                # CODATA G as astropy gives it, m^3 kg^-1 s^-2
DAY = 86400.0                       # s (SI day)
ARROW, CSV, ECSV = "application/vnd.apache.arrow.stream", "text/csv", "text/x-ecsv"


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def _sb2_reference(period, k1, k2, eccentricity, inclination):
    """Hilditch (2001), An Introduction to Close Binary Stars, ch. 2: M1,2 sin^3 i = (1 - e^2)^{3/2} (K1 + K2)^2
    K2,1 P / (2 pi G), a sin i = (1 - e^2)^{1/2} (K1 + K2) P / (2 pi); P in d, K in km/s, masses in solMass (with
    GM_sun), lengths in au.  Works on floats, numpy arrays and `uncertainties` numbers alike."""
    f = (1 - eccentricity ** 2) ** 1.5 * (k1 + k2) ** 2 * (period * DAY) * 1e9 / (2 * math.pi * GM_SUN)
    a_sin_i = (1 - eccentricity ** 2) ** 0.5 * (k1 + k2) * 1e3 * period * DAY / (2 * math.pi) / AU
    sin = umath.sin if hasattr(inclination, "std_dev") else np.sin
    sin_i = sin(inclination * math.pi / 180)
    return {"mass_ratio": k1 / k2, "m1_sin3i": f * k2, "m2_sin3i": f * k1, "a_sin_i": a_sin_i,
            "m1": f * k2 / sin_i ** 3, "m2": f * k1 / sin_i ** 3, "semimajor_axis": a_sin_i / sin_i}


# --------------------------------------------------------------------------- batch against the single request
def _flat(results: dict) -> dict:
    out = dict(results)
    out.update(out.pop("series", {}) or {})
    return out


def test_a_sigma_alone_is_the_sigma_in_a_batch_with_eight_or_more_uncertain_inputs(client):
    # The colliding-wind example has 9 uncertain inputs.  numpy's sum over the inputs' axis added them pairwise
    # in blocks of 8 where that axis was contiguous (one system) and one by one where it was not (a batch), so the
    # same system's linear sigma differed in its last bits between a single request and a batch (stagnation
    # distance 2: 0.35050557838514423 alone, 0.3505055783851443 in a batch).  The reference is the single request.
    calc = calculations()["collision"]
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    for k, body in enumerate(systems):
        body["mdot1"]["value"] *= 1 + 0.002 * k
    singles = [compute("collision", {**body, "budget": True, "covariance": True}) for body in systems]
    rows = compute_batch("collision", {"systems": systems, "budget": True, "covariance": True})
    columns = compute_batch("collision", {"columns": {
        name: {"value": [b[name]["value"] for b in systems], "sigma": [b[name]["sigma"] for b in systems]}
        for name in systems[0]}, "budget": True, "covariance": True})
    for i, single in enumerate(singles):
        assert rows["results"][i]["results"] == single["results"]
        assert rows["results"][i]["correlation"] == single["correlation"]
        for name, entry in single["results"].items():
            assert columns["columns"][name]["value"][i] == entry["value"], name
            assert columns["columns"][name]["sigma"][i] == entry["sigma"], name
            assert {t: v[i] for t, v in columns["budget"][name].items()} == entry["budget"], name
        assert columns["correlation"]["matrix"][i] == single["correlation"]["matrix"]


@pytest.mark.parametrize("name", ["sb1", "geometry", "shell-distance"])
def test_the_linear_output_correlation_alone_is_the_one_in_a_batch(name):
    # einsum summed J C J^T in an order that depended on the number of systems: the sb1 example's
    # correlation of m2_min and a1 was 0.3387867587454081 alone and 0.33878675874540803 in a batch of three.
    calc = calculations()[name]
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    for k, body in enumerate(systems):
        for v in body.values():
            if isinstance(v, dict) and "value" in v:
                v["value"] *= 1 + 0.002 * k
    rows = compute_batch(name, {"systems": systems, "covariance": True})
    for i, body in enumerate(systems):
        single = compute(name, {**body, "covariance": True})
        assert rows["results"][i]["correlation"] == single["correlation"], i


def _table_answer(data: bytes, media_type: str) -> dict[str, list]:
    """An answer table read by pyarrow or astropy (outside the project): column name -> values, None where empty."""
    if media_type == ARROW:
        t = pa.ipc.open_stream(data).read_all()
        return {name: t.column(name).to_pylist() for name in t.column_names}
    t = Table.read(io.BytesIO(data), format="ascii.ecsv" if media_type == ECSV else "ascii.csv")
    return {name.split("[")[0]: [None if np.ma.is_masked(v) else v for v in t[name]] for name in t.colnames}


def test_every_table_answer_with_units_budget_and_monte_carlo_carries_the_single_requests_numbers(client):
    # The sb2 example as three systems (one with asymmetric errors), with correlated K1, K2, output units, Monte
    # Carlo and a budget: each system's row of the Arrow, CSV and ECSV answers holds exactly the single request's
    # median, sigma, low and high, in the unit asked for.
    calc = calculations()["sb2"]
    options = {"units": {"m1": "kg", "m2": "Mjup", "semimajor_axis": "Rsun", "a_sin_i": "km"},
               "correlations": [{"between": ["k1", "k2"], "rho": 0.3}], "budget": True,
               "uncertainty": {"method": "monte_carlo", "samples": 300, "seed": 5}}
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    systems[1]["k1"]["value"] = 40.0
    systems[2]["inclination"] = {"value": 71.0, "sigma_minus": 3.0, "sigma_plus": 1.0}
    singles = [compute("sb2", {**body, **options}) for body in systems]
    columns = {name: {key: [body[name].get(key, body[name].get("sigma")) for body in systems]
                      for key in (("sigma_minus", "sigma_plus") if name == "inclination" else ("sigma",))}
               for name in systems[0]}
    for name in columns:
        columns[name]["value"] = [body[name]["value"] for body in systems]
    for media_type in (ARROW, CSV, ECSV):
        r = client.post("/v1/batch/sb2", json={"columns": columns, **options}, headers={"Accept": media_type})
        assert r.status_code == 200, r.data[:300]
        table = _table_answer(r.data, media_type)
        for i, single in enumerate(singles):
            for name, entry in single["results"].items():
                for key, suffix in (("value", ""), ("sigma", "_sigma"), ("low", "_low"), ("high", "_high")):
                    assert float(table[name + suffix][i]) == entry[key], (media_type, i, name, key)
            assert str(table["warnings"][i] or "").split(";") == [w["code"] for w in single["warnings"]] or \
                (not table["warnings"][i] and not single["warnings"])


def test_a_table_request_in_other_units_gives_the_single_requests_numbers(client):
    # period in yr with its sigmas in h, K1 in m/s with its sigma in km/s, the inclination in rad: each way in
    # (ECSV, Arrow with field metadata, CSV with NAME[unit] headers) gives the numbers of the single request in
    # the default units, converted by astropy (within the rounding of each conversion: a few ulp).
    p, k1, k2, e, inc = [41.6, 12.5, 300.0], [38.2, 20.1, 15.0], [51.7, 33.3, 20.0], [0.31, 0.0, 0.5], [71.0, 88.0, 45.0]
    ps_minus, ps_plus = [0.01, 0.02, 0.03], [0.02, 0.04, 0.06]
    options = {"units": {"m1": "kg", "semimajor_axis": "Rsun"}, "correlations": [{"between": ["k1", "k2"], "rho": 0.3}]}
    singles = [compute("sb2", {"period": {"value": p[j], "sigma_minus": ps_minus[j], "sigma_plus": ps_plus[j]},
                               "k1": {"value": k1[j], "sigma": 0.4}, "k2": {"value": k2[j], "sigma": 0.6},
                               "eccentricity": {"value": e[j], "sigma": 0.01},
                               "inclination": {"value": inc[j], "sigma": 2.0}, **options}) for j in range(3)]
    t = Table()
    t["period"] = (np.array(p) * u.d).to(u.yr)
    t["period_sigma_minus"] = (np.array(ps_minus) * u.d).to(u.h)
    t["period_sigma_plus"] = (np.array(ps_plus) * u.d).to(u.h)
    t["k1"] = (np.array(k1) * u.km / u.s).to(u.m / u.s)
    t["k1_sigma"] = [0.4] * 3 * u.km / u.s
    t["k2"], t["k2_sigma"] = k2 * u.km / u.s, [0.6] * 3 * u.km / u.s
    t["eccentricity"], t["eccentricity_sigma"] = e, [0.01] * 3
    t["inclination"], t["inclination_sigma"] = (inc * u.deg).to(u.rad), ([2.0] * 3 * u.deg).to(u.rad)
    text = io.StringIO()
    t.write(text, format="ascii.ecsv")
    fields = [pa.field(name, pa.float64(), metadata={"unit": t[name].unit.to_string()} if t[name].unit else None)
              for name in t.colnames]
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, pa.schema(fields)) as writer:
        writer.write_batch(pa.record_batch([pa.array(np.asarray(t[n], dtype=float)) for n in t.colnames],
                                           schema=pa.schema(fields)))
    header = [f"{n}[{t[n].unit.to_string()}]" if t[n].unit else n for n in t.colnames]
    csv = "\n".join([",".join(header)] + [",".join(repr(float(np.asarray(t[n])[j])) for n in t.colnames)
                                         for j in range(3)]) + "\n"
    for data, media_type in ((text.getvalue(), ECSV), (sink.getvalue().to_pybytes(), ARROW), (csv, CSV)):
        r = client.post("/v1/batch/sb2", data=data, content_type=media_type,
                        query_string={"options": json.dumps(options)}, headers={"Accept": "application/json"})
        assert r.status_code == 200, r.get_json()
        got = r.get_json()["columns"]
        for j, single in enumerate(singles):
            for name, entry in single["results"].items():
                assert got[name]["unit"] == entry["unit"]
                for key in ("value", "sigma"):
                    assert got[name][key][j] == pytest.approx(entry[key], rel=2e-15), (media_type, j, name, key)


# --------------------------------------------------------------------------- output units
ALTERNATIVES = {"solMass": ("kg", "Mjup", "Mearth"), "au": ("km", "pc", "Rsun"), "solRad": ("km", "au", "m"),
                "pc": ("kpc", "lyr", "m"), "d": ("h", "yr", "s"), "yr": ("d", "s", "Myr"), "deg": ("rad", "arcsec", "mas"),
                "mas": ("arcsec", "rad", "uas"), "km/s": ("m/s", "au/yr", "km/h"),
                "solMass/yr": ("kg/s", "g/s", "Mearth/yr"), "K": ("MK", "kK", "mK"), "1/yr": ("1/s", "1/d", "1/Myr"),
                "": ("%", "1", "")}


@pytest.mark.parametrize("name", sorted(calculations()))
def test_every_output_in_other_units_is_astropys_conversion_of_the_default_answer(name):
    # Values, sigmas and the Monte Carlo median, low and high of every scalar and series output of the
    # calculation's example, asked in a unit of its kind, against astropy's Quantity.to of the default answer.
    calc = calculations()[name]
    for method in (None, {"method": "monte_carlo", "samples": 200, "seed": 3}):
        body = copy.deepcopy(calc.example)
        if method:
            body["uncertainty"] = method
        base = _flat(compute(name, body)["results"])
        for k in range(3):
            units = {o.name: ALTERNATIVES[o.unit][k] for o in calc.outputs
                     if o.name in base and o.unit in ALTERNATIVES and not o.logarithmic}
            got = _flat(compute(name, {**body, "units": units})["results"])
            for output, unit in units.items():
                assert got[output]["unit"] == unit
                for key, default in base[output].items():
                    if key == "unit" or default is None:
                        continue
                    want = (np.asarray(default, dtype=float) * u.Unit(base[output]["unit"])).to_value(unit)
                    np.testing.assert_allclose(got[output][key], want, rtol=1e-15, atol=0,
                                               err_msg=f"{name} {output}.{key} in {unit}")


def test_masses_and_lengths_in_si_and_planetary_units_by_hand():
    # sb1's mass function f(M) = P K1^3 (1 - e^2)^{3/2} / (2 pi G) (Hilditch 2001, ch. 2) with CODATA G gives kg
    # directly; in Mjup and Mearth through the IAU 2015 Resolution B3 nominal GM_jup and GM_earth over the same G
    # (astropy.constants); a1 sin i = P K1 (1 - e^2)^{1/2} / (2 pi) in km.
    period, k1, e = 41.6, 23.4, 0.31
    body = {"period": period, "k1": {"value": k1, "sigma": 0.3}, "eccentricity": e,
            "units": {"mass_function": "kg", "a1_sin_i": "km"}}
    r = compute("sb1", body)["results"]
    f_kg = period * DAY * (k1 * 1e3) ** 3 * (1 - e * e) ** 1.5 / (2 * math.pi * G)
    assert r["mass_function"]["value"] == pytest.approx(f_kg, rel=1e-15)
    assert r["mass_function"]["sigma"] == pytest.approx(3 * f_kg * 0.3 / k1, rel=1e-14)   # d ln f / d ln K1 = 3
    assert r["a1_sin_i"]["value"] == pytest.approx(period * DAY * k1 * (1 - e * e) ** 0.5 / (2 * math.pi), rel=1e-15)
    for unit, gm in (("Mjup", const.GM_jup.si.value), ("Mearth", const.GM_earth.si.value)):
        got = compute("sb1", {**body, "units": {"mass_function": unit}})["results"]["mass_function"]["value"]
        assert got == pytest.approx(f_kg * G / gm, rel=1e-15), unit


# --------------------------------------------------------------------------- input units
def test_inputs_in_other_units_give_the_default_units_answer_to_a_few_ulp():
    # The same sb2 system (declared Jacobian: sigmas are exact too) with the period in yr and h, K in m/s, the
    # inclination in rad, asymmetric errors converted with their value: astropy's conversion of each input.
    def q(value, minus, plus, unit, to):
        k = u.Unit(unit).to(to)
        return {"value": value * k, "sigma_minus": minus * k, "sigma_plus": plus * k, "unit": to}

    base_inputs = {"period": (41.6, 0.02, 0.05, "d"), "k1": (38.2, 0.4, 0.9, "km/s"), "k2": (51.7, 0.6, 0.6, "km/s"),
                   "inclination": (71.0, 2.0, 1.0, "deg")}
    base = {n: {"value": v, "sigma_minus": a, "sigma_plus": b} for n, (v, a, b, _) in base_inputs.items()}
    base["eccentricity"] = {"value": 0.31, "sigma": 0.01}
    for method in (None, {"method": "monte_carlo", "samples": 300, "seed": 8}):
        extra = {"uncertainty": method} if method else {}
        want = compute("sb2", {**base, **extra})["results"]
        for period_unit, speed_unit in (("yr", "m/s"), ("h", "cm/s"), ("s", "au/yr")):
            body = {**base, **extra,
                    "period": q(*base_inputs["period"], period_unit),
                    "k1": q(*base_inputs["k1"], speed_unit), "k2": q(*base_inputs["k2"], speed_unit),
                    "inclination": q(*base_inputs["inclination"], "rad")}
            got = compute("sb2", body)["results"]
            for name, entry in want.items():
                for key in entry:
                    if key != "unit":
                        assert got[name][key] == pytest.approx(entry[key], rel=2e-15), (period_unit, name, key)


@pytest.mark.parametrize("given, unit", [("parallax", "arcsec"), ("parallax", "uas"), ("distance", "kpc"),
                                         ("distance", "lyr"), ("distance", "pc")])
def test_a_visual_orbits_distance_in_any_unit_is_the_parallax_answer(given, unit):
    # The visual example's parallax of 48.3 +- 0.4 mas, or the distance 1000/48.3 pc with its linear sigma, in
    # another unit (astropy's conversion; the parsec of IAU 2015 Resolution B2).  Values to a few ulp; linear
    # sigmas by central differences to their rounding (about 1e-10).
    calc = calculations()["visual"]
    body = copy.deepcopy(calc.example)
    want = compute("visual", body)["results"]
    plx, sigma = body.pop("parallax")["value"], 0.4
    if given == "parallax":
        k = u.mas.to(unit)
        body["parallax"] = {"value": plx * k, "sigma": sigma * k, "unit": unit}
    else:
        distance = (1000.0 / plx * u.pc).to_value(unit)
        body["distance"] = {"value": distance, "sigma": distance * sigma / plx, "unit": unit}
    got = compute("visual", body)["results"]
    for name in ("semimajor_axis", "total_mass", "m1", "m2"):
        assert got[name]["value"] == pytest.approx(want[name]["value"], rel=4e-15), name
        assert got[name]["sigma"] == pytest.approx(want[name]["sigma"], rel=1e-9), name


# --------------------------------------------------------------------------- Monte Carlo and samples
def _summary(y):
    """Median, standard deviation (ddof 1) and the central 68.27 % interval by numpy (linear interpolation)."""
    return (np.median(y), np.std(y, ddof=1), np.percentile(y, 100 * ndtr(-1.0)), np.percentile(y, 100 * ndtr(1.0)))


def test_monte_carlo_is_numpy_on_the_documented_draw_model():
    # The documented model (README, engine docstring): seeded numpy Generator, standard normal variates in the
    # order of the inputs, correlated by the Cholesky factor of the requested correlation matrix (a Gaussian
    # copula), each input normal or split normal (asymmetric errors), summarised by the median, the standard
    # deviation and the central 68.27 % interval.  Drawn here with numpy and put through Hilditch's formulas.
    draws, seed = 3000, 17
    given = {"period": (41.6, 0.02, 0.02), "k1": (38.2, 0.3, 0.6), "k2": (51.7, 0.6, 0.6),
             "eccentricity": (0.31, 0.01, 0.01), "inclination": (71.0, 1.0, 2.5)}
    rho = {("k1", "k2"): 0.4, ("period", "eccentricity"): -0.3}
    names = list(given)
    r = np.eye(len(names))
    for (a, b), v in rho.items():
        r[names.index(a), names.index(b)] = r[names.index(b), names.index(a)] = v
    z = np.random.default_rng(seed).standard_normal((draws, len(names))) @ np.linalg.cholesky(r).T
    x = {n: (given[n][0] + given[n][1] * z[:, j] if given[n][1] == given[n][2]
             else split_normal(*given[n], z[:, j])) for j, n in enumerate(names)}
    ref = _sb2_reference(x["period"], x["k1"], x["k2"], x["eccentricity"], x["inclination"])
    body = {n: {"value": v, "sigma_minus": a, "sigma_plus": b} for n, (v, a, b) in given.items()}
    body.update({"correlations": [{"between": list(k), "rho": v} for k, v in rho.items()], "covariance": True,
                 "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
    answer = compute("sb2", body)
    assert answer["uncertainty"]["rejected_fraction"] == 0.0
    for name, y in ref.items():
        e = answer["results"][name]
        np.testing.assert_allclose([e["value"], e["sigma"], e["low"], e["high"]], _summary(y), rtol=4e-15, err_msg=name)
    outputs = answer["correlation"]["outputs"]
    k = [outputs.index(n) for n in ref]
    np.testing.assert_allclose(np.array(answer["correlation"]["matrix"])[np.ix_(k, k)],
                               np.corrcoef([ref[n] for n in ref]), atol=1e-14)


def test_isotropic_inclinations_are_cos_i_uniform_after_the_normal_variates():
    # "isotropic": cos i uniform on [0, 1) (random orientations), drawn after the normal variates; masses
    # 1/sin^3 i have no finite variance (sigma null with sigma_undefined), their median and interval are numpy's.
    draws, seed = 2000, 23
    answer = compute("sb2", {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": {"value": 51.7, "sigma": 0.6},
                             "eccentricity": {"value": 0.31, "sigma": 0.01}, "inclination": "isotropic",
                             "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
    rng = np.random.default_rng(seed)
    z = rng.standard_normal((draws, 3))
    inclination = np.degrees(np.arccos(rng.uniform(0.0, 1.0, draws)))
    ref = _sb2_reference(41.6, 38.2 + 0.4 * z[:, 0], 51.7 + 0.6 * z[:, 1], 0.31 + 0.01 * z[:, 2], inclination)
    for name in ("m1", "m2", "semimajor_axis", "m1_sin3i"):
        e, (median, sd, low, high) = answer["results"][name], _summary(ref[name])
        np.testing.assert_allclose([e["value"], e["low"], e["high"]], [median, low, high], rtol=4e-15, err_msg=name)
        if name == "m1_sin3i":
            assert e["sigma"] == pytest.approx(sd, rel=4e-15)
    assert {w["code"] for w in answer["warnings"]} == {"sigma_undefined"}


def test_posterior_samples_in_other_units_are_numpy_on_the_paired_draws_within_the_domain():
    # The user's own draws (paired index by index), given in yr, m/s and rad; eccentricity draws below 0 leave
    # the domain and are dropped with their whole index, as numpy does here by a mask.
    rng = np.random.default_rng(5)
    n = 250
    p, k1, k2 = 41.6 + 0.02 * rng.standard_normal(n), 38.2 + 0.4 * rng.standard_normal(n), 51.7 + 0.6 * rng.standard_normal(n)
    e, inc = 0.02 + 0.02 * rng.standard_normal(n), 71 + 2 * rng.standard_normal(n)
    answer = compute("sb2", {"period": {"samples": list(p / 365.25), "unit": "yr"},
                             "k1": {"samples": list(k1 * 1000), "unit": "m/s"}, "k2": {"samples": list(k2)},
                             "eccentricity": {"samples": list(e)},
                             "inclination": {"samples": list(np.radians(inc)), "unit": "rad"}})
    kept = e >= 0
    assert answer["uncertainty"]["rejected_fraction"] == pytest.approx(1 - kept.mean(), abs=1e-15)
    ref = _sb2_reference(p, k1, k2, e, inc)
    for name, y in ref.items():
        got = answer["results"][name]
        np.testing.assert_allclose([got["value"], got["sigma"], got["low"], got["high"]], _summary(y[kept]),
                                   rtol=2e-14, err_msg=name)


def test_monte_carlo_budget_is_the_variance_lost_by_holding_each_input():
    # The documented Monte Carlo budget: share_i = (var - var with input i held at its value) / var, over the same
    # draws (common random numbers), here by numpy on the same standard variates.
    draws, seed = 1000, 29
    given = {"period": (41.6, 0.02), "k1": (38.2, 0.4), "k2": (51.7, 0.6), "eccentricity": (0.31, 0.01),
             "inclination": (71.0, 2.0)}
    answer = compute("sb2", {**{n: {"value": v, "sigma": s} for n, (v, s) in given.items()}, "budget": True,
                             "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
    z = np.random.default_rng(seed).standard_normal((draws, len(given)))
    x = {n: v + s * z[:, j] for j, (n, (v, s)) in enumerate(given.items())}
    full = _sb2_reference(*x.values())
    for held, (value, _) in given.items():
        part = _sb2_reference(*{**x, held: np.full(draws, value)}.values())
        for name, y in full.items():
            want = 1 - np.var(part[name], ddof=1) / np.var(y, ddof=1)
            assert answer["results"][name]["budget"][held] == pytest.approx(want, abs=1e-13), (name, held)


# --------------------------------------------------------------------------- linear correlation and budget
def _budget(f, independent: dict, sigmas: dict, r: np.ndarray, rho: dict) -> dict:
    """The linear variance budget of f from `uncertainties`' partial derivatives of independent inputs: each input's
    (df/dx sigma)^2 / var and each correlated pair's 2 rho (df/dx_i sigma_i)(df/dx_j sigma_j) / var, var = t R t."""
    names = list(independent)
    t = np.array([f.derivatives.get(independent[n], 0.0) * sigmas[n] for n in names])
    var = t @ r @ t
    out = {n: t[k] ** 2 / var for k, n in enumerate(names)}
    out.update({f"{a},{b}": 2 * v * t[names.index(a)] * t[names.index(b)] / var for (a, b), v in rho.items()})
    return out


def _correlation(names, rho):
    r = np.eye(len(names))
    for (a, b), v in rho.items():
        r[names.index(a), names.index(b)] = r[names.index(b), names.index(a)] = v
    return r


def _against_uncertainties(name, given, rho, model, correlation, sigma, budget, value=None):
    """A calculation's output correlation matrix, sigmas and budget (and values, to ``value``) against `uncertainties`
    through ``model`` on the inputs ``given`` {input: (value, sigma)} with the correlations ``rho``."""
    r = _correlation(list(given), rho)
    sigmas = {n: sd for n, (_, sd) in given.items()}
    s = np.array(list(sigmas.values()))
    ref = model(*correlated_values([v for v, _ in given.values()], r * np.outer(s, s)))
    independent = {n: ufloat(v, sd) for n, (v, sd) in given.items()}
    ref_independent = model(*independent.values())
    answer = compute(name, {**{n: {"value": v, "sigma": sd} for n, (v, sd) in given.items()},
                            "correlations": [{"between": list(k), "rho": v} for k, v in rho.items()],
                            "covariance": True, "budget": True})
    outputs = answer["correlation"]["outputs"]
    k = [outputs.index(n) for n in ref]
    np.testing.assert_allclose(np.array(answer["correlation"]["matrix"])[np.ix_(k, k)],
                               correlation_matrix(list(ref.values())), atol=correlation)
    for out, f in ref.items():
        got = answer["results"][out]
        if value is not None:
            assert got["value"] == pytest.approx(f.nominal_value, rel=value), out
        assert got["sigma"] == pytest.approx(f.std_dev, rel=sigma), out
        want = _budget(ref_independent[out], independent, sigmas, r, rho)
        assert set(got["budget"]) == set(want)
        for term, share in want.items():
            assert got["budget"][term] == pytest.approx(share, abs=budget), (out, term)


def test_sb2_output_correlation_and_budget_against_uncertainties():
    # sb2 has a declared Jacobian: the output correlation matrix J C J^T and the budget match `uncertainties`'
    # correlated_values through Hilditch's formulas to rounding.
    given = {"period": (41.6, 0.02), "k1": (38.2, 0.4), "k2": (51.7, 0.6), "eccentricity": (0.31, 0.01),
             "inclination": (71.0, 2.0)}
    rho = {("period", "eccentricity"): -0.2, ("k1", "k2"): 0.3, ("k2", "inclination"): 0.1}
    _against_uncertainties("sb2", given, rho, _sb2_reference, correlation=2e-15, sigma=4e-15, budget=4e-15)


def test_visual_output_correlation_and_budget_against_uncertainties():
    # The visual orbit (a declared Jacobian, as sb2): a = alpha / parallax (au; the parsec, IAU 2015 Resolution B2),
    # M = 4 pi^2 a^3 / (GM_sun P^2) (Kepler's third law with IAU 2015 B3 GM_sun and the IAU 2012 au), M1 = M / (1 + q),
    # M2 = M q / (1 + q); correlated period and angular size, parallax and q.
    given = {"period": (7305.0, 12.0), "angular_semimajor_axis": (412.0, 3.0), "parallax": (48.3, 0.4),
             "mass_ratio": (0.72, 0.03)}
    rho = {("period", "angular_semimajor_axis"): 0.5, ("parallax", "mass_ratio"): -0.25}

    def visual(period, alpha, parallax, q):
        a = alpha / parallax
        total = 4 * math.pi ** 2 * (a * AU) ** 3 / (GM_SUN * (period * DAY) ** 2)
        return {"semimajor_axis": a, "total_mass": total, "m1": total / (1 + q), "m2": total * q / (1 + q)}

    _against_uncertainties("visual", given, rho, visual, correlation=2e-15, sigma=4e-15, budget=4e-15, value=1e-14)


def test_a_systems_warning_codes_in_a_table_come_in_its_single_requests_order(client):
    # Three systems of the orbital-parallax example with an output unit the inputs do not determine (unit_unused),
    # the third with asymmetric errors (asymmetric_linearised, which the engine gives first): the third system's
    # cell read 'unit_unused;asymmetric_linearised', the order of the first group's warnings, where its single
    # request says asymmetric_linearised, then unit_unused.
    calc = calculations()["orbital-parallax"]
    options = {"units": {"photocentre_semimajor_axis_au": "km"}}
    systems = [copy.deepcopy(calc.example) for _ in range(3)]
    systems[2]["k1"] = {"value": 24.6, "sigma_minus": 0.2, "sigma_plus": 0.4}
    codes = [[w["code"] for w in compute("orbital-parallax", {**body, **options})["warnings"]] for body in systems]
    assert codes[2] == ["asymmetric_linearised", "unit_unused"]        # the reference order, as the engine gives it
    columns = {name: {"value": [b[name]["value"] for b in systems],
                      "sigma_minus": [b[name].get("sigma_minus", b[name].get("sigma")) for b in systems],
                      "sigma_plus": [b[name].get("sigma_plus", b[name].get("sigma")) for b in systems]}
               for name in systems[0]}
    for media_type in (ARROW, CSV, ECSV):
        r = client.post("/v1/batch/orbital-parallax", json={"columns": columns, **options},
                        headers={"Accept": media_type})
        assert r.status_code == 200
        cells = _table_answer(r.data, media_type)["warnings"]
        assert [str(cell).split(";") for cell in cells] == codes, media_type


def test_a_jeans_mode_mass_loss_rate_in_grams_per_second_by_hand():
    # Jeans-mode (fast isotropic wind) mass loss: Pdot / P = 2 Mdot / (M1 + M2) (Huang 1963, from memory), so
    # Mdot = (M1 + M2) Pdot / (2 P); in g/s and the relative rate in 1/s by astropy (IAU 2015 B3 solar mass with
    # CODATA G, Julian year).
    period, pdot, m1, m2 = 6.3, 0.21, 27.0, 11.0
    r = compute("mass-loss-period-change", {"period": period, "period_derivative": {"value": pdot, "sigma": 0.04},
                                            "m1": m1, "m2": m2, "mode": "jeans",
                                            "units": {"mass_loss_rate": "g/s", "relative_period_derivative": "1/s"}})
    relative = pdot / (period * DAY) / u.yr                                   # (s/yr) / s
    mdot = ((m1 + m2) / 2 * relative * u.solMass).to_value(u.g / u.s)
    assert r["results"]["mass_loss_rate"]["value"] == pytest.approx(mdot, rel=1e-15)
    # the linear sigma by central differences, to their rounding (~1e-10)
    assert r["results"]["mass_loss_rate"]["sigma"] == pytest.approx(mdot * 0.04 / pdot, rel=1e-9)
    assert r["results"]["relative_period_derivative"]["value"] == pytest.approx(relative.to_value(1 / u.s), rel=1e-15)


@pytest.mark.parametrize("shape", ["systems", "columns"])
def test_an_output_unit_one_systems_answer_cannot_hold_fails_that_system_in_place(shape):
    # Asked in '1e300 solMass', a mass function of 4.7e-2 solMass is 4.7e-302 of the unit (a normal double) and one
    # of ~1e-11 solMass would be ~1e-311, below the smallest normal double (2.2e-308, IEEE 754 binary64): alone, that
    # system is a 422 naming units.mass_function and the other is answered.  In a batch the whole request was the
    # 422; each system must get its single request's answer, the second an error in place.
    units = {"units": {"mass_function": "1e300 solMass"}}
    systems = [{"period": 41.6, "k1": {"value": 23.4, "sigma": 0.3}, "eccentricity": 0.31},
               {"period": 1.0, "k1": {"value": 1e-4, "sigma": 1e-5}, "eccentricity": 0.31}]
    first = compute("sb1", {**systems[0], **units})["results"]["mass_function"]
    f_solar = 41.6 * DAY * 23.4e3 ** 3 * (1 - 0.31 ** 2) ** 1.5 / (2 * math.pi * GM_SUN)    # Hilditch (2001), ch. 2
    assert first["value"] == pytest.approx(f_solar * 1e-300, rel=1e-14)
    with pytest.raises(Problem) as refused:
        compute("sb1", {**systems[1], **units})
    assert refused.value.status == 422 and list(refused.value.errors) == ["units.mass_function"]
    if shape == "systems":
        answer = compute_batch("sb1", {"systems": systems, **units})["results"]
        assert answer[0]["results"]["mass_function"] == first
        assert answer[1]["error"] == refused.value.as_dict()
    else:
        answer = compute_batch("sb1", {"columns": {"period": [41.6, 1.0],
                                                   "k1": {"value": [23.4, 1e-4], "sigma": [0.3, 1e-5]},
                                                   "eccentricity": [0.31, 0.31]}, **units})
        assert answer["columns"]["mass_function"]["value"] == [first["value"], None]
        assert answer["columns"]["mass_function"]["sigma"] == [first["sigma"], None]
        assert answer["errors"] == [{"index": 1, **refused.value.as_dict()}]


def test_an_apastron_is_half_a_cycle_exactly():
    # nu = pi is E = pi and M = pi for every eccentricity (Kepler's equation M = E - e sin E): apastron n falls
    # n + 1/2 cycles after t_periastron, T0 + P (n + 1/2) (Murray & Dermott 1999, eq. 2.52).  The cycle came out as
    # 1.4999999999999998 (cos(pi/2) = 6e-17 in E), and the date's sigma a few ulp off the hand formula
    # sigma^2 = sigma_T0^2 + (c sigma_P)^2 + 2 c rho sigma_T0 sigma_P (c = 1.5 cycles; 50-digit mpmath:
    # 1.651665825765006254947...).
    from calcservice.registry import get
    body = copy.deepcopy(get("ephemeris").example)            # P = 2037.4 +- 1.2, T0 +- 0.8, rho(P, T0) = -0.4
    events = compute("ephemeris", body)["results"]["events"]["apastron"]
    assert [e["cycle"] for e in events] == [1.5, 2.5]
    assert events[0]["value"] == 2458712.3 + 1.5 * 2037.4
    import mpmath as mp
    with mp.workdps(50):
        c, st, sp, rho = mp.mpf(1.5), mp.mpf("0.8"), mp.mpf("1.2"), mp.mpf("-0.4")
        sigma = float(mp.sqrt(st ** 2 + (c * sp) ** 2 + 2 * c * rho * st * sp))
    assert abs(events[0]["sigma"] - sigma) <= np.spacing(sigma)          # within one rounding


def test_the_rejected_fraction_is_the_count_of_draws_left_out_over_the_draws():
    # Draws of e = 0.01 +- 0.02 below 0 leave the domain 0 <= e < 1 and are rejected: the fraction is their count
    # over the 500 draws (numpy on the documented draws: the second standard normal of each draw, k1's first).
    # 1 - kept / 500 gave 0.28800000000000003 and 0.06599999999999995 for 144 and 33 of 500.
    draws, seed = 500, 4
    for e in (0.01, 0.03):
        answer = compute("sb2", {"period": 41.6, "k1": {"value": 38.2, "sigma": 0.4}, "k2": 51.7,
                                 "eccentricity": {"value": e, "sigma": 0.02},
                                 "uncertainty": {"method": "monte_carlo", "samples": draws, "seed": seed}})
        z = np.random.default_rng(seed).standard_normal((draws, 2))
        left_out = int(np.count_nonzero(e + 0.02 * z[:, 1] < 0))
        assert answer["uncertainty"]["rejected_fraction"] == left_out / draws, (e, left_out)


@pytest.mark.parametrize("seed", [316, 882])
def test_the_median_and_interval_of_draws_are_numpys_to_the_last_bit(seed):
    # A visual orbit's parallax given as the user's own draws comes back as its own output: its median and
    # 68.27 % interval are np.median and np.percentile (linear, Hyndman & Fan 1996 method 7) of the draws.  numpy
    # interpolates as b - (b - a)(1 - t) from t = 1/2 on; a + (b - a) t put the 15.87th percentile of these
    # lognormal draws one rounding off numpy's.
    draws = np.exp(2.0 * np.random.default_rng(seed).standard_normal(200))
    answer = compute("visual", {"period": 7305.0, "angular_semimajor_axis": 412.0, "parallax": {"samples": list(draws)}})
    got = answer["results"]["parallax"]
    assert got["value"] == np.median(draws)
    assert got["low"] == np.percentile(draws, 100 * ndtr(-1.0))
    assert got["high"] == np.percentile(draws, 100 * ndtr(1.0))
