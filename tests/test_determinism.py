"""Determinism: the same request with the same seed gives bit-identical results -- twice in one
app, in two app instances, and in a separate Python process (with another hash seed).  Across
the two gunicorn workers and across a graceful restart: see test_faults.py."""

from __future__ import annotations

import json
import os
import subprocess
import sys

from calcservice import create_app
from calcservice.registry import calculations

SEED = 20240611
DRAWS = 3000


def requests_for_every_calculation() -> dict[str, tuple[str, dict]]:
    out = {}
    for calc in calculations().values():
        if calc.example:
            out[calc.name] = (calc.path, {**calc.example,
                                          "uncertainty": {"method": "monte_carlo", "samples": DRAWS, "seed": SEED}})
    return out


def answers(client) -> dict[str, str]:
    """name -> the response body's results and uncertainty, as canonical JSON text (floats by repr)."""
    out = {}
    for name, (path, body) in requests_for_every_calculation().items():
        r = client.post(path, json=body)
        assert r.status_code == 200, (name, r.get_data(as_text=True)[:300])
        d = r.get_json()
        out[name] = json.dumps({"results": d["results"], "uncertainty": d["uncertainty"],
                                "warnings": d["warnings"]}, sort_keys=True)
    return out


SCRIPT = """
import json, sys
from calcservice import create_app
sys.path.insert(0, sys.argv[1])
from tests.test_determinism import answers
print(json.dumps(answers(create_app().test_client())))
"""


def test_same_seed_same_bits_in_one_app_and_in_two_apps():
    first = answers(create_app().test_client())
    assert answers(create_app().test_client()) == first
    client = create_app().test_client()
    assert answers(client) == answers(client)


def test_same_seed_same_bits_in_another_process():
    here = answers(create_app().test_client())
    root = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    env = {**os.environ, "PYTHONHASHSEED": "12345"}
    done = subprocess.run([sys.executable, "-c", SCRIPT, root], capture_output=True, text=True, env=env,
                          timeout=120, check=False)
    assert done.returncode == 0, done.stderr[-2000:]
    there = json.loads(done.stdout.strip().splitlines()[-1])
    assert there.keys() == here.keys()
    for name in here:
        assert there[name] == here[name], name


def test_a_different_seed_gives_different_draws():
    # the test above could not fail if the seed were ignored and the draws fixed: it is not
    client = create_app().test_client()
    path, body = requests_for_every_calculation()["sb2"]
    a = client.post(path, json=body).get_json()["results"]
    b = client.post(path, json={**body, "uncertainty": {**body["uncertainty"], "seed": SEED + 1}}).get_json()["results"]
    assert a["m1"]["value"] != b["m1"]["value"]


def test_without_a_seed_the_response_reports_the_seed_that_reproduces_it():
    client = create_app().test_client()
    path, body = requests_for_every_calculation()["sb2"]
    unseeded = {**body, "uncertainty": {"method": "monte_carlo", "samples": DRAWS}}
    first = client.post(path, json=unseeded).get_json()
    seed = first["uncertainty"]["seed"]
    again = client.post(path, json={**body, "uncertainty": {"method": "monte_carlo", "samples": DRAWS, "seed": seed}})
    assert again.get_json()["results"] == first["results"]
