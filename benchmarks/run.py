"""Catalogue-scale benchmarks, end to end as a lab script pays them: one command, one table of ratios.

    python benchmarks/run.py [--quick]

Every figure is per system and includes the caller's side: the caller builds its request body from
numpy arrays, sends it (through Flask's test client, and over loopback HTTP to ``calcservice serve``
under gunicorn, 2 workers, one kept-alive ``http.client`` connection), and decodes the answer back
into numpy arrays of every output's value and sigma.  On the double-lined spectroscopic binary
``sb2`` with 1-sigma errors on all five inputs, linear propagation:

* single   one request per system; the caller on the standard library's ``json``;
* rows     ``{"systems": [...]}``; the caller on the standard library's ``json``;
* columns  ``{"columns": {...}}`` as JSON; the caller on ``orjson``;
* arrow    the catalogue as an Apache Arrow IPC stream both ways; the caller on ``pyarrow``;
* ecsv     the catalogue as ECSV text both ways; the caller on astropy's table I/O;
* lab loop what a lab script does today: per system, astropy for the units and the constants,
           the ``uncertainties`` package for the propagation;
* numpy    the bare vectorised numpy expression: values and first-order sigmas from hand-derived
           logarithmic derivatives, on arrays already in memory (the floor).

Method: the machine is shared and its speed drifts by a third over seconds (the same rows call
took 60 to 100 us per system in consecutive calls), so the two sides of every target ratio are
timed back to back, in blocks A B B A: each block gives the ratio (A1 + A2) / (B1 + B2), which a
steady drift does not bias, and each ratio is the median over the rounds of its blocks.  Every timed
call follows an untimed call of the same subject, so that no subject pays for what the one before
it left in either process.  Each per-system figure is the median of all its timed calls; a ratio
without a target is the ratio of those medians.  The gunicorn request rates (one sb2 request
against ``GET /v1/health``, a bounded load generator of 4 threads) come from short alternating runs,
the order swapped every round.  A Monte Carlo request of 10^5 draws is set against the same draws
in bare numpy.  The benchmark checks that the lab loop, the bare numpy and every format agree with
the service (relative differences are printed): the figures compare the same numbers.  The
fictional systems are drawn from a seeded generator.  Either shape of the rows answer (a full
response per row, or lean rows with provenance once) is decoded.
"""

from __future__ import annotations

import argparse
import gc
import http.client
import io
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
import orjson
import pyarrow as pa
from astropy.table import Table

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))

from calcservice import create_app  # noqa: E402
from calcservice.constants import AU_KM, GM_SUN, SECONDS_PER_DAY  # noqa: E402

SIGMAS = {"period": 0.01, "k1": 0.3, "k2": 0.4, "eccentricity": 0.01, "inclination": 1.0}
UNITS = {"period": "d", "k1": "km/s", "k2": "km/s", "eccentricity": "", "inclination": "deg"}
OUTPUTS = ("mass_ratio", "m1_sin3i", "m2_sin3i", "a_sin_i", "a1_sin_i", "a2_sin_i", "m1", "m2", "total_mass",
           "semimajor_axis", "periastron_distance", "apastron_distance")
ARROW = "application/vnd.apache.arrow.stream"
ECSV = "text/x-ecsv"
JSON = "application/json"


def catalogue(n: int, seed: int = 2024) -> dict[str, np.ndarray]:
    """Fictional double-lined binaries, with a 1-sigma error per system and input."""
    rng = np.random.default_rng(seed)
    cat = {"period": rng.uniform(2.0, 400.0, n), "k1": rng.uniform(15.0, 90.0, n),
           "k2": rng.uniform(40.0, 140.0, n), "eccentricity": rng.uniform(0.0, 0.6, n),
           "inclination": rng.uniform(30.0, 88.0, n)}
    cat.update({f"{k}_sigma": np.full(n, s) for k, s in SIGMAS.items()})
    return cat


def head(cat: dict[str, np.ndarray], n: int) -> dict[str, np.ndarray]:
    return {k: v[:n] for k, v in cat.items()}


def timed(fn) -> float:
    t0 = time.perf_counter()
    fn()
    return time.perf_counter() - t0


def per_system(subject) -> float:
    """Per-system seconds of one timed call of ``subject`` = (function, systems), after an untimed
    call of the same: a script going through a catalogue calls the same thing again and again, so
    what another subject left behind (a heap grown by another format's tables, caches filled by
    astropy's ECSV reader, which slowed the next subject by up to a third) is not charged to it.  A
    function that returns a float has timed itself (a best of several short calls)."""
    fn, systems = subject
    fn()
    t0 = time.perf_counter()
    got = fn()
    return (got if isinstance(got, float) else time.perf_counter() - t0) / systems


def rounds(subjects: dict, pairs: list[tuple], alone: list, repeats: int) -> tuple[dict, dict]:
    """``repeats`` rounds; in each, every pair (a, b) of ``pairs`` is timed in a block a b b a and
    every subject of ``alone`` once.  Returns each subject's per-system seconds (every timed call)
    and each pair's per-round ratios (a1 + a2) / (b1 + b2)."""
    times: dict = {k: [] for k in subjects}
    ratios: dict = {pair: [] for pair in pairs}
    for _ in range(repeats):
        for a, b in pairs:
            block = [per_system(subjects[k]) for k in (a, b, b, a)]
            times[a] += [block[0], block[3]]
            times[b] += [block[1], block[2]]
            ratios[(a, b)].append((block[0] + block[3]) / (block[1] + block[2]))
        for k in alone:
            times[k].append(per_system(subjects[k]))
    return times, ratios


# ----------------------------------------------------------------------------- the caller's side, per format
# encode: arrays -> request bytes; decode: answer bytes -> {output: (values, sigmas)} as float arrays

def encode_single(cat) -> list[bytes]:
    n = len(cat["period"])
    columns = {k: cat[k].tolist() for k in cat}
    return [json.dumps({k: {"value": columns[k][i], "sigma": columns[k + "_sigma"][i]} for k in SIGMAS}).encode()
            for i in range(n)]


def decode_single(answers: list[bytes]) -> dict:
    parsed = [json.loads(a)["results"] for a in answers]
    return {o: (np.array([p[o]["value"] for p in parsed], dtype=float),
                np.array([p[o]["sigma"] for p in parsed], dtype=float)) for o in OUTPUTS}


def encode_rows(cat) -> bytes:
    n = len(cat["period"])
    columns = {k: cat[k].tolist() for k in cat}
    systems = [{k: {"value": columns[k][i], "sigma": columns[k + "_sigma"][i]} for k in SIGMAS} for i in range(n)]
    return json.dumps({"systems": systems}).encode()


def decode_rows(data: bytes) -> dict:
    rows = json.loads(data)["results"]
    nan = {"value": None, "sigma": None}
    results = [row["results"] if "results" in row else {} for row in rows]     # an error row has no results
    return {o: (np.array([r.get(o, nan)["value"] for r in results], dtype=float),
                np.array([r.get(o, nan)["sigma"] for r in results], dtype=float)) for o in OUTPUTS}


def encode_columns(cat) -> bytes:
    return orjson.dumps({"columns": {k: {"value": cat[k], "sigma": cat[k + "_sigma"]} for k in SIGMAS}},
                        option=orjson.OPT_SERIALIZE_NUMPY)


def decode_columns(data: bytes) -> dict:
    columns = orjson.loads(data)["columns"]
    return {o: (np.array(columns[o]["value"], dtype=float), np.array(columns[o]["sigma"], dtype=float))
            for o in OUTPUTS}


def encode_arrow(cat) -> bytes:
    fields = []
    for k in SIGMAS:
        meta = {"unit": UNITS[k]} if UNITS[k] else None
        fields += [pa.field(k, pa.float64(), metadata=meta), pa.field(k + "_sigma", pa.float64(), metadata=meta)]
    table = pa.Table.from_arrays([pa.array(cat[f.name]) for f in fields], schema=pa.schema(fields))
    sink = pa.BufferOutputStream()
    with pa.ipc.new_stream(sink, table.schema) as writer:
        writer.write_table(table)
    return sink.getvalue().to_pybytes()


def decode_arrow(data: bytes) -> dict:
    table = pa.ipc.open_stream(data).read_all()
    return {o: (table.column(o).to_numpy(), table.column(o + "_sigma").to_numpy()) for o in OUTPUTS}


def encode_ecsv(cat) -> bytes:
    table = Table({k: cat[k] for k in (name + suffix for name in SIGMAS for suffix in ("", "_sigma"))})
    for k in SIGMAS:
        if UNITS[k]:
            table[k].unit = table[k + "_sigma"].unit = UNITS[k]
    out = io.StringIO()
    table.write(out, format="ascii.ecsv")
    return out.getvalue().encode()


def decode_ecsv(data: bytes) -> dict:
    table = Table.read(data.decode(), format="ascii.ecsv")

    def floats(col):
        return np.ma.filled(np.ma.asarray(col, dtype=float), np.nan)

    return {o: (floats(table[o]), floats(table[o + "_sigma"])) for o in OUTPUTS}


FORMATS = {  # name: (encode, request type, answer type, decode)
    "rows": (encode_rows, JSON, JSON, decode_rows),
    "columns": (encode_columns, JSON, JSON, decode_columns),
    "arrow": (encode_arrow, ARROW, ARROW, decode_arrow),
    "ecsv": (encode_ecsv, ECSV, ECSV, decode_ecsv),
}


# ----------------------------------------------------------------------------- the two transports

class FlaskClient:
    """Flask's test client: the service without sockets."""

    def __init__(self, app):
        self.client = app.test_client()

    def post(self, path: str, data: bytes, content_type: str = JSON, accept: str = JSON) -> bytes:
        r = self.client.post(path, data=data, content_type=content_type, headers={"Accept": accept})
        if r.status_code != 200:
            raise RuntimeError(f"{path}: {r.status_code} {r.get_data(as_text=True)[:300]}")
        return r.get_data()


class Loopback:
    """``calcservice serve`` over loopback: one kept-alive connection, reopened when the server closes it."""

    def __init__(self, port: int):
        self.port = port
        self.conn = http.client.HTTPConnection("127.0.0.1", port, timeout=120)

    def post(self, path: str, data: bytes, content_type: str = JSON, accept: str = JSON) -> bytes:
        for attempt in (0, 1):
            try:
                self.conn.request("POST", path, body=data, headers={"Content-Type": content_type, "Accept": accept})
                r = self.conn.getresponse()
                body = r.read()
                break
            except (http.client.RemoteDisconnected, ConnectionResetError, BrokenPipeError):
                self.conn.close()
                self.conn = http.client.HTTPConnection("127.0.0.1", self.port, timeout=120)
                if attempt:
                    raise
        if r.status != 200:
            raise RuntimeError(f"{path}: {r.status} {body[:300]!r}")
        if r.getheader("Connection", "").lower() == "close":
            self.conn.close()
        return body


def end_to_end(transport, fmt: str, cat) -> dict:
    """Arrays in, request encoded, sent, answer decoded, arrays in hand."""
    encode, content_type, accept, decode = FORMATS[fmt]
    return decode(transport.post("/v1/batch/sb2", encode(cat), content_type, accept))


def singles(transport, cat) -> dict:
    return decode_single([transport.post("/v1/spectroscopic/sb2", body) for body in encode_single(cat)])


# ----------------------------------------------------------------------------- what a lab writes today

def lab_loop(cat: dict[str, np.ndarray]) -> list[dict]:
    """Per system: astropy units and constants, ``uncertainties`` for the errors (Hilditch 2001, ch. 2)."""
    from astropy import constants as const
    from astropy import units as u
    from uncertainties import ufloat, umath

    out = []
    for i in range(len(cat["period"])):
        period = ufloat(cat["period"][i], cat["period_sigma"][i])
        k1 = ufloat(cat["k1"][i], cat["k1_sigma"][i])
        k2 = ufloat(cat["k2"][i], cat["k2_sigma"][i])
        e = ufloat(cat["eccentricity"][i], cat["eccentricity_sigma"][i])
        inc = ufloat(cat["inclination"][i], cat["inclination_sigma"][i])
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

# (label, (a, b), op, target): a ratio of per-system costs a / b, on both transports where a side is
# served; the sides of a ratio with a target are timed back to back (:func:`rounds`)
RATIOS = [
    ("rows batch cheaper than single requests", ("single", "rows"), ">=", 20),
    ("rows batch cheaper than the lab loop", ("lab", "rows"), ">=", 10),
    ("columns JSON cheaper than the lab loop", ("lab", "columns"), ">=", 30),
    ("columns Arrow cheaper than the lab loop", ("lab", "arrow"), "", None),
    ("columns ECSV cheaper than the lab loop", ("lab", "ecsv"), "", None),
    ("columns Arrow / bare numpy (aim 5)", ("arrow", "numpy"), "<=", 10),
    ("columns JSON / bare numpy", ("columns", "numpy"), "", None),
    ("columns ECSV / bare numpy", ("ecsv", "numpy"), "", None),
    ("rows batch / bare numpy", ("rows", "numpy"), "", None),
]
TRANSPORTS = ("test client", "gunicorn")


def sides(pair: tuple[str, str], where: str) -> tuple[tuple[str, str], tuple[str, str]]:
    """The subjects' keys of a ratio on one transport (the lab loop and bare numpy have none)."""
    return tuple((k, "" if k in ("lab", "numpy") else where) for k in pair)


def agreement(got: dict, reference: dict) -> float:
    """Largest relative difference of values and sigmas between two {output: (values, sigmas)}."""
    return max(float(np.max(np.abs(got[o][j] / reference[o][j] - 1))) for o in reference for j in (0, 1))


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--quick", action="store_true", help="small sizes and few rounds (a smoke run, not figures)")
    args = ap.parse_args(argv)
    quick = args.quick
    repeats = 2 if quick else 5
    sizes = ({"single": 40, "rows": 300, "columns": 2000, "arrow": 10_000, "ecsv": 300, "lab": 40}
             if quick else
             {"single": 300, "rows": 2000, "columns": 20_000, "arrow": 100_000, "ecsv": 5000, "lab": 300})
    n_http, http_rounds = (200, 2) if quick else (500, 16)
    samples = 20_000 if quick else 100_000

    cat = catalogue(max(sizes.values()))
    parts = {k: head(cat, n) for k, n in sizes.items()}
    app = create_app()
    local = FlaskClient(app)
    port = free_port()
    proc = start_server(port)
    gc.freeze()         # as `calcservice serve` does once the app is loaded (calcservice/server.py)
    print(f"calcservice end-to-end benchmarks on sb2 ({'quick' if quick else 'full'} run, medians of {repeats} "
          f"rounds; systems per call: " + ", ".join(f"{k} {v}" for k, v in sizes.items()) + ")", flush=True)
    try:
        remote = Loopback(port)
        subjects = {}
        for where, transport in (("test client", local), ("gunicorn", remote)):
            subjects[("single", where)] = ((lambda t=transport: singles(t, parts["single"])), sizes["single"])
            for fmt in FORMATS:
                subjects[(fmt, where)] = ((lambda t=transport, f=fmt: end_to_end(t, f, parts[f])), sizes[fmt])
        subjects[("lab", "")] = ((lambda: lab_loop(parts["lab"])), sizes["lab"])
        subjects[("numpy", "")] = ((lambda: min(timed(lambda: bare_numpy(parts["arrow"])) for _ in range(3))),
                                   sizes["arrow"])
        pairs = [sides(pair, where) for _, pair, _, target in RATIOS if target is not None for where in TRANSPORTS]
        paired = {k for pair in pairs for k in pair}
        times, per_pair = rounds(subjects, pairs, [k for k in subjects if k not in paired], repeats)

        # the compared computations agree (else the ratios would compare different work)
        lab_cat = parts["lab"]
        reference = end_to_end(local, "arrow", lab_cat)
        lab = lab_loop(lab_cat)
        lab_arrays = {o: (np.array([r[o][0] for r in lab]), np.array([r[o][1] for r in lab])) for o in OUTPUTS}
        diffs = {"lab loop": agreement(lab_arrays, reference), "bare numpy": agreement(bare_numpy(lab_cat), reference)}
        for fmt in FORMATS:
            diffs[fmt] = agreement(end_to_end(remote, fmt, lab_cat), reference)
        diffs["single"] = agreement(singles(remote, lab_cat), reference)

        # live gunicorn: one sb2 request's rate against /v1/health's, in short alternating runs
        sb2_body = encode_single(head(cat, 1))[0]
        rates_health, rates_sb2 = [], []
        load(port, "GET", "/v1/health", None, 100, 4)                    # warm both workers
        load(port, "POST", "/v1/spectroscopic/sb2", sb2_body, 100, 4)
        for k in range(http_rounds):
            runs = [("health", "GET", "/v1/health", None), ("sb2", "POST", "/v1/spectroscopic/sb2", sb2_body)]
            for subject, method, path, data in (runs if k % 2 == 0 else runs[::-1]):
                rate = load(port, method, path, data, n_http, 4)
                (rates_health if subject == "health" else rates_sb2).append(rate)
    finally:
        stop_server(proc)
    r_health, r_sb2 = statistics.median(rates_health), statistics.median(rates_sb2)
    r_ratio = statistics.median(b / a for a, b in zip(rates_health, rates_sb2))

    # Monte Carlo: one request of 10^5 draws against the same in bare numpy
    system = {k: float(cat[k][0]) for k in SIGMAS}
    mc_body = json.dumps({k: {"value": system[k], "sigma": SIGMAS[k]} for k in SIGMAS} |
                         {"uncertainty": {"method": "monte_carlo", "samples": samples, "seed": 5}}).encode()
    mc_client = FlaskClient(create_app({"MAX_SAMPLES": samples}))
    mc_times, mc_pair = rounds({"service": (lambda: mc_client.post("/v1/spectroscopic/sb2", mc_body), 1),
                                "numpy": (lambda: bare_monte_carlo(system, samples), 1)}, [("service", "numpy")], [],
                               repeats)
    t_mc, t_mc_numpy = statistics.median(mc_times["service"]), statistics.median(mc_times["numpy"])
    mc_ratio = statistics.median(mc_pair[("service", "numpy")])
    mc = json.loads(mc_client.post("/v1/spectroscopic/sb2", mc_body))["results"]
    bare_mc = bare_monte_carlo(system, samples)
    diffs["Monte Carlo medians"] = max(abs(mc[k]["value"] / bare_mc[k][0][0] - 1) for k in bare_mc)

    def t(subject, where=""):
        return statistics.median(times[(subject, where)])

    def ratio(a, b) -> float:
        if (a, b) in per_pair:
            return statistics.median(per_pair[(a, b)])
        return statistics.median(times[a]) / statistics.median(times[b])

    us = 1e6
    print()
    print(f"{'per system, end to end (median)':44s} {'test client':>12s} {'gunicorn':>12s}")
    labels = {"single": "single requests (caller: json)", "rows": "rows batch, JSON (caller: json)",
              "columns": "columns batch, JSON (caller: orjson)", "arrow": "columns batch, Arrow (caller: pyarrow)",
              "ecsv": "columns batch, ECSV (caller: astropy)"}
    for subject, label in labels.items():
        print(f"  {label:42s} {t(subject, 'test client') * us:9.2f} us {t(subject, 'gunicorn') * us:9.2f} us")
    print(f"  {'lab loop (astropy + uncertainties)':42s} {t('lab') * us:9.2f} us")
    print(f"  {'bare numpy (values + first-order sigmas)':42s} {t('numpy') * us:9.2f} us")
    print(f"  {'Monte Carlo, 1 request of %d draws' % samples:42s} {t_mc * 1e3:9.2f} ms"
          f"   (bare numpy: {t_mc_numpy * 1e3:.2f} ms)")
    print(f"  gunicorn, 2 workers, 4 clients: /v1/health {r_health:8.0f} req/s, sb2 {r_sb2:8.0f} req/s")
    print()
    print("agreement with the service's Arrow answer (largest relative difference of values and sigmas): " +
          ", ".join(f"{k} {v:.1e}" for k, v in diffs.items()))
    print()
    print(f"{'ratio, per system':46s} {'test client':>12s} {'gunicorn':>10s}   {'target':>8s}   met")
    failed = 0

    def verdict(values, op, target):
        if target is None:
            return ""
        ok = all(v >= target if op == ">=" else v <= target for v in values)
        return f"{op} {target:<5g}   {'yes' if ok else 'NO'}"

    for label, pair, op, target in RATIOS:
        values = [ratio(*sides(pair, where)) for where in TRANSPORTS]
        text = verdict(values, op, target)
        failed += text.endswith("NO")
        print(f"{label:46s} {values[0]:12.2f} {values[1]:10.2f}   {text}")
    for label, value, op, target in (("sb2 request rate / health request rate (gunicorn)", r_ratio, ">=", 0.6),
                                     ("Monte Carlo 10^5 draws / bare numpy (test client)", mc_ratio, "<=", 3)):
        text = verdict([value], op, target)
        failed += text.endswith("NO")
        print(f"{label:46s} {value:23.2f}   {text}")
    return 1 if failed else 0


if __name__ == "__main__":
    sys.exit(main())
