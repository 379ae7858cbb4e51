"""Tables and gzip through `calcservice serve` (gunicorn) on a free loopback port: what a WSGI test
client lets pass (a body that is not bytes, a header gunicorn handles itself) shows only here.
Bounded in time; the server is always stopped."""

from __future__ import annotations

import gzip
import http.client
import os
import socket
import subprocess
import sys
import time
from pathlib import Path

import numpy as np
import pytest

from calcservice import tables
from calcservice.registry import calculations

pytestmark = pytest.mark.server
ROOT = Path(__file__).resolve().parents[1]


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _post(port, path, data, headers):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        conn.request("POST", path, body=data, headers=headers)
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


@pytest.fixture(scope="module")
def port():
    port = _free_port()
    proc = subprocess.Popen([sys.executable, "-m", "calcservice", "serve", "--host", "127.0.0.1", "--port", str(port),
                             "--workers", "1"], env={**os.environ, "PYTHONPATH": str(ROOT)},
                            stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    try:
        deadline = time.monotonic() + 60
        while True:
            assert proc.poll() is None, "calcservice serve exited"
            assert time.monotonic() < deadline, "the server did not become ready in 60 s"
            try:
                conn = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
                conn.request("GET", "/v1/ready")
                if conn.getresponse().status == 200:
                    break
            except OSError:
                time.sleep(0.2)
        yield port
    finally:
        proc.terminate()
        try:
            proc.wait(timeout=30)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


def test_tables_and_gzip_through_gunicorn(port):
    ex = calculations()["sb2"].example
    n = 2000
    body = {"columns": {k: {"value": [v["value"] * (1 + 1e-4 * i) for i in range(n)], "sigma": [v["sigma"]] * n}
                        for k, v in ex.items()}}
    for fmt in tables.TABLE_TYPES:
        data = tables.encode_request(body, fmt)
        status, headers, answer = _post(port, "/v1/batch/sb2", data, {"Content-Type": fmt})
        assert status == 200, answer[:300]
        assert int(headers["Content-Length"]) == len(answer)
        got = tables.decode_answer(answer, fmt)
        zipped = _post(port, "/v1/batch/sb2", gzip.compress(data),
                       {"Content-Type": fmt, "Content-Encoding": "gzip", "Accept-Encoding": "gzip",
                        "Accept": tables.ARROW})
        assert zipped[0] == 200 and zipped[1]["Content-Encoding"] == "gzip"
        again = tables.decode_answer(gzip.decompress(zipped[2]), tables.ARROW)
        assert np.array_equal(again["columns"]["m1"]["value"], got["columns"]["m1"]["value"]), fmt
        assert len(got["columns"]["m1"]["value"]) == n and not got["errors"]
