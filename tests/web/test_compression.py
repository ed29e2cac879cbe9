"""HTTP compression (issue 15, item 2): gzip and deflate request bodies, gzip answers.

The reference decoder and encoder is Python's standard library: ``gzip`` (RFC 1952) and
``zlib`` (RFC 1950, and raw deflate, RFC 1951). Checks: the same answer, byte for byte, with and
without compression either way; the body cap applied to the decompressed size (just inside and
just outside it); the answer threshold (just inside and just outside); and, against a live
``nearwise serve``, a gzip bomb of 1 GiB of zeros refused with 413 while the worker's resident
memory grows by less than 100 MB.
"""

from __future__ import annotations

import gzip
import http.client
import json
import os
import struct
import zlib
from pathlib import Path
from typing import Any

import pytest
from flask import Flask, Response
from webhelpers import body, curve, problem, serving

from nearwise.web import coding
from nearwise.web.app import create_app
from nearwise.web.settings import Settings

QUERY = {"columns": ["x"], "rows": [[0.5 + i / 10] for i in range(60)]}


def app_client(**settings: Any):
    return create_app(Settings(**settings)).test_client()


def raw_deflate(data: bytes) -> bytes:
    c = zlib.compressobj(6, zlib.DEFLATED, -zlib.MAX_WBITS)
    return c.compress(data) + c.flush()


ENCODERS = {
    "gzip": ("gzip", gzip.compress),
    "gzip-two-members": ("gzip", lambda d: gzip.compress(d[:50]) + gzip.compress(d[50:])),
    "deflate-zlib": ("deflate", zlib.compress),
    "deflate-raw": ("deflate", raw_deflate),
    "gzip-with-identity": ("gzip, identity", gzip.compress),
}


@pytest.mark.parametrize("name", sorted(ENCODERS))
def test_a_compressed_json_body_gets_the_same_answer(name: str) -> None:
    header, encode = ENCODERS[name]
    c = app_client()
    data = json.dumps(body(query=QUERY)).encode()
    plain = c.post("/v1/predict", data=data, content_type="application/json")
    packed = c.post(
        "/v1/predict",
        data=encode(data),
        content_type="application/json",
        headers={"Content-Encoding": header},
    )
    assert plain.status_code == packed.status_code == 200, packed.get_data(as_text=True)
    assert packed.get_data() == plain.get_data()


def multipart(parts: dict[str, bytes], boundary: str = "nearwise-test-boundary") -> bytes:
    """A multipart/form-data body (RFC 7578) holding ``parts`` as files."""
    out = b""
    for name, data in parts.items():
        out += (
            (
                f'--{boundary}\r\nContent-Disposition: form-data; name="{name}"; '
                f'filename="{name}.csv"\r\nContent-Type: text/csv\r\n\r\n'
            ).encode()
            + data
            + b"\r\n"
        )
    return out + f"--{boundary}--\r\n".encode()


def test_a_compressed_multipart_body_gets_the_same_csv_answer() -> None:
    c = app_client()
    train = ("x,y\r\n" + "".join(f"{x!r},{y!r}\r\n" for x, y in curve())).encode()
    query = ("x\r\n" + "".join(f"{r[0]!r}\r\n" for r in QUERY["rows"])).encode()
    data = multipart({"train": train, "query": query})
    headers = {
        "Content-Type": "multipart/form-data; boundary=nearwise-test-boundary",
        "Accept": "text/csv",
    }
    url = "/v1/predict?method=spline&target=y"
    sent = c.post(url, data=data, headers=headers)
    packed = c.post(url, data=gzip.compress(data), headers={**headers, "Content-Encoding": "gzip"})
    assert sent.status_code == packed.status_code == 200, packed.get_data(as_text=True)
    assert sent.mimetype == "text/csv"
    assert packed.get_data() == sent.get_data()


@pytest.mark.parametrize(
    ("path", "method", "doc", "accept"),
    [
        ("/v1/predict", "post", body(query=QUERY), "application/json"),
        ("/v1/predict", "post", body(query=QUERY), "text/csv"),
        ("/v1/predict", "post", body(query=QUERY), "image/svg+xml"),
        ("/v1/compare", "post", {k: v for k, v in body(query=QUERY).items() if k != "method"}, ""),
        ("/v1/locality", "post", {"train": body()["train"], "query": QUERY, "features": ["x"]}, ""),
        ("/v1/methods", "get", None, ""),
        ("/openapi.json", "get", None, ""),
        ("/", "get", None, ""),
        ("/metrics", "get", None, ""),
    ],
)
def test_an_answer_is_gzip_when_allowed_and_decodes_to_the_plain_answer(
    path: str, method: str, doc: Any, accept: str
) -> None:
    c = app_client()
    kw: dict[str, Any] = {"json": doc} if doc is not None else {}
    base = {"Accept": accept} if accept else {}
    if path == "/metrics":  # its own counters move with each request: compare two fresh apps
        plain = app_client().get(path, headers=base)
        packed = app_client().get(path, headers={**base, "Accept-Encoding": "gzip"})
    else:
        plain = getattr(c, method)(path, headers=base, **kw)
        packed = getattr(c, method)(path, headers={**base, "Accept-Encoding": "gzip"}, **kw)
    assert plain.status_code == packed.status_code == 200, packed.get_data(as_text=True)
    assert len(plain.get_data()) >= coding.MIN_BYTES
    assert "Content-Encoding" not in plain.headers
    assert packed.headers["Content-Encoding"] == "gzip"
    assert (
        "Accept-Encoding" in packed.headers["Vary"] and "Accept-Encoding" in plain.headers["Vary"]
    )
    assert packed.headers["Content-Type"] == plain.headers["Content-Type"]
    assert int(packed.headers["Content-Length"]) == len(packed.get_data())
    assert gzip.decompress(packed.get_data()) == plain.get_data()  # Python's gzip decodes it
    assert len(packed.get_data()) < len(plain.get_data())


def test_a_problem_answer_is_compressed_too() -> None:
    doc = body(**{f"unknown_field_{i}": 1 for i in range(30)})  # a long problem: 30 entries
    c = app_client()
    plain = c.post("/v1/predict", json=doc)
    packed = c.post("/v1/predict", json=doc, headers={"Accept-Encoding": "gzip"})
    assert len(plain.get_data()) >= coding.MIN_BYTES
    problem(plain, 422)
    assert packed.headers["Content-Encoding"] == "gzip"
    assert packed.mimetype == "application/problem+json"
    assert gzip.decompress(packed.get_data()) == plain.get_data()


def _sized_app() -> Flask:
    app = Flask("sized")
    coding.install(app)

    @app.get("/<int:n>")
    def sized(n: int) -> Response:
        return Response(b"a" * n, mimetype="text/plain")

    return app


@pytest.mark.parametrize(
    ("size", "accept", "packed"),
    [
        (coding.MIN_BYTES - 1, "gzip", False),  # just under the threshold
        (coding.MIN_BYTES, "gzip", True),  # at it
        (coding.MIN_BYTES, "gzip;q=0", False),  # q=0: not acceptable (RFC 9110 12.4.2)
        (coding.MIN_BYTES, "gzip;q=0, *", False),
        (coding.MIN_BYTES, "*", True),
        (coding.MIN_BYTES, "deflate, br", False),  # answers are gzip only
        (coding.MIN_BYTES, "", False),
    ],
)
def test_answers_are_compressed_from_the_threshold_on(size: int, accept: str, packed: bool) -> None:
    resp = _sized_app().test_client().get(f"/{size}", headers={"Accept-Encoding": accept})
    assert ("Content-Encoding" in resp.headers) is packed
    data = gzip.decompress(resp.get_data()) if packed else resp.get_data()
    assert data == b"a" * size
    assert resp.headers["Vary"] == "Accept-Encoding"


def test_a_compressed_answer_is_the_same_bytes_each_time() -> None:
    c = app_client()
    first, second = (
        c.post("/v1/predict", json=body(), headers={"Accept-Encoding": "gzip"}).get_data()
        for _ in range(2)
    )
    assert first == second  # gzip's mtime is written as 0


@pytest.mark.parametrize(("spare", "status"), [(0, 200), (1, 413)])
def test_the_cap_applies_to_the_decompressed_size(spare: int, status: int) -> None:
    data = json.dumps(body()).encode()
    packed = gzip.compress(data)
    c = app_client(max_body_bytes=len(data) - spare)  # the cap: just inside, then one byte short
    assert len(packed) < len(data) - spare  # as sent, the body is well within it
    resp = c.post(
        "/v1/predict",
        data=packed,
        content_type="application/json",
        headers={"Content-Encoding": "gzip"},
    )
    if status == 200:
        assert resp.status_code == 200, resp.get_data(as_text=True)
    else:
        doc = problem(resp, 413)
        assert doc["code"] == "body_too_large" and "decompressed" in doc["detail"]


@pytest.mark.parametrize(
    ("data", "header", "why"),
    [
        (gzip.compress(b'{"method": "knn"}')[:-8], "gzip", "end marker"),  # trailer cut off
        (b'{"method": "knn"}', "gzip", "broken"),  # not compressed at all
        (gzip.compress(b"{}") + b"!!", "gzip", "Content-Encoding: gzip"),  # bytes after the end
        (zlib.compress(b"{}") + b"!!", "deflate", "2 bytes follow its end"),
        (b"\x00\x01\x02", "deflate", "Content-Encoding: deflate"),
    ],
)
def test_a_body_that_is_not_its_coding_is_400(data: bytes, header: str, why: str) -> None:
    resp = app_client().post(
        "/v1/predict",
        data=data,
        content_type="application/json",
        headers={"Content-Encoding": header},
    )
    doc = problem(resp, 400)
    assert why in doc["detail"], doc["detail"]


# -- against a live server: the same answers, and a 1 GiB bomb


def gzip_of_zeros(mib: int) -> bytes:
    """The gzip (RFC 1952) of ``mib`` MiB of zeros, built without holding them: one deflate
    block of 1 MiB of zeros, ended by a full flush so that it does not depend on what came
    before, repeated ``mib`` times, then the final block, the CRC-32 and the length."""
    zeros = bytes(1 << 20)
    engine = zlib.compressobj(9, zlib.DEFLATED, -zlib.MAX_WBITS)
    block = engine.compress(zeros) + engine.flush(zlib.Z_FULL_FLUSH)
    end = engine.flush()
    crc = 0
    for _ in range(mib):
        crc = zlib.crc32(zeros, crc)
    head = b"\x1f\x8b\x08\x00\x00\x00\x00\x00\x02\xff"  # deflate, no name, mtime 0, max level
    return head + block * mib + end + struct.pack("<II", crc, (mib << 20) & 0xFFFFFFFF)


def test_the_bomb_builder_makes_gzip_of_zeros() -> None:
    assert gzip.decompress(gzip_of_zeros(3)) == bytes(3 << 20)  # Python's gzip as the reference
    bomb = gzip_of_zeros(1024)
    assert len(bomb) < 2 << 20  # about 1 MB sent
    assert struct.unpack("<I", bomb[-4:])[0] == (1 << 30) % 2**32  # ISIZE: 1 GiB mod 2^32


def post(port: int, path: str, data: bytes, headers: dict[str, str]) -> tuple[int, dict, bytes]:
    conn = http.client.HTTPConnection("127.0.0.1", port, timeout=60)
    try:
        conn.request("POST", path, body=data, headers=headers)
        resp = conn.getresponse()
        return resp.status, {k.lower(): v for k, v in resp.getheaders()}, resp.read()
    finally:
        conn.close()


def worker_pid(port: int) -> int:
    """The one worker of the server bound to ``port``: the child of its master."""
    found = []
    for entry in Path("/proc").iterdir():
        if not entry.name.isdigit():
            continue
        try:
            cmd = (entry / "cmdline").read_bytes()
            stat = (entry / "stat").read_text()
        except OSError:
            continue
        if f"127.0.0.1:{port}".encode() in cmd:
            parent = int(stat.rsplit(")", 1)[1].split()[1])
            found.append((int(entry.name), parent))
    pids = {pid for pid, _ in found}
    workers = [pid for pid, parent in found if parent in pids]
    assert len(workers) == 1, found
    return workers[0]


def status_kib(pid: int, field: str) -> int:
    for line in Path(f"/proc/{pid}/status").read_text().splitlines():
        if line.startswith(field + ":"):
            return int(line.split()[1])
    raise AssertionError(f"no {field} in /proc/{pid}/status")


@pytest.mark.skipif(not Path("/proc/self/status").exists(), reason="needs Linux procfs")
def test_live_server_gzip_both_ways_and_a_gzip_bomb(tmp_path: Path) -> None:
    with serving(tmp_path / "serve.log") as port:
        data = json.dumps(body(query=QUERY)).encode()
        js = {"Content-Type": "application/json"}
        plain = post(port, "/v1/predict", data, js)
        packed = post(
            port,
            "/v1/predict",
            gzip.compress(data),
            {**js, "Content-Encoding": "gzip", "Accept-Encoding": "gzip"},
        )
        assert plain[0] == packed[0] == 200, packed[2][:300]
        assert packed[1]["content-encoding"] == "gzip"
        assert gzip.decompress(packed[2]) == plain[2]

        pid = worker_pid(port)
        try:  # reset the peak (VmHWM) to the present size: "5" (Linux 4.0+, proc(5))
            Path(f"/proc/{pid}/clear_refs").write_text("5")
            peak_field = "VmHWM"
        except OSError:
            peak_field = "VmRSS"
        rest = status_kib(pid, "VmRSS")
        bomb = gzip_of_zeros(1024)  # 1 GiB of zeros in about 1 MB
        status, _headers, answer = post(
            port, "/v1/predict", bomb, {**js, "Content-Encoding": "gzip"}
        )
        assert status == 413, answer[:300]
        assert json.loads(answer)["code"] == "body_too_large"
        grown_mb = (status_kib(pid, peak_field) - rest) * 1024 / 1e6
        assert grown_mb < 100, f"{peak_field} grew by {grown_mb:.1f} MB"
        assert os.path.exists(f"/proc/{pid}")  # the same worker: it did not die and restart
        assert post(port, "/v1/predict", data, js)[2] == plain[2]  # and it still answers
