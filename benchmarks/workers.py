"""Request rates of the default worker (calcservice.server.BufferingWorker) against gunicorn's
plain sync worker, for `/v1/health` and a single sb2 request, as ratios measured in one run.

Both servers run at once on loopback ports with the same settings but the worker class; the load
alternates between them in short runs, the order swapped every round, and each ratio is the
median of its per-round ratios, so that the shared machine's drifts weigh on both sides alike.

    python benchmarks/workers.py [--rounds 16] [--requests 400]
"""

from __future__ import annotations

import argparse
import json
import statistics
import subprocess
import sys
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))
sys.path.insert(0, str(Path(__file__).resolve().parent))

from run import free_port, load, stop_server  # noqa: E402

SB2 = json.dumps({"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
                  "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
                  "inclination": {"value": 71.0, "sigma": 2.0}}).encode()


def start(port: int, worker_class: str) -> subprocess.Popen:
    code = ("import sys; from calcservice.server import Server; "
            f"Server({{'bind': '127.0.0.1:{port}', 'worker_class': {worker_class!r}, 'loglevel': 'warning'}}).run()")
    proc = subprocess.Popen([sys.executable, "-c", code], cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    import http.client
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        try:
            conn = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
            conn.request("GET", "/v1/health")
            if conn.getresponse().status == 200:
                return proc
        except OSError:
            time.sleep(0.2)
    proc.terminate()
    raise RuntimeError(f"the {worker_class} server did not start")


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n\n")[0])
    ap.add_argument("--rounds", type=int, default=16)
    ap.add_argument("--requests", type=int, default=400)
    ap.add_argument("--threads", type=int, default=4)
    args = ap.parse_args(argv)
    ports = {"buffering": free_port(), "sync": free_port()}
    procs = {"buffering": start(ports["buffering"], "calcservice.server.BufferingWorker"),
             "sync": start(ports["sync"], "sync")}
    ratios: dict[str, list[float]] = {"health": [], "sb2": []}
    try:
        for r in range(args.rounds):
            for what, method, path, body in (("health", "GET", "/v1/health", None),
                                             ("sb2", "POST", "/v1/spectroscopic/sb2", SB2)):
                rates = {}
                for name in (("buffering", "sync") if r % 2 == 0 else ("sync", "buffering")):
                    rates[name] = load(ports[name], method, path, body, args.requests, args.threads)
                ratios[what].append(rates["buffering"] / rates["sync"])
    finally:
        for p in procs.values():
            stop_server(p)
    print(f"request rate, BufferingWorker / sync worker ({args.rounds} alternating rounds of {args.requests} "
          f"requests, {args.threads} client threads; target: within 10 %, i.e. >= 0.90)")
    for what, values in ratios.items():
        q = statistics.quantiles(values, n=4)
        print(f"  {what:7s} median {statistics.median(values):.2f}  (quartiles {q[0]:.2f} to {q[2]:.2f})")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
