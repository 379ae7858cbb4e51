"""Catalogue-scale benchmarks: one command, one table of ratios measured in this run.

    python benchmarks/run.py [--quick]

What is timed (per system unless it says otherwise; every subject once per round, the rounds one
after another, each time the median over the rounds and each ratio the median of its per-round
ratios, so that a slow spell of the shared machine weighs on both sides of a ratio alike), all
on the double-lined spectroscopic binary ``sb2`` with 1-sigma errors on all five inputs (linear
propagation unless it says Monte Carlo):

* single   one request per system through Flask's test client (body encoded beforehand);
* rows     ``POST /v1/batch/sb2`` with ``{"systems": [...]}`` through the test client;
* columns  ``POST /v1/batch/sb2`` with ``{"columns": {...}}`` through the test client (JSON in and
           out included), and the same without HTTP and JSON (``compute_batch`` on the parsed body);
* lab loop what a lab script does today: per system, astropy for the units and the constants,
           the ``uncertainties`` package for the propagation;
* numpy    the bare vectorised numpy expression: the values and their first-order sigmas from
           hand-derived logarithmic derivatives, on arrays already in memory (the limit);
* gunicorn ``calcservice serve`` on a free loopback port with 2 workers, a bounded load generator
           (a few threads, one http.client connection each, a fixed number of requests): requests
           per second of one sb2 request against ``GET /v1/health``, in 16 short alternating runs
           of each (the order swapped every round), the ratio the median of the 16 per-round ratios;
* Monte Carlo one sb2 request with 10^5 draws (test client) against the same draws, formulas and
           summaries (median, standard deviation, 68.27 % interval) in bare numpy.

The benchmark also checks that the lab loop and the bare numpy agree with the service (relative
differences are printed): the figures compare the same numbers.  The fictional systems are drawn
from a seeded generator.
"""

from __future__ import annotations

import argparse
import gc
import http.client
import json
import math
import os
import socket
import statistics
import subprocess
import sys
import threading
import time
from pathlib import Path

import numpy as np

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from calcservice import create_app  # noqa: E402
from calcservice.core import compute_batch  # noqa: E402
from calcservice.api.edge import dumps  # noqa: E402
from calcservice.constants import AU_KM, GM_SUN, SECONDS_PER_DAY  # noqa: E402

SIGMAS = {"period": 0.01, "k1": 0.3, "k2": 0.4, "eccentricity": 0.01, "inclination": 1.0}


def catalogue(n: int, seed: int = 2024) -> dict[str, np.ndarray]:
    """Fictional double-lined binaries."""
    rng = np.random.default_rng(seed)
    return {"period": rng.uniform(2.0, 400.0, n), "k1": rng.uniform(15.0, 90.0, n),
            "k2": rng.uniform(40.0, 140.0, n), "eccentricity": rng.uniform(0.0, 0.6, n),
            "inclination": rng.uniform(30.0, 88.0, n)}


def row_bodies(cat: dict[str, np.ndarray]) -> list[dict]:
    n = len(cat["period"])
    return [{name: {"value": float(cat[name][i]), "sigma": SIGMAS[name]} for name in SIGMAS} for i in range(n)]


def columns_body(cat: dict[str, np.ndarray]) -> dict:
    return {"columns": {name: {"value": cat[name].tolist(), "sigma": SIGMAS[name]} for name in SIGMAS}}


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def rounds(subjects: dict, repeats: int) -> dict[str, list[float]]:
    """Per-system seconds of each subject in each of ``repeats`` rounds (after one warm-up call
    each).  A subject is (function, systems); a function that returns a float has timed itself
    (a best of several short calls), otherwise the call is timed."""
    for fn, _ in subjects.values():
        fn()
    out: dict[str, list[float]] = {k: [] for k in subjects}
    for _ in range(repeats):
        for k, (fn, systems) in subjects.items():
            t0 = time.perf_counter()
            got = fn()
            elapsed = got if isinstance(got, float) else time.perf_counter() - t0
            out[k].append(elapsed / systems)
    return out


# ----------------------------------------------------------------------------- what a lab writes today

def lab_loop(cat: dict[str, np.ndarray]) -> list[dict]:
    """Per system: astropy units and constants, ``uncertainties`` for the errors (Hilditch 2001, ch. 2)."""
    from astropy import constants as const
    from astropy import units as u
    from uncertainties import ufloat, umath

    out = []
    for i in range(len(cat["period"])):
        period = ufloat(cat["period"][i], SIGMAS["period"])
        k1 = ufloat(cat["k1"][i], SIGMAS["k1"])
        k2 = ufloat(cat["k2"][i], SIGMAS["k2"])
        e = ufloat(cat["eccentricity"][i], SIGMAS["eccentricity"])
        inc = ufloat(cat["inclination"][i], SIGMAS["inclination"])
        # the unit bookkeeping a script does for each system
        # f(M) / M_sun = P K^3 / (2 pi G M_sun): in units of M_sun
        mass_unit = (u.d * (u.km / u.s) ** 3 / (2 * math.pi * const.GM_sun)).to(u.dimensionless_unscaled).value
        length_unit = (u.km / u.s * u.d / (2 * math.pi)).to(u.au).value
        root = umath.sqrt(1 - e**2)
        m1_sin3i = mass_unit * root**3 * (k1 + k2) ** 2 * k2 * period
        m2_sin3i = mass_unit * root**3 * (k1 + k2) ** 2 * k1 * period
        a1 = length_unit * root * k1 * period
        a2 = length_unit * root * k2 * period
        sin_i = umath.sin(umath.radians(inc))
        a = (a1 + a2) / sin_i
        row = {"mass_ratio": k1 / k2, "m1_sin3i": m1_sin3i, "m2_sin3i": m2_sin3i, "a_sin_i": a1 + a2,
               "a1_sin_i": a1, "a2_sin_i": a2, "m1": m1_sin3i / sin_i**3, "m2": m2_sin3i / sin_i**3,
               "total_mass": (m1_sin3i + m2_sin3i) / sin_i**3, "semimajor_axis": a,
               "periastron_distance": a * (1 - e), "apastron_distance": a * (1 + e)}
        out.append({k: (v.nominal_value, v.std_dev) for k, v in row.items()})
    return out


# ----------------------------------------------------------------------------- the bare numpy expression

MASS = SECONDS_PER_DAY * 1e9 / (2 * math.pi * GM_SUN)       # solMass per (d (km/s)^3)
LENGTH = SECONDS_PER_DAY / (2 * math.pi) / AU_KM            # au per (d km/s)


def bare_numpy(cat: dict[str, np.ndarray]) -> dict[str, tuple[np.ndarray, np.ndarray]]:
    """Values and first-order sigmas: sigma_f = |f| sqrt(sum_x (d ln f / d x sigma_x)^2)."""
    p, k1, k2, e, inc = (cat[k] for k in ("period", "k1", "k2", "eccentricity", "inclination"))
    sp, s1, s2, se = SIGMAS["period"], SIGMAS["k1"], SIGMAS["k2"], SIGMAS["eccentricity"]
    si = math.radians(SIGMAS["inclination"])
    ell = 1.0 - e * e
    root = np.sqrt(ell)
    ks = k1 + k2
    rp, rs = sp / p, 2.0 * s1 / ks            # relative terms used again and again
    de15 = 3.0 * e / ell * se                 # d ln (1 - e^2)^{3/2} / de * sigma_e
    de05 = e / ell * se
    m1s = MASS * ell * root * ks * ks * k2 * p
    m2s = MASS * ell * root * ks * ks * k1 * p
    a1 = LENGTH * root * k1 * p
    a2 = LENGTH * root * k2 * p
    asi = a1 + a2
    rad = np.radians(inc)
    sin_i = np.sin(rad)
    cot = np.cos(rad) / sin_i * si
    sin3 = sin_i**3
    a = asi / sin_i

    def sig(f, *terms):
        return f, np.abs(f) * np.sqrt(sum(t * t for t in terms))

    rel_m1s = (rp, rs, (2.0 / ks + 1.0 / k2) * s2, de15)
    rel_m2s = (rp, (2.0 / ks + 1.0 / k1) * s1, 2.0 * s2 / ks, de15)
    rel_a = (rp, s1 / ks, s2 / ks, de05)
    return {
        "mass_ratio": sig(k1 / k2, s1 / k1, s2 / k2),
        "m1_sin3i": sig(m1s, *rel_m1s), "m2_sin3i": sig(m2s, *rel_m2s),
        "a_sin_i": sig(asi, *rel_a), "a1_sin_i": sig(a1, rp, s1 / k1, de05), "a2_sin_i": sig(a2, rp, s2 / k2, de05),
        "m1": sig(m1s / sin3, *rel_m1s, 3.0 * cot), "m2": sig(m2s / sin3, *rel_m2s, 3.0 * cot),
        "total_mass": sig((m1s + m2s) / sin3, rp, 3.0 * s1 / ks, 3.0 * s2 / ks, de15, 3.0 * cot),
        "semimajor_axis": sig(a, *rel_a, cot),
        "periastron_distance": sig(a * (1 - e), rp, s1 / ks, s2 / ks, (e / ell + 1.0 / (1.0 - e)) * se, cot),
        "apastron_distance": sig(a * (1 + e), rp, s1 / ks, s2 / ks, (e / ell - 1.0 / (1.0 + e)) * se, cot),
    }


def bare_monte_carlo(system: dict[str, float], samples: int, seed: int = 5) -> dict[str, tuple]:
    """The same draws in bare numpy: normal inputs, the formulas, median, sd and 68.27 % interval."""
    rng = np.random.default_rng(seed)
    draws = {k: system[k] + SIGMAS[k] * rng.standard_normal(samples) for k in SIGMAS}
    p, k1, k2, e, inc = (draws[k] for k in ("period", "k1", "k2", "eccentricity", "inclination"))
    ok = (p > 0) & (k1 > 0) & (k2 > 0) & (e >= 0) & (e < 1) & (inc > 0) & (inc < 180)
    p, k1, k2, e, inc = p[ok], k1[ok], k2[ok], e[ok], inc[ok]
    root = np.sqrt(1.0 - e * e)
    m1s = MASS * root**3 * (k1 + k2) ** 2 * k2 * p
    m2s = MASS * root**3 * (k1 + k2) ** 2 * k1 * p
    a1, a2 = LENGTH * root * k1 * p, LENGTH * root * k2 * p
    sin_i = np.sin(np.radians(inc))
    a = (a1 + a2) / sin_i
    ys = {"mass_ratio": k1 / k2, "m1_sin3i": m1s, "m2_sin3i": m2s, "a_sin_i": a1 + a2, "a1_sin_i": a1,
          "a2_sin_i": a2, "m1": m1s / sin_i**3, "m2": m2s / sin_i**3, "total_mass": (m1s + m2s) / sin_i**3,
          "semimajor_axis": a, "periastron_distance": a * (1 - e), "apastron_distance": a * (1 + e)}
    return {k: (np.percentile(y, [50.0, 15.865525393145708, 84.13447460685429]), y.std(ddof=1)) for k, y in ys.items()}


# ----------------------------------------------------------------------------- live gunicorn

def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def start_server(port: int, workers: int = 2) -> subprocess.Popen:
    env = {**os.environ, "PYTHONPATH": str(ROOT)}
    proc = subprocess.Popen([sys.executable, "-m", "calcservice", "serve", "--host", "127.0.0.1", "--port", str(port),
                             "--workers", str(workers)], env=env, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        if proc.poll() is not None:
            raise RuntimeError("calcservice serve exited early")
        try:
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
            conn.request("GET", "/v1/ready")
            if conn.getresponse().status == 200:
                conn.close()
                return proc
        except OSError:
            time.sleep(0.2)
    proc.terminate()
    raise RuntimeError("calcservice serve did not become ready within 60 s")


def stop_server(proc: subprocess.Popen) -> None:
    proc.terminate()                                  # gunicorn: graceful stop on TERM
    try:
        proc.wait(timeout=30)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait()


def load(port: int, method: str, path: str, body: bytes | None, requests: int, threads: int) -> float:
    """Requests per second: ``requests`` in all, spread over ``threads`` clients, each with one
    http.client connection (kept open where the server allows, reopened where it closes it)."""
    per_thread = [requests // threads + (1 if k < requests % threads else 0) for k in range(threads)]
    failures = []
    headers = {"Content-Type": "application/json"} if body is not None else {}

    def client(count: int):
        conn = http.client.HTTPConnection("127.0.0.1", port, timeout=30)
        try:
            for _ in range(count):
                conn.request(method, path, body=body, headers=headers)
                r = conn.getresponse()
                r.read()
                if r.status != 200:
                    failures.append(r.status)
        except OSError as e:
            failures.append(repr(e))
        finally:
            conn.close()

    pool = [threading.Thread(target=client, args=(c,)) for c in per_thread]
    t0 = time.perf_counter()
    for t in pool:
        t.start()
    for t in pool:
        t.join(timeout=300)
    elapsed = time.perf_counter() - t0
    if failures:
        raise RuntimeError(f"{len(failures)} failed requests, e.g. {failures[0]}")
    return requests / elapsed


# ----------------------------------------------------------------------------- the run

def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="smaller sizes and fewer repeats (a smoke run)")
    args = ap.parse_args(argv)
    quick = args.quick
    repeats = 3 if quick else 5
    n_single, n_rows, n_cols, n_lab = (100, 500, 20_000, 100) if quick else (300, 2000, 100_000, 300)
    n_http, http_rounds = (300, 4) if quick else (500, 16)

    app = create_app()
    client = app.test_client()
    cat = catalogue(n_cols)
    cols_payload = dumps(columns_body(cat))
    sub = {k: v[:n_rows] for k, v in cat.items()}
    rows_payload = dumps({"systems": row_bodies(sub)})
    singles = [dumps(b) for b in row_bodies({k: v[:n_single] for k, v in cat.items()})]

    gc.freeze()         # as `calcservice serve` does once the app is loaded (calcservice/server.py)

    def post(path, data):
        r = client.post(path, data=data, content_type="application/json")
        assert r.status_code == 200, r.get_data(as_text=True)[:300]
        return r

    print(f"calcservice benchmarks on sb2 ({'quick' if quick else 'full'} run, medians of {repeats} rounds)",
          flush=True)
    parsed_cols = columns_body(cat)
    lab_cat = {k: v[:n_lab] for k, v in cat.items()}
    # every subject is timed once per round, the rounds one after another: each ratio is the median
    # of its per-round ratios, so a slow spell of this shared machine hits both sides of it alike
    subjects = {
        "single": (lambda: [post("/v1/spectroscopic/sb2", b) for b in singles], n_single),
        "rows": (lambda: post("/v1/batch/sb2", rows_payload), n_rows),
        "cols": (lambda: post("/v1/batch/sb2", cols_payload), n_cols),
        "core": (lambda: compute_batch("sb2", parsed_cols, for_json=True), n_cols),
        "lab": (lambda: lab_loop(lab_cat), n_lab),
        "numpy": (lambda: min(timed(lambda: bare_numpy(cat)) for _ in range(3)), n_cols),
    }
    per_round = rounds(subjects, repeats)
    t_single, t_rows, t_cols, t_core, t_lab, t_numpy = (statistics.median(per_round[k]) for k in subjects)

    def ratio(a: str, b: str) -> float:
        return statistics.median(x / y for x, y in zip(per_round[a], per_round[b]))

    # the compared computations agree (else the ratios would compare different work)
    service = compute_batch("sb2", columns_body(lab_cat))["columns"]
    lab = lab_loop(lab_cat)
    bare = bare_numpy(lab_cat)
    diff_lab = max(abs(service[k][key][i] / lab[i][k][j] - 1) for i in range(n_lab) for k in lab[i]
                   for j, key in enumerate(("value", "sigma")))
    diff_numpy = max(float(np.max(np.abs(np.array(service[k][key]) / bare[k][j] - 1)))
                     for k in bare for j, key in enumerate(("value", "sigma")))

    # Monte Carlo: one request of 10^5 draws against the same in bare numpy
    samples = 20_000 if quick else 100_000
    system = {k: float(v[0]) for k, v in cat.items()}
    mc_body = dumps({**row_bodies({k: v[:1] for k, v in cat.items()})[0],
                     "uncertainty": {"method": "monte_carlo", "samples": samples, "seed": 5}})
    mc_app = create_app({"MAX_SAMPLES": samples})
    mc_client = mc_app.test_client()

    def mc_post():
        r = mc_client.post("/v1/spectroscopic/sb2", data=mc_body, content_type="application/json")
        assert r.status_code == 200, r.get_data(as_text=True)[:300]
        return r

    mc_rounds = rounds({"service": (mc_post, 1), "numpy": (lambda: bare_monte_carlo(system, samples), 1)}, repeats)
    t_mc, t_mc_numpy = statistics.median(mc_rounds["service"]), statistics.median(mc_rounds["numpy"])
    mc_ratio = statistics.median(a / b for a, b in zip(mc_rounds["service"], mc_rounds["numpy"]))
    mc = json.loads(mc_post().data)["results"]
    bare_mc = bare_monte_carlo(system, samples)
    diff_mc = max(abs(mc[k]["value"] / bare_mc[k][0][0] - 1) for k in bare_mc)

    # live gunicorn on loopback
    port = free_port()
    proc = start_server(port)
    try:
        sb2_body = singles[0]
        rates_health, rates_sb2 = [], []
        load(port, "GET", "/v1/health", None, 100, 4)                    # warm both workers
        load(port, "POST", "/v1/spectroscopic/sb2", sb2_body, 100, 4)
        # health and sb2 in turn, in short runs (the machine's speed drifts within seconds), the
        # order swapped every round so that a drift favours neither side
        for k in range(http_rounds):
            runs = [("health", "GET", "/v1/health", None), ("sb2", "POST", "/v1/spectroscopic/sb2", sb2_body)]
            for subject, method, path, data in (runs if k % 2 == 0 else runs[::-1]):
                rate = load(port, method, path, data, n_http, 4)
                (rates_health if subject == "health" else rates_sb2).append(rate)
    finally:
        stop_server(proc)
    r_health, r_sb2 = statistics.median(rates_health), statistics.median(rates_sb2)
    r_ratio = statistics.median(b / a for a, b in zip(rates_health, rates_sb2))

    us = 1e6
    print()
    print("per-system cost (median)")
    for label, t in (("single request (test client)", t_single), ("row batch (test client)", t_rows),
                     ("columnar batch (test client, JSON in and out)", t_cols),
                     ("columnar batch, service core (no HTTP, no JSON)", t_core),
                     ("lab loop (astropy + uncertainties, per system)", t_lab),
                     ("bare numpy (values + first-order sigmas)", t_numpy)):
        print(f"  {label:52s} {t * us:12.2f} us")
    print(f"  {'Monte Carlo 1 request, %d draws' % samples:52s} {t_mc * 1e3:12.2f} ms")
    print(f"  {'bare numpy, same draws and summaries':52s} {t_mc_numpy * 1e3:12.2f} ms")
    print(f"  gunicorn, 2 workers, 4 clients: /v1/health {r_health:8.0f} req/s, sb2 {r_sb2:8.0f} req/s")
    print()
    print(f"agreement: service vs lab loop {diff_lab:.1e}, vs bare numpy {diff_numpy:.1e} (largest relative "
          f"difference of values and sigmas); Monte Carlo medians vs bare numpy {diff_mc:.1e}")
    print()
    rows = [
        ("row batch cheaper than single requests", ratio("single", "rows"), ">=", 20),
        ("row batch cheaper than the lab loop", ratio("lab", "rows"), ">=", 10),
        ("columnar batch cheaper than the lab loop", ratio("lab", "cols"), ">=", 100),
        ("columnar batch cost / bare numpy", ratio("cols", "numpy"), "<=", 20),
        ("  (service core without HTTP/JSON) / bare numpy", ratio("core", "numpy"), "", None),
        ("single request cheaper than the lab loop", ratio("lab", "single"), "", None),
        ("sb2 request rate / health request rate", r_ratio, ">=", 0.6),
        ("Monte Carlo 10^5 draws / bare numpy", mc_ratio, "<=", 3),
    ]
    print(f"{'ratio':52s} {'measured':>10s}   {'target':>8s}   met")
    failed = 0
    for label, value, op, target in rows:
        if target is None:
            print(f"{label:52s} {value:10.2f}")
            continue
        ok = value >= target if op == ">=" else value <= target
        failed += not ok
        print(f"{label:52s} {value:10.2f}   {op} {target:<5g}   {'yes' if ok else 'NO'}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
