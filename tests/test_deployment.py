"""The deployment shape: `calcservice serve` (gunicorn, 2 sync workers) on a free loopback port.


Liveness and readiness answer, both workers serve requests, a batch goes through the live server,
and TERM stops the master gracefully (checked when the module's server is stopped).  The Dockerfile
runs the same command behind its health check.  Everything is bounded in count and time, and the
server is always stopped.
"""

from __future__ import annotations

import http.client
import json
import os
import re
import signal
import socket
import subprocess
import sys
import threading
import time
import uuid
from pathlib import Path

import pytest

from calcservice import __version__
from calcservice.registry import calculations

pytestmark = pytest.mark.server
ROOT = Path(__file__).resolve().parents[1]
SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0}}


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def _request(port, method, path, body=None, headers=None, timeout=20.0):
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=timeout)
    try:
        data = None if body is None else json.dumps(body).encode()
        conn.request(method, path, body=data, headers={"Content-Type": "application/json", **(headers or {})})
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


@pytest.fixture(scope="module")
def served(tmp_path_factory):
    port = _free_port()
    log_path = tmp_path_factory.mktemp("deploy") / "server.log"
    log = open(log_path, "wb")
    script = Path(sys.executable).with_name("calcservice")
    head = [str(script)] if script.exists() else [sys.executable, "-m", "calcservice"]
    proc = subprocess.Popen(head + ["serve", "--host", "127.0.0.1", "--port", str(port), "--workers", "2"],
                            stdout=log, stderr=subprocess.STDOUT, env={**os.environ, "PYTHONUNBUFFERED": "1"})
    try:
        deadline = time.monotonic() + 60
        while True:
            assert proc.poll() is None, log_path.read_text(errors="replace")[-2000:]
            assert time.monotonic() < deadline, "the server did not become ready in 60 s"
            try:
                if _request(port, "GET", "/v1/ready", timeout=2)[0] == 200:
                    break
            except OSError:
                time.sleep(0.2)
        yield port, proc, log_path
        # TERM stops the master gracefully (in-flight requests finish, then exit 0)
        proc.send_signal(signal.SIGTERM)
        assert proc.wait(timeout=40) == 0
        with pytest.raises(OSError):
            _request(port, "GET", "/v1/health", timeout=2)
    finally:
        if proc.poll() is None:
            proc.kill()
            proc.wait(timeout=10)
        log.close()


def test_liveness_and_readiness(served):
    port, _, _ = served
    status, headers, body = _request(port, "GET", "/v1/health")
    assert status == 200 and json.loads(body) == {"status": "ok", "version": __version__}
    status, _, body = _request(port, "GET", "/v1/ready")
    ready = json.loads(body)
    assert status == 200 and ready["status"] == "ready" and ready["calculations"] == len(calculations())
    assert ready["spec_bytes"] > 1000


def test_two_workers_answer(served):
    port, _, log_path = served
    ids: list[str] = []
    failures: list = []

    def client():
        for _ in range(6):
            rid = uuid.uuid4().hex
            ids.append(rid)
            body = {**SB2, "uncertainty": {"method": "monte_carlo", "samples": 20000, "seed": 1}}
            try:
                if _request(port, "POST", "/v1/spectroscopic/sb2", body, {"X-Request-ID": rid})[0] != 200:
                    failures.append(rid)
            except OSError as e:
                failures.append(repr(e))

    threads = [threading.Thread(target=client) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(timeout=120)
    assert not failures
    # the access log line of each request carries the worker's pid and the request id
    deadline = time.monotonic() + 10
    while True:
        text = log_path.read_text(errors="replace")
        pids = {m.group(1) for rid in ids for m in re.finditer(rf" (\d+) calcservice\.access {rid} ", text)}
        if len(pids) >= 2 or time.monotonic() > deadline:
            break
        time.sleep(0.2)
    assert len(pids) == 2, f"requests were answered by {pids or 'no logged'} worker(s)"


def test_a_batch_through_the_live_server(served):
    port, _, _ = served
    status, _, body = _request(port, "POST", "/v1/batch/sb2", {"systems": [SB2, {**SB2, "eccentricity": 1.5}]})
    got = json.loads(body)
    assert status == 200 and got["results"][0]["results"]["m1"]["unit"] == "solMass"
    assert got["results"][1]["error"]["status"] == 422
    cols = {"period": [41.6, 12.0], "k1": {"value": [38.2, 20.0], "sigma": 0.4}, "k2": 51.7, "eccentricity": 0.3}
    status, _, body = _request(port, "POST", "/v1/batch/sb2", {"columns": cols})
    got = json.loads(body)
    assert status == 200 and len(got["columns"]["m1_sin3i"]["value"]) == 2 and got["errors"] == []


def test_the_image_runs_the_same_command_behind_its_health_check():
    docker = (ROOT / "Dockerfile").read_text()
    assert re.search(r'CMD \["calcservice", "serve", "--host", "0\.0\.0\.0", "--port", "8000"', docker)
    assert "HEALTHCHECK" in docker and "/v1/health" in docker
    assert re.search(r"^USER (?!root)\S+", docker, re.M), "the image does not run as root"
    assert "EXPOSE 8000" in docker
    doc = (ROOT / "DEPLOYMENT.md").read_text()
    for needle in ("/v1/health", "/v1/ready", "CALCSERVICE_MAX_BATCH_ROWS", "CALCSERVICE_MAX_BATCH_DRAWS",
                   "evaluate_dask", "workers"):
        assert needle in doc, needle


def test_the_master_imports_what_a_first_table_or_figure_request_would():
    # astropy's table I/O, pyarrow and matplotlib cost a worker ~0.9 s on its first such request when it
    # imports them itself; the master imports them before it forks, and a fresh interpreter shows it
    code = ("import json, sys\nfrom calcservice.server import PRELOADED, Server\n"
            "before = [m for m in PRELOADED if m in sys.modules]\n"
            "Server({'bind': '127.0.0.1:0', 'loglevel': 'warning'}).load()\n"
            "print(json.dumps([before, [m for m in PRELOADED if m not in sys.modules]]))")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, timeout=120)
    assert done.returncode == 0, done.stderr[-2000:]
    before, missing = json.loads(done.stdout.strip().splitlines()[-1])
    assert "matplotlib.figure" not in before and "pyarrow.compute" not in before      # the app alone leaves them
    assert missing == []
