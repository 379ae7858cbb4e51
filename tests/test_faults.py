"""Faults under load: gunicorn started as the README starts it, on a free loopback port.

* SIGKILL one worker under a bounded load from a few client threads: the master replaces it,
  and only the requests that worker had in flight may fail (at most one per client thread;
  a sync worker holds one request at a time).
* SIGHUP the master (graceful reload) under load: every request is answered.
* The same seeded request gives bit-identical results from both workers and after the reload.
* A body whose Content-Length is over the limit is refused without being sent.

Everything is bounded in count and time, and the server is always stopped.
"""

from __future__ import annotations

import http.client
import json
import os
import signal
import socket
import subprocess
import sys
import threading
import time
import uuid
from pathlib import Path

import pytest

pytestmark = pytest.mark.server

SB2 = {"period": {"value": 41.6, "sigma": 0.02}, "k1": {"value": 38.2, "sigma": 0.4},
       "k2": {"value": 51.7, "sigma": 0.6}, "eccentricity": {"value": 0.31, "sigma": 0.01},
       "inclination": {"value": 71.0, "sigma": 2.0},
       "uncertainty": {"method": "monte_carlo", "samples": 20000, "seed": 424242}}
MARKER = "body-marker-7f3a9c"        # sent in a request body; must never reach the log
CLIENT_THREADS = 4
REQUEST_TIMEOUT = 20.0


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return s.getsockname()[1]


def command(port: int) -> list[str]:
    script = Path(sys.executable).with_name("calcservice")
    head = [str(script)] if script.exists() else [sys.executable, "-m", "calcservice"]
    return head + ["serve", "--host", "127.0.0.1", "--port", str(port), "--workers", "2"]


def children(pid: int) -> set[int]:
    """The live child processes of ``pid`` (the master's workers), from /proc."""
    out = set()
    for entry in os.listdir("/proc"):
        if not entry.isdigit():
            continue
        try:
            stat = Path(f"/proc/{entry}/stat").read_text()
        except OSError:
            continue
        fields = stat[stat.rindex(")") + 2:].split()    # after "(comm)": state, ppid, ...
        if fields[0] != "Z" and int(fields[1]) == pid:
            out.add(int(entry))
    return out


def request(port: int, method: str, path: str, body=None, headers=None, timeout=REQUEST_TIMEOUT):
    """One request on a fresh connection: (status, headers, body bytes)."""
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=timeout)
    try:
        data = None if body is None else (body if isinstance(body, bytes) else json.dumps(body).encode())
        conn.request(method, path, body=data, headers={"Content-Type": "application/json", **(headers or {})})
        r = conn.getresponse()
        return r.status, dict(r.getheaders()), r.read()
    finally:
        conn.close()


class Server:
    def __init__(self, tmp: Path):
        self.port = free_port()
        self.log_path = tmp / "server.log"
        self.log = open(self.log_path, "wb")
        env = {**os.environ, "PYTHONUNBUFFERED": "1"}
        self.proc = subprocess.Popen(command(self.port), stdout=self.log, stderr=subprocess.STDOUT, env=env)
        self.wait_ready()

    def wait_ready(self, timeout=60.0):
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"the server exited: {self.log_text()[-2000:]}")
            try:
                if request(self.port, "GET", "/v1/health", timeout=2)[0] == 200 and len(self.workers()) == 2:
                    return
            except OSError:
                pass
            time.sleep(0.2)
        raise RuntimeError(f"the server did not come up: {self.log_text()[-2000:]}")

    def workers(self) -> set[int]:
        return children(self.proc.pid)

    def wait_workers(self, predicate, timeout=30.0) -> set[int]:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            w = self.workers()
            if predicate(w):
                return w
            time.sleep(0.1)
        raise AssertionError(f"workers did not settle: {self.workers()}")

    def log_text(self) -> str:
        self.log.flush()
        return self.log_path.read_text(errors="replace")

    def stop(self):
        if self.proc.poll() is None:
            workers = self.workers()
            self.proc.send_signal(signal.SIGTERM)
            try:
                self.proc.wait(timeout=20)
            except subprocess.TimeoutExpired:
                self.proc.kill()
                self.proc.wait(timeout=10)
            for pid in workers:               # only the workers of the master we started
                try:
                    os.kill(pid, signal.SIGKILL)
                except ProcessLookupError:
                    pass
        self.log.close()


@pytest.fixture(scope="module")
def server(tmp_path_factory):
    s = Server(tmp_path_factory.mktemp("gunicorn"))
    try:
        yield s
    finally:
        s.stop()


class Load:
    """A few client threads sending the same request in a loop until stopped (bounded)."""

    def __init__(self, port: int, threads: int = CLIENT_THREADS, max_requests: int = 2000):
        self.port = port
        self.stop_flag = threading.Event()
        self.lock = threading.Lock()
        self.ok = 0
        self.failed: list[str] = []
        self.bodies: set[bytes] = set()
        self.max_requests = max_requests
        self.threads = [threading.Thread(target=self.run, daemon=True) for _ in range(threads)]

    def run(self):
        while not self.stop_flag.is_set():
            with self.lock:
                if self.ok + len(self.failed) >= self.max_requests:
                    return
            try:
                status, _, body = request(self.port, "POST", "/v1/spectroscopic/sb2", SB2)
                outcome = None if status == 200 else f"status {status}"
            except (OSError, http.client.HTTPException) as e:
                outcome, body = f"{type(e).__name__}: {e}", b""
            with self.lock:
                if outcome is None:
                    self.ok += 1
                    self.bodies.add(json.dumps(json.loads(body)["results"], sort_keys=True).encode())
                else:
                    self.failed.append(outcome)

    def __enter__(self):
        for t in self.threads:
            t.start()
        return self

    def __exit__(self, *exc):
        self.stop_flag.set()
        for t in self.threads:
            t.join(timeout=REQUEST_TIMEOUT + 5)

    def count(self) -> int:
        with self.lock:
            return self.ok + len(self.failed)

    def wait_for(self, n: int, timeout: float = 30.0):
        deadline = time.monotonic() + timeout
        while self.count() < n and time.monotonic() < deadline:
            time.sleep(0.02)


def test_killed_worker_is_replaced_and_only_in_flight_requests_fail(server):
    before = server.wait_workers(lambda w: len(w) == 2)
    with Load(server.port) as load:
        load.wait_for(40)
        victim = min(before)
        os.kill(victim, signal.SIGKILL)
        at_kill = load.count()
        after = server.wait_workers(lambda w: len(w) == 2 and victim not in w)
        load.wait_for(at_kill + 60)
    print(f"\nSIGKILL of one worker: {load.count()} requests, {len(load.failed)} failed {load.failed[:5]}")
    assert after - before, "the master started a new worker"
    assert len(load.failed) <= CLIENT_THREADS, load.failed
    assert load.ok >= load.count() - CLIENT_THREADS and load.count() >= at_kill + 60
    assert len(load.bodies) == 1, "every answer to the same seeded request is the same"


def test_graceful_reload_drops_nothing(server):
    before = server.wait_workers(lambda w: len(w) == 2)
    status, _, reference = request(server.port, "POST", "/v1/spectroscopic/sb2", SB2)
    assert status == 200
    with Load(server.port) as load:
        load.wait_for(40)
        server.proc.send_signal(signal.SIGHUP)
        at_hup = load.count()
        after = server.wait_workers(lambda w: len(w) == 2 and not (w & before))
        load.wait_for(at_hup + 60)
    print(f"\nSIGHUP (graceful reload): {load.count()} requests, {len(load.failed)} failed {load.failed[:5]}")
    assert not (after & before), "all workers were replaced"
    assert load.failed == []
    status, _, again = request(server.port, "POST", "/v1/spectroscopic/sb2", SB2)
    assert status == 200
    assert json.loads(again)["results"] == json.loads(reference)["results"], "the same after the restart"
    assert load.bodies == {json.dumps(json.loads(reference)["results"], sort_keys=True).encode()}


def test_both_workers_give_bit_identical_results(server):
    server.wait_workers(lambda w: len(w) == 2)
    answers: dict[str, bytes] = {}
    lock = threading.Lock()

    def one(k):
        rid = f"determinism-{k}-{uuid.uuid4().hex[:8]}"
        status, headers, body = request(server.port, "POST", "/v1/spectroscopic/sb2", SB2, {"X-Request-ID": rid})
        assert status == 200 and headers["X-Request-ID"] == rid
        with lock:
            answers[rid] = body

    for round_ in range(5):
        threads = [threading.Thread(target=one, args=(10 * round_ + k,)) for k in range(4)]
        for t in threads:
            t.start()
        for t in threads:
            t.join(timeout=REQUEST_TIMEOUT + 5)
    assert len(answers) == 20
    time.sleep(0.3)
    log = server.log_text()
    served_by = {}
    for line in log.splitlines():
        for rid in answers:
            if rid in line and "calcservice.access" in line:
                served_by[rid] = line.split()[2]            # "%(asctime)s %(process)d ..." -> the pid
    assert set(served_by) == set(answers), "every request has its access-log line"
    assert len(set(served_by.values())) == 2, f"both workers answered: {set(served_by.values())}"
    results = {json.dumps(json.loads(b)["results"], sort_keys=True) for b in answers.values()}
    assert len(results) == 1


def test_access_log_has_request_ids_and_never_bodies(server):
    rid = "log-check-" + uuid.uuid4().hex[:8]
    body = {**SB2, "k1": {"value": 38.2, "sigma": 0.4, "unit": MARKER}}
    status, headers, _ = request(server.port, "POST", "/v1/spectroscopic/sb2", body, {"X-Request-ID": rid})
    assert status == 422 and headers["X-Request-ID"] == rid
    request(server.port, "POST", "/v1/spectroscopic/sb2", b'{"period": "' + MARKER.encode() + b'"', {})
    time.sleep(0.3)
    log = server.log_text()
    assert any(rid in line and " 422 " in line for line in log.splitlines())
    assert MARKER not in log


def test_oversized_content_length_is_refused_without_the_body(server):
    with socket.create_connection(("127.0.0.1", server.port), timeout=10) as s:
        s.sendall(b"POST /v1/spectroscopic/sb2 HTTP/1.1\r\nHost: localhost\r\nContent-Type: application/json\r\n"
                  b"Content-Length: 1000000000\r\n\r\n{")
        t0 = time.monotonic()
        reply = b""
        while b"\r\n\r\n" not in reply:
            chunk = s.recv(4096)
            if not chunk:
                break
            reply += chunk
    assert reply.startswith(b"HTTP/1.1 413"), reply[:200]
    assert time.monotonic() - t0 < 5


def test_no_traceback_reaches_a_client_of_the_server(server):
    status, headers, body = request(server.port, "POST", "/v1/spectroscopic/sb2", b"{not json", {})
    assert status == 400 and headers["Content-Type"] == "application/problem+json"
    assert b"Traceback" not in body
