"""gzip both ways (RFC 9110 Content-Encoding / Accept-Encoding, RFC 1952 gzip), the body limit on the
inflated size (a compressed bomb gets 413 without the memory it asks for), and /v1/limits."""

from __future__ import annotations

import gzip
import json
import struct
import time
import tracemalloc
import zlib
from dataclasses import fields

import pytest

from calcservice import create_app, tables
from calcservice.config import Limits
from calcservice.registry import calculations

SB2 = dict(calculations()["sb2"].example)


@pytest.fixture(scope="module")
def client():
    return create_app({"TESTING": True}).test_client()


def columns(n: int) -> dict:
    # n fictional double-lined systems
    return {"columns": {"period": {"value": [41.6 + 0.01 * i for i in range(n)], "sigma": 0.02},
                        "k1": {"value": [38.2] * n, "sigma": 0.4}, "k2": {"value": [51.7] * n, "sigma": 0.6},
                        "eccentricity": {"value": [0.31] * n, "sigma": 0.01}}}


def test_a_gzipped_request_body_means_the_same(client):
    plain = client.post("/v1/spectroscopic/sb2", json=SB2)
    zipped = client.post("/v1/spectroscopic/sb2", data=gzip.compress(json.dumps(SB2).encode()),
                         content_type="application/json", headers={"Content-Encoding": "gzip"})
    assert zipped.status_code == 200
    assert zipped.get_json()["results"] == plain.get_json()["results"]
    body = columns(50)
    table = tables.encode_request(body, tables.ARROW)
    for data, ctype in ((json.dumps(body).encode(), "application/json"), (table, tables.ARROW)):
        # two gzip members are one body (RFC 1952 section 2.2)
        two = gzip.compress(data[:100]) + gzip.compress(data[100:])
        r = client.post("/v1/batch/sb2", data=two, content_type=ctype,
                        headers={"Content-Encoding": "gzip", "Accept": "application/json"})
        assert r.status_code == 200, r.get_json()
        assert r.get_json()["columns"]["m1_sin3i"]["value"] == \
            client.post("/v1/batch/sb2", json=body).get_json()["columns"]["m1_sin3i"]["value"]


def test_unknown_or_broken_content_encoding(client):
    data = json.dumps(SB2).encode()
    r = client.post("/v1/spectroscopic/sb2", data=data, content_type="application/json",
                    headers={"Content-Encoding": "br"})
    assert r.status_code == 415 and "Content-Encoding" in r.get_json()["errors"]
    r = client.post("/v1/spectroscopic/sb2", data=data, content_type="application/json",
                    headers={"Content-Encoding": "gzip"})                  # not gzip at all
    assert r.status_code == 400 and "gzip" in r.get_json()["detail"]
    r = client.post("/v1/spectroscopic/sb2", data=gzip.compress(data)[:-12], content_type="application/json",
                    headers={"Content-Encoding": "gzip"})                  # cut short
    assert r.status_code == 400
    r = client.post("/v1/spectroscopic/sb2", data=data, content_type="application/json",
                    headers={"Content-Encoding": "identity"})
    assert r.status_code == 200


def test_a_small_bomb_is_413_on_its_inflated_size():
    client = create_app({"TESTING": True, "MAX_BODY_BYTES": 1_000_000}).test_client()
    zeros = gzip.compress(bytes(10_000_000), compresslevel=9)
    assert len(zeros) < 11_000                                  # ~1000:1, as deflate gives on zeros
    r = client.post("/v1/spectroscopic/sb2", data=zeros, content_type="application/json",
                    headers={"Content-Encoding": "gzip"})
    assert r.status_code == 413
    assert "1000000" in r.get_json()["detail"]
    assert r.get_json()["limit"] == {"name": "max_body_bytes", "value": 1_000_000}     # as every 413 names it
    # the same JSON under the limit is read (the limit is on the inflated size, not refused for gzip)
    ok = gzip.compress(json.dumps(SB2).encode() + b" " * 900_000)
    r = client.post("/v1/spectroscopic/sb2", data=ok, content_type="application/json",
                    headers={"Content-Encoding": "gzip"})
    assert r.status_code == 200
    # and a compressed body over the limit itself is 413 before it is inflated
    r = client.post("/v1/spectroscopic/sb2", data=bytes(1_000_001), content_type="application/json",
                    headers={"Content-Encoding": "gzip"})
    assert r.status_code == 413
    assert r.get_json()["limit"] == {"name": "max_body_bytes", "value": 1_000_000}
    r = client.post("/v1/spectroscopic/sb2", data=bytes(1_000_001), content_type="application/json")
    assert r.status_code == 413 and r.get_json()["limit"] == {"name": "max_body_bytes", "value": 1_000_000}


def gigabyte_of_zeros() -> bytes:
    """A valid gzip stream of 2**30 zero bytes in about 1 MB: deflate's output for a full-flushed MB of
    zeros after the first is the same bytes every time, so it is repeated instead of computed."""
    mb = bytes(1 << 20)
    deflate = zlib.compressobj(9, zlib.DEFLATED, 31)
    first = deflate.compress(mb) + deflate.flush(zlib.Z_FULL_FLUSH)
    middle = deflate.compress(mb) + deflate.flush(zlib.Z_FULL_FLUSH)
    assert deflate.compress(mb) + deflate.flush(zlib.Z_FULL_FLUSH) == middle
    last = deflate.compress(mb) + deflate.flush(zlib.Z_FINISH)
    crc = 0
    for _ in range(1024):
        crc = zlib.crc32(mb, crc)
    # the trailer (RFC 1952): CRC-32 and size modulo 2**32 of the whole gigabyte
    return first + middle * 1021 + last[:-8] + struct.pack("<II", crc, (1 << 30) & 0xFFFFFFFF)


def test_a_gigabyte_bomb_is_413_without_the_memory(client):
    bomb = gigabyte_of_zeros()
    assert len(bomb) < 2_000_000
    assert zlib.decompressobj(31).decompress(bomb[:200_000], 0)[:10] == bytes(10)
    tracemalloc.start()
    try:
        t0 = time.perf_counter()
        r = client.post("/v1/batch/sb2", data=bomb, content_type="application/json",
                        headers={"Content-Encoding": "gzip"})
        elapsed = time.perf_counter() - t0
        _, peak = tracemalloc.get_traced_memory()
    finally:
        tracemalloc.stop()
    assert r.status_code == 413
    limit = Limits().max_body_bytes
    # what was held is the limit and the compressed body (a few copies at most), never the gigabyte
    assert peak < 4 * limit + 4 * len(bomb), peak
    assert elapsed < 20


@pytest.mark.parametrize("offered, zipped", [("*", True), ("identity, *;q=0.5", True), ("gzip;q=0", False),
                                              ("GZIP", True), ("br", False), ("gzip;q=0, *", False)])
def test_accept_encoding_is_read_as_rfc_9110_says(client, offered, zipped):
    # RFC 9110 sec. 12.5.3: codings are case-insensitive, "*" takes any coding not listed, q=0 refuses one
    r = client.post("/v1/batch/sb2", json=columns(200), headers={"Accept-Encoding": offered})
    assert r.status_code == 200 and (r.headers.get("Content-Encoding") == "gzip") is zipped
    # one Vary field naming both headers the answer depends on
    assert [v.strip() for v in r.headers["Vary"].split(",")] == ["Accept", "Accept-Encoding"]


def test_answers_are_gzipped_above_the_threshold_when_accepted(client):
    big = client.post("/v1/batch/sb2", json=columns(200))
    assert big.status_code == 200 and "Content-Encoding" not in big.headers
    assert "Accept-Encoding" in big.headers["Vary"]
    zipped = client.post("/v1/batch/sb2", json=columns(200), headers={"Accept-Encoding": "gzip, deflate"})
    assert zipped.headers["Content-Encoding"] == "gzip"
    assert len(zipped.data) < len(big.data) / 2
    assert gzip.decompress(zipped.data) == big.data
    # a table answer too
    arrow = client.post("/v1/batch/sb2", json=columns(200), headers={"Accept-Encoding": "gzip",
                                                                      "Accept": tables.ARROW})
    assert arrow.headers["Content-Encoding"] == "gzip"
    answer = tables.decode_answer(gzip.decompress(arrow.data), tables.ARROW)
    assert list(answer["columns"]["m1_sin3i"]["value"]) == big.get_json()["columns"]["m1_sin3i"]["value"]
    # small answers are sent as they are; q=0 refuses gzip (RFC 9110 section 12.5.3)
    small = client.get("/v1/health", headers={"Accept-Encoding": "gzip"})
    assert "Content-Encoding" not in small.headers
    refused = client.post("/v1/batch/sb2", json=columns(200), headers={"Accept-Encoding": "gzip;q=0"})
    assert "Content-Encoding" not in refused.headers


def test_the_gzip_threshold_is_a_configured_limit():
    tiny = create_app({"TESTING": True, "MIN_GZIP_BYTES": 10}).test_client()
    r = tiny.get("/v1/health", headers={"Accept-Encoding": "gzip"})
    assert r.headers.get("Content-Encoding") == "gzip"
    assert json.loads(gzip.decompress(r.data))["status"] == "ok"
    env = create_app({"TESTING": True}).config["CALCSERVICE_SETTINGS"].limits
    assert env.min_gzip_bytes == Limits().min_gzip_bytes


def test_limits_are_published():
    app = create_app({"TESTING": True, "MAX_BATCH_ROWS": 1234})
    r = app.test_client().get("/v1/limits")
    assert r.status_code == 200
    published = r.get_json()["limits"]
    # every field of Limits, a new one included, with its value in force, its variable and a description
    assert list(published) == [f.name for f in fields(Limits)]
    limits = app.config["CALCSERVICE_SETTINGS"].limits
    for name, entry in published.items():
        assert entry["value"] == getattr(limits, name)
        assert entry["env"] == "CALCSERVICE_" + name.upper()
        assert entry["description"] and entry["description"] != name.replace("_", " "), name
    assert published["max_batch_rows"]["value"] == 1234
    assert published["max_body_bytes"]["value"] == 16 * 1024 * 1024
